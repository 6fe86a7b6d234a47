"""All state of one explorer session, in one ``param.Parameterized`` class.

The class never touches Bokeh or Panel widgets: views read its outputs
(``result``, ``mode_result``, ``message``, ``busy``) and write its inputs.
Heavy work goes through a *runner*: synchronous in tests and notebooks
without a server, a thread pool with hand-back to the event loop when served
(see :mod:`app.explorer`).  A generation counter drops stale results, so a
slow old solve never overwrites a newer one.
"""
from __future__ import annotations

import math
import tempfile
from collections import OrderedDict
import threading
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable

import numpy as np
import param

from physics import bands as bnd
from physics import scenario as scn
from physics.far_field import far_field_image, lens_fraction
from physics.geometry import Emitters, nearest_neighbour_distance, polar_dipole
from physics import large
from physics.modes import Modes
from physics.solution import solve_scenario
from physics.driving import Probe, field_intensity_map, fit_resonance, probe_scan, scan_signal
from physics.dynamics import decay_observables, evolve, pulse_state, single_emitter_state
from physics.hamiltonian import coupling_matrix
from physics.units import TRANSITIONS, Transition
from physics.waveguide import upstream_emitter

__all__ = ["ExplorerState", "Result", "ModeResult", "BandsResult", "SyncRunner", "LIVE_DRAG_LIMIT",
           "NEAR_FIELD_WARN", "FAR_FIELD_PIXELS"]

#: Sliders recompute while dragging up to this many emitters, on release above.
LIVE_DRAG_LIMIT = 400
#: Nearest-neighbour distance [λ0] below which the explorer warns that the
#: near field dominates and real emitters stop being two-level point dipoles.
NEAR_FIELD_WARN = 0.1
#: Pixels across each hemisphere disc of the far-field view.
FAR_FIELD_PIXELS = 121
#: What the explorer says when eigenvectors carry no meaning.
DEFECTIVE_NOTE = (
    "The coupling matrix is defective (a chiral waveguide makes it triangular, with all "
    "eigenvalues equal): the spectrum still shows the eigenvalues, but eigenvectors carry no "
    "meaning, so mode profiles, far fields, lens and channel figures are not shown. What is "
    "meaningful is shown under 'Probe and decay': the response to a weak probe (e.g. the "
    "transmission of a guided probe) and the decay after exciting the first emitter, both "
    "computed without eigenvectors.")

#: Detunings of the explorer's probe scan, pixels of its field map, points of its decay curve.
ANALYSIS_POINTS = 201
MAP_PIXELS = 61
DECAY_POINTS = 151

#: Path points and zone-map pixels of the explorer's bands view; largest array whose
#: modes are placed on the bands (each needs a Fourier transform).
BANDS_PATH_POINTS = 240
BANDS_MAP_PIXELS = 61
BANDS_PLACE_LIMIT = 2500

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

#: Arrays from this size are solved eigenvalues first, eigenvectors second.
LAZY_FROM = 1000
#: Largest symmetry block whose eigenvectors the explorer computes (time and memory).
EXPLORER_BLOCK_LIMIT = 5000
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
#: Environments the explorer edits; "as loaded from file" keeps a file's own list.
ENVIRONMENTS = ["free space", "free space + waveguide", "waveguide", "free space + cavity",
                "cavity", "waveguide + cavity", "free space + waveguide + cavity",
                "as loaded from file"]
_DIPOLE_CHOICES = ["x", "y", "z", "sigma+", "sigma-", "radial", "tangential",
                   "polar angles", "complex vector", "per emitter"]


@dataclass(frozen=True)
class Result:
    """One solved arrangement."""

    generation: int
    scenario: scn.Scenario
    emitters: Emitters
    modes: Modes
    warnings: tuple[str, ...]
    environment: Any = None  # the environment model (physics object)
    defective: bool = False  # eigenvectors meaningless (e.g. chiral waveguide)
    guided: dict | None = None  # waveguide probe spectrum and decay curve (see physics.waveguide)


@dataclass(frozen=True)
class ModeResult:
    """Figures of the selected mode that need more than the eigen-decomposition."""

    generation: int
    mode: int
    far_field: np.ndarray | None  # (P, 2P) dP/dΩ [Γ0/sr], NaN outside the discs; None: no
    #                               free-space channel or no meaningful eigenvector
    extent: float  # half-width of one disc in direction cosines (1)
    collected_up: float  # share of the mode's total emission into the lens along +z
    collected_down: float  # … along −z
    na: float
    channels: dict  # power into each channel [Γ0]


@dataclass(frozen=True)
class Analysis:
    """Probe scan, field map at the spectrum's peak and a decay curve (see physics.driving)."""

    generation: int
    probe: Any  # physics.driving.Probe
    scan: dict | None  # physics.driving.probe_scan, None if the probe does not apply
    signal: np.ndarray | None
    signal_name: str
    fit: dict | None
    map: tuple | None  # (u, v, |E|² / |E0|²) in λ0, or None
    map_detuning: float
    decay: dict  # physics.dynamics.decay_observables
    decay_label: str
    note: str
    sheet: dict | None = None  # physics.bands.probe_on_sheet: the infinite array, if planar


@dataclass(frozen=True)
class BandsResult:
    """Bands of the infinite lattice behind the current array (see physics.bands)."""

    generation: int
    note: str                 # why there are no bands, or what they leave out ("" if nothing)
    lattice: Any = None       # physics.bands.Chain | PlanarLattice, None when unavailable
    path: Any = None          # physics.bands.BandPath
    bands: Any = None         # physics.bands.Bands along the path
    placed: dict | None = None  # physics.bands.finite_on_bands, None if not placed
    map: tuple | None = None  # (kx, ky, decay (n_bands, ny, nx), shift) over the zone, NaN outside
    orders_centres: np.ndarray | None = None  # −G of orders whose light circles cross the map
    notes: tuple[str, ...] = ()
    vector: bool = False      # all three polarisations


@dataclass(frozen=True)
class SweepResult:
    """An ensemble or sweep run from the explorer (see app.sweeps)."""

    plan: Any             # app.sweeps.Plan
    summary: list         # app.sweeps.summary_rows
    folder: str           # where results.csv, spectra.csv live
    report: Any           # app.sweeps.RunReport
    histogram: tuple | None  # (edges, counts) of decay rates at the last point, or None
    fit: dict | None      # power-law fit, or None
    figure: str
    command: str          # the same run as a `choir sweep` command


class SyncRunner:
    """Runs jobs at once, in the caller's thread (tests, notebooks without a server)."""

    def submit(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        done(job())

    def on_loop(self, fn: Callable[[], None]) -> None:
        """Run ``fn`` where plot models may change (here: at once)."""
        fn()

    def submit_long(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        """A long job (a sweep): here, at once, like any other."""
        done(job())


def _far_field_image(em: Emitters, c: np.ndarray, pixels: int) -> np.ndarray:
    """dP/dΩ on the orthographic view of both hemispheres, side by side [Γ0/sr]."""
    u = np.linspace(-1.0, 1.0, pixels)
    return np.hstack([far_field_image(em, c, u, side) for side in ("+z", "-z")])


class ExplorerState(param.Parameterized):
    """Inputs and outputs of one explorer session."""

    # --- geometry -------------------------------------------------------
    lattice = param.Selector(objects=["square", "rectangular", "triangular", "honeycomb",
                                      "kagome", "chain", "ring", "disk", "cubic", "explicit"],
                             default="square", doc="Array generator (no unit); 'explicit' "
                             "holds drawn or loaded positions")
    # bounds are those of the scenario file; softbounds set the slider ranges
    n = param.Integer(20, bounds=(2, 10000), softbounds=(2, 600),
                      doc="Emitters in a chain or ring (count, no unit)")
    nx = param.Integer(10, bounds=(1, 10000), softbounds=(1, 50),
                       doc="Emitters or cells along x (count, no unit)")
    ny = param.Integer(10, bounds=(1, 10000), softbounds=(1, 50),
                       doc="Emitters or cells along y (count, no unit)")
    nz = param.Integer(3, bounds=(1, 10000), softbounds=(1, 12),
                       doc="Layers along z of a cubic block (count, no unit)")
    spacing = param.Number(0.3, bounds=(0.001, 1000.0), softbounds=(0.02, 2.0), step=0.005,
                           doc="Nearest-neighbour distance [λ0]; along x for rectangular")
    spacing_y = param.Number(0.4, bounds=(0.001, 1000.0), softbounds=(0.02, 2.0), step=0.005,
                             doc="Rectangular arrays: spacing along y [λ0]")
    radius = param.Number(2.0, bounds=(0.001, 1000.0), softbounds=(0.05, 12.0), step=0.05,
                          doc="Disk radius [λ0]")
    disk_lattice = param.Selector(objects=["square", "triangular"], default="square",
                                  doc="Lattice cut to the disk (no unit)")
    chain_axis = param.Selector(objects=["x", "y", "z"], default="x",
                                doc="Direction of a chain (no unit)")
    positions = param.Array(default=None, allow_None=True,
                            doc="Explicit positions, shape (N, 3) [λ0]")
    # --- dipoles and environment ----------------------------------------
    dipole = param.Selector(objects=_DIPOLE_CHOICES, default="x",
                            doc="Dipole orientation (no unit); circular presets about z")
    theta_deg = param.Number(90.0, bounds=(0.0, 180.0), step=1.0,
                             doc="Dipole polar angle from +z [deg]")
    phi_deg = param.Number(0.0, bounds=(-180.0, 180.0), step=1.0,
                           doc="Dipole azimuth from +x [deg]")
    dipole_vector = param.Array(default=None, allow_None=True,
                                doc="One complex dipole for all emitters, shape (3,) "
                                    "(unit vector, no unit); set from a scenario file")
    dipoles_explicit = param.Array(default=None, allow_None=True,
                                   doc="Per-emitter complex dipoles, shape (N, 3) (unit vectors, no unit)")
    environment = param.Selector(objects=ENVIRONMENTS, default="free space",
                                 doc="Electromagnetic channels, added up (no unit)")
    free_space_scale = param.Number(1.0, bounds=(0.0, 10.0), softbounds=(0.0, 1.5), step=0.01,
                                    doc="Scale of the free-space coupling (no unit; 1 = vacuum)")
    wg_forward = param.Number(0.5, bounds=(0.0, 1e4), softbounds=(0.0, 5.0), step=0.01,
                              doc="Waveguide: decay rate into +axis [Γ0]")
    wg_backward = param.Number(0.5, bounds=(0.0, 1e4), softbounds=(0.0, 5.0), step=0.01,
                               doc="Waveguide: decay rate into −axis [Γ0]")
    wg_loss = param.Number(0.0, bounds=(0.0, 1e4), softbounds=(0.0, 2.0), step=0.01,
                           doc="Waveguide: other decay Γ' [Γ0] (0 when free space is included)")
    wg_k = param.Number(2 * np.pi, bounds=(0.01, 1000.0), softbounds=(3.0, 20.0), step=0.01,
                        doc="Waveguide: guided wavenumber 2π·n_eff [1/λ0]")
    wg_axis = param.Selector(objects=["x", "y", "z"], default="x",
                             doc="Waveguide axis (no unit)")
    cav_g = param.Number(0.5, bounds=(0.0, 1e6), softbounds=(0.0, 5.0), step=0.01,
                         doc="Cavity: peak single-emitter coupling g [Γ0]")
    cav_kappa = param.Number(50.0, bounds=(1e-6, 1e8), softbounds=(0.5, 500.0), step=0.5,
                             doc="Cavity: energy decay rate κ [Γ0]")
    cav_detuning = param.Number(0.0, bounds=(-1e8, 1e8), softbounds=(-100.0, 100.0), step=0.5,
                                doc="Cavity: detuning ω_cavity − ω0 [Γ0]")
    cav_axis = param.Selector(objects=["x", "y", "z"], default="z", doc="Cavity axis (no unit)")
    cav_polarization = param.Selector(objects=["x", "y", "z"], default="x",
                                      doc="Cavity polarisation, not along the axis (no unit)")
    cav_waist = param.Number(None, allow_None=True, bounds=(0.05, 1e4), softbounds=(0.2, 20.0),
                             step=0.1, doc="Cavity: Gaussian waist [λ0]; empty = plane mode")
    cav_standing_wave = param.Boolean(True, doc="Cavity: standing wave along the axis (no unit)")
    # --- units ------------------------------------------------------------
    transition = param.Selector(objects=[*TRANSITIONS, "custom"], default="Rb87 D2",
                                doc="Transition that sets λ0 and Γ0 (no unit)")
    wavelength_nm = param.Number(780.0, bounds=(100.0, 1e5), doc="Custom λ0 [nm]")
    linewidth_mhz = param.Number(6.0, bounds=(1e-9, 1e4), doc="Custom Γ0/2π [MHz]")
    transition_label = param.String("custom", doc="Name of a custom transition (text, no unit)")
    units = param.Selector(objects=["lab", "internal"], default="lab",
                           doc="Display units (no unit): lab = nm, MHz, ns; internal = λ0, Γ0, 1/Γ0")
    # --- analysis and display -------------------------------------------
    color_by = param.Selector(objects={"participation ratio": "participation_ratio",
                                       "Petermann factor": "petermann",
                                       "collective shift": "shift",
                                       "decay rate (log)": "decay_rate",
                                       "symmetry sector": "symmetry"},
                              default="participation_ratio", doc="Mode figure for the "
                              "spectrum colours (no unit)")
    selected_mode = param.Integer(0, bounds=(0, 9999),
                                  doc="Selected mode (index, 0 = most subradiant; no unit)")
    lens_na = param.Number(0.5, bounds=(0.05, 1.0), step=0.01,
                           doc="Numerical aperture of the collection lens (no unit)")
    lens_axis = param.Selector(objects=["+z", "-z"], default="+z",
                               doc="Lens looks along this axis (no unit)")
    far_field_scale = param.Selector(objects=["linear", "log"], default="log",
                                     doc="Colour scale of the far-field view (no unit); log "
                                     "shows 4 decades below the maximum")
    projection = param.Selector(objects=["xy", "xz", "yz"], default="xy",
                                doc="Plane of the array view (no unit)")
    scenario_name = param.String("", doc="Scenario name (text, no unit)")
    description = param.String("", doc="Scenario description (text, no unit)")
    # --- probe, field map and decay (linear response, single excitation) ---
    probe_kind = param.Selector(objects={"plane wave": "plane_wave",
                                         "Gaussian beam (along +z)": "gaussian_beam",
                                         "guided (waveguide)": "guided"},
                                default="plane_wave", doc="Weak probe for the scan (no unit)")
    probe_theta_deg = param.Number(0.0, bounds=(0.0, 180.0), step=1.0,
                                   doc="Plane-wave direction: polar angle from +z [deg]")
    probe_phi_deg = param.Number(0.0, bounds=(-180.0, 180.0), step=1.0,
                                 doc="Plane-wave direction: azimuth from +x [deg]")
    probe_polarization = param.Selector(objects=["x", "y", "sigma+", "sigma-"], default="x",
                                        doc="Probe polarisation (no unit), made transverse")
    probe_waist = param.Number(2.0, bounds=(0.1, 1e4), softbounds=(0.5, 10.0), step=0.1,
                               doc="Gaussian beam waist at the array centre [λ0]")
    probe_from_end = param.Selector(objects={"−axis end": "-", "+axis end": "+"}, default="-",
                                    doc="Guided probe enters at this end (no unit)")
    probe_detuning_min = param.Number(-5.0, bounds=(-1e6, 1e6), softbounds=(-50.0, 0.0),
                                      step=0.1, doc="Scan start, probe detuning [Γ0]")
    probe_detuning_max = param.Number(5.0, bounds=(-1e6, 1e6), softbounds=(0.0, 50.0),
                                      step=0.1, doc="Scan end, probe detuning [Γ0]")
    decay_initial = param.Selector(objects={"selected mode": "mode", "first emitter": "emitter",
                                            "state written by a short pulse": "pulse"},
                                   default="mode", doc="Initial state of the decay curve (no unit)")
    decay_t_max = param.Number(10.0, bounds=(0.01, 1e7), softbounds=(1.0, 200.0), step=1.0,
                               doc="Length of the decay curve [1/Γ0]")
    map_plane = param.Selector(objects=["xz", "yz", "xy"], default="xz",
                               doc="Plane of the field map through the array centre (no unit)")
    bands_polarization = param.Selector(
        objects={"the array's dipole": "scenario", "all three polarisations": "all"},
        default="scenario", doc="Bands: the array's dipole on every site, or the full vector "
        "problem with x, y and z dipoles on every site (no unit)")
    bands_visible = param.Boolean(False, doc="Bands are computed while their view is open "
                                  "(no unit)")

    jitter_x = param.Number(0.0, bounds=(0.0, 1.0), softbounds=(0.0, 0.1), step=0.001,
                            doc="Position jitter, standard deviation along x [λ0]")
    jitter_y = param.Number(0.0, bounds=(0.0, 1.0), softbounds=(0.0, 0.1), step=0.001,
                            doc="Position jitter, standard deviation along y [λ0]")
    jitter_z = param.Number(0.0, bounds=(0.0, 1.0), softbounds=(0.0, 0.2), step=0.001,
                            doc="Position jitter, standard deviation along z [λ0]")
    filling = param.Number(1.0, bounds=(0.01, 1.0), step=0.01,
                           doc="Probability that a site holds an emitter (no unit)")
    realisation = param.Integer(0, bounds=(0, 2 ** 32 - 1),
                                doc="Which random realisation of the imperfect array is shown "
                                    "(count)")

    sweep_vary = param.Selector(objects=list(SWEEP_PARAMETERS), default="nothing (one ensemble)",
                                doc="Sweep: the parameter varied (no unit)")
    sweep_from = param.Number(0.2, bounds=(-1e4, 1e4), doc="Sweep: first value [unit of the "
                              "parameter varied]")
    sweep_to = param.Number(0.8, bounds=(-1e4, 1e4), doc="Sweep: last value [unit of the "
                            "parameter varied]")
    sweep_points = param.Integer(5, bounds=(2, 25), doc="Sweep: number of values (count)")
    sweep_realisations = param.Integer(20, bounds=(1, 1000),
                                       doc="Sweep: random realisations per value (count)")
    sweep_figure = param.Selector(
        objects={"most subradiant decay rate": "most_subradiant_rate",
                 "most radiant decay rate": "most_radiant_rate",
                 "shift of the most subradiant mode": "most_subradiant_shift",
                 "emitters left after vacancies": "n_emitters",
                 "probe signal at Δ = 0 (the probe panel's)": "probe_signal"},
        default="most_subradiant_rate", doc="Sweep: the figure plotted (no unit)")
    sweep_fit = param.Boolean(False, doc="Sweep: log axes and a power-law fit (no unit)")

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
        self._generation = 0
        self._mode_generation = 0
        self._analysis_generation = 0
        self._bands_generation = 0
        self._cache: OrderedDict[str, Result] = OrderedDict()
        self._sweep_cancel = threading.Event()
        self._undo: list[scn.Scenario] = []
        self._applying = False
        self._loaded: scn.Scenario | None = None
        self._file_environment: tuple = ((("kind", "free_space"),),)
        self._seed: int | None = None
        if scenario is not None:
            self.apply_scenario(scenario, solve=False)

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
        edited = positions is not None
        lat = "explicit" if edited else self.lattice
        if positions is None:
            positions = self.positions
        if dipoles is None:
            dipoles = self.dipoles_explicit
        geo: dict[str, Any] = {"lattice": lat}
        if lat in ("chain", "ring"):
            geo.update(n=self.n, spacing=self.spacing)
            if lat == "chain":
                geo["axis"] = self.chain_axis
        elif lat in ("square", "triangular", "honeycomb", "kagome"):
            geo.update(nx=self.nx, ny=self.ny, spacing=self.spacing)
        elif lat == "rectangular":
            geo.update(nx=self.nx, ny=self.ny, spacing_x=self.spacing, spacing_y=self.spacing_y)
        elif lat == "disk":
            geo.update(radius=self.radius, spacing=self.spacing, disk_lattice=self.disk_lattice)
        elif lat == "cubic":
            geo.update(nx=self.nx, ny=self.ny, nz=self.nz, spacing=self.spacing)
        else:
            if positions is None:
                raise scn.ScenarioError("geometry.positions", "no explicit positions yet")
            geo["positions"] = [[float(v) for v in p] for p in positions]
        if self.dipole == "polar angles":
            dip: dict[str, Any] = {"theta_deg": self.theta_deg, "phi_deg": self.phi_deg}
        elif self.dipole == "complex vector":
            if self.dipole_vector is None:
                raise scn.ScenarioError("dipole", "no complex dipole vector loaded")
            dip = {"vector": [[float(c.real), float(c.imag)] for c in self.dipole_vector]}
        elif self.dipole == "per emitter":
            if dipoles is None or lat != "explicit":
                raise scn.ScenarioError("dipole", "per-emitter dipoles need an explicit geometry")
            dip = {"per_emitter": [[[float(c.real), float(c.imag)] for c in d]
                                   for d in dipoles]}
        else:
            dip = {"preset": self.dipole}
        tr: dict[str, Any] = {"preset": self.transition}
        if self.transition == "custom":
            tr = {"wavelength_nm": self.wavelength_nm, "linewidth_mhz": self.linewidth_mhz}
            if self.transition_label and self.transition_label != "custom":
                tr["label"] = self.transition_label
        doc: dict[str, Any] = {"format": scn.FORMAT, "version": scn.VERSION}
        if self.scenario_name:
            doc["name"] = self.scenario_name
        if self.description:
            doc["description"] = self.description
        doc.update(transition=tr, geometry=geo, dipole=dip, environment=self._environment_parts(),
                   analysis={"lens_na": self.lens_na, "lens_axis": self.lens_axis},
                   display={"units": self.units, "color_by": self.color_by})
        # a drawn edit (``positions`` given) is the realised arrangement: no more imperfections
        imperfect = not edited and (self.filling < 1.0
                                    or any((self.jitter_x, self.jitter_y, self.jitter_z)))
        if imperfect:
            self._ensure_seed()
        if self._seed is not None:
            doc["imperfections"] = {"seed": self._seed}
        if imperfect:
            doc["imperfections"].update(
                jitter_lambda0=[self.jitter_x, self.jitter_y, self.jitter_z],
                filling=self.filling, realisation=self.realisation)
        doc["probe"] = self._probe_block()
        return doc

    def _probe_block(self) -> dict:
        block: dict[str, Any] = {"kind": self.probe_kind,
                                 "detuning_min": self.probe_detuning_min,
                                 "detuning_max": self.probe_detuning_max,
                                 "points": ANALYSIS_POINTS}
        if self.probe_kind == "plane_wave":
            block["direction"] = list(self.probe_model().direction)
            block["polarization"] = self.probe_polarization
        elif self.probe_kind == "gaussian_beam":
            block.update(waist=self.probe_waist, polarization=self.probe_polarization)
        else:
            block["from_end"] = self.probe_from_end
        return block

    def _environment_parts(self) -> list[dict]:
        if self.environment == "as loaded from file":
            return [{k: list(v) if isinstance(v, tuple) else v for k, v in part}
                    for part in self._file_environment]
        parts: list[dict] = []
        if "free space" in self.environment:
            parts.append({"kind": "free_space"} if self.free_space_scale == 1.0 else
                         {"kind": "free_space", "scale": self.free_space_scale})
        if "waveguide" in self.environment:
            parts.append({"kind": "waveguide", "gamma_forward": self.wg_forward,
                          "gamma_backward": self.wg_backward, "gamma_loss": self.wg_loss,
                          "k_guided": self.wg_k, "axis": self.wg_axis})
        if "cavity" in self.environment:
            part = {"kind": "cavity", "g": self.cav_g, "kappa": self.cav_kappa,
                    "detuning": self.cav_detuning, "axis": self.cav_axis,
                    "polarization": self.cav_polarization,
                    "standing_wave": self.cav_standing_wave}
            if self.cav_waist is not None:
                part["waist"] = self.cav_waist
            parts.append(part)
        return parts

    def _apply_environment(self, parts: tuple, upd: dict) -> None:
        """Map a scenario's environment onto the editable parameters, or keep it verbatim."""
        kinds = [dict(p)["kind"] for p in parts]
        names = {"free_space": "free space", "waveguide": "waveguide", "cavity": "cavity"}
        label = " + ".join(names[k] for k in ("free_space", "waveguide", "cavity") if k in kinds)
        fits = len(kinds) == len(set(kinds)) and label in ENVIRONMENTS
        fits = fits and kinds == [k for k in ("free_space", "waveguide", "cavity") if k in kinds]
        cav = [dict(p) for p in parts if dict(p)["kind"] == "cavity"]
        fits = fits and not (cav and "center" in cav[0] and any(cav[0]["center"]))
        fits = fits and not (cav and "k_cavity" in cav[0] and cav[0]["k_cavity"] != 2 * np.pi)
        self._file_environment = parts
        if not fits:
            upd["environment"] = "as loaded from file"
            return
        upd["environment"] = label
        for part in parts:
            p = dict(part)
            if p["kind"] == "free_space":
                upd["free_space_scale"] = p.get("scale", 1.0)
            elif p["kind"] == "waveguide":
                upd.update(wg_forward=p["gamma_forward"], wg_backward=p["gamma_backward"],
                           wg_loss=p.get("gamma_loss", 0.0), wg_k=p.get("k_guided", 2 * np.pi),
                           wg_axis=p.get("axis", "z"))
            else:
                upd.update(cav_g=p["g"], cav_kappa=p["kappa"], cav_detuning=p.get("detuning", 0.0),
                           cav_axis=p.get("axis", "z"), cav_polarization=p.get("polarization", "x"),
                           cav_waist=p.get("waist"), cav_standing_wave=p.get("standing_wave", True))

    def _apply_probe(self, sc: scn.Scenario, upd: dict) -> None:
        if sc.probe is None:
            kinds = [dict(p)["kind"] for p in sc.environment]
            upd["probe_kind"] = "guided" if "waveguide" in kinds else "plane_wave"
            return
        p = dict(sc.probe)
        upd["probe_kind"] = p["kind"]
        for key, name in (("detuning_min", "probe_detuning_min"),
                          ("detuning_max", "probe_detuning_max"), ("waist", "probe_waist"),
                          ("from_end", "probe_from_end")):
            if key in p:
                upd[name] = p[key]
        if isinstance(p.get("polarization"), str) and p["polarization"] in ("x", "y", "sigma+",
                                                                             "sigma-"):
            upd["probe_polarization"] = p["polarization"]
        if "direction" in p:
            d = np.asarray(p["direction"], float)
            d = d / np.linalg.norm(d)
            upd["probe_theta_deg"] = float(np.degrees(np.arccos(np.clip(d[2], -1.0, 1.0))))
            upd["probe_phi_deg"] = float(np.degrees(np.arctan2(d[1], d[0])))

    def scenario_for_export(self) -> scn.Scenario:
        """The scenario including the selected mode (what a colleague should get)."""
        sc = self.to_scenario()
        n = self.result.emitters.n if self.result is not None else sc.emitters().n
        return replace(sc, selected_mode=min(self.selected_mode, n - 1))

    def apply_scenario(self, sc: scn.Scenario, *, solve: bool = True) -> None:
        """Replace all inputs by those of ``sc`` in one update (one recompute)."""
        g = dict(sc.geometry)
        d = dict(sc.dipole)
        upd: dict[str, Any] = {"lattice": g["lattice"]}
        for key, name in (("n", "n"), ("nx", "nx"), ("ny", "ny"), ("nz", "nz"),
                          ("spacing", "spacing"), ("spacing_x", "spacing"),
                          ("spacing_y", "spacing_y"), ("radius", "radius"),
                          ("disk_lattice", "disk_lattice"), ("axis", "chain_axis")):
            if key in g:
                upd[name] = g[key]
        upd["positions"] = np.array(g["positions"], float) if "positions" in g else None
        upd["dipoles_explicit"] = None
        if "preset" in d:
            upd["dipole"] = d["preset"]
        elif "theta_deg" in d:
            phi = d["phi_deg"]
            if not -180.0 <= phi <= 180.0:  # same direction, within the slider's range
                phi = ((phi + 180.0) % 360.0) - 180.0
            upd.update(dipole="polar angles", theta_deg=d["theta_deg"], phi_deg=phi)
        elif "vector" in d:
            upd.update(dipole="complex vector", dipole_vector=np.array(d["vector"], dtype=complex))
        else:
            upd.update(dipole="per emitter",
                       dipoles_explicit=np.array(d["per_emitter"], dtype=complex))
        if upd["lattice"] == "explicit" and upd["positions"] is None:
            upd["positions"] = np.array(sc.emitters().positions)
        self._apply_environment(sc.environment, upd)
        self._apply_probe(sc, upd)
        tr = sc.transition
        if sc.transition_preset is not None:
            upd["transition"] = sc.transition_preset
        else:
            upd.update(transition="custom", wavelength_nm=tr.wavelength_nm,
                       linewidth_mhz=tr.linewidth_mhz, transition_label=tr.name)
        upd.update(units=sc.display_units, color_by=sc.color_by, lens_na=sc.lens_na,
                   lens_axis=sc.lens_axis, scenario_name=sc.name, description=sc.description,
                   selected_mode=sc.selected_mode, message="")
        self._seed = sc.seed
        try:
            imp = sc.imperfections_model()
        except scn.ScenarioError:
            imp = None
        jx, jy, jz = imp.jitter if imp is not None else (0.0, 0.0, 0.0)
        upd.update(jitter_x=jx, jitter_y=jy, jitter_z=jz,
                   filling=imp.filling if imp is not None else 1.0,
                   realisation=sc.realisation)
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
        """Validate the inputs and (re)compute the modes through the runner.

        A scenario solved recently is served from the cache at once.  Arrays of
        LAZY_FROM emitters or more are solved in two steps: the eigenvalues
        first (the spectrum view draws them), then the eigenvectors.
        """
        try:
            sc = self.to_scenario()
        except scn.ScenarioError as exc:
            self.message = f"Not computed — {exc}"
            return
        self._generation += 1
        gen = self._generation
        key = scn.dumps(sc)
        cached = self._cache.get(key)
        if cached is not None:
            self._cache.move_to_end(key)
            self._accept_result(replace(cached, generation=gen))
            return
        self.busy = True
        self.runner.submit(lambda: self._solve_job(gen, sc), self._accept_result)

    @staticmethod
    def _solve_job(gen: int, sc: scn.Scenario, *, full: bool = False) -> Result | Exception:
        try:
            em = sc.emitters()
            if em.n >= LAZY_FROM and not full:
                env = sc.environment_model()
                w, sector, names = large.spectrum(em, env)
                return Result(gen, sc, em, Modes.spectrum_only(w, sector, names), (), env)
            if em.n >= LAZY_FROM:
                block = large.largest_block(em, sc.environment_model())
                if block > EXPLORER_BLOCK_LIMIT:
                    raise ValueError(
                        f"the spectrum is shown, but every eigenvector of {em.n} emitters (largest "
                        f"symmetry block {block}, allowed up to {EXPLORER_BLOCK_LIMIT}) is beyond "
                        f"the explorer; for chosen modes use `choir solve --modes K` on the "
                        f"downloaded scenario")
            sol = solve_scenario(sc)
        except (ValueError, MemoryError, np.linalg.LinAlgError) as exc:
            return exc
        notes = sol.notes + ((DEFECTIVE_NOTE,) if sol.defective else ())
        return Result(gen, sc, sol.emitters, sol.modes, notes, sol.environment, sol.defective,
                      sol.guided)

    def _remember(self, res: Result) -> None:
        """Keep a solved scenario for a quick return (undo, a slider moved back)."""
        size = res.emitters.n
        if not res.modes.has_vectors or size > CACHE_MAX_EMITTERS:
            return
        self._cache[scn.dumps(res.scenario)] = res
        while len(self._cache) > CACHE_ENTRIES:
            self._cache.popitem(last=False)

    def _accept_result(self, res: Result | Exception) -> None:
        if isinstance(res, Exception):
            self.busy = False
            shown = self.result
            if shown is not None and shown.generation == self._generation \
                    and not shown.modes.has_vectors:
                self.message = f"Eigenvectors not computed — {res}"
            else:
                self.message = f"Not computed — {res}"
            return
        if res.generation != self._generation:
            return  # a newer request is on its way
        mode = min(self.selected_mode, res.modes.n - 1)
        self.message = ""
        if not res.modes.has_vectors:  # eigenvalues first; the vectors follow
            self.busy = True
            self.result = res
            gen, sc = res.generation, res.scenario
            self.runner.submit(lambda: self._solve_job(gen, sc, full=True), self._accept_result)
            return
        self.busy = False
        self._remember(res)
        self.result = res
        if mode != self.selected_mode:
            self.selected_mode = mode  # its watcher computes the mode figures
        else:
            self._solve_mode()
        self._analyse()
        self._compute_bands()

    @param.depends("selected_mode", "lens_na", watch=True)
    def _mode_inputs_changed(self) -> None:
        self._solve_mode()

    def _solve_mode(self) -> None:
        res = self.result
        if res is None or not res.modes.has_vectors:
            return
        m = min(self.selected_mode, res.modes.n - 1)
        self._mode_generation += 1
        gen, na = self._mode_generation, self.lens_na
        self.runner.submit(lambda: self._mode_job(gen, res, m, na), self._accept_mode)

    @staticmethod
    def _mode_job(gen: int, res: Result, m: int, na: float) -> ModeResult:
        if res.defective:
            return ModeResult(gen, m, None, 1.0, math.nan, math.nan, na, {})
        em, env, c = res.emitters, res.environment, res.modes.vectors[:, m]
        rate = float(res.modes.decay_rates[m])  # total emitted power of a unit eigenvector
        weight = env.free_space_weight
        img = weight * _far_field_image(em, c, FAR_FIELD_PIXELS) if weight > 0 else None
        up = lens_fraction(em, env, c, na, "+z", rate)
        down = lens_fraction(em, env, c, na, "-z", rate)
        return ModeResult(gen, m, img, 1.0, up, down, na, env.emitted_power(em, c))

    def _accept_mode(self, mres: ModeResult | Exception) -> None:
        if isinstance(mres, Exception):
            self.message = f"Mode figures not computed — {mres}"
        elif mres.generation == self._mode_generation:
            self.mode_result = mres

    # ------------------------------------------------------------ probe analysis
    _ANALYSIS_PARAMS = ["probe_kind", "probe_theta_deg", "probe_phi_deg", "probe_polarization",
                        "probe_waist", "probe_from_end", "probe_detuning_min",
                        "probe_detuning_max", "decay_initial", "decay_t_max", "map_plane"]

    def probe_model(self) -> Probe:
        """The probe described by the inputs (raises ValueError with the field named)."""
        direction = tuple(float(v) for v in polar_dipole(
            np.radians(self.probe_theta_deg), np.radians(self.probe_phi_deg)).real)
        return Probe(self.probe_kind, direction=direction, polarization=self.probe_polarization,
                     waist=self.probe_waist, from_end=self.probe_from_end,
                     detuning_min=self.probe_detuning_min, detuning_max=self.probe_detuning_max,
                     points=ANALYSIS_POINTS)

    @param.depends(*_ANALYSIS_PARAMS, watch=True)
    def _analysis_inputs_changed(self) -> None:
        if not self._applying:
            self._analyse()

    @param.depends("selected_mode", watch=True)
    def _selected_mode_for_decay(self) -> None:
        if not self._applying and self.decay_initial == "mode":
            self._analyse()

    def _analyse(self) -> None:
        res = self.result
        if res is None or not res.modes.has_vectors:
            return
        try:
            probe = self.probe_model()
        except ValueError as exc:
            self.message = f"Probe not computed — {exc}"
            return
        self._analysis_generation += 1
        gen, mode = self._analysis_generation, min(self.selected_mode, res.modes.n - 1)
        initial, t_max, plane = self.decay_initial, self.decay_t_max, self.map_plane
        self.runner.submit(lambda: self._analysis_job(gen, res, probe, initial, mode, t_max,
                                                      plane), self._accept_analysis)

    @staticmethod
    def _analysis_job(gen, res, probe, initial, mode, t_max, plane) -> Analysis | Exception:
        em, env = res.emitters, res.environment
        note = ""
        try:
            H = coupling_matrix(em, env)
            scan = signal = fit = fmap = None
            name, where = "", 0.0
            try:
                scan = probe_scan(em, env, probe)
            except ValueError as exc:
                note = str(exc).split(": ", 1)[-1]
            if scan is not None:
                signal, name = scan_signal(scan, probe.kind)
                where = float(scan["detunings"][int(np.argmax(signal))])
                fit = fit_resonance(scan["detunings"], signal)
                if probe.kind != "guided":
                    lo, hi = em.positions.min(axis=0), em.positions.max(axis=0)
                    half = max(2.0, 0.5 * float(np.max(hi - lo)) + 1.0)
                    c_peak = scan["amplitudes"][int(np.argmax(signal))]
                    u, v, inten = field_intensity_map(em, probe, c_peak, plane, half, MAP_PIXELS)
                    e0 = np.sum(np.abs(probe.incident_field(em.positions.mean(axis=0)[None]))**2)
                    fmap = (u, v, inten / e0)
            if initial == "mode" and res.defective:
                initial = "emitter"
                note = (note + " " if note else "") + ("Decay from the first emitter: modes of a "
                                                        "defective matrix carry no meaning.")
            if initial == "mode":
                c0, label = res.modes.vectors[:, mode], f"mode {mode} excited"
            elif initial == "pulse" and probe.kind == "plane_wave":
                c0, label = pulse_state(em, probe.direction, probe.polarization_vector()), \
                    "state written by a short plane-wave pulse"
            else:
                first = upstream_emitter(em, env)  # emitter 0 without a waveguide
                c0, label = single_emitter_state(em.n, first), f"emitter {first} excited"
            times, amps = evolve(H, c0, t_max, DECAY_POINTS)
            decay = decay_observables(H, times, amps, channels=(em, env))
            sheet = None
            if probe.kind != "guided" and res.scenario.lattice in bnd.PERIODIC_KINDS[1:]:
                try:
                    lat, dipole, _ = res.scenario.periodic_model()
                    sheet = bnd.probe_on_sheet(lat, dipole, probe)
                except ValueError:
                    sheet = None  # e.g. grazing incidence on a diffraction order: no comparison
            return Analysis(gen, probe, scan, signal, name, fit, fmap, where, decay, label, note,
                            sheet)
        except (ValueError, MemoryError, np.linalg.LinAlgError, RuntimeError) as exc:
            return exc

    def _accept_analysis(self, an) -> None:
        if isinstance(an, Exception):
            self.message = f"Probe and decay not computed — {an}"
        elif an.generation == self._analysis_generation:
            self.analysis = an

    # ------------------------------------------------------------ infinite lattice
    @param.depends("bands_visible", "bands_polarization", watch=True)
    def _bands_inputs_changed(self) -> None:
        self._compute_bands()

    def _compute_bands(self) -> None:
        res = self.result
        if res is None or not self.bands_visible or not res.modes.has_vectors:
            return
        self._bands_generation += 1
        gen, vector = self._bands_generation, self.bands_polarization == "all"
        self.bands_computing = True
        self.runner.submit(lambda: self._bands_job(gen, res, vector), self._accept_bands)

    @staticmethod
    def _bands_job(gen: int, res: Result, vector: bool) -> BandsResult | Exception:
        try:
            lat, dipole, notes = res.scenario.periodic_model()
        except scn.ScenarioError as exc:
            return BandsResult(gen, f"No bands — {exc}. A drawn or edited array has no "
                               "infinite counterpart either.")
        try:
            pol = "vector" if vector else dipole
            path = bnd.band_path(lat, BANDS_PATH_POINTS, pol)
            along = bnd.bands(lat, path.k, pol)
            placed = None
            if vector:
                notes.append("The finite array's modes are placed on the bands of its own dipole "
                             "only; choose “the array's dipole” to see them.")
            elif res.defective:
                notes.append("The finite array's modes are not placed: its eigenvectors carry no "
                             "meaning (defective matrix).")
            elif res.emitters.n > BANDS_PLACE_LIMIT:
                notes.append(f"The finite array's modes are placed on the bands up to "
                             f"{BANDS_PLACE_LIMIT} emitters; this array has {res.emitters.n}.")
            else:
                placed = bnd.finite_on_bands(lat, res.emitters, res.modes.vectors, dipole, path,
                                             oversample=4 if res.emitters.n <= 1000 else 2)
            fmap = centres = None
            if isinstance(lat, bnd.PlanarLattice):
                kx, ky, inside = bnd.brillouin_zone_grid(lat, BANDS_MAP_PIXELS)
                k = np.stack(np.meshgrid(kx, ky), axis=-1)[inside]
                inner = bnd.bands(lat, k, pol)
                nb = inner.shift.shape[1]
                decay = np.full((nb,) + inside.shape, np.nan)
                shift = np.full((nb,) + inside.shape, np.nan)
                decay[:, inside] = inner.decay_rate.T
                shift[:, inside] = inner.shift.T
                fmap = (kx, ky, decay, shift)
                reach = float(np.hypot(kx[-1], ky[-1])) + bnd.K0
                G = bnd.lattice_points(lat.reciprocal, reach)
                centres = -G
            planar = isinstance(lat, bnd.PlanarLattice)
            check = bnd.ewald_check(lat, path.k[::12], pol) if planar else 0.0
            notes.append("Lattice sums: closed form (polylogarithms)." if check == 0.0 else
                         f"Lattice sums: Ewald; changing its splitting parameter moves H(k) by "
                         f"{check:.0e} (relative).")
            return BandsResult(gen, "", lat, path, along, placed, fmap, centres,
                               tuple(bnd.lattice_notes(lat) + notes), vector)
        except (ValueError, MemoryError, np.linalg.LinAlgError) as exc:
            return exc

    def _accept_bands(self, br) -> None:
        if isinstance(br, Exception):
            self.bands_computing = False
            self.message = f"Bands not computed — {br}"
        elif br.generation == self._bands_generation:
            self.bands_computing = False
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
            try:
                report = sweeps.run_plan(plan, folder, scheduler="inline", progress=progress,
                                         cancel=cancel)
                return self._sweep_outcome(plan, folder, report, figure, fit, command)
            except (ValueError, MemoryError, np.linalg.LinAlgError, OSError) as exc:
                return exc

        self.runner.submit_long(job, self._accept_sweep)

    @staticmethod
    def _sweep_outcome(plan, folder, report, figure, fit, command) -> SweepResult:
        from physics.ensembles import log_histogram

        from . import sweeps

        _, rows = sweeps.read_results(folder)
        summary = sweeps.summary_rows(plan, rows)
        hist = None
        spectra = Path(folder) / sweeps.SPECTRA_FILE
        if spectra.exists() and rows:
            data = np.loadtxt(spectra, delimiter=",", skiprows=1, ndmin=2)
            last = int(max(r["point"] for r in rows))
            if len(data):
                hist = log_histogram(data[data[:, 0] == last, 4])
        power = None
        if fit and len(plan.axes) == 1:
            try:
                power = sweeps.scaling_fit(plan, summary, figure)
            except ValueError:
                power = None
        return SweepResult(plan, summary, folder, report, hist, power, figure, command)

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
    def cautions(self) -> list[str]:
        """Warnings about leaving the model's range of validity for the current result."""
        out: list[str] = []
        res = self.result
        if res is None:
            return out
        nn = nearest_neighbour_distance(res.emitters)
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
