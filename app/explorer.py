"""The Choir explorer: layout, controls, sharing, and the server/notebook entry points.

``build_explorer(scenario)`` makes one session's page (state + views); it is
what ``choir serve`` serves per browser session, what ``panel serve
app/serve_app.py`` serves, and what ``explorer()`` shows inline in a notebook.
"""
from __future__ import annotations

import html
import io
import os
import re
import secrets
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any, Callable

import numpy as np
import panel as pn

from physics import scenario as scn
from physics.exports import bands_csv, spectrum_csv
from physics.lattices import ring_radius
from physics.waveguide import guided_figures

from .state import NEAR_FIELD_WARN, ExplorerState
from .views import (ArrayView, BandsView, FarFieldView, ProbeView, SpectrumView, SweepView,
                    mode_card_html)

__all__ = ["build_explorer", "explorer", "ServerRunner", "MODEL_NOTE", "serve"]

MODEL_NOTE = (
    "**Model.** One excitation shared by the emitters (weak excitation, linear optics); "
    "Markov approximation (no retardation across the array; a cavity mode only in the "
    "bad-cavity limit 2g√N ≪ κ, no strong coupling); point-like two-level emitters at rest; "
    "waveguides through one guided mode with the given rates. Shifts exclude the "
    "single-emitter Lamb shift. "
    "Results outside these assumptions — saturation, multi-level atoms, emitters closer than "
    f"about {NEAR_FIELD_WARN} λ0, motion — need a different model."
)

# Compute threads shared by all sessions of one server.  Each BLAS call uses one
# thread (set in `serve`), so two sessions can solve at once on two cores.
_EXECUTOR: ThreadPoolExecutor | None = None


def _executor() -> ThreadPoolExecutor:
    global _EXECUTOR
    if _EXECUTOR is None:
        _EXECUTOR = ThreadPoolExecutor(max_workers=2, thread_name_prefix="choir-solve")
    return _EXECUTOR


class ServerRunner:
    """Runs jobs in the thread pool; hands results back on the session's event loop."""

    def __init__(self, doc) -> None:
        self.doc = doc

    def submit_long(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        """A long job (a sweep) on its own thread, so the pool stays free for quick ones."""
        def work():
            try:
                value = job()
            except Exception as exc:  # reported to the user by `done`
                value = exc
            self.doc.add_next_tick_callback(lambda: done(value))

        threading.Thread(target=work, daemon=True, name="choir-sweep").start()

    def submit(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        def finished(fut):
            try:
                value = fut.result()
            except Exception as exc:  # reported to the user by `done`
                value = exc
            self.doc.add_next_tick_callback(lambda: done(value))

        _executor().submit(job).add_done_callback(finished)

    def on_loop(self, fn: Callable[[], None]) -> None:
        """Run ``fn`` on the session's event loop with the document lock.

        Button clicks arrive in a coroutine outside the lock; changing Bokeh
        models from there fails ("_pending_writes should be non-None").
        """
        self.doc.add_next_tick_callback(fn)


# ---------------------------------------------------------------- controls

_VISIBLE = {
    "chain": {"n", "spacing", "chain_axis"},
    "ring": {"n", "spacing"},
    "square": {"nx", "ny", "spacing"},
    "triangular": {"nx", "ny", "spacing"},
    "honeycomb": {"nx", "ny", "spacing"},
    "kagome": {"nx", "ny", "spacing"},
    "rectangular": {"nx", "ny", "spacing", "spacing_y"},
    "disk": {"radius", "spacing", "disk_lattice"},
    "cubic": {"nx", "ny", "nz", "spacing"},
    "explicit": set(),
}

_LABELS = {
    "lattice": "Array type", "n": "Emitters N", "nx": "Along x (nx)", "ny": "Along y (ny)",
    "nz": "Layers (nz)", "spacing": "Spacing a [λ0]", "spacing_y": "Spacing along y [λ0]",
    "radius": "Disk radius [λ0]", "disk_lattice": "Disk lattice", "chain_axis": "Chain axis",
    "dipole": "Dipole orientation", "theta_deg": "Dipole θ from +z [deg]",
    "phi_deg": "Dipole φ from +x [deg]", "environment": "Environment",
    "transition": "Transition", "wavelength_nm": "Custom λ0 [nm]",
    "linewidth_mhz": "Custom Γ0/2π [MHz]", "color_by": "Colour modes by",
    "lens_na": "Lens NA", "lens_axis": "Lens looks along", "projection": "Array view plane",
    "far_field_scale": "Far-field colour scale",
    "free_space_scale": "Free-space scale", "wg_forward": "Γ forward (+axis) [Γ0]",
    "wg_backward": "Γ backward (−axis) [Γ0]", "wg_loss": "Γ' other decay [Γ0]",
    "wg_k": "Guided wavenumber 2π·n_eff [1/λ0]", "wg_axis": "Waveguide axis",
    "cav_g": "Coupling g [Γ0]", "cav_kappa": "Cavity decay κ [Γ0]",
    "cav_detuning": "Detuning ω_c − ω0 [Γ0]", "cav_axis": "Cavity axis",
    "cav_polarization": "Cavity polarisation", "cav_waist": "Waist [λ0] (empty: plane mode)",
    "cav_standing_wave": "Standing wave along the axis",
    "probe_kind": "Probe", "probe_theta_deg": "Probe direction θ from +z [deg]",
    "probe_phi_deg": "Probe direction φ from +x [deg]", "probe_polarization": "Probe polarisation",
    "probe_waist": "Beam waist [λ0]", "probe_from_end": "Guided probe enters at",
    "probe_detuning_min": "Scan from Δ [Γ0]", "probe_detuning_max": "Scan to Δ [Γ0]",
    "decay_initial": "Decay starts from", "decay_t_max": "Decay curve length [1/Γ0]",
    "map_plane": "Field-map plane",
    "jitter_x": "Jitter σ along x [λ0]", "jitter_y": "Jitter σ along y [λ0]",
    "jitter_z": "Jitter σ along z [λ0]", "filling": "Filling (share of occupied sites)",
    "realisation": "Realisation shown", "bands_polarization": "Dipoles in the bands",
    "sweep_vary": "Vary", "sweep_from": "From", "sweep_to": "To", "sweep_points": "Values",
    "sweep_realisations": "Realisations per value", "sweep_figure": "Figure",
    "sweep_fit": "Log axes and a power-law fit",
}


def _slider(state: ExplorerState, name: str, integer: bool = False):
    """A slider that recomputes while dragging for small arrays, on release for large ones."""
    p = state.param[name]
    cls = pn.widgets.IntSlider if integer else pn.widgets.FloatSlider
    kw = {} if integer else {"step": p.step or 0.01}
    lo, hi = p.get_soft_bounds()
    value = getattr(state, name)
    w = cls(label=_LABELS[name], start=min(lo, value), end=max(hi, value), value=value,
            sizing_mode="stretch_width", **kw)

    def live(event):
        if state.live_drag():
            setattr(state, name, event.new)

    def final(event):
        setattr(state, name, event.new)

    w.param.watch(live, "value")
    w.param.watch(final, "value_throttled")
    def from_state(event):
        # a loaded file may lie outside the slider's usual range: widen it
        w.param.update(start=min(w.start, event.new), end=max(w.end, event.new), value=event.new)

    state.param.watch(from_state, name)
    return w


def _select(state: ExplorerState, name: str, widget=pn.widgets.Select, **kw):
    return widget.from_param(state.param[name], label=_LABELS.get(name, name),
                             sizing_mode="stretch_width", **kw)


def _slug(text: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()
    return s[:60] or "choir-scenario"


def _controls(state: ExplorerState) -> tuple[pn.Column, dict]:
    sliders = {name: _slider(state, name, integer=name in ("n", "nx", "ny", "nz"))
               for name in ("n", "nx", "ny", "nz", "spacing", "spacing_y", "radius",
                            "theta_deg", "phi_deg", "lens_na", "free_space_scale", "wg_forward",
                            "wg_backward", "wg_loss", "wg_k", "cav_g", "cav_kappa",
                            "cav_detuning", "probe_theta_deg", "probe_phi_deg", "probe_waist",
                            "probe_detuning_min", "probe_detuning_max", "decay_t_max",
                            "jitter_x", "jitter_y", "jitter_z", "filling")}
    lattice = _select(state, "lattice")
    disk_lattice = _select(state, "disk_lattice")
    chain_axis = _select(state, "chain_axis", pn.widgets.RadioButtonGroup)
    nm = pn.pane.HTML(sizing_mode="stretch_width", styles={"font-size": "12px", "color": "#444"})
    geometry_widgets = {"n": sliders["n"], "nx": sliders["nx"], "ny": sliders["ny"],
                        "nz": sliders["nz"], "spacing": sliders["spacing"],
                        "spacing_y": sliders["spacing_y"], "radius": sliders["radius"],
                        "disk_lattice": disk_lattice, "chain_axis": chain_axis}
    explicit_note = pn.pane.HTML(
        "<i>Explicit positions: edit them in the array view (drawing tool).</i>",
        styles={"font-size": "12px"})

    def show_geometry(*_):
        keep = _VISIBLE[state.lattice]
        for key, w in geometry_widgets.items():
            w.visible = key in keep
        explicit_note.visible = state.lattice == "explicit"
        tr = state.transition_obj
        if state.result is not None:
            em = state.result.emitters
            nn = _nn_text(state)
            extra = ""
            if state.lattice == "ring":
                r = ring_radius(state.n, state.spacing)
                extra = f" · ring radius {r:.3g} λ0 = {tr.length_nm(r):.4g} nm"
            nm.object = (f"a = {state.spacing:.3f} λ0 = {tr.length_nm(state.spacing):.1f} nm "
                         f"· N = {em.n} {nn}{extra}")

    state.param.watch(show_geometry, ["lattice", "result", "spacing", "transition",
                                      "wavelength_nm"])
    show_geometry()

    dipole = _select(state, "dipole")
    angles = pn.Column(sliders["theta_deg"], sliders["phi_deg"], sizing_mode="stretch_width")

    def show_angles(*_):
        angles.visible = state.dipole == "polar angles"

    state.param.watch(show_angles, "dipole")
    show_angles()
    environment = _select(state, "environment")
    env_groups = {
        "free space": pn.Column(sliders["free_space_scale"], sizing_mode="stretch_width"),
        "waveguide": pn.Column(
            sliders["wg_forward"], sliders["wg_backward"], sliders["wg_loss"], sliders["wg_k"],
            pn.pane.HTML("<span style='font-size:12px'>Waveguide axis</span>"),
            _select(state, "wg_axis", pn.widgets.RadioButtonGroup), sizing_mode="stretch_width"),
        "cavity": pn.Column(
            sliders["cav_g"], sliders["cav_kappa"], sliders["cav_detuning"],
            pn.pane.HTML("<span style='font-size:12px'>Cavity axis / polarisation</span>"),
            _select(state, "cav_axis", pn.widgets.RadioButtonGroup),
            _select(state, "cav_polarization", pn.widgets.RadioButtonGroup),
            pn.widgets.FloatInput.from_param(state.param.cav_waist, label=_LABELS["cav_waist"],
                                             sizing_mode="stretch_width"),
            pn.widgets.Checkbox.from_param(state.param.cav_standing_wave,
                                           label=_LABELS["cav_standing_wave"]),
            sizing_mode="stretch_width"),
    }
    probe_groups = {
        "plane_wave": pn.Column(sliders["probe_theta_deg"], sliders["probe_phi_deg"],
                                sizing_mode="stretch_width"),
        "gaussian_beam": pn.Column(sliders["probe_waist"],
                                   pn.pane.HTML("<span style='font-size:11px;color:#555'>Beam "
                                                "along +z, focused at the array centre; "
                                                "paraxial, so keep the waist ≳ 1 λ0.</span>"),
                                   sizing_mode="stretch_width"),
        "guided": pn.Column(_select(state, "probe_from_end", pn.widgets.RadioButtonGroup),
                            sizing_mode="stretch_width"),
    }

    def show_probe(*_):
        for key, group in probe_groups.items():
            group.visible = state.probe_kind == key

    state.param.watch(show_probe, "probe_kind")
    show_probe()
    env_info = pn.pane.HTML(styles={"font-size": "12px", "color": "#444"},
                            sizing_mode="stretch_width")

    def show_environment(*_):
        for key, group in env_groups.items():
            group.visible = key in state.environment
        res = state.result
        if res is None or res.environment is None:
            env_info.object = ""
            return
        text = html.escape(res.environment.describe())
        fig = guided_figures(res.environment)
        if fig is not None:
            text += (f"<br>β-factor {fig['beta']:.3g} (guided share of one emitter's decay) · "
                     f"directionality {fig['directionality']:+.3g} · n_eff = "
                     f"{state.wg_k / (2 * np.pi):.4g}")
        env_info.object = text

    state.param.watch(show_environment, ["environment", "result"])
    show_environment()
    transition = _select(state, "transition")
    wl = pn.widgets.FloatInput.from_param(state.param.wavelength_nm, label=_LABELS["wavelength_nm"],
                                          sizing_mode="stretch_width")
    lw = pn.widgets.FloatInput.from_param(state.param.linewidth_mhz, label=_LABELS["linewidth_mhz"],
                                          sizing_mode="stretch_width")
    custom = pn.Row(wl, lw, sizing_mode="stretch_width")
    tr_info = pn.pane.HTML(styles={"font-size": "12px", "color": "#444"})

    def show_transition(*_):
        custom.visible = state.transition == "custom"
        tr = state.transition_obj
        tr_info.object = (f"λ0 = {tr.wavelength_nm:.6g} nm, Γ0/2π = {tr.linewidth_mhz:.5g} MHz, "
                          f"1/Γ0 = {tr.lifetime_ns:.4g} ns")

    state.param.watch(show_transition, ["transition", "wavelength_nm", "linewidth_mhz"])
    show_transition()
    units = pn.widgets.RadioButtonGroup.from_param(
        state.param.units, label="Units", sizing_mode="stretch_width")
    units_note = pn.pane.HTML("<span style='font-size:11px;color:#555'>lab: nm, MHz (Γ/2π, "
                              "ω/2π), ns · internal: λ0, Γ0, 1/Γ0</span>")
    color_by = _select(state, "color_by")
    projection = _select(state, "projection", pn.widgets.RadioButtonGroup)
    ff_scale = _select(state, "far_field_scale", pn.widgets.RadioButtonGroup)

    mode = pn.widgets.IntInput(label="Selected mode (↑/↓ to step; 0 = most subradiant)",
                               value=state.selected_mode, start=0, step=1,
                               sizing_mode="stretch_width")
    mode.param.watch(lambda e: setattr(state, "selected_mode", int(e.new)), "value")

    def mode_from_state(*_):
        if state.result is not None:
            mode.end = state.result.modes.n - 1
        mode.value = state.selected_mode

    state.param.watch(mode_from_state, ["selected_mode", "result"])
    prev_b = pn.widgets.Button(label="◀ less radiant", sizing_mode="stretch_width")
    next_b = pn.widgets.Button(label="more radiant ▶", sizing_mode="stretch_width")
    prev_b.on_click(lambda e: state.runner.on_loop(lambda: _step(state, -1)))
    next_b.on_click(lambda e: state.runner.on_loop(lambda: _step(state, +1)))
    lens_axis = _select(state, "lens_axis", pn.widgets.RadioButtonGroup)

    download = pn.widgets.FileDownload(
        callback=lambda: io.StringIO(scn.dumps(state.scenario_for_export())),
        filename="choir-scenario.json", label="Download scenario (.json)",
        color="primary", sizing_mode="stretch_width")
    state.param.watch(lambda e: setattr(download, "filename", _slug(e.new) + ".json"),
                      "scenario_name")
    spectrum = pn.widgets.FileDownload(
        callback=lambda: io.StringIO(spectrum_csv(state.result.modes, state.transition_obj)
                                     if state.result is not None else ""),
        filename="choir-spectrum.csv", label="Download spectrum (.csv)",
        sizing_mode="stretch_width")
    upload = pn.widgets.FileInput(accept=".json", multiple=False, sizing_mode="stretch_width",
                                  label="Open scenario")

    def load_upload(event):
        if not event.new:
            return
        try:
            sc = scn.loads(event.new)
        except scn.ScenarioError as exc:
            state.message = f"File not opened — {exc}"
            return
        state.apply_scenario(sc)

    upload.param.watch(load_upload, "value")
    undo = pn.widgets.Button(label="Undo last edit", sizing_mode="stretch_width", disabled=True)
    undo.on_click(lambda e: state.runner.on_loop(state.undo))
    state.param.watch(lambda e: setattr(undo, "disabled", e.new == 0), "undo_depth")

    realisation = pn.widgets.IntInput.from_param(state.param.realisation, label=_LABELS["realisation"],
                                                 sizing_mode="stretch_width")
    redraw = pn.widgets.Button(label="Draw another realisation", sizing_mode="stretch_width")
    redraw.on_click(lambda e: state.runner.on_loop(state.draw_again))
    imperfect_info = pn.pane.HTML("", styles={"font-size": "12px", "color": "#444"},
                                  sizing_mode="stretch_width")
    state.param.watch(lambda *_: setattr(imperfect_info, "object",
                                         html.escape(state.imperfection_text())), "result")
    imperfections = pn.Card(
        sliders["jitter_x"], sliders["jitter_y"], sliders["jitter_z"], sliders["filling"],
        realisation, redraw, imperfect_info,
        pn.pane.HTML("<span style='font-size:11px;color:#555'>Vacancies: each site is filled "
                     "with the probability set here; jitter: Gaussian displacements of each "
                     "emitter. A realisation is fixed by the seed saved in the scenario and its "
                     "number, so a colleague sees the same one. Drawing in the array view "
                     "keeps the realised positions and sets these back to a perfect array."
                     "</span>"),
        title="Imperfections: vacancies and jitter", collapsed=True,
        sizing_mode="stretch_width", margin=(4, 0))

    def card(title, *items):
        return pn.Card(*items, title=title, sizing_mode="stretch_width", collapsed=False,
                       margin=(4, 4))

    column = pn.Column(
        card("Array", lattice, *geometry_widgets.values(), explicit_note, nm, undo,
             imperfections),
        card("Dipoles and environment", dipole, angles, environment, *env_groups.values(),
             env_info),
        card("Transition and units", transition, custom, tr_info, units, units_note),
        card("Mode and lens", mode, pn.Row(prev_b, next_b, sizing_mode="stretch_width"),
             sliders["lens_na"], lens_axis),
        card("Display", color_by, pn.pane.HTML("<span style='font-size:12px'>Array view plane"
                                               "</span>"), projection,
             pn.pane.HTML("<span style='font-size:12px'>Far-field colour scale</span>"),
             ff_scale),
        card("Probe and decay", _select(state, "probe_kind"),
             sliders["probe_detuning_min"], sliders["probe_detuning_max"],
             probe_groups["plane_wave"], probe_groups["gaussian_beam"], probe_groups["guided"],
             pn.pane.HTML("<span style='font-size:12px'>Probe polarisation (free-space probes)"
                          "</span>"),
             _select(state, "probe_polarization", pn.widgets.RadioButtonGroup),
             _select(state, "map_plane", pn.widgets.RadioButtonGroup),
             _select(state, "decay_initial"), sliders["decay_t_max"],
             pn.pane.HTML("<span style='font-size:11px;color:#555'>Linear response only: the "
                          "probe is taken far below saturation. Laser safety follows local rules "
                          "and licensed practice, which Choir does not assess.</span>")),
        card("Share", download, pn.pane.HTML("<span style='font-size:12px'>Open a scenario "
                                             "file (.json):</span>"), upload, spectrum,
             pn.pane.HTML("<span style='font-size:11px;color:#555'>Each plot saves as PNG "
                          "from its toolbar. The page address carries the array settings."
                          "</span>")),
        width=330, sizing_mode="stretch_height", scroll=True,
    )
    widgets = dict(sliders, lattice=lattice, dipole=dipole, mode=mode, download=download,
                   redraw=redraw, realisation=realisation,
                   upload=upload, undo=undo, spectrum=spectrum, transition=transition,
                   units=units, color_by=color_by, lens_axis=lens_axis)
    return column, widgets


def _nn_text(state: ExplorerState) -> str:
    from physics.geometry import nearest_neighbour_distance

    em = state.result.emitters
    if em.n < 2:
        return ""
    return f"· nearest neighbours {nearest_neighbour_distance(em):.3g} λ0"


def _step(state: ExplorerState, delta: int) -> None:
    if state.result is None:
        return
    state.selected_mode = max(0, min(state.result.modes.n - 1, state.selected_mode + delta))


# ---------------------------------------------------------------- page

_URL_KEYS = {"lattice": "lattice", "n": "n", "nx": "nx", "ny": "ny", "nz": "nz",
             "spacing": "a", "spacing_y": "ay", "radius": "radius", "disk_lattice": "disk",
             "chain_axis": "axis", "dipole": "dipole", "theta_deg": "theta", "phi_deg": "phi",
             "transition": "line", "units": "units", "lens_na": "na", "selected_mode": "mode"}


class Autosave:
    """The server keeps each session's current scenario in one JSON file per session key.

    The key (random, 22 URL-safe characters) travels in the page address
    (``?session=…``), so reloading the page — or reopening the address after
    the server restarted — brings back the scenario exactly, drawn geometry
    included.  Keys that do not match ``KEY`` are ignored (no path ever comes
    from the page); files are plain scenario JSON, read with the same checks as
    any uploaded file; files untouched for ``KEEP_DAYS`` are removed at start.
    """

    KEY = re.compile(r"^[A-Za-z0-9_-]{16,64}$")
    KEEP_DAYS = 30

    def __init__(self, folder: str | Path) -> None:
        self.folder = Path(folder).expanduser()
        self.folder.mkdir(parents=True, exist_ok=True, mode=0o700)
        cutoff = time.time() - self.KEEP_DAYS * 86400
        for old in self.folder.glob("*.json"):
            try:
                if old.stat().st_mtime < cutoff:
                    old.unlink()
            except OSError:
                pass

    @staticmethod
    def new_key() -> str:
        return secrets.token_urlsafe(16)

    def _path(self, key: str) -> Path | None:
        return self.folder / f"{key}.json" if self.KEY.match(key or "") else None

    def load(self, key: str) -> scn.Scenario | None:
        path = self._path(key)
        if path is None or not path.is_file():
            return None
        try:
            return scn.loads(path.read_bytes())
        except (scn.ScenarioError, OSError):
            return None

    def save(self, key: str, sc: scn.Scenario) -> None:
        path = self._path(key)
        if path is None:
            return
        tmp = path.with_suffix(".tmp")
        tmp.write_text(scn.dumps(sc), encoding="utf-8")
        os.replace(tmp, path)


def default_autosave_dir() -> Path:
    """``$CHOIR_AUTOSAVE_DIR``, else ``$XDG_CACHE_HOME/choir/sessions`` (``~/.cache`` by default)."""
    if os.environ.get("CHOIR_AUTOSAVE_DIR"):
        return Path(os.environ["CHOIR_AUTOSAVE_DIR"])
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache")
    return base / "choir" / "sessions"


def _url_refused(state: ExplorerState):
    def report(values: dict) -> None:
        state.message = ("Some settings in the page address were not applied (out of range or "
                         "unknown): " + ", ".join(f"{k} = {v!r}" for k, v in values.items()))
    return report


def _bands_card(state: ExplorerState) -> tuple[pn.Card, BandsView]:
    """The collapsible bands section; bands are computed only while it is open."""
    view = BandsView(state)
    summary = pn.pane.HTML("", styles={"font-size": "12px", "color": "#333"},
                           sizing_mode="stretch_width")
    selection = pn.pane.HTML("", styles={"font-size": "12px", "color": "#333"},
                             sizing_mode="stretch_width")

    def show(*_):
        summary.object = ("computing the bands…" if state.bands_computing
                          else html.escape(view.summary))
        selection.object = html.escape(view.selection_text)

    state.param.watch(show, ["bands", "bands_computing", "selected_mode", "units", "transition"])
    download = pn.widgets.FileDownload(
        callback=lambda: io.StringIO(
            bands_csv(state.bands.path, state.bands.bands, state.transition_obj)
            if state.bands is not None and state.bands.path is not None else ""),
        filename="choir-bands.csv", label="Download bands (.csv)", sizing_mode="fixed", width=200)
    explain = pn.pane.HTML(
        "<span style='font-size:11px;color:#555'>An infinite array with the same lattice, "
        "spacing and dipoles: each quasi-momentum k along the path (Γ = zone centre) has one "
        "collective mode per emitter of the unit cell (three per emitter for all three "
        "polarisations). Shaded: the Bloch wave, or one of its diffraction orders k + G, lies "
        "inside the light cone and radiates; elsewhere the decay rate is zero (guided along the "
        "array). Open circles: this array's modes, placed at the peak of their spatial Fourier "
        "transform (only those within reach of the path are drawn; click one to select it). "
        "Lattice sums: closed form for chains, Ewald summation for planar lattices. Free space "
        "only.</span>", sizing_mode="stretch_width")
    card = pn.Card(
        pn.Row(_select(state, "bands_polarization", pn.widgets.RadioButtonGroup), download,
               sizing_mode="stretch_width"),
        summary, selection, pn.Row(*view.figures, sizing_mode="stretch_width"), explain,
        title="Bands of the infinite lattice (open to compute)", collapsed=True,
        sizing_mode="stretch_width", name="choir-bands-card")
    def opened(event):
        state.bands_visible = not event.new
        card.title = ("Bands of the infinite lattice" if not event.new
                      else "Bands of the infinite lattice (open to compute)")

    card.param.watch(opened, "collapsed")
    return card, view


def _sweep_card(state: ExplorerState) -> tuple[pn.Card, SweepView]:
    """Ensembles and sweeps: inputs, run/cancel, progress, results."""
    view = SweepView(state)
    run = pn.widgets.Button(label="Run", color="primary", width=110)
    stop = pn.widgets.Button(label="Cancel", width=110, disabled=True)
    run.on_click(lambda e: state.runner.on_loop(state.run_sweep))
    stop.on_click(lambda e: state.cancel_sweep())
    bar = pn.indicators.Progress(value=0, max=100, sizing_mode="stretch_width", height=18,
                                 bar_color="primary")
    status = pn.pane.HTML("", styles={"font-size": "12px", "color": "#333"},
                          sizing_mode="stretch_width")

    def show(*_):
        bar.value = int(round(100 * state.sweep_progress))
        run.disabled = state.sweep_running
        stop.disabled = not state.sweep_running
        status.object = ("running… (the explorer stays usable; Cancel keeps what is done)"
                         if state.sweep_running else html.escape(view.summary))

    state.param.watch(show, ["sweep_progress", "sweep_running", "sweep"])
    download = pn.widgets.FileDownload(
        callback=lambda: io.StringIO((Path(state.sweep.folder) / "results.csv").read_text()
                                     if state.sweep is not None else ""),
        filename="choir-sweep-results.csv", label="Download results (.csv)", width=200)
    rng = pn.Row(pn.widgets.FloatInput.from_param(state.param.sweep_from, label="From",
                                                  width=110),
                 pn.widgets.FloatInput.from_param(state.param.sweep_to, label="To", width=110),
                 pn.widgets.IntInput.from_param(state.param.sweep_points, label="Values",
                                                width=90))
    state.param.watch(lambda e: setattr(rng, "visible", e.new != "nothing (one ensemble)"),
                      "sweep_vary")
    rng.visible = state.sweep_vary != "nothing (one ensemble)"
    inputs = pn.Column(
        pn.Row(pn.widgets.Select.from_param(state.param.sweep_vary, label="Vary", width=280),
               rng,
               pn.widgets.IntInput.from_param(state.param.sweep_realisations,
                                              label=_LABELS["sweep_realisations"], width=160),
               pn.widgets.Select.from_param(state.param.sweep_figure, label="Figure", width=280)),
        pn.Row(pn.widgets.Checkbox.from_param(state.param.sweep_fit, label=_LABELS["sweep_fit"],
                                              width=240, margin=(12, 10)),
               run, stop, download),
        sizing_mode="stretch_width")
    explain = pn.pane.HTML(
        "<span style='font-size:11px;color:#555'>Each value of the parameter is solved for the "
        "chosen number of random realisations of the array's imperfections (set them under "
        "Array → Imperfections; without imperfections every realisation is the same array). "
        "Realisation r uses the same random numbers at every value, so curves are smooth. "
        "Runs here are limited to about a minute and a half of computing; the command shown "
        "runs the same sweep headless on every core or on a Dask cluster, and can resume."
        "</span>", sizing_mode="stretch_width")
    card = pn.Card(inputs, bar, status, pn.Row(*view.figures, sizing_mode="stretch_width"),
                   explain, title="Ensembles and sweeps", collapsed=True,
                   sizing_mode="stretch_width", name="choir-sweep-card")
    return card, view


def build_explorer(scenario: scn.Scenario | None = None, *, state: ExplorerState | None = None,
                   autosave: Autosave | None = None):
    """One explorer page (a Panel layout) with its own session state.

    With ``autosave`` (served sessions), the current scenario is written to the
    server after every solve and restored from the page address's session key.
    """
    doc = pn.state.curdoc
    # a live server session (choir serve, panel serve), not a notebook or a test
    served = doc is not None and getattr(doc, "session_context", None) is not None
    if state is None:
        state = ExplorerState(runner=ServerRunner(doc) if served else None)
        if scenario is not None:
            state.apply_scenario(scenario, solve=False)
    spectrum, array, far = SpectrumView(state), ArrayView(state), FarFieldView(state)
    probe = ProbeView(state)
    probe_summary = pn.pane.HTML("", styles={"font-size": "12px", "color": "#333"},
                                 sizing_mode="stretch_width")
    state.param.watch(lambda *_: setattr(probe_summary, "object", html.escape(probe.summary)),
                      "analysis")
    probe_row = pn.Column(
        pn.pane.HTML("<b>Probe and decay</b> <span style='font-size:11px;color:#555'>(a weak "
                     "probe in linear response, far below saturation; the field map is the "
                     "free-space field at the spectrum's peak; the decay is e<sup>−iHt</sup> "
                     "acting on the chosen initial state — none of it needs eigenvectors)"
                     "</span>"),
        probe_summary, pn.Row(*probe.figures, sizing_mode="stretch_width"),
        sizing_mode="stretch_width")

    bands_row, bands = _bands_card(state)
    sweep_row, sweep = _sweep_card(state)
    sidebar, widgets = _controls(state)
    card = pn.pane.HTML(mode_card_html(state), sizing_mode="stretch_width")
    state.param.watch(lambda *_: setattr(card, "object", mode_card_html(state)),
                      ["result", "mode_result", "selected_mode", "units", "transition",
                       "wavelength_nm", "linewidth_mhz"])
    error = pn.pane.Alert("", alert_type="danger", visible=False, sizing_mode="stretch_width")
    caution = pn.pane.Alert("", alert_type="warning", visible=False, sizing_mode="stretch_width")

    def show_messages(*_):
        error.object = state.message
        error.visible = bool(state.message)
        notes = state.cautions()
        caution.object = "\n\n".join(f"⚠ {n}" for n in notes)
        caution.visible = bool(notes)

    state.param.watch(show_messages, ["message", "result"])
    spinner = pn.indicators.LoadingSpinner(value=False, size=22)
    busy_text = pn.pane.HTML("", styles={"font-size": "13px", "color": "#555"})

    def show_busy(*_):
        spinner.value = state.busy
        busy_text.object = "computing…" if state.busy else ""

    state.param.watch(show_busy, "busy")
    heading = pn.pane.HTML(
        "<div style='display:flex;align-items:baseline;gap:14px'>"
        "<span style='font-size:22px;font-weight:700;color:#4a148c'>Choir</span>"
        "<span style='font-size:14px;color:#555'>collective modes of emitter arrays</span></div>",
        sizing_mode="stretch_width")
    name_pane = pn.pane.HTML("", styles={"font-size": "13px"})

    def show_name(*_):
        name = html.escape(state.scenario_name) or "untitled scenario"
        tail = " <i style='color:#8e24aa'>(modified)</i>" if state.is_modified() else ""
        name_pane.object = f"<span>{name}{tail}</span>"

    state.param.watch(show_name, ["scenario_name", "result"])
    show_name()
    header = pn.Row(heading, name_pane, pn.layout.HSpacer(), busy_text, spinner,
                    sizing_mode="stretch_width", styles={"border-bottom": "2px solid #d1c4e9"})
    model = pn.pane.Markdown(MODEL_NOTE, sizing_mode="stretch_width",
                             styles={"font-size": "12px", "color": "#444"})
    ff_note = pn.pane.HTML(
        "<span style='font-size:11px;color:#555'>Each disc is one hemisphere seen in direction "
        "cosines (u<sub>x</sub>, u<sub>y</sub>) = (sinθ cosφ, sinθ sinφ), x to the right, y up — "
        "the picture in a lens's back focal plane. A lens of numerical aperture NA collects "
        "the dashed disc of radius NA.</span>", sizing_mode="stretch_width")
    arr_note = pn.pane.HTML(
        "<span style='font-size:11px;color:#555'>Disc radius ∝ |c<sub>j</sub>| of the selected "
        "mode on emitter j (small discs: little excitation); colour = phase arg c<sub>j</sub> "
        "with the largest amplitude set real and positive. Editing: choose the point tool in "
        "the toolbar, click empty space to add, drag to move, click an emitter then press "
        "Backspace to delete.</span>", sizing_mode="stretch_width")
    main = pn.Column(
        error, caution,
        pn.Row(pn.Column(spectrum.figure, sizing_mode="stretch_width"),
               pn.Column(array.figure, arr_note, sizing_mode="stretch_width"),
               sizing_mode="stretch_width"),
        pn.Row(pn.Column(far.figure, ff_note, sizing_mode="stretch_width"),
               pn.Column(card, sizing_mode="stretch_width", max_width=420),
               sizing_mode="stretch_width"),
        probe_row, bands_row, sweep_row, model, sizing_mode="stretch_width")
    page = pn.Column(header, pn.Row(sidebar, main, sizing_mode="stretch_both"),
                     sizing_mode="stretch_both")
    page.explorer_state = state  # tests and notebooks reach the session state here
    page.explorer_views = {"spectrum": spectrum, "array": array, "far": far, "probe": probe,
                           "bands": bands, "bands_card": bands_row, "sweep": sweep,
                           "sweep_card": sweep_row,
                           "widgets": widgets,
                           "spinner": spinner, "error": error, "caution": caution}

    if served:
        state._applying = True  # hold solves until the URL has been read

        def start():
            state._applying = False
            saved = autosave.load(state.session_key) if autosave is not None else None
            if saved is not None:  # a reload, or the server restarted: nothing is lost
                state.apply_scenario(saved)
                return
            if autosave is not None and not Autosave.KEY.match(state.session_key or ""):
                state.session_key = Autosave.new_key()
            state.solve()

        if autosave is not None:
            def keep(*_):
                if state.result is not None and state.session_key:
                    try:
                        autosave.save(state.session_key, state.scenario_for_export())
                    except OSError as exc:
                        state.message = f"Autosave failed — {exc.strerror}; download the scenario"

            state.param.watch(keep, "result")
        if pn.state.location is not None:
            keys = dict(_URL_KEYS, **({"session_key": "session"} if autosave is not None else {}))
            pn.state.location.sync(state, keys, on_error=_url_refused(state))
        pn.state.onload(start)
    else:
        state.solve()
    return page


def explorer(scenario: str | Path | scn.Scenario | None = None):
    """Show the explorer inline in a Jupyter notebook (one call).

    Example: ``from app.explorer import explorer; explorer("scenarios/nonagon_ring.json")``.
    """
    pn.extension()
    if isinstance(scenario, (str, Path)):
        scenario = scn.load(scenario)
    return build_explorer(scenario)


def serve(scenario: scn.Scenario | None, *, port: int = 5006, address: str = "127.0.0.1",
          show: bool = False, allow_origin: list[str] | None = None,
          autosave_dir: str | Path | None = None) -> None:
    """Serve the explorer; every browser session gets its own state.

    ``autosave_dir``: where each session's scenario is kept (None: the default
    folder, "" to switch autosaving off).
    """
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)  # one BLAS thread per solve: two sessions solve in parallel
    pn.extension()
    origins = allow_origin or [f"{address}:{port}", f"localhost:{port}"]
    folder = None if autosave_dir == "" else Path(autosave_dir or default_autosave_dir())
    try:
        store = Autosave(folder) if folder is not None else None
    except OSError as exc:
        raise ValueError(f"--autosave-dir: cannot use {folder}: {exc.strerror}") from None
    pn.serve({"/": lambda: build_explorer(scenario, autosave=store)}, port=port, address=address,
             show=show,
             websocket_origin=origins, title="Choir explorer", print_url=True)


def scenario_from_args(argv: list[str]) -> scn.Scenario | None:
    """The scenario named on the command line of ``panel serve ... --args FILE``."""
    path = argv[1] if len(argv) > 1 else os.environ.get("CHOIR_SCENARIO")
    return scn.load(path) if path else None
