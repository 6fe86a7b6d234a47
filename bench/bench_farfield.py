"""Benchmark of the far-field view of one mode: the image and the lens fractions.

For square arrays of N = 100, 400 and 1600 emitters (spacing 0.3 λ0, x dipoles)
and the same arrays jittered by N(0, 0.01 λ0) on every axis, this times in one
run, with one BLAS thread:

- Choir: ``far_field_image`` on both hemispheres at 121 × 121 pixels (what the
  explorer draws) and ``lens_fraction`` up and down (NA 0.7);
- a plain baseline on the same directions: the direct sum ``far_field_power``
  on the pixels inside the unit disc, and the cap quadrature (``cap_grid`` at
  ``angular_order``) summed with ``far_field_power``.

The amplitudes are random (seeded) and unit-norm, so the baseline lens share is
the cap integral over the sphere integral.  Each time is the best of
``--repeat`` runs: the machine is shared, timings are noisy.  The largest
difference between Choir and the baseline is printed too (image: relative to
the image maximum).  Nothing is asserted: this is a measurement, not a test.

Target (issue: far field of drawn or jittered arrays): both hemispheres of the
image in ≤ 50 ms at N = 400 jittered, one BLAS thread.

Usage::

    python bench/bench_farfield.py [--repeat 3] [--sizes 10 20 40]
"""
from __future__ import annotations

import argparse
import datetime as _dt
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
import scipy
from threadpoolctl import threadpool_info, threadpool_limits

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))  # run from a checkout

from bench_core import _code_version as code_version  # noqa: E402  (bench/ is on the path)
from physics import Emitters, FreeSpace, lattices  # noqa: E402
from physics.far_field import (angular_order, cap_grid, far_field_image,  # noqa: E402
                               far_field_power, hemisphere_directions, lens_fraction,
                               total_power)

PIXELS = 121
NA = 0.7
SPACING = 0.3  # λ0
JITTER = 0.01  # λ0, standard deviation per axis
TARGET_S = 0.05
SIDES = ("+z", "-z")


def best_time(fn, repeat: int):
    """(best wall time [s], last result) over ``repeat`` calls."""
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def baseline_image(em: Emitters, c: np.ndarray, u: np.ndarray) -> list[np.ndarray]:
    ux, uy = np.meshgrid(u, u, indexing="xy")
    inside = ux * ux + uy * uy <= 1.0
    images = []
    for side in SIDES:
        img = np.full(ux.shape, np.nan)
        img[inside] = far_field_power(em, c, hemisphere_directions(ux[inside], uy[inside], side))
        images.append(img)
    return images


def baseline_lens(em: Emitters, c: np.ndarray, total: float) -> list[float]:
    order = angular_order(em)
    out = []
    for side in SIDES:
        cap = cap_grid(order, np.arcsin(NA), side)
        out.append(float(np.sum(cap.weights * far_field_power(em, c, cap.directions))) / total)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=3, help="runs per timing; the best is kept")
    ap.add_argument("--sizes", type=int, nargs="+", default=[10, 20, 40],
                    help="side n of the n × n square arrays")
    args = ap.parse_args()
    blas = ", ".join(f"{i['internal_api']} {i.get('version', '')}" for i in threadpool_info()
                     if i.get("user_api") == "blas")
    print(f"Choir far-field benchmark: image {PIXELS} × {PIXELS} per hemisphere, lens NA {NA}")
    print(f"  date: {_dt.datetime.now(_dt.timezone.utc).isoformat(timespec='seconds')}")
    print(f"  machine: {platform.machine()}, nproc = {os.cpu_count()}, python "
          f"{platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}")
    print(f"  BLAS: {blas}, held to 1 thread (threadpoolctl)")
    print(f"  code: {code_version()}")
    print(f"  best of {args.repeat} runs each; the machine is shared, so timings are noisy")
    print(f"  baseline: direct sum far_field_power on the same pixels / cap directions")
    print()
    print(f"  {'N':>5} {'array':>9} | {'image':>8} {'base':>8} {'ratio':>7} {'err':>8} | "
          f"{'lens':>8} {'base':>8} {'ratio':>7} {'err':>8}")
    u = np.linspace(-1.0, 1.0, PIXELS)
    held = None
    with threadpool_limits(limits=1, user_api="blas"):
        for side_n in args.sizes:
            grid = lattices.square(side_n, side_n, SPACING, "x")
            rng = np.random.default_rng(side_n)
            jittered = Emitters(grid.positions + rng.normal(0.0, JITTER, grid.positions.shape),
                                grid.dipoles)
            c = rng.normal(size=grid.n) + 1j * rng.normal(size=grid.n)
            c /= np.linalg.norm(c)
            for name, em in (("square", grid), ("jittered", jittered)):
                total = total_power(em, c)
                t_img, imgs = best_time(lambda: [far_field_image(em, c, u, s) for s in SIDES],
                                        args.repeat)
                t_bimg, refs = best_time(lambda: baseline_image(em, c, u), args.repeat)
                t_lens, lens = best_time(
                    lambda: [lens_fraction(em, FreeSpace(), c, NA, s, total) for s in SIDES],
                    args.repeat)
                t_blens, blens = best_time(lambda: baseline_lens(em, c, total), args.repeat)
                peak = max(np.nanmax(r) for r in refs)
                err_img = max(np.nanmax(np.abs(a - b)) for a, b in zip(imgs, refs)) / peak
                err_lens = max(abs(a - b) for a, b in zip(lens, blens))
                print(f"  {em.n:>5} {name:>9} | {t_img * 1e3:6.1f}ms {t_bimg * 1e3:6.1f}ms "
                      f"{t_bimg / t_img:6.1f}x {err_img:8.1e} | {t_lens * 1e3:6.1f}ms "
                      f"{t_blens * 1e3:6.1f}ms {t_blens / t_lens:6.1f}x {err_lens:8.1e}")
                if em.n == 400 and name == "jittered":
                    held = t_img
    print()
    print("  image = far_field_image, both hemispheres; lens = lens_fraction, up and down;")
    print("  err = max |Choir − baseline| (image: over the image maximum; lens: absolute share)")
    if held is not None:
        verdict = "HOLDS" if held <= TARGET_S else "MISSED"
        print(f"  target 'both hemispheres ≤ {TARGET_S * 1e3:.0f} ms at N = 400 jittered': "
              f"{verdict} ({held * 1e3:.1f} ms)")


if __name__ == "__main__":
    main()
