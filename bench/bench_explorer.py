"""Explorer response time: from a parameter change to updated view data.

    python bench/bench_explorer.py [--sizes 10 20 40] [--repeat 5] [--threads 1]

For square nx×nx arrays (spacing 0.3 λ0, x dipoles) it builds one explorer
session in-process (state + all views, synchronous runner, exactly the code
a served session runs), then changes the spacing slider back and forth and
times, per change (rows "square"):

- spectrum: coupling matrix + modes + spectrum/array data updated (the
  spectrum view is current);
- views: additionally the far-field image, the lens fractions and the mode
  card (every view of the mode current);
- with probe: also the probe spectrum, its field map and the decay curve, which
  a served session computes in a job of its own after the views.

Rows "jittered": the same arrays with every emitter displaced by 0.01 λ0
at random (an explicit geometry without symmetry, as after drawing), where
the change is the dipole orientation (x ↔ y) and the dense path is used.

Baseline, measured in the same run: the plain path without Choir's speed
work — all pairs with the full Green's tensor, dense ``numpy.linalg.eig``
and a direct far-field sum on the same directions — so the printed ratio
shows what the work buys.  Served sessions use one BLAS thread each
(``choir serve`` sets it), hence ``--threads 1`` by default.
"""
from __future__ import annotations

import argparse
import platform
import sys
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

sys.path.insert(0, str(Path(__file__).parents[1]))

from app.explorer import build_explorer  # noqa: E402
from app.jobs import FAR_FIELD_PIXELS  # noqa: E402
from physics.far_field import angular_order, cap_grid  # noqa: E402
from physics.free_space import K0, greens_tensor  # noqa: E402


def baseline(em) -> float:
    """Plain path: all pairs with full tensors, dense eig, direct far-field sums."""
    t0 = time.perf_counter()
    pos, dip = em.positions, em.dipoles
    r = pos[:, None, :] - pos[None, :, :]
    np.einsum("iij->ij", r)[...] = 1.0  # placeholder on the diagonal
    G = greens_tensor(r)
    H = -(3 * np.pi / K0) * np.einsum("ia,ijab,jb->ij", dip.conj(), G, dip, optimize=True)
    np.fill_diagonal(H, -0.5j)
    w, v = np.linalg.eig(H)
    c = v[:, np.argmin(-w.imag)]
    u = np.linspace(-1, 1, FAR_FIELD_PIXELS)
    ux, uy = np.meshgrid(u, u)
    inside = ux ** 2 + uy ** 2 <= 1
    dirs = [np.stack([ux[inside], uy[inside], s * np.sqrt(np.clip(1 - ux[inside] ** 2
                                                                  - uy[inside] ** 2, 0, None))],
                     axis=1) for s in (1, -1)]
    order = angular_order(em)
    for axis in ("+z", "-z"):
        dirs.append(cap_grid(order, np.arcsin(0.5), axis).directions)
    centred = pos - pos.mean(axis=0)
    for d in dirs:
        f = np.exp(-1j * (K0 * (d @ centred.T))) @ (c[:, None] * dip)
        f -= d * np.sum(d * f, axis=1, keepdims=True)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10, 20, 40])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args()
    with threadpool_limits(args.threads):
        blas = {i["internal_api"]: i["num_threads"] for i in threadpool_info()}
        print(f"Choir explorer benchmark — {time.strftime('%Y-%m-%d %H:%M')}, "
              f"{platform.processor() or platform.machine()}, BLAS threads {blas}")
        print(f"{'N':>6} {'array':>9} | {'spectrum [ms]':>13} | {'views [ms]':>9} | "
              f"{'with probe':>10} | {'baseline [ms]':>13} | {'speed-up':>8}")
        print("-" * 86)
        rows = [(nx, kind) for nx in args.sizes for kind in ("square", "jittered")]
        for nx, kind in rows:
            page = build_explorer()
            page.explorer_open("probe")  # 'with probe' times the open probe section too
            st = page.explorer_state
            st.param.update(nx=nx, ny=nx, spacing=0.3, dipole="x")
            if kind == "jittered":
                rng = np.random.default_rng(nx)
                jitter = rng.normal(scale=0.01, size=(nx * nx, 3))
                st.edit_positions(st.result.emitters.positions + jitter, np.arange(nx * nx))
            views = page.explorer_views
            spec, views_t, tot = [], [], []
            times: dict[str, float] = {}
            watchers = [
                st.param.watch(lambda e: times.setdefault("spectrum", time.perf_counter()),
                               "result"),
                st.param.watch(lambda e: times.setdefault("views", time.perf_counter()),
                               "mode_result")]
            for k in range(args.repeat):
                times.clear()
                t0 = time.perf_counter()
                if kind == "square":
                    # one slider step each time, never a value seen before (the state keeps
                    # recently solved scenarios: returning to one would time the cache)
                    st.spacing = 0.3 + 0.005 * (k + 1)
                else:  # a new polar angle each time (no cache hit)
                    st.param.update(dipole="polar angles", theta_deg=90.0, phi_deg=7.0 * (k + 1))
                t1 = time.perf_counter()
                assert len(views["spectrum"].source.data["x"]) == nx * nx
                spec.append(times["spectrum"] - t0)
                views_t.append(times["views"] - t0)
                tot.append(t1 - t0)
            for w in watchers:
                st.param.unwatch(w)
            base = min(baseline(st.result.emitters) for _ in range(max(1, args.repeat // 3)))
            print(f"{nx * nx:>6} {kind:>9} | {1e3 * np.median(spec):>13.1f} | "
                  f"{1e3 * np.median(views_t):>9.1f} | {1e3 * np.median(tot):>10.1f} "
                  f"| {1e3 * base:>13.1f} | {base / np.median(views_t):>7.1f}x")
        print("\nmedian over the repeats; 'views' = spectrum, array view, far field, lens and "
              "mode card current; 'with probe' = also the probe spectrum, field map and decay "
              "curve (computed in a job of their own when served, after the views); speed-up = "
              "baseline / views; target: views ≤ 100 ms at N = 400")


if __name__ == "__main__":
    main()
