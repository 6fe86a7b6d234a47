"""Collective modes: eigen-decomposition of the effective Hamiltonian and figures per mode."""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.linalg

from .geometry import Emitters
from .hamiltonian import Environment, coupling_matrix

__all__ = ["Modes", "DefectiveMatrixWarning", "solve_modes", "modes_from_matrix",
           "PETERMANN_WARN"]

#: Petermann factor above which the eigenbasis is reported as numerically
#: defective: eigenvectors this far from orthogonal amplify round-off by about
#: this factor, so expansions in modes lose all digits near 1e16.
PETERMANN_WARN = 1e8


class DefectiveMatrixWarning(RuntimeWarning):
    """The coupling matrix is (numerically) defective: modes are not a usable basis."""


@dataclass(frozen=True, eq=False)
class Modes:
    """Collective modes of one arrangement in one environment.

    Attributes
    ----------
    eigenvalues : (N,) complex ndarray [Γ0]
        ω_m − iΓ_m/2, ordered by ascending decay rate (most subradiant first).
    vectors : (N, N) complex ndarray
        Column m is the right eigenvector c_m, normalised c_m† c_m = 1.
    left_vectors : (N, N) complex ndarray
        Column m is the left eigenvector l_m (l_m† H = λ_m l_m†), scaled so that
        l_m† c_n = δ_mn (biorthogonal pairing).
    """

    eigenvalues: np.ndarray
    vectors: np.ndarray
    left_vectors: np.ndarray

    @property
    def n(self) -> int:
        return self.eigenvalues.shape[0]

    @property
    def shifts(self) -> np.ndarray:
        """Collective frequency shifts ω_m [Γ0], (N,) float."""
        return self.eigenvalues.real.copy()

    @property
    def decay_rates(self) -> np.ndarray:
        """Collective decay rates Γ_m = −2 Im λ_m [Γ0], (N,) float.

        Values of order −1e-15 can occur for extremely subradiant modes: that
        is round-off, not gain.
        """
        return -2.0 * self.eigenvalues.imag

    @property
    def lifetimes(self) -> np.ndarray:
        """1/Γ_m [1/Γ0]; infinite where the rate is not positive."""
        with np.errstate(divide="ignore"):
            g = self.decay_rates
            return np.where(g > 0, 1.0 / np.where(g > 0, g, 1.0), np.inf)

    @cached_property
    def participation_ratio(self) -> np.ndarray:
        """(Σ_j |c_j|²)² / Σ_j |c_j|⁴ per mode: about how many emitters carry it (1 to N)."""
        p = np.abs(self.vectors) ** 2
        return p.sum(axis=0) ** 2 / np.sum(p * p, axis=0)

    @cached_property
    def petermann(self) -> np.ndarray:
        """Petermann factor K_m = (l_m†l_m)(c_m†c_m)/|l_m†c_m|² ≥ 1 per mode.

        1 for a normal matrix; large values mean strongly non-orthogonal modes
        (excess noise, sensitivity to perturbations); it diverges at an
        exceptional point.

        References
        ----------
        K. Petermann, IEEE J. Quantum Electron. 15, 566 (1979);
        A. E. Siegman, Phys. Rev. A 39, 1253 (1989).
        """
        # near an exceptional point the left vectors are huge: K overflows to inf
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            ll = np.sum(np.abs(self.left_vectors) ** 2, axis=0)
            rr = np.sum(np.abs(self.vectors) ** 2, axis=0)
            lr = np.abs(np.sum(self.left_vectors.conj() * self.vectors, axis=0)) ** 2
            return ll * rr / lr

    def expand(self, amplitudes: np.ndarray) -> np.ndarray:
        """Coefficients a_m with c = Σ_m a_m c_m, using the left eigenvectors."""
        return self.left_vectors.conj().T @ np.asarray(amplitudes, dtype=complex)

    def most_subradiant(self) -> int:
        """Index of the mode with the smallest decay rate (0, by the ordering)."""
        return 0

    def most_radiant(self) -> int:
        """Index of the mode with the largest decay rate."""
        return self.n - 1


def _is_complex_symmetric(H: np.ndarray) -> bool:
    scale = np.max(np.abs(H))
    return bool(np.max(np.abs(H - H.T)) <= 1e-12 * scale)


def modes_from_matrix(H: np.ndarray) -> Modes:
    """Diagonalise a coupling matrix and order the modes by decay rate.

    For a complex-symmetric H (reciprocal environment with linear dipoles) the
    left eigenvectors are the complex conjugates of the right ones, so only
    right eigenvectors are computed.

    Warns
    -----
    DefectiveMatrixWarning
        When the largest Petermann factor exceeds ``PETERMANN_WARN``: the
        matrix is at or near an exceptional point (e.g. a chiral waveguide),
        eigenvectors are nearly parallel and should not be used to expand
        states; use linear solves or matrix exponentials instead.
    """
    H = np.asarray(H, dtype=complex)
    if H.ndim != 2 or H.shape[0] != H.shape[1]:
        raise ValueError(f"coupling matrix must be square, got shape {H.shape}")
    if _is_complex_symmetric(H):
        w, vr = scipy.linalg.eig(H, right=True, left=False, check_finite=False)
        vl = vr.conj()
    else:
        w, vl, vr = scipy.linalg.eig(H, right=True, left=True, check_finite=False)
    order = np.lexsort((w.real, -w.imag))
    w, vr, vl = w[order], vr[:, order], vl[:, order]
    vr = vr / np.linalg.norm(vr, axis=0)
    # Left vectors as the rows of V⁻¹, so that l_m† c_n = δ_mn holds by
    # construction.  Scaling each left vector by its own overlap is not enough:
    # inside a degenerate eigenspace (rings, square arrays, ...) LAPACK returns an
    # arbitrary basis, and conj(c_m) or the separately computed left vectors are
    # then not paired with the right vectors (l_m† c_n ≠ 0 for m ≠ n).
    try:
        vl = np.linalg.inv(vr).conj().T
    except np.linalg.LinAlgError:  # exactly singular: defective, warned below
        overlap = np.sum(vl.conj() * vr, axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            vl = vl / overlap.conj()
    modes = Modes(eigenvalues=w, vectors=vr, left_vectors=vl)
    worst = np.max(np.where(np.isfinite(modes.petermann), modes.petermann, np.inf))
    if worst > PETERMANN_WARN:
        warnings.warn(
            f"coupling matrix is numerically defective (largest Petermann factor "
            f"{worst:.2g} > {PETERMANN_WARN:.0e}): eigenvectors are nearly parallel and do "
            f"not form a usable basis; use linear solves or time evolution instead of "
            f"mode expansions",
            DefectiveMatrixWarning,
            stacklevel=2,
        )
    return modes


def solve_modes(em: Emitters, environment: Environment) -> Modes:
    """Collective modes of ``em`` in ``environment``.

    Returns
    -------
    Modes
        Eigenvalues ω_m − iΓ_m/2 [Γ0] by ascending decay rate, right
        eigenvectors (unit 2-norm) and biorthogonal left eigenvectors.
    """
    return modes_from_matrix(coupling_matrix(em, environment))
