"""Scenario files: round trips, validation messages, versions (common practice, no source)."""
from __future__ import annotations

import copy
import json
from pathlib import Path

import numpy as np
import pytest

from physics import lattices, scenario as scn
from physics.units import TRANSITIONS

SCENARIOS = sorted((Path(__file__).parents[2] / "scenarios").glob("*.json"))

BASE = {
    "format": "choir-scenario",
    "version": 2,
    "transition": {"preset": "Rb87 D2"},
    "geometry": {"lattice": "square", "nx": 4, "ny": 3, "spacing": 0.3},
    "dipole": {"preset": "x"},
    "environment": [{"kind": "free_space"}],
}


def _doc(**changes) -> dict:
    doc = copy.deepcopy(BASE)
    for dotted, value in changes.items():
        *head, last = dotted.split("__")
        target = doc
        for key in head:
            target = target[key]
        if value is _DELETE:
            del target[last]
        else:
            target[last] = value
    return doc


_DELETE = object()


def test_schema_enums_match_the_code():
    """The shipped schema and the code agree on presets and lattice names."""
    s = scn.schema()
    assert set(s["properties"]["transition"]["properties"]["preset"]["enum"]) == set(TRANSITIONS)
    assert set(s["properties"]["geometry"]["properties"]["lattice"]["enum"]) == \
        set(lattices.GENERATORS) | {"explicit"}


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_demo_scenarios_load_and_round_trip_exactly(path):
    assert len(SCENARIOS) >= 4
    sc = scn.load(path)
    text = scn.dumps(sc)
    again = scn.loads(text)
    assert again == sc
    assert scn.dumps(again) == text
    em1, em2 = sc.emitters(), again.emitters()
    assert em1.positions.tobytes() == em2.positions.tobytes()
    assert em1.dipoles.tobytes() == em2.dipoles.tobytes()


def test_explicit_geometry_round_trip_is_bit_exact(tmp_path):
    """Awkward floats (not representable in few digits) survive save → load unchanged."""
    rng = np.random.default_rng(7)
    pos = rng.normal(size=(30, 3)) * np.pi
    dip = rng.normal(size=(30, 3)) + 1j * rng.normal(size=(30, 3))
    em = lattices.explicit(pos, dip)
    sc = scn.from_dict(BASE).with_emitters(em)
    scn.save(sc, tmp_path / "s.json")
    back = scn.load(tmp_path / "s.json").emitters()
    assert back.positions.tobytes() == em.positions.tobytes()
    assert back.dipoles.tobytes() == em.dipoles.tobytes()


@pytest.mark.parametrize("changes, path, words", [
    pytest.param({"geometry__nx": 0}, "geometry.nx", "allowed 1 to 10000", id="count-low"),
    pytest.param({"geometry__nx": "4"}, "geometry.nx", "whole number", id="count-type"),
    pytest.param({"geometry__spacing": -0.2}, "geometry.spacing", "allowed 0.001 to 1000",
                 id="spacing-negative"),
    pytest.param({"geometry__ny": _DELETE}, "geometry", "missing field 'ny'", id="missing"),
    pytest.param({"geometry__nz": 3}, "geometry", "does not belong", id="foreign-field"),
    pytest.param({"geometry__lattice": "hexagon"}, "geometry.lattice", "allowed: chain",
                 id="lattice-name"),
    pytest.param({"dipole": {"preset": "w"}}, "dipole.preset", "allowed: x, y, z", id="preset"),
    pytest.param({"dipole": {"vector": [[0, 0], [0, 0], [0, 0]]}}, "dipole", "zero",
                 id="zero-dipole"),
    pytest.param({"dipole": {"theta_deg": 181, "phi_deg": 0}}, "dipole.theta_deg",
                 "allowed 0 to 180", id="theta"),
    pytest.param({"dipole": {"theta_deg": 10}}, "dipole", "exactly one of", id="dipole-form"),
    pytest.param({"transition": {"preset": "Rb87 D2", "wavelength_nm": 780.0}}, "transition",
                 "either 'preset'", id="transition-both"),
    pytest.param({"transition": {"wavelength_nm": 780.0, "linewidth_mhz": 0.0}},
                 "transition.linewidth_mhz", "allowed 1e-12", id="linewidth"),
    pytest.param({"environment": [{"kind": "plasma"}]}, "environment[0].kind", "free_space",
                 id="environment"),
    pytest.param({"environment": []}, "environment", "allowed 1 to 4", id="no-environment"),
    pytest.param({"environment": [{"kind": "waveguide", "gamma_forward": 1.0}]},
                 "environment[0]", "missing field 'gamma_backward'", id="waveguide-missing"),
    pytest.param({"environment": [{"kind": "free_space"},
                                  {"kind": "waveguide", "gamma_forward": -0.1,
                                   "gamma_backward": 0.0}]},
                 "environment[1].gamma_forward", "allowed 0 to 10000", id="waveguide-rate"),
    pytest.param({"environment": [{"kind": "waveguide", "gamma_forward": 1, "gamma_backward": 1,
                                   "k_guided": 0}]},
                 "environment[0].k_guided", "allowed 0.01 to 1000", id="waveguide-k"),
    pytest.param({"environment": [{"kind": "cavity", "g": 1.0, "kappa": 10.0, "axis": "z",
                                   "polarization": "z"}]},
                 "environment[0].polarization", "allowed: x, y", id="cavity-polarisation"),
    pytest.param({"environment": [{"kind": "cavity", "g": 1.0, "kappa": 0.0}]},
                 "environment[0].kappa", "allowed 1e-06", id="cavity-kappa"),
    pytest.param({"environment": [{"kind": "free_space", "g": 1.0}]}, "environment[0]",
                 "does not belong", id="foreign-environment-field"),
    pytest.param({"analysis": {"selected_mode": 12}}, "analysis.selected_mode",
                 "allowed 0 to 11", id="mode-index"),
    pytest.param({"analysis": {"lens_na": 1.2}}, "analysis.lens_na", "≤ 1", id="na"),
    pytest.param({"extra": 1}, "scenario", "unknown field 'extra'", id="unknown-top"),
    pytest.param({"geometry": {"lattice": "explicit", "positions": [[0, 0, 0], [0, 0, 1e-6]]}},
                 "geometry.positions", "emitters 0 and 1", id="coincident"),
    pytest.param({"geometry": {"lattice": "square", "nx": 101, "ny": 100, "spacing": 0.3}},
                 "geometry", "limit is 10000", id="too-many"),
    pytest.param({"geometry": {"lattice": "chain", "n": 3, "spacing": 0.3},
                  "dipole": {"per_emitter": [[[1, 0], [0, 0], [0, 0]]] * 3}},
                 "dipole.per_emitter", "explicit geometry", id="per-emitter-on-lattice"),
    pytest.param({"geometry": {"lattice": "explicit", "positions": [[0, 0, 0], [1, 0, 0]]},
                  "dipole": {"per_emitter": [[[1, 0], [0, 0], [0, 0]]] * 3}},
                 "dipole.per_emitter", "exactly 2", id="per-emitter-count"),
])
def test_refusals_name_the_field_and_the_allowed_values(changes, path, words):
    with pytest.raises(scn.ScenarioError) as info:
        scn.from_dict(_doc(**changes))
    assert info.value.path == path
    assert words in str(info.value)


def test_future_version_is_refused_with_a_message():
    with pytest.raises(scn.ScenarioError, match="newer than this Choir"):
        scn.from_dict(_doc(version=scn.VERSION + 1))


@pytest.mark.parametrize("text, words", [
    pytest.param('{"format": "choir-scenario", "version": 1,', "not valid JSON", id="truncated"),
    pytest.param('{"a": NaN}', "NaN", id="nan"),
    pytest.param("[1, 2]", "JSON object", id="list"),
    pytest.param('{"format": "something-else", "version": 1}', "not a Choir scenario", id="format"),
    pytest.param(b"\xff\xfe", "not UTF-8", id="binary"),
])
def test_unreadable_text_gets_a_message(text, words):
    with pytest.raises(scn.ScenarioError, match=words):
        scn.loads(text)


def test_missing_file_gets_a_message(tmp_path):
    with pytest.raises(scn.ScenarioError, match="cannot read"):
        scn.load(tmp_path / "absent.json")


def test_transition_values_reach_the_scenario():
    sc = scn.from_dict(_doc(transition={"wavelength_nm": 920.0, "linewidth_mhz": 250.0}))
    assert sc.transition.wavelength_nm == pytest.approx(920.0, rel=1e-15)
    assert json.loads(scn.dumps(sc))["transition"] == {"wavelength_nm": 920.0,
                                                       "linewidth_mhz": 250.0}


V1_FILE = """{
  "format": "choir-scenario", "version": 1, "name": "written by version 1",
  "transition": {"preset": "Cs133 D2"},
  "geometry": {"lattice": "chain", "n": 7, "spacing": 0.31},
  "dipole": {"preset": "z"},
  "environment": {"kind": "free_space"},
  "analysis": {"selected_mode": 3, "lens_na": 0.6, "lens_axis": "-z"}
}"""


def test_version_1_files_are_migrated():
    """A file of the first format opens unchanged in meaning and is written in the current one."""
    sc = scn.loads(V1_FILE)
    assert sc.environment == ((("kind", "free_space"),),)
    assert sc.selected_mode == 3 and sc.lens_axis == "-z"
    doc = json.loads(scn.dumps(sc))
    assert doc["version"] == scn.VERSION
    assert doc["environment"] == [{"kind": "free_space"}]


def test_every_environment_round_trips():
    doc = copy.deepcopy(BASE)
    doc["environment"] = [
        {"kind": "free_space", "scale": 0.8},
        {"kind": "waveguide", "gamma_forward": 0.7, "gamma_backward": 0.1, "gamma_loss": 0.0,
         "k_guided": 7.5, "axis": "x"},
        {"kind": "cavity", "g": 0.25, "kappa": 40.0, "detuning": -3.0, "axis": "z",
         "polarization": "y", "standing_wave": False, "waist": 3.0, "center": [0.1, 0.0, 0.0]},
    ]
    sc = scn.from_dict(doc)
    assert json.loads(scn.dumps(sc))["environment"] == doc["environment"]
    env = sc.environment_model()
    assert "waveguide" in env.describe() and "cavity" in env.describe()


@pytest.mark.parametrize("probe", [
    pytest.param({"kind": "plane_wave", "direction": [0.0, 0.3, 1.0], "polarization": "y",
                  "detuning_min": -4.0, "detuning_max": 6.0, "points": 101}, id="plane"),
    pytest.param({"kind": "gaussian_beam", "waist": 1.7, "focus": [0.0, 0.0, 0.5],
                  "polarization": [[1.0, 0.0], [0.0, 1.0], [0.0, 0.0]]}, id="beam"),
    pytest.param({"kind": "guided", "from_end": "+"}, id="guided"),
])
def test_probe_definitions_round_trip(probe):
    doc = copy.deepcopy(BASE)
    doc["probe"] = probe
    sc = scn.from_dict(doc)
    assert json.loads(scn.dumps(sc))["probe"] == probe
    assert sc.probe_model().kind == probe["kind"]


@pytest.mark.parametrize("probe, path, words", [
    pytest.param({"kind": "laser"}, "probe.kind", "allowed: plane_wave", id="kind"),
    pytest.param({"kind": "plane_wave", "detuning_min": 3.0, "detuning_max": 1.0},
                 "probe.detuning_min", "not a range", id="range"),
    pytest.param({"kind": "gaussian_beam", "waist": 0.01}, "probe.waist", "allowed 0.1",
                 id="waist"),
    pytest.param({"kind": "plane_wave", "points": 2}, "probe.points", "allowed 3 to 20001",
                 id="points"),
])
def test_bad_probes_are_refused_with_the_field_named(probe, path, words):
    doc = copy.deepcopy(BASE)
    doc["probe"] = probe
    with pytest.raises(scn.ScenarioError) as info:
        scn.from_dict(doc)
    assert info.value.path == path and words in str(info.value)
