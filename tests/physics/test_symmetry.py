"""Symmetry blocks: the same modes as the full matrix, found only where they hold.

Block diagonalisation by the characters of an abelian group is standard
(Tinkham, Group Theory and Quantum Mechanics, 1964, ch. 3); the checks below
compare with the full diagonalisation of the same matrix (exact algebra).
"""
from __future__ import annotations

import numpy as np
import pytest

from physics import Emitters, FreeSpace, coupling_matrix, lattices
from physics.modes import modes_from_matrix
from physics.symmetry import find_symmetry

ALL = FreeSpace.symmetry_operations
# eigenvalues of the blocks and of the full matrix agree to round-off of O(‖H‖ε·N)
EIG_TOL = 1e-11


@pytest.mark.parametrize("make, gens", [
    pytest.param(lambda: lattices.square(9, 8, 0.3, "x"), ("mirror x", "mirror y"), id="square-x"),
    pytest.param(lambda: lattices.square(6, 6, 0.3, "sigma+"), ("C2 z",), id="square-sigma"),
    pytest.param(lambda: lattices.chain(21, 0.3, "y"), ("mirror x",), id="chain"),
    pytest.param(lambda: lattices.cubic(4, 3, 3, 0.3, "z"), ("mirror x", "mirror y", "mirror z"),
                 id="cubic"),
    pytest.param(lambda: lattices.ring(10, 0.3, "tangential"), ("mirror x", "mirror y"), id="ring"),
    pytest.param(lambda: lattices.disk(1.5, 0.3, "y", lattice="triangular"),
                 ("mirror x", "mirror y"), id="disk"),
])
def test_blocks_give_the_modes_of_the_full_matrix(make, gens):
    em = make()
    group = find_symmetry(em, ALL)
    assert group is not None and group.generators == gens
    H = coupling_matrix(em, FreeSpace())
    blocked, full = modes_from_matrix(H, group), modes_from_matrix(H)
    np.testing.assert_allclose(blocked.eigenvalues, full.eigenvalues, atol=EIG_TOL)
    np.testing.assert_allclose(H @ blocked.vectors, blocked.vectors * blocked.eigenvalues,
                               atol=EIG_TOL)
    np.testing.assert_allclose(np.linalg.norm(blocked.vectors, axis=0), 1.0, atol=1e-13)
    np.testing.assert_allclose(blocked.left_vectors.conj().T @ blocked.vectors, np.eye(em.n),
                               atol=1e-10)
    np.testing.assert_allclose(blocked.petermann, full.petermann, rtol=1e-8)
    assert len(set(blocked.sector)) == group.order


def test_each_mode_has_the_parity_its_label_says():
    em = lattices.square(7, 5, 0.35, "y")
    group = find_symmetry(em, ALL)
    modes = modes_from_matrix(coupling_matrix(em, FreeSpace()), group)
    pos = em.positions
    for m in range(modes.n):
        c = modes.vectors[:, m]
        label = modes.symmetry_label(m)
        for axis, name in ((0, "mirror x"), (1, "mirror y")):
            image = np.array([np.argmin(np.linalg.norm(pos - p * np.where(np.arange(3) == axis, -1, 1),
                                                       axis=1)) for p in pos])
            sign = 1 if f"{name}: even" in label else -1
            np.testing.assert_allclose(c[image], sign * c, atol=1e-10)


@pytest.mark.parametrize("make", [
    pytest.param(lambda: Emitters(lattices.square(5, 5, 0.3).positions
                                  + np.random.default_rng(2).normal(scale=0.01, size=(25, 3))),
                 id="jitter"),
    pytest.param(lambda: lattices.square(5, 5, 0.3, (1.0, 0.3, 0.2)).with_dipoles(
        np.random.default_rng(3).normal(size=(25, 3))), id="random-dipoles"),
    pytest.param(lambda: lattices.explicit([[0, 0, 0], [0.3, 0, 0], [0, 0.4, 0], [0.5, 0.5, 0.1]]),
                 id="irregular"),
])
def test_no_symmetry_is_claimed_where_there_is_none(make):
    assert find_symmetry(make(), ALL) is None


def test_tilted_dipoles_break_the_mirrors_they_do_not_respect():
    # a dipole tilted in the xz-plane maps onto ±itself under mirror y and under
    # the two-fold rotation about y (x, z → −x, −z), but not under mirror x
    em = lattices.square(6, 6, 0.3, (1.0, 0.0, 1.0))
    group = find_symmetry(em, ALL)
    assert group.generators == ("mirror y", "C2 y")
