"""Fixtures of the app tests (the browser fixtures live in browser_support)."""
from browser_support import browser, server, tab  # noqa: F401  (pytest fixtures)
