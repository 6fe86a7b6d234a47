"""Load test: many browser sessions on one `choir serve`, each editing its own array.

    python bench/load_sessions.py [--sessions 20]

Starts ``choir serve`` on the nine-atom ring demo (loopback, a free port,
OPENBLAS_NUM_THREADS=1, autosave into a temporary folder, server log there
too) and waits for ``/liveness`` — never for the page, which would build a
session per poll.  Then it opens SESSIONS pages in headless Chromium
(Playwright, one browser context each, all navigations started at once), each
on its own square array through the page address (different sizes and
spacings), steps the selected mode k times in every page (k differs per page)
and finally checks that every page shows its own array and its own selected
mode.

Times come from an in-page recorder (the one of bench_browser.py): every
document change sent by the server is stamped with performance.now() when it
arrives, and again at the next animation frame; performance.timeOrigin turns
both into wall-clock times.  So the report separates, per session,

- the browser loading the page (navigation start → Bokeh document ready),
- the server (document ready → the first spectrum's data arriving: session
  start, solve and sending; the moment it arrives is the latest moment the
  server can have sent it),
- the browser drawing it (data arrived → the frame after),

and the server-side figure for all sessions at once: from the first
navigation start until the last session's first spectrum data arrived.
While the pages work, a plain GET /liveness every 0.5 s times the server's
event loop, and the server process's CPU time (Linux /proc) until every page
had its first spectrum shows whether it was busy or waiting for a core.
Nothing is asserted except that every session ended in its own state
(printed).  On 2 cores the 20 browser pages compete with the server for the
same cores: say so when quoting the figures.
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import threading
import time
import urllib.request
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_browser import (CHROMIUM, FLAGS, MORE_RADIANT, RECORDER_JS, VIEWPORT,  # noqa: E402
                           code_state, free_port, start_server, stop_server)

#: First spectrum of the page: [timeOrigin, document ready, data arrived, frame after] (ms).
FIRST_SPECTRUM_JS = r"""(n) => {
  const S = window.__choir;
  if (!S || S.attached === null) return null;
  const e = S.events.find((e) => e.name === "choir-spectrum-points" && e.attr === "data"
                               && (e.len ?? 0) === n);
  if (!e || e.frame === null) return null;
  return [performance.timeOrigin, S.attached, e.t, e.frame];
}"""

#: Latest marker update: [arrival, frame] (ms), or null.
MARKER_JS = r"""(t0) => {
  const ev = window.__choir.events.filter((e) => e.name === "choir-spectrum-marker" && e.t >= t0);
  const doc = Bokeh.documents[0];
  const mk = doc.get_model_by_name("choir-spectrum-marker");
  return {x: mk.data.x[0], last: ev.length ? [ev[ev.length - 1].t, ev[ev.length - 1].frame] : null};
}"""

TARGET_ALL_S = 10.0  # server-side: every session's first spectrum, 20 sessions, 2 cores


def js(page, body, arg=None):
    return page.evaluate(f"(arg) => {{ const doc = Bokeh.documents[0]; {body} }}", arg)


def poll(fn, timeout=180.0, what="condition"):
    deadline = time.time() + timeout
    while time.time() < deadline:
        try:
            v = fn()
        except Exception:  # noqa: BLE001 — page still loading
            v = None
        if v:
            return v
        time.sleep(0.1)
    raise RuntimeError(f"timed out: {what}")


def cpu_seconds(pid: int) -> float | None:
    """User + system CPU time a process has used so far (Linux /proc), or None."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return None


def _marker_moved(page, t_mark: float, before: float) -> dict | None:
    """The marker's latest update after ``t_mark`` once it has been drawn (None before)."""
    r = page.evaluate(MARKER_JS, t_mark)
    return r if r["last"] is not None and r["last"][1] is not None else None


def _stats(values: list[float], unit: str = "ms", scale: float = 1.0) -> str:
    v = [scale * x for x in values]
    return f"median {statistics.median(v):.0f} {unit}, max {max(v):.0f} {unit}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sessions", type=int, default=20)
    args = ap.parse_args()
    from playwright.sync_api import sync_playwright

    port = free_port()
    url = f"http://127.0.0.1:{port}/"
    pings: list[float] = []
    stop = threading.Event()

    def ping():
        # the light readiness endpoint: times the server's event loop without opening
        # yet another explorer session (every page request builds one)
        while not stop.is_set():
            t0 = time.perf_counter()
            try:
                urllib.request.urlopen(url + "liveness", timeout=30).read()
                pings.append(time.perf_counter() - t0)
            except OSError:
                pass
            stop.wait(0.5)

    plan = [(4 + i % 10, round(0.3 + 0.01 * i, 3), 1 + i % 4) for i in range(args.sessions)]
    with tempfile.TemporaryDirectory(prefix="choir-load-") as tmp:
        log = Path(tmp) / "server.log"
        server = start_server("scenarios/nonagon_ring.json", port, log,
                              "--autosave-dir", str(Path(tmp) / "autosave"))
        try:
            pinger = threading.Thread(target=ping, daemon=True)
            pinger.start()
            with sync_playwright() as p:
                browser = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
                try:
                    pages = []
                    for nx, a, _ in plan:
                        ctx = browser.new_context(viewport=VIEWPORT)
                        ctx.route("**/*", lambda r: r.continue_() if r.request.url.startswith(url)
                                  else r.fulfill(status=200, body=""))
                        ctx.add_init_script(RECORDER_JS)
                        pages.append(ctx.new_page())
                    t_start = time.time()
                    cpu0 = cpu_seconds(server.pid)
                    for page, (nx, a, _) in zip(pages, plan):  # all navigations under way at once
                        page.goto(f"{url}?lattice=square&nx={nx}&ny={nx}&a={a}",
                                  wait_until="commit")
                    first = [poll(lambda page=page, n=nx * nx: page.evaluate(FIRST_SPECTRUM_JS, n),
                                  what="first spectrum") for page, (nx, _, _) in zip(pages, plan)]
                    t_settled = time.time()
                    cpu1 = cpu_seconds(server.pid)
                    steps, steps_frame = [], []
                    for page, (_, _, k) in zip(pages, plan):
                        for _ in range(k):
                            t_mark = page.evaluate("() => performance.now()")
                            before = page.evaluate(MARKER_JS, t_mark)["x"]
                            k0 = len(page.evaluate("() => window.__choir.inputs"))
                            t0 = time.perf_counter()
                            page.get_by_role("button", name=MORE_RADIANT).click()
                            m = poll(lambda page=page, t_mark=t_mark, before=before:
                                     _marker_moved(page, t_mark, before), timeout=120,
                                     what="marker moved")
                            steps.append(time.perf_counter() - t0)
                            inputs = page.evaluate("() => window.__choir.inputs")[k0:]
                            downs = [t for typ, t in inputs if typ == "pointerdown"]
                            if downs:
                                steps_frame.append(m["last"][1] - downs[0])
                    wrong = []
                    for i, (page, (nx, a, k)) in enumerate(zip(pages, plan)):
                        xs = js(page, "return Array.from(doc.get_model_by_name("
                                      "'choir-spectrum-points').data.x)")
                        mark = js(page, "return doc.get_model_by_name('choir-spectrum-marker')"
                                        ".data.x[0]")
                        if len(xs) != nx * nx or mark != xs[k]:
                            wrong.append(i)
                finally:
                    browser.close()
        finally:
            stop.set()
            stop_server(server)
        server_log = log.read_text(errors="replace")

    origin = [f[0] for f in first]
    nav0 = min(origin)
    arrived = [(o + t - nav0) / 1e3 for o, _, t, _ in first]  # s after the first navigation
    painted = [(o + fr - nav0) / 1e3 for o, _, _, fr in first]
    load = [ready for _, ready, _, _ in first]
    serve = [t - ready for _, ready, t, _ in first]
    draw = [fr - t for _, _, t, fr in first]
    print(f"Choir load test: {args.sessions} browser sessions on one `choir serve`, all "
          f"navigations started at once")
    print(f"  date: {time.strftime('%Y-%m-%dT%H:%M:%S%z')}; explorer code: commit {code_state()}")
    sizes = sorted({nx for nx, _, _ in plan})
    print(f"  arrays: square, nx = {sizes[0]} … {sizes[-1]}, spacing {plan[0][1]:.2f} … "
          f"{plan[-1][1]:.2f} λ0; the {args.sessions} pages and the server share the machine's "
          f"{len(os.sched_getaffinity(0))} cores; load average at end "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    print(f"  server side — every session's first spectrum data arrived "
          f"{max(arrived):.1f} s after the first navigation started (first {min(arrived):.1f} s, "
          f"median {statistics.median(arrived):.1f} s); target ≤ {TARGET_ALL_S:.0f} s: "
          f"{'HOLDS' if max(arrived) <= TARGET_ALL_S else 'MISSED'}")
    print(f"    per session, document ready → first spectrum data (session start, solve, send): "
          f"{_stats(serve)}")
    if cpu0 is not None and cpu1 is not None:
        wall = t_settled - t_start
        print(f"    server process CPU meanwhile: {cpu1 - cpu0:.1f} s in {wall:.1f} s of wall time "
              f"({100 * (cpu1 - cpu0) / wall:.0f} % of one core; the rest of the time it waited "
              f"for a core or for the pages)")
    print(f"  browser side — navigation → document ready: {_stats(load)}; data arrived → "
          f"spectrum drawn (next frame): {_stats(draw)}")
    print(f"    every page had drawn its spectrum {max(painted):.1f} s after the first navigation "
          f"(all pages settled after {t_settled - t_start:.1f} s of wall time)")
    print(f"  mode steps (click → marker moved), {len(steps)} steps: median "
          f"{1e3 * statistics.median(steps):.0f} ms, max {1e3 * max(steps):.0f} ms as polled; "
          + (f"input → marker drawn {_stats(steps_frame)}" if steps_frame else ""))
    if pings:
        print(f"  GET /liveness meanwhile: median {1e3 * statistics.median(pings):.0f} ms, "
              f"max {1e3 * max(pings):.0f} ms ({len(pings)} requests)")
    print(f"  sessions that ended in a state not their own: {len(wrong)} {wrong if wrong else ''}")
    if "Traceback" in server_log:
        print("  the server log holds a traceback:\n    "
              + server_log[server_log.index("Traceback"):][:1500].replace("\n", "\n    "))


if __name__ == "__main__":
    main()
