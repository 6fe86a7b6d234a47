"""Point symmetries of an arrangement and the block structure they give H.

If a reflection or two-fold rotation R (a diagonal sign matrix about the
centroid) maps every emitter onto an emitter, r_P(i) = R r_i, and every dipole
onto its image's dipole up to one common phase, R d_i = e^{iα} d_P(i), then the
permutation P commutes with H (the free-space Green's function is covariant,
G(Rr) = R G(r) Rᵀ, and the phase cancels between conj(d_i) and d_j).  The
commuting involutions form an abelian group; its characters χ label symmetry
sectors, and H is block diagonal in the basis

    v_a^χ = Σ_g χ(g) e_{g(a)} / ‖…‖,   a an orbit representative,

with blocks H^χ_ab = Σ_k χ(k) H[a, k(b)] / √(|Stab a| |Stab b|).  Diagonalising
the blocks instead of H cuts the cost by about |G|² and labels every mode by
its parity under each symmetry.

References
----------
M. Tinkham, *Group Theory and Quantum Mechanics* (McGraw-Hill, 1964), ch. 3
(projection operators of abelian groups); common practice in lattice
calculations.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from .geometry import Emitters

__all__ = ["SymmetryGroup", "OPERATIONS", "find_symmetry", "Sector"]

#: Candidate operations: name → diagonal of the sign matrix R.
OPERATIONS: dict[str, tuple[int, int, int]] = {
    "mirror x": (-1, 1, 1),
    "mirror y": (1, -1, 1),
    "mirror z": (1, 1, -1),
    "C2 z": (-1, -1, 1),
    "C2 x": (1, -1, -1),
    "C2 y": (-1, 1, -1),
    "inversion": (-1, -1, -1),
}

_TOL = 1e-9


@dataclass(frozen=True)
class Sector:
    """One symmetry sector: its parities, orbit representatives and normalisation."""

    parities: tuple[int, ...]  # χ of each generator, ±1
    reps: np.ndarray  # (n_s,) emitter index of each orbit representative
    stab: np.ndarray  # (n_s,) stabiliser size of each representative


@dataclass(frozen=True, eq=False)
class SymmetryGroup:
    """An abelian group of commuting involutive emitter permutations that commute with H.

    Attributes
    ----------
    generators : tuple of str
        Names of the independent generating operations (keys of OPERATIONS).
    perms : (|G|, N) int ndarray
        Every group element as a permutation; row 0 is the identity.
    words : (|G|, k) int ndarray
        Exponents (0/1) of the generators composing each element.
    """

    generators: tuple[str, ...]
    perms: np.ndarray
    words: np.ndarray

    @property
    def order(self) -> int:
        return self.perms.shape[0]

    def character(self, parities: tuple[int, ...]) -> np.ndarray:
        """χ(g) for every element g, from the parities of the generators."""
        p = np.asarray(parities)
        return np.prod(np.where(self.words == 1, p[None, :], 1), axis=1)

    def sectors(self) -> list[Sector]:
        """All non-empty sectors with their orbit representatives."""
        n = self.perms.shape[1]
        orbit_min = self.perms.min(axis=0)  # smallest index in each emitter's orbit
        reps = np.flatnonzero(orbit_min == np.arange(n))
        out = []
        for parities in itertools.product((1, -1), repeat=len(self.generators)):
            chi = self.character(parities)
            fixes = self.perms[:, reps] == reps[None, :]  # (|G|, n_reps): g stabilises rep
            stab = fixes.sum(axis=0)
            # the sector contains rep a iff χ is trivial on a's stabiliser
            keep = np.all(np.where(fixes, chi[:, None], 1) == 1, axis=0)
            if np.any(keep):
                out.append(Sector(parities, reps[keep], stab[keep]))
        return out

    def block(self, H: np.ndarray, sector: Sector) -> np.ndarray:
        """H restricted to a sector, (n_s, n_s) complex."""
        chi = self.character(sector.parities)
        r = sector.reps
        blk = np.zeros((r.size, r.size), dtype=complex)
        for k in range(self.order):
            blk += chi[k] * H[np.ix_(r, self.perms[k, r])]
        norm = np.sqrt(sector.stab.astype(float))
        return blk / np.outer(norm, norm)

    def lift(self, vectors: np.ndarray, sector: Sector) -> np.ndarray:
        """Sector coordinates (n_s, m) → full amplitude vectors (N, m), norms preserved."""
        chi = self.character(sector.parities)
        n = self.perms.shape[1]
        out = np.zeros((n, vectors.shape[1]), dtype=complex)
        # v_a = Σ_g χ(g) e_{g(a)} has norm √(|G| |Stab a|); each orbit point is hit |Stab a| times
        scale = 1.0 / np.sqrt(self.order * sector.stab.astype(float))
        for k in range(self.order):
            # for one element g the images g(a) of distinct orbits are distinct: plain += is safe
            out[self.perms[k, sector.reps]] += chi[k] * scale[:, None] * vectors
        return out

    def labels(self, parities: tuple[int, ...]) -> str:
        """Readable label such as 'mirror x: even, mirror y: odd'."""
        return ", ".join(f"{g}: {'even' if p > 0 else 'odd'}"
                         for g, p in zip(self.generators, parities))


def _permutation(pos: np.ndarray, tree: cKDTree, signs: np.ndarray, scale: float):
    dist, idx = tree.query(pos * signs)
    if np.max(dist) > _TOL * scale:
        return None
    return idx


def _common_phase(dip: np.ndarray, perm: np.ndarray, signs: np.ndarray) -> bool:
    image = dip * signs  # R d_i
    target = dip[perm]  # d_P(i)
    overlap = np.sum(np.conj(target) * image, axis=1)
    if np.max(np.abs(np.abs(overlap) - 1.0)) > 1e-9:
        return False
    return bool(np.max(np.abs(overlap - overlap[0])) <= 1e-9)


def find_symmetry(em: Emitters, allowed: tuple[str, ...] = tuple(OPERATIONS)) -> SymmetryGroup | None:
    """The group of ``allowed`` operations (about the centroid) that H commutes with.

    Returns None when no operation maps the arrangement and its dipoles onto
    itself with a non-trivial permutation (drawn geometries, jitter, …).
    """
    if em.n < 4:
        return None
    pos = em.positions - em.positions.mean(axis=0)
    scale = max(1.0, float(np.max(np.abs(pos))))
    tree = cKDTree(pos)
    found: dict[str, np.ndarray] = {}
    for name in allowed:
        signs = np.array(OPERATIONS[name], dtype=float)
        perm = _permutation(pos, tree, signs, scale)
        if perm is None or np.all(perm == np.arange(em.n)):
            continue
        if _common_phase(em.dipoles, perm, signs):
            found[name] = perm
    if not found:
        return None
    # independent generators: keep an operation only if it is new to the group so far
    gens: list[str] = []
    elements = [np.arange(em.n)]
    for name, perm in found.items():
        if any(np.array_equal(perm, e) for e in elements):
            continue
        gens.append(name)
        elements = elements + [perm[e] for e in elements]
    words = np.array(list(itertools.product((0, 1), repeat=len(gens)))[::1])
    perms = []
    for w in words:
        p = np.arange(em.n)
        for bit, name in zip(w, gens):
            if bit:
                p = found[name][p]
        perms.append(p)
    return SymmetryGroup(tuple(gens), np.array(perms), words)
