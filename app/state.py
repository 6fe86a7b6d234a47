"""All state of one explorer session, in one ``param.Parameterized`` class.

The class never touches Bokeh or Panel widgets: views read its outputs
(``result``, ``mode_result``, ``analysis``, ``bands``, ``message``, ``busy``)
and write its inputs.  What it shows is computed by the jobs of
:mod:`app.jobs` (pure functions of frozen inputs), one :class:`~app.jobs.Latest`
per kind of job: one runs at a time, the latest request wins, nothing queues.
The mapping between parameters and scenario files is :mod:`app.binding`.
"""
from __future__ import annotations

import tempfile
import threading
from collections import OrderedDict
from dataclasses import replace
from typing import Any

import numpy as np
import param

from physics import scenario as scn
from physics.driving import Probe
from physics.geometry import nearest_neighbour_distance
from physics.units import TRANSITIONS, Transition

from . import jobs
from .binding import ENVIRONMENTS, is_imperfect, parameters_of, probe_of, scenario_document
from .jobs import Latest, Result, SyncRunner

__all__ = ["ExplorerState", "LIVE_DRAG_LIMIT", "NEAR_FIELD_WARN", "SWEEP_PARAMETERS"]

#: Sliders recompute while dragging up to this many emitters, on release above.
LIVE_DRAG_LIMIT = 400
#: Nearest-neighbour distance [λ0] below which the explorer warns that the
#: near field dominates and real emitters stop being two-level point dipoles.
NEAR_FIELD_WARN = 0.1

#: Parameters the explorer's sweep panel can vary: label → scenario paths (None: no sweep).
SWEEP_PARAMETERS = {
    "nothing (one ensemble)": None,
    "spacing a [λ0]": ("geometry.spacing",),
    "array size nx = ny": ("geometry.nx", "geometry.ny"),
    "emitters N (chain, ring)": ("geometry.n",),
    "jitter σ along x and y [λ0]": ("imperfections.jitter_lambda0.0",
                                     "imperfections.jitter_lambda0.1"),
    "jitter σ along z [λ0]": ("imperfections.jitter_lambda0.2",),
    "filling": ("imperfections.filling",),
    "dipole θ [deg] (polar-angle dipoles)": ("dipole.theta_deg",),
}
#: Largest run the explorer starts (estimated seconds on one core); bigger runs are
#: pointed to `choir sweep`, which can use every core or a cluster.
SWEEP_LIMIT_S = 90.0

#: Solved scenarios kept for a quick return, and the largest array kept.
CACHE_ENTRIES = 6
CACHE_MAX_EMITTERS = 1200

#: Most undo steps kept.
UNDO_DEPTH = 50

_GEOMETRY_PARAMS = ["lattice", "n", "nx", "ny", "nz", "spacing", "spacing_y", "radius",
                    "disk_lattice", "chain_axis", "positions", "dipole", "theta_deg",
                    "phi_deg", "dipole_vector", "dipoles_explicit", "environment",
                    "free_space_scale", "wg_forward", "wg_backward", "wg_loss", "wg_k", "wg_axis",
                    "cav_g", "cav_kappa", "cav_detuning", "cav_axis", "cav_polarization",
                    "cav_waist", "cav_standing_wave", "jitter_x", "jitter_y", "jitter_z",
                    "filling", "realisation"]
_DIPOLE_CHOICES = ["x", "y", "z", "sigma+", "sigma-", "radial", "tangential",
                   "polar angles", "complex vector", "per emitter"]
_ANALYSIS_PARAMS = ["probe_kind", "probe_theta_deg", "probe_phi_deg", "probe_polarization",
                    "probe_waist", "probe_from_end", "probe_detuning_min", "probe_detuning_max",
                    "decay_initial", "decay_t_max", "map_plane"]


class ExplorerState(param.Parameterized):
    """Inputs and outputs of one explorer session."""

    # --- geometry -------------------------------------------------------
    lattice = param.Selector(label='Array type', objects=["square", "rectangular", "triangular", "honeycomb",
                                      "kagome", "chain", "ring", "disk", "cubic", "explicit"],
                             default="square", doc="Array generator (no unit); 'explicit' "
                             "holds drawn or loaded positions")
    # bounds are those of the scenario file; softbounds set the slider ranges
    n = param.Integer(20, label='Emitters N', bounds=(2, 10000), softbounds=(2, 600),
                      doc="Emitters in a chain or ring (count, no unit)")
    nx = param.Integer(10, label='Along x (nx)', bounds=(1, 10000), softbounds=(1, 50),
                       doc="Emitters or cells along x (count, no unit)")
    ny = param.Integer(10, label='Along y (ny)', bounds=(1, 10000), softbounds=(1, 50),
                       doc="Emitters or cells along y (count, no unit)")
    nz = param.Integer(3, label='Layers (nz)', bounds=(1, 10000), softbounds=(1, 12),
                       doc="Layers along z of a cubic block (count, no unit)")
    spacing = param.Number(0.3, label='Spacing a [λ0]', bounds=(0.001, 1000.0), softbounds=(0.02, 2.0), step=0.005,
                           doc="Nearest-neighbour distance [λ0]; along x for rectangular")
    spacing_y = param.Number(0.4, label='Spacing along y [λ0]', bounds=(0.001, 1000.0), softbounds=(0.02, 2.0), step=0.005,
                             doc="Rectangular arrays: spacing along y [λ0]")
    radius = param.Number(2.0, label='Disk radius [λ0]', bounds=(0.001, 1000.0), softbounds=(0.05, 12.0), step=0.05,
                          doc="Disk radius [λ0]")
    disk_lattice = param.Selector(label='Disk lattice', objects=["square", "triangular"], default="square",
                                  doc="Lattice cut to the disk (no unit)")
    chain_axis = param.Selector(label='Chain axis', objects=["x", "y", "z"], default="x",
                                doc="Direction of a chain (no unit)")
    positions = param.Array(default=None, allow_None=True,
                            doc="Explicit positions, shape (N, 3) [λ0]")
    # --- dipoles and environment ----------------------------------------
    dipole = param.Selector(label='Dipole orientation', objects=_DIPOLE_CHOICES, default="x",
                            doc="Dipole orientation (no unit); circular presets about z")
    theta_deg = param.Number(90.0, label='Dipole θ from +z [deg]', bounds=(0.0, 180.0), step=1.0,
                             doc="Dipole polar angle from +z [deg]")
    phi_deg = param.Number(0.0, label='Dipole φ from +x [deg]', bounds=(-180.0, 180.0), step=1.0,
                           doc="Dipole azimuth from +x [deg]")
    dipole_vector = param.Array(default=None, allow_None=True,
                                doc="One complex dipole for all emitters, shape (3,) "
                                    "(unit vector, no unit); set from a scenario file")
    dipoles_explicit = param.Array(default=None, allow_None=True,
                                   doc="Per-emitter complex dipoles, shape (N, 3) (unit vectors, no unit)")
    environment = param.Selector(label='Environment', objects=ENVIRONMENTS, default="free space",
                                 doc="Electromagnetic channels, added up (no unit)")
    free_space_scale = param.Number(1.0, label='Free-space scale', bounds=(0.0, 10.0), softbounds=(0.0, 1.5), step=0.01,
                                    doc="Scale of the free-space coupling (no unit; 1 = vacuum)")
    wg_forward = param.Number(0.5, label='Γ forward (+axis) [Γ0]', bounds=(0.0, 1e4), softbounds=(0.0, 5.0), step=0.01,
                              doc="Waveguide: decay rate into +axis [Γ0]")
    wg_backward = param.Number(0.5, label='Γ backward (−axis) [Γ0]', bounds=(0.0, 1e4), softbounds=(0.0, 5.0), step=0.01,
                               doc="Waveguide: decay rate into −axis [Γ0]")
    wg_loss = param.Number(0.0, label="Γ' other decay [Γ0]", bounds=(0.0, 1e4), softbounds=(0.0, 2.0), step=0.01,
                           doc="Waveguide: other decay Γ' [Γ0] (0 when free space is included)")
    wg_k = param.Number(2 * np.pi, label='Guided wavenumber 2π·n_eff [1/λ0]', bounds=(0.01, 1000.0), softbounds=(3.0, 20.0), step=0.01,
                        doc="Waveguide: guided wavenumber 2π·n_eff [1/λ0]")
    wg_axis = param.Selector(label='Waveguide axis', objects=["x", "y", "z"], default="x",
                             doc="Waveguide axis (no unit)")
    cav_g = param.Number(0.5, label='Coupling g [Γ0]', bounds=(0.0, 1e6), softbounds=(0.0, 5.0), step=0.01,
                         doc="Cavity: peak single-emitter coupling g [Γ0]")
    cav_kappa = param.Number(50.0, label='Cavity decay κ [Γ0]', bounds=(1e-6, 1e8), softbounds=(0.5, 500.0), step=0.5,
                             doc="Cavity: energy decay rate κ [Γ0]")
    cav_detuning = param.Number(0.0, label='Detuning ω_c − ω0 [Γ0]', bounds=(-1e8, 1e8), softbounds=(-100.0, 100.0), step=0.5,
                                doc="Cavity: detuning ω_cavity − ω0 [Γ0]")
    cav_axis = param.Selector(label='Cavity axis', objects=["x", "y", "z"], default="z", doc="Cavity axis (no unit)")
    cav_polarization = param.Selector(label='Cavity polarisation (⊥ axis)', objects=["x", "y", "z"], default="x",
                                      doc="Cavity polarisation, not along the axis (no unit)")
    cav_waist = param.Number(None, label='Waist [λ0] (empty: plane mode)', allow_None=True, bounds=(0.05, 1e4), softbounds=(0.2, 20.0),
                             step=0.1, doc="Cavity: Gaussian waist [λ0]; empty = plane mode")
    cav_standing_wave = param.Boolean(True, label='Standing wave along the axis', doc="Cavity: standing wave along the axis (no unit)")
    # --- units ------------------------------------------------------------
    transition = param.Selector(label='Transition', objects=[*TRANSITIONS, "custom"], default="Rb87 D2",
                                doc="Transition that sets λ0 and Γ0 (no unit)")
    wavelength_nm = param.Number(780.0, label='Custom λ0 [nm]', bounds=(100.0, 1e5), doc="Custom λ0 [nm]")
    linewidth_mhz = param.Number(6.0, label='Custom Γ0/2π [MHz]', bounds=(1e-9, 1e4), doc="Custom Γ0/2π [MHz]")
    transition_label = param.String("custom", doc="Name of a custom transition (text, no unit)")
    units = param.Selector(label='Units', objects=["lab", "internal"], default="lab",
                           doc="Display units (no unit): lab = nm, MHz, ns; internal = λ0, Γ0, 1/Γ0")
    # --- analysis and display -------------------------------------------
    color_by = param.Selector(label='Colour modes by', objects={"participation ratio": "participation_ratio",
                                       "Petermann factor": "petermann",
                                       "collective shift": "shift",
                                       "decay rate (log)": "decay_rate",
                                       "symmetry sector": "symmetry"},
                              default="participation_ratio", doc="Mode figure for the "
                              "spectrum colours (no unit)")
    selected_mode = param.Integer(0, label='Selected mode (0 = most subradiant)', bounds=(0, 9999),
                                  doc="Selected mode (index, 0 = most subradiant; no unit)")
    lens_na = param.Number(0.5, label='Lens NA', bounds=(0.05, 1.0), step=0.01,
                           doc="Numerical aperture of the collection lens (no unit)")
    lens_axis = param.Selector(label='Lens looks along', objects=["+z", "-z"], default="+z",
                               doc="Lens looks along this axis (no unit)")
    far_field_scale = param.Selector(label='Far-field colour scale', objects=["linear", "log"], default="log",
                                     doc="Colour scale of the far-field view (no unit); log "
                                     "shows 4 decades below the maximum")
    projection = param.Selector(label='Array view plane', objects=["xy", "xz", "yz"], default="xy",
                                doc="Plane of the array view (no unit)")
    scenario_name = param.String("", doc="Scenario name (text, no unit)")
    description = param.String("", doc="Scenario description (text, no unit)")
    # --- probe, field map and decay (linear response, single excitation) ---
    probe_kind = param.Selector(label='Probe', objects={"plane wave": "plane_wave",
                                         "Gaussian beam (along +z)": "gaussian_beam",
                                         "guided (waveguide)": "guided"},
                                default="plane_wave", doc="Weak probe for the scan (no unit)")
    probe_theta_deg = param.Number(0.0, label='Probe direction θ from +z [deg]', bounds=(0.0, 180.0), step=1.0,
                                   doc="Plane-wave direction: polar angle from +z [deg]")
    probe_phi_deg = param.Number(0.0, label='Probe direction φ from +x [deg]', bounds=(-180.0, 180.0), step=1.0,
                                 doc="Plane-wave direction: azimuth from +x [deg]")
    probe_polarization = param.Selector(label='Probe polarisation (free-space probes)', objects=["x", "y", "sigma+", "sigma-"], default="x",
                                        doc="Probe polarisation (no unit), made transverse")
    probe_waist = param.Number(2.0, label='Beam waist [λ0]', bounds=(0.1, 1e4), softbounds=(0.5, 10.0), step=0.1,
                               doc="Gaussian beam waist at the array centre [λ0]")
    probe_from_end = param.Selector(label='Guided probe enters at', objects={"−axis end": "-", "+axis end": "+"}, default="-",
                                    doc="Guided probe enters at this end (no unit)")
    probe_detuning_min = param.Number(-5.0, label='Scan from Δ [Γ0]', bounds=(-1e6, 1e6), softbounds=(-50.0, 0.0),
                                      step=0.1, doc="Scan start, probe detuning [Γ0]")
    probe_detuning_max = param.Number(5.0, label='Scan to Δ [Γ0]', bounds=(-1e6, 1e6), softbounds=(0.0, 50.0),
                                      step=0.1, doc="Scan end, probe detuning [Γ0]")
    decay_initial = param.Selector(label='Decay starts from', objects={"selected mode": "mode", "first emitter": "emitter",
                                            "state written by a short pulse": "pulse"},
                                   default="mode", doc="Initial state of the decay curve (no unit)")
    decay_t_max = param.Number(10.0, label='Decay curve length [1/Γ0]', bounds=(0.01, 1e7), softbounds=(1.0, 200.0), step=1.0,
                               doc="Length of the decay curve [1/Γ0]")
    map_plane = param.Selector(label='Field-map plane', objects=["xz", "yz", "xy"], default="xz",
                               doc="Plane of the field map through the array centre (no unit)")
    bands_polarization = param.Selector(label='Dipoles in the bands', 
        objects={"the array's dipole": "scenario", "all three polarisations": "all"},
        default="scenario", doc="Bands: the array's dipole on every site, or the full vector "
        "problem with x, y and z dipoles on every site (no unit)")
    bands_visible = param.Boolean(False, doc="Bands are computed while their view is open "
                                  "(no unit)")
    probe_visible = param.Boolean(False, doc="The probe scan, field map and decay are computed "
                                  "while their view is open (no unit)")

    jitter_x = param.Number(0.0, label='Jitter σ along x [λ0]', bounds=(0.0, 1.0), softbounds=(0.0, 0.1), step=0.001,
                            doc="Position jitter, standard deviation along x [λ0]")
    jitter_y = param.Number(0.0, label='Jitter σ along y [λ0]', bounds=(0.0, 1.0), softbounds=(0.0, 0.1), step=0.001,
                            doc="Position jitter, standard deviation along y [λ0]")
    jitter_z = param.Number(0.0, label='Jitter σ along z [λ0]', bounds=(0.0, 1.0), softbounds=(0.0, 0.2), step=0.001,
                            doc="Position jitter, standard deviation along z [λ0]")
    filling = param.Number(1.0, label='Filling (share of occupied sites)', bounds=(0.01, 1.0), step=0.01,
                           doc="Probability that a site holds an emitter (no unit)")
    realisation = param.Integer(0, label='Realisation shown', bounds=(0, 2 ** 32 - 1),
                                doc="Which random realisation of the imperfect array is shown "
                                    "(count)")

    sweep_vary = param.Selector(label='Vary', objects=list(SWEEP_PARAMETERS), default="nothing (one ensemble)",
                                doc="Sweep: the parameter varied (no unit)")
    sweep_from = param.Number(0.2, label='From', bounds=(-1e4, 1e4), doc="Sweep: first value [unit of the "
                              "parameter varied]")
    sweep_to = param.Number(0.8, label='To', bounds=(-1e4, 1e4), doc="Sweep: last value [unit of the "
                            "parameter varied]")
    sweep_points = param.Integer(5, label='Values', bounds=(2, 25), doc="Sweep: number of values (count)")
    sweep_realisations = param.Integer(20, label='Realisations per value', bounds=(1, 1000),
                                       doc="Sweep: random realisations per value (count)")
    sweep_figure = param.Selector(label='Figure', 
        objects={"most subradiant decay rate": "most_subradiant_rate",
                 "most radiant decay rate": "most_radiant_rate",
                 "shift of the most subradiant mode": "most_subradiant_shift",
                 "emitters left after vacancies": "n_emitters",
                 "probe signal at Δ = 0 (the probe panel's)": "probe_signal"},
        default="most_subradiant_rate", doc="Sweep: the figure plotted (no unit)")
    sweep_fit = param.Boolean(False, label='Log axes and a power-law fit', doc="Sweep: log axes and a power-law fit (no unit)")

    session_key = param.String("", doc="Key of this browser session's autosaved scenario on "
                               "the server, carried in the page address (text, no unit)")

    # --- outputs ------------------------------------------------------------
    result = param.Parameter(None, doc="Latest solved arrangement, a Result (no unit)")
    mode_result = param.Parameter(None, doc="Figures of the selected mode, a ModeResult (no unit)")
    analysis = param.Parameter(None, doc="Probe scan, field map and decay, an Analysis (no unit)")
    bands = param.Parameter(None, doc="Bands of the infinite lattice, a BandsResult (no unit)")
    bands_computing = param.Boolean(False, doc="True while the bands are computed (no unit)")
    sweep = param.Parameter(None, doc="Last ensemble or sweep, a SweepResult (no unit)")
    sweep_progress = param.Number(0.0, bounds=(0.0, 1.0), doc="Share of the sweep done (no unit)")
    sweep_running = param.Boolean(False, doc="True while a sweep runs (no unit)")
    message = param.String("", doc="Last refusal or error, shown to the user (text, no unit)")
    busy = param.Boolean(False, doc="True while a computation runs (no unit)")
    undo_depth = param.Integer(0, bounds=(0, UNDO_DEPTH), doc="Edits that can be undone (count)")

    def __init__(self, scenario: scn.Scenario | None = None, *, runner=None, **params) -> None:
        super().__init__(**params)
        self.runner = runner or SyncRunner()
        self._solver = Latest(self.runner, self._accept_result)
        self._mode_job = Latest(self.runner, self._accept_mode)
        self._analysis_job = Latest(self.runner, self._accept_analysis)
        self._bands_job = Latest(self.runner, self._accept_bands)
        self._cache: OrderedDict[str, Result] = OrderedDict()
        self._sweep_cancel = threading.Event()
        self._undo: list[scn.Scenario] = []
        self._applying = False
        self._closed = False
        self._loaded: scn.Scenario | None = None
        self._file_environment: tuple = ((("kind", "free_space"),),)
        self._seed: int | None = None
        self._nearest: tuple | None = None  # (result, its nearest-neighbour distance)
        if scenario is not None:
            self.apply_scenario(scenario, solve=False)

    def close(self) -> None:
        """The page is gone: drop waiting jobs, start no new ones, stop a running sweep."""
        self._closed = True
        for kind in (self._solver, self._mode_job, self._analysis_job, self._bands_job):
            kind.cancel()
        self._sweep_cancel.set()
        self.runner.close()

    # ------------------------------------------------------------ scenario
    @property
    def transition_obj(self) -> Transition:
        if self.transition == "custom":
            return Transition(self.wavelength_nm, self.linewidth_mhz, self.transition_label)
        return TRANSITIONS[self.transition]

    def to_scenario(self) -> scn.Scenario:
        """The current inputs as a validated :class:`Scenario` (raises ScenarioError)."""
        return scn.from_dict(self._document())

    def _document(self, positions: np.ndarray | None = None,
                  dipoles: np.ndarray | None = None) -> dict:
        """Scenario document of the inputs; ``positions``/``dipoles`` override the geometry."""
        if positions is None and is_imperfect(self):
            self._ensure_seed()
        return scenario_document(self, seed=self._seed, file_environment=self._file_environment,
                                 positions=positions, dipoles=dipoles)

    def scenario_for_export(self) -> scn.Scenario:
        """The scenario including the selected mode (what a colleague should get)."""
        sc = self.to_scenario()
        n = self.result.emitters.n if self.result is not None else sc.emitters().n
        return replace(sc, selected_mode=min(self.selected_mode, n - 1))

    def apply_scenario(self, sc: scn.Scenario, *, solve: bool = True) -> None:
        """Replace all inputs by those of ``sc`` in one update (one recompute)."""
        upd = parameters_of(sc)
        upd["message"] = ""
        self._file_environment = sc.environment
        self._seed = sc.seed
        self._loaded = sc
        self._applying = True
        try:
            self.param.update(**upd)
        finally:
            self._applying = False
        if solve:
            self.solve()

    # ------------------------------------------------------------ solving
    @param.depends(*_GEOMETRY_PARAMS, watch=True)
    def _inputs_changed(self) -> None:
        if self._applying:
            return
        if self.lattice == "explicit" and self.positions is None and self.result is not None:
            # switching to "explicit" freezes the current arrangement as a list
            self._applying = True
            try:
                self.positions = np.array(self.result.emitters.positions)
            finally:
                self._applying = False
        self.solve()

    def solve(self) -> None:
        """Validate the inputs and (re)compute the modes.

        A scenario solved recently is served from the cache at once.  Arrays of
        LAZY_FROM emitters or more are solved in two steps: the eigenvalues
        first (the spectrum view draws them), then the eigenvectors.
        """
        if self._closed:
            return
        try:
            sc = self.to_scenario()
        except scn.ScenarioError as exc:
            self.message = f"Not computed — {exc}"
            return
        cached = self._cache.get(scn.dumps(sc))
        if cached is not None:
            self._solver.cancel()
            self._cache.move_to_end(scn.dumps(sc))
            self._accept_result(cached, True)
            return
        self.busy = True
        self._solver.request(lambda: jobs.solve(sc, full=False))

    def _remember(self, res: Result) -> None:
        """Keep a solved scenario for a quick return (undo, a slider moved back)."""
        if not res.modes.has_vectors or res.emitters.n > CACHE_MAX_EMITTERS:
            return
        self._cache[scn.dumps(res.scenario)] = res
        while len(self._cache) > CACHE_ENTRIES:
            self._cache.popitem(last=False)

    def _accept_result(self, res: Result | Exception, current: bool) -> None:
        if isinstance(res, Exception):
            self.busy = False
            shown = self.result
            if shown is not None and not shown.modes.has_vectors:
                self.message = f"Eigenvectors not computed — {res}"
            else:
                self.message = f"Not computed — {res}"
            return
        self.message = ""
        if not res.modes.has_vectors:  # eigenvalues first; the vectors follow
            self.result = res
            if current:
                sc = res.scenario
                self._solve_mode()  # the selected mode's own vector, on the other thread
                self._solver.request(lambda: jobs.solve(sc, full=True))
            return
        self._remember(res)
        if not current:
            # overtaken by a newer step (a drag): spectrum and array follow at once, the
            # mode figures, probe and bands are computed for the latest step only
            self.result = res
            return
        self.busy = False
        mode = min(self.selected_mode, res.modes.n - 1)
        shown = self.mode_result  # figures of this very scenario found before all vectors
        same = (shown is not None and shown.scenario == res.scenario and shown.mode == mode
                and shown.na == self.lens_na and self._mode_job.idle)
        self.result = res
        if mode != self.selected_mode:
            self.selected_mode = mode  # its watcher computes the mode figures
        elif not same:
            self._solve_mode()
        self._analyse()
        self._compute_bands()

    @param.depends("selected_mode", "lens_na", watch=True)
    def _mode_inputs_changed(self) -> None:
        self._solve_mode()

    def _solve_mode(self) -> None:
        res = self.result
        if res is None or self._closed or (not res.modes.has_vectors
                                           and res.emitters.n > jobs.ONE_MODE_LIMIT):
            return
        m, na = min(self.selected_mode, res.modes.n - 1), self.lens_na
        self._mode_job.request(lambda: jobs.mode_figures(res, m, na))

    def _accept_mode(self, mres, current: bool) -> None:
        if isinstance(mres, Exception):
            self.message = f"Mode figures not computed — {mres}"
        else:
            self.mode_result = mres

    # ------------------------------------------------------------ probe analysis
    def probe_model(self) -> Probe:
        """The probe described by the inputs (raises ValueError with the field named)."""
        return probe_of(self)

    @param.depends(*_ANALYSIS_PARAMS, "probe_visible", watch=True)
    def _analysis_inputs_changed(self) -> None:
        if not self._applying:
            self._analyse()

    @param.depends("selected_mode", watch=True)
    def _selected_mode_for_decay(self) -> None:
        if not self._applying and self.decay_initial == "mode":
            self._analyse()

    def _analyse(self) -> None:
        res = self.result
        if res is None or not res.modes.has_vectors or not self.probe_visible or self._closed:
            return
        try:
            probe = self.probe_model()
        except ValueError as exc:
            self.message = f"Probe not computed — {exc}"
            return
        mode = min(self.selected_mode, res.modes.n - 1)
        initial, t_max, plane = self.decay_initial, self.decay_t_max, self.map_plane
        self._analysis_job.request(
            lambda: jobs.probe_analysis(res, probe, initial, mode, t_max, plane))

    def _accept_analysis(self, an, current: bool) -> None:
        if isinstance(an, Exception):
            self.message = f"Probe and decay not computed — {an}"
        else:
            self.analysis = an

    # ------------------------------------------------------------ infinite lattice
    @param.depends("bands_visible", "bands_polarization", watch=True)
    def _bands_inputs_changed(self) -> None:
        self._compute_bands()

    def _compute_bands(self) -> None:
        res = self.result
        if res is None or not self.bands_visible or not res.modes.has_vectors or self._closed:
            return
        vector = self.bands_polarization == "all"
        self.bands_computing = True
        self._bands_job.request(lambda: jobs.lattice_bands(res, vector))

    def _accept_bands(self, br, current: bool) -> None:
        if current:
            self.bands_computing = False
        if isinstance(br, Exception):
            self.message = f"Bands not computed — {br}"
        else:
            self.bands = br

    # ------------------------------------------------------------ ensembles and sweeps
    def _ensure_seed(self) -> int:
        """This session's random seed, drawn once and then kept (and saved with the scenario)."""
        if self._seed is None:
            self._seed = int(np.random.SeedSequence().entropy % 2 ** 32)
        return self._seed

    def sweep_plan(self):
        """The sweep described by the inputs, as an app.sweeps.Plan (raises ValueError)."""
        from physics.ensembles import FigureRequest

        from . import sweeps

        doc = self._document()
        paths = SWEEP_PARAMETERS[self.sweep_vary]
        imp = doc.setdefault("imperfections", {})
        imp["seed"] = self._ensure_seed()
        axes = ()
        if paths is not None:
            if paths[0].startswith("imperfections.jitter"):
                imp.setdefault("jitter_lambda0", [self.jitter_x, self.jitter_y, self.jitter_z])
            if paths[0] == "dipole.theta_deg" and "theta_deg" not in doc["dipole"]:
                raise sweeps.SweepError("sweep: θ can be varied only for 'polar angles' dipoles")
            key = paths[0].split(".")[1]
            if key in ("nx", "n") and key not in doc["geometry"]:
                raise sweeps.SweepError(f"sweep: this array type has no '{key}'")
            lo, hi = self.sweep_from, self.sweep_to
            if self.sweep_fit and lo > 0 and hi > 0:  # even steps on the log axes of a fit
                values = np.geomspace(lo, hi, self.sweep_points)
            else:
                values = np.linspace(lo, hi, self.sweep_points)
            if key in ("nx", "n"):  # counts: whole numbers, each once
                values = np.unique(np.round(values).astype(int))
            axes = (sweeps.Axis(paths, tuple(float(v) for v in values)),)
        request = FigureRequest(detuning=0.0 if self.sweep_figure == "probe_signal" else None)
        return sweeps.Plan(doc, axes, self.sweep_realisations, request, self._seed)

    def sweep_command(self, plan) -> str:
        """The same run as a command line (scenario file: the downloaded one)."""
        parts = ["choir sweep scenario.json", f"--realisations {plan.realisations}",
                 f"--seed {plan.seed}"]
        for a in plan.axes:
            parts.append(f"--vary {','.join(a.paths)}=" + ",".join(repr(v) for v in a.values))
        if plan.request.detuning is not None:
            parts.append(f"--detuning {plan.request.detuning:g}")
        parts.append(f"--plot {self.sweep_figure}")
        if self.sweep_fit and plan.axes:
            parts.append("--fit power")
        return " ".join(parts)

    def run_sweep(self) -> None:
        """Start the ensemble or sweep in the background (refused above SWEEP_LIMIT_S)."""
        from . import sweeps

        if self.sweep_running:
            return
        try:
            plan = self.sweep_plan()
            for p in range(plan.n_points):
                plan.scenario_at(p)
            cost = sweeps.estimate_seconds(plan)
        except (ValueError, scn.ScenarioError) as exc:
            self.message = f"Sweep not started — {exc}"
            return
        if cost > SWEEP_LIMIT_S:
            self.message = (f"Sweep not started — it would take about {cost / 60:.0f} min on one "
                            f"core here (the explorer runs up to {SWEEP_LIMIT_S:.0f} s). Run it "
                            f"headless, on every core or a cluster: {self.sweep_command(plan)}")
            return
        self.message = ""
        self._sweep_cancel = threading.Event()
        cancel, figure, fit = self._sweep_cancel, self.sweep_figure, self.sweep_fit
        folder = tempfile.mkdtemp(prefix="choir-sweep-")
        command = self.sweep_command(plan)
        self.sweep_running, self.sweep_progress = True, 0.0

        def progress(done, total, seconds):
            self.runner.on_loop(lambda: setattr(self, "sweep_progress", done / total))

        def job():
            report = sweeps.run_plan(plan, folder, scheduler="inline", progress=progress,
                                     cancel=cancel)
            return jobs.sweep_outcome(plan, folder, report, figure, fit, command)

        self.runner.submit_long(job, self._accept_sweep)

    def _accept_sweep(self, out) -> None:
        self.sweep_running = False
        if isinstance(out, Exception):
            self.message = f"Sweep stopped — {out}"
            return
        self.sweep_progress = 1.0 if not out.report.cancelled else self.sweep_progress
        self.sweep = out

    def cancel_sweep(self) -> None:
        """Stop the running sweep after the realisations in progress (what is done is kept)."""
        self._sweep_cancel.set()

    def imperfection_text(self) -> str:
        """What the array view shows of an imperfect array, in words ("" when perfect)."""
        res = self.result
        if res is None:
            return ""
        try:
            imp = res.scenario.imperfections_model()
        except scn.ScenarioError:
            return ""
        if imp is None:
            return ""
        sites = res.scenario.clean_emitters().n
        return (f"Realisation {res.scenario.realisation} (seed {imp.seed}): {res.emitters.n} of "
                f"{sites} sites filled; jitter σ = ({imp.jitter[0]:.3g}, {imp.jitter[1]:.3g}, "
                f"{imp.jitter[2]:.3g}) λ0 along x, y, z.")

    # ------------------------------------------------------------ derived
    def nearest_neighbours(self) -> float:
        """Nearest-neighbour distance of the shown array [λ0]; inf for one emitter.

        Computed once per result (the cautions, the array card and the array view
        all ask for it).
        """
        res = self.result
        if self._nearest is None or self._nearest[0] is not res:
            self._nearest = (res, nearest_neighbour_distance(res.emitters))
        return self._nearest[1]

    def cautions(self) -> list[str]:
        """Warnings about leaving the model's range of validity for the current result."""
        out: list[str] = []
        res = self.result
        if res is None:
            return out
        nn = self.nearest_neighbours()
        if nn < NEAR_FIELD_WARN:
            out.append(
                f"Nearest neighbours are {nn:.3g} λ0 apart (< {NEAR_FIELD_WARN} λ0): the 1/r³ "
                f"near field dominates; real emitters are then rarely two-level point dipoles "
                f"(level structure, finite size, motion), so treat shifts with care.")
        out.extend(res.warnings)
        return out

    def is_modified(self) -> bool:
        """Whether the inputs differ from the last scenario loaded (file, upload or start)."""
        if self._loaded is None:
            return False
        try:
            now = self.to_scenario()
        except scn.ScenarioError:
            return True
        # compare what the inputs mean, not how they are written (defaults may be implicit)
        return (now.transition != self._loaded.transition
                or now.emitters() != self._loaded.emitters()
                or now.environment_model() != self._loaded.environment_model())

    def live_drag(self) -> bool:
        """Whether sliders should recompute while dragging (small arrays)."""
        return self.result is None or self.result.emitters.n <= LIVE_DRAG_LIMIT

    # ------------------------------------------------------------ editing
    def edit_positions(self, positions: np.ndarray, origin: np.ndarray) -> None:
        """Replace the geometry by an explicit list (a drawn edit); undoable.

        Parameters
        ----------
        positions : (M, 3) array_like [λ0]
            The edited arrangement.
        origin : (M,) int array_like
            For each emitter, its index in the current arrangement, or −1 if new.
            Per-emitter dipoles follow their emitters; new ones copy emitter 0's.
            A preset (or polar angles) stays a preset.
        """
        positions = np.asarray(positions, dtype=float).reshape(-1, 3)
        origin = np.asarray(origin, dtype=int)
        upd: dict[str, Any] = {"lattice": "explicit", "positions": positions, "jitter_x": 0.0,
                               "jitter_y": 0.0, "jitter_z": 0.0, "filling": 1.0}
        if self.dipole == "per emitter" and self.result is not None:
            old = self.result.emitters.dipoles
            upd["dipoles_explicit"] = np.where((origin >= 0)[:, None],
                                               old[np.clip(origin, 0, None)], old[0])
        try:
            before = self.scenario_for_export()
            trial = self._document(positions=positions, dipoles=upd.get("dipoles_explicit"))
            scn.from_dict(trial)  # refuse before changing anything: a bad edit loses nothing
        except scn.ScenarioError as exc:
            self.message = f"Edit refused — {exc}"
            return
        self._undo.append(before)
        del self._undo[:-UNDO_DEPTH]
        self._applying = True
        try:
            self.param.update(**upd)
        finally:
            self._applying = False
        self.undo_depth = len(self._undo)
        self.solve()

    def step_mode(self, delta: int) -> None:
        """Select the next (+1, more radiant) or previous (−1) mode."""
        if self.result is not None:
            self.selected_mode = max(0, min(self.result.modes.n - 1, self.selected_mode + delta))

    def draw_again(self) -> None:
        """Show the next random realisation of the imperfect array."""
        self.realisation = min(self.realisation + 1, 2 ** 32 - 1)

    def undo(self) -> None:
        """Return to the geometry before the last edit."""
        if not self._undo:
            return
        sc = self._undo.pop()
        self.undo_depth = len(self._undo)
        self.apply_scenario(sc)

    # ------------------------------------------------------------ units for views
    def length_label(self) -> str:
        return "nm" if self.units == "lab" else "λ0"

    def frequency_label(self) -> str:
        return "MHz" if self.units == "lab" else "Γ0"

    def time_label(self) -> str:
        return "ns" if self.units == "lab" else "1/Γ0"

    def to_length(self, x):
        return self.transition_obj.length_nm(x) if self.units == "lab" else np.asarray(x)

    def to_frequency(self, x):
        """A rate or shift in display units (lab: as ordinary frequency Γ/2π, ω/2π)."""
        return self.transition_obj.frequency_mhz(x) if self.units == "lab" else np.asarray(x)

    def to_time(self, x):
        return self.transition_obj.time_ns(x) if self.units == "lab" else np.asarray(x)
