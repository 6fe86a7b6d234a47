"""Views of the explorer: one class per plot, each building its Bokeh figure once.

Every view watches the session state and only assigns ``source.data`` (and a
few axis labels and ranges) afterwards, so live dragging stays smooth.  No
formula lives here: numbers come from :mod:`physics` through the state, and
the state's unit helpers convert them for display.

Every figure has explicit ranges: a ``Range1d`` that the view sets from its
data, or — where x and y must share one scale (array, far field, maps) — a
``DataRange1d`` with ``match_aspect`` that follows an invisible extent glyph
which always holds two corner points.  BokehJS never has to guess a range
from empty data (it logs a warning each time it tries), and a log axis never
sees a value ≤ 0.  Legends sit below the plot frame, never on the data.
"""
from __future__ import annotations

import colorsys
import html

import numpy as np
from bokeh.models import (BoxAnnotation, ColorBar, ColumnDataSource, CustomJSHover, DataRange1d,
                          FixedTicker, HoverTool, Label, Legend, LegendItem, LinearAxis,
                          LinearColorMapper, PointDrawTool, Range1d, Span, TapTool, Whisker)
from bokeh.palettes import Category10, Cividis256, Inferno256
from bokeh.plotting import figure

from physics.ensembles import power_law
from physics.environment import parts_of
from physics.modes import SUBRADIANT_BELOW, SUPERRADIANT_ABOVE, radiance_label

from .jobs import DEFECTIVE_NOTE
from .state import ExplorerState

__all__ = ["SpectrumView", "ArrayView", "FarFieldView", "ProbeView", "BandsView", "SweepView",
           "mode_card_html",
           "PHASE_PALETTE",
           "FIGURE_LABELS", "LOG_AXIS_DECADES", "area_unit"]

#: Readable names of the mode figures used for colouring.
FIGURE_LABELS = {
    "participation_ratio": "participation ratio (emitters carrying the mode)",
    "petermann": "Petermann factor (1 = orthogonal modes)",
    "shift": "collective shift",
    "decay_rate": "log10 of decay rate / Γ0",
    "symmetry": "symmetry sector (hover a point for its parities)",
}

#: Decades shown by the logarithmic far-field colour scale.
LOG_DECADES = 4.0

#: Rates at or below this [Γ0] are round-off; the log axis shows them here.
RATE_FLOOR = 1e-15

#: Decades a log axis of a curve (decay) shows below the curves' largest value:
#: enough for a long subradiant tail, few enough for readable ticks.
LOG_AXIS_DECADES = 12.0

#: Height [px] of the plotting area of the probe and decay plots (legends come below).
PROBE_FRAME = 220

_TAG_ROUND_OFF = f", rate at round-off (≤ {RATE_FLOOR:g} Γ0)"


def _cyclic_palette(n: int = 256) -> list[str]:
    """A cyclic palette for phases: hue runs once round the circle, light and even."""
    out = []
    for k in range(n):
        r, g, b = colorsys.hls_to_rgb(k / n, 0.52, 0.78)
        out.append("#%02x%02x%02x" % (int(255 * r), int(255 * g), int(255 * b)))
    return out


PHASE_PALETTE = _cyclic_palette()
_ACCENT = "#c2185b"


def _fmt(value: float, unit: str) -> str:
    if not np.isfinite(value):
        return "∞"
    return f"{value:.4g} {unit}"


def _fmt_near_zero(value: float, resolution: float, unit: str) -> str:
    """Like ``_fmt``, but "0" for a value below ``resolution`` (round-off of a grid point)."""
    return f"0 {unit}" if abs(value) < resolution else f"{value:+.4g} {unit}"


def area_unit(state: ExplorerState) -> tuple[str, float]:
    """The display unit of an area and how many of it make one λ0².

    Internal units: λ0².  Lab units: µm², the factor being (λ0 in µm)² from
    the state's own length conversion; for the explorer's λ0 of 100 nm to
    100 µm one λ0² is 0.01 to 10⁴ µm², readable without powers of ten.
    """
    if state.units != "lab":
        return "λ0²", 1.0
    return "µm²", (float(state.to_length(1.0)) / 1000.0) ** 2


# ---------------------------------------------------------------- ranges and sources

def _finite(*arrays) -> np.ndarray:
    vals = [np.asarray(a, float).ravel() for a in arrays if np.size(a)]
    v = np.concatenate(vals) if vals else np.zeros(0)
    return v[np.isfinite(v)]


def _linear_span(*arrays, pad: float = 0.05, half: float = 1.0) -> tuple[float, float]:
    """Finite values' [min, max] widened by ``pad`` of the span each side.

    No values: (−half, half); all equal: that value ± ``half`` (in display units).
    """
    v = _finite(*arrays)
    if v.size == 0:
        return -half, half
    lo, hi = float(v.min()), float(v.max())
    if hi - lo <= 1e-12 * max(abs(lo), abs(hi), 1e-300):
        return lo - half, hi + half
    d = pad * (hi - lo)
    return lo - d, hi + d


def _log_span(*arrays, decades: float | None = LOG_AXIS_DECADES, at_least: float = 2.0,
              pad: float = 0.06) -> tuple[float, float]:
    """Positive finite values' [min, max] for a log axis, at most ``decades`` below the max.

    Padded by ``pad`` of the span (in decades) each side and at least
    ``at_least`` decades wide (one for a single value): below two decades
    BokehJS ticks a log axis linearly (5, 10, 15), which leaves the lower
    points of a spectrum or a decay without a label, but suits a parameter
    sweep.  (0.1, 10) without positive data.
    """
    v = _finite(*arrays)
    v = v[v > 0]
    if v.size == 0:
        return 0.1, 10.0
    hi = float(np.log10(v.max()))
    lo = float(np.log10(v.min()))
    if decades is not None:
        lo = max(lo, hi - decades)
    at_least = max(at_least, 1.0 if hi == lo else 0.0)
    if hi - lo < at_least:
        mid = 0.5 * (hi + lo)
        lo, hi = mid - at_least / 2, mid + at_least / 2
    d = pad * (hi - lo)
    return 10.0 ** (lo - d), 10.0 ** (hi + d)


def _set_range(rng: Range1d, span: tuple[float, float]) -> None:
    """Show ``span`` now and after the reset tool (only what changed is sent)."""
    lo, hi = float(span[0]), float(span[1])
    if (rng.start, rng.end, rng.reset_start, rng.reset_end) != (lo, hi, lo, hi):
        rng.update(start=lo, end=hi, reset_start=lo, reset_end=hi)


def _extent(p, x=(-1.0, 1.0), y=(-1.0, 1.0)) -> ColumnDataSource:
    """Two invisible corner points that alone set a plot's ``DataRange1d`` x and y ranges.

    With ``match_aspect`` BokehJS widens one range so a data unit has the same
    length in x and y whatever the page width; the view moves the corners to
    its data (``_set_extent``).  The glyph always holds two points, so the
    ranges are never computed from nothing.
    """
    src = ColumnDataSource(dict(x=list(x), y=list(y)))
    r = p.scatter("x", "y", source=src, size=0, alpha=0.0, visible=False)
    p.x_range.renderers = [r]
    p.y_range.renderers = [r]
    return src


def _set_extent(src: ColumnDataSource, x0: float, x1: float, y0: float, y1: float) -> None:
    _assign(src, dict(x=[float(x0), float(x1)], y=[float(y0), float(y1)]))


def _aspect_ranges() -> dict:
    """x and y ranges for a plot whose two axes share one scale (see ``_extent``)."""
    return dict(x_range=DataRange1d(range_padding=0.04), y_range=DataRange1d(range_padding=0.04),
                match_aspect=True)


def _same(a, b) -> bool:
    """Are two column values equal (arrays, lists, nested lists)?  Unsure → False."""
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        try:
            a, b = np.asarray(a), np.asarray(b)
            if a.shape != b.shape or a.dtype.kind != b.dtype.kind:
                return False
            return bool(np.array_equal(a, b, equal_nan=a.dtype.kind in "fc"))
        except (TypeError, ValueError):
            return False
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False


def _rows(data) -> int:
    return len(next(iter(data.values()))) if data else 0


def _assign(source: ColumnDataSource, data: dict) -> None:
    """Give ``source`` this data, sending only what changed.

    Same columns and rows: only the changed columns go to the browser (nothing
    if none changed); otherwise the whole table.  Numeric columns should be
    numpy arrays, which Bokeh sends as binary buffers.
    """
    old = source.data
    if set(old) == set(data) and _rows(old) == _rows(data):
        changed = {k: v for k, v in data.items() if not _same(old[k], v)}
        if changed:
            source.data.update(changed)
    else:
        source.data = data


def _clear(source: ColumnDataSource) -> None:
    _assign(source, {k: [] for k in source.data})


def _positive_or_nan(values) -> np.ndarray:
    """Values for a log axis: zero and negative (and non-finite) become NaN, a gap in a line."""
    v = np.array(values, dtype=float)
    v[~(v > 0)] = np.nan
    return v


def _legend(p, items: list, *, ncols: int = 1) -> Legend:
    """A legend below the plot frame, never over the data."""
    legend = Legend(items=items, orientation="vertical", ncols=ncols, location="top_left",
                    label_text_font_size="10px", glyph_height=14, label_height=14, spacing=0,
                    padding=4, margin=4, border_line_alpha=0.0, background_fill_alpha=0.0)
    p.add_layout(legend, "below")
    return legend


def _show_items(legend: Legend, shown: dict) -> None:
    """Show the legend entries of the curves drawn, hide the others (and an empty legend)."""
    for item, on in shown.items():
        if item.visible != bool(on):
            item.visible = bool(on)
    legend.visible = any(item.visible for item in legend.items)


def _names_hover() -> CustomJSHover:
    """A hover formatter that shows ``names[value]`` for an integer code column."""
    return CustomJSHover(args=dict(names=[]), code="return names[value] ?? ''")


def _select_tapped(state: ExplorerState, source: ColumnDataSource, indices) -> None:
    """A tapped point selects its mode (column "mode"); the Bokeh selection is cleared."""
    if not indices:
        return
    mode = int(source.data["mode"][indices[0]])
    source.selected.indices = []
    state.selected_mode = mode


class SpectrumView:
    """Every collective mode as a point: shift (x) against decay rate (y, log).

    The points' source holds numbers only (shift and rate in display units,
    lifetime, figures, integer codes for the tag and the symmetry sector); the
    hover tool formats them, and its text is rebuilt only when the units change.
    """

    def __init__(self, state: ExplorerState) -> None:
        self.state = state
        self.source = ColumnDataSource(dict(x=[], y=[], c=[], mode=[], rate=[], life=[], pr=[],
                                            pk=[], tag=[], sym=[]),
                                       name="choir-spectrum-points")
        self.marker = ColumnDataSource(dict(x=[], y=[]), name="choir-spectrum-marker")
        p = figure(height=360, name="choir-spectrum", sizing_mode="stretch_width", y_axis_type="log",
                   x_range=Range1d(-1.0, 1.0), y_range=Range1d(0.1, 10.0),
                   tools="pan,wheel_zoom,box_zoom,reset,save", toolbar_location="above",
                   title="Collective spectrum — click a point to select its mode")
        self.mapper = LinearColorMapper(palette=Cividis256)
        r = p.scatter("x", "y", source=self.source, size=8, line_color="#333333",
                      line_width=0.4, fill_color={"field": "c", "transform": self.mapper},
                      nonselection_fill_alpha=1.0, nonselection_line_alpha=1.0,
                      selection_fill_alpha=1.0)
        p.scatter("x", "y", source=self.marker, size=20, marker="circle", fill_alpha=0.0,
                  line_color=_ACCENT, line_width=3)
        self.tag_names, self.sector_names = _names_hover(), _names_hover()
        self.hover = HoverTool(renderers=[r], formatters={
            "@x": "printf", "@rate": "printf", "@life": "printf", "@tag": self.tag_names,
            "@sym": self.sector_names})
        self._tooltip_units: tuple | None = None
        p.add_tools(self.hover)
        p.add_tools(TapTool(renderers=[r]))
        self.single = Span(location=1.0, dimension="width", line_dash="dashed",
                           line_color="#666666", line_width=1)
        p.add_layout(self.single)
        self.single_label = Label(x=5, y=1.0, x_units="screen", text="single emitter",
                                  text_font_size="10px", text_color="#555555", y_offset=2)
        p.add_layout(self.single_label)
        self.colorbar = ColorBar(color_mapper=self.mapper, width=10, title_text_font_size="10px",
                                 title_standoff=6)
        p.add_layout(self.colorbar, "right")
        self.figure = p
        self.source.selected.on_change("indices", self._on_tap)
        state.param.watch(self.update, ["result", "color_by", "units", "transition",
                                        "wavelength_nm", "linewidth_mhz"])
        state.param.watch(self.update_marker, ["selected_mode"])
        self.update()

    def _tooltips(self) -> None:
        """Hover text in the display units; rebuilt only when they change."""
        fu, tu = self.state.frequency_label(), self.state.time_label()
        if self._tooltip_units == (fu, tu):
            return
        self._tooltip_units = (fu, tu)
        self.hover.tooltips = [
            ("mode", "@mode (@tag{custom})"), ("shift", f"@x{{%+.4g}} {fu}"),
            ("decay rate", f"@rate{{%.4g}} {fu}"), ("lifetime", f"@life{{%.4g}} {tu}"),
            ("participation ratio", "@pr{0.0}"), ("Petermann factor", "@pk{0.000}"),
            ("symmetry", "@sym{custom}")]

    def update(self, *_) -> None:
        st, res = self.state, self.state.result
        if res is None:
            _clear(self.source)
            return
        m = res.modes
        rates, shifts = m.decay_rates, m.shifts
        fu = st.frequency_label()
        x = np.asarray(st.to_frequency(shifts), float)
        y = np.asarray(st.to_frequency(np.maximum(rates, RATE_FLOOR)), float)
        color_by = st.color_by
        if not m.has_vectors and color_by in ("participation_ratio", "petermann"):
            color_by = "decay_rate"  # until the eigenvectors arrive
        fig = {"participation_ratio": m.participation_ratio, "petermann": m.petermann,
               "shift": x, "decay_rate": np.log10(np.maximum(rates, RATE_FLOOR)),
               "symmetry": m.sector.astype(float)}[color_by]
        tags = [radiance_label(r) + (_TAG_ROUND_OFF if r <= RATE_FLOOR else "") for r in rates]
        tag_names, tag_codes = np.unique(tags, return_inverse=True)
        for hover, names in ((self.tag_names, list(tag_names)),
                             (self.sector_names, list(m.sector_names))):
            if hover.args["names"] != names:
                hover.args = dict(names=names)
        self._tooltips()
        _assign(self.source, dict(
            x=x, y=y, c=np.asarray(fig, float), mode=np.arange(m.n),
            rate=np.asarray(st.to_frequency(rates), float),
            life=np.asarray(st.to_time(m.lifetimes), float),
            pr=np.asarray(m.participation_ratio, float), pk=np.asarray(m.petermann, float),
            tag=tag_codes.astype(np.int32), sym=np.asarray(m.sector, np.int32)))
        if color_by == "symmetry":  # one colour per sector
            k = len(m.sector_names)
            self.mapper.update(palette=list(Category10[10][: max(3, k)]) if k <= 10 else Cividis256,
                               low=-0.5, high=max(3, k) - 0.5)
        else:
            lo, hi = float(np.nanmin(fig)), float(np.nanmax(fig))
            if hi - lo < 1e-12:
                hi = lo + 1.0
            self.mapper.update(palette=Cividis256, low=lo, high=hi)
        unit = f" [{fu}]" if color_by == "shift" else ""
        self.colorbar.title = FIGURE_LABELS[color_by] + unit + (
            "" if color_by == st.color_by else " — eigenvectors still being computed")
        lab = "Γ/2π [MHz]" if st.units == "lab" else "Γ [Γ0]"
        shift_lab = "ω/2π [MHz]" if st.units == "lab" else "ω [Γ0]"
        self.figure.yaxis.axis_label = f"decay rate {lab}"
        self.figure.xaxis.axis_label = f"collective frequency shift {shift_lab}"
        one = float(st.to_frequency(1.0))
        self.single.location = one
        self.single_label.y = one
        _set_range(self.figure.x_range, _linear_span(x, half=0.5 * one))
        # every point, the round-off floor included, and the single-emitter line
        _set_range(self.figure.y_range, _log_span(y, [one], decades=None))
        self.update_marker()

    def update_marker(self, *_) -> None:
        st, res = self.state, self.state.result
        if res is None:
            return
        k = min(st.selected_mode, res.modes.n - 1)
        _assign(self.marker, dict(x=[float(self.source.data["x"][k])],
                                  y=[float(self.source.data["y"][k])]))

    def _on_tap(self, attr, old, new) -> None:
        _select_tapped(self.state, self.source, new)


class ArrayView:
    """Emitters at their positions, coloured by the selected mode's phase.

    Disc radius ∝ |c_j| of the selected mode (with a floor so every emitter
    stays visible); colour = arg c_j after fixing the global phase so the
    largest amplitude is real and positive.  A drawing tool adds, drags and
    deletes emitters; any edit turns the geometry into an explicit list.
    """

    def __init__(self, state: ExplorerState) -> None:
        self.state = state
        self.source = ColumnDataSource(dict(x=[], y=[], r=[], phase=[], amp=[], idx=[]),
                                       name="choir-array-points")
        self.source.default_values = {"idx": -1, "r": 0.0, "phase": 0.0, "amp": 0.0}
        p = figure(height=360, name="choir-array", sizing_mode="stretch_width", **_aspect_ranges(),
                   tools="pan,wheel_zoom,reset,save", toolbar_location="above",
                   title="Array — selected mode on each emitter")
        self.extent = _extent(p)
        self.mapper = LinearColorMapper(palette=PHASE_PALETTE, low=-np.pi, high=np.pi)
        r = p.circle("x", "y", radius="r", source=self.source, line_color="#222222",
                     line_width=0.6, fill_color={"field": "phase", "transform": self.mapper},
                     selection_line_color=_ACCENT, selection_line_width=3,
                     nonselection_fill_alpha=1.0, nonselection_line_alpha=1.0)
        self.draw = PointDrawTool(renderers=[r], add=True, drag=True,
                                  description="Edit emitters: click empty space to add, drag "
                                  "to move, click then Backspace to delete")
        p.add_tools(self.draw)
        p.add_tools(HoverTool(renderers=[r], tooltips=[("emitter", "@idx"),
                                                       ("|c|²", "@amp{0.0000}"),
                                                       ("phase", "@phase{0.00} rad")]))
        cb = ColorBar(color_mapper=self.mapper, width=10, title="phase arg c_j [rad]",
                      title_text_font_size="10px", major_label_text_font_size="9px")
        p.add_layout(cb, "right")
        self.env_lines = ColumnDataSource(dict(xs=[], ys=[], color=[], dash=[], label=[]),
                                          name="choir-environment-lines")
        self.env_rings = ColumnDataSource(dict(x=[], y=[], r=[], color=[], label=[]),
                                          name="choir-environment-rings")
        lr = p.multi_line("xs", "ys", source=self.env_lines, line_color="color", line_width=3,
                          line_alpha=0.55, line_dash="dash")
        rr = p.circle("x", "y", radius="r", source=self.env_rings, fill_alpha=0.08,
                      fill_color="color", line_color="color", line_width=2, line_alpha=0.7)
        p.add_tools(HoverTool(renderers=[lr, rr], tooltips=[("", "@label")]))
        p.renderers.remove(lr)
        p.renderers.remove(rr)
        p.renderers.insert(0, rr)
        p.renderers.insert(0, lr)  # drawn beneath the emitters
        self.figure = p
        self._writing = False
        self.source.on_change("data", self._on_edit)
        state.param.watch(self.update, ["result", "mode_result", "selected_mode", "units",
                                        "projection",
                                        "transition", "wavelength_nm", "linewidth_mhz"])
        self.update()

    def _axes(self) -> tuple[int, int]:
        return {"xy": (0, 1), "xz": (0, 2), "yz": (1, 2)}[self.state.projection]

    def update(self, *_) -> None:
        st, res = self.state, self.state.result
        if res is None:
            return
        em, m = res.emitters, res.modes
        k = min(st.selected_mode, m.n - 1)
        # no meaningful profile (defective), or not computed yet (eigenvalues first: the
        # selected mode's own vector comes with its figures, all vectors later)
        mres = st.mode_result
        if res.defective:
            c = np.ones(m.n)
        elif m.has_vectors:
            c = m.vectors[:, k]
        elif mres is not None and mres.mode == k and mres.vector is not None \
                and mres.scenario is res.scenario:
            c = mres.vector
        else:
            c = np.ones(m.n)
        big = c[np.argmax(np.abs(c))]
        c = c * np.conj(big) / abs(big) ** 2  # largest amplitude → 1 (real, positive)
        amp = np.abs(c)
        a, b = self._axes()
        pos = st.to_length(em.positions)
        nn = st.nearest_neighbours() if em.n > 1 else 0.5
        r0 = 0.42 * float(st.to_length(min(nn, 1.0)))
        self._writing = True
        try:  # a new mode changes r, phase and amp only: only those are sent
            _assign(self.source, dict(x=pos[:, a], y=pos[:, b], r=r0 * np.maximum(amp, 0.18),
                                      phase=np.angle(c), amp=amp ** 2 / np.sum(amp ** 2),
                                      idx=np.arange(em.n)))
        finally:
            self._writing = False
        lab = st.length_label()
        names = "xyz"
        self.figure.xaxis.axis_label = f"{names[a]} [{lab}]"
        self.figure.yaxis.axis_label = f"{names[b]} [{lab}]"
        rings = self._draw_environment(pos, a, b, float(st.to_length(1.0)))
        # the emitters (discs included) and any ring; axis lines run out of the frame
        margin = 1.2 * r0
        xs = np.concatenate([pos[:, a] - margin, pos[:, a] + margin,
                             np.subtract(rings["x"], rings["r"]), np.add(rings["x"], rings["r"])])
        ys = np.concatenate([pos[:, b] - margin, pos[:, b] + margin,
                             np.subtract(rings["y"], rings["r"]), np.add(rings["y"], rings["r"])])
        _set_extent(self.extent, xs.min(), xs.max(), ys.min(), ys.max())

    def _draw_environment(self, pos: np.ndarray, a: int, b: int, scale: float) -> dict:
        """Waveguide axis and cavity axis/waist in the view plane (projected).

        Returns the rings drawn (axes through the plane), which the plot's extent includes.
        """
        env = self.state.result.environment
        parts = parts_of(env)
        lines = dict(xs=[], ys=[], color=[], dash=[], label=[])
        rings = dict(x=[], y=[], r=[], color=[], label=[])
        lo, hi = pos.min(axis=0), pos.max(axis=0)
        span = max(float(np.max(hi - lo)), scale)
        mid = 0.5 * (lo + hi)
        for part in parts:
            axis = getattr(part, "axis", None)
            if axis is None:
                continue
            ax = "xyz".index(axis)
            is_wg = hasattr(part, "gamma_forward")
            color = "#00897b" if is_wg else "#ef6c00"
            label = "waveguide axis" if is_wg else "cavity axis"
            centre = mid if is_wg else np.asarray(part.center) * scale
            offsets = [0.0]
            waist = None if is_wg else part.waist
            if waist is not None:
                offsets += [waist * scale, -waist * scale]
            if ax in (a, b):
                other = b if ax == a else a
                for k, off in enumerate(offsets):
                    ends = [lo[ax] - 0.3 * span, hi[ax] + 0.3 * span]
                    across = [centre[other] + off] * 2
                    xs, ys = (ends, across) if ax == a else (across, ends)
                    lines["xs"].append(xs)
                    lines["ys"].append(ys)
                    lines["color"].append(color)
                    lines["dash"].append("solid" if k == 0 else "dashed")
                    lines["label"].append(label if k == 0 else "cavity waist")
            else:  # axis perpendicular to the view: mark where it pierces the plane
                rings["x"].append(centre[a])
                rings["y"].append(centre[b])
                rings["r"].append(waist * scale if waist is not None else 0.04 * span)
                rings["color"].append(color)
                rings["label"].append(label + (" (waist)" if waist is not None else "") +
                                      " ⊥ this plane")
        # the same lines after every selection or unit change: usually nothing is sent
        _assign(self.env_lines, {k: [np.asarray(v, float) for v in vals] if k in ("xs", "ys")
                                 else vals for k, vals in lines.items()})
        _assign(self.env_rings, {k: np.asarray(v, float) if k in ("x", "y", "r") else v
                                 for k, v in rings.items()})
        return rings

    def _on_edit(self, attr, old, new) -> None:
        if self._writing or self.state.result is None:
            return
        st = self.state
        em = st.result.emitters
        idx = np.asarray(new["idx"], dtype=int)
        xs = np.asarray(new["x"], dtype=float)
        ys = np.asarray(new["y"], dtype=float)
        scale = float(st.to_length(1.0))
        a, b = self._axes()
        pos = np.zeros((len(idx), 3))
        known = (idx >= 0) & (idx < em.n)
        pos[known] = em.positions[idx[known]]
        pos[~known] = em.positions.mean(axis=0)  # new emitters sit in the array's mean plane
        pos[:, a] = xs / scale
        pos[:, b] = ys / scale
        changed = (len(idx) != em.n) or not np.allclose(pos, em.positions[np.clip(idx, 0, em.n - 1)],
                                                        rtol=0, atol=1e-12)
        if changed:
            st.edit_positions(pos, np.where(known, idx, -1))
            if st.message.startswith("Edit refused"):
                self.update()  # put the refused edit back on screen


class FarFieldView:
    """dP/dΩ of the selected mode on both hemispheres, seen in direction cosines.

    Each disc is the orthographic view (u_x, u_y) = (sinθ cosφ, sinθ sinφ) of a
    hemisphere — what a lens's back focal plane shows; a lens of numerical
    aperture NA collects the disc of radius NA, drawn dashed.  A unit of u_x
    and of u_y have the same length on screen at every page width (the ranges
    follow the frame's aspect), so the discs stay round.
    """

    GAP = 0.35

    def __init__(self, state: ExplorerState) -> None:
        self.state = state
        off = 2.0 + self.GAP
        self.images = ColumnDataSource(dict(image=[], x=[], y=[], dw=[], dh=[]),
                                       name="choir-farfield-images")
        self.lens = ColumnDataSource(dict(x=[], y=[], r=[]))
        p = figure(frame_height=270, sizing_mode="stretch_width", **_aspect_ranges(),
                   tools="save,reset", name="choir-farfield", toolbar_location="above",
                   title="Far field of the selected mode, dP/dΩ")
        # both discs and the labels above and below them, nothing more
        _extent(p, x=(-1.04, off + 1.04), y=(-1.2, 1.2))
        self.mapper = LinearColorMapper(palette=Inferno256, low=0.0, high=1.0,
                                        nan_color="rgba(0,0,0,0)")
        p.image(image="image", x="x", y="y", dw="dw", dh="dh", source=self.images,
                color_mapper=self.mapper)
        p.circle(x=[0.0, off], y=[0.0, 0.0], radius=1.0, fill_alpha=0.0, line_color="#444444")
        p.circle("x", "y", radius="r", source=self.lens, fill_alpha=0.0, line_color="#29b6f6",
                 line_width=2.5, line_dash="dashed")
        for cx, text in ((0.0, "upper hemisphere (+z)"), (off, "lower hemisphere (−z)")):
            p.add_layout(Label(x=cx, y=1.03, text=text, text_align="center",
                               text_baseline="bottom", text_font_size="11px"))
        self.lens_label = Label(x=off / 2, y=-1.03, text="", text_align="center",
                                text_baseline="top", text_font_size="11px", text_color="#0277bd")
        p.add_layout(self.lens_label)
        p.axis.visible = False
        p.grid.visible = False
        cb = ColorBar(color_mapper=self.mapper, width=10, title="dP/dΩ [Γ0 per sr]",
                      title_text_font_size="10px")
        p.add_layout(cb, "right")
        self.figure = p
        self._off = off
        self.colorbar = cb
        state.param.watch(self.update, ["mode_result", "lens_axis", "far_field_scale"])
        self.update()

    def update(self, *_) -> None:
        st, mres = self.state, self.state.mode_result
        if mres is None:
            return
        img = mres.far_field
        if img is None:
            _clear(self.images)
            _clear(self.lens)
            self.colorbar.visible = False  # no scale for a picture that is not there
            res = st.result
            self.lens_label.text = ("no far field: eigenvectors of a defective matrix carry no "
                                    "meaning" if res is not None and res.defective else
                                    "no free-space channel in this environment")
            return
        self.colorbar.visible = True
        pix = img.shape[0]
        top = float(np.nanmax(img)) if np.any(np.isfinite(img)) else 1.0
        top = top if top > 0 else 1.0
        if st.far_field_scale == "log":
            with np.errstate(divide="ignore"):
                img = np.log10(np.maximum(img / top, 10.0 ** -LOG_DECADES))
            self.mapper.update(low=-LOG_DECADES, high=0.0)
            self.colorbar.title = (f"log10 of dP/dΩ / max   (max = {top:.3g} Γ0 per sr)")
        else:
            self.mapper.update(low=0.0, high=top)
            self.colorbar.title = "dP/dΩ [Γ0 per sr]"
        up, down = img[:, :pix], img[:, pix:]
        _assign(self.images, dict(image=[up, down], x=[-1.0, self._off - 1.0], y=[-1.0, -1.0],
                                  dw=[2.0, 2.0], dh=[2.0, 2.0]))
        cx = 0.0 if st.lens_axis == "+z" else self._off
        _assign(self.lens, dict(x=[cx], y=[0.0], r=[float(mres.na)]))
        frac = mres.collected_up if st.lens_axis == "+z" else mres.collected_down
        self.lens_label.text = (f"lens NA {mres.na:.2f} along {st.lens_axis}: collects "
                                f"{100 * frac:.3g} % of mode {mres.mode}'s emission")


#: Colours of the decay plot's per-channel lines.
_CHANNEL_COLOURS = ["#00897b", "#ad1457", "#1565c0", "#6d4c41", "#558b2f", "#f9a825"]


class ProbeView:
    """Response to a weak probe, the field map at the spectrum's peak, and a decay curve.

    All three come from linear solves and e^{−iHt} acting on a vector (no
    eigenvectors), so they stay meaningful for defective matrices.  Every
    line drawn has a legend entry below its plot; curves that are not drawn
    (no |t|², no infinite-array comparison, a channel that receives nothing)
    have none, and ``summary`` says what is left out and why.
    """

    def __init__(self, state: ExplorerState) -> None:
        self.state = state
        self.summary = ""
        self.figures = (self._spectrum_figure(), self._map_figure(), self._decay_figure())
        state.param.watch(self.update, ["analysis", "units", "transition", "wavelength_nm",
                                        "linewidth_mhz"])
        self.update()

    def _spectrum_figure(self):
        self.spec = ColumnDataSource(dict(x=[], y=[], t2=[], r2=[]), name="choir-probe-spectrum")
        self.sheet = ColumnDataSource(dict(x=[], r2=[]), name="choir-probe-sheet")
        self.marker = Span(location=0.0, dimension="height", line_color=_ACCENT,
                           line_dash="dotted", line_width=2)
        s = figure(frame_height=PROBE_FRAME, sizing_mode="stretch_width",
                   x_range=Range1d(-1.0, 1.0), y_range=Range1d(0.0, 1.0),
                   tools="pan,wheel_zoom,reset,save", toolbar_location="above",
                   title="Probe spectrum", name="choir-probe-plot")
        # |t|², |r|² and the infinite array's reflection are probabilities: when the
        # signal is a cross-section they get their own axis on the right
        s.extra_y_ranges = {"probability": Range1d(0.0, 1.0)}
        self.probability_axis = LinearAxis(y_range_name="probability", visible=False,
                                           axis_label="|t|², |r|² (probabilities)")
        s.add_layout(self.probability_axis, "right")
        self.signal_line = s.line("x", "y", source=self.spec, line_width=2.5, color="#4527a0")
        self.t_line = s.line("x", "t2", source=self.spec, line_width=1.5, color="#00897b",
                             line_dash="dashed", y_range_name="probability")
        self.r_line = s.line("x", "r2", source=self.spec, line_width=1.5, color="#ad1457",
                             line_dash="dotdash", y_range_name="probability")
        self.sheet_line = s.line("x", "r2", source=self.sheet, line_width=1.5, color="#757575",
                                 line_dash="dotted", y_range_name="probability")
        self.signal_item = LegendItem(label="signal", renderers=[self.signal_line])
        self.t_item = LegendItem(label="|t|² transmitted", renderers=[self.t_line])
        self.r_item = LegendItem(label="|r|² reflected", renderers=[self.r_line])
        self.sheet_item = LegendItem(label="|r|² of the infinite array",
                                     renderers=[self.sheet_line])
        self.spec_legend = _legend(s, [self.signal_item, self.t_item, self.r_item,
                                       self.sheet_item], ncols=2)
        s.add_layout(self.marker)
        return s

    def _map_figure(self):
        self.image = ColumnDataSource(dict(image=[], x=[], y=[], dw=[], dh=[]),
                                      name="choir-field-map")
        self.dots = ColumnDataSource(dict(x=[], y=[]))
        # a square map in a square frame: x and y share one scale (no data ranges to
        # compute, so the figure may stay hidden while there is nothing to map)
        m = figure(frame_height=PROBE_FRAME, frame_width=PROBE_FRAME, width=None, height=None,
                   sizing_mode="fixed",
                   x_range=Range1d(-1.0, 1.0), y_range=Range1d(-1.0, 1.0),
                   tools="pan,wheel_zoom,reset,save", toolbar_location="above",
                   title="Field intensity at the spectrum's peak", name="choir-map-plot")
        m.xaxis.ticker.desired_num_ticks = 4
        self.map_mapper = LinearColorMapper(palette=Inferno256, low=0.0, high=1.0,
                                            nan_color="rgba(0,0,0,0)")
        m.image(image="image", x="x", y="y", dw="dw", dh="dh", source=self.image,
                color_mapper=self.map_mapper)
        m.scatter("x", "y", source=self.dots, size=4, color="#80deea")
        m.add_layout(ColorBar(color_mapper=self.map_mapper, width=10,
                              title="|E|² / |E_in(centre)|²", title_text_font_size="10px"),
                     "right")
        return m

    def _decay_figure(self):
        self.decay = ColumnDataSource(dict(t=[], p=[], w=[]), name="choir-decay")
        self.channels = ColumnDataSource(dict(xs=[], ys=[], color=[], name=[], label=[]),
                                         name="choir-decay-channels")
        d = figure(frame_height=PROBE_FRAME, sizing_mode="stretch_width", y_axis_type="log",
                   x_range=Range1d(0.0, 1.0), y_range=Range1d(0.1, 10.0),
                   tools="pan,wheel_zoom,reset,save", toolbar_location="above",
                   title="Decay", name="choir-decay-plot")
        p = d.line("t", "p", source=self.decay, line_width=2.5, color="#4527a0")
        w = d.line("t", "w", source=self.decay, line_width=1.5, color="#ef6c00",
                   line_dash="dashed")
        ch = d.multi_line("xs", "ys", source=self.channels, line_color="color", line_width=1.2,
                          line_dash="dotted")
        d.add_tools(HoverTool(renderers=[ch], tooltips=[("", "@label")]))
        # one entry per channel line, named by the source's "label" column
        self.channel_item = LegendItem(label={"field": "label"}, renderers=[ch])
        self.decay_legend = _legend(d, [
            LegendItem(label="excited population", renderers=[p]),
            LegendItem(label="emitted, all channels", renderers=[w]), self.channel_item])
        d.yaxis.axis_label = "population; emission rate [Γ0]"
        return d

    def update(self, *_) -> None:
        an = self.state.analysis
        if an is None:
            return
        notes = [self._update_spectrum(an), self._update_map(an), self._update_decay(an),
                 an.note]  # why there is no scan, or what the decay starts from instead
        self.summary = " ".join(n[0].upper() + n[1:].rstrip(".") + "." for n in notes if n)

    def _update_spectrum(self, an) -> str:
        st, s = self.state, self.figures[0]
        fu = st.frequency_label()
        s.xaxis.axis_label = f"probe detuning {'Δ/2π' if st.units == 'lab' else 'Δ'} [{fu}]"
        kinds = dict((v, k) for k, v in st.param.probe_kind.objects.items())
        s.title.text = f"Spectrum, {kinds[an.probe.kind].split(' (')[0]} probe"
        s.visible = an.scan is not None
        if an.scan is None:  # e.g. a guided probe without a waveguide: the note says why
            _clear(self.spec)
            _clear(self.sheet)
            return ""
        x = np.asarray(st.to_frequency(an.scan["detunings"]), float)
        # the signal's name carries its unit; an area [λ0²] is shown in the display unit
        name = an.signal_name
        area = "[λ0²]" in name
        unit, per_area = area_unit(st) if area else ("", 1.0)
        y = np.asarray(an.signal, float) * per_area
        has_tr = "t" in an.scan
        nan = np.full(x.shape, np.nan)
        t2 = np.abs(an.scan["t"]) ** 2 if has_tr else nan
        r2 = np.abs(an.scan["r"]) ** 2 if has_tr else nan
        r_same = has_tr and not area and np.allclose(r2, y)  # the signal itself: drawn once
        _assign(self.spec, dict(x=x, y=y, t2=t2, r2=r2))
        sheet = an.sheet
        if sheet is not None:
            _assign(self.sheet, dict(x=np.asarray(st.to_frequency(sheet["detunings"]), float),
                                     r2=np.asarray(sheet["R"], float)))
        else:
            _clear(self.sheet)
        self.t_line.visible = has_tr
        self.r_line.visible = has_tr and not r_same
        self.sheet_line.visible = sheet is not None
        self.signal_item.label = dict(value=name.split(" [")[0].split(" (")[0])
        _show_items(self.spec_legend, {self.signal_item: True, self.t_item: self.t_line.visible,
                                       self.r_item: self.r_line.visible,
                                       self.sheet_item: self.sheet_line.visible})
        s.yaxis[0].axis_label = name.replace("[λ0²]", f"[{unit}]") if area else name
        probabilities = [t2 if has_tr else [], r2 if has_tr else [],
                         sheet["R"] if sheet is not None else []]
        drawn = any(np.size(v) for v in probabilities)
        self.probability_axis.visible = area and drawn
        if area:
            _set_range(s.y_range, _linear_span(y, [0.0]))
            _set_range(s.extra_y_ranges["probability"], _linear_span(*probabilities, [0.0, 1.0]))
        else:  # everything is a probability: one axis
            span = _linear_span(y, *probabilities, [0.0])
            _set_range(s.y_range, span)
            _set_range(s.extra_y_ranges["probability"], span)
        _set_range(s.x_range, _linear_span(x, pad=0.0))
        peak = float(st.to_frequency(an.map_detuning))
        self.marker.location = peak
        fit, tiny = an.fit, 1e-6 * float(np.ptp(x))  # below this: round-off of a grid point
        centre = float(st.to_frequency(fit["centre"]))
        text = (f"peak (red dotted line) at {_fmt_near_zero(peak, tiny, fu)}; Lorentzian fit: "
                f"centre {_fmt_near_zero(centre, tiny, fu)}, "
                f"width (FWHM) {_fmt(float(st.to_frequency(fit['width'])), fu)}"
                + ("" if fit["residual"] < 0.05 else " (poor fit: several resonances)"))
        if sheet is not None:
            text += ("; dotted grey: the infinite array with the same lattice, plane wave"
                     + (" at normal incidence" if an.probe.kind == "gaussian_beam" else "")
                     + f", peak reflection {np.max(sheet['R']):.3g}")
        return text

    def _update_map(self, an) -> str:
        st, m = self.state, self.figures[1]
        m.visible = an.map is not None
        if an.map is None:
            _clear(self.image)
            _clear(self.dots)
            return ("no field map: the guided probe has no free-space field to map"
                    if an.scan is not None and an.probe.kind == "guided" else "")
        u, v, inten = an.map
        scale = float(st.to_length(1.0))
        du = (u[1] - u[0]) * scale
        x0, y0 = u[0] * scale - du / 2, v[0] * scale - du / 2
        w, h = (u[-1] - u[0]) * scale + du, (v[-1] - v[0]) * scale + du
        _assign(self.image, dict(image=[inten], x=[x0], y=[y0], dw=[w], dh=[h]))
        side = max(w, h)  # the map is square; the frame is
        _set_range(m.x_range, (x0 + w / 2 - side / 2, x0 + w / 2 + side / 2))
        _set_range(m.y_range, (y0 + h / 2 - side / 2, y0 + h / 2 + side / 2))
        self.map_mapper.update(low=0.0, high=float(np.nanpercentile(inten, 99.5)) or 1.0)
        axes = {"xy": (0, 1), "xz": (0, 2), "yz": (1, 2)}[st.map_plane]
        pos = st.result.emitters.positions * scale if st.result is not None else np.zeros((0, 3))
        _assign(self.dots, dict(x=pos[:, axes[0]], y=pos[:, axes[1]]))
        m.xaxis.axis_label = f"{'xyz'[axes[0]]} [{st.length_label()}]"
        m.yaxis.axis_label = f"{'xyz'[axes[1]]} [{st.length_label()}]"
        m.title.text = f"|E|² at the peak, {st.map_plane}-plane"
        return ""

    def _update_decay(self, an) -> str:
        st, d = self.state, self.figures[2]
        dec = an.decay
        t = np.asarray(st.to_time(dec["times"]), float)
        p, w = _positive_or_nan(dec["population"]), _positive_or_nan(dec["power"])
        _assign(self.decay, dict(t=t, p=p, w=w))
        names = [k for k in dec if k not in ("times", "population", "power")]
        # a channel that receives nothing has no place on a log axis: named, not drawn
        silent = [k for k in names if not np.any(np.asarray(dec[k]) > 0)]
        drawn = [k for k in names if k not in silent] if len(names) > 1 else []
        ys = [_positive_or_nan(dec[k]) for k in drawn]
        _assign(self.channels, dict(
            xs=[t] * len(drawn), ys=ys,
            color=[_CHANNEL_COLOURS[names.index(k) % len(_CHANNEL_COLOURS)] for k in drawn],
            name=drawn, label=[f"emitted into {k}" for k in drawn]))
        self.channel_item.visible = bool(drawn)
        d.title.text = f"Decay — {an.decay_label}"
        d.xaxis.axis_label = f"time [{st.time_label()}]"
        _set_range(d.x_range, _linear_span(t, pad=0.0))
        _set_range(d.y_range, _log_span(p, w, *ys))
        if len(names) > 1 and silent:
            return ("decay: nothing is emitted into " + " or ".join(silent)
                    + " (zero at all times, so not drawn on the log axis)")
        return ""


#: Light-cone intervals along the band path that the view can shade.
_CONE_BOXES = 16
#: Decades of decay rate shown by the bands' colour scale (lower = dark, grey).
BAND_DECADES = 4.0
_BAND_COLOURS = ["#4527a0", "#00897b", "#ef6c00", "#1565c0", "#ad1457", "#6d4c41",
                 "#558b2f", "#5e35b1", "#00838f"]


class BandsView:
    """Bands of the infinite lattice behind the array, with the finite array's modes on them.

    Left: collective shift along a path through the Brillouin zone, points
    coloured by decay rate (grey: no radiation), shaded where the Bloch wave
    lies inside the light cone; the finite array's modes as open circles at
    the nearest path point.  Middle: decay rate along the same path.  Right:
    the selected mode's band over the whole zone with the light circles of
    the diffraction orders.
    """

    def __init__(self, state: ExplorerState) -> None:
        self.state = state
        self.points = ColumnDataSource(dict(s=[], w=[], g=[], c=[], band=[], wt=[], gt=[], k=[]),
                                       name="choir-bands-points")
        self.lines = ColumnDataSource(dict(xs=[], ys=[], gs=[], color=[], band=[]),
                                      name="choir-bands-lines")
        self.finite = ColumnDataSource(dict(s=[], w=[], g=[], mode=[], wt=[], gt=[], band=[],
                                            off=[]), name="choir-bands-finite")
        self.marker = ColumnDataSource(dict(s=[], w=[], g=[]), name="choir-bands-marker")
        tools = "pan,wheel_zoom,box_zoom,reset,save"
        sh = figure(height=340, sizing_mode="stretch_width", tools=tools, toolbar_location="above",
                    x_range=Range1d(0.0, 1.0), y_range=Range1d(-1.0, 1.0),
                    title="Collective shift of the infinite lattice", name="choir-bands-shift")
        de = figure(height=340, sizing_mode="stretch_width", tools=tools, toolbar_location="above",
                    title="Decay rate of the infinite lattice", name="choir-bands-decay",
                    x_range=sh.x_range, y_range=Range1d(0.0, 1.0))
        self.mapper = LinearColorMapper(palette=Cividis256, low=-BAND_DECADES, high=0.0,
                                        low_color="#bdbdbd")
        self.cones = []
        for fig in (sh, de):
            boxes = [BoxAnnotation(left=0, right=0, fill_color="#fff59d", fill_alpha=0.45,
                                   line_alpha=0.0, visible=False, level="underlay")
                     for _ in range(_CONE_BOXES)]
            for b in boxes:
                fig.add_layout(b)
            self.cones.append(boxes)
        sh.multi_line("xs", "ys", source=self.lines, line_color="color", line_width=1.2,
                      line_alpha=0.6)
        pts = sh.scatter("s", "w", source=self.points, size=5, line_alpha=0.0,
                         fill_color={"field": "c", "transform": self.mapper})
        de.multi_line("xs", "gs", source=self.lines, line_color="color", line_width=2.0)
        fin = [fig.scatter("s", y, source=self.finite, size=7, marker="circle", fill_alpha=0.0,
                           line_color="#212121", line_width=1.2,
                           nonselection_line_alpha=1.0, selection_line_alpha=1.0)
               for fig, y in ((sh, "w"), (de, "g"))]
        self.finite_legends = []
        for fig, y, r in ((sh, "w", fin[0]), (de, "g", fin[1])):
            mark = fig.scatter("s", y, source=self.marker, size=18, fill_alpha=0.0,
                               line_color=_ACCENT, line_width=3)
            self.finite_legends.append(_legend(fig, [
                LegendItem(label="modes of this array (click one to select it)", renderers=[r]),
                LegendItem(label="selected mode", renderers=[mark])], ncols=2))
        sh.add_tools(HoverTool(renderers=[pts], tooltips=[
            ("band", "@band"), ("k", "@k"), ("shift", "@wt"), ("decay rate", "@gt")]))
        for fig, r in zip((sh, de), fin):
            fig.add_tools(HoverTool(renderers=[r], tooltips=[
                ("mode", "@mode (band @band)"), ("shift", "@wt"), ("decay rate", "@gt"),
                ("distance from path", "@off")]))
            fig.add_tools(TapTool(renderers=[r]))
        self.finite.selected.on_change("indices", self._on_tap)
        sh.add_layout(ColorBar(color_mapper=self.mapper, width=10, title_text_font_size="10px",
                               title="log10 of decay rate / Γ0 (grey: dark, no radiation)",
                               title_standoff=6), "right")
        self.map_source = ColumnDataSource(dict(image=[], x=[], y=[], dw=[], dh=[]),
                                           name="choir-bands-map")
        self.circles = ColumnDataSource(dict(x=[], y=[]), name="choir-bands-light-circles")
        self.map_marker = ColumnDataSource(dict(x=[], y=[]))
        # square zone map in a square frame (hidden until there is a map: explicit ranges)
        mp = figure(frame_width=250, frame_height=250, width=None, height=None, sizing_mode="fixed",
                    tools=tools,
                    x_range=Range1d(-1.0, 1.0), y_range=Range1d(-1.0, 1.0),
                    toolbar_location="above", title="Decay rate over the Brillouin zone",
                    name="choir-bands-map-plot")
        self.map_mapper = LinearColorMapper(palette=Cividis256, low=-BAND_DECADES, high=0.0,
                                            low_color="#bdbdbd", nan_color="rgba(0,0,0,0)")
        mp.image(image="image", x="x", y="y", dw="dw", dh="dh", source=self.map_source,
                 color_mapper=self.map_mapper)
        light = mp.circle("x", "y", radius=1.0, source=self.circles, fill_alpha=0.0,
                          line_color="#ef6c00", line_width=1.5, line_dash="dashed")
        mark = mp.scatter("x", "y", source=self.map_marker, size=14, marker="x",
                          line_color=_ACCENT, line_width=3)
        _legend(mp, [LegendItem(label="light circles |k + G| = k0", renderers=[light]),
                     LegendItem(label="selected mode's k", renderers=[mark])], ncols=2)
        mp.xaxis.axis_label = "kx / k0"
        mp.yaxis.axis_label = "ky / k0"
        mp.add_layout(ColorBar(color_mapper=self.map_mapper, width=10, title_text_font_size="10px",
                               title="log10 of decay rate / Γ0", title_standoff=6), "right")
        self.figures = (sh, de, mp)
        self.summary = ""
        self.selection_text = ""
        state.param.watch(self.update, ["bands", "units", "transition", "wavelength_nm",
                                        "linewidth_mhz"])
        state.param.watch(self.update_selection, ["selected_mode"])
        self.update()

    def update(self, *_) -> None:
        st, br = self.state, self.state.bands
        sh, de, mp = self.figures
        if br is None or br.lattice is None:
            for src in (self.points, self.lines, self.finite, self.marker, self.map_source,
                        self.circles, self.map_marker):
                _clear(src)
            self.summary = br.note if br is not None else ""
            self.selection_text = ""
            for fig in self.figures:  # no empty axes: the summary says why there are no bands
                fig.visible = False
            return
        sh.visible = de.visible = True
        path, b = br.path, br.bands
        fu = st.frequency_label()
        nk, nb = b.shift.shape
        s = np.repeat(path.distance, nb)
        w = st.to_frequency(b.shift.ravel())
        g = st.to_frequency(b.decay_rate.ravel())
        logg = np.log10(np.maximum(b.decay_rate.ravel(), 1e-300))
        kk = np.atleast_2d(path.k.T).T / (2.0 * np.pi)
        ktxt = [", ".join(f"{v:+.3f}" for v in row) + " k0" for row in kk]
        self.points.data = dict(s=s, w=w, g=g, c=np.where(np.isfinite(logg), logg, np.nan),
                                band=np.tile(np.arange(nb), nk),
                                wt=[_fmt(v, fu) for v in w],
                                gt=[_fmt(v, fu) if r > 1e-12 else "0 (outside the light cone)"
                                    for v, r in zip(g, b.decay_rate.ravel())],
                                k=np.repeat(ktxt, nb))
        top = float(np.nanmax(b.decay_rate)) if np.isfinite(b.decay_rate).any() else 1.0
        hi = np.log10(max(top, 1e-12))
        self.mapper.update(low=hi - BAND_DECADES, high=hi)
        self.map_mapper.update(low=hi - BAND_DECADES, high=hi)
        self.lines.data = dict(
            xs=[path.distance] * nb, ys=[st.to_frequency(b.shift[:, j]) for j in range(nb)],
            gs=[st.to_frequency(b.decay_rate[:, j]) for j in range(nb)],
            color=[_BAND_COLOURS[j % len(_BAND_COLOURS)] for j in range(nb)], band=list(range(nb)))
        inside = b.orders > 0
        edges = np.flatnonzero(np.diff(np.concatenate([[0], inside.astype(int), [0]])))
        spans = list(zip(edges[::2], edges[1::2]))
        for boxes in self.cones:
            for i, box in enumerate(boxes):
                if i < len(spans):
                    lo, hi_i = spans[i]
                    box.update(left=float(path.distance[lo]),
                               right=float(path.distance[min(hi_i, nk - 1)]), visible=True)
                else:
                    box.visible = False
        ticks = [float(t[0]) for t in path.ticks]
        for fig in (sh, de):
            fig.xaxis.ticker = FixedTicker(ticks=ticks)
            fig.xaxis.major_label_overrides = {t: lab for t, lab in
                                               zip(ticks, [t[1] for t in path.ticks])}
            fig.xaxis.axis_label = "k along the path (shaded: radiating)"
        pre = "ω/2π" if st.units == "lab" else "ω"
        gpre = "Γ/2π" if st.units == "lab" else "Γ"
        sh.yaxis.axis_label = f"collective shift {pre} [{fu}]"
        de.yaxis.axis_label = f"decay rate {gpre} [{fu}]"
        sh.title.text = f"Collective shift, infinite {br.lattice.kind} lattice"
        de.title.text = f"Decay rate, infinite {br.lattice.kind} lattice"
        if br.placed is not None:
            pl = br.placed
            res = st.result
            tol = 0.15 * float(np.max(path.distance)) / max(1, len(path.ticks) - 1)
            keep = np.flatnonzero(pl["off_path"] <= tol) if res is not None else np.array([], int)
            if res is not None:
                fw = st.to_frequency(res.modes.shifts[keep])
                fg = st.to_frequency(res.modes.decay_rates[keep])
                self.finite.data = dict(s=pl["path_distance"][keep], w=fw, g=fg, mode=keep,
                                        wt=[_fmt(v, fu) for v in fw], gt=[_fmt(v, fu) for v in fg],
                                        band=pl["band"][keep],
                                        off=[f"{v / (2 * np.pi):.3f} k0" for v in pl["off_path"][keep]])
        else:
            _clear(self.finite)
        for legend in self.finite_legends:  # no entry for circles that are not there
            legend.visible = len(self.finite.data["s"]) > 0
        _set_range(sh.x_range, _linear_span(path.distance, pad=0.015))
        one = float(st.to_frequency(1.0))
        _set_range(sh.y_range, _linear_span(w, self.finite.data["w"], half=one))
        _set_range(de.y_range, _linear_span(g, self.finite.data["g"], [0.0], half=one))
        if br.map is not None:
            kx, ky = br.map[0] / (2 * np.pi), br.map[1] / (2 * np.pi)
            dx, dy = kx[1] - kx[0], ky[1] - ky[0]
            self.map_source.data = dict(image=[np.zeros((len(ky), len(kx)))], x=[kx[0] - dx / 2],
                                        y=[ky[0] - dy / 2], dw=[kx[-1] - kx[0] + dx],
                                        dh=[ky[-1] - ky[0] + dy])
            c = br.orders_centres / (2 * np.pi)
            self.circles.data = dict(x=c[:, 0], y=c[:, 1])
            half = 1.15 * float(max(kx[-1], ky[-1]))
            _set_range(mp.x_range, (-half, half))
            _set_range(mp.y_range, (-half, half))
            mp.visible = True
        else:
            mp.visible = False
        self.summary = " ".join(br.notes)
        self.update_selection()

    def _selected_band(self) -> tuple[int, int | None]:
        st, br = self.state, self.state.bands
        res = st.result
        if br is None or br.placed is None or res is None:
            return 0, None
        k = min(st.selected_mode, len(br.placed["band"]) - 1)
        return int(br.placed["band"][k]), k

    def update_selection(self, *_) -> None:
        st, br = self.state, self.state.bands
        if br is None or br.lattice is None:
            return
        band, k = self._selected_band()
        _, _, mp = self.figures
        if br.map is not None:
            # NaN outside the zone stays NaN (transparent)
            img = np.log10(np.maximum(br.map[2][min(band, br.map[2].shape[0] - 1)], 1e-300))
            self.map_source.data = dict(self.map_source.data, image=[img])
            mp.title.text = f"Band {band} over the Brillouin zone"
        if k is None:
            self.marker.data = dict(s=[], w=[], g=[])
            self.map_marker.data = dict(x=[], y=[])
            self.selection_text = ""
            return
        pl, res, fu = br.placed, st.result, st.frequency_label()
        kvec = np.atleast_1d(pl["k"][k]) / (2 * np.pi)
        self.marker.data = dict(s=[pl["path_distance"][k]],
                                w=[float(st.to_frequency(res.modes.shifts[k]))],
                                g=[float(st.to_frequency(res.modes.decay_rates[k]))])
        if br.map is not None:
            self.map_marker.data = dict(x=[kvec[0]], y=[kvec[1]])
        ktxt = ("k ≈ (" + ", ".join(f"{v:.3f}" for v in kvec) + ") k0" if len(kvec) > 1
                else f"k ≈ {kvec[0]:.3f} k0")
        self.selection_text = (
            f"Mode {k}: {ktxt} (peak of its Fourier transform, holding "
            f"{100 * pl['weight'][k]:.0f} % of it; mirror images folded to k ≥ 0), band {band}. "
            f"Infinite lattice at that k: shift {_fmt(float(st.to_frequency(pl['shift'][k])), fu)}, "
            f"decay rate {_fmt(float(st.to_frequency(max(pl['decay_rate'][k], 0.0))), fu)}; "
            f"this finite mode: shift {_fmt(float(st.to_frequency(res.modes.shifts[k])), fu)}, "
            f"decay rate {_fmt(float(st.to_frequency(res.modes.decay_rates[k])), fu)}. "
            f"Its k lies {pl['off_path'][k] / (2 * np.pi):.3f} k0 from the path drawn.")

    def _on_tap(self, attr, old, new) -> None:
        _select_tapped(self.state, self.finite, new)


class SweepView:
    """An ensemble or sweep: the chosen figure's mean ± standard error against the
    parameter (log axes and a power-law fit on request), and the histogram of all
    decay rates of the realisations at the last value."""

    def __init__(self, state: ExplorerState) -> None:
        self.state = state
        self.points = ColumnDataSource(dict(x=[], y=[], lo=[], hi=[], n=[], txt=[]),
                                       name="choir-sweep-points")
        self.fit = ColumnDataSource(dict(x=[], y=[]), name="choir-sweep-fit")
        self.hist = ColumnDataSource(dict(left=[], right=[], top=[]), name="choir-sweep-hist")
        lin, hist = self._figures("linear", "choir-sweep-plot")
        log, _ = self._figures("log", "choir-sweep-plot-log")
        log.visible = False
        self.figures = (lin, log, hist)
        self.summary = ""
        state.param.watch(self.update, ["sweep", "units", "transition", "wavelength_nm",
                                        "linewidth_mhz"])
        self.update()

    def _figures(self, scale: str, name: str):
        tools = "pan,wheel_zoom,box_zoom,reset,save"
        default = (0.1, 10.0) if scale == "log" else (0.0, 1.0)
        p = figure(height=300, sizing_mode="stretch_width", tools=tools, toolbar_location="above",
                   title="Ensemble", name=name, x_axis_type=scale, y_axis_type=scale,
                   x_range=Range1d(*default), y_range=Range1d(*default))
        r = p.scatter("x", "y", source=self.points, size=8, color="#4527a0")
        p.add_layout(Whisker(source=self.points, base="x", lower="lo", upper="hi",
                             line_color="#4527a0"))
        p.line("x", "y", source=self.fit, color="#ef6c00", line_width=2)
        p.add_tools(HoverTool(renderers=[r], tooltips=[("value", "@x"), ("mean", "@txt"),
                                                       ("realisations", "@n")]))
        h = figure(height=300, sizing_mode="stretch_width", tools=tools, toolbar_location="above",
                   title="Decay rates of all modes", name="choir-sweep-hist-plot",
                   x_axis_type="log", x_range=Range1d(0.1, 10.0), y_range=Range1d(0.0, 1.0))
        h.quad(left="left", right="right", top="top", bottom=0, source=self.hist,
               fill_color="#7e57c2", line_color="#4527a0")
        h.yaxis.axis_label = "number of modes"
        return p, h

    def update(self, *_) -> None:
        st, sw = self.state, self.state.sweep
        lin, log, h = self.figures
        if sw is None:
            return
        lin.visible, log.visible = sw.fit is None, sw.fit is not None
        p = log if sw.fit is not None else lin
        plan, name = sw.plan, sw.figure
        pts = [s for s in sw.summary if s["figure"] == name]
        is_rate = name not in ("n_emitters", "probe_signal")
        conv = (lambda v: np.asarray(st.to_frequency(np.asarray(v, float)))) if is_rate \
            else (lambda v: np.asarray(v, float))
        unit = st.frequency_label() if is_rate else ("emitters" if name == "n_emitters" else "")
        if plan.axes:
            x = np.array([s[plan.axes[0].label] for s in pts])
            p.xaxis.axis_label = _SWEEP_AXIS.get(plan.axes[0].label, plan.axes[0].label)
        else:
            x = np.zeros(len(pts))
            p.xaxis.axis_label = "(one ensemble)"
        y = conv([s["mean"] for s in pts])
        e = conv([s["sem"] for s in pts])
        self.points.data = dict(x=x, y=y, lo=y - e, hi=y + e, n=[s["n"] for s in pts],
                                txt=[f"{v:.4g} ± {d:.2g} {unit}" for v, d in zip(y, e)])
        label = dict((v, k) for k, v in st.param.sweep_figure.objects.items()).get(name, name)
        p.yaxis.axis_label = f"{label} [{unit}]" if unit else label
        p.title.text = (f"{label}: mean ± standard error of {plan.realisations} realisation(s)"
                        if plan.realisations > 1 else f"{label}: one realisation per value")
        if sw.fit is not None and len(x) > 1:
            xx = np.geomspace(x.min(), x.max(), 60)
            self.fit.data = dict(x=xx, y=conv(power_law(sw.fit, xx)))
        else:
            self.fit.data = dict(x=[], y=[])
        if sw.fit is not None:
            _set_range(p.x_range, _log_span(x, decades=None, at_least=0.0))
            _set_range(p.y_range, _log_span(y - e, y + e, self.fit.data["y"], decades=None,
                                            at_least=0.0))
        else:
            _set_range(p.x_range, _linear_span(x, pad=0.08, half=0.5))
            _set_range(p.y_range, _linear_span(y - e, y + e, half=0.5))
        if sw.histogram is not None:
            edges, counts = sw.histogram
            ed = conv(edges)
            self.hist.data = dict(left=ed[:-1], right=ed[1:], top=counts)
            _set_range(h.x_range, _log_span(ed, decades=None, at_least=0.0, pad=0.02))
            _set_range(h.y_range, (0.0, 1.05 * max(1.0, float(np.max(counts, initial=0)))))
            h.xaxis.axis_label = f"decay rate [{st.frequency_label()}]"
            where = ""
            if plan.axes:
                where = f" at {p.xaxis.axis_label} = {x[-1]:.4g}"
            h.title.text = f"Decay rates of all modes, all realisations{where}"
        else:
            self.hist.data = dict(left=[], right=[], top=[])
        rep = sw.report
        self.summary = (f"{rep.computed} realisation(s) in {rep.seconds:.1f} s"
                        + (" — cancelled; what finished is shown" if rep.cancelled else "")
                        + (f"; {rep.failed} refused" if rep.failed else "")
                        + (f". Power-law fit: ∝ x^({sw.fit['exponent']:.3f} ± "
                           f"{sw.fit['exponent_error']:.3f})" if sw.fit is not None else "")
                        + f". Same run from the command line: {sw.command}")


_SWEEP_AXIS = {"geometry.spacing": "spacing a [λ0]", "geometry.nx+geometry.ny": "nx = ny",
               "geometry.n": "emitters N",
               "imperfections.jitter_lambda0.0+imperfections.jitter_lambda0.1":
                   "jitter σ along x and y [λ0]",
               "imperfections.jitter_lambda0.2": "jitter σ along z [λ0]",
               "imperfections.filling": "filling", "dipole.theta_deg": "dipole θ [deg]"}


def mode_card_html(state: ExplorerState) -> str:
    """HTML of the mode card: the selected mode's figures in the chosen units."""
    res, mres = state.result, state.mode_result
    if res is None:
        return "<p>No result yet.</p>"
    m = res.modes
    k = min(state.selected_mode, m.n - 1)
    if res.defective:
        rate, shift = float(m.decay_rates[k]), float(m.shifts[k])
        return (f"<div style='font-size:13px'><b style='font-size:15px'>Eigenvalue {k}</b> of "
                f"{m.n}<p>decay rate {rate:.4g} Γ0, shift {shift:+.4g} Γ0</p>"
                f"<p style='color:#b71c1c'>{html.escape(DEFECTIVE_NOTE)}</p></div>")
    own = (mres is not None and mres.mode == k and mres.vector is not None
           and mres.scenario is res.scenario)
    if not m.has_vectors and not own:
        rate, shift = float(m.decay_rates[k]), float(m.shifts[k])
        return (f"<div style='font-size:13px'><b style='font-size:15px'>Mode {k}</b> of {m.n}"
                f"<p>decay rate {rate:.4g} Γ0, shift {shift:+.4g} Γ0</p><p style='color:#555'>"
                f"Eigenvalues first: the eigenvectors of this array are being computed; "
                f"the mode's profile, far field and figures follow.</p></div>")
    pr = m.participation_ratio[k] if m.has_vectors else mres.participation
    pk = m.petermann[k] if m.has_vectors else mres.petermann
    rate, shift = float(m.decay_rates[k]), float(m.shifts[k])
    fu, tu = state.frequency_label(), state.time_label()
    tag = radiance_label(rate)
    life = state.to_time(1.0 / rate) if rate > RATE_FLOOR else np.inf
    rate_txt = (_fmt(float(state.to_frequency(rate)), fu) if rate > RATE_FLOOR
                else f"≤ {RATE_FLOOR:g} Γ0 (round-off)")
    pre = "Γ/2π" if state.units == "lab" else "Γ"
    spre = "ω/2π" if state.units == "lab" else "ω"
    rows = [
        (f"decay rate {pre}", f"{rate_txt} &nbsp;({rate:.4g} Γ0)"),
        (f"shift {spre}", _fmt(float(state.to_frequency(shift)), fu)),
        ("lifetime 1/Γ", _fmt(float(life), tu)),
        ("participation ratio", f"{pr:.4g} of {m.n} emitters"),
        ("Petermann factor", f"{pk:.4g}"),
    ]
    if m.has_vectors and m.multiplicity[k] > 1:
        rows.append(("degeneracy", f"{m.multiplicity[k]}-fold"))
    if m.sector_names != ("no symmetry used",):
        rows.append(("symmetry", m.symmetry_label(k)))
    if mres is not None and mres.mode == k:
        if np.isfinite(mres.collected_up):
            rows.append((f"lens NA {mres.na:.2f}", f"{100 * mres.collected_up:.3g} % along +z, "
                         f"{100 * mres.collected_down:.3g} % along −z (of all emission)"))
        if len(mres.channels) > 1:
            for name, power in mres.channels.items():
                share = 100 * power / rate if rate > RATE_FLOOR else float("nan")
                rows.append((f"into {name}", f"{share:.3g} % ({power:.4g} Γ0)"))
    body = "".join(f"<tr><th style='text-align:left;font-weight:500;padding-right:12px'>"
                   f"{html.escape(a)}</th><td>{b}</td></tr>" for a, b in rows)
    return (f"<div style='font-size:13px'><b style='font-size:15px'>Mode {k}</b> of {m.n} "
            f"&nbsp;<span style='background:#ede7f6;border-radius:8px;padding:1px 8px'>"
            f"{tag}</span><table style='margin-top:6px'>{body}</table>"
            f"<div style='color:#666;font-size:11px;margin-top:6px'>Tags: subradiant below "
            f"{SUBRADIANT_BELOW:g} Γ0, superradiant above {SUPERRADIANT_ABOVE:g} Γ0, otherwise "
            f"near single-emitter. Modes are numbered by decay rate (0 = most subradiant)."
            f"</div></div>")
