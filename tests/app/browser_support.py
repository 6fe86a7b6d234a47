"""Shared support for the browser tests: Playwright driving Debian's headless Chromium.

Recipe (flags, routing of outside requests, clicking glyphs through BokehJS,
readiness on the server's light ``/liveness`` endpoint instead of the page)
from the project's browser-test notes; common practice, no source.
"""
from __future__ import annotations

import os
import re
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).parents[2]
ARTIFACTS = ROOT / "artifacts"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage"]
#: How long a server may take to come up, and a page to show its spectrum.  Generous on
#: purpose: the tests must also pass while other processes occupy both cores.
START_TIMEOUT = 120.0
WAIT_TIMEOUT = 90.0


def require_chromium():
    """Playwright's sync API, or skip (locally) / fail (in CI) without Chromium."""
    if CHROMIUM is None:
        if os.environ.get("CI"):
            raise RuntimeError("Chromium is missing in CI: .ci/run should have installed it")
        pytest.skip("no chromium on this machine")
    return pytest.importorskip("playwright.sync_api")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def serve_command(port: int, *args: str) -> list[str]:
    """``choir serve`` on ``port`` (loopback), further arguments appended."""
    return [sys.executable, "-m", "app.cli", "serve", "--port", str(port), *args]


def start_server(cmd: list[str], base: str, log_name: str) -> subprocess.Popen:
    """Start a server and wait until ``base + 'liveness'`` answers.

    Only the light liveness endpoint is polled: polling the page itself would
    make the server build a whole session per poll.
    """
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / log_name, "wb")
    proc = subprocess.Popen(cmd, cwd=ROOT, stdout=log, stderr=subprocess.STDOUT,
                            env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    log.close()  # the child keeps its own handle
    deadline = time.time() + START_TIMEOUT
    while time.time() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"server exited: {(ARTIFACTS / log_name).read_text()[-2000:]}")
        try:
            with urllib.request.urlopen(base + "liveness", timeout=5) as r:
                if r.status == 200:
                    return proc
        except OSError:
            time.sleep(0.3)
    proc.kill()
    proc.wait(timeout=20)
    raise RuntimeError(f"server did not answer /liveness within {START_TIMEOUT:.0f} s")


def stop_server(proc: subprocess.Popen, log_name: str) -> str:
    """Stop a server; its log, checked for tracebacks and Bokeh validation warnings."""
    proc.terminate()
    proc.wait(timeout=20)
    log = (ARTIFACTS / log_name).read_text()
    # A tab closed while a message to it is in flight makes tornado log the failed write
    # ("Task exception was never retrieved … WebSocketClosedError"): the server is fine
    # and the page is gone, so that one report is not a failure; any other traceback is.
    log = re.sub(r"Task exception was never retrieved\nfuture: <Task finished[^\n]*"
                 r"WebSocketClosedError\(\)>\n(?:(?:Traceback|  |\S+Error|During|$)[^\n]*\n)*",
                 "", log, flags=re.M)
    assert "Traceback" not in log, log[-3000:]  # the server must never fail behind the page
    assert "bokeh.core.validation" not in log, log[-3000:]  # e.g. W-1005 sizing warnings
    return log


class Page:
    """A browser tab on the explorer that records console errors and warnings."""

    def __init__(self, browser, url: str, viewport=(1366, 900)) -> None:
        self.sync_api = require_chromium()
        self.ctx = browser.new_context(viewport={"width": viewport[0], "height": viewport[1]},
                                       accept_downloads=True)
        # the page must work offline: answer every outside request with nothing
        origin = "/".join(url.split("/")[:3]) + "/"
        self.ctx.route("**/*", lambda r: r.continue_() if r.request.url.startswith(origin)
                       else r.fulfill(status=200, body=""))
        self.page = self.ctx.new_page()
        self.errors: list[str] = []
        self.warnings: list[str] = []
        self.page.on("console", self._console)
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))
        self.page.goto(url, wait_until="domcontentloaded")
        self.wait_for_points(lambda n: n > 0)
        self.wait_for_complete()

    def wait_for_complete(self) -> None:
        """Wait until the controls and the far field have joined the first, light page."""
        self.wait_for("return doc.get_model_by_name('choir-farfield') !== null")

    def _console(self, msg) -> None:
        if msg.type == "error":
            self.errors.append(msg.text)
        elif msg.type == "warning":
            self.warnings.append(msg.text)

    def js(self, body: str, arg=None):
        return self.page.evaluate(f"(arg) => {{ const doc = Bokeh.documents[0]; {body} }}", arg)

    def data(self, name: str, column: str) -> list:
        return self.js(f"return Array.from(doc.get_model_by_name('{name}').data['{column}'])")

    def wait_for_points(self, ok, timeout: float = WAIT_TIMEOUT) -> int:
        deadline = time.time() + timeout
        while time.time() < deadline:
            try:
                n = self.js("const s = doc && doc.get_model_by_name('choir-spectrum-points');"
                            "return s ? s.data.x.length : -1")
            except self.sync_api.Error:
                n = -1
            if n >= 0 and ok(n):
                return n
            time.sleep(0.2)
        raise AssertionError("spectrum did not reach the expected number of points")

    def wait_for(self, body: str, arg=None, timeout: float = WAIT_TIMEOUT):
        deadline = time.time() + timeout
        while time.time() < deadline:
            try:
                value = self.js(body, arg)
            except self.sync_api.Error:  # a model not there yet (built when first shown)
                value = None
            if value:
                return value
            time.sleep(0.2)
        raise AssertionError(f"timed out waiting for: {body}")

    def wait_for_text(self, words, timeout: float = WAIT_TIMEOUT) -> str:
        """Wait until every one of ``words`` is on the page; the page's text."""
        words = [words] if isinstance(words, str) else list(words)
        deadline = time.time() + timeout
        text = self.text()
        while not all(w in text for w in words) and time.time() < deadline:
            time.sleep(0.2)
            text = self.text()
        return text

    def screen_xy(self, figure: str, x: float, y: float) -> tuple[float, float]:
        return tuple(self.js(
            f"const v = Bokeh.index.find_one(doc.get_model_by_name('{figure}'));"
            "const r = v.canvas_view.el.getBoundingClientRect();"
            "return [r.left + v.frame.x_scale.compute(arg[0]),"
            "        r.top + v.frame.y_scale.compute(arg[1])]", [x, y]))

    def text(self) -> str:
        """All visible text, shadow roots included, whitespace folded."""
        raw = self.page.evaluate(
            "() => { const out = []; const walk = (n) => {"
            " if (n.nodeName === 'STYLE' || n.nodeName === 'SCRIPT') return;"
            " if (n.shadowRoot) walk(n.shadowRoot);"
            " for (const c of n.childNodes) { if (c.nodeType === 3) out.push(c.textContent);"
            " else walk(c); } }; walk(document.body); return out.join(' '); }")
        return " ".join(raw.split())

    def close(self) -> None:
        self.ctx.close()


@pytest.fixture(scope="session")
def browser():
    sync_api = require_chromium()
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        yield b
        b.close()


@pytest.fixture(scope="session")
def server():
    """``choir serve`` on the nine-atom ring demo, shared by the browser tests."""
    port = free_port()
    name = "server-nonagon_ring-serve.log"
    proc = start_server(serve_command(port, "--autosave-dir", str(ARTIFACTS / "autosave"),
                                      "scenarios/nonagon_ring.json"),
                        f"http://127.0.0.1:{port}/", name)
    yield f"http://127.0.0.1:{port}/"
    stop_server(proc, name)


@pytest.fixture
def tab(browser, server):
    t = Page(browser, server)
    yield t
    errors, warnings = t.errors, t.warnings
    t.close()
    assert errors == [], f"JavaScript errors: {errors}"
    assert warnings == [], f"browser console warnings: {warnings}"
