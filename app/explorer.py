"""The Choir explorer page: layout, sections built on demand, and the entry points.

``build_explorer(scenario)`` makes one session's page (state + views); it is
what ``choir serve`` serves per browser session (see :mod:`app.server`), what
``panel serve app/serve_app.py`` serves, and what ``explorer()`` shows inline
in a notebook.

A served page starts light: the first HTML holds the header and the spectrum
and array views; the solve starts as soon as the page has loaded, and the
controls, the far field and the mode card are added in the same moment.  The
collapsed sections (imperfections, probe and decay, bands, ensembles) build
their figures when first opened, and compute only while open.
"""
from __future__ import annotations

import html
import io
import os
from pathlib import Path
from typing import Callable

import panel as pn

from physics import scenario as scn
from physics.exports import bands_csv

from . import controls
from .server import Autosave, ServerRunner, default_autosave_dir, serve
from .state import NEAR_FIELD_WARN, ExplorerState
from .views import (ArrayView, BandsView, FarFieldView, ProbeView, SpectrumView, SweepView,
                    mode_card_html)

__all__ = ["build_explorer", "explorer", "serve", "MODEL_NOTE", "Autosave",
           "default_autosave_dir", "scenario_from_args"]

MODEL_NOTE = (
    "**Model.** One excitation shared by the emitters (weak excitation, linear optics); "
    "Markov approximation (no retardation across the array; a cavity mode only in the "
    "bad-cavity limit 2g√N ≪ κ, no strong coupling); point-like two-level emitters at rest; "
    "waveguides through one guided mode with the given rates. Shifts exclude the "
    "single-emitter Lamb shift. "
    "Results outside these assumptions — saturation, multi-level atoms, emitters closer than "
    f"about {NEAR_FIELD_WARN} λ0, motion — need a different model."
)

_URL_KEYS = {"lattice": "lattice", "n": "n", "nx": "nx", "ny": "ny", "nz": "nz",
             "spacing": "a", "spacing_y": "ay", "radius": "radius", "disk_lattice": "disk",
             "chain_axis": "axis", "dipole": "dipole", "theta_deg": "theta", "phi_deg": "phi",
             "transition": "line", "units": "units", "lens_na": "na", "selected_mode": "mode"}

_SUMMARY = {"font-size": "12px", "color": "#333"}
#: A served page adds its controls, far field and sections this long after loading, so
#: that a quick first solve reaches the browser first [ms].
FILL_DELAY_MS = 120
#: A served page says "computing…" once a job has run this long [ms].
BUSY_AFTER_MS = 250
#: While other pages of the same server still wait for their first spectrum, a page
#: puts off adding its controls (a first spectrum for everyone comes first), up to [ms].
FILL_MAX_WAIT_MS = 3000
#: … and waits for its own first spectrum up to this long (a slow solve runs on the
#: pool meanwhile; building controls on the loop would only hold its result back) [ms].
FILL_OWN_WAIT_MS = 1000

#: Served pages whose first spectrum (or first message) has not gone out yet.
_WAITING_FIRST: set[int] = set()


def _served(doc) -> bool:
    """A live server session (choir serve, panel serve), not a notebook or a test."""
    return doc is not None and getattr(doc, "session_context", None) is not None


def _url_refused(state: ExplorerState):
    def report(values: dict) -> None:
        state.message = ("Some settings in the page address were not applied (out of range or "
                         "unknown): " + ", ".join(f"{k} = {v!r}" for k, v in values.items()))
    return report


class Section:
    """A collapsed card whose content is built when it is first opened.

    ``build()`` returns the card's content; ``opened(is_open)`` is told every
    time the card opens or closes (a section computes only while open).
    """

    def __init__(self, title: str, build: Callable[[], list], *, name: str,
                 opened: Callable[[bool], None] | None = None, hint: str = "",
                 margin=(4, 0)) -> None:
        self.title, self.hint, self._build, self._opened = title, hint, build, opened
        self.built = False
        self.card = pn.Card(title=title + hint, collapsed=True, sizing_mode="stretch_width",
                            name=name, margin=margin)
        self.card.param.watch(self._toggle, "collapsed")

    def open(self) -> None:
        self.card.collapsed = False

    def _toggle(self, event) -> None:
        is_open = not event.new
        if is_open and not self.built:
            self.built = True
            self.card.objects = self._build()
        self.card.title = self.title if is_open else self.title + self.hint
        if self._opened is not None:
            self._opened(is_open)


# ---------------------------------------------------------------- sections

def _probe_section(state: ExplorerState, views: dict) -> Section:
    def build():
        widgets = views["widgets"]
        probe = views["probe"] = ProbeView(state)
        summary = pn.pane.HTML(html.escape(probe.summary), styles=_SUMMARY,
                               sizing_mode="stretch_width")
        state.param.watch(lambda *_: setattr(summary, "object", html.escape(probe.summary)),
                          ["analysis", "units", "transition", "wavelength_nm", "linewidth_mhz"])
        return [pn.Row(controls.probe_controls(state, widgets),
                       pn.Column(controls.note(
                           "A weak probe in linear response, far below saturation; the field "
                           "map is the free-space field at the spectrum's peak; the decay is "
                           "e<sup>−iHt</sup> acting on the chosen initial state — none of it "
                           "needs eigenvectors."), summary,
                           pn.Row(*probe.figures, sizing_mode="stretch_width"),
                           sizing_mode="stretch_width"),
                       sizing_mode="stretch_width")]

    return Section("Probe and decay", build, name="choir-probe-card", hint=" (open to compute)",
                   opened=lambda is_open: setattr(state, "probe_visible", is_open))


def _bands_section(state: ExplorerState, views: dict) -> Section:
    def build():
        view = views["bands"] = BandsView(state)
        summary = pn.pane.HTML("", styles=_SUMMARY, sizing_mode="stretch_width")
        selection = pn.pane.HTML("", styles=_SUMMARY, sizing_mode="stretch_width")

        def show(*_):
            summary.object = ("computing the bands…" if state.bands_computing
                              else html.escape(view.summary))
            selection.object = html.escape(view.selection_text)

        state.param.watch(show, ["bands", "bands_computing", "selected_mode", "units",
                                 "transition"])
        show()
        download = pn.widgets.FileDownload(
            callback=lambda: io.StringIO(
                bands_csv(state.bands.path, state.bands.bands, state.transition_obj)
                if state.bands is not None and state.bands.path is not None else ""),
            filename="choir-bands.csv", label="Download bands (.csv)", width=200)
        explain = controls.note(
            "An infinite array with the same lattice, spacing and dipoles: each "
            "quasi-momentum k along the path (Γ = zone centre) has one collective mode per "
            "emitter of the unit cell (three per emitter for all three polarisations). Shaded: "
            "the Bloch wave, or one of its diffraction orders k + G, lies inside the light cone "
            "and radiates; elsewhere the decay rate is zero (guided along the array). Open "
            "circles: this array's modes, placed at the peak of their spatial Fourier transform "
            "(only those within reach of the path are drawn; click one to select it). Lattice "
            "sums: closed form for chains, Ewald summation for planar lattices. Free space only.")
        return [pn.Row(controls.buttons(state, "bands_polarization"), download,
                       sizing_mode="stretch_width"),
                summary, selection, pn.Row(*view.figures, sizing_mode="stretch_width"), explain]

    return Section("Bands of the infinite lattice", build, name="choir-bands-card",
                   hint=" (open to compute)",
                   opened=lambda is_open: setattr(state, "bands_visible", is_open))


def _sweep_section(state: ExplorerState, views: dict) -> Section:
    def build():
        view = views["sweep"] = SweepView(state)
        run = pn.widgets.Button(label="Run", color="primary", width=110)
        stop = pn.widgets.Button(label="Cancel", width=110, disabled=True)
        run.on_click(lambda e: state.runner.on_loop(state.run_sweep))
        stop.on_click(lambda e: state.cancel_sweep())
        bar = pn.indicators.Progress(value=0, max=100, sizing_mode="stretch_width", height=18,
                                     bar_color="primary")
        status = pn.pane.HTML("", styles=_SUMMARY, sizing_mode="stretch_width")

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
        rng = pn.Row(pn.widgets.FloatInput.from_param(state.param.sweep_from, width=110),
                     pn.widgets.FloatInput.from_param(state.param.sweep_to, width=110),
                     pn.widgets.IntInput.from_param(state.param.sweep_points, width=90))
        state.param.watch(lambda e: setattr(rng, "visible", e.new != "nothing (one ensemble)"),
                          "sweep_vary")
        rng.visible = state.sweep_vary != "nothing (one ensemble)"
        inputs = pn.Column(
            pn.Row(pn.widgets.Select.from_param(state.param.sweep_vary, width=280), rng,
                   pn.widgets.IntInput.from_param(state.param.sweep_realisations, width=160),
                   pn.widgets.Select.from_param(state.param.sweep_figure, width=280)),
            pn.Row(pn.widgets.Checkbox.from_param(state.param.sweep_fit, width=240,
                                                  margin=(12, 10)), run, stop, download),
            sizing_mode="stretch_width")
        explain = controls.note(
            "Each value of the parameter is solved for the chosen number of random realisations "
            "of the array's imperfections (set them under Array → Imperfections; without "
            "imperfections every realisation is the same array). Realisation r uses the same "
            "random numbers at every value, so curves are smooth. Runs here are limited to "
            "about a minute and a half of computing; the command shown runs the same sweep "
            "headless on every core or on a Dask cluster, and can resume.")
        return [inputs, bar, status, pn.Row(*view.figures, sizing_mode="stretch_width"), explain]

    return Section("Ensembles and sweeps", build, name="choir-sweep-card")


# ---------------------------------------------------------------- page

def _header(state: ExplorerState, views: dict) -> pn.Row:
    spinner = views["spinner"] = pn.indicators.LoadingSpinner(value=state.busy, size=22)
    busy_text = pn.pane.HTML("", styles={"font-size": "13px", "color": "#555"})
    doc = pn.state.curdoc
    served = _served(doc)

    def show_busy(*_):
        spinner.value = state.busy
        busy_text.object = "computing…" if state.busy else ""

    def busy_changed(*_):
        # served: say "computing…" only for work that takes a noticeable time, so quick
        # slider steps do not make the header blink (and send two more messages each)
        if served and state.busy:
            doc.add_timeout_callback(lambda: state.busy and not spinner.value and show_busy(),
                                     BUSY_AFTER_MS)
        elif spinner.value or state.busy:
            show_busy()

    state.param.watch(busy_changed, "busy")
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
    return pn.Row(heading, name_pane, pn.layout.HSpacer(), busy_text, spinner,
                  sizing_mode="stretch_width", styles={"border-bottom": "2px solid #d1c4e9"})


def _messages(state: ExplorerState, views: dict) -> tuple:
    error = views["error"] = pn.pane.Alert("", alert_type="danger", visible=False,
                                           sizing_mode="stretch_width")
    caution = views["caution"] = pn.pane.Alert("", alert_type="warning", visible=False,
                                               sizing_mode="stretch_width")

    def show(*_):
        error.object = state.message
        error.visible = bool(state.message)
        notes = state.cautions()
        caution.object = "\n\n".join(f"⚠ {n}" for n in notes)
        caution.visible = bool(notes)

    state.param.watch(show, ["message", "result"])
    show()
    return error, caution


def _fill(state: ExplorerState, views: dict, slots: dict) -> None:
    """Build everything but the header, spectrum and array views, into their slots."""
    imperfections = Section(
        "Imperfections: vacancies and jitter",
        lambda: controls.imperfection_controls(state, views["widgets"]),
        name="choir-imperfections-card")
    side, widgets = controls.sidebar(state, imperfections.card)
    views["widgets"] = widgets
    far = views["far"] = FarFieldView(state)
    card = pn.pane.HTML(mode_card_html(state), sizing_mode="stretch_width")
    state.param.watch(lambda *_: setattr(card, "object", mode_card_html(state)),
                      ["result", "mode_result", "selected_mode", "units", "transition",
                       "wavelength_nm", "linewidth_mhz"])
    sections = {"imperfections": imperfections, "probe": _probe_section(state, views),
                "bands": _bands_section(state, views), "sweep": _sweep_section(state, views)}
    views["sections"] = sections
    ff_note = controls.note(
        "Each disc is one hemisphere seen in direction cosines (u<sub>x</sub>, u<sub>y</sub>) = "
        "(sinθ cosφ, sinθ sinφ), x to the right, y up — the picture in a lens's back focal "
        "plane. A lens of numerical aperture NA collects the dashed disc of radius NA.")
    slots["sidebar"].objects = [side]
    slots["middle"].objects = [pn.Column(far.figure, ff_note, sizing_mode="stretch_width"),
                               pn.Column(card, sizing_mode="stretch_width", max_width=420)]
    slots["sections"].objects = [sections["probe"].card, sections["bands"].card,
                                 sections["sweep"].card,
                                 pn.pane.Markdown(MODEL_NOTE, sizing_mode="stretch_width",
                                                  styles={"font-size": "12px", "color": "#444"})]


def build_explorer(scenario: scn.Scenario | None = None, *, state: ExplorerState | None = None,
                   autosave: Autosave | None = None):
    """One explorer page (a Panel layout) with its own session state.

    With ``autosave`` (served sessions), the current scenario is written to the
    server after every solve and restored from the page address's session key.
    Tests and notebooks reach the state as ``page.explorer_state``, the views
    and widgets as ``page.explorer_views``, and open a collapsed section with
    ``page.explorer_open("probe" | "bands" | "sweep" | "imperfections")``.
    """
    doc = pn.state.curdoc
    served = _served(doc)
    if state is None:
        state = ExplorerState(runner=ServerRunner(doc) if served else None)
        if scenario is not None:
            state.apply_scenario(scenario, solve=False)
    views: dict = {}
    spectrum = views["spectrum"] = SpectrumView(state)
    array = views["array"] = ArrayView(state)
    error, caution = _messages(state, views)
    arr_note = controls.note(
        "Disc radius ∝ |c<sub>j</sub>| of the selected mode on emitter j (small discs: little "
        "excitation); colour = phase arg c<sub>j</sub> with the largest amplitude set real and "
        "positive. Editing: choose the point tool in the toolbar, click empty space to add, "
        "drag to move, click an emitter then Backspace to delete.")
    slots = {"sidebar": pn.Column(width=330, sizing_mode="stretch_height"),
             "middle": pn.Row(sizing_mode="stretch_width"),
             "sections": pn.Column(sizing_mode="stretch_width")}
    main = pn.Column(
        error, caution,
        pn.Row(pn.Column(spectrum.figure, sizing_mode="stretch_width"),
               pn.Column(array.figure, arr_note, sizing_mode="stretch_width"),
               sizing_mode="stretch_width"),
        slots["middle"], slots["sections"], sizing_mode="stretch_width")
    page = pn.Column(_header(state, views), pn.Row(slots["sidebar"], main,
                                                   sizing_mode="stretch_both"),
                     sizing_mode="stretch_both")
    page.explorer_state = state
    page.explorer_views = views

    def open_section(name: str):
        views["sections"][name].open()
        return views.get(name)

    page.explorer_open = open_section

    if not served:
        _fill(state, views, slots)
        state.solve()
        return page

    state._applying = True  # hold solves until the URL has been read

    me = id(state)

    def first_out(*_):
        _WAITING_FIRST.discard(me)

    state.param.watch(first_out, ["result", "message"])

    def start():
        # only a page that has loaded waits for a spectrum (a plain GET never gets here)
        _WAITING_FIRST.add(me)
        state._applying = False
        saved = autosave.load(state.session_key) if autosave is not None else None
        if saved is not None:  # a reload, or the server restarted: nothing is lost
            state.apply_scenario(saved)
        else:
            if autosave is not None and not Autosave.KEY.match(state.session_key or ""):
                state.session_key = Autosave.new_key()
            state.solve()  # on the pool
        # the rest of the page a moment later: a quick first spectrum goes out before it
        doc.add_timeout_callback(lambda: fill(FILL_DELAY_MS), FILL_DELAY_MS)

    def fill(waited: int):
        if state.runner.gone():  # the page was closed meanwhile
            _WAITING_FIRST.discard(me)
            return
        mine = me in _WAITING_FIRST and waited < FILL_OWN_WAIT_MS
        others = (_WAITING_FIRST - {me}) and waited < FILL_MAX_WAIT_MS
        if mine or others:
            doc.add_timeout_callback(lambda: fill(waited + 50), 50)
            return
        _fill(state, views, slots)

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
    pn.state.on_session_destroyed(lambda ctx: (state.close(), _WAITING_FIRST.discard(me)))
    state.runner.on_gone = state.close
    return page


def explorer(scenario: str | Path | scn.Scenario | None = None):
    """Show the explorer inline in a Jupyter notebook (one call).

    Example: ``from app.explorer import explorer; explorer("scenarios/nonagon_ring.json")``.
    """
    pn.extension()
    if isinstance(scenario, (str, Path)):
        scenario = scn.load(scenario)
    return build_explorer(scenario)


def scenario_from_args(argv: list[str]) -> scn.Scenario | None:
    """The scenario named on the command line of ``panel serve ... --args FILE``."""
    path = argv[1] if len(argv) > 1 else os.environ.get("CHOIR_SCENARIO")
    return scn.load(path) if path else None
