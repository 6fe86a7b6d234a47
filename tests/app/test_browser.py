"""The explorer in a real browser: Playwright driving Debian's headless Chromium.

These tests run in CI (`.ci/run` installs Chromium); locally they are skipped
when no Chromium is installed, and they fail in CI if it is missing.  Shared
support (server start on /liveness, the Page wrapper, fixtures) is in
``browser_support``; common practice, no source.
"""
from __future__ import annotations

import json
import sys
import time

import pytest

from browser_support import (ARTIFACTS, ROOT, Page, free_port, require_chromium, serve_command,
                              start_server, stop_server)

require_chromium()

pytestmark = pytest.mark.browser


def test_page_opens_on_the_demo_scenario_and_shows_the_caution(tab):
    assert tab.wait_for_points(lambda n: n == 9) == 9
    text = tab.wait_for_text(["Nine-atom ring", "Model.", "two-level"])
    assert "Nine-atom ring" in text and "Model." in text and "two-level" in text
    ARTIFACTS.mkdir(exist_ok=True)
    time.sleep(1.0)  # let the far field paint
    tab.page.screenshot(path=str(ARTIFACTS / "explorer.png"), full_page=True)


def test_spacing_slider_moves_the_spectrum(tab):
    before = tab.data("choir-spectrum-points", "x")
    find = "Array.from(doc.all_models).find(m => m.title === 'Spacing a [λ0]')"
    start = tab.js(f"return {find}.value")
    assert start == pytest.approx(0.25)  # the demo file's spacing
    tab.js(f"Bokeh.index.find_one({find}).shadow_el.querySelector('.noUi-handle').focus();")
    for _ in range(10):
        tab.page.keyboard.press("ArrowRight")
    tab.wait_for(f"return {find}.value > arg + 1e-9", start)
    tab.wait_for("const x = doc.get_model_by_name('choir-spectrum-points').data.x;"
                 "return Math.abs(x[0] - arg[0]) > 1e-9", before)
    assert "a = 0.250" not in tab.text()


def test_clicking_a_spectrum_point_selects_that_mode(tab):
    xs = tab.data("choir-spectrum-points", "x")
    ys = tab.data("choir-spectrum-points", "y")
    phases = tab.data("choir-array-points", "phase")
    # a mode whose point no other covers (the ring's modes come in degenerate pairs)
    k = max(i for i in range(len(xs)) if i > 0 and all(
        abs(xs[i] - xs[j]) + abs(ys[i] - ys[j]) > 1e-6 * (abs(xs[i]) + abs(ys[i]))
        for j in range(len(xs)) if j != i))
    sx, sy = tab.screen_xy("choir-spectrum", xs[k], ys[k])
    tab.page.mouse.click(sx, sy)
    tab.wait_for("const m = doc.get_model_by_name('choir-spectrum-marker').data.x;"
                 "return m.length && Math.abs(m[0] - arg) < 1e-12", xs[k])
    tab.wait_for("const p = doc.get_model_by_name('choir-array-points').data.phase;"
                 "return p.some((v, i) => Math.abs(v - arg[i]) > 1e-6)", phases)
    deadline = time.time() + 20
    while f"Mode {k} of 9" not in tab.text() and time.time() < deadline:
        time.sleep(0.2)
    assert f"Mode {k} of 9" in tab.text()


def test_adding_an_emitter_with_the_drawing_tool(tab):
    tab.page.locator("[title^='Edit emitters']").first.click()
    scale = tab.js("const s = doc.get_model_by_name('choir-array-points').data;"
                   "return Math.max(...s.x.map(Math.abs))")
    sx, sy = tab.screen_xy("choir-array", 0.0, 0.0)  # the ring's empty centre
    tab.page.mouse.click(sx, sy)
    assert tab.wait_for_points(lambda n: n == 10) == 10
    assert scale > 0
    deadline = time.time() + 20
    while "N = 10" not in tab.text() and time.time() < deadline:
        time.sleep(0.2)
    assert "N = 10" in tab.text()


def test_download_and_upload_reproduce_the_state(tab, browser, server, tmp_path):
    xs = tab.data("choir-spectrum-points", "x")
    tab.page.get_by_text("more radiant ▶").click()  # step from mode 0 to mode 1 …
    tab.page.get_by_text("more radiant ▶").click()  # … and to mode 2
    tab.page.get_by_text("more radiant ▶").click()  # … and to mode 3
    tab.wait_for("const m = doc.get_model_by_name('choir-spectrum-marker').data.x;"
                 "return m.length && Math.abs(m[0] - arg) < 1e-12", xs[3])
    with tab.page.expect_download() as info:
        tab.page.get_by_text("Download scenario (.json)").click()
    path = tmp_path / "shared.json"
    info.value.save_as(path)
    doc = json.loads(path.read_text())
    assert doc["format"] == "choir-scenario"
    assert doc["analysis"]["selected_mode"] == 3
    assert doc["geometry"]["lattice"] == "ring" and doc["geometry"]["n"] == 9

    other = Page(browser, server)
    try:
        other.page.locator("input[type=file]").set_input_files(str(path))
        other.wait_for("return doc.get_model_by_name('choir-spectrum-marker').data.x[0] === arg",
                       xs[3])
        assert other.data("choir-spectrum-points", "x") == xs
        assert other.data("choir-array-points", "phase") == tab.data("choir-array-points", "phase")
        assert other.errors == []
    finally:
        other.close()


def test_panel_serve_runs_the_same_explorer(browser):
    port = free_port()
    cmd = [sys.executable, "-m", "panel", "serve", "app/serve_app.py", "--port", str(port),
           "--address", "127.0.0.1", "--allow-websocket-origin", f"127.0.0.1:{port}",
           "--liveness", "--args", "scenarios/subradiant_chain.json"]
    proc = start_server(cmd, f"http://127.0.0.1:{port}/", "server-panel-serve.log")
    try:
        t = Page(browser, f"http://127.0.0.1:{port}/serve_app")
        assert t.wait_for_points(lambda n: n == 60) == 60
        assert t.errors == []
        t.close()
    finally:
        stop_server(proc, "server-panel-serve.log")


def test_a_link_reopens_the_same_view(browser, server):
    """The address carries the generator parameters (and the selected mode)."""
    t = Page(browser, server + "?lattice=chain&n=12&a=0.4&dipole=z&mode=2")
    try:
        assert t.wait_for_points(lambda n: n == 12) == 12
        xs = t.data("choir-spectrum-points", "x")
        t.wait_for("return doc.get_model_by_name('choir-spectrum-marker').data.x[0] === arg", xs[2])
        t.page.get_by_text("more radiant ▶").click()
        t.wait_for("return doc.get_model_by_name('choir-spectrum-marker').data.x[0] === arg", xs[3])
        deadline = time.time() + 20
        search = ""
        while "mode=3" not in search and time.time() < deadline:
            search = t.page.evaluate("() => window.location.search")
            time.sleep(0.2)
        assert "lattice=chain" in search and "mode=3" in search, search
        assert t.errors == []
    finally:
        t.close()


@pytest.mark.parametrize("name, words", [
    pytest.param("fibre_chain_partly_chiral", ["partly chiral waveguide", "β-factor 0.0909",
                                               "into guided, towards +x"], id="waveguide"),
    pytest.param("cavity_square_6x6", ["cavity mode along z", "into cavity output"],
                 id="cavity"),
    pytest.param("chiral_waveguide_defective", ["coupling matrix is defective",
                                                "Eigenvalue 0 of 12"], id="chiral-defective"),
])
def test_each_environment_opens_from_a_file(tab, name, words):
    path = ROOT / "scenarios" / f"{name}.json"
    tab.page.locator("input[type=file]").set_input_files(str(path))
    from physics import scenario as scn

    n = scn.load(path).emitters().n
    tab.wait_for_points(lambda k: k == n)
    deadline = time.time() + 30
    text = ""
    while not all(w in text for w in words) and time.time() < deadline:
        time.sleep(0.3)
        text = tab.text()
    for w in words:
        assert w in text, w
    drawn = tab.js("return doc.get_model_by_name('choir-environment-lines').data.xs.length + "
                   "doc.get_model_by_name('choir-environment-rings').data.x.length")
    assert drawn >= 1  # the waveguide or cavity axis is drawn in the array view
    images = tab.js("return doc.get_model_by_name('choir-farfield-images').data.image.length")
    assert images == (0 if "defective" in name else 2)  # no far field from meaningless vectors
    tab.page.screenshot(path=str(ARTIFACTS / f"explorer-{name}.png"), full_page=True)


def test_probe_panel_shows_a_spectrum_a_map_and_a_decay(tab):
    assert tab.js("return doc.get_model_by_name('choir-probe-spectrum') === null")  # not built
    tab.page.get_by_text("Probe and decay (open to compute)").click()
    n = tab.wait_for("const s = doc.get_model_by_name('choir-probe-spectrum');"
                     "return s && s.data.x.length")
    assert n == 201
    assert tab.wait_for("const m = doc.get_model_by_name('choir-field-map');"
                        "return m && m.data.image.length === 1")
    assert tab.wait_for("const d = doc.get_model_by_name('choir-decay');"
                        "return d && d.data.t.length > 100")
    assert "Lorentzian fit" in tab.text() and "Laser safety" in tab.text()


def test_bands_open_on_demand_and_a_finite_mode_is_clickable(tab):
    path = ROOT / "scenarios" / "mirror_square_16x16.json"
    tab.page.locator("input[type=file]").set_input_files(str(path))
    tab.wait_for_points(lambda k: k == 256)
    assert tab.js("return doc.get_model_by_name('choir-bands-points') === null")  # not built
    tab.page.get_by_text("Bands of the infinite lattice (open to compute)").click()
    n = tab.wait_for("const s = doc.get_model_by_name('choir-bands-points');"
                     "return s && s.data.s.length")
    assert n >= 200
    finite = tab.wait_for("const s = doc.get_model_by_name('choir-bands-finite');"
                          "return s && s.data.s.length")
    assert finite > 10
    assert tab.wait_for("const m = doc.get_model_by_name('choir-bands-map');"
                        "return m && m.data.image.length === 1")
    s = tab.data("choir-bands-finite", "s")
    w = tab.data("choir-bands-finite", "w")
    pick = len(s) // 2
    tab.js("Bokeh.index.find_one(doc.get_model_by_name('choir-bands-shift'))"
           ".el.scrollIntoView({block: 'center'}); return 1")
    time.sleep(0.5)
    x, y = tab.screen_xy("choir-bands-shift", s[pick], w[pick])
    tab.page.mouse.click(x, y)
    # the click selects the mode under the pointer (circles may overlap): the bands
    # marker moves onto a circle within a few pixels of the click
    before = tab.data("choir-bands-marker", "s")
    tab.wait_for("const m = doc.get_model_by_name('choir-bands-marker');"
                 "return m && m.data.s.length && m.data.s[0] !== arg", before[0])
    ms, mw = tab.data("choir-bands-marker", "s")[0], tab.data("choir-bands-marker", "w")[0]
    mx, my = tab.screen_xy("choir-bands-shift", ms, mw)
    assert abs(mx - x) < 8 and abs(my - y) < 8
    selected = tab.js("return doc.get_model_by_name('choir-spectrum-marker').data.x[0]")
    assert selected is not None
    body = tab.text()
    assert "inside the light cone" in body and "Infinite lattice at that k" in body
    assert "Bands of the infinite lattice (open to compute)" not in body
    tab.page.mouse.move(5, 5)  # no tooltip over the picture
    time.sleep(0.3)
    tab.page.screenshot(path=str(ARTIFACTS / "explorer-bands.png"), full_page=True)


def test_imperfect_array_redraw_and_an_ensemble_run(tab, tmp_path):
    from physics import scenario as scn

    doc = scn.to_dict(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    doc["geometry"].update(nx=8, ny=8)
    doc["analysis"]["selected_mode"] = 0
    doc["imperfections"] = {"seed": 21, "filling": 0.85, "jitter_lambda0": [0.02, 0.02, 0.04]}
    path = tmp_path / "imperfect.json"
    path.write_text(scn.dumps(scn.from_dict(doc)))
    tab.page.locator("input[type=file]").set_input_files(str(path))
    n0 = scn.from_dict(doc).emitters().n
    tab.wait_for_points(lambda k: k == n0)
    tab.page.get_by_text("Imperfections: vacancies and jitter").click()
    tab.page.get_by_text("Draw another realisation").click()
    deadline = time.time() + 30
    while "Realisation 1 (seed 21)" not in tab.text() and time.time() < deadline:
        time.sleep(0.3)
    assert "Realisation 1 (seed 21)" in tab.text()
    tab.page.get_by_text("Ensembles and sweeps").click()
    tab.page.get_by_role("button", name="Run").click()
    n = tab.wait_for("const s = doc.get_model_by_name('choir-sweep-points');"
                     "return s && s.data.x.length")
    assert n == 1
    assert tab.wait_for("const h = doc.get_model_by_name('choir-sweep-hist');"
                        "return h && h.data.top.length > 5")
    deadline = time.time() + 30
    while "Same run from the command line: choir sweep" not in tab.text() and time.time() < deadline:
        time.sleep(0.3)
    assert "Same run from the command line: choir sweep" in tab.text()
    tab.page.mouse.move(5, 5)
    tab.page.screenshot(path=str(ARTIFACTS / "explorer-sweep.png"), full_page=True)


def test_sessions_on_one_server_keep_their_own_state(browser, server):
    """Three tabs, three arrays: each keeps its own, also while another one changes."""
    sizes = {8: None, 12: None, 15: None}
    tabs = {n: Page(browser, server + f"?lattice=chain&n={n}&a=0.3") for n in sizes}
    try:
        for n, t in tabs.items():
            assert t.wait_for_points(lambda k, n=n: k == n) == n
        # change one session: the others must not move
        tabs[12].page.get_by_text("more radiant ▶").click()
        tabs[12].wait_for("return doc.get_model_by_name('choir-spectrum-marker').data.x[0] !== "
                          "doc.get_model_by_name('choir-spectrum-points').data.x[0]")
        for n, t in tabs.items():
            assert len(t.data("choir-spectrum-points", "x")) == n
            assert t.errors == []
        assert tabs[8].data("choir-spectrum-marker", "x")[0] == \
            tabs[8].data("choir-spectrum-points", "x")[0]
    finally:
        for t in tabs.values():
            t.close()


def _draw_one_emitter(t: "Page", n_before: int) -> None:
    t.page.locator("[title^='Edit emitters']").first.click()
    sx, sy = t.screen_xy("choir-array", 0.0, 0.0)  # the ring's empty centre
    t.page.mouse.click(sx, sy)
    assert t.wait_for_points(lambda n: n == n_before + 1) == n_before + 1


def _session_url(t: "Page") -> str:
    deadline = time.time() + 20
    while time.time() < deadline:
        url = t.page.url
        if "session=" in url:
            return url
        time.sleep(0.2)
    raise AssertionError("the page address never got its session key")


def test_a_drawn_array_survives_a_reload(tab):
    _draw_one_emitter(tab, 9)
    url = _session_url(tab)
    time.sleep(1.0)  # the autosave follows the solve
    tab.page.goto(url, wait_until="domcontentloaded")
    assert tab.wait_for_points(lambda n: n == 10) == 10
    tab.wait_for_complete()
    text = tab.wait_for_text("N = 10")
    assert "(modified)" in text or "N = 10" in text


def test_a_drawn_array_survives_a_server_restart(browser, tmp_path):
    port = free_port()
    cmd = serve_command(port, "--autosave-dir", str(tmp_path), "scenarios/nonagon_ring.json")
    base = f"http://127.0.0.1:{port}/"
    proc = start_server(cmd, base, "server-restart-1.log")
    try:
        t = Page(browser, base)
        _draw_one_emitter(t, 9)
        url = _session_url(t)
        deadline = time.time() + 20
        while not list(tmp_path.glob("*.json")) and time.time() < deadline:
            time.sleep(0.2)
        t.close()
    finally:
        stop_server(proc, "server-restart-1.log")
    saved = list(tmp_path.glob("*.json"))
    assert len(saved) == 1 and saved[0].stem in url
    proc = start_server(cmd, base, "server-restart-2.log")  # back: the address restores the work
    try:
        t = Page(browser, url)
        assert t.wait_for_points(lambda n: n == 10) == 10
        assert t.errors == []
        t.close()
    finally:
        stop_server(proc, "server-restart-2.log")
