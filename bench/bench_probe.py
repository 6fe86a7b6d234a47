"""The explorer's probe panel: app.jobs.probe_analysis against the plain exact path.

    python bench/bench_probe.py [--sizes 10 20 40] [--repeat 3] [--threads 1]

For square nx×nx arrays (spacing 0.3 λ0, x dipoles, free space) and the same
arrays jittered by N(0, 0.01 λ0) per axis (the scenario's own imperfections,
seed 7), with a Gaussian-beam probe (waist 2 λ0) and a plane-wave probe, each
of 201 detunings, it times one call of the panel's job
``app.jobs.probe_analysis`` (scan, 61×61 field map at the spectrum's peak,
151-point decay curve from emitter 0 over 10/Γ0, infinite-sheet comparison).
The modes come from ``app.jobs.solve`` beforehand, as in a session; solving
is not timed.

Baseline, measured in the same run: the path before the mode expansions —
``probe_scan`` without ``coupling``/``modes`` (its own coupling matrix, dense
Schur decomposition and one triangular solve per detuning), the field map with
the full 3×3 Green's tensor per (pixel, emitter) pair, ``evolve`` without
``modes`` (Taylor-series exponential action), the decay channels evaluated on
the whole array, the coupling matrix built a second time for the decay curve,
and the same sheet comparison.  Both results are compared (largest relative
difference of the spectrum, the field map and the population).

Best of ``--repeat`` (once at N ≥ 1000).  One BLAS thread by default, as
served sessions use.  The machine is shared: timings are noisy.
"""
from __future__ import annotations

import argparse
import dataclasses
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import scipy
from threadpoolctl import threadpool_info, threadpool_limits

ROOT = Path(__file__).parents[1]
sys.path.insert(0, str(ROOT))

from app import jobs  # noqa: E402
from physics import bands as bnd  # noqa: E402
from physics import scenario as scn  # noqa: E402
from physics.driving import (Probe, fit_resonance, probe_scan, scan_signal)  # noqa: E402
from physics.dynamics import evolve, single_emitter_state  # noqa: E402
from physics.free_space import K0, greens_tensor  # noqa: E402
from physics.geometry import MIN_DISTANCE  # noqa: E402
from physics.hamiltonian import coupling_matrix  # noqa: E402

T_MAX = 10.0
TARGET_MS, TARGET_N = 500.0, 400


def scenario(nx: int, jittered: bool) -> scn.Scenario:
    sc = scn.from_dict({
        "format": "choir-scenario", "version": 3, "name": f"square {nx}x{nx}",
        "transition": {"preset": "Rb87 D2"},
        "geometry": {"lattice": "square", "nx": nx, "ny": nx, "spacing": 0.3},
        "dipole": {"preset": "x"}, "environment": [{"kind": "free_space"}]})
    if jittered:
        sc = dataclasses.replace(sc, seed=7,
                                 imperfections=(("jitter_lambda0", (0.01, 0.01, 0.01)),))
    return sc


def _tensor_field_map(em, probe, c, half, pixels):
    """The field map as before: full Green's tensors in blocks of 256 pixels, plane xz."""
    centre = em.positions.mean(axis=0)
    u = np.linspace(-half, half, pixels)
    U, V = np.meshgrid(u, u, indexing="xy")
    pts = np.zeros((U.size, 3)) + centre
    pts[:, 0] += U.ravel()
    pts[:, 2] += V.ravel()
    out = np.zeros((pts.shape[0], 3), dtype=complex)
    near = np.zeros(pts.shape[0], dtype=bool)
    src = c[:, None] * em.dipoles
    for s in range(0, pts.shape[0], 256):
        r = pts[s:s + 256, None, :] - em.positions[None, :, :]
        bad = np.linalg.norm(r, axis=-1) < MIN_DISTANCE
        r[bad] = (1.0, 0.0, 0.0)
        G = greens_tensor(r)
        G[bad] = 0.0
        out[s:s + 256] = -(3.0 * np.pi / K0) * np.einsum("mnab,nb->ma", G, src)
        near[s:s + 256] = bad.any(axis=1)
    out[near] = np.nan
    total = probe.incident_field(pts) + out
    return np.sum(np.abs(total) ** 2, axis=1).reshape(U.shape)


def baseline(res, probe):
    """The probe panel's work on the plain exact path (see the module docstring)."""
    em, env = res.emitters, res.environment
    scan = probe_scan(em, env, probe)
    signal, _ = scan_signal(scan, probe.kind)
    fit_resonance(scan["detunings"], signal)
    lo, hi = em.positions.min(axis=0), em.positions.max(axis=0)
    half = max(2.0, 0.5 * float(np.max(hi - lo)) + 1.0)
    inten = _tensor_field_map(em, probe, scan["amplitudes"][int(np.argmax(signal))], half,
                              jobs.MAP_PIXELS)
    H = coupling_matrix(em, env)
    times, amps = evolve(H, single_emitter_state(em.n, 0), T_MAX, jobs.DECAY_POINTS)
    gamma = 1j * (H - H.conj().T)
    np.real(np.einsum("ti,ij,tj->t", amps.conj(), gamma, amps))
    env.emitted_power(em, amps[0])
    lat, dipole, _ = res.scenario.periodic_model()
    bnd.probe_on_sheet(lat, dipole, probe)
    return signal, inten, np.sum(np.abs(amps) ** 2, axis=1)


def _best(fn, repeat):
    best, value = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        value = fn()
        best = min(best, time.perf_counter() - t0)
    return best, value


def _rel(a, b):
    ok = np.isfinite(a) & np.isfinite(b)
    return float(np.max(np.abs(a[ok] - b[ok])) / np.max(np.abs(b[ok])))


def header(threads: int) -> None:
    try:
        commit = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"],
                                capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(ROOT), "status", "--porcelain", "--",
                                "physics", "app/jobs.py"], capture_output=True, text=True
                               ).stdout.strip()
        commit += " (+ uncommitted changes in physics/ or app/jobs.py)" if dirty else ""
    except (OSError, subprocess.CalledProcessError):
        commit = "unknown"
    blas = ", ".join(f"{i['internal_api']} {i.get('version')} ({i['num_threads']} threads)"
                     for i in threadpool_info())
    print("Choir probe-panel benchmark: app.jobs.probe_analysis vs the plain exact path")
    print(f"  date: {time.strftime('%Y-%m-%dT%H:%M:%S%z')}")
    print(f"  machine: {platform.machine()} {platform.processor() or ''}".rstrip()
          + f", {len(__import__('os').sched_getaffinity(0))} usable cores (shared: noisy)")
    print(f"  python {platform.python_version()}, numpy {np.__version__}, "
          f"scipy {scipy.__version__}")
    print(f"  BLAS threads requested {threads}; in effect: {blas}")
    print(f"  commit: {commit}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10, 20, 40])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args()
    probes = {"beam": Probe("gaussian_beam", waist=2.0, points=201),
              "plane": Probe("plane_wave", points=201)}
    verdict = []
    with threadpool_limits(args.threads):
        header(args.threads)
        print(f"{'N':>5} {'array':>8} {'probe':>5} | {'panel [ms]':>10} | "
              f"{'baseline [ms]':>13} | {'ratio':>6} | {'eigen':>5} | "
              f"{'Δ spectrum':>10} {'Δ map':>8} {'Δ decay':>8}")
        print("-" * 98)
        for nx in args.sizes:
            repeat = args.repeat if nx * nx < 1000 else 1
            for jittered in (False, True):
                res = jobs.solve(scenario(nx, jittered))
                from physics.driving import eigenbasis_usable
                eig = eigenbasis_usable(None if res.defective else res.modes, res.emitters.n)
                for name, probe in probes.items():
                    fast_t, ana = _best(lambda: jobs.probe_analysis(
                        res, probe, "emitter", 0, T_MAX, "xz"), repeat)
                    base_t, (sig, inten, pop) = _best(lambda: baseline(res, probe), repeat)
                    d_sig = _rel(ana.signal, sig)
                    d_map = _rel(ana.map[2] * np.sum(np.abs(probe.incident_field(
                        res.emitters.positions.mean(axis=0)[None])) ** 2), inten)
                    d_pop = _rel(ana.decay["population"], pop)
                    kind = "jittered" if jittered else "square"
                    print(f"{nx * nx:>5} {kind:>8} {name:>5} | {1e3 * fast_t:>10.1f} | "
                          f"{1e3 * base_t:>13.1f} | {base_t / fast_t:>5.1f}x | "
                          f"{'yes' if eig else 'no':>5} | {d_sig:>10.1e} {d_map:>8.1e} "
                          f"{d_pop:>8.1e}", flush=True)
                    if nx * nx == TARGET_N:
                        verdict.append(1e3 * fast_t)
    print(f"\nbest of {args.repeat} (once at N ≥ 1000); ratio = baseline / panel; eigen = the "
          f"mode expansions were used (Petermann criterion); Δ = largest relative difference "
          f"to the baseline's spectrum, field map and population.")
    if verdict:
        ok = max(verdict) <= TARGET_MS
        print(f"target: panel ≤ {TARGET_MS:.0f} ms at N = {TARGET_N}: "
              f"{'met' if ok else 'NOT met'} (worst row {max(verdict):.0f} ms)")


if __name__ == "__main__":
    main()
