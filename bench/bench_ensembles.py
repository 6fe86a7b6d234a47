"""Benchmark of ensembles on Dask: 200 realisations of a jittered 20 × 20 array.

Times, in one run:

- a plain baseline: a Python loop over the realisations in this process,
  BLAS held to one thread, calling ``physics.ensembles.realisation_figures``
  (the same work per realisation as the engine);
- the engine (``app.sweeps.run_plan``) on a local Dask cluster of 1 and of 2
  worker processes (one thread each), cluster start-up timed separately;
- the per-task overhead: 200 tasks of a tiny 2 × 2 array, one realisation
  each, through the engine on 2 workers, against the same 200 realisations
  in the plain loop; (engine − loop) / tasks.

Nothing is asserted: this is a measurement, not a test.

Usage::

    python bench/bench_ensembles.py [--realisations 200] [--size 20]
"""
from __future__ import annotations

import argparse
import datetime as _dt
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from app import sweeps  # noqa: E402
from app.sweeps import Plan  # noqa: E402
from physics import scenario as scn  # noqa: E402
from physics.ensembles import FigureRequest, realisation_figures  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def jittered(size: int) -> dict:
    doc = scn.to_dict(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    doc["geometry"].update(nx=size, ny=size)
    doc["analysis"]["selected_mode"] = 0
    doc["imperfections"] = {"seed": 1, "jitter_lambda0": [0.02, 0.02, 0.05], "filling": 0.95}
    return doc


def loop(plan: Plan) -> float:
    sc = plan.scenario_at(0)
    t0 = time.perf_counter()
    with threadpool_limits(1):
        for r in range(plan.realisations):
            realisation_figures(sc, r, plan.request)
    return time.perf_counter() - t0


def engine(plan: Plan, address: str) -> tuple[float, int]:
    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        rep = sweeps.run_plan(plan, d, scheduler=address)
        return time.perf_counter() - t0, rep.tasks


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--realisations", type=int, default=200)
    ap.add_argument("--size", type=int, default=20)
    args = ap.parse_args()
    print(f"Choir ensemble benchmark: {args.realisations} realisations of a jittered "
          f"{args.size} × {args.size} array (eigenvalues, probe-free figures)")
    print(f"  date: {_dt.datetime.now(_dt.timezone.utc).isoformat(timespec='seconds')}")
    print(f"  machine: {platform.machine()}, nproc = {os.cpu_count()}, numpy {np.__version__}")
    plan = Plan(jittered(args.size), (), args.realisations, FigureRequest(spectrum=True))
    base = loop(plan)
    print(f"\n  plain loop, one process, 1 BLAS thread:   {base:7.2f} s "
          f"({base / args.realisations * 1e3:.0f} ms per realisation)")
    times = {}
    for workers in (1, 2):
        t0 = time.perf_counter()
        cluster = sweeps.local_cluster(workers)
        start = time.perf_counter() - t0
        try:
            t, tasks = engine(plan, cluster.scheduler_address)
        finally:
            cluster.close()
        times[workers] = t
        print(f"  engine, local Dask cluster, {workers} worker(s): {t:7.2f} s in {tasks} tasks "
              f"(cluster start {start:.1f} s, not included); loop / engine = {base / t:.2f}")
    print(f"\n  speed-up from 1 to 2 workers: {times[1] / times[2]:.2f}x "
          f"(ideal 2x on {os.cpu_count()} cores)")
    tiny = Plan(jittered(2), (), 200, FigureRequest(spectrum=False))
    tiny_loop = loop(tiny)
    cluster = sweeps.local_cluster(2)
    try:
        old = sweeps.TASK_SECONDS
        sweeps.TASK_SECONDS = 1e-9  # one realisation per task: measures the overhead
        t, tasks = engine(tiny, cluster.scheduler_address)
    finally:
        sweeps.TASK_SECONDS = old
        cluster.close()
    print(f"  per-task overhead: {(t - tiny_loop) / tasks * 1e3:.1f} ms per task "
          f"({tasks} one-realisation tasks of a 2 × 2 array on 2 workers in {t:.2f} s, "
          f"the same work in the plain loop {tiny_loop:.3f} s); the engine sizes tasks to "
          f"about {old:g} s of work, so this is a few per cent at most")


if __name__ == "__main__":
    main()
