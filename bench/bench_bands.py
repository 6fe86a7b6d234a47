"""Benchmark of the infinite-lattice bands: 200 k-points of planar lattices.

For each lattice below this times, in one run:

- Choir: ``physics.bands.bands(lattice, path.k, dipole)`` for a 200-point
  path through the Brillouin zone (Ewald lattice sums, eigenvalues per k);
- a plain baseline: the defining real-space lattice sum
  Σ_R G(ρ − R) e^{ik·R} e^{−ε|R|} with a convergence factor (ε = 0.1/λ0,
  summed until e^{−εR} < e^{−30}), evaluated with the free-space Green's
  tensor for every basis pair, then the same eigenvalue step.  The baseline
  runs on a few k-points (its time per k-point is constant) and is scaled to
  200; its error against Choir is printed too — the damped sum converges
  only as ε → 0, so even this slow baseline is accurate to ~1e-2 only.

Target (issue: infinite lattices): 200 k-points of a 2D lattice in ≤ 1 s.
Nothing is asserted: this is a measurement, not a test.

Usage::

    python bench/bench_bands.py [--baseline-points 4] [--eps 0.1]
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

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from physics import bands as B  # noqa: E402
from physics.free_space import K0, greens_tensor  # noqa: E402

CASES = [
    ("square", {"spacing": 0.3}, "x"),
    ("triangular", {"spacing": 0.45}, "z"),
    ("honeycomb", {"spacing": 0.2}, "vector"),
    ("kagome", {"spacing": 0.3}, "vector"),
    ("square", {"spacing": 1.4}, "vector"),
]
N_POINTS = 200
TARGET_S = 1.0


def baseline_hamiltonian(lat: B.PlanarLattice, k: np.ndarray, dipole, eps: float) -> np.ndarray:
    """H(k) from the damped direct sum (same layout as physics.bands.bloch_hamiltonian)."""
    R = B.lattice_points(lat.vectors, 30.0 / eps)
    basis = lat.basis_array
    nb = lat.n_basis
    S = np.zeros((nb, nb, 3, 3), dtype=complex)
    for a in range(nb):
        for b in range(nb):
            disp = basis[a] - basis[b] - R
            keep = np.hypot(*disp.T) > 1e-12
            r3 = np.zeros((int(keep.sum()), 3))
            r3[:, :2] = disp[keep]
            w = np.exp(1j * (R[keep] @ k) - eps * np.hypot(*R[keep].T))
            for s in range(0, len(w), 50000):
                S[a, b] += np.einsum("n,nij->ij", w[s:s + 50000], greens_tensor(r3[s:s + 50000]))
    if isinstance(dipole, str) and dipole == "vector":
        H = -(3.0 * np.pi / K0) * S.transpose(0, 2, 1, 3).reshape(3 * nb, 3 * nb)
        return H - 0.5j * np.eye(3 * nb)
    d = B._dipoles(lat, dipole)
    return -(3.0 * np.pi / K0) * np.einsum("ai,abij,bj->ab", np.conj(d), S, d) - 0.5j * np.eye(nb)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--baseline-points", type=int, default=4)
    ap.add_argument("--eps", type=float, default=0.1, help="baseline convergence factor [1/λ0]")
    args = ap.parse_args()
    print(f"Choir bands benchmark: {N_POINTS} k-points per lattice")
    print(f"  date: {_dt.datetime.now(_dt.timezone.utc).isoformat(timespec='seconds')}")
    print(f"  machine: {platform.machine()}, nproc = {os.cpu_count()}, numpy {np.__version__}")
    print(f"  baseline: damped direct sum, ε = {args.eps} /λ0, {args.baseline_points} k-points "
          f"timed and scaled to {N_POINTS}\n")
    head = (f"{'lattice':>11} {'a [λ0]':>7} {'dipole':>7} {'bands':>5} | {'Choir [s]':>9} "
            f"{'check':>8} | {'base [s]':>9} {'speedup':>8} {'base err':>9}")
    print(head)
    print("-" * len(head))
    worst = 0.0
    for kind, geo, dipole in CASES:
        lat = B.periodic_lattice(kind, geo)
        path = B.band_path(lat, N_POINTS, dipole)
        B.bands(lat, path.k[:5], dipole)  # warm-up
        t0 = time.perf_counter()
        res = B.bands(lat, path.k, dipole)
        t_choir = time.perf_counter() - t0
        worst = max(worst, t_choir)
        check = B.ewald_check(lat, path.k[::10], dipole)
        pick = np.linspace(3, len(path.k) - 4, args.baseline_points).astype(int)
        t0 = time.perf_counter()
        Hb = [baseline_hamiltonian(lat, path.k[i], dipole, args.eps) for i in pick]
        [np.linalg.eigvals(h) for h in Hb]
        t_base = (time.perf_counter() - t0) * len(path.k) / len(pick)
        Hc = B.bloch_hamiltonian(lat, path.k[pick], dipole)
        ok = np.isfinite(Hc).all(axis=(1, 2))
        err = max((np.max(np.abs(h - c)) / np.max(np.abs(c)) for h, c, g in zip(Hb, Hc, ok) if g),
                  default=float("nan"))
        print(f"{kind:>11} {float(np.hypot(*lat.a1)):7.3f} {str(dipole):>7} "
              f"{res.shift.shape[1]:5d} | {t_choir:9.4f} {check:8.1e} | {t_base:9.2f} "
              f"{t_base / t_choir:7.0f}x {err:9.1e}")
    print("\ncheck = relative change of H(k) when the Ewald splitting parameter is raised by 60 %; "
          "base err = max|H_base − H_Choir| / max|H_Choir| on the timed k-points.")
    verdict = "HOLDS" if worst <= TARGET_S else "MISSED"
    print(f"target '{N_POINTS} k-points of a 2D lattice in ≤ {TARGET_S:g} s': {verdict} "
          f"(slowest lattice {worst:.3f} s)")


if __name__ == "__main__":
    main()
