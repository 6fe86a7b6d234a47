"""Tests for physics/lattices.py: the ordered-array generators."""
from __future__ import annotations

from typing import Callable

import numpy as np
import pytest
from scipy.spatial import cKDTree
from scipy.spatial.distance import pdist

from physics import Emitters, lattices

# Positions are sums of a few multiples of the spacing: distances and the
# centroid are exact to round-off, a few ulp of the array size
# (common practice, no source).
REL_TOL = 1e-12

Builder = Callable[[], Emitters]

# (builder, expected emitter count, nearest-neighbour distance [λ0])
CASES = [
    pytest.param(lambda: lattices.chain(7, 0.3), 7, 0.3, id="chain"),
    pytest.param(lambda: lattices.chain(5, 0.4, axis="z"), 5, 0.4, id="chain-z"),
    pytest.param(lambda: lattices.square(4, 5, 0.25), 20, 0.25, id="square"),
    pytest.param(lambda: lattices.rectangular(3, 4, 0.5, 0.3), 12, 0.3, id="rectangular"),
    pytest.param(lambda: lattices.triangular(4, 5, 0.35), 20, 0.35, id="triangular"),
    # honeycomb: two sites per cell, kagome: three (docstrings of the generators)
    pytest.param(lambda: lattices.honeycomb(3, 4, 0.2), 2 * 3 * 4, 0.2, id="honeycomb"),
    pytest.param(lambda: lattices.kagome(3, 4, 0.2), 3 * 3 * 4, 0.2, id="kagome"),
    pytest.param(lambda: lattices.ring(9, 0.3), 9, 0.3, id="ring"),
    pytest.param(lambda: lattices.cubic(2, 3, 4, 0.4), 24, 0.4, id="cubic"),
]


@pytest.mark.parametrize(("build", "count", "spacing"), CASES)
def test_count_and_nearest_neighbour_distance(build: Builder, count: int, spacing: float) -> None:
    em = build()
    assert em.n == count
    assert np.min(pdist(em.positions)) == pytest.approx(spacing, rel=REL_TOL)


@pytest.mark.parametrize(("build", "count", "spacing"), CASES)
def test_centroid_at_origin(build: Builder, count: int, spacing: float) -> None:
    em = build()
    size = np.max(np.abs(em.positions))
    np.testing.assert_allclose(em.positions.mean(axis=0), 0.0, rtol=0, atol=REL_TOL * size)


@pytest.mark.parametrize(
    ("build", "coordination"),
    [
        # bulk coordination numbers of the named lattices (common practice, no source)
        pytest.param(lambda: lattices.square(7, 7, 0.3), 4, id="square"),
        pytest.param(lambda: lattices.triangular(7, 7, 0.3), 6, id="triangular"),
        pytest.param(lambda: lattices.honeycomb(6, 6, 0.3), 3, id="honeycomb"),
        pytest.param(lambda: lattices.kagome(6, 6, 0.3), 4, id="kagome"),
        pytest.param(lambda: lattices.cubic(5, 5, 5, 0.3), 6, id="cubic"),
    ],
)
def test_bulk_coordination_number(build: Builder, coordination: int) -> None:
    em = build()
    tree = cKDTree(em.positions)
    centre = int(np.argmin(np.linalg.norm(em.positions, axis=1)))
    # neighbours at the spacing (0.3), none between it and the next shell (≥ √2·0.3)
    near = tree.query_ball_point(em.positions[centre], 0.3 * (1 + 1e-9))
    shell = tree.query_ball_point(em.positions[centre], 0.3 * 1.2)
    assert len(near) - 1 == coordination
    assert len(shell) == len(near)


@pytest.mark.parametrize(
    "build",
    [
        pytest.param(lambda: lattices.square(3, 4, 0.3), id="square"),
        pytest.param(lambda: lattices.triangular(3, 4, 0.3), id="triangular"),
        pytest.param(lambda: lattices.honeycomb(3, 4, 0.3), id="honeycomb"),
        pytest.param(lambda: lattices.kagome(3, 4, 0.3), id="kagome"),
        pytest.param(lambda: lattices.ring(6, 0.3), id="ring"),
        pytest.param(lambda: lattices.disk(1.0, 0.3), id="disk"),
    ],
)
def test_planar_arrays_lie_in_z0(build: Builder) -> None:
    np.testing.assert_allclose(build().positions[:, 2], 0.0, rtol=0, atol=1e-15)


@pytest.mark.parametrize("axis", [pytest.param(a, id=a) for a in "xyz"])
def test_chain_runs_along_its_axis(axis: str) -> None:
    em = lattices.chain(6, 0.3, axis=axis)
    k = "xyz".index(axis)
    others = [c for c in range(3) if c != k]
    np.testing.assert_allclose(em.positions[:, others], 0.0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(np.diff(em.positions[:, k]), 0.3, rtol=REL_TOL)


@pytest.mark.parametrize("n", [pytest.param(n, id=f"n{n}") for n in (2, 3, 7, 40)])
def test_ring_radius(n: int) -> None:
    em = lattices.ring(n, 0.25)
    # chord between neighbours on a circle of radius R: 2R sin(π/n) (elementary geometry)
    radius = 0.25 / (2.0 * np.sin(np.pi / n))
    np.testing.assert_allclose(np.linalg.norm(em.positions, axis=1), radius, rtol=REL_TOL)
    neighbours = np.linalg.norm(em.positions - np.roll(em.positions, 1, axis=0), axis=1)
    np.testing.assert_allclose(neighbours, 0.25, rtol=REL_TOL)


def test_ring_radial_and_tangential_dipoles() -> None:
    radial = lattices.ring(8, 0.3, "radial")
    tangential = lattices.ring(8, 0.3, "tangential")
    rhat = radial.positions / np.linalg.norm(radial.positions, axis=1, keepdims=True)
    np.testing.assert_allclose(radial.dipoles, rhat, rtol=0, atol=1e-14)
    np.testing.assert_allclose(np.sum(tangential.dipoles * rhat, axis=1), 0.0, rtol=0, atol=1e-14)
    np.testing.assert_allclose(tangential.dipoles[:, 2], 0.0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(np.linalg.norm(tangential.dipoles, axis=1), 1.0, rtol=1e-14)


def _disk_count(radius: float, a: float, lattice: str) -> int:
    """Lattice sites within ``radius`` of a site, by enumeration over a generous index range."""
    m = int(3 * radius / a) + 5
    i, j = np.meshgrid(np.arange(-m, m + 1), np.arange(-m, m + 1), indexing="ij")
    if lattice == "square":
        x, y = a * i, a * j
    else:
        x, y = a * (i + 0.5 * j), a * np.sqrt(3.0) / 2.0 * j
    return int(np.count_nonzero(np.hypot(x, y) <= radius * (1 + 1e-12)))


@pytest.mark.parametrize(
    ("radius", "spacing", "lattice"),
    [
        pytest.param(1.0, 0.3, "square", id="square-small"),
        pytest.param(1.0, 0.3, "triangular", id="triangular-small"),
        pytest.param(6.0, 0.3, "square", id="square-R20a"),
        # R/a = 20 and 30: rows beyond index R/a are needed for a triangular cut
        pytest.param(6.0, 0.3, "triangular", id="triangular-R20a"),
        pytest.param(9.0, 0.3, "triangular", id="triangular-R30a"),
    ],
)
def test_disk_cut(radius: float, spacing: float, lattice: str) -> None:
    em = lattices.disk(radius, spacing, lattice=lattice)
    r = np.linalg.norm(em.positions, axis=1)
    assert np.all(r <= radius * (1 + 1e-12))
    assert em.n == _disk_count(radius, spacing, lattice)
    assert np.min(r) < 1e-15  # a site at the centre of the cut
    assert np.min(pdist(em.positions)) == pytest.approx(spacing, rel=REL_TOL)
    np.testing.assert_allclose(em.positions.mean(axis=0), 0.0, rtol=0, atol=REL_TOL * radius)


def test_explicit_keeps_positions() -> None:
    pos = np.array([[1.0, 2.0, 3.0], [1.5, 2.0, 3.0]])
    em = lattices.explicit(pos, "z")
    np.testing.assert_allclose(em.positions, pos, rtol=0, atol=1e-15)
    np.testing.assert_allclose(em.dipoles, np.tile([0, 0, 1], (2, 1)), rtol=0, atol=1e-15)


def test_vector_dipole_is_normalised() -> None:
    em = lattices.square(2, 2, 0.3, dipole=(1, 1j, 0))
    np.testing.assert_allclose(em.dipoles, np.tile([1, 1j, 0], (4, 1)) / np.sqrt(2), rtol=1e-15)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        pytest.param(lambda: lattices.chain(0, 0.3), r"n: 0 is out of range", id="n-zero"),
        pytest.param(lambda: lattices.chain(2.5, 0.3), r"n: must be an integer", id="n-float"),
        pytest.param(lambda: lattices.chain(True, 0.3), r"n: must be an integer", id="n-bool"),
        pytest.param(lambda: lattices.chain(20_000, 0.3), r"out of range", id="n-too-many"),
        pytest.param(lambda: lattices.ring(1, 0.3), r"n: 1 is out of range", id="ring-one"),
        pytest.param(lambda: lattices.chain(3, 0.0), r"spacing: 0.0 λ0 is out of range",
                     id="spacing-0"),
        pytest.param(lambda: lattices.chain(3, np.nan), r"spacing", id="spacing-nan"),
        pytest.param(lambda: lattices.chain(3, 0.3, axis="w"), r"axis: 'w'", id="axis"),
        pytest.param(lambda: lattices.disk(1.0, 0.3, lattice="hex"), r"lattice: 'hex'",
                     id="lattice"),
        pytest.param(lambda: lattices.square(200, 200, 0.3), r"limit is 10000", id="too-many"),
        pytest.param(lambda: lattices.chain(3, 0.3, dipole="q"), r"unknown preset", id="dipole"),
    ],
)
def test_bad_arguments_are_refused(call: Callable[[], Emitters], message: str) -> None:
    with pytest.raises(ValueError, match=message):
        call()


def test_generator_table_names_the_generators() -> None:
    assert lattices.GENERATORS["square"] is lattices.square
    assert set(lattices.GENERATORS) == {"chain", "square", "rectangular", "triangular",
                                        "honeycomb", "kagome", "ring", "disk", "cubic"}
