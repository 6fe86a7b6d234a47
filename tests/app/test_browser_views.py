"""What the views look like in a real browser: round discs, sane log axes, legends beside
the data, and no console warnings.

Measured through BokehJS (``Bokeh.index.find_one(model)`` gives a model's view:
its frame, scales, axis ticks and legend boxes), in Debian's headless Chromium
at the window sizes the defects were seen at.  Shared support is in
``browser_support``; common practice, no source.
"""
from __future__ import annotations

import time

import pytest

from app.views import FarFieldView
from physics import scenario as scn

from browser_support import ARTIFACTS, ROOT, Page, require_chromium

require_chromium()

pytestmark = pytest.mark.browser

#: Window sizes of the screenshots that showed the defects.
VIEWPORTS = [pytest.param((1600, 1000), id="1600x1000"), pytest.param((1920, 1080), id="1920x1080")]
#: One data unit along x and along y may differ by this share on screen (pixel rounding).
ASPECT_TOLERANCE = 0.02


def _load(t: Page, name: str) -> None:
    """Open a demo scenario through the page's file input and wait for its spectrum."""
    path = ROOT / "scenarios" / f"{name}.json"
    sc = scn.load(path)
    if name != "nonagon_ring":  # (the test server's own scenario)
        t.page.locator("input[type=file]").set_input_files(str(path))
    t.wait_for_points(lambda k: k == sc.emitters().n)
    t.wait_for_text(sc.name)


def _open(t: Page, title: str) -> None:
    """Open a collapsed section of the page (click its title), if it is collapsed."""
    closed = t.page.get_by_text(f"{title} (open to compute)", exact=True)
    if closed.count():
        closed.first.click()


def _open_probe(t: Page, channel: str | None = None) -> None:
    """Open the probe section and wait for the decay curve (of ``channel``, if given)."""
    _open(t, "Probe and decay")
    t.wait_for("const d = doc.get_model_by_name('choir-decay');"
               "return d && d.data.t.length > 100")
    if channel is not None:
        t.wait_for("const c = doc.get_model_by_name('choir-decay-channels');"
                   "return c && c.data.name.includes(arg)", channel)


def _open_bands(t: Page, periodic: bool) -> None:
    _open(t, "Bands of the infinite lattice")
    t.wait_for("return doc.get_model_by_name('choir-bands-points') != null")
    if periodic:
        t.wait_for("return doc.get_model_by_name('choir-bands-points').data.s.length > 0")
    else:
        t.wait_for_text("Bands of the infinite lattice")
        deadline = time.time() + 30
        while "computing the bands" in t.text() and time.time() < deadline:
            time.sleep(0.3)


def _settle(t: Page) -> None:
    """Let the last messages paint (several model updates arrive one after the other)."""
    t.page.mouse.move(5, 5)
    time.sleep(1.0)


@pytest.mark.parametrize("viewport", VIEWPORTS)
def test_far_field_discs_are_round_and_whole(browser, server, viewport):
    t = Page(browser, server, viewport=viewport)
    try:
        t.wait_for("return doc.get_model_by_name('choir-farfield-images').data.image.length == 2")
        _settle(t)
        off = 2.0 + FarFieldView.GAP  # centre of the second disc
        edge = [[c + dx, dy] for c in (0.0, off)
                for dx, dy in ((1, 0), (-1, 0), (0, 1), (0, -1))]
        g = t.js("const v = Bokeh.index.find_one(doc.get_model_by_name('choir-farfield'));"
                 "const xs = v.frame.x_scale, ys = v.frame.y_scale, b = v.frame.bbox;"
                 "return {px_x: xs.compute(1) - xs.compute(0), px_y: ys.compute(0) - ys.compute(1),"
                 "  box: [b.x0, b.x1, b.y0, b.y1],"
                 "  edge: arg.map(([x, y]) => [xs.compute(x), ys.compute(y)])}", edge)
        assert g["px_x"] > 50  # a real picture, not a sliver
        assert g["px_x"] == pytest.approx(g["px_y"], rel=ASPECT_TOLERANCE)
        x0, x1, y0, y1 = g["box"]
        for (x, y), (sx, sy) in zip(edge, g["edge"]):
            assert x0 <= sx <= x1 and y0 <= sy <= y1, (x, y)  # the unit circle lies inside
        t.page.screenshot(path=str(ARTIFACTS / f"explorer-{viewport[0]}.png"), full_page=True)
        assert t.errors == []
    finally:
        t.close()


def test_the_chiral_decay_has_a_sane_log_axis(tab):
    """The perfectly chiral demo: nothing goes backwards; the axis must not reach 1e-300."""
    _load(tab, "chiral_waveguide_defective")
    _open_probe(tab, "guided, towards +x")
    _settle(tab)
    y = tab.js("const f = doc.get_model_by_name('choir-decay-plot');"
               "const axis = Bokeh.index.find_one(f.left[0]);"
               "return {start: f.y_range.start, end: f.y_range.end,"
               "        ticks: axis.tick_coords.major[1].length}")
    assert y["start"] > 0 and 10 < y["end"] / y["start"] < 1e15
    assert 2 <= y["ticks"] <= 12  # labels that do not overprint
    channels = tab.data("choir-decay-channels", "name")
    assert "guided, towards −x" not in channels  # identically zero: named, not drawn
    assert "nothing is emitted into guided, towards −x" in tab.text()
    tab.page.screenshot(path=str(ARTIFACTS / "explorer-chiral-decay.png"), full_page=True)


_LEGEND_BOXES = """
const out = [];
for (const m of doc.all_models) {
  if (m.constructor.__name__ !== 'Legend' || !m.visible) continue;
  const lv = Bokeh.index.find_one(m);
  if (lv == null || !lv.plot_view.model.visible) continue;
  if (!m.items.some((i) => i.visible)) continue;
  const pv = lv.plot_view;
  const c = pv.canvas_view.el.getBoundingClientRect();
  const f = pv.frame.bbox;
  const l = lv.el.getBoundingClientRect();
  out.push({plot: pv.model.name, legend: [l.left, l.right, l.top, l.bottom],
            frame: [c.left + f.x0, c.left + f.x1, c.top + f.y0, c.top + f.y1]});
}
return out;
"""


@pytest.mark.parametrize("name, channel", [
    pytest.param("mirror_square_16x16", None, id="mirror"),
    pytest.param("fibre_chain_partly_chiral", "guided, towards −x", id="fibre"),
])
def test_legends_sit_beside_the_data(tab, name, channel):
    _load(tab, name)
    _open_probe(tab, channel)
    _open_bands(tab, periodic=True)
    if name.startswith("mirror"):  # the array's modes placed on the bands: their legend shows
        tab.wait_for("return doc.get_model_by_name('choir-bands-finite').data.s.length > 0")
    _settle(tab)
    boxes = tab.js(_LEGEND_BOXES)
    plots = {b["plot"] for b in boxes}
    assert {"choir-probe-plot", "choir-decay-plot"} <= plots
    if name.startswith("mirror"):
        assert {"choir-bands-shift", "choir-bands-decay", "choir-bands-map-plot"} <= plots
    for b in boxes:
        l0, l1, lt, lb = b["legend"]
        f0, f1, ft, fb = b["frame"]
        assert l1 > l0 and lb > lt, b  # drawn
        apart = l1 <= f0 or l0 >= f1 or lb <= ft or lt >= fb
        assert apart, f"the legend covers the data of {b['plot']}: {b}"


@pytest.mark.parametrize("name, periodic", [
    pytest.param("nonagon_ring", False, id="ring"),
    pytest.param("chiral_waveguide_defective", True, id="chiral"),
    pytest.param("fibre_chain_partly_chiral", True, id="fibre"),
    pytest.param("mirror_square_16x16", True, id="mirror"),
])
def test_pages_log_no_console_warnings(tab, name, periodic):
    """Empty figures used to make BokehJS warn 144-181 times a page ("could not set
    initial ranges", "could not determine … for log axis")."""
    _load(tab, name)
    _open_probe(tab)
    _open_bands(tab, periodic)
    _settle(tab)
    assert tab.warnings == []
