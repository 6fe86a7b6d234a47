"""Explorer latency in a real browser: from an input to the last view updated on screen.

    python bench/bench_browser.py [--sizes 10 20 40] [--repeat 5] [--only generated|jittered]
                                  [--opens 3] [--repeat-large 1] [--quiet 1.5] [--timeout 90]

For square nx×nx arrays (spacing 0.3 λ0, x dipoles, free space), "generated"
and "jittered" (the same array with every emitter displaced by N(0, 0.01 λ0)
per axis, fixed seed, through the scenario's imperfections block so that the
spacing slider still acts), it writes a scenario file into a temporary folder,
serves it with ``choir serve --no-autosave`` (OPENBLAS_NUM_THREADS=1, log in
the temporary folder; readiness by polling ``/liveness``, never the page) and
drives Debian's headless Chromium through Playwright's sync API with every
non-local request answered empty.  Per interaction it prints the median and
the worst latency over the repeats:

- open: a plain HTTP GET / (time to the first byte of the HTML, in the notes
  column) and a page load, timed from the navigation start;
- slider step: one arrow key on the focused handle of 'Spacing a [λ0]';
- drag 10 steps: a mouse drag of that handle across ten slider steps, timed
  from the release (notes: steps reached, updates that arrived meanwhile);
- mode step: a click on 'more radiant ▶';
- spectrum click: a click on an isolated spectrum point (found by BokehJS
  coordinates, away from the selected one);
- probe open: a click on a collapsed card whose title starts with 'Probe and
  decay' until choir-probe-spectrum, choir-field-map and choir-decay are all
  filled (only when such a card exists; one per page load);
- probe, slider step: one spacing step with the probe panel showing, until
  its three views are new.

How "updated" is detected.  An init script in the page registers
``Bokeh.documents[0].on_change`` and stamps (performance.now) every document
event that came from the server (``event.sync`` is false for events applied
from a server patch; the browser's own changes — the slider's value, plot
ranges computed by BokehJS, sizes — have ``sync`` true and are ignored).
Of those, only changes of what the views show count: ColumnDataSource data
(set, streamed or patched), plot range start/end, Title and Label text, and
the text of Div/HTML panes except the busy indicator ("computing…" and its
clearing).  Widget values echoed by the server, layout, CSS classes, the page
address and visibility flags do not count.  Each counted event also records
the time of the next animation frame; a latency is (that frame − input), with
the input stamped by a capturing listener on the page (keydown, pointerdown,
or pointerup for the end of a drag).  After an input the script waits until
the updates it expects have arrived (spectrum, array and far field; the probe
views when the probe panel shows) and then for a quiet period without counted
events.  Columns:

- first: the first plot data to arrive;
- spectrum: spectrum points drawn (open: all N; slider step: the first
  update; drag: the last one; mode step and click: the selection marker);
- views: the last counted update outside the probe panel (spectrum, array,
  far field, mode card, …);
- probe: the last update inside the probe panel (its plots, and the layout
  holding them, found by model references);
- last: the last counted update of all.

In-process column: one session built in this process like
bench/bench_explorer.py does (``app.explorer.build_explorer``, synchronous
runner: every job runs at once; one BLAS thread) and the same kind of change
timed to the state's result (spectrum), mode figures (views) and probe
analysis (probe), each stamped after the views have taken it.  Its difference
to the browser column is what is lost between the state and the screen
(threads, messages, serialisation, drawing) — and, on a shared machine, to
other load.  Each change goes to a value not seen before (the explorer keeps
recently solved scenarios).  Nothing is asserted: the script prints.
"""
from __future__ import annotations

import argparse
import http.client
import os
import platform
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

#: Debian's Chromium and the flags of tests/app/browser_support.py (kept equal by hand).
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser") or "/usr/bin/chromium"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage"]
VIEWPORT = {"width": 1366, "height": 900}

SPACING = 0.3  # [λ0]
JITTER = 0.01  # [λ0], standard deviation per axis
SEED = 20261202
SLIDER_TITLE = "Spacing a [λ0]"
MORE_RADIANT = "more radiant ▶"
PROBE_CARD = "Probe and decay"
PROBE_SOURCES = ("choir-probe-spectrum", "choir-field-map", "choir-decay")
MAIN_SOURCES = ("choir-spectrum-points", "choir-array-points", "choir-farfield-images")
DRAG_STEPS = 10
DRAG_INTERVAL = 0.033  # [s] between pointer moves: a slow drag at 30 moves per second

#: Targets of the explorer, printed beside the figures (ms); checked on the N = 400 rows.
TARGETS = [
    ("first HTML byte", "open", "html", 500.0),
    ("first spectrum drawn after the request", "open", "spectrum", 1500.0),
    ("slider step → spectrum", "slider step", "spectrum", 150.0),
    ("slider step → all views (outside the probe panel)", "slider step", "views", 300.0),
    ("drag end → last update", "drag 10 steps", "last", 300.0),
    ("probe panel default scan", None, "probe", 500.0),
]
TARGET_N = 400

# ---------------------------------------------------------------- the page side

#: Installed before any page script runs: stamps inputs and server-made document changes.
RECORDER_JS = r"""
(() => {
  if (window.__choir) return;
  const S = window.__choir = {events: [], inputs: [], attached: null, until: {}, lastData: {}};
  for (const type of ["keydown", "pointerdown", "pointerup"])
    window.addEventListener(type, (e) => S.inputs.push([type, e.timeStamp || performance.now()]),
                            true);
  const MARKUP = /HTML|Markdown|Div|Paragraph|PreText|Markup/;
  const counted = (ev) => {
    const k = ev.kind, m = ev.model, a = ev.attr;
    if (k === "ColumnsStreamed" || k === "ColumnsPatched" || k === "ColumnDataChanged") return true;
    if (k !== "ModelChanged" || m == null) return false;
    const ty = String(m.type);
    if (a === "data") return true;
    if ((a === "start" || a === "end") && /Range/.test(ty)) return true;
    if (a === "text" && /(^|\.)(Title|Label)$/.test(ty)) return true;
    if (a === "text" && MARKUP.test(ty)) {
      const v = String(m.text ?? "");
      return v !== "" && !v.includes("computing");  // the busy indicator is not a view
    }
    return false;
  };
  const length = (m) => { try { return m.get_length() ?? 0; } catch (e) { return 0; } };
  const checkUntil = () => {
    const doc = Bokeh.documents[0];
    for (const u of Object.values(S.until)) {
      if (u.t !== null) continue;
      let ok = true;
      for (const n of u.names) {
        const m = doc.get_model_by_name(n);
        if (m == null || !(length(m) > 0)) { ok = false; break; }
        const fresh = m.id !== u.old[n] || (S.lastData[n] ?? -1) >= u.since;
        if (!fresh) { ok = false; break; }
      }
      if (ok) {
        u.t = performance.now();
        requestAnimationFrame(() => { u.frame = performance.now(); });
      }
    }
  };
  S.checkUntil = checkUntil;
  const record = (rec) => {
    S.events.push(rec);
    if (rec.attr === "data" && rec.name) S.lastData[rec.name] = rec.t;
    requestAnimationFrame(() => { rec.frame = performance.now(); });
  };
  const arrived = (value) => {  // models new to the page that came with their data filled
    const found = [];
    for (const v of (Array.isArray(value) ? value.flat(2) : [value])) {
      if (v == null || typeof v.references !== "function") continue;
      for (const r of v.references()) {
        if (S.known.has(r.id)) continue;
        S.known.add(r.id);
        if (typeof r.get_length === "function" && String(r.name ?? "").startsWith("choir-")
            && length(r) > 0)
          found.push(r);
      }
    }
    return found;
  };
  const onChange = (ev) => {
    if (ev.sync) return;  // made in this browser, not sent by the server
    const m = ev.model ?? null;
    if (ev.kind === "ModelChanged" && ev.attr !== "data" && ev.value != null
        && typeof ev.value === "object") {
      for (const r of arrived(ev.value))
        record({t: performance.now(), frame: null, id: r.id, name: r.name, attr: "data",
                len: length(r)});
    }
    const data = ev.attr === "data" || ev.kind === "ColumnsStreamed"
                 || ev.kind === "ColumnsPatched";
    if (counted(ev)) {
      record({t: performance.now(), frame: null, id: m ? m.id : null,
              name: m ? (m.name ?? null) : null, attr: data ? "data" : ev.attr,
              len: (m && data) ? length(m) : null});
    }
    if (Object.keys(S.until).length) checkUntil();
  };
  const started = performance.now();
  const iv = setInterval(() => {
    const B = window.Bokeh;
    if (performance.now() - started > 600000) clearInterval(iv);
    if (!B || !B.documents || !B.documents.length) return;
    clearInterval(iv);
    const doc = B.documents[0];
    doc.on_change(onChange);
    S.attached = performance.now();
    S.known = new Set([...doc.all_models].map((m) => m.id));
    for (const m of doc.all_models) {  // data that came with the document itself
      if (typeof m.get_length === "function" && String(m.name ?? "").startsWith("choir-")
          && length(m) > 0)
        record({t: S.attached, frame: null, id: m.id, name: m.name, attr: "data", len: length(m)});
    }
  }, 2);
})();
"""

#: Shared helpers evaluated in the page (a prefix of the functions below).
_HELPERS = r"""
  const S = window.__choir;
  const doc = window.Bokeh && Bokeh.documents && Bokeh.documents[0];
  const plain = (html) => {  // escaped HTML → its visible text (DOMParser: inert, runs nothing)
    const once = (t) => new DOMParser().parseFromString(t, "text/html").body.textContent ?? "";
    return once(once(html));
  };
  const textOf = (m) => {
    if (m == null) return "";
    if (typeof m.text === "string") return plain(m.text);
    if (Array.isArray(m.children))
      return m.children.map((c) => textOf(Array.isArray(c) ? c[0] : c)).join(" ");
    return "";
  };
  const probeCards = () => doc ? [...doc.all_models].filter((m) => /Card/.test(String(m.type))
      && Array.isArray(m.children)
      && textOf(m.children[0]).replace(/\s+/g, " ").trim().startsWith(arg.card)) : [];
  const length = (m) => { try { return m.get_length() ?? 0; } catch (e) { return 0; } };
"""

STATUS_JS = "(arg) => {" + _HELPERS + r"""
  if (!S) return null;
  const view = S.events.filter((e) => e.t >= arg.t0);
  const missing = [];
  for (const [name, min] of arg.reqs)
    if (!view.some((e) => e.name === name && e.attr === "data" && (e.len ?? 0) >= min))
      missing.push(name);
  let until = null;
  if (arg.key) {
    const u = S.until[arg.key];
    until = u ? u.t : null;
    if (until === null) missing.push(arg.key);
  }
  return {now: performance.now(), last: view.length ? view[view.length - 1].t : null, missing,
          pending: view.some((e) => e.frame === null), attached: S.attached, until};
}"""

SUMMARY_JS = "(arg) => {" + _HELPERS + r"""
  const sources = new Set(arg.probe.map((n) => doc.get_model_by_name(n)).filter((m) => m != null));
  const ids = new Set();
  const main = doc.get_model_by_name(arg.main);
  const plots = [...doc.all_models].filter((m) => Array.isArray(m.renderers)
      && m.renderers.some((r) => sources.has(r.data_source)));
  for (const p of plots) for (const r of p.references()) ids.add(r.id);
  for (const s of sources) ids.add(s.id);
  for (const m of doc.all_models) {  // layouts holding the probe plots but not the spectrum
    if (!Array.isArray(m.children) && !Array.isArray(m.objects)) continue;
    const refs = m.references();
    if (plots.some((p) => refs.has(p)) && !(main && refs.has(main)))
      for (const r of refs) ids.add(r.id);
  }
  const u = arg.key ? S.until[arg.key] : null;
  return {events: S.events.filter((e) => e.t >= arg.t0).map((e) => ({t: e.t, frame: e.frame,
            name: e.name, attr: e.attr, len: e.len, probe: ids.has(e.id)})),
          inputs: S.inputs, attached: S.attached, now: performance.now(),
          until: u ? {t: u.t, frame: u.frame} : null};
}"""

PROBE_STATE_JS = "(arg) => {" + _HELPERS + r"""
  const cards = probeCards();
  const filled = {}, ids = {};
  for (const n of arg.probe) {
    const m = doc.get_model_by_name(n);
    ids[n] = m ? m.id : null;
    filled[n] = m ? length(m) > 0 : false;
  }
  return {collapsed: cards.filter((c) => c.collapsed).length, cards: cards.length, filled, ids};
}"""

#: The centre of the header of every collapsed probe card (scrolled into view).
PROBE_HEADERS_JS = "(arg) => {" + _HELPERS + r"""
  const out = [];
  for (const c of probeCards().filter((c) => c.collapsed)) {
    const v = Bokeh.index.find_one(c);
    const root = v && (v.shadow_el ?? v.el.shadowRoot);
    const h = root && root.querySelector(".card-header, button");
    if (!h) continue;
    h.scrollIntoView({block: "center"});
    const r = h.getBoundingClientRect();
    out.push([r.left + Math.min(40, r.width / 2), r.top + r.height / 2]);
  }
  return out;
}"""

SLIDER_JS = "(arg) => {" + _HELPERS + r"""
  const m = [...doc.all_models].find((m) => m.title === arg.title && "value_throttled" in m);
  if (!m) return null;
  const v = Bokeh.index.find_one(m);
  const root = v.shadow_el ?? v.el.shadowRoot;
  const handle = root.querySelector(".noUi-handle"), base = root.querySelector(".noUi-base");
  if (arg.focus) { handle.scrollIntoView({block: "center"}); handle.focus(); }
  const h = handle.getBoundingClientRect(), b = base.getBoundingClientRect();
  return {value: m.value, start: m.start, end: m.end, step: m.step,
          hx: h.left + h.width / 2, hy: h.top + h.height / 2, left: b.left, width: b.width};
}"""

#: An isolated spectrum point away from the selected one: [index, screen x, y].
SPECTRUM_POINT_JS = "(arg) => {" + _HELPERS + r"""
  const src = doc.get_model_by_name("choir-spectrum-points");
  const mk = doc.get_model_by_name("choir-spectrum-marker");
  const fig = [...doc.all_models].find((m) => Array.isArray(m.renderers)
      && m.renderers.some((r) => r.data_source === src));
  const v = Bokeh.index.find_one(fig);
  v.el.scrollIntoView({block: "center"});
  const r = v.canvas_view.el.getBoundingClientRect(), f = v.frame.bbox;
  const xs = src.data.x, ys = src.data.y, n = xs.length;
  const px = (i) => v.frame.x_scale.compute(xs[i]), py = (i) => v.frame.y_scale.compute(ys[i]);
  const mx = v.frame.x_scale.compute(mk.data.x[0]), my = v.frame.y_scale.compute(mk.data.y[0]);
  for (let j = 0; j < n; j++) {
    const i = (arg.seed * 7919 + j * 104729) % n;
    const x = px(i), y = py(i);
    if (!(x > f.left + 6 && x < f.right - 6 && y > f.top + 6 && y < f.bottom - 6)) continue;
    if (Math.hypot(x - mx, y - my) < 15) continue;
    let alone = true;  // no other point within 6 px, unless at the same place (degenerate)
    for (let k = 0; k < n && alone; k++)
      if (k !== i && Math.hypot(px(k) - x, py(k) - y) < 6 && (xs[k] !== xs[i] || ys[k] !== ys[i]))
        alone = false;
    if (alone) return [i, r.left + x, r.top + y];
  }
  return null;
}"""

MARKER_JS = "(arg) => {" + _HELPERS + r"""
  const mk = doc.get_model_by_name("choir-spectrum-marker");
  const src = doc.get_model_by_name("choir-spectrum-points");
  return {marker: [mk.data.x[0], mk.data.y[0]], n: length(src),
          point: arg == null || arg.i == null ? null : [src.data.x[arg.i], src.data.y[arg.i]]};
}"""


# ---------------------------------------------------------------- helpers


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_server(scenario: Path | str, port: int, log: Path, *extra: str,
                 timeout: float = 120.0) -> subprocess.Popen:
    """``choir serve`` on loopback, returned once ``/liveness`` answers (never polls the page)."""
    with open(log, "wb") as out:
        proc = subprocess.Popen([sys.executable, "-m", "app.cli", "serve", "--port", str(port),
                                 *extra, str(scenario)], cwd=ROOT, stdout=out,
                                stderr=subprocess.STDOUT,
                                env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    deadline = time.time() + timeout
    while time.time() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"server exited: {log.read_text()[-2000:]}")
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/liveness", timeout=5) as r:
                if r.status == 200:
                    return proc
        except OSError:
            time.sleep(0.2)
    stop_server(proc)
    raise RuntimeError(f"server did not answer /liveness within {timeout:.0f} s")


def stop_server(proc: subprocess.Popen) -> None:
    proc.terminate()
    try:
        proc.wait(timeout=20)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait(timeout=20)


def first_byte(port: int) -> tuple[float, float]:
    """A plain GET /: seconds to the first byte of the answer, and to the whole HTML."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
    try:
        t0 = time.perf_counter()
        conn.request("GET", "/")
        resp = conn.getresponse()  # returns once the status line has arrived
        t1 = time.perf_counter()
        resp.read()
        return t1 - t0, time.perf_counter() - t0
    finally:
        conn.close()


def scenario_doc(nx: int, jittered: bool) -> dict:
    """A square nx×nx array, spacing 0.3 λ0, x dipoles, free space; jittered on request."""
    doc = {"format": "choir-scenario", "version": 4,
           "name": f"bench {nx}×{nx} {'jittered' if jittered else 'square'}",
           "transition": {"preset": "Rb87 D2"},
           "geometry": {"lattice": "square", "nx": nx, "ny": nx, "spacing": SPACING},
           "dipole": {"preset": "x"}, "environment": [{"kind": "free_space"}]}
    if jittered:
        doc["imperfections"] = {"seed": SEED, "jitter_lambda0": [JITTER, JITTER, JITTER]}
    return doc


def write_scenario(folder: Path, nx: int, jittered: bool):
    from physics import scenario as scn

    sc = scn.from_dict(scenario_doc(nx, jittered))  # validated like any file
    path = folder / f"bench-{nx}x{nx}-{'jittered' if jittered else 'square'}.json"
    path.write_text(scn.dumps(sc), encoding="utf-8")
    return sc, path


def _tool_version(cmd: list[str]) -> str:
    try:
        out = subprocess.run(cmd, capture_output=True, text=True, timeout=30).stdout.strip()
        return out.splitlines()[0] if out else "?"
    except (OSError, subprocess.SubprocessError):
        return "?"


def code_state(paths: tuple[str, ...] = ("app", "physics")) -> str:
    """Commit, and which files under ``paths`` differ from it."""
    try:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT,
                                capture_output=True, text=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", *paths], cwd=ROOT,
                               capture_output=True, text=True).stdout.split("\n")
        files = sorted(line[3:] for line in dirty if line.strip())
    except OSError:
        return "?"
    return commit + (" + uncommitted: " + ", ".join(files) if files else "")


def header(args) -> None:
    import bokeh
    import numpy as np
    import panel as pn
    from threadpoolctl import threadpool_info, threadpool_limits

    with threadpool_limits(1):
        blas = ", ".join(f"{i['internal_api']} {i['num_threads']}" for i in threadpool_info())
    try:
        from importlib.metadata import version
        pw = version("playwright")
    except Exception:  # noqa: BLE001 — only a label
        pw = "?"
    print("Choir browser benchmark: input → last view updated in headless Chromium, beside the "
          "in-process compute of the same change")
    print(f"  date: {time.strftime('%Y-%m-%dT%H:%M:%S%z')}")
    cores = len(os.sched_getaffinity(0))
    print(f"  machine: {platform.machine()}, nproc (usable cores) = {cores}, "
          f"load average at start (1/5/15 min): {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    print(f"  python {platform.python_version()}, numpy {np.__version__}, panel {pn.__version__}, "
          f"bokeh {bokeh.__version__}, playwright {pw}, {_tool_version([CHROMIUM, '--version'])}")
    print(f"  explorer code: commit {code_state()}")
    print(f"  BLAS threads: server OPENBLAS_NUM_THREADS=1; in-process {blas}")
    print(f"  repeats {args.repeat} per interaction ({args.repeat_large} from N = "
          f"{args.large_from}), page loads {args.opens}; quiet period {args.quiet:.1f} s; "
          f"timeout {args.timeout:.0f} s per interaction")


def _med_max(values: list[float | None]) -> str:
    vals = [v for v in values if v is not None]
    if not vals:
        return "—"
    return f"{statistics.median(vals):.0f}/{max(vals):.0f}"


def _cell(figs: list[dict], column: str) -> str:
    """median/worst over the repeats that finished; 'timeout' if none did; '+' if some did not."""
    done = [f for f in figs if f["ok"]]
    if figs and not done:
        return "timeout"
    text = _med_max([f[column] for f in done])
    return text + ("+" if len(done) < len(figs) and text != "—" else "")


# ---------------------------------------------------------------- in-process


class _Stamps:
    """Times at which the state's result, mode figures and probe analysis reached the views."""

    def __init__(self, state) -> None:
        self.t: dict[str, float] = {}
        for name, key in (("result", "spectrum"), ("mode_result", "views"),
                          ("analysis", "probe")):
            # precedence above the views' watchers (0): stamped after the views took it
            state.param.watch(lambda e, key=key: self.t.setdefault(key, time.perf_counter()),
                              name, precedence=10)

    def run(self, change) -> dict[str, float]:
        self.t.clear()
        t0 = time.perf_counter()
        change()
        out = {k: 1e3 * (v - t0) for k, v in self.t.items()}
        out["total"] = 1e3 * (time.perf_counter() - t0)
        return out


def _open_probe_in_process(state) -> bool:
    """Ask the state for the probe analysis as opening its panel would; False if it cannot."""
    flags = [n for n in state.param if "probe" in n and ("visible" in n or "open" in n)]
    for name in flags:
        if getattr(state, name) is False:
            setattr(state, name, True)
            return True
    if hasattr(state, "_analyse"):
        state._analyse()
        return True
    return False


def in_process(sc, nx: int, repeat: int) -> dict[str, list[dict[str, float]]]:
    """The same changes as the browser makes, on one session built in this process."""
    from threadpoolctl import threadpool_limits

    from app.explorer import build_explorer
    from app.state import ExplorerState

    rows: dict[str, list[dict[str, float]]] = {}
    n = nx * nx
    with threadpool_limits(1):
        state = ExplorerState()
        state.apply_scenario(sc, solve=False)
        stamps = _Stamps(state)
        rows["open"] = [stamps.run(lambda: build_explorer(state=state))]
        rows["slider step"] = [
            stamps.run(lambda k=k: setattr(state, "spacing", round(SPACING + 0.005 * (k + 1), 6)))
            for k in range(repeat)]
        rows["drag 10 steps"] = rows["slider step"]  # one final value to compute
        rows["mode step"] = [stamps.run(lambda k=k: setattr(state, "selected_mode", k + 1))
                             for k in range(repeat)]
        rows["spectrum click"] = [
            stamps.run(lambda k=k: setattr(state, "selected_mode", (n // 2 + 37 * (k + 1)) % n))
            for k in range(repeat)]
        if any("probe" in r for r in rows["slider step"]):
            # the analysis already runs with every change: nothing to open
            rows["probe open"] = []
            rows["probe, slider step"] = rows["slider step"]
        else:
            before = state.analysis
            probe = stamps.run(lambda: _open_probe_in_process(state))
            rows["probe open"] = [probe] if state.analysis is not before else []
            rows["probe, slider step"] = [
                stamps.run(lambda k=k: setattr(state, "spacing",
                                               round(SPACING + 0.2 + 0.005 * k, 6)))
                for k in range(repeat)]
    return rows


def _in_process_text(samples: list[dict[str, float]]) -> str:
    if not samples:
        return "—"
    parts = []
    for key in ("spectrum", "views", "probe"):
        vals = [s[key] for s in samples if key in s]
        parts.append(f"{statistics.median(vals):.0f}" if vals else "·")
    return " / ".join(parts)


# ---------------------------------------------------------------- the browser side


class Tab:
    """One browser context and page on the explorer, with the recorder installed."""

    def __init__(self, browser, base: str) -> None:
        self.base = base
        self.ctx = browser.new_context(viewport=VIEWPORT)
        self.ctx.route("**/*", lambda r: r.continue_() if r.request.url.startswith(base)
                       else r.fulfill(status=200, body=""))
        self.ctx.add_init_script(RECORDER_JS)
        self.page = self.ctx.new_page()
        self.errors: list[str] = []
        self.page.on("console", lambda m: self.errors.append(m.text) if m.type == "error" else None)
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))

    def js(self, code: str, arg=None):
        return self.page.evaluate(code, arg)

    def now(self) -> float:
        return self.js("() => performance.now()")

    def inputs(self) -> list:
        return self.js("() => window.__choir.inputs")

    def probe_state(self) -> dict:
        return self.js(PROBE_STATE_JS, {"card": PROBE_CARD, "probe": list(PROBE_SOURCES)})

    def probe_showing(self) -> bool:
        st = self.probe_state()
        return all(st["filled"].values()) and st["collapsed"] == 0

    def settle(self, t0: float, reqs: list[tuple[str, int]], quiet: float, timeout: float,
               key: str | None = None) -> bool:
        """Wait for the expected updates, then for ``quiet`` seconds without counted updates."""
        deadline = time.time() + timeout
        arg = {"t0": t0, "reqs": reqs, "key": key, "card": PROBE_CARD}
        while time.time() < deadline:
            try:
                st = self.js(STATUS_JS, arg)
            except Exception:  # noqa: BLE001 — the page is still loading
                st = None
            if st is not None and st["attached"] is not None and not st["missing"]:
                last = max(v for v in (st["last"], st["until"], t0) if v is not None)
                if st["now"] - last >= 1e3 * quiet and not st["pending"]:
                    return True
            time.sleep(0.1)
        return False

    def summary(self, t0: float, key: str | None = None) -> dict:
        return self.js(SUMMARY_JS, {"t0": t0, "key": key, "probe": list(PROBE_SOURCES),
                                    "main": "choir-spectrum", "card": PROBE_CARD})

    def close(self) -> None:
        self.ctx.close()


def _frame(e: dict) -> float:
    return e["frame"] if e["frame"] is not None else e["t"]


def figures(summary: dict, t_in: float, spectrum: str, ok: bool, n: int) -> dict:
    """Latencies [ms] of one interaction from the recorded events.

    ``first`` counts only updates after the input; the other columns take the
    last update of their kind (never below 0: in a live drag the final update
    can arrive before the release).
    """
    out: dict = {"ok": ok}
    ev = summary["events"]
    data = [e for e in ev if e["attr"] == "data"]
    out["first"] = min((_frame(e) - t_in for e in data if e["t"] >= t_in), default=None)
    if spectrum == "marker":
        sel = [e for e in data if e["name"] == "choir-spectrum-marker" and e["t"] >= t_in][:1]
    elif spectrum == "all":  # all N points on screen
        sel = [e for e in data if e["name"] == "choir-spectrum-points" and (e["len"] or 0) >= n][:1]
    else:
        sel = [e for e in data if e["name"] == "choir-spectrum-points"]
        sel = sel[-1:] if spectrum == "last" else [e for e in sel if e["t"] >= t_in][:1]
    out["spectrum"] = max(0.0, _frame(sel[0]) - t_in) if sel else None
    views = [_frame(e) - t_in for e in ev if not e["probe"]]
    probe = [_frame(e) - t_in for e in ev if e["probe"]]
    out["views"] = max(0.0, max(views)) if views else None
    out["probe"] = max(0.0, max(probe)) if probe else None
    u = summary.get("until")
    if u and u["t"] is not None:
        out["probe"] = max(0.0, (u["frame"] if u["frame"] is not None else u["t"]) - t_in)
    vals = [out[k] for k in ("first", "spectrum", "views", "probe") if out[k] is not None]
    out["last"] = max(vals) if vals else None
    return out


def _input_time(tab: Tab, k0: int, kind: str, last: bool = False) -> float:
    inputs = [t for typ, t in tab.inputs()[k0:] if typ == kind]
    if not inputs:
        raise RuntimeError(f"no {kind} event reached the page")
    return inputs[-1] if last else inputs[0]


def _step_reqs(tab: Tab, n: int) -> list[tuple[str, int]]:
    reqs = [(name, 1) for name in MAIN_SOURCES]
    if tab.probe_showing():
        reqs += [(name, 1) for name in PROBE_SOURCES]
    return reqs


def _mode_reqs(tab: Tab) -> list[tuple[str, int]]:
    reqs = [("choir-spectrum-marker", 1), ("choir-array-points", 1), ("choir-farfield-images", 1)]
    if tab.probe_showing():  # the decay curve starts from the selected mode unless told otherwise
        title = tab.js("() => { const doc = Bokeh.documents[0];"
                       " const d = doc.get_model_by_name('choir-decay');"
                       " const p = d && [...doc.all_models].find((m) => Array.isArray(m.renderers)"
                       " && m.renderers.some((r) => r.data_source === d));"
                       " return p && p.title ? String(p.title.text) : ''; }")
        if "mode" in title:
            reqs.append(("choir-decay", 1))
    return reqs


class Run:
    """All interactions on one served scenario."""

    def __init__(self, browser, port: int, n: int, args) -> None:
        self.browser, self.port, self.n, self.args = browser, port, n, args
        self.base = f"http://127.0.0.1:{port}/"
        self.rows: dict[str, list[dict]] = {}
        self.notes: dict[str, str] = {}
        self.errors: list[str] = []

    def add(self, name: str, fig: dict) -> None:
        self.rows.setdefault(name, []).append(fig)

    def open(self, repeat: int) -> Tab:
        html = [first_byte(self.port) for _ in range(repeat)]
        self.notes["open"] = (f"HTML first byte {_med_max([1e3 * h[0] for h in html])} ms, "
                              f"whole {_med_max([1e3 * h[1] for h in html])} ms")
        self.html = [1e3 * h[0] for h in html]
        tab = None
        ready = []
        for k in range(repeat):
            if tab is not None:
                self.probe_open(tab)  # one probe opening per page load
                self.errors += tab.errors
                tab.close()
            tab = Tab(self.browser, self.base)
            tab.page.goto(self.base, wait_until="commit")
            reqs = [("choir-spectrum-points", self.n), ("choir-array-points", 1),
                    ("choir-farfield-images", 1)]
            ok = tab.settle(0.0, reqs, self.args.quiet, self.args.timeout)
            if ok and tab.probe_showing():  # the probe views fill at load: wait for them too
                ok = tab.settle(0.0, reqs + [(p, 1) for p in PROBE_SOURCES], self.args.quiet,
                                self.args.timeout)
            s = tab.summary(0.0)
            ready.append(s["attached"])
            self.add("open", figures(s, 0.0, "all", ok, self.n))
        self.notes["open"] += f"; document ready {_med_max(ready)} ms"
        return tab

    def slider(self, tab: Tab, focus: bool) -> dict:
        s = tab.js(SLIDER_JS, {"title": SLIDER_TITLE, "focus": focus, "card": PROBE_CARD})
        if s is None:
            raise RuntimeError(f"no slider titled {SLIDER_TITLE!r} on the page")
        return s

    def slider_step(self, tab: Tab, row: str = "slider step") -> None:
        before = self.slider(tab, focus=True)
        reqs = _step_reqs(tab, self.n)
        k0, t_mark = len(tab.inputs()), tab.now()
        tab.page.keyboard.press("ArrowRight")
        t_in = _input_time(tab, k0, "keydown")
        ok = tab.settle(t_mark, reqs, self.args.quiet, self.args.timeout)
        after = self.slider(tab, focus=False)
        if abs(after["value"] - before["value"] - before["step"]) > 1e-9:
            self.notes[row] = f"slider moved {after['value'] - before['value']:+.4g}, not one step"
        self.add(row, figures(tab.summary(t_mark), t_in, "first", ok, self.n))

    def drag(self, tab: Tab) -> None:
        s = self.slider(tab, focus=True)
        reqs = _step_reqs(tab, self.n)
        px = s["width"] * s["step"] / (s["end"] - s["start"])  # pixels per slider step
        k0, t_mark = len(tab.inputs()), tab.now()
        mouse = tab.page.mouse
        mouse.move(s["hx"], s["hy"])
        mouse.down()
        for k in range(1, DRAG_STEPS + 1):
            time.sleep(DRAG_INTERVAL)
            mouse.move(s["hx"] + k * px, s["hy"])
        time.sleep(DRAG_INTERVAL)
        mouse.up()
        t_in = _input_time(tab, k0, "pointerup", last=True)
        ok = tab.settle(t_mark, reqs, self.args.quiet, self.args.timeout)
        after = self.slider(tab, focus=False)
        summ = tab.summary(t_mark)
        updates = sum(1 for e in summ["events"]
                      if e["attr"] == "data" and e["name"] == "choir-spectrum-points")
        steps = round((after["value"] - s["value"]) / s["step"])
        self.drag_info.append((steps, updates))
        self.add("drag 10 steps", figures(summ, t_in, "last", ok, self.n))

    def mode_step(self, tab: Tab) -> None:
        before = tab.js(MARKER_JS, None)["marker"]
        reqs = _mode_reqs(tab)
        k0, t_mark = len(tab.inputs()), tab.now()
        tab.page.get_by_role("button", name=MORE_RADIANT).click()
        t_in = _input_time(tab, k0, "pointerdown")
        ok = tab.settle(t_mark, reqs, self.args.quiet, self.args.timeout)
        if tab.js(MARKER_JS, None)["marker"] == before:
            self.notes["mode step"] = "the marker did not move"
        self.add("mode step", figures(tab.summary(t_mark), t_in, "marker", ok, self.n))

    def spectrum_click(self, tab: Tab, seed: int) -> None:
        target = tab.js(SPECTRUM_POINT_JS, {"seed": seed, "card": PROBE_CARD})
        if target is None:
            self.notes["spectrum click"] = "no isolated point to click"
            return
        i, x, y = target
        reqs = _mode_reqs(tab)
        k0, t_mark = len(tab.inputs()), tab.now()
        tab.page.mouse.click(x, y)
        t_in = _input_time(tab, k0, "pointerdown")
        ok = tab.settle(t_mark, reqs, self.args.quiet, self.args.timeout)
        m = tab.js(MARKER_JS, {"i": i})
        if m["marker"] != m["point"]:
            self.notes["spectrum click"] = "a click selected another point than the one aimed at"
        self.add("spectrum click", figures(tab.summary(t_mark), t_in, "marker", ok, self.n))

    def probe_open(self, tab: Tab) -> None:
        """Open the collapsed probe card(s), if any, until the three probe views are filled."""
        st = tab.probe_state()
        headers = tab.js(PROBE_HEADERS_JS, {"card": PROBE_CARD})
        if not headers:
            return
        old = {n: (st["ids"][n] if st["filled"][n] else None) for n in PROBE_SOURCES}
        if all(st["filled"].values()):
            self.notes["probe open"] = "probe views were filled before the card was opened"
        tab.js("(a) => { window.__choir.until.probe = {names: a.names, old: a.old,"
               " since: performance.now(), t: null, frame: null}; window.__choir.checkUntil(); }",
               {"names": list(PROBE_SOURCES), "old": old})
        k0, t_mark = len(tab.inputs()), tab.now()
        for x, y in headers:
            tab.page.mouse.click(x, y)
        t_in = _input_time(tab, k0, "pointerdown")
        ok = tab.settle(t_mark, [], self.args.quiet, self.args.timeout, key="probe")
        tab.js("() => { delete window.__choir.until.probe; }")
        self.add("probe open", figures(tab.summary(t_mark, key="probe"), t_in, "first", ok,
                                       self.n))

    def interact(self, tab: Tab, repeat: int) -> None:
        self.drag_info: list[tuple[int, int]] = []
        for _ in range(repeat):
            self.slider_step(tab)
        for _ in range(repeat):
            self.drag(tab)
        if self.drag_info:
            self.notes["drag 10 steps"] = (
                f"steps reached {statistics.median([d[0] for d in self.drag_info]):.0f}, "
                f"spectrum updates {statistics.median([d[1] for d in self.drag_info]):.0f} "
                f"(median)")
        for _ in range(repeat):
            self.mode_step(tab)
        for k in range(repeat):
            self.spectrum_click(tab, seed=k + 1)
        self.probe_open(tab)
        if "probe open" not in self.rows:
            st = tab.probe_state()
            self.notes["probe open"] = ("no collapsed probe card: the probe panel always shows and "
                                        "rescans after every change" if st["collapsed"] == 0
                                        else "could not open the probe card")
        if tab.probe_showing():
            for _ in range(repeat):
                self.slider_step(tab, row="probe, slider step")
        self.errors += tab.errors


ROWS = ["open", "slider step", "drag 10 steps", "mode step", "spectrum click", "probe open",
        "probe, slider step"]
ROW_TARGETS = {"open": "spectrum ≤ 1500 (HTML ≤ 500)",
               "slider step": "spectrum ≤ 150, views ≤ 300",
               "drag 10 steps": "last ≤ 300", "probe open": "probe ≤ 500",
               "probe, slider step": "probe ≤ 500 (if no card)"}


def print_rows(n: int, kind: str, run: Run, proc_rows: dict) -> None:
    for name in ROWS:
        figs = run.rows.get(name, [])
        note = run.notes.get(name, "")
        if not figs and not note:
            continue
        cells = "".join(f" {_cell(figs, c):>12}" for c in
                        ("first", "spectrum", "views", "probe", "last"))
        proc = _in_process_text(proc_rows.get(name, [])) if figs else ""
        print(f"{n:>6} {kind:>9} {name:>19} {len(figs):>2} |{cells} | {proc:>20} | "
              f"{ROW_TARGETS.get(name, ''):<27}| {note}")


def check_targets(results: dict) -> None:
    print(f"\ntargets (medians at N = {TARGET_N}):")
    for label, row, col, limit in TARGETS:
        parts = []
        for kind in ("generated", "jittered"):
            got = results.get((TARGET_N, kind))
            if got is None:
                continue
            run = got
            if row is None:  # the probe panel: its opening if there is a card, else a rescan
                name = "probe open" if run.rows.get("probe open") else "probe, slider step"
            else:
                name = row
            if col == "html":
                vals = run.html
            else:
                vals = [f[col] for f in run.rows.get(name, []) if f["ok"] and f[col] is not None]
            if not vals:
                parts.append(f"{kind}: not measured")
                continue
            med = statistics.median(vals)
            parts.append(f"{kind}: {med:.0f} ms {'HOLDS' if med <= limit else 'MISSED'}"
                         + (f" ({name})" if row is None else ""))
        if parts:
            print(f"  {label} ≤ {limit:.0f} ms: " + "; ".join(parts))
    if not any(n == TARGET_N for n, _ in results):
        print(f"  (N = {TARGET_N} not in --sizes: targets not checked)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10, 20, 40],
                    help="nx = ny of the square arrays (default 10 20 40: N = 100, 400, 1600)")
    ap.add_argument("--repeat", type=int, default=5, help="repeats per interaction (default 5)")
    ap.add_argument("--repeat-large", type=int, default=1,
                    help="repeats per interaction from --large-from emitters (default 1)")
    ap.add_argument("--large-from", type=int, default=1000)
    ap.add_argument("--opens", type=int, default=3,
                    help="page loads per array, each also opening the probe panel once "
                         "(default 3; at most the repeats)")
    ap.add_argument("--only", choices=["generated", "jittered"])
    ap.add_argument("--quiet", type=float, default=1.5,
                    help="seconds without a view update that end an interaction (default 1.5)")
    ap.add_argument("--timeout", type=float, default=90.0,
                    help="seconds an interaction may take before it counts as timed out")
    ap.add_argument("--no-in-process", action="store_true", help="skip the in-process column")
    args = ap.parse_args()
    from playwright.sync_api import sync_playwright

    header(args)
    kinds = [args.only] if args.only else ["generated", "jittered"]
    print(f"\n{'N':>6} {'array':>9} {'interaction':>19} {'n':>2} |"
          + "".join(f" {c:>12}" for c in ("first", "spectrum", "views", "probe", "last"))
          + f" | {'in-process [ms]':>20} | {'target [ms]':<27}| notes")
    print(f"{'':>40}|" + f"{'browser: median/worst [ms] from the input':^65}"
          + f" | {'spectrum/views/probe':>20} |")
    print("-" * 160)
    t_start = time.perf_counter()
    results: dict[tuple[int, str], Run] = {}
    errors: list[str] = []
    with tempfile.TemporaryDirectory(prefix="choir-bench-browser-") as tmp, sync_playwright() as pw:
        folder = Path(tmp)
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        try:
            for nx in args.sizes:
                n = nx * nx
                repeat = args.repeat_large if n >= args.large_from else args.repeat
                for kind in kinds:
                    sc, path = write_scenario(folder, nx, kind == "jittered")
                    proc_rows = {} if args.no_in_process else in_process(sc, nx, repeat)
                    port = free_port()
                    log = folder / f"server-{nx}-{kind}.log"
                    server = start_server(path, port, log, "--no-autosave")
                    run = Run(browser, port, n, args)
                    try:
                        tab = run.open(min(repeat, args.opens))
                        run.interact(tab, repeat)
                        tab.close()
                    finally:
                        stop_server(server)
                    text = log.read_text(errors="replace")
                    if "Traceback" in text:
                        errors.append(f"N = {n} {kind}: server log has a traceback:\n"
                                      + text[text.index("Traceback"):][:1500])
                    errors += [f"N = {n} {kind}: page error: {e}" for e in run.errors]
                    results[(n, kind)] = run
                    print_rows(n, kind, run, proc_rows)
                    sys.stdout.flush()
        finally:
            browser.close()
    print("\nfirst = first plot data on screen; spectrum = spectrum points drawn (open: all N; "
          "slider step: first update; drag: last update, from the release; mode step and click: "
          "the marker); views = last update outside the probe panel; probe = last update of the "
          "probe panel; last = last update of all. Each figure = the animation frame after the "
          "update − the input (open: − navigation start). '+' = some repeats timed out (median "
          "of the rest). In-process: one session in this process (synchronous runner, 1 BLAS "
          "thread), the same change timed to the state's result / mode figures / probe analysis "
          "after the views took them; '·' = not computed by that change; the drag's in-process "
          "figure is one step (the final value).")
    check_targets(results)
    print(f"\ntotal time {time.perf_counter() - t_start:.0f} s; load average at end: "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())} (other work on the machine inflates "
          f"every figure)")
    if errors:
        print("\nproblems seen (not timings):")
        for e in errors:
            print("  " + e.replace("\n", "\n    "))


if __name__ == "__main__":
    main()
