"""A long fuzz run of the scenario loader and the command line (not part of CI).

Uses the strategies of ``tests/test_fuzz.py`` with many more examples and
reports how many inputs were tried, how many loaded, how many were refused
with a message, and any other outcome (which would be a defect).

Usage::

    python bench/fuzz_long.py [--files 20000] [--texts 5000] [--flags 5000]
"""
from __future__ import annotations

import argparse
import contextlib
import io
import json
import sys
import time
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

import test_fuzz as F  # noqa: E402
from app.cli import main  # noqa: E402
from physics import scenario as scn  # noqa: E402


def run(name: str, strategy, check, n: int) -> Counter:
    tally: Counter = Counter()

    @settings(max_examples=n, deadline=None, database=None,
              suppress_health_check=list(HealthCheck))
    @given(strategy)
    def body(x):
        tally[check(x)] += 1

    t0 = time.perf_counter()
    body()
    print(f"  {name:<34} {sum(tally.values()):>7} tried in {time.perf_counter() - t0:6.1f} s: "
          + ", ".join(f"{k} {v}" for k, v in sorted(tally.items())))
    return tally


def load(text) -> str:
    try:
        scn.loads(text)
        return "loaded"
    except scn.ScenarioError:
        return "refused with a message"


def flags(flag_set) -> str:
    lattice, pairs = flag_set
    argv = ["new", "--lattice", lattice] + F.BASE[lattice] + [x for pair in pairs for x in pair]
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        try:
            code = main(argv)
        except SystemExit as exc:
            code = exc.code
    return {0: "exit 0", 2: "exit 2"}.get(code, f"exit {code} (DEFECT)")


def main_() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--files", type=int, default=20000)
    ap.add_argument("--texts", type=int, default=5000)
    ap.add_argument("--flags", type=int, default=5000)
    args = ap.parse_args()
    print("Choir long fuzz run (any other outcome than 'loaded', 'refused', 'exit 0', 'exit 2' "
          "raises and stops the run)")
    total = Counter()
    total += run("mutated demo scenarios", F.mutated().map(json.dumps), load, args.files)
    total += run("random JSON, text and bytes",
                 st.one_of(F.JSON.map(json.dumps), st.text(max_size=300), st.binary(max_size=300)),
                 load, args.texts)
    total += run("choir new with random flags", F.FLAG_SETS, flags, args.flags)
    print(f"  total: {sum(total.values())} inputs, no traceback")


if __name__ == "__main__":
    main_()
