"""The effective non-Hermitian Hamiltonian of one excitation shared by the emitters.

Amplitudes evolve as i dc/dt = H c (ħ = 1, frame rotating at ω0).  Writing
H = J − iΓ/2 with J, Γ Hermitian, J = (H + H†)/2 holds the coherent exchange
(collective shifts) and Γ = i(H − H†) the dissipative couplings (decay rates).
"""
from __future__ import annotations

import warnings
from typing import Protocol

import numpy as np
from scipy.spatial import cKDTree

from .geometry import MIN_DISTANCE, Emitters

__all__ = ["Environment", "coupling_matrix", "check_separation", "decay_operator",
           "exchange_operator", "ModelLimitWarning"]


class ModelLimitWarning(UserWarning):
    """The configuration leaves the range where the model holds (e.g. the bad-cavity limit)."""


class Environment(Protocol):
    """What an environment provides: the full coupling matrix of an arrangement."""

    def coupling(self, em: Emitters) -> np.ndarray:  # pragma: no cover - protocol
        ...

    def describe(self) -> str:  # pragma: no cover - protocol
        ...


def check_separation(em: Emitters, min_distance: float = MIN_DISTANCE) -> None:
    """Refuse geometries with two emitters closer than ``min_distance`` [λ0].

    Raises
    ------
    ValueError
        Naming both emitter indices (0-based) and their distance.
    """
    if em.n < 2:
        return
    tree = cKDTree(em.positions)
    pairs = tree.query_pairs(min_distance, output_type="ndarray")
    if len(pairs):
        i, j = sorted(int(v) for v in pairs[0])
        dist = float(np.linalg.norm(em.positions[i] - em.positions[j]))
        raise ValueError(
            f"positions: emitters {i} and {j} are {dist:.3g} λ0 apart; the minimum "
            f"separation is {min_distance:g} λ0 (point dipoles closer than this are not "
            f"meaningful and the near field diverges as 1/r³)"
        )


def coupling_matrix(em: Emitters, environment: Environment) -> np.ndarray:
    """Effective Hamiltonian H of the single-excitation manifold.

    Parameters
    ----------
    em : Emitters
        Arrangement; no two emitters closer than ``MIN_DISTANCE``.
    environment : Environment
        For example :class:`physics.FreeSpace`.

    Returns
    -------
    (N, N) complex128 ndarray [Γ0]
        Eigenvalues are ω_m − iΓ_m/2 (collective shift and decay rate).
    """
    check_separation(em)
    for note in getattr(environment, "check", lambda _: [])(em):
        warnings.warn(note, ModelLimitWarning, stacklevel=2)
    H = environment.coupling(em)
    if not np.all(np.isfinite(H)):  # a guard: the separation check should make this impossible
        raise FloatingPointError("coupling matrix has non-finite entries")
    return H


def decay_operator(H: np.ndarray) -> np.ndarray:
    """Γ = i(H − H†), the Hermitian matrix of collective decay rates [Γ0]."""
    return 1j * (H - H.conj().T)


def exchange_operator(H: np.ndarray) -> np.ndarray:
    """J = (H + H†)/2, the Hermitian matrix of coherent exchange [Γ0]."""
    return 0.5 * (H + H.conj().T)
