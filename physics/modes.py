"""Collective modes: eigen-decomposition of the effective Hamiltonian and figures per mode."""
from __future__ import annotations

import os
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.linalg
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from .geometry import Emitters
from .hamiltonian import Environment, coupling_matrix
from .symmetry import SymmetryGroup, find_symmetry

__all__ = ["Modes", "DefectiveMatrixWarning", "solve_modes", "modes_from_matrix",
           "PETERMANN_WARN", "radiance_label", "SUBRADIANT_BELOW", "SUPERRADIANT_ABOVE"]

#: Plain-language tags of a decay rate Γ [Γ0]: below SUBRADIANT_BELOW it is
#: "subradiant", above SUPERRADIANT_ABOVE "superradiant", in between "near
#: single-emitter" (a convention of Choir's, not a standard: ±20 % of Γ0).
SUBRADIANT_BELOW = 0.8
SUPERRADIANT_ABOVE = 1.2


def radiance_label(rate: float) -> str:
    """"subradiant", "near single-emitter" or "superradiant" for a decay rate [Γ0]."""
    if rate < SUBRADIANT_BELOW:
        return "subradiant"
    if rate > SUPERRADIANT_ABOVE:
        return "superradiant"
    return "near single-emitter"

#: Petermann factor above which the eigenbasis is reported as numerically
#: defective: eigenvectors this far from orthogonal amplify round-off by about
#: this factor, so expansions in modes lose all digits near 1e16.
PETERMANN_WARN = 1e8

#: Eigenvalues closer than this (relative to max(1, max|λ|)) are treated as one
#: degenerate eigenspace.  Symmetric arrays split exact degeneracies by ~1e-14.
DEGENERACY_TOL = 1e-10


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
    cluster : (N,) int ndarray
        Label of the (numerically) degenerate eigenspace each mode belongs to;
        right eigenvectors within one are orthonormal.
    sector, sector_names
        Symmetry sector index of each mode and the readable name of each sector.
    """

    eigenvalues: np.ndarray
    vectors: np.ndarray
    left_vectors: np.ndarray
    cluster: np.ndarray | None = None
    sector: np.ndarray | None = None
    sector_names: tuple[str, ...] = ("no symmetry used",)

    def __post_init__(self) -> None:
        n = self.eigenvalues.shape[0]
        if self.cluster is None:
            object.__setattr__(self, "cluster", np.arange(n))
        if self.sector is None:
            object.__setattr__(self, "sector", np.zeros(n, dtype=int))

    def symmetry_label(self, m: int) -> str:
        """Parities of mode m under the symmetries used, e.g. 'mirror x: even, mirror y: odd'."""
        return self.sector_names[int(self.sector[m])]

    @property
    def multiplicity(self) -> np.ndarray:
        """(N,) int: dimension of the (numerically) degenerate eigenspace of each mode."""
        return np.bincount(self.cluster)[self.cluster]

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

    @property
    def has_vectors(self) -> bool:
        """False for a spectrum alone (:meth:`spectrum_only`): figures that need vectors are NaN."""
        return self.vectors is not None

    @classmethod
    def spectrum_only(cls, eigenvalues: np.ndarray, sector: np.ndarray | None = None,
                      sector_names: tuple[str, ...] = ("no symmetry used",)) -> "Modes":
        """Modes without eigenvectors (eigenvalues first; see physics.large.spectrum)."""
        w = np.asarray(eigenvalues, dtype=complex)
        scale = max(1.0, float(np.max(np.abs(w)))) if w.size else 1.0
        return cls(eigenvalues=w, vectors=None, left_vectors=None,
                   cluster=_degenerate_clusters(w, DEGENERACY_TOL * scale),
                   sector=sector, sector_names=sector_names)

    @cached_property
    def participation_ratio(self) -> np.ndarray:
        """(Σ_j |c_j|²)² / Σ_j |c_j|⁴ per mode: about how many emitters carry it (1 to N)."""
        if self.vectors is None:
            return np.full(self.n, np.nan)
        p = np.abs(self.vectors) ** 2
        return p.sum(axis=0) ** 2 / np.sum(p * p, axis=0)

    @cached_property
    def petermann(self) -> np.ndarray:
        """Petermann factor K_m = (l_m†l_m)(c_m†c_m)/|l_m†c_m|² ≥ 1 per mode.

        1 for a normal matrix; large values mean strongly non-orthogonal modes
        (excess noise, sensitivity to perturbations); it diverges at an
        exceptional point.  Within a degenerate eigenspace the per-mode value
        depends on the chosen basis, so the eigenspace average (which does not,
        for an orthonormal right basis) is reported for each of its modes.

        References
        ----------
        K. Petermann, IEEE J. Quantum Electron. 15, 566 (1979);
        A. E. Siegman, Phys. Rev. A 39, 1253 (1989).
        """
        # near an exceptional point the left vectors are huge: K overflows to inf
        l, c = self.left_vectors, self.vectors
        if c is None:
            return np.full(self.n, np.nan)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            # column sums on the real and imaginary views: no N×N temporaries
            dot = lambda a, b: np.einsum("ij,ij->j", a, b)  # noqa: E731
            ll = dot(l.real, l.real) + dot(l.imag, l.imag)
            rr = dot(c.real, c.real) + dot(c.imag, c.imag)
            lr = ((dot(l.real, c.real) + dot(l.imag, c.imag)) ** 2
                  + (dot(l.real, c.imag) - dot(l.imag, c.real)) ** 2)
            k = ll * rr / lr
            mean = np.bincount(self.cluster, weights=k) / np.bincount(self.cluster)
        return mean[self.cluster]

    def expand(self, amplitudes: np.ndarray) -> np.ndarray:
        """Coefficients a_m with c = Σ_m a_m c_m, using the left eigenvectors."""
        return self.left_vectors.conj().T @ np.asarray(amplitudes, dtype=complex)

    def most_subradiant(self) -> int:
        """Index of the mode with the smallest decay rate (0, by the ordering)."""
        return 0

    def most_radiant(self) -> int:
        """Index of the mode with the largest decay rate."""
        return self.n - 1


def _degenerate_clusters(w: np.ndarray, tol: float) -> np.ndarray:
    """Label eigenvalues closer than ``tol`` (transitively) with a common cluster index."""
    pts = np.column_stack([w.real, w.imag])
    pairs = cKDTree(pts).query_pairs(tol, output_type="ndarray")
    if len(pairs) == 0:
        return np.arange(w.size)
    n = w.size
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    return connected_components(graph, directed=False)[1]


def _diagonalise(H: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Eigenvalues, right vectors (orthonormal in degenerate spaces), left vectors = rows of V⁻¹."""
    w, vr = np.linalg.eig(H)  # numpy's LAPACK call releases the GIL (parallel blocks)
    scale = max(1.0, float(np.max(np.abs(w)))) if w.size else 1.0
    cluster = _degenerate_clusters(w, DEGENERACY_TOL * scale)
    sizes = np.bincount(cluster)
    for label in np.flatnonzero(sizes > 1):
        idx = np.flatnonzero(cluster == label)
        q = np.linalg.qr(vr[:, idx])[0]
        # a true eigenspace stays one after orthonormalising; near an exceptional
        # point the vectors are (nearly) parallel and QR would leave it
        if np.max(np.abs(H @ q - q * w[idx])) <= 1e3 * DEGENERACY_TOL * scale:
            vr[:, idx] = q
    vr = vr / np.linalg.norm(vr, axis=0)
    try:
        vl = np.linalg.inv(vr).conj().T
    except np.linalg.LinAlgError:  # exactly singular: defective, warned by the caller
        _, vl, _ = scipy.linalg.eig(H, right=True, left=True, check_finite=False)
        overlap = np.sum(vl.conj() * vr, axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            vl = vl / overlap.conj()
    return w, vr, vl


#: Symmetry blocks are diagonalised on parallel threads (one BLAS thread each) when
#: the work is at least this many emitters; below, thread start-up costs more.
PARALLEL_BLOCKS_FROM = 600


def map_blocks(fn, blocks: list) -> list:
    """``[fn(b) for b in blocks]``, on one thread per core for large problems.

    numpy's LAPACK calls release the GIL (scipy.linalg's do not), and for blocks
    of a few hundred to a few thousand
    one BLAS thread per block on its own core beats all cores on one block at a
    time (measured in bench/bench_speed.py).  BLAS is held to one thread only
    while the blocks run.
    """
    cores = os.cpu_count() or 1
    if len(blocks) < 2 or cores < 2 or sum(b.shape[0] for b in blocks) < PARALLEL_BLOCKS_FROM:
        return [fn(b) for b in blocks]
    from threadpoolctl import threadpool_limits

    with threadpool_limits(1), ThreadPoolExecutor(min(cores, len(blocks))) as pool:
        return list(pool.map(fn, blocks))


def modes_from_matrix(H: np.ndarray, symmetry: SymmetryGroup | None = None) -> Modes:
    """Diagonalise a coupling matrix and order the modes by decay rate.

    Right eigenvectors come from LAPACK; inside each (numerically) degenerate
    eigenspace they are orthonormalised, a canonical choice that makes the
    figures below independent of LAPACK's arbitrary basis.  Left eigenvectors
    are the rows of V⁻¹, so l_m† c_n = δ_mn holds by construction (scaling
    separately computed left vectors is not enough inside degenerate spaces).

    Parameters
    ----------
    H : (N, N) complex ndarray [Γ0]
    symmetry : SymmetryGroup, optional
        Symmetries H commutes with (see :func:`physics.symmetry.find_symmetry`);
        each sector is diagonalised on its own and every mode is labelled.

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
    if symmetry is None:
        w, vr, vl = _diagonalise(H)
        sector = np.zeros(w.size, dtype=int)
        names: tuple[str, ...] = ("no symmetry used",)
        order = np.lexsort((w.real, -w.imag))
        w, vr, vl, sector = w[order], vr[:, order], vl[:, order], sector[order]
    else:
        secs = symmetry.sectors()
        parts = map_blocks(_diagonalise, [symmetry.block(H, sec) for sec in secs])
        names = tuple(symmetry.labels(sec.parities) for sec in secs)
        w = np.concatenate([p[0] for p in parts])
        sector = np.concatenate([np.full(p[0].size, k) for k, p in enumerate(parts)])
        order = np.lexsort((w.real, -w.imag))
        where = np.empty_like(order)
        where[order] = np.arange(order.size)
        # lift each sector's vectors straight into their sorted columns (no big copies)
        n = H.shape[0]
        vr = np.empty((n, n), dtype=complex, order="F")  # whole columns are written
        vl = np.empty((n, n), dtype=complex, order="F")
        start = 0
        for sec, (ws, vs, ls) in zip(secs, parts):
            cols = where[start:start + ws.size]
            start += ws.size
            vr[:, cols] = symmetry.lift(vs, sec)
            vl[:, cols] = symmetry.lift(ls, sec)
        w, sector = w[order], sector[order]
    scale = max(1.0, float(np.max(np.abs(w))))
    cluster = _degenerate_clusters(w, DEGENERACY_TOL * scale)
    # average the Petermann factor only over spaces that really are orthonormal
    for label in np.flatnonzero(np.bincount(cluster) > 1):
        idx = np.flatnonzero(cluster == label)
        gram = vr[:, idx].conj().T @ vr[:, idx]
        if np.max(np.abs(gram - np.eye(idx.size))) > 1e-6:
            cluster[idx] = idx + w.size
    modes = Modes(eigenvalues=w, vectors=vr, left_vectors=vl, cluster=cluster,
                  sector=sector, sector_names=names)
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


def solve_modes(em: Emitters, environment: Environment, *, use_symmetry: bool = True) -> Modes:
    """Collective modes of ``em`` in ``environment``.

    Mirror and two-fold rotation symmetries of the arrangement that the
    environment respects (``environment.symmetry_operations``) are found
    automatically and used to split H into blocks; ``use_symmetry=False``
    diagonalises the full matrix.

    Returns
    -------
    Modes
        Eigenvalues ω_m − iΓ_m/2 [Γ0] by ascending decay rate, right
        eigenvectors (unit 2-norm) and biorthogonal left eigenvectors.
    """
    H = coupling_matrix(em, environment)
    group = None
    if use_symmetry:
        group = find_symmetry(em, tuple(getattr(environment, "symmetry_operations", ())))
    return modes_from_matrix(H, group)
