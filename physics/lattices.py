"""Generators of ordered emitter arrays.

Every generator returns an :class:`~physics.geometry.Emitters` whose centroid
is at the origin.  Planar arrays lie in the z = 0 plane; chains run along x
unless told otherwise.  ``spacing`` is always the nearest-neighbour distance
in units of λ0.
"""
from __future__ import annotations

import numpy as np

from .geometry import DipoleLike, Emitters

__all__ = [
    "GENERATORS",
    "chain",
    "square",
    "rectangular",
    "triangular",
    "honeycomb",
    "kagome",
    "ring",
    "ring_radius",
    "disk",
    "cubic",
    "explicit",
]

#: Largest emitter count a generator will build (the dense path stores an
#: N×N complex matrix: 16·N² bytes, 1.6 GB at this cap).
MAX_EMITTERS = 10_000


def _count(name: str, value: int, low: int = 1) -> int:
    if isinstance(value, bool) or int(value) != value:
        raise ValueError(f"{name}: must be an integer, got {value!r}")
    value = int(value)
    if not low <= value <= MAX_EMITTERS:
        raise ValueError(f"{name}: {value} is out of range; allowed {low} to {MAX_EMITTERS}")
    return value


def _length(name: str, value: float) -> float:
    value = float(value)
    if not (np.isfinite(value) and 1e-3 <= value <= 1e3):
        raise ValueError(f"{name}: {value!r} λ0 is out of range; allowed 0.001 to 1000 λ0")
    return value


def _finish(points: np.ndarray, dipole: DipoleLike, *, centre: bool = True) -> Emitters:
    points = np.asarray(points, dtype=float)
    if points.shape[0] > MAX_EMITTERS:
        raise ValueError(
            f"geometry: {points.shape[0]} emitters requested; the limit is {MAX_EMITTERS}"
        )
    if centre:
        points = points - points.mean(axis=0)
        points[np.abs(points) < 1e-13] = 0.0  # clean round-off at the centre
    if isinstance(dipole, str) and dipole in ("radial", "tangential"):
        return Emitters(points, _in_plane_dipoles(points, dipole))
    return Emitters(points, dipole)


def _in_plane_dipoles(points: np.ndarray, kind: str) -> np.ndarray:
    phi = np.arctan2(points[:, 1], points[:, 0])
    radial = np.stack([np.cos(phi), np.sin(phi), np.zeros_like(phi)], axis=1)
    if kind == "radial":
        return radial
    return np.stack([-radial[:, 1], radial[:, 0], radial[:, 2]], axis=1)


def _grid2d(nx: int, ny: int, a1, a2, basis) -> np.ndarray:
    i, j = np.meshgrid(np.arange(nx), np.arange(ny), indexing="ij")
    cells = i.reshape(-1, 1) * np.asarray(a1) + j.reshape(-1, 1) * np.asarray(a2)
    pts = (cells[:, None, :] + np.asarray(basis)[None, :, :]).reshape(-1, 2)
    return np.column_stack([pts, np.zeros(len(pts))])


def chain(n: int, spacing: float, dipole: DipoleLike = "x", *, axis: str = "x") -> Emitters:
    """Linear chain of ``n`` emitters along ``axis`` ("x", "y" or "z")."""
    n = _count("n", n)
    spacing = _length("spacing", spacing)
    if axis not in ("x", "y", "z"):
        raise ValueError(f"axis: {axis!r} is not allowed; allowed: x, y, z")
    pts = np.zeros((n, 3))
    pts[:, "xyz".index(axis)] = spacing * np.arange(n)
    return _finish(pts, dipole)


def rectangular(nx: int, ny: int, spacing_x: float, spacing_y: float,
                dipole: DipoleLike = "x") -> Emitters:
    """Rectangular array of ``nx`` × ``ny`` emitters in the xy-plane."""
    nx, ny = _count("nx", nx), _count("ny", ny)
    ax, ay = _length("spacing_x", spacing_x), _length("spacing_y", spacing_y)
    return _finish(_grid2d(nx, ny, (ax, 0.0), (0.0, ay), [(0.0, 0.0)]), dipole)


def square(nx: int, ny: int, spacing: float, dipole: DipoleLike = "x") -> Emitters:
    """Square array of ``nx`` × ``ny`` emitters in the xy-plane."""
    return rectangular(nx, ny, spacing, spacing, dipole)


def triangular(nx: int, ny: int, spacing: float, dipole: DipoleLike = "x") -> Emitters:
    """Triangular (hexagonal Bravais) array, ``ny`` rows of ``nx``, rows offset by half a spacing.

    The array is a rectangle-like patch: odd rows are shifted by spacing/2
    so that the outline stays compact rather than a rhombus.
    """
    nx, ny = _count("nx", nx), _count("ny", ny)
    a = _length("spacing", spacing)
    i, j = np.meshgrid(np.arange(nx), np.arange(ny), indexing="ij")
    x = a * (i + 0.5 * (j % 2))
    y = a * np.sqrt(3.0) / 2.0 * j
    pts = np.column_stack([x.ravel(), y.ravel(), np.zeros(x.size)])
    return _finish(pts, dipole)


def honeycomb(nx: int, ny: int, spacing: float, dipole: DipoleLike = "x") -> Emitters:
    """Honeycomb array of ``nx`` × ``ny`` two-site cells (2·nx·ny emitters).

    ``spacing`` is the nearest-neighbour distance d; the Bravais lattice
    constant is √3·d, with primitive vectors √3·d (1, 0) and √3·d (1/2, √3/2).
    """
    nx, ny = _count("nx", nx), _count("ny", ny)
    d = _length("spacing", spacing)
    a = np.sqrt(3.0) * d
    a1, a2 = (a, 0.0), (a / 2.0, a * np.sqrt(3.0) / 2.0)
    return _finish(_grid2d(nx, ny, a1, a2, [(0.0, 0.0), (0.0, d)]), dipole)


def kagome(nx: int, ny: int, spacing: float, dipole: DipoleLike = "x") -> Emitters:
    """Kagome array of ``nx`` × ``ny`` three-site cells (3·nx·ny emitters).

    ``spacing`` is the nearest-neighbour distance d; the Bravais lattice
    constant is 2d, with primitive vectors 2d (1, 0) and 2d (1/2, √3/2).
    """
    nx, ny = _count("nx", nx), _count("ny", ny)
    d = _length("spacing", spacing)
    a1, a2 = (2 * d, 0.0), (d, d * np.sqrt(3.0))
    basis = [(0.0, 0.0), (d, 0.0), (d / 2.0, d * np.sqrt(3.0) / 2.0)]
    return _finish(_grid2d(nx, ny, a1, a2, basis), dipole)


def ring(n: int, spacing: float, dipole: DipoleLike = "z") -> Emitters:
    """``n`` emitters evenly on a circle in the xy-plane, neighbours ``spacing`` apart.

    The radius is spacing / (2 sin(π/n)).  Besides the usual presets the dipole
    may be "radial" or "tangential" (in-plane, following the ring).
    """
    n = _count("n", n, low=2)
    spacing = _length("spacing", spacing)
    radius = ring_radius(n, spacing)
    phi = 2.0 * np.pi * np.arange(n) / n
    pts = np.column_stack([radius * np.cos(phi), radius * np.sin(phi), np.zeros(n)])
    return _finish(pts, dipole)


def ring_radius(n: int, spacing: float) -> float:
    """Radius [λ0] of a regular ring of ``n`` emitters with neighbours ``spacing`` [λ0] apart."""
    return spacing / (2.0 * np.sin(np.pi / n))


def disk(radius: float, spacing: float, dipole: DipoleLike = "x", *,
         lattice: str = "square") -> Emitters:
    """Square or triangular lattice cut to a disk of ``radius`` [λ0] about a lattice site."""
    radius = _length("radius", radius)
    a = _length("spacing", spacing)
    if lattice not in ("square", "triangular"):
        raise ValueError(f"lattice: {lattice!r} is not allowed; allowed: square, triangular")
    # index range: a triangular site at (a(i + j/2), a√3 j/2) inside the disk can
    # have |i| or |j| up to 2R/(√3 a), more than R/a
    m = int(np.ceil(2.0 * radius / (np.sqrt(3.0) * a))) + 2
    if (2 * m + 1) ** 2 > 16 * MAX_EMITTERS:
        raise ValueError(f"radius: {radius} λ0 with spacing {a} λ0 gives too many emitters; "
                         f"the limit is {MAX_EMITTERS}")
    i, j = np.meshgrid(np.arange(-m, m + 1), np.arange(-m, m + 1), indexing="ij")
    if lattice == "square":
        x, y = a * i, a * j
    else:
        x, y = a * (i + 0.5 * j), a * np.sqrt(3.0) / 2.0 * j
    keep = np.hypot(x, y) <= radius * (1 + 1e-12)
    pts = np.column_stack([x[keep], y[keep], np.zeros(keep.sum())])
    # a lattice site sits at the centre of the cut: keep it exactly there
    return _finish(pts, dipole, centre=False)


def cubic(nx: int, ny: int, nz: int, spacing: float, dipole: DipoleLike = "x") -> Emitters:
    """Simple cubic block of ``nx`` × ``ny`` × ``nz`` emitters."""
    nx, ny, nz = _count("nx", nx), _count("ny", ny), _count("nz", nz)
    a = _length("spacing", spacing)
    g = np.meshgrid(np.arange(nx), np.arange(ny), np.arange(nz), indexing="ij")
    pts = a * np.column_stack([c.ravel() for c in g]).astype(float)
    return _finish(pts, dipole)


def explicit(positions, dipole: DipoleLike = "x") -> Emitters:
    """Emitters at the given (N, 3) positions [λ0], kept where they are (not centred)."""
    return _finish(positions, dipole, centre=False)


#: Name → generator, for scenario files and the command line.
GENERATORS = {
    "chain": chain,
    "square": square,
    "rectangular": rectangular,
    "triangular": triangular,
    "honeycomb": honeycomb,
    "kagome": kagome,
    "ring": ring,
    "disk": disk,
    "cubic": cubic,
}
