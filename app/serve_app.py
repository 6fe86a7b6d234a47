"""Entry point for ``panel serve app/serve_app.py [--args SCENARIO.json]``.

``choir serve`` is the usual way; this file makes the explorer servable by
Panel's own server as well (every browser session runs this script anew).
"""
import sys

from app.explorer import build_explorer, scenario_from_args

build_explorer(scenario_from_args(sys.argv)).servable(title="Choir explorer")
