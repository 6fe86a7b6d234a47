"""The explorer's jobs: pure functions of frozen inputs, and how they are run.

Every heavy step of an explorer session is one function here that takes
frozen inputs (a scenario, a solved result, a probe) and returns a frozen
result object, or raises.  They call :mod:`physics` for every number; the
session state (:mod:`app.state`) decides when to run them and the views draw
what they return.

How jobs run:

* a *runner* executes a job and hands its value back where plot models may
  change: :class:`SyncRunner` at once (tests, notebooks), the server's runner
  (:mod:`app.server`) on a thread pool with a hand-back to the event loop;
* :class:`Latest` is the one place that decides which results count: per
  kind of job and session, one job runs at a time and at most one waits; a
  new request replaces the waiting one (the latest request wins, nothing
  queues while a slider is dragged).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np

from physics import bands as bnd
from physics import large
from physics import scenario as scn
from physics.driving import Probe, field_intensity_map, fit_resonance, probe_scan, scan_signal
from physics.dynamics import decay_observables, evolve, pulse_state, single_emitter_state
from physics.free_space import FreeSpace
from physics.far_field import far_field_image, lens_fraction
from physics.geometry import Emitters
from physics.hamiltonian import coupling_matrix
from physics.modes import Modes
from physics.solution import solve_scenario
from physics.waveguide import upstream_emitter

__all__ = ["Result", "ModeResult", "Analysis", "BandsResult", "SweepResult", "SyncRunner",
           "Latest", "solve", "mode_figures", "probe_analysis", "lattice_bands",
           "sweep_outcome", "DEFECTIVE_NOTE", "FAR_FIELD_PIXELS", "LAZY_FROM",
           "EXPLORER_BLOCK_LIMIT"]

#: Errors a job reports to the user as a message (anything else is a bug: logged).
EXPECTED = (ValueError, MemoryError, np.linalg.LinAlgError, RuntimeError, OSError)

#: Pixels across each hemisphere disc of the far-field view.
FAR_FIELD_PIXELS = 121
#: Pixels of the probe's field map and points of its decay curve.
MAP_PIXELS = 61
DECAY_POINTS = 151
#: Path points and zone-map pixels of the bands view; largest array whose modes are
#: placed on the bands (each needs a Fourier transform).
BANDS_PATH_POINTS = 240
BANDS_MAP_PIXELS = 61
BANDS_PLACE_LIMIT = 2500
#: Arrays from this size are solved eigenvalues first, eigenvectors second …
LAZY_FROM = 1000
#: … and so are arrays whose largest symmetry block is this large (a drawn or jittered
#: array without symmetry): the spectrum first, then the selected mode's own vector by
#: inverse iteration, then every eigenvector.  Below, one full solve settles every view
#: sooner (at N = 400 eigenvalues alone save ~60 ms of ~150 ms, and the full solve that
#: must follow costs ~250 ms more; bench/bench_browser.py).
VECTORS_LATER_FROM = 600
#: Largest array whose selected mode is found by inverse iteration before all vectors.
ONE_MODE_LIMIT = 3000
#: Largest symmetry block whose eigenvectors the explorer computes (time and memory).
EXPLORER_BLOCK_LIMIT = 5000

#: What the explorer says when eigenvectors carry no meaning.
DEFECTIVE_NOTE = (
    "The coupling matrix is defective (a chiral waveguide makes it triangular, with all "
    "eigenvalues equal): the spectrum still shows the eigenvalues, but eigenvectors carry no "
    "meaning, so mode profiles, far fields, lens and channel figures are not shown. What is "
    "meaningful is shown under 'Probe and decay': the response to a weak probe (e.g. the "
    "transmission of a guided probe) and the decay after exciting the first emitter, both "
    "computed without eigenvectors.")


# ---------------------------------------------------------------- results

@dataclass(frozen=True)
class Result:
    """One solved arrangement."""

    scenario: scn.Scenario
    emitters: Emitters
    modes: Modes
    warnings: tuple[str, ...]
    environment: Any = None  # the environment model (physics object)
    defective: bool = False  # eigenvectors meaningless (e.g. chiral waveguide)
    guided: dict | None = None  # waveguide probe spectrum and decay curve (physics.waveguide)


@dataclass(frozen=True)
class ModeResult:
    """Figures of the selected mode that need more than the eigen-decomposition."""

    mode: int
    far_field: np.ndarray | None  # (P, 2P) dP/dΩ [Γ0/sr], NaN outside the discs; None: no
    #                               free-space channel or no meaningful eigenvector
    collected_up: float  # share of the mode's total emission into the lens along +z
    collected_down: float  # … along −z
    na: float
    channels: dict  # power into each channel [Γ0]
    # when the result has eigenvalues only: this mode's own vector (by inverse iteration)
    vector: np.ndarray | None = None
    participation: float = math.nan
    petermann: float = math.nan
    scenario: Any = None  # the scenario these figures belong to


@dataclass(frozen=True)
class Analysis:
    """Probe scan, field map at the spectrum's peak and a decay curve (see physics.driving)."""

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


# ---------------------------------------------------------------- jobs

def solve(sc: scn.Scenario, *, full: bool = True) -> Result:
    """Modes of a scenario; with ``full=False``, eigenvalues only for a large array or one
    whose largest symmetry block has VECTORS_LATER_FROM emitters or more."""
    em = sc.emitters()
    later = em.n >= LAZY_FROM or (
        em.n >= VECTORS_LATER_FROM
        and large.largest_block(em, sc.environment_model()) >= VECTORS_LATER_FROM)
    if later and not full:
        env = sc.environment_model()
        w, sector, names = large.spectrum(em, env)
        return Result(sc, em, Modes.spectrum_only(w, sector, names), (), env)
    if em.n >= LAZY_FROM:
        block = large.largest_block(em, sc.environment_model())
        if block > EXPLORER_BLOCK_LIMIT:
            raise ValueError(
                f"the spectrum is shown, but every eigenvector of {em.n} emitters (largest "
                f"symmetry block {block}, allowed up to {EXPLORER_BLOCK_LIMIT}) is beyond "
                f"the explorer; for chosen modes use `choir solve --modes K` on the "
                f"downloaded scenario")
    sol = solve_scenario(sc)
    notes = sol.notes + ((DEFECTIVE_NOTE,) if sol.defective else ())
    return Result(sc, sol.emitters, sol.modes, notes, sol.environment, sol.defective, sol.guided)


def mode_figures(res: Result, m: int, na: float) -> ModeResult:
    """Far field on both hemispheres, lens fractions and channel powers of mode ``m``.

    A result with eigenvalues only (eigenvalues first) gets the mode's own right
    and left vectors by inverse iteration (:func:`physics.large.one_mode`).
    """
    if res.defective:
        return ModeResult(m, None, math.nan, math.nan, na, {}, scenario=res.scenario)
    em, env = res.emitters, res.environment
    one = None
    if res.modes.has_vectors:
        c = res.modes.vectors[:, m]
    else:
        one = large.one_mode(coupling_matrix(em, env), res.modes.eigenvalues[m])
        c = one.vector
    rate = float(res.modes.decay_rates[m])  # total emitted power of a unit eigenvector
    weight = env.free_space_weight
    img = None
    if weight > 0:
        u = np.linspace(-1.0, 1.0, FAR_FIELD_PIXELS)
        img = weight * np.hstack([far_field_image(em, c, u, side) for side in ("+z", "-z")])
    up = lens_fraction(em, env, c, na, "+z", rate)
    down = lens_fraction(em, env, c, na, "-z", rate)
    # free space alone has one output: a unit eigenvector emits its decay rate into it
    # (c†Γc = Γ_m), no coupling matrix needed
    channels = ({env.describe(): rate} if isinstance(env, FreeSpace)
                else env.emitted_power(em, c))
    if one is None:
        return ModeResult(m, img, up, down, na, channels, scenario=res.scenario)
    return ModeResult(m, img, up, down, na, channels, c, one.participation_ratio, one.petermann,
                      res.scenario)


def probe_analysis(res: Result, probe: Probe, initial: str, mode: int, t_max: float,
                   plane: str) -> Analysis:
    """Probe scan, the field map at its peak, a decay curve and the infinite sheet's reflection."""
    em, env = res.emitters, res.environment
    note = ""
    H = coupling_matrix(em, env)  # built once: the scan and the decay curve share it
    # the solved modes replace linear solves and exponentials when well conditioned
    # (physics.driving.eigenbasis_usable); a defective matrix keeps the exact paths
    modes = None if res.defective else res.modes
    scan = signal = fit = fmap = None
    name, where = "", 0.0
    try:
        scan = probe_scan(em, env, probe, coupling=H, modes=modes)
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
            e0 = np.sum(np.abs(probe.incident_field(em.positions.mean(axis=0)[None])) ** 2)
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
    times, amps = evolve(H, c0, t_max, DECAY_POINTS, modes=modes)
    decay = decay_observables(H, times, amps, channels=(em, env))
    sheet = None
    if probe.kind != "guided" and res.scenario.lattice in bnd.PERIODIC_KINDS[1:]:
        try:
            lat, dipole, _ = res.scenario.periodic_model()
            sheet = bnd.probe_on_sheet(lat, dipole, probe)
        except ValueError:
            sheet = None  # e.g. grazing incidence on a diffraction order: no comparison
    return Analysis(probe, scan, signal, name, fit, fmap, where, decay, label, note, sheet)


def lattice_bands(res: Result, vector: bool) -> BandsResult:
    """Bands of the infinite lattice behind ``res``, with the finite modes placed on them."""
    try:
        lat, dipole, notes = res.scenario.periodic_model()
    except scn.ScenarioError as exc:
        return BandsResult(f"No bands — {exc}. A drawn or edited array has no infinite "
                           "counterpart either.")
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
    planar = isinstance(lat, bnd.PlanarLattice)
    if planar:
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
        centres = -bnd.lattice_points(lat.reciprocal, reach)
    check = bnd.ewald_check(lat, path.k[::12], pol) if planar else 0.0
    notes.append("Lattice sums: closed form (polylogarithms)." if check == 0.0 else
                 f"Lattice sums: Ewald; changing its splitting parameter moves H(k) by "
                 f"{check:.0e} (relative).")
    return BandsResult("", lat, path, along, placed, fmap, centres,
                       tuple(bnd.lattice_notes(lat) + notes), vector)


def sweep_outcome(plan, folder: str, report, figure: str, fit: bool,
                  command: str) -> SweepResult:
    """Read a finished (or cancelled) run back: summary, histogram, optional power-law fit."""
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


# ---------------------------------------------------------------- running them

def _call(job: Callable[[], Any]) -> Any:
    """The job's value, or the expected error it raised (shown to the user as a message)."""
    try:
        return job()
    except EXPECTED as exc:
        return exc


class SyncRunner:
    """Runs jobs at once, in the caller's thread (tests, notebooks without a server)."""

    def submit(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        done(_call(job))

    def submit_long(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        """A long job (a sweep): here, at once, like any other."""
        done(_call(job))

    def on_loop(self, fn: Callable[[], None]) -> None:
        """Run ``fn`` where plot models may change (here: at once)."""
        fn()

    def close(self) -> None:
        """Nothing runs in the background here."""

    def gone(self) -> bool:
        """A page shown here is never closed behind the runner's back."""
        return False


class Latest:
    """One kind of job of one session: one runs at a time, the latest request wins.

    ``request(job)`` runs the job now if none of this kind is running;
    otherwise it waits in the single slot, replacing any job waiting there.
    When a job finishes, its value goes to ``accept(value, current)``:
    ``current`` is True when it answers the latest request.  A value overtaken
    by a waiting request is still shown (``current`` False: the picture
    follows a drag at the pace of the computation, and ``accept`` must then
    start no follow-up of this kind), after which the waiting job starts.  A
    value overtaken by a cancel, or an error overtaken by anything, is
    dropped.  Results are shown in the order of their requests.
    """

    def __init__(self, runner, accept: Callable[[Any, bool], None]) -> None:
        self.runner = runner
        self.accept = accept
        self._ticket = 0  # number of the latest request
        self._running = False
        self._waiting: tuple[int, Callable[[], Any]] | None = None

    @property
    def idle(self) -> bool:
        """True when no job of this kind runs or waits."""
        return not self._running and self._waiting is None

    def request(self, job: Callable[[], Any]) -> None:
        self._ticket += 1
        if self._running:
            self._waiting = (self._ticket, job)
        else:
            self._start(self._ticket, job)

    def cancel(self) -> None:
        """Forget the waiting job; the running one's value will be dropped."""
        self._ticket += 1
        self._waiting = None

    def _start(self, ticket: int, job: Callable[[], Any]) -> None:
        self._running = True
        self.runner.submit(job, lambda value: self._finished(ticket, value))

    def _finished(self, ticket: int, value: Any) -> None:
        self._running = False
        newer, self._waiting = self._waiting, None
        current = ticket == self._ticket
        if current or (newer is not None and not isinstance(value, Exception)):
            self.accept(value, current)
        if newer is not None and not self._running:
            self._start(*newer)
