"""Benchmark of Choir's core: coupling-matrix assembly and diagonalisation.

For square nx × nx arrays (spacing 0.3 λ0, dipole "x") this times, in one run:

- Choir: ``physics.coupling_matrix(em, FreeSpace())`` (assembly) and
  ``physics.modes.modes_from_matrix(H)`` (diagonalisation, ordering,
  normalisation, biorthogonal left vectors and the Petermann check);
- a plain baseline: every one of the N² pairs evaluated with the full 3×3
  Green's tensor (:func:`physics.free_space.greens_tensor`) contracted with
  conj(d_i) and d_j — no symmetry, no lattice gather, rows processed in blocks
  only to bound memory — followed by ``numpy.linalg.eig(H)``.

It checks that both assemblies and both spectra agree, prints a table and
says whether the target "assembly ≤ 10 % of the eigen time at N = 2500"
holds.  Nothing is asserted: this is a measurement, not a test.

Usage::

    python bench/bench_core.py [--sizes 10 20 30 40 50] [--repeat R] [--threads T]
"""
from __future__ import annotations

import argparse
import datetime as _dt
import os
import platform
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import scipy
import scipy.optimize
import threadpoolctl
from threadpoolctl import threadpool_info, threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

import physics  # noqa: E402
from physics import FreeSpace, lattices  # noqa: E402
from physics.free_space import K0, greens_tensor  # noqa: E402
from physics.modes import modes_from_matrix  # noqa: E402

#: Lattice spacing [λ0] and dipole of the benchmark arrays.
SPACING = 0.3
DIPOLE = "x"

#: Target: Choir's assembly takes at most this fraction of its eigen step at N = TARGET_N.
TARGET_FRACTION = 0.10
TARGET_N = 2500

#: Above this N the eigen steps run once (each takes seconds to a minute).
EIG_REPEAT_MAX_N = 900

#: Rows per block in the baseline assembly: bounds its temporaries (the
#: (rows, N, 3, 3) complex tensor and its intermediates) to a few hundred MB.
_BASELINE_BLOCK = 256


def baseline_assembly(positions: np.ndarray, dipoles: np.ndarray) -> np.ndarray:
    """Plain all-pairs H_ij = −(3π/k0) conj(d_i)·G(r_i − r_j)·d_j, H_ii = −i/2 [Γ0].

    Every pair (i, j), i ≠ j, gets its own full 3×3 Green's tensor; no use is
    made of H_ij = H_ji, of repeated displacements or of equal dipoles.

    Parameters
    ----------
    positions : (N, 3) ndarray of float
        Emitter positions [λ0], pairwise distinct.
    dipoles : (N, 3) ndarray of complex
        Unit dipole vectors.

    Returns
    -------
    (N, N) complex ndarray [Γ0]
    """
    n = positions.shape[0]
    pref = -3.0 * np.pi / K0
    H = np.empty((n, n), dtype=complex)
    dc = dipoles.conj()
    for start in range(0, n, _BASELINE_BLOCK):
        stop = min(start + _BASELINE_BLOCK, n)
        rows = np.arange(start, stop)
        r_vec = positions[start:stop, None, :] - positions[None, :, :]
        r_vec[rows - start, rows] = (1.0, 0.0, 0.0)  # placeholder: G is singular at r = 0
        G = greens_tensor(r_vec)  # (rows, N, 3, 3) [1/λ0]
        Gd = np.einsum("ijab,jb->ija", G, dipoles)
        H[start:stop] = pref * np.einsum("ia,ija->ij", dc[start:stop], Gd)
        H[rows, rows] = -0.5j
    return H


def best_time(fn: Callable[[], Any], repeat: int) -> tuple[float, Any]:
    """Smallest wall time [s] of ``repeat`` calls, and the last result."""
    best = np.inf
    out = None
    for _ in range(repeat):
        out = None  # free the previous result before timing the next call
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def spectrum_mismatch(a: np.ndarray, b: np.ndarray) -> float:
    """Largest |a_k − b_π(k)| [Γ0] under the optimal one-to-one pairing π."""
    cost = np.abs(a[:, None] - b[None, :])
    rows, cols = scipy.optimize.linear_sum_assignment(cost)
    return float(cost[rows, cols].max())


def _blas_summary() -> str:
    parts = []
    for info in threadpool_info():
        parts.append(f"{info.get('internal_api')} {info.get('version')} "
                     f"({info.get('user_api')}, {info.get('num_threads')} threads)")
    return "; ".join(parts) or "none detected"


def _code_version() -> str:
    """Commit of the checkout and any uncommitted files under physics/ (what was measured)."""
    root = Path(__file__).resolve().parents[1]
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=root,
                              capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "physics"], cwd=root,
                               capture_output=True, text=True, check=True).stdout.split("\n")
    except (OSError, subprocess.CalledProcessError):
        return "unknown (not a git checkout)"
    changed = [line[3:] for line in dirty if line.strip()]
    return f"commit {head}" + (f" + uncommitted: {', '.join(changed)}" if changed else "")


def _loadavg() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def _machine_facts(threads: int) -> list[str]:
    return [
        f"date: {_dt.datetime.now().astimezone().isoformat(timespec='seconds')}",
        f"machine: {platform.machine()} {platform.processor() or ''}".rstrip()
        + f", nproc (usable cores) = {len(os.sched_getaffinity(0))}",
        f"python {platform.python_version()}, numpy {np.__version__}, "
        f"scipy {scipy.__version__}, threadpoolctl {threadpoolctl.__version__}",
        f"BLAS threads requested: {threads}; in effect: {_blas_summary()}",
        f"physics/ code: {_code_version()}",
        f"load average at start (1/5/15 min): {_loadavg()}",
    ]


def main(argv: list[str] | None = None) -> int:
    usable = len(os.sched_getaffinity(0))
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10, 20, 30, 40, 50],
                        help="side nx of the nx×nx square arrays (N = nx²)")
    parser.add_argument("--repeat", type=int, default=3,
                        help="repeats per timing; best is kept (eigen steps run once "
                             f"above N = {EIG_REPEAT_MAX_N})")
    parser.add_argument("--threads", type=int, default=usable,
                        help=f"BLAS threads (default: all usable cores, {usable})")
    args = parser.parse_args(argv)
    if args.repeat < 1 or args.threads < 1:
        parser.error("--repeat and --threads must be at least 1")

    with threadpool_limits(limits=args.threads, user_api="blas"):
        print("Choir core benchmark: square nx×nx arrays, spacing "
              f"{SPACING} λ0, dipole {DIPOLE!r}, free space")
        for line in _machine_facts(args.threads):
            print("  " + line)
        print()

        # Warm-up: first LAPACK calls and imports are not part of any timing.
        em0 = lattices.square(nx=8, ny=8, spacing=SPACING, dipole=DIPOLE)
        modes_from_matrix(physics.coupling_matrix(em0, FreeSpace()))
        np.linalg.eig(baseline_assembly(em0.positions, em0.dipoles))

        head = (f"{'nx':>3} {'N':>5} | {'asm [s]':>9} {'base asm':>9} {'speedup':>8} | "
                f"{'eig [s]':>8} {'base eig':>8} {'speedup':>8} {'reps':>4} | "
                f"{'asm/eig':>8} | {'max|ΔH|':>8} {'max|Δλ|':>8}")
        print(head)
        print("-" * len(head))
        rows = []
        t_start = time.perf_counter()
        for nx in args.sizes:
            em = lattices.square(nx=nx, ny=nx, spacing=SPACING, dipole=DIPOLE)
            n = em.n
            t_asm, H = best_time(lambda: physics.coupling_matrix(em, FreeSpace()), args.repeat)
            t_basm, Hb = best_time(lambda: baseline_assembly(em.positions, em.dipoles),
                                   args.repeat)
            dH = float(np.max(np.abs(H - Hb)))

            reps = args.repeat if n <= EIG_REPEAT_MAX_N else 1
            t_eig, modes = best_time(lambda: modes_from_matrix(H), reps)
            t_beig, (wb, _) = best_time(lambda: np.linalg.eig(Hb), reps)
            dlam = spectrum_mismatch(modes.eigenvalues, wb)

            frac = t_asm / t_eig
            rows.append((n, t_asm, t_eig, frac, dH, dlam))
            print(f"{nx:>3} {n:>5} | {t_asm:>9.4f} {t_basm:>9.4f} {t_basm / t_asm:>7.1f}x | "
                  f"{t_eig:>8.3f} {t_beig:>8.3f} {t_beig / t_eig:>7.2f}x {reps:>4} | "
                  f"{100 * frac:>7.2f}% | {dH:>8.1e} {dlam:>8.1e}", flush=True)
            del H, Hb, modes, wb
        total = time.perf_counter() - t_start

    print()
    print("speedup = baseline time / Choir time; asm/eig = Choir assembly / Choir eigen step.")
    print("max|ΔH| = max over i,j of |H_Choir − H_baseline| [Γ0]; max|Δλ| = largest "
          "eigenvalue distance [Γ0] after optimal one-to-one pairing.")
    print(f"total benchmark time (after warm-up): {total:.1f} s; "
          f"load average at end: {_loadavg()} (other work on the machine inflates "
          f"single-shot eigen timings)")
    at_target = [r for r in rows if r[0] == TARGET_N]
    if at_target:
        n, t_asm, t_eig, frac, _, _ = at_target[-1]
        verdict = "HOLDS" if frac <= TARGET_FRACTION else "DOES NOT HOLD"
        print(f"target 'assembly ≤ {100 * TARGET_FRACTION:.0f}% of eigen time at N = {TARGET_N}': "
              f"{verdict} (assembly {t_asm:.3f} s = {100 * frac:.1f}% of eigen {t_eig:.2f} s)")
    else:
        print(f"target 'assembly ≤ {100 * TARGET_FRACTION:.0f}% of eigen time at N = {TARGET_N}': "
              f"not evaluated (N = {TARGET_N}, i.e. nx = 50, was not in --sizes)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
