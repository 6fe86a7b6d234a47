"""Weak coherent driving in linear response: steady-state amplitudes for many detunings.

A weak probe of detuning Δ = ω_laser − ω0 with Rabi amplitudes Ω_j on the
emitters gives, in the single-excitation (linear) regime and the frame of the
laser, the steady state

    (H − Δ) c = −Ω .

For a scan over many detunings one complex Schur decomposition H = Z T Z† is
computed once; each detuning is then one triangular solve, O(N²).  The Schur
form is unitary and exists for every matrix, so this stays exact for defective
matrices (a chiral waveguide), where an eigen-expansion fails.

References
----------
G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed. (2013),
§7.6 (Schur decomposition); the linear-response equation is the one in the
project's design notes, e.g. A. Asenjo-Garcia et al., Phys. Rev. X 7, 031024
(2017).
"""
from __future__ import annotations

import numpy as np
import scipy.linalg

__all__ = ["steady_states"]


def steady_states(H: np.ndarray, drive: np.ndarray, detunings: np.ndarray) -> np.ndarray:
    """Steady-state amplitudes c(Δ) solving (H − Δ) c = −Ω for every detuning.

    Parameters
    ----------
    H : (N, N) complex ndarray [Γ0]
    drive : (N,) complex ndarray
        Ω_j [Γ0] (for a waveguide probe, in units of √Γ0 times the input amplitude).
    detunings : (D,) float ndarray [Γ0]

    Returns
    -------
    (D, N) complex ndarray
    """
    H = np.asarray(H, dtype=complex)
    T, Z = scipy.linalg.schur(H, output="complex")
    rhs = Z.conj().T @ (-np.asarray(drive, dtype=complex))
    eye = np.eye(H.shape[0])
    out = np.empty((len(detunings), H.shape[0]), dtype=complex)
    for k, delta in enumerate(np.asarray(detunings, dtype=float)):
        out[k] = Z @ scipy.linalg.solve_triangular(T - delta * eye, rhs, check_finite=False)
    return out
