"""The explorer's controls: one small function per group of widgets.

Every widget is made from a parameter of :class:`app.state.ExplorerState` and
takes that parameter's own ``label``; the groups only arrange them and add a
line of explanation where a physicist would otherwise ask.
"""
from __future__ import annotations

import html
import io
import re

import numpy as np
import panel as pn

from physics import scenario as scn
from physics.exports import spectrum_csv
from physics.lattices import ring_radius
from physics.waveguide import guided_figures

from .state import ExplorerState

__all__ = ["slider", "select", "buttons", "note", "sidebar", "imperfection_controls",
           "probe_controls", "INTEGER_SLIDERS"]

#: Which generator parameters each array type shows.
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
INTEGER_SLIDERS = ("n", "nx", "ny", "nz")
_SMALL = {"font-size": "12px", "color": "#444"}


def note(text: str, size: int = 11) -> pn.pane.HTML:
    """A line of explanation under a control."""
    return pn.pane.HTML(f"<span style='font-size:{size}px;color:#555'>{text}</span>",
                        sizing_mode="stretch_width", margin=(0, 10))


class _NowFloatSlider(pn.widgets.FloatSlider):
    """A float slider whose moves reach the server at once.

    Panel waits 50 ms after a widget's first change to gather more; the
    explorer's jobs already drop overtaken requests (``jobs.Latest``), so the
    wait would only delay every step.
    """

    _priority_changes = ["value", "value_throttled"]


class _NowIntSlider(pn.widgets.IntSlider):
    """An integer slider whose moves reach the server at once (see _NowFloatSlider)."""

    _priority_changes = ["value", "value_throttled"]


class Lazy:
    """A place for widgets that are built the first time they are shown.

    Hidden controls (the radius of a disk while a square is shown, the angles of
    a dipole given by a preset, a custom transition's inputs) cost the server a
    model each for every page; built on first show, they cost nothing until used.
    """

    def __init__(self, build) -> None:
        self._build = build
        self.pane = pn.Column(sizing_mode="stretch_width", margin=0, visible=False)

    def show(self, visible: bool) -> None:
        if visible and not self.pane.objects:
            self.pane.objects = list(self._build())
        self.pane.visible = visible


def slider(state: ExplorerState, name: str):
    """A slider that recomputes while dragging for small arrays, on release for large ones.

    While dragging, each step only sets the value; the state's jobs drop
    intermediate requests (the latest wins), so nothing queues.
    """
    p = state.param[name]
    integer = name in INTEGER_SLIDERS
    cls = _NowIntSlider if integer else _NowFloatSlider
    kw = {} if integer else {"step": p.step or 0.01}
    lo, hi = p.get_soft_bounds()
    value = getattr(state, name)
    w = cls(label=p.label, start=min(lo, value), end=max(hi, value), value=value,
            sizing_mode="stretch_width", **kw)

    def live(event):
        if state.live_drag():
            setattr(state, name, event.new)

    def final(event):
        setattr(state, name, event.new)

    def from_state(event):
        # a loaded file may lie outside the slider's usual range: widen it
        w.param.update(start=min(w.start, event.new), end=max(w.end, event.new), value=event.new)

    w.param.watch(live, "value")
    w.param.watch(final, "value_throttled")
    state.param.watch(from_state, name)
    return w


def select(state: ExplorerState, name: str, **kw):
    """A drop-down for a selector parameter, labelled by the parameter."""
    return pn.widgets.Select.from_param(state.param[name], sizing_mode="stretch_width", **kw)


def buttons(state: ExplorerState, name: str) -> pn.Column:
    """A row of toggle buttons with the parameter's label above it (buttons carry no title)."""
    group = pn.widgets.RadioButtonGroup.from_param(state.param[name], sizing_mode="stretch_width")
    return pn.Column(pn.pane.HTML(f"<span style='font-size:12px'>"
                                  f"{html.escape(state.param[name].label)}</span>",
                                  margin=(4, 10, 0, 10)),
                     group, sizing_mode="stretch_width", margin=0)


def _slug(text: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()
    return s[:60] or "choir-scenario"


def _card(title: str, *items, collapsed: bool = False) -> pn.Card:
    return pn.Card(*items, title=title, sizing_mode="stretch_width", collapsed=collapsed,
                   margin=(4, 4))


def _array_group(state: ExplorerState, widgets: dict) -> list:
    widgets["lattice"] = select(state, "lattice")

    def make(key):
        def build():
            if key in ("disk_lattice",):
                widgets[key] = select(state, key)
            elif key == "chain_axis":
                widgets[key] = buttons(state, key)
            else:
                widgets[key] = slider(state, key)
            return [widgets[key]]
        return Lazy(build)

    geometry = {key: make(key) for key in ("n", "nx", "ny", "nz", "spacing", "spacing_y",
                                           "radius", "disk_lattice", "chain_axis")}
    explicit = note("<i>Explicit positions: edit them in the array view (drawing tool).</i>", 12)
    info = pn.pane.HTML(sizing_mode="stretch_width", styles=_SMALL)

    def show(*_):
        keep = _VISIBLE[state.lattice]
        for key, place in geometry.items():
            place.show(key in keep)
        explicit.visible = state.lattice == "explicit"
        if state.result is None:
            return
        tr, em = state.transition_obj, state.result.emitters
        nn = (f" · nearest neighbours {state.nearest_neighbours():.3g} λ0" if em.n > 1 else "")
        extra = ""
        if state.lattice == "ring":
            r = ring_radius(state.n, state.spacing)
            extra = f" · ring radius {r:.3g} λ0 = {tr.length_nm(r):.4g} nm"
        info.object = (f"a = {state.spacing:.3f} λ0 = {tr.length_nm(state.spacing):.1f} nm "
                       f"· N = {em.n}{nn}{extra}")

    state.param.watch(show, ["lattice", "result", "spacing", "transition", "wavelength_nm"])
    show()
    widgets["undo"] = undo = pn.widgets.Button(label="Undo last edit", disabled=True,
                                               sizing_mode="stretch_width")
    undo.on_click(lambda e: state.runner.on_loop(state.undo))
    state.param.watch(lambda e: setattr(undo, "disabled", e.new == 0), "undo_depth")
    return [widgets["lattice"], *(g.pane for g in geometry.values()), explicit, info, undo]


def imperfection_controls(state: ExplorerState, widgets: dict) -> list:
    """Jitter, filling, realisation: built when their section is first opened."""
    for name in ("jitter_x", "jitter_y", "jitter_z", "filling"):
        widgets[name] = slider(state, name)
    widgets["realisation"] = pn.widgets.IntInput.from_param(state.param.realisation,
                                                            sizing_mode="stretch_width")
    widgets["redraw"] = redraw = pn.widgets.Button(label="Draw another realisation",
                                                   sizing_mode="stretch_width")
    redraw.on_click(lambda e: state.runner.on_loop(state.draw_again))
    info = pn.pane.HTML("", styles=_SMALL, sizing_mode="stretch_width")

    def show(*_):
        info.object = html.escape(state.imperfection_text())

    state.param.watch(show, "result")
    show()
    return [widgets["jitter_x"], widgets["jitter_y"], widgets["jitter_z"], widgets["filling"],
            widgets["realisation"], redraw, info,
            note("Vacancies: each site is filled with the probability set here; jitter: "
                 "Gaussian displacements of each emitter. A realisation is fixed by the seed "
                 "saved in the scenario and its number, so a colleague sees the same one. "
                 "Drawing in the array view keeps the realised positions and sets these back "
                 "to a perfect array.")]


def _environment_group(state: ExplorerState, widgets: dict) -> list:
    widgets["dipole"] = select(state, "dipole")

    def make_angles():
        widgets["theta_deg"] = slider(state, "theta_deg")
        widgets["phi_deg"] = slider(state, "phi_deg")
        return [widgets["theta_deg"], widgets["phi_deg"]]

    lazy_angles = Lazy(make_angles)
    angles = lazy_angles.pane

    def show_angles(*_):
        lazy_angles.show(state.dipole == "polar angles")

    state.param.watch(show_angles, "dipole")
    show_angles()
    widgets["environment"] = select(state, "environment")

    def free_space():
        widgets["free_space_scale"] = slider(state, "free_space_scale")
        return [widgets["free_space_scale"]]

    def waveguide():
        for name in ("wg_forward", "wg_backward", "wg_loss", "wg_k"):
            widgets[name] = slider(state, name)
        return [widgets["wg_forward"], widgets["wg_backward"], widgets["wg_loss"],
                widgets["wg_k"], buttons(state, "wg_axis")]

    def cavity():
        for name in ("cav_g", "cav_kappa", "cav_detuning"):
            widgets[name] = slider(state, name)
        return [widgets["cav_g"], widgets["cav_kappa"], widgets["cav_detuning"],
                buttons(state, "cav_axis"), buttons(state, "cav_polarization"),
                pn.widgets.FloatInput.from_param(state.param.cav_waist,
                                                 sizing_mode="stretch_width"),
                pn.widgets.Checkbox.from_param(state.param.cav_standing_wave)]

    # each channel's controls are built the first time the environment includes it
    makers = {"free space": free_space, "waveguide": waveguide, "cavity": cavity}
    groups = {key: pn.Column(sizing_mode="stretch_width", margin=0) for key in makers}
    info = pn.pane.HTML(styles=_SMALL, sizing_mode="stretch_width")

    def show(*_):
        for key, group in groups.items():
            group.visible = key in state.environment
            if group.visible and not group.objects:
                group.objects = makers[key]()
        res = state.result
        if res is None or res.environment is None:
            info.object = ""
            return
        text = html.escape(res.environment.describe())
        fig = guided_figures(res.environment)
        if fig is not None:
            text += (f"<br>β-factor {fig['beta']:.3g} (guided share of one emitter's decay) · "
                     f"directionality {fig['directionality']:+.3g} · n_eff = "
                     f"{state.wg_k / (2 * np.pi):.4g}")
        info.object = text

    state.param.watch(show, ["environment", "result"])
    show()
    return [widgets["dipole"], angles, widgets["environment"], *groups.values(), info]


def _transition_group(state: ExplorerState, widgets: dict) -> list:
    widgets["transition"] = select(state, "transition")
    lazy_custom = Lazy(lambda: [pn.Row(
        pn.widgets.FloatInput.from_param(state.param.wavelength_nm, sizing_mode="stretch_width"),
        pn.widgets.FloatInput.from_param(state.param.linewidth_mhz, sizing_mode="stretch_width"),
        sizing_mode="stretch_width")])
    custom = lazy_custom.pane
    info = pn.pane.HTML(styles=_SMALL)

    def show(*_):
        lazy_custom.show(state.transition == "custom")
        tr = state.transition_obj
        info.object = (f"λ0 = {tr.wavelength_nm:.6g} nm, Γ0/2π = {tr.linewidth_mhz:.5g} MHz, "
                       f"1/Γ0 = {tr.lifetime_ns:.4g} ns")

    state.param.watch(show, ["transition", "wavelength_nm", "linewidth_mhz"])
    show()
    widgets["units"] = buttons(state, "units")
    return [widgets["transition"], custom, info, widgets["units"],
            note("lab: nm, MHz (Γ/2π, ω/2π), ns · internal: λ0, Γ0, 1/Γ0")]


def _mode_group(state: ExplorerState, widgets: dict) -> list:
    widgets["mode"] = mode = pn.widgets.IntInput(
        label="Selected mode (↑/↓ to step; 0 = most subradiant)", value=state.selected_mode,
        start=0, step=1, sizing_mode="stretch_width")
    mode.param.watch(lambda e: setattr(state, "selected_mode", int(e.new)), "value")

    def from_state(*_):
        if state.result is not None:
            mode.end = state.result.modes.n - 1
        mode.value = state.selected_mode

    state.param.watch(from_state, ["selected_mode", "result"])
    prev_b = pn.widgets.Button(label="◀ less radiant", sizing_mode="stretch_width")
    next_b = pn.widgets.Button(label="more radiant ▶", sizing_mode="stretch_width")
    prev_b.on_click(lambda e: state.runner.on_loop(lambda: state.step_mode(-1)))
    next_b.on_click(lambda e: state.runner.on_loop(lambda: state.step_mode(+1)))
    widgets["lens_na"] = slider(state, "lens_na")
    widgets["lens_axis"] = buttons(state, "lens_axis")
    return [mode, pn.Row(prev_b, next_b, sizing_mode="stretch_width"), widgets["lens_na"],
            widgets["lens_axis"]]


def _display_group(state: ExplorerState, widgets: dict) -> list:
    widgets["color_by"] = select(state, "color_by")
    return [widgets["color_by"], buttons(state, "projection"), buttons(state, "far_field_scale")]


def _share_group(state: ExplorerState, widgets: dict) -> list:
    widgets["download"] = download = pn.widgets.FileDownload(
        callback=lambda: io.StringIO(scn.dumps(state.scenario_for_export())),
        filename="choir-scenario.json", label="Download scenario (.json)",
        color="primary", sizing_mode="stretch_width")
    state.param.watch(lambda e: setattr(download, "filename", _slug(e.new) + ".json"),
                      "scenario_name")
    widgets["spectrum"] = pn.widgets.FileDownload(
        callback=lambda: io.StringIO(spectrum_csv(state.result.modes, state.transition_obj)
                                     if state.result is not None else ""),
        filename="choir-spectrum.csv", label="Download spectrum (.csv)",
        sizing_mode="stretch_width")
    widgets["upload"] = upload = pn.widgets.FileInput(accept=".json", multiple=False,
                                                      sizing_mode="stretch_width")

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
    return [download, note("Open a scenario file (.json):", 12), upload, widgets["spectrum"],
            note("Each plot saves as PNG from its toolbar. The page address carries the array "
                 "settings.")]


def probe_controls(state: ExplorerState, widgets: dict) -> pn.Column:
    """Probe, scan range, field-map plane and decay start: part of the probe section."""
    for name in ("probe_detuning_min", "probe_detuning_max", "decay_t_max"):
        widgets[name] = slider(state, name)

    def sliders(*names):
        for name in names:
            widgets[name] = slider(state, name)
        return [widgets[name] for name in names]

    # only the chosen probe's own controls are built (the others when first chosen)
    groups = {
        "plane_wave": Lazy(lambda: sliders("probe_theta_deg", "probe_phi_deg")),
        "gaussian_beam": Lazy(lambda: [*sliders("probe_waist"),
                                       note("Beam along +z, focused at the array centre; "
                                            "paraxial, so keep the waist ≳ 1 λ0.")]),
        "guided": Lazy(lambda: [buttons(state, "probe_from_end")]),
    }

    def show(*_):
        for key, group in groups.items():
            group.show(state.probe_kind == key)

    state.param.watch(show, "probe_kind")
    show()
    widgets["probe_kind"] = select(state, "probe_kind")
    widgets["decay_initial"] = select(state, "decay_initial")
    return pn.Column(
        widgets["probe_kind"], widgets["probe_detuning_min"], widgets["probe_detuning_max"],
        *(g.pane for g in groups.values()), buttons(state, "probe_polarization"),
        buttons(state, "map_plane"),
        widgets["decay_initial"], widgets["decay_t_max"],
        note("Linear response only: the probe is taken far below saturation. Laser safety "
             "follows local rules and licensed practice, which Choir does not assess."),
        width=320, margin=(0, 8))


def sidebar(state: ExplorerState, imperfections: pn.Card) -> tuple[pn.Column, dict]:
    """The sidebar: array, dipoles and environment, transition and units, mode, display, share.

    ``imperfections`` is the (lazily filled) card placed under the array group.
    Returns the column and the widgets by parameter name (tests reach them).
    """
    widgets: dict = {}
    column = pn.Column(
        _card("Array", *_array_group(state, widgets), imperfections),
        _card("Dipoles and environment", *_environment_group(state, widgets)),
        _card("Transition and units", *_transition_group(state, widgets)),
        _card("Mode and lens", *_mode_group(state, widgets)),
        _card("Display", *_display_group(state, widgets)),
        _card("Share", *_share_group(state, widgets)),
        width=330, sizing_mode="stretch_height", scroll=True)
    return column, widgets
