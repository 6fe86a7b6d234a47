"""Serving the explorer: the server's job runner, autosaved sessions and ``serve``.

Jobs of every session run on one small thread pool (one BLAS thread each),
never on the event loop.  Their values come back on the session's event loop
with the document *held*, so everything a result changes reaches the browser
as one message.  A closed or abandoned page stops its work: its waiting jobs
are dropped, and jobs already queued in the pool return at once.
"""
from __future__ import annotations

import logging
import os
import re
import secrets
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any, Callable

from physics import scenario as scn

from .jobs import EXPECTED

__all__ = ["ServerRunner", "Autosave", "default_autosave_dir", "serve"]

_log = logging.getLogger("choir.server")

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
        self.closed = False
        self.on_gone: Callable[[], None] | None = None  # told once when the page is gone
        self._connected = False

    def close(self) -> None:
        """The session is gone: queued jobs return at once, nothing comes back."""
        self.closed = True

    def gone(self) -> bool:
        """Whether the page has been closed (its websocket connected once and is now gone).

        The server destroys an abandoned session only some seconds later; until
        then nothing more is computed or sent for it.
        """
        if self.closed:
            return True
        context = getattr(self.doc, "session_context", None)
        session = getattr(context, "session", None) if context is not None else None
        count = getattr(session, "connection_count", None)
        if count is None:
            return False
        if count > 0:
            self._connected = True
            return False
        if self._connected:
            self.closed = True
            if self.on_gone is not None:
                self.on_gone()
        return self.closed

    def _work(self, job: Callable[[], Any]) -> Any:
        if self.closed:  # read only here: the loop decides when a page is gone
            return None
        try:
            return job()
        except EXPECTED as exc:  # shown to the user as a message
            return exc
        except Exception as exc:  # a bug: logged with its traceback, and said on the page
            _log.exception("explorer job failed")
            return exc

    def on_loop(self, fn: Callable[[], None]) -> None:
        """Run ``fn`` on the session's event loop, with the document lock, held.

        Button clicks arrive in a coroutine outside the lock; changing Bokeh
        models from there fails ("_pending_writes should be non-None").  While
        ``fn`` runs the document is held, so all its changes go out together.
        """
        from panel.io import hold

        def run():
            if not self.gone():
                with hold(self.doc):
                    fn()

        if not self.closed:
            self.doc.add_next_tick_callback(run)

    def submit(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        def finished(fut):
            value = fut.result()
            self.on_loop(lambda: done(value))

        _executor().submit(self._work, job).add_done_callback(finished)

    def submit_long(self, job: Callable[[], Any], done: Callable[[Any], None]) -> None:
        """A long job (a sweep) on a thread of its own, so the pool stays free for quick ones."""
        import threading

        def work():
            value = self._work(job)
            self.on_loop(lambda: done(value))

        threading.Thread(target=work, daemon=True, name="choir-sweep").start()


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


def serve(scenario: scn.Scenario | None, *, port: int = 5006, address: str = "127.0.0.1",
          show: bool = False, allow_origin: list[str] | None = None,
          autosave_dir: str | Path | None = None) -> None:
    """Serve the explorer; every browser session gets its own state.

    ``autosave_dir``: where each session's scenario is kept (None: the default
    folder, "" to switch autosaving off).  ``GET /liveness`` answers at once
    without building a page (for readiness checks).
    """
    import panel as pn
    from threadpoolctl import threadpool_limits

    from .explorer import build_explorer

    threadpool_limits(1)  # one BLAS thread per solve: two sessions solve in parallel
    pn.extension()
    origins = allow_origin or [f"{address}:{port}", f"localhost:{port}"]
    folder = None if autosave_dir == "" else Path(autosave_dir or default_autosave_dir())
    try:
        store = Autosave(folder) if folder is not None else None
    except OSError as exc:
        raise ValueError(f"--autosave-dir: cannot use {folder}: {exc.strerror}") from None
    pn.serve({"/": lambda: build_explorer(scenario, autosave=store)}, port=port, address=address,
             show=show, websocket_origin=origins, title="Choir explorer", print_url=True,
             liveness=True)
