"""The explorer page built in-process: views follow the state (common practice, no source)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import param
import pytest

from app.explorer import build_explorer
from physics import collected_fraction, scenario as scn

ROOT = Path(__file__).parents[2]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.json"))


@pytest.fixture
def ring_page():
    return build_explorer(scn.load(ROOT / "scenarios" / "nonagon_ring.json"))


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_page_builds_for_every_demo_scenario(path):
    page = build_explorer(scn.load(path))
    st, views = page.explorer_state, page.explorer_views
    n = st.result.emitters.n
    assert len(views["spectrum"].source.data["x"]) == n
    assert len(views["array"].source.data["x"]) == n
    assert st.message == ""
    if st.result.defective:  # eigenvectors meaningless: no far field, and the page says why
        assert views["far"].images.data["image"] == []
        assert "defective" in views["far"].lens_label.text
        assert "defective" in views["caution"].object
        return
    assert views["far"].images.data["image"][0].shape == (121, 121)


def test_tap_on_the_spectrum_selects_a_mode_and_updates_the_other_views(ring_page):
    st, views = ring_page.explorer_state, ring_page.explorer_views
    phases_before = np.array(views["array"].source.data["phase"])
    views["spectrum"].source.selected.indices = [8]
    assert st.selected_mode == 8
    assert views["spectrum"].marker.data["x"][0] == views["spectrum"].source.data["x"][8]
    assert not np.allclose(views["array"].source.data["phase"], phases_before)
    # the number shown is the physics core's collected fraction of that mode
    c = st.result.modes.vectors[:, 8]
    want = collected_fraction(st.result.emitters, c, st.lens_na, "+z")
    assert f"{100 * want:.3g} %" in views["far"].lens_label.text


def test_units_toggle_relabels_axes(ring_page):
    st, views = ring_page.explorer_state, ring_page.explorer_views
    assert "MHz" in views["spectrum"].figure.yaxis.axis_label
    st.units = "internal"
    assert "Γ0" in views["spectrum"].figure.yaxis.axis_label
    assert views["array"].figure.xaxis.axis_label == "x [λ0]"


def test_drawn_point_becomes_an_explicit_emitter(ring_page):
    st, views = ring_page.explorer_state, ring_page.explorer_views
    src = views["array"].source
    data = {k: list(v) for k, v in src.data.items()}
    scale = float(st.to_length(1.0))
    data["x"].append(2.0 * scale)
    data["y"].append(0.0)
    for k, v in src.default_values.items():
        data[k].append(v)
    src.data = data
    assert st.lattice == "explicit" and st.result.emitters.n == 10
    np.testing.assert_allclose(st.result.emitters.positions[-1, :2], [2.0, 0.0], atol=1e-12)


def test_download_then_upload_restores_the_page(ring_page):
    st, widgets = ring_page.explorer_state, ring_page.explorer_views["widgets"]
    st.selected_mode = 5
    st.units = "internal"
    text = widgets["download"].callback().getvalue()
    assert scn.loads(text) == st.scenario_for_export()
    fresh = build_explorer()
    fresh.explorer_views["widgets"]["upload"].value = text.encode()
    other = fresh.explorer_state
    assert other.result.emitters == st.result.emitters
    assert other.selected_mode == 5 and other.units == "internal"


def test_bad_upload_shows_a_message_and_keeps_the_session(ring_page):
    st, widgets = ring_page.explorer_state, ring_page.explorer_views["widgets"]
    kept = st.result
    widgets["upload"].value = b'{"format": "choir-scenario", "version": 1, "geometry": 3}'
    assert st.message.startswith("File not opened")
    assert st.result is kept


def test_spectrum_csv_download_has_a_row_per_mode(ring_page):
    text = ring_page.explorer_views["widgets"]["spectrum"].callback().getvalue()
    assert len(text.strip().splitlines()) == 1 + ring_page.explorer_state.result.modes.n


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_every_control_works_on_every_demo_scenario(path):
    """Each sidebar control changes what it should and never leaves an error."""
    page = build_explorer(scn.load(path))
    st, views = page.explorer_state, page.explorer_views
    n = st.result.emitters.n
    steps = [
        ("units", "internal"), ("units", "lab"), ("color_by", "petermann"),
        ("color_by", "shift"), ("color_by", "decay_rate"), ("projection", "xz"),
        ("far_field_scale", "linear"), ("lens_axis", "-z"),
        ("lens_na", 0.8), ("selected_mode", n - 1), ("transition", "Cs133 D2"),
        ("transition", "custom"), ("wavelength_nm", 900.0), ("linewidth_mhz", 100.0),
        ("dipole", "polar angles"), ("theta_deg", 45.0), ("phi_deg", 30.0), ("dipole", "z"),
    ]
    if st.lattice != "explicit":
        steps += [("spacing", 0.41)]
    for name, value in steps:
        before = st.result
        setattr(st, name, value)
        assert st.message == "", (name, st.message)
        if name in ("dipole", "theta_deg", "phi_deg", "spacing"):
            assert st.result is not before, name  # recomputed
    if st.result.defective:
        assert "defective" in views["far"].lens_label.text
    else:
        assert views["far"].lens_label.text.startswith("lens NA 0.80 along -z")
    assert views["array"].figure.xaxis.axis_label.startswith("x [nm]")
    assert views["array"].figure.yaxis.axis_label.startswith("z [")
    assert "log10" not in views["far"].colorbar.title
    # the custom transition reaches the lab units: 1 Γ0 = 100 MHz
    assert float(st.to_frequency(1.0)) == pytest.approx(100.0, rel=1e-12)


def test_notebook_call_returns_a_displayable_page():
    from app.explorer import explorer

    page = explorer(ROOT / "scenarios" / "nonagon_ring.json")
    assert page.explorer_state.result.emitters.n == 9
    assert hasattr(page, "_repr_mimebundle_")  # what Jupyter uses to show it inline


class _HeldRunner:
    """Keeps jobs until released, like a slow solve on the server."""

    def __init__(self):
        self.jobs = []

    def submit(self, job, done):
        self.jobs.append((job, done))

    def run_all(self):
        while self.jobs:
            job, done = self.jobs.pop(0)
            done(job())


def test_busy_indicator_shows_while_computing():
    from app.state import ExplorerState

    runner = _HeldRunner()
    page = build_explorer(state=ExplorerState(runner=runner))
    runner.run_all()
    spinner = page.explorer_views["spinner"]
    assert spinner.value is False
    page.explorer_state.spacing = 0.35
    assert spinner.value is True  # a solve is pending
    runner.run_all()
    assert spinner.value is False


def test_sliders_follow_the_drag_for_small_arrays_and_the_release_for_large():
    page = build_explorer()
    st, slider = page.explorer_state, page.explorer_views["widgets"]["spacing"]
    slider.value = 0.32  # a drag step: 100 emitters, recomputed at once
    assert st.spacing == pytest.approx(0.32) and st.result.scenario.geometry[-1][1] == 0.32
    st.param.update(nx=25, ny=25)  # 625 emitters > LIVE_DRAG_LIMIT
    slider.value = 0.34  # dragging: no recompute yet
    assert st.spacing == pytest.approx(0.32)
    with param.edit_constant(slider):  # what the browser sends on release
        slider.value_throttled = 0.34
    assert st.spacing == pytest.approx(0.34) and st.result.emitters.n == 625


def test_probe_panel_follows_its_controls():
    page = build_explorer(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st = page.explorer_state
    assert st.analysis is None  # nothing computed while the section is closed
    probe = page.explorer_open("probe")
    an = st.analysis
    assert an.probe.kind == "gaussian_beam" and len(probe.spec.data["x"]) == 201
    # a 16×16 array at 0.75 λ0 reflects most of a 2 λ0 beam on resonance (mirror-like
    # response; Phys. Rev. Lett. 118, 113601 (2017) for the infinite-array limit)
    assert np.nanmax(probe.spec.data["r2"]) > 0.95
    assert probe.image.data["image"][0].shape == (61, 61)
    st.probe_kind = "plane_wave"
    assert st.analysis.probe.kind == "plane_wave" and "cross-section" in st.analysis.signal_name
    st.probe_kind = "guided"  # no waveguide here: the page says so, nothing breaks
    assert st.analysis.scan is None and "waveguide" in probe.summary
    st.decay_initial = "pulse"
    assert "emitter 0" in st.analysis.decay_label  # a pulse needs a plane-wave probe
    st.probe_kind = "plane_wave"
    assert "pulse" in st.analysis.decay_label
    assert st.analysis.decay["population"][0] == pytest.approx(1.0)


def test_probe_settings_travel_in_the_scenario_file():
    page = build_explorer(scn.load(ROOT / "scenarios" / "nonagon_ring.json"))
    st = page.explorer_state
    st.param.update(probe_kind="gaussian_beam", probe_waist=1.3, probe_detuning_min=-2.0,
                    probe_detuning_max=4.0, probe_polarization="y")
    text = page.explorer_views["widgets"]["download"].callback().getvalue()
    page.explorer_open("probe")
    other_page = build_explorer(scn.loads(text))
    other_page.explorer_open("probe")
    other = other_page.explorer_state
    for name in ("probe_kind", "probe_waist", "probe_detuning_min", "probe_detuning_max",
                 "probe_polarization"):
        assert getattr(other, name) == getattr(st, name), name
    np.testing.assert_array_equal(other.analysis.signal, st.analysis.signal)


def test_decay_plot_splits_the_emission_between_channels():
    page = build_explorer(scn.load(ROOT / "scenarios" / "fibre_chain_partly_chiral.json"))
    probe = page.explorer_open("probe")
    names = probe.channels.data["name"]
    assert "free space" in names and any("guided" in n for n in names)
    # the channels add up to the total emitted power at every time (exact identity)
    total = np.sum(np.array(probe.channels.data["ys"]), axis=0)
    np.testing.assert_allclose(total, probe.decay.data["w"], rtol=1e-9)


def test_sections_are_built_once_when_first_opened():
    """Collapsed sections build nothing until opened, and only once (common practice, no source)."""
    page = build_explorer(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st, views = page.explorer_state, page.explorer_views
    assert "probe" not in views and "bands" not in views and "sweep" not in views
    assert st.analysis is None and st.bands is None
    bands = page.explorer_open("bands")
    card = views["sections"]["bands"].card
    assert st.bands is not None and len(bands.points.data["s"]) > 0
    card.collapsed = True  # closed: the figures stay, nothing is recomputed
    st.spacing = 0.7
    assert st.bands.lattice.a1[0] != pytest.approx(0.7)
    card.collapsed = False  # opened again: the same view, brought up to date
    assert views["bands"] is bands and st.bands.lattice.a1[0] == pytest.approx(0.7)
