"""The explorer's session state, without a browser (common practice, no source)."""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import param
import pytest

from app.state import NEAR_FIELD_WARN, ExplorerState
from physics import collected_fraction, scenario as scn, solve_modes, total_power
from physics.modes import DefectiveMatrixWarning

ROOT = Path(__file__).parents[2]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.json"))


class ManualRunner:
    """Holds jobs until the test releases them, in any order (to test staleness)."""

    def __init__(self):
        self.jobs = []

    def submit(self, job, done):
        self.jobs.append((job, done))

    def release(self, k):
        job, done = self.jobs.pop(k)
        done(job())

    def solves(self) -> list[int]:
        """Indices of the waiting solve jobs (the closures call app.jobs.solve)."""
        return [i for i, (job, _) in enumerate(self.jobs) if "solve" in job.__code__.co_names]


def test_every_parameter_documents_its_unit_and_bounds():
    """STYLE: every parameter has a doc that states its unit, numbers have bounds."""
    for name, p in ExplorerState.param.objects().items():
        if name == "name":  # param's own instance name
            continue
        assert p.doc, name
        assert "[" in p.doc or "no unit" in p.doc or "count" in p.doc, (name, p.doc)
        if isinstance(p, param.Number):
            assert p.bounds is not None and None not in p.bounds, name


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_each_demo_scenario_loads_and_solves(path):
    sc = scn.load(path)
    st = ExplorerState(sc)
    st.solve()
    assert st.message == ""
    assert st.result.emitters == sc.emitters()
    assert st.selected_mode == sc.selected_mode
    env = sc.environment_model()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DefectiveMatrixWarning)
        ref = solve_modes(sc.emitters(), env, use_symmetry=False)
    # same eigenvalues as the physics core without symmetry blocks (1e-12 Γ0 round-off;
    # a defective matrix's eigenvalues are only defined to ~ε^(1/N), hence 1e-6 there)
    tol = 1e-6 if st.result.defective else 1e-12
    np.testing.assert_allclose(st.result.modes.eigenvalues, ref.eigenvalues, atol=tol)
    if st.result.defective:
        assert st.mode_result.far_field is None and "defective" in " ".join(st.cautions())
        return
    c = st.result.modes.vectors[:, sc.selected_mode]
    rate = st.result.modes.decay_rates[sc.selected_mode]
    # the lens sees the free-space channel only: its share of the mode's total emission
    want = (env.free_space_weight * collected_fraction(sc.emitters(), c, sc.lens_na, "+z")
            * total_power(sc.emitters(), c) / rate)
    assert st.mode_result.collected_up == pytest.approx(want, rel=1e-9, abs=1e-12)
    assert sum(st.mode_result.channels.values()) == pytest.approx(rate, rel=1e-9)


def test_spacing_change_recomputes_and_moves_the_spectrum():
    st = ExplorerState()
    st.solve()
    before = st.result.modes.eigenvalues.copy()
    st.spacing = 0.45
    assert st.result.scenario.geometry == (("lattice", "square"), ("nx", 10), ("ny", 10),
                                           ("spacing", 0.45))
    assert np.max(np.abs(st.result.modes.eigenvalues - before)) > 1e-3


def test_a_drag_solves_the_first_and_the_last_step_only():
    """Latest request wins: steps made while a solve runs replace each other, none queues."""
    runner = ManualRunner()
    st = ExplorerState(runner=runner)
    st.solve()  # running: spacing 0.3
    for a in (0.31, 0.32, 0.33, 0.34):  # a drag while it runs
        st.spacing = a
    assert len(runner.jobs) == 1  # only the running solve was handed to the runner
    runner.release(0)  # 0.3 finishes: shown (a newer step waits), and the newest starts
    assert st.result.scenario.geometry[-1] == ("spacing", 0.3) and st.busy
    assert len(runner.solves()) == 1 and len(runner.jobs) == 1  # no figures for the overtaken
    runner.release(runner.solves()[0])
    assert st.result.scenario.geometry[-1] == ("spacing", 0.34) and not st.busy
    while runner.jobs:  # the mode figures of the last step
        runner.release(0)
    assert st.mode_result is not None


def _ring_solved():
    """A ring session on a held runner, solved and with every follow-up job done."""
    runner = ManualRunner()
    st = ExplorerState(scn.load(ROOT / "scenarios" / "nonagon_ring.json"), runner=runner)
    st.solve()
    runner.release(0)
    while runner.jobs:
        runner.release(0)
    return runner, st, st.result


def test_a_cancelled_or_overtaken_result_is_never_shown():
    """A result older than the one on screen is dropped (cache hit while a solve runs)."""
    runner, st, first = _ring_solved()
    st.n = 12  # a slow solve starts …
    st.n = first.emitters.n  # … and the user goes back: served from the cache at once
    assert st.result.modes is first.modes
    runner.release(0)  # the n = 12 solve arrives late and must not replace it
    assert st.result.modes is first.modes and not st.busy


def test_edit_adds_an_emitter_and_undo_restores_the_lattice():
    st = ExplorerState(lattice="chain", n=5, spacing=0.3)
    st.solve()
    em = st.result.emitters
    st.edit_positions(np.vstack([em.positions, [[0.0, 0.5, 0.0]]]), np.r_[np.arange(5), -1])
    assert st.lattice == "explicit" and st.result.emitters.n == 6
    assert st.undo_depth == 1
    st.undo()
    assert st.lattice == "chain" and st.result.emitters.n == 5 and st.undo_depth == 0


def test_a_refused_edit_keeps_the_geometry_and_says_why():
    st = ExplorerState(lattice="chain", n=4, spacing=0.3)
    st.solve()
    em = st.result.emitters
    st.edit_positions(np.vstack([em.positions, em.positions[:1]]), np.r_[np.arange(4), -1])
    assert "Edit refused" in st.message and "emitters 0 and 4" in st.message
    assert st.lattice == "chain" and st.result.emitters.n == 4 and st.undo_depth == 0


def test_per_emitter_dipoles_follow_their_emitters_through_an_edit():
    sc = scn.load(ROOT / "scenarios" / "hand_placed_cluster.json")
    st = ExplorerState(sc)
    st.solve()
    em = st.result.emitters
    keep = np.array([3, 1, 2])  # delete all but three, reordered
    st.edit_positions(em.positions[keep], keep)
    np.testing.assert_array_equal(st.result.emitters.dipoles, em.dipoles[keep])


def test_export_then_import_reproduces_the_session_exactly():
    sc = scn.load(ROOT / "scenarios" / "hand_placed_cluster.json")
    st = ExplorerState(sc)
    st.solve()
    st.selected_mode = 4
    em = st.result.emitters
    st.edit_positions(np.vstack([em.positions, [[1.5, 1.5, 0.0]]]), np.r_[np.arange(em.n), -1])
    text = scn.dumps(st.scenario_for_export())
    other = ExplorerState(scn.loads(text))
    other.solve()
    assert other.result.emitters == st.result.emitters
    assert other.selected_mode == st.selected_mode
    assert scn.dumps(other.scenario_for_export()) == text
    np.testing.assert_array_equal(other.result.modes.eigenvalues, st.result.modes.eigenvalues)


def test_near_field_caution_appears_below_the_threshold():
    st = ExplorerState(lattice="chain", n=6, spacing=0.3)
    st.solve()
    assert not any("near field" in c for c in st.cautions())
    st.spacing = NEAR_FIELD_WARN / 2
    assert any("near field" in c for c in st.cautions())


def test_invalid_combination_gives_a_message_and_keeps_the_last_result():
    st = ExplorerState(lattice="ring", n=5, spacing=0.3)
    st.solve()
    kept = st.result
    st.dipole = "per emitter"  # needs an explicit geometry
    assert "per-emitter" in st.message
    assert st.result is kept


def test_widget_bounds_refuse_out_of_range_values():
    st = ExplorerState()
    with pytest.raises(ValueError, match="spacing"):
        st.spacing = 5000.0  # the scenario file allows 0.001 to 1000 λ0


def test_display_units_convert_at_the_edge():
    st = ExplorerState(transition="Rb87 D2")
    assert st.frequency_label() == "MHz"
    # 1 Γ0 shown as Γ0/2π of the Rb87 D2 line (Steck, from memory: 6.0666 MHz)
    assert float(st.to_frequency(1.0)) == pytest.approx(6.0666, rel=1e-12)
    st.units = "internal"
    assert float(st.to_frequency(1.0)) == 1.0 and st.time_label() == "1/Γ0"


@pytest.mark.parametrize("dipole", [
    pytest.param({"vector": [[0.6, 0.0], [0.0, 0.8], [0.0, 0.0]]}, id="complex-vector"),
    pytest.param({"theta_deg": 33.3, "phi_deg": 30.1}, id="angles"),
    pytest.param({"theta_deg": 90.0, "phi_deg": 270.0}, id="angles-wrapped"),
])
def test_dipole_forms_survive_a_session_unchanged(dipole):
    doc = {"format": "choir-scenario", "version": 1, "transition": {"preset": "Cs133 D2"},
           "geometry": {"lattice": "triangular", "nx": 4, "ny": 3, "spacing": 0.33},
           "dipole": dipole, "environment": {"kind": "free_space"}}
    sc = scn.from_dict(doc)
    st = ExplorerState(sc)
    st.solve()
    back = st.scenario_for_export()
    assert back.geometry == sc.geometry  # the generator is kept
    np.testing.assert_allclose(st.result.emitters.dipoles, sc.emitters().dipoles, atol=1e-15)
    if dipole.get("phi_deg", 0.0) <= 180.0:
        assert back.dipole == sc.dipole  # bit for bit


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_a_freshly_loaded_scenario_is_not_marked_modified(path):
    st = ExplorerState(scn.load(path))
    st.solve()
    assert not st.is_modified()
    if st.lattice != "explicit":
        st.spacing = st.spacing * 1.01
        assert st.is_modified()


def test_bands_are_computed_only_while_open_and_follow_the_array():
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st.solve()
    assert st.bands is None  # closed: nothing computed
    st.bands_visible = True
    br = st.bands
    assert br.lattice is not None and br.bands.shift.shape[1] == 1
    assert br.placed is not None and len(br.placed["band"]) == 256
    # Γ(k = 0) of a square lattice with in-plane dipoles is (3/4π)(λ0/a)² Γ0
    # (E. Shahmoon et al., Phys. Rev. Lett. 118, 113601 (2017)); a = 0.75 λ0 here
    assert br.bands.decay_rate[0, 0] == pytest.approx(3 / (4 * np.pi) / 0.75 ** 2, rel=1e-12)
    st.bands_polarization = "all"
    assert st.bands.bands.shift.shape[1] == 3 and st.bands.placed is None
    st.apply_scenario(scn.load(ROOT / "scenarios" / "nonagon_ring.json"))
    assert st.bands.lattice is None and "no infinite counterpart" in st.bands.note


def test_probe_analysis_compares_with_the_infinite_array():
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st.solve()
    assert st.analysis is None  # the probe section is closed: nothing computed
    st.probe_visible = True
    sheet = st.analysis.sheet
    assert sheet is not None and np.max(sheet["R"]) > 0.99  # the infinite sheet is a mirror
    st.apply_scenario(scn.load(ROOT / "scenarios" / "nonagon_ring.json"))
    assert st.analysis.sheet is None


def test_imperfections_redraw_export_and_edit():
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st.solve()
    st.filling, st.jitter_z = 0.8, 0.02
    first = st.result.emitters
    assert first.n < 256 and "sites filled" in st.imperfection_text()
    st.draw_again()
    assert st.realisation == 1 and st.result.emitters != first
    # the exported file shows exactly this realisation to a colleague
    other = ExplorerState(scn.loads(scn.dumps(st.scenario_for_export())))
    other.solve()
    assert other.result.emitters == st.result.emitters and other.filling == 0.8
    # a drawn edit keeps the realised positions and makes the array perfect again
    pos = np.array(st.result.emitters.positions)
    st.edit_positions(pos[:-1], np.arange(len(pos) - 1))
    assert st.filling == 1.0 and st.jitter_z == 0.0
    np.testing.assert_array_equal(st.result.emitters.positions, pos[:-1])


def test_sweep_from_the_explorer_and_its_command():
    st = ExplorerState(scn.load(ROOT / "scenarios" / "subradiant_chain.json"))
    st.solve()
    st.param.update(sweep_vary="emitters N (chain, ring)", sweep_from=20, sweep_to=160,
                    sweep_points=4, sweep_realisations=1, sweep_fit=True)
    st.run_sweep()
    assert st.message == "" and not st.sweep_running and st.sweep_progress == 1.0
    # most subradiant rate of a chain ∝ N^−3 (Phys. Rev. X 7, 031024 (2017)); N = 20…160
    # is still short of the asymptote, so the tolerance is 0.2
    assert st.sweep.fit["exponent"] == pytest.approx(-3.0, abs=0.2)
    assert "--vary geometry.n=20.0,40.0,80.0,160.0" in st.sweep.command
    st.param.update(sweep_realisations=1000, sweep_from=500, sweep_to=2000)
    st.run_sweep()
    assert "Sweep not started — it would take about" in st.message and "choir sweep" in st.message


def test_a_sweep_can_be_cancelled_and_keeps_what_finished():
    from app.state import SyncRunner

    class CancelAfterFirstTask(SyncRunner):
        state = None

        def on_loop(self, fn):
            fn()
            self.state.cancel_sweep()  # the user presses Cancel after the first progress step

    runner = CancelAfterFirstTask()
    st = ExplorerState(scn.load(ROOT / "scenarios" / "subradiant_chain.json"), runner=runner)
    runner.state = st
    st.solve()
    st.param.update(sweep_vary="spacing a [λ0]", sweep_from=0.2, sweep_to=0.4, sweep_points=6,
                    sweep_realisations=1)
    st.run_sweep()
    rep = st.sweep.report
    assert rep.cancelled and 1 <= rep.computed < 6 and not st.sweep_running
    assert len([s for s in st.sweep.summary if s["figure"] == "most_subradiant_rate"]) == \
        rep.computed


def test_large_arrays_show_eigenvalues_first_then_vectors(monkeypatch):
    import app.jobs as state_module
    from app.views import ArrayView, SpectrumView, mode_card_html

    monkeypatch.setattr(state_module, "LAZY_FROM", 50)
    runner = ManualRunner()
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"), runner=runner)
    spectrum, array = SpectrumView(st), ArrayView(st)
    st.solve()
    runner.release(0)  # first step: eigenvalues only
    assert st.result is not None and not st.result.modes.has_vectors and st.busy
    assert len(spectrum.source.data["x"]) == 256 and "being computed" in mode_card_html(st)
    assert len(array.source.data["x"]) == 256
    ref = solve_modes(st.result.emitters, st.result.environment, use_symmetry=False)
    np.testing.assert_allclose(st.result.modes.decay_rates, ref.decay_rates, atol=1e-10)
    assert len(runner.jobs) == 2 and len(runner.solves()) == 1  # the mode's own vector, all
    mode_job = 1 - runner.solves()[0]
    runner.release(mode_job)  # second step: the selected mode by inverse iteration
    mres = st.mode_result
    k = st.selected_mode
    assert not st.result.modes.has_vectors and mres.vector is not None
    assert abs(abs(np.vdot(ref.vectors[:, k], mres.vector)) - 1.0) < 1e-9  # same mode
    assert mres.participation == pytest.approx(ref.participation_ratio[k], rel=1e-8)
    assert "participation ratio" in mode_card_html(st)
    amp = np.array(array.source.data["amp"])
    np.testing.assert_allclose(amp, np.abs(mres.vector) ** 2, atol=1e-12)  # the mode's profile
    runner.release(0)  # third step: every eigenvector
    assert st.result.modes.has_vectors and not st.busy
    assert st.mode_result is mres and not runner.jobs  # its figures stand: not computed twice
    assert "participation ratio" in mode_card_html(st)


def test_arrays_without_symmetry_show_the_spectrum_then_the_selected_mode():
    """A jittered 25 × 25 array (one block of 625): eigenvalues first, then the selected
    mode's own vector, then all vectors — same eigenvalues and vector as the dense solve."""
    runner = ManualRunner()
    st = ExplorerState(runner=runner)
    st.param.update(nx=25, ny=25, spacing=0.3, jitter_x=0.01, jitter_y=0.01, jitter_z=0.01)
    while runner.jobs:
        runner.release(0)
    runner.jobs.clear()
    st.spacing = 0.32
    runner.release(0)
    assert not st.result.modes.has_vectors
    ref = solve_modes(st.result.emitters, st.result.environment, use_symmetry=False)
    np.testing.assert_allclose(st.result.modes.eigenvalues, ref.eigenvalues, atol=1e-10)
    runner.release(1 - runner.solves()[0])
    k = st.selected_mode
    assert abs(abs(np.vdot(ref.vectors[:, k], st.mode_result.vector)) - 1.0) < 1e-9
    runner.release(0)
    assert st.result.modes.has_vectors


def test_a_scenario_solved_before_comes_from_the_cache():
    runner, st, first = _ring_solved()
    st.n = 12
    runner.release(0)
    while runner.jobs:
        runner.release(0)
    st.n = first.emitters.n  # back: no solve job, the same modes at once
    assert st.result.modes is first.modes and runner.solves() == []


def test_eigenvectors_beyond_the_explorer_keep_the_spectrum_and_say_why(monkeypatch):
    import app.jobs as state_module

    monkeypatch.setattr(state_module, "LAZY_FROM", 50)
    monkeypatch.setattr(state_module, "EXPLORER_BLOCK_LIMIT", 40)
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st.solve()  # 4 mirror blocks of 64 > 40
    assert st.result is not None and not st.result.modes.has_vectors and not st.busy
    assert st.message.startswith("Eigenvectors not computed — the spectrum is shown")
    assert "choir solve --modes K" in st.message
    st.nx = 5  # the session stays usable: a smaller array solves fully
    assert st.result.modes.has_vectors and st.message == ""


def test_a_closed_page_starts_no_more_work():
    """After the page is gone, waiting jobs are dropped and nothing new is handed out."""
    runner = ManualRunner()
    runner.close = lambda: None
    st = ExplorerState(runner=runner)
    st.solve()
    st.spacing = 0.4  # waits behind the running solve
    st.close()
    runner.release(0)  # the running solve ends: its value is dropped, the waiting one never runs
    assert st.result is None and runner.jobs == []
    st.spacing = 0.5
    assert runner.jobs == []
