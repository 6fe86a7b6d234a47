"""Load test: many browser sessions on one `choir serve`, each editing its own array.

Starts ``choir serve`` on a free port, opens SESSIONS pages in headless
Chromium (Playwright, one browser context each, all open at once), each on its
own array through the page address (square arrays of different sizes and
spacings), then in every page steps the selected mode k times (k differs per
page) and finally checks that every page shows its own array and its own
selected mode.  While the pages work it times a plain HTTP request to the
server (a path answered 404 at once, so that the probe itself opens no
session): is the server's event loop still responsive?  Reports timings; nothing is asserted except
that every session ended in its own state.

Usage::

    python bench/load_sessions.py [--sessions 20]
"""
from __future__ import annotations

import argparse
import shutil
import socket
import statistics
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
         "--no-first-run", "--disable-background-networking"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def js(page, body, arg=None):
    return page.evaluate(f"(arg) => {{ const doc = Bokeh.documents[0]; {body} }}", arg)


def wait(page, body, arg=None, timeout=180.0):
    deadline = time.time() + timeout
    while time.time() < deadline:
        try:
            v = js(page, body, arg)
        except Exception:  # page still loading
            v = None
        if v:
            return v
        time.sleep(0.1)
    raise RuntimeError(f"timed out: {body}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sessions", type=int, default=20)
    args = ap.parse_args()
    from playwright.sync_api import sync_playwright

    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    port = free_port()
    url = f"http://127.0.0.1:{port}/"
    log = open(ROOT / "artifacts" / "load-server.log", "wb") if (ROOT / "artifacts").exists() \
        else subprocess.DEVNULL
    server = subprocess.Popen([sys.executable, "-m", "app.cli", "serve",
                               "scenarios/nonagon_ring.json", "--port", str(port)], cwd=ROOT,
                              stdout=log, stderr=subprocess.STDOUT)
    pings: list[float] = []
    stop = threading.Event()

    def ping():
        # a path the server answers with 404 at once: times its event loop without
        # opening yet another explorer session (every page request builds one)
        while not stop.is_set():
            t0 = time.perf_counter()
            try:
                urllib.request.urlopen(url + "choir-ping", timeout=30).read()
            except urllib.error.HTTPError:
                pings.append(time.perf_counter() - t0)
            except OSError:
                pass
            time.sleep(0.5)

    try:
        for _ in range(120):
            try:
                urllib.request.urlopen(url, timeout=2)
                break
            except OSError:
                time.sleep(0.5)
        pinger = threading.Thread(target=ping, daemon=True)
        pinger.start()
        plan = [(4 + i % 10, round(0.3 + 0.01 * i, 3), 1 + i % 4) for i in range(args.sessions)]
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=chromium, args=FLAGS)
            pages, first = [], []
            t_open = time.perf_counter()
            for nx, a, _ in plan:
                ctx = browser.new_context(viewport={"width": 1366, "height": 900})
                ctx.route("**/*", lambda r: r.continue_() if r.request.url.startswith(url)
                          else r.fulfill(status=200, body=""))
                page = ctx.new_page()
                page.goto(f"{url}?lattice=square&nx={nx}&ny={nx}&a={a}",
                          wait_until="domcontentloaded")
                pages.append(page)
            for page, (nx, a, _) in zip(pages, plan):
                wait(page, "const s = doc && doc.get_model_by_name('choir-spectrum-points');"
                           "return s && s.data.x.length === arg", nx * nx)
                first.append(time.perf_counter() - t_open)
            steps = []
            for page, (_, _, k) in zip(pages, plan):
                for _ in range(k):
                    t0 = time.perf_counter()
                    before = js(page, "return doc.get_model_by_name('choir-spectrum-marker')"
                                      ".data.x[0]")
                    page.get_by_text("more radiant ▶").click()
                    wait(page, "return doc.get_model_by_name('choir-spectrum-marker').data.x[0]"
                               " !== arg", before)
                    steps.append(time.perf_counter() - t0)
            wrong = []
            for i, (page, (nx, a, k)) in enumerate(zip(pages, plan)):
                xs = js(page, "return Array.from(doc.get_model_by_name('choir-spectrum-points')"
                              ".data.x)")
                mark = js(page, "return doc.get_model_by_name('choir-spectrum-marker').data.x[0]")
                if len(xs) != nx * nx or mark != xs[k]:
                    wrong.append(i)
            browser.close()
    finally:
        stop.set()
        server.terminate()
        server.wait(timeout=30)
    print(f"Choir load test: {args.sessions} browser sessions on one `choir serve`, all open at once")
    print(f"  time until every page showed its own spectrum: {max(first):.1f} s "
          f"(first {min(first):.1f} s, median {statistics.median(first):.1f} s)")
    print(f"  mode steps (click → marker moved), {len(steps)} steps: median "
          f"{1e3 * statistics.median(steps):.0f} ms, max {1e3 * max(steps):.0f} ms")
    if pings:
        print(f"  plain HTTP request to the server meanwhile: median "
              f"{1e3 * statistics.median(pings):.0f} ms, max {1e3 * max(pings):.0f} ms "
              f"({len(pings)} requests)")
    print(f"  sessions that ended in a state not their own: {len(wrong)} {wrong if wrong else ''}")


if __name__ == "__main__":
    main()
