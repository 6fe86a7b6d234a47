"""`import physics` must not pull in the UI or plotting stack (STYLE.md, layout rules)."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def _modules_after(statement: str, names: tuple[str, ...]) -> set[str]:
    """Run ``statement`` in a fresh interpreter and report which of ``names`` got imported.

    A subprocess, so that other tests that import panel do not interfere.
    """
    code = (f"import sys\n{statement}\n"
            f"print(','.join(m for m in {names!r} if m in sys.modules))")
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    out = subprocess.run([sys.executable, "-c", code], cwd=REPO, env=env,
                         capture_output=True, text=True, check=True, timeout=120)
    return {m for m in out.stdout.strip().split(",") if m}


UI_AND_PLOTTING = ("panel", "bokeh", "param", "holoviews", "matplotlib")


def test_import_physics_leaves_ui_libraries_out() -> None:
    loaded = _modules_after("import physics", UI_AND_PLOTTING + ("physics", "numpy"))
    assert {"physics", "numpy"} <= loaded  # the import really happened
    assert not loaded & {"panel", "bokeh"}
    assert not loaded & set(UI_AND_PLOTTING)


def test_the_check_can_see_an_import() -> None:
    # control: the detector reports a module only once it has been imported
    assert _modules_after("import physics", ("colorsys",)) == set()
    assert _modules_after("import physics, colorsys", ("colorsys",)) == {"colorsys"}
