"""Large arrays: the spectrum alone, and a few chosen modes, within stated memory.

Two tools beside :func:`physics.modes.solve_modes` (every mode with both
eigenvector sets):

* :func:`spectrum` — eigenvalues only, one symmetry block at a time (LAPACK
  ``geev`` without vectors costs about a third of a full solve);
* :func:`chosen_modes` — the k most subradiant or most radiant modes, or the
  k modes nearest a chosen complex frequency.  Eigenvalues come from the
  symmetry blocks (dense, exact) when the blocks are small enough, or from
  Arnoldi otherwise (ARPACK through :func:`scipy.sparse.linalg.eigs`: for
  modes near a frequency σ with shift-invert, one LU factorisation of H − σ;
  for the most subradiant or radiant ones on the largest or smallest
  imaginary part of the eigenvalues, with products H·v only); eigenvectors of the chosen modes by
  inverse iteration with one LU factorisation per eigenvalue cluster and a
  Rayleigh–Ritz step inside each cluster (so degenerate pairs come out
  orthonormal).

Memory: the coupling matrix (16 N² bytes) plus, at any time, one block and its
factorisation.  :func:`memory_needed` states the estimate; requests beyond
the memory this machine has free are refused with the numbers.

References
----------
R. B. Lehoucq, D. C. Sorensen and C. Yang, *ARPACK Users' Guide* (SIAM, 1998),
§3.2 (shift-invert spectral transformation);
G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed. (2013), §7.6.1
(inverse iteration), §8.1 (Rayleigh–Ritz).
"""
from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.linalg
import scipy.sparse.linalg

from .geometry import Emitters
from .hamiltonian import Environment, coupling_matrix
from .modes import map_blocks
from .symmetry import find_symmetry

__all__ = ["spectrum", "chosen_modes", "one_mode", "OneMode", "largest_block", "ChosenModes", "memory_needed", "free_memory",
           "DENSE_BLOCK_LIMIT", "MemoryRequestError"]

#: Symmetry blocks up to this size get all their eigenvalues densely; larger
#: ones are searched by shift-invert Arnoldi.
DENSE_BLOCK_LIMIT = 3000


class MemoryRequestError(MemoryError):
    """A request that needs more memory than this machine has free (message has the numbers)."""


def free_memory() -> int:
    """Bytes of memory available now (Linux /proc/meminfo; else physical memory / 2)."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE") // 2


def memory_needed(n: int, largest_block: int) -> int:
    """Peak bytes of :func:`chosen_modes`: H, one block, its LU and work space (estimate)."""
    return 16 * n * n + 3 * 16 * largest_block * largest_block + 64 * n * 64


def _check_memory(n: int, block: int) -> None:
    need, have = memory_needed(n, block), free_memory()
    if need > 0.85 * have:
        raise MemoryRequestError(
            f"N = {n} emitters: the coupling matrix and its largest block ({block}) need about "
            f"{need / 2**30:.1f} GiB, but only {have / 2**30:.1f} GiB are free on this machine; "
            f"use fewer emitters, or a symmetric arrangement (smaller blocks)")


def _blocks(em: Emitters, environment, use_symmetry: bool):
    H = coupling_matrix(em, environment)
    group = (find_symmetry(em, tuple(getattr(environment, "symmetry_operations", ())))
             if use_symmetry else None)
    if group is None:
        return H, None, [(None, "no symmetry used")]
    return H, group, [(sec, group.labels(sec.parities)) for sec in group.sectors()]


def largest_block(em: Emitters, environment) -> int:
    """Size of the largest symmetry block of the coupling matrix (N without symmetry)."""
    group = find_symmetry(em, tuple(getattr(environment, "symmetry_operations", ())))
    return em.n if group is None else max(len(sec.reps) for sec in group.sectors())


def spectrum(em: Emitters, environment: Environment, *, use_symmetry: bool = True,
             progress: Callable[[float], None] | None = None
             ) -> tuple[np.ndarray, np.ndarray, tuple[str, ...]]:
    """All eigenvalues ω − iΓ/2 [Γ0], without eigenvectors, by ascending decay rate.

    Symmetry blocks run on parallel threads (see :func:`physics.modes.map_blocks`);
    ``progress(fraction_of_blocks)`` is called as each block finishes (its
    share, 1/number of blocks, each time).

    Returns (eigenvalues, sector index of each, sector names).
    """
    H, group, secs = _blocks(em, environment, use_symmetry)
    _check_memory(em.n, max(em.n if s is None else len(s.reps) for s, _ in secs))
    blocks = [H if sec is None else group.block(H, sec) for sec, _ in secs]
    del H  # only the blocks are needed now

    def eigvals(block):
        out = np.linalg.eigvals(block)  # releases the GIL: blocks run in parallel
        if progress is not None:
            progress(1.0 / len(blocks))
        return out

    ws = map_blocks(eigvals, blocks)
    w = np.concatenate(ws)
    lab = np.concatenate([np.full(v.size, k) for k, v in enumerate(ws)])
    order = np.lexsort((w.real, -w.imag))
    return w[order], lab[order], tuple(name for _, name in secs)


@dataclass(frozen=True)
class ChosenModes:
    """k chosen modes: eigenvalues [Γ0], right eigenvectors (unit norm, columns), sectors."""

    eigenvalues: np.ndarray
    vectors: np.ndarray
    sector: np.ndarray
    sector_names: tuple[str, ...]
    residual: np.ndarray  # ‖H c − λ c‖ per mode [Γ0]
    method: str

    @property
    def decay_rates(self) -> np.ndarray:
        return -2.0 * self.eigenvalues.imag

    @property
    def shifts(self) -> np.ndarray:
        return self.eigenvalues.real

    @property
    def participation_ratio(self) -> np.ndarray:
        """(Σ|c|²)²/Σ|c|⁴ per mode (unit-norm vectors), as :attr:`physics.modes.Modes.participation_ratio`."""
        p = np.abs(self.vectors) ** 2
        return p.sum(axis=0) ** 2 / np.sum(p * p, axis=0)


def _score(w: np.ndarray, which: str, target: complex | None) -> np.ndarray:
    """Smaller is chosen first."""
    if which == "subradiant":
        return -w.imag * 2.0
    if which == "radiant":
        return w.imag * 2.0
    return np.abs(w - target)


def _inverse_iteration(block: np.ndarray, lam: np.ndarray, rng) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal vectors spanning the eigenvectors of ``block`` for the cluster ``lam``."""
    n, m = block.shape[0], len(lam)
    shift = lam.mean() + 1e-10 * max(1.0, abs(lam.mean()))
    lu = scipy.linalg.lu_factor(block - shift * np.eye(n), check_finite=False)
    x = rng.standard_normal((n, m)) + 1j * rng.standard_normal((n, m))
    for _ in range(3):
        x = scipy.linalg.lu_solve(lu, x, check_finite=False)
        x, _ = np.linalg.qr(x)
    small = x.conj().T @ block @ x          # Rayleigh–Ritz inside the cluster's space
    mu, y = np.linalg.eig(small)
    v = x @ y
    return mu, v / np.linalg.norm(v, axis=0)


@dataclass(frozen=True)
class OneMode:
    """One mode of H found from its eigenvalue: right and left vectors and their figures."""

    eigenvalue: complex        # ω − iΓ/2 [Γ0], refined (Rayleigh quotient)
    vector: np.ndarray         # (N,) right eigenvector, c†c = 1
    left: np.ndarray           # (N,) left eigenvector, l†c = 1
    residual: float            # ‖H c − λ c‖ [Γ0]

    @property
    def participation_ratio(self) -> float:
        """(Σ|c|²)²/Σ|c|⁴ (see :attr:`physics.modes.Modes.participation_ratio`)."""
        p = np.abs(self.vector) ** 2
        return float(p.sum() ** 2 / np.sum(p * p))

    @property
    def petermann(self) -> float:
        """(l†l)(c†c)/|l†c|² with l†c = 1 (see :attr:`physics.modes.Modes.petermann`)."""
        return float(np.vdot(self.left, self.left).real * np.vdot(self.vector, self.vector).real)


def one_mode(H: np.ndarray, eigenvalue: complex, *, seed: int = 7) -> OneMode:
    """The right and left eigenvectors of H for one known eigenvalue, by inverse iteration.

    One LU factorisation of H − λ'I (λ' the eigenvalue nudged by 1e-10 relative,
    so the factorisation exists) serves both: three solves with it give the
    right vector, three with its conjugate transpose the left one.  Cost
    O(N³/3) instead of the O(10 N³) of a full eigen-decomposition.  Inside a
    degenerate eigenspace the vector is one member of it (any basis of the
    space is as valid).

    References
    ----------
    G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed. (2013), §7.6.1.
    """
    H = np.asarray(H, dtype=complex)
    n = H.shape[0]
    lam = complex(eigenvalue)
    shift = lam + 1e-10 * max(1.0, abs(lam))
    lu = scipy.linalg.lu_factor(H - shift * np.eye(n), check_finite=False)
    rng = np.random.default_rng(seed)
    c = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    left = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    for _ in range(3):
        c = scipy.linalg.lu_solve(lu, c, check_finite=False)
        c /= np.linalg.norm(c)
        left = scipy.linalg.lu_solve(lu, left, trans=2, check_finite=False)  # (H − λ')† l
        left /= np.linalg.norm(left)
    mu = complex(np.vdot(c, H @ c))  # Rayleigh quotient (c†c = 1)
    left = left / np.conj(np.vdot(left, c))  # l†c = 1
    return OneMode(mu, c, left, float(np.linalg.norm(H @ c - mu * c)))


def chosen_modes(em: Emitters, environment: Environment, k: int = 20, which: str = "subradiant",
                 target: complex | None = None, *, use_symmetry: bool = True,
                 progress: Callable[[float, str], None] | None = None) -> ChosenModes:
    """The k most subradiant (smallest Γ) or most radiant modes, or the k nearest ``target``.

    Parameters
    ----------
    k : int
        Number of modes (1 … N).
    which : "subradiant", "radiant" or "near"
    target : complex
        For "near": ω − iΓ/2 [Γ0] to search around (a real number means Γ = 0).
    progress : callable(fraction, text), optional

    Raises
    ------
    ValueError
        For k or which out of range (naming the field).
    MemoryRequestError
        When H and one block would not fit in the free memory.
    """
    if which not in ("subradiant", "radiant", "near"):
        raise ValueError(f"which: {which!r} is not allowed; allowed: subradiant, radiant, near")
    if not 1 <= int(k) <= em.n:
        raise ValueError(f"modes: {k} is out of range; allowed 1 to {em.n} (the array's size)")
    if which == "near" and (target is None or not np.isfinite(complex(target))):
        raise ValueError("target: 'near' needs a finite complex frequency ω − iΓ/2 [Γ0]")
    target = None if target is None else complex(target)
    H, group, secs = _blocks(em, environment, use_symmetry)
    largest = max(em.n if s is None else len(s.reps) for s, _ in secs)
    _check_memory(em.n, largest)
    say = progress or (lambda f, t: None)
    rng = np.random.default_rng(12345)  # start vectors only; results do not depend on it
    cand_w, cand_sec = [], []
    method = ("dense blocks" if largest <= DENSE_BLOCK_LIMIT
              else "shift-invert Arnoldi" if which == "near" else "Arnoldi")
    blocks = [H if sec is None else group.block(H, sec) for sec, _ in secs]
    small = [b.shape[0] <= DENSE_BLOCK_LIMIT for b in blocks]
    dense = iter(map_blocks(np.linalg.eigvals, [b for b, ok in zip(blocks, small) if ok]))
    say(0.5 * sum(small) / len(secs), "eigenvalues of the symmetry blocks")
    for s, (sec, name) in enumerate(secs):
        block = blocks[s]
        nb = block.shape[0]
        if small[s]:
            w = next(dense)
        else:
            m = min(nb - 2, max(2 * int(k), 20))
            if which == "near":  # shift-invert: one LU of (block − σ), then Arnoldi
                w = scipy.sparse.linalg.eigs(block, k=m, sigma=target, return_eigenvectors=False)
            else:  # largest / smallest imaginary part = smallest / largest decay rate
                w = scipy.sparse.linalg.eigs(block, k=m, which="LI" if which == "subradiant"
                                             else "SI", return_eigenvectors=False)
        best = np.argsort(_score(w, which, target), kind="stable")[: int(k)]
        cand_w.append(w[best])
        cand_sec.append(np.full(len(best), s))
        say(0.7 * (s + 1) / len(secs), f"eigenvalues of block {s + 1} of {len(secs)}")
    w, sec_of = np.concatenate(cand_w), np.concatenate(cand_sec)
    pick = np.argsort(_score(w, which, target), kind="stable")[: int(k)]
    w, sec_of = w[pick], sec_of[pick]
    vals, vecs, secs_out = [], [], []
    for s in np.unique(sec_of):
        lam = w[sec_of == s]
        block = blocks[s]
        tol = 1e-8 * max(1.0, float(np.max(np.abs(lam))))
        order = np.argsort(lam.real)
        lam = lam[order]
        groups = np.split(lam, np.flatnonzero(np.abs(np.diff(lam)) > tol) + 1)
        for g in groups:
            mu, v = _inverse_iteration(block, g, rng)
            sec = secs[s][0]
            vecs.append(v if sec is None else group.lift(v, sec))
            vals.append(mu)
            secs_out.append(np.full(len(mu), s))
        say(0.7 + 0.3 * (s + 1) / len(secs), "eigenvectors")
    w, V, sector = np.concatenate(vals), np.concatenate(vecs, axis=1), np.concatenate(secs_out)
    order = np.argsort(_score(w, which, target), kind="stable")
    w, V, sector = w[order], V[:, order], sector[order]
    residual = np.linalg.norm(H @ V - V * w, axis=0)
    say(1.0, "done")
    return ChosenModes(w, V, sector, tuple(name for _, name in secs), residual, method)

