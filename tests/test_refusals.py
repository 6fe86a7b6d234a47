"""Refusals of the infinite-lattice, large-array, imperfection and sweep code: each
message names the field and what is allowed (common practice, no source)."""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from app import sweeps as S
from app.cli import main
from app.state import ExplorerState
from physics import bands as B
from physics import lattices
from physics import scenario as scn
from physics.driving import Probe
from physics.imperfections import Imperfections, realise

ROOT = Path(__file__).parents[1]
SQ = B.periodic_lattice("square", {"spacing": 0.5})


@pytest.mark.parametrize("call, words", [
    (lambda: B.bloch_hamiltonian(SQ, [[0, 0]], np.ones((2, 3))),
     "dipole: needs one 3-vector or one per basis site (1); got shape (2, 3)"),
    (lambda: B.specular_response(SQ, [0.0], direction=(1, 0, 0)),
     "direction: must cross the array plane (non-zero z-component)"),
    (lambda: B.specular_response(SQ, [0.0], direction=(0, 0, 1), polarization=(0, 0, 1)),
     "polarization: parallel to the direction; a plane wave is transverse"),
    (lambda: B.specular_response(B.periodic_lattice("square", {"spacing": 1.0}), [0.0],
                                 direction=(0, 0, 1)),
     "direction: a diffraction order lies on the light line"),
    (lambda: B.probe_on_sheet(SQ, "x", Probe("guided")),
     "kind: a guided probe has no infinite-sheet counterpart"),
    (lambda: B.PlanarLattice("square", (0.5, 0.0), (1.0, 0.0)),
     "a2: parallel to a1; a planar lattice needs two independent vectors"),
    (lambda: B.PlanarLattice("square", (9.0, 0.0), (0.0, 1.0)),
     "a1: length 9 λ0 is out of range; allowed (0, 5] λ0"),
    (lambda: B.brillouin_zone_grid(SQ, 2), "grid: 2 is out of range; allowed 5…1001"),
    (lambda: B.Chain(0.3, "w"), "axis: 'w' is not allowed; allowed: x, y, z"),
    (lambda: realise(lattices.chain(3, 0.3), Imperfections(filling=0.5, seed=1), -1),
     "realisation: -1 is out of range; allowed 0 to 4294967295"),
    (lambda: realise(lattices.explicit(np.arange(5)[:, None] * [5e-5, 0.0, 0.0]),
                     Imperfections((1e-9, 1e-9, 1e-9), seed=1)),
     "imperfections.jitter: 20 draws each put two emitters closer than"),
])
def test_physics_refusals(call, words):
    with pytest.raises(ValueError, match=re.escape(words)):
        call()


def _doc():
    return scn.to_dict(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))


@pytest.mark.parametrize("make, words", [
    (lambda: S.Plan(_doc(), tuple(S.parse_axis(t) for t in ("geometry.nx=2,3", "geometry.ny=2,3",
                                                              "geometry.spacing=0.3,0.4"))),
     "--vary: at most two parameters at once"),
    (lambda: S.Plan(_doc(), (S.parse_axis("geometry.lattice=1,2"),)).scenario_at(0),
     "--vary: 'geometry.lattice' holds \"square\", not a number"),
    (lambda: S.Plan(_doc(), (S.parse_axis("transition.preset.x=1,2"),)).scenario_at(0),
     "--vary: 'transition.preset.x' does not lead to a number in the scenario"),
    (lambda: S.parse_axis("geometry.spacing=log:-1:2:3"),
     "--vary: a geometric range needs positive ends, got -1 and 2"),
    (lambda: S.parse_axis("geometry.spacing=1:2:3:4:5"),
     "--vary: '1:2:3:4:5' is not a list a,b,c or a range start:stop:count"),
])
def test_sweep_refusals(make, words):
    with pytest.raises(S.SweepError, match=re.escape(words)):
        make()


def test_explorer_sweep_refusals():
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st.solve()
    st.sweep_vary = "dipole θ [deg] (polar-angle dipoles)"
    st.run_sweep()
    assert st.message == "Sweep not started — sweep: θ can be varied only for 'polar angles' dipoles"
    st.sweep_vary = "emitters N (chain, ring)"
    st.run_sweep()
    assert st.message == "Sweep not started — sweep: this array type has no 'n'"


@pytest.mark.parametrize("argv, words", [
    (["sweep", "scenarios/subradiant_chain.json", "--workers", "0"],
     "--workers: 0 is out of range; allowed 1 to 256"),
    (["sweep", "scenarios/subradiant_chain.json", "--seed", "-3"],
     "--seed: -3 is out of range; allowed 0 to 4294967295"),
    (["sweep", "scenarios/subradiant_chain.json", "--plot", "beauty"],
     "--plot: 'beauty' is not a figure; allowed: n_emitters"),
    (["sweep", "scenarios/subradiant_chain.json", "--scheduler", "tcp://127.0.0.1:9"],
     "--scheduler: cannot reach tcp://127.0.0.1:9"),
    (["solve", "scenarios/nonagon_ring.json", "--modes", "2", "--which", "near", "--target", "x"],
     "--target: 'x' is not 'shift,rate' in Γ0"),
    (["bands", "scenarios/kagome_circular.json", "--finite", "--points", "0"],
     "--points: 0 is out of range; allowed 2…20000"),
])
def test_cli_refusals(argv, words, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    try:
        code = main(argv + ["--out", str(tmp_path / "o")])
    except SystemExit as exc:
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2 and words in err and "Traceback" not in err


# ------------------------------------------------------------ every other refusal path

from physics import driving, ensembles, exports, far_field  # noqa: E402
from physics.dynamics import pulse_state  # noqa: E402
from physics.free_space import FreeSpace  # noqa: E402
from physics.waveguide import Waveguide  # noqa: E402

PTS = np.zeros((2, 3)) + [[0.0, 0.0, 0.0], [0.5, 0.0, 0.0]]


def _sc(**changes):
    d = _doc()
    for path, value in changes.items():
        node = d
        keys = path.split("__")
        for k in keys[:-1]:
            node = node.setdefault(k, {})
        node[keys[-1]] = value
    return d


@pytest.mark.parametrize("call, words", [
    (lambda: B.polylog_unit_circle(4, 0.1), "order: 4 is not allowed; allowed: 1, 2, 3"),
    (lambda: B.probe_on_sheet(B.Chain(0.3), "x", Probe()),
     "geometry.lattice: a chain is not a sheet"),
    (lambda: driving.plane_wave_field(PTS, (0, 0, 0), "x"),
     "direction: expected a non-zero 3-vector"),
    (lambda: driving.plane_wave_field(PTS, (0, 0, 1), (0, 0, 1)),
     "polarization: must not be parallel to the direction of propagation"),
    (lambda: driving.gaussian_beam_field(PTS, 0.01),
     "waist: 0.01 is out of range; allowed 0.1 to 1e4 λ0"),
    (lambda: driving.gaussian_beam_field(PTS, 2.0, direction="x"),
     "direction: 'x' is not allowed; allowed: +z, -z"),
    (lambda: driving.gaussian_beam_field(PTS, 2.0, polarization=(0, 0, 1)),
     "polarization: a beam along z needs a transverse (x, y) polarisation"),
    (lambda: Probe("laser"), "kind: 'laser' is not allowed; allowed: plane_wave"),
    (lambda: Probe(points=2), "points: 2 is out of range; allowed 3 to 20001"),
    (lambda: Probe("guided").incident_field(PTS),
     "kind: a guided probe has no free-space incident field"),
    (lambda: driving.probe_scan(lattices.chain(3, 0.3), FreeSpace(),
                                Probe("gaussian_beam", beam_direction="-z")),
     "beam_direction: reflection/transmission are computed for a beam going +z"),
    (lambda: pulse_state(lattices.chain(3, 0.3, "z"), (0, 0, 1), (1.0, 0.0, 0.0)),
     "polarization: this pulse does not couple to the dipoles (c = 0)"),
    (lambda: ensembles.FigureRequest(mode=10000), "mode: 10000 is out of range; allowed 0 to 9999"),
    (lambda: ensembles.FigureRequest(detuning=1e7), "detuning: 10000000.0 is out of range"),
    (lambda: ensembles.power_law_fit([1.0], [1.0]),
     "fit: a power law needs at least 2 points with positive x and y"),
    (lambda: exports.read_amplitudes_csv("1,0\n1,x\n", 2), "amplitudes: row 2 is not numbers"),
    (lambda: far_field.hemisphere_directions(np.zeros(1), np.zeros(1), "up"),
     "side: 'up' is not allowed; allowed: +z, -z"),
    (lambda: lattices.disk(1000.0, 0.01), "radius: 1000.0 λ0 with spacing 0.01 λ0 gives too many"),
    (lambda: Waveguide(0.5, 0.5, axis="x").probe(lattices.chain(3, 0.3), "x"),
     "from_end: 'x' is not allowed; allowed: -, +"),
])
def test_every_other_physics_refusal(call, words):
    with pytest.raises(ValueError, match=re.escape(words)):
        call()


@pytest.mark.parametrize("doc, words", [
    (_sc(geometry={"lattice": "chain", "n": 5, "spacing": 6.0, "axis": "x"},
         analysis={"selected_mode": 0}), None),  # loads; its bands are refused below
    (_sc(imperfections={"seed": 1, "jitter_nm": [2000.0, 0.0, 0.0]}),
     "imperfections.jitter_nm: (2.56"),
    (_sc(version=0), "version: 0 is out of range; allowed 1 to 4"),
])
def test_scenario_refusals(doc, words):
    if words is None:
        sc = scn.from_dict(doc)
        with pytest.raises(scn.ScenarioError, match=re.escape(
                "geometry.spacing: 6 λ0 is out of range; allowed (0, 5] λ0")):
            sc.periodic_model()
        return
    with pytest.raises(scn.ScenarioError) as info:
        scn.from_dict(doc)
    assert words in str(info.value)


def test_scenario_refusals_of_bands_realisations_and_size(tmp_path):
    radial = _sc(dipole={"preset": "radial"})
    with pytest.raises(scn.ScenarioError, match="dipole: bands need the same dipole on every site"):
        scn.from_dict(radial).periodic_model()
    empty = _sc(geometry={"lattice": "chain", "n": 1, "spacing": 0.3, "axis": "x"},
                analysis={"selected_mode": 0}, imperfections={"seed": 1, "filling": 0.02})
    messages = []
    for r in range(10):
        empty["imperfections"]["realisation"] = r
        try:
            scn.from_dict(empty)
        except scn.ScenarioError as exc:
            messages.append(str(exc))
    assert any(m.startswith("imperfections.filling: realisation") for m in messages)
    with pytest.raises(scn.ScenarioError, match="the limit is 20000000 bytes"):
        scn.loads(" " * (scn.MAX_FILE_BYTES + 1))
    big = tmp_path / "big.json"
    big.write_text(" " * (scn.MAX_FILE_BYTES + 1))
    with pytest.raises(scn.ScenarioError, match="the limit is 20000000 bytes"):
        scn.load(big)


@pytest.mark.parametrize("make, words", [
    (lambda: S.Plan(_doc(), (S.parse_axis("geometry.spacing.x=1,2"),)).scenario_at(0),
     "--vary: 'geometry.spacing.x' does not lead to a number in the scenario"),
    (lambda: S.Plan(_sc(imperfections={"seed": 1, "jitter_lambda0": [0.0, 0.0, 0.0]}),
                    (S.parse_axis("imperfections.jitter_lambda0.5=0.1,0.2"),)).scenario_at(0),
     "--vary: 'imperfections.jitter_lambda0.5' indexes past the end of a list"),
    (lambda: S.Plan(_doc(), (), 0), "--realisations: 0 is out of range; allowed 1 to 100000"),
    (lambda: S.Plan(_doc(), (S.parse_axis("geometry.spacing=0.3:0.6:200"),
                             S.parse_axis("geometry.nx=2:61:60"))),
     "--vary: 12000 points; allowed at most 10000"),
])
def test_more_sweep_refusals(make, words):
    with pytest.raises(S.SweepError, match=re.escape(words)):
        make()


def test_results_folder_refusals(tmp_path):
    plan = S.Plan(_sc(geometry={"lattice": "chain", "n": 4, "spacing": 0.3, "axis": "x"},
                      analysis={"selected_mode": 0}))
    S.run_plan(plan, tmp_path, scheduler="inline")
    with pytest.raises(S.SweepError, match="already holds a sweep; add --resume"):
        S.run_plan(plan, tmp_path, scheduler="inline")
    other = S.Plan(plan.scenario, (), 2)
    with pytest.raises(S.SweepError, match="holds a different sweep"):
        S.run_plan(other, tmp_path, scheduler="inline", resume=True)


def test_explorer_state_refusals():
    st = ExplorerState()
    st.lattice = "explicit"
    assert st.message == "Not computed — geometry.positions: no explicit positions yet"
    st2 = ExplorerState(scn.load(ROOT / "scenarios" / "nonagon_ring.json"))
    st2.dipole = "complex vector"
    assert st2.message == "Not computed — dipole: no complex dipole vector loaded"


def test_autosave_folder_refusal():
    from app.explorer import serve

    with pytest.raises(ValueError, match="--autosave-dir: cannot use /proc/choir-no/sessions"):
        serve(None, autosave_dir="/proc/choir-no/sessions")


@pytest.mark.parametrize("argv, words", [
    (["new", "--lattice", "chain", "--n", "3", "--spacing", "0.3", "--no-free-space"],
     "--no-free-space leaves no environment: add a waveguide or a cavity"),
    (["new", "--lattice", "chain"], "--n is required for --lattice chain"),
    (["solve", "scenarios/nonagon_ring.json", "--out", "/proc/choir-no"], "--out: cannot create"),
    (["scan", "scenarios/mirror_square_16x16.json", "--waist", "0.01"],
     "--waist: 0.01 is out of range"),
    (["scan", "scenarios/fibre_chain_partly_chiral.json", "--probe", "guided", "--map-plane", "xz"],
     "--map-plane: a guided probe has no free-space field to map"),
    (["scan", "scenarios/subradiant_chain.json", "--infinite"],
     "--infinite: a chain is not a sheet"),
    (["decay", "scenarios/nonagon_ring.json", "--initial", "mode", "--mode", "99"],
     "--mode: 99 is out of range; allowed 0 to 8"),
    (["decay", "scenarios/nonagon_ring.json", "--initial", "vector"],
     "--initial vector needs --amplitudes FILE"),
    (["decay", "scenarios/nonagon_ring.json", "--initial", "vector", "--amplitudes", "/no/file"],
     "--amplitudes: cannot read /no/file"),
    (["bands", "scenarios/subradiant_chain.json", "--map", "9"],
     "--map: a chain's zone is a line"),
    (["bands", "scenarios/mirror_square_16x16.json", "--map", "2"],
     "--map: 2 is out of range; allowed 5…1001"),
    (["sweep", "scenarios/subradiant_chain.json", "--jitter", "a"],
     "--jitter: 'a' is not one number or three x,y,z"),
    (["sweep", "scenarios/subradiant_chain.json", "--detuning", "1e9"],
     "--detuning: 1000000000.0 is out of range"),
    (["serve", "--port", "0"], "--port: 0 is out of range; allowed 1 to 65535"),
])
def test_every_other_cli_refusal(argv, words, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    if "--out" not in argv and argv[0] in ("solve", "scan", "decay", "bands", "sweep"):
        argv = argv + ["--out", str(tmp_path / "o")]
    try:
        code = main(argv)
    except SystemExit as exc:
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2 and words in err and "Traceback" not in err


def test_cli_refuses_placing_modes_of_a_huge_array_and_memory(tmp_path, capsys, monkeypatch):
    from physics import large

    d = _sc(geometry={"lattice": "square", "nx": 60, "ny": 60, "spacing": 0.3},
            analysis={"selected_mode": 0})
    path = tmp_path / "big.json"
    path.write_text(scn.dumps(scn.from_dict(d)))
    assert main(["bands", str(path), "--finite", "--out", str(tmp_path / "b")]) == 2
    assert "--finite: the array has 3600 emitters" in capsys.readouterr().err
    monkeypatch.setattr(large, "free_memory", lambda: 1000)
    assert main(["solve", str(ROOT / "scenarios" / "nonagon_ring.json"), "--modes", "2",
                 "--out", str(tmp_path / "m")]) == 2
    assert "--modes: N = 9 emitters:" in capsys.readouterr().err


def test_last_refusal_paths():
    with pytest.raises(S.SweepError, match=re.escape(
            "--vary: 'geometry.spacing.x.y' does not lead to a number in the scenario")):
        S.Plan(_doc(), (S.parse_axis("geometry.spacing.x.y=1,2"),)).scenario_at(0)
    with pytest.raises(ValueError, match=re.escape("scale: 11.0 is out of range; allowed 0 to 10")):
        FreeSpace(scale=11.0)
    with pytest.raises(scn.ScenarioError, match=re.escape("environment[0].kind: 'laser' is not supported")):
        scn._build_environment(((("kind", "laser"),),))
    em = lattices.chain(3, 0.3)
    with pytest.raises(ValueError, match=re.escape("from_end: 'x' is not allowed; allowed: -, +")):
        Waveguide(0.5, 0.5, axis="x").transmission(em, np.ones(3), "x")
