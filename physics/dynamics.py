"""Time evolution in the single-excitation manifold: c(t) = e^{−iHt} c(0).

The action of the matrix exponential on a vector is computed directly
(truncated Taylor series with scaling, no eigen-decomposition), so it is
exact also for defective matrices such as a chiral waveguide's.  When the
modes of H are known and well conditioned
(:func:`physics.driving.eigenbasis_usable`), c(t) = V e^{−iΛt} V⁻¹ c(0) is
used instead: O(N²) once and one matrix product for all times.

References
----------
A. H. Al-Mohy and N. J. Higham, SIAM J. Sci. Comput. 33, 488 (2011) — the
algorithm behind scipy.sparse.linalg.expm_multiply; C. Moler and C. Van Loan,
SIAM Rev. 45, 3 (2003), "method 14" (eigenvectors; fine when V is well
conditioned, which is what the criterion checks).
"""
from __future__ import annotations

import numpy as np
from scipy.sparse.linalg import expm_multiply

from .geometry import Emitters

__all__ = ["evolve", "single_emitter_state", "pulse_state", "decay_observables"]


def evolve(H: np.ndarray, initial: np.ndarray, t_max: float, num: int = 200, *,
           modes=None) -> tuple[np.ndarray, np.ndarray]:
    """Amplitudes on an even time grid from 0 to ``t_max`` [1/Γ0].

    Parameters
    ----------
    H : (N, N) complex ndarray [Γ0]
    initial : (N,) complex ndarray
        c(0); not normalised here.
    t_max : float
        Last time [1/Γ0], > 0.
    num : int
        Number of time points (≥ 2).
    modes : physics.modes.Modes, optional
        The modes of this very H.  When
        :func:`physics.driving.eigenbasis_usable` accepts them the expansion
        c(t) = Σ_m c_m e^{−iλ_m t} (l_m†c(0)) is used; otherwise (and without
        modes) the exact Taylor-series action of the exponential.

    Returns
    -------
    times : (num,) float ndarray [1/Γ0]
    amplitudes : (num, N) complex ndarray
    """
    if not (np.isfinite(t_max) and t_max > 0):
        raise ValueError(f"t_max: {t_max!r} is out of range; allowed > 0 (units of 1/Γ0)")
    if int(num) < 2:
        raise ValueError(f"num: {num!r} is out of range; allowed 2 or more")
    from .driving import eigenbasis_usable

    times = np.linspace(0.0, float(t_max), int(num))
    H = np.asarray(H, dtype=complex)
    c0 = np.asarray(initial, dtype=complex)
    if eigenbasis_usable(modes, H.shape[0]):
        coeff = modes.left_vectors.conj().T @ c0
        phases = np.exp(-1j * times[:, None] * modes.eigenvalues[None, :])
        return times, (phases * coeff[None, :]) @ modes.vectors.T
    amps = expm_multiply(-1j * H, c0, start=0.0, stop=float(t_max), num=int(num),
                         endpoint=True)
    return times, amps


def single_emitter_state(n: int, j: int) -> np.ndarray:
    """c(0) with emitter j excited, (n,) complex."""
    if not 0 <= j < n:
        raise ValueError(f"emitter: {j} is out of range; allowed 0 to {n - 1}")
    c = np.zeros(n, dtype=complex)
    c[j] = 1.0
    return c


def pulse_state(em: Emitters, direction, polarization) -> np.ndarray:
    """The state a short, weak, phase-matched plane-wave pulse writes (unit norm).

    A pulse much shorter than 1/Γ_collective imprints c_j ∝ conj(d_j)·ε e^{ik0 k̂·r_j}
    (a timed Dicke state): the drive pattern of that plane wave.

    References
    ----------
    M. O. Scully, E. S. Fry, C. H. R. Ooi, K. Wódkiewicz, Phys. Rev. Lett. 96,
    010501 (2006) (timed Dicke states).
    """
    from .driving import drive_from_field, plane_wave_field

    c = drive_from_field(em, plane_wave_field(em.positions, direction, polarization))
    norm = np.linalg.norm(c)
    if norm < 1e-12:
        raise ValueError("polarization: this pulse does not couple to the dipoles (c = 0)")
    return c / norm


def decay_observables(H: np.ndarray, times: np.ndarray, amplitudes: np.ndarray,
                      channels=None) -> dict[str, np.ndarray]:
    """Population Σ|c|² and emitted power c†Γc vs time, optionally split by channel.

    Parameters
    ----------
    H : (N, N) complex ndarray [Γ0]
    times : (T,) float ndarray [1/Γ0]
    amplitudes : (T, N) complex ndarray (from :func:`evolve`)
    channels : (emitters, environment), optional
        If given, ``environment.emitted_power(emitters, c(t))`` is evaluated at
        every time: power into each channel [Γ0].

    Returns
    -------
    dict with "times", "population", "power" and, with channels, one entry per channel.
    """
    H = np.asarray(H, dtype=complex)
    gamma = 1j * (H - H.conj().T)
    c = np.asarray(amplitudes)
    out = {"times": np.asarray(times), "population": np.sum(np.abs(c) ** 2, axis=1),
           "power": np.real(np.sum(c.conj() * (c @ gamma.T), axis=1))}
    if channels is not None:
        em, env = channels
        # the channel names depend on the environment only: ask with one emitter
        # (a whole-array call can cost a coupling matrix)
        one = Emitters(em.positions[:1], em.dipoles[:1])
        names = list(env.emitted_power(one, c[0, :1]))
        if len(names) == 1:  # one channel: it carries all the emitted power
            out[names[0]] = out["power"].copy()
        else:
            per_time = [env.emitted_power(em, row) for row in c]
            for name in names:
                out[name] = np.array([p[name] for p in per_time])
    return out
