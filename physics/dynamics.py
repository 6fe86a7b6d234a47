"""Time evolution in the single-excitation manifold: c(t) = e^{−iHt} c(0).

The action of the matrix exponential on a vector is computed directly
(truncated Taylor series with scaling, no eigen-decomposition), so it is
exact also for defective matrices such as a chiral waveguide's.

References
----------
A. H. Al-Mohy and N. J. Higham, SIAM J. Sci. Comput. 33, 488 (2011) — the
algorithm behind scipy.sparse.linalg.expm_multiply.
"""
from __future__ import annotations

import numpy as np
from scipy.sparse.linalg import expm_multiply

__all__ = ["evolve"]


def evolve(H: np.ndarray, initial: np.ndarray, t_max: float, num: int = 200
           ) -> tuple[np.ndarray, np.ndarray]:
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

    Returns
    -------
    times : (num,) float ndarray [1/Γ0]
    amplitudes : (num, N) complex ndarray
    """
    if not (np.isfinite(t_max) and t_max > 0):
        raise ValueError(f"t_max: {t_max!r} is out of range; allowed > 0 (units of 1/Γ0)")
    if int(num) < 2:
        raise ValueError(f"num: {num!r} is out of range; allowed 2 or more")
    amps = expm_multiply(-1j * np.asarray(H, dtype=complex),
                         np.asarray(initial, dtype=complex),
                         start=0.0, stop=float(t_max), num=int(num), endpoint=True)
    return np.linspace(0.0, float(t_max), int(num)), amps
