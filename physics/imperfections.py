"""Imperfect arrays: random vacancies and Gaussian position jitter, reproducibly.

A realisation is fixed by (seed, index): its random numbers come from
``numpy.random.default_rng([seed, index])``.  Every realisation draws the
same streams in the same order — one uniform number per site for the
vacancy test, then three standard normals per site for the jitter — whatever
the filling and jitter are.  So the same (seed, index) gives the same noise
scaled differently when a sweep changes the jitter or the filling ("common
random numbers"): curves across a sweep are smooth rather than re-drawn at
every point.

Zero jitter and full filling return the clean array itself.

References
----------
P. L'Ecuyer, "Variance reduction's greatest hits", Proc. Winter Simulation
Conference (2007) — common random numbers across compared configurations;
NumPy documentation, "Parallel random number generation" (SeedSequence) —
independent streams from a list of integers.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .geometry import MIN_DISTANCE, Emitters

__all__ = ["Imperfections", "realise", "MAX_JITTER", "MAX_REDRAWS"]

#: Largest jitter standard deviation per axis [λ0].
MAX_JITTER = 1.0
#: Draws tried when jitter puts two emitters closer than MIN_DISTANCE.
MAX_REDRAWS = 20


@dataclass(frozen=True)
class Imperfections:
    """Random imperfections of an array.

    Parameters
    ----------
    jitter : (3,) float
        Standard deviation of each emitter's position along x, y, z [λ0].
    filling : float
        Probability that a site holds an emitter, in (0, 1].
    seed : int
        Seed of the random streams (0 … 2³²−1).
    """

    jitter: tuple[float, float, float] = (0.0, 0.0, 0.0)
    filling: float = 1.0
    seed: int = 0

    def __post_init__(self) -> None:
        j = tuple(float(v) for v in self.jitter)
        if len(j) != 3 or not all(np.isfinite(v) and 0.0 <= v <= MAX_JITTER for v in j):
            raise ValueError(f"jitter: {self.jitter!r} is out of range; allowed three values "
                             f"from 0 to {MAX_JITTER:g} λ0 (x, y, z)")
        object.__setattr__(self, "jitter", j)
        if not (np.isfinite(self.filling) and 0.0 < self.filling <= 1.0):
            raise ValueError(f"filling: {self.filling!r} is out of range; allowed (0, 1]")
        if isinstance(self.seed, bool) or not 0 <= int(self.seed) <= 2 ** 32 - 1 \
                or int(self.seed) != self.seed:
            raise ValueError(f"seed: {self.seed!r} is out of range; allowed whole numbers "
                             f"0 to 4294967295")

    @property
    def perfect(self) -> bool:
        return self.filling == 1.0 and not any(self.jitter)


def _too_close(pos: np.ndarray) -> bool:
    if len(pos) < 2:
        return False
    from scipy.spatial import cKDTree

    return bool(cKDTree(pos).query_pairs(MIN_DISTANCE))


def realise(em: Emitters, imp: Imperfections, index: int = 0) -> Emitters:
    """Realisation ``index`` of the imperfect array built on the clean array ``em``.

    Vacancies remove sites (their dipoles go with them); jitter moves the
    remaining emitters.  Raises ValueError (naming ``imperfections.filling``
    or ``imperfections.jitter``) when no emitter is left or when even
    MAX_REDRAWS draws put two emitters within MIN_DISTANCE of each other.
    """
    if imp.perfect:
        return em
    if isinstance(index, bool) or int(index) != index or not 0 <= index <= 2 ** 32 - 1:
        raise ValueError(f"realisation: {index!r} is out of range; allowed 0 to 4294967295")
    rng = np.random.default_rng([int(imp.seed), int(index)])
    n = em.n
    sigma = np.asarray(imp.jitter)
    for _ in range(MAX_REDRAWS):
        keep = rng.random(n) < imp.filling
        shift = rng.standard_normal((n, 3)) * sigma
        if not keep.any():
            raise ValueError(f"imperfections.filling: realisation {index} of seed {imp.seed} "
                             f"left no emitter at filling {imp.filling:g}; raise the filling")
        pos = em.positions[keep] + shift[keep]
        if not _too_close(pos):
            return Emitters(pos, em.dipoles[keep])
    raise ValueError(f"imperfections.jitter: {MAX_REDRAWS} draws each put two emitters closer "
                     f"than {MIN_DISTANCE:g} λ0; the jitter {imp.jitter} is too large for "
                     f"this spacing")
