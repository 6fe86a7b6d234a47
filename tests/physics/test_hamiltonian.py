"""Tests for physics/hamiltonian.py: the effective Hamiltonian and its checks."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from emitter_strategies import clusters, rotations
from physics import Emitters, FreeSpace, coupling_matrix, lattices
from physics.geometry import MIN_DISTANCE
from physics.hamiltonian import check_separation, decay_operator, exchange_operator


shifts = st.tuples(*[st.floats(-10.0, 10.0)] * 3)

# Invariance tests compare H of two arrangements that agree up to round-off in
# the positions (≈ eps·|r| ≤ 1e-15·10 λ0); at the closest pairs (0.05 λ0,
# near field ∝ 1/r³) that is a relative change of ~1e-12 in H
# (common practice, no source).
INVARIANCE_RTOL = 1e-10


def _assert_same_h(h1: np.ndarray, h2: np.ndarray) -> None:
    np.testing.assert_allclose(h1, h2, rtol=INVARIANCE_RTOL,
                               atol=INVARIANCE_RTOL * np.max(np.abs(h1)))


@given(em=clusters(), rot=rotations)
@settings(max_examples=40, deadline=None)
def test_h_is_invariant_under_a_common_rotation(em: Emitters, rot: np.ndarray) -> None:
    # isotropy of free space: rotating positions and dipoles together changes nothing
    _assert_same_h(coupling_matrix(em, FreeSpace()),
                   coupling_matrix(em.transformed(rot), FreeSpace()))


@given(em=clusters(), shift=shifts)
@settings(max_examples=40, deadline=None)
def test_h_is_invariant_under_translation(em: Emitters, shift) -> None:
    _assert_same_h(coupling_matrix(em, FreeSpace()),
                   coupling_matrix(em.transformed(shift=shift), FreeSpace()))


@pytest.mark.parametrize(
    "em",
    [
        pytest.param(lattices.square(9, 9, 0.3, "sigma+"), id="square-sigma+"),
        pytest.param(lattices.triangular(9, 8, 0.2, "z"), id="triangular-z"),
        pytest.param(lattices.kagome(5, 5, 0.2, (1, 1, 1)), id="kagome-tilted"),
    ],
)
@given(rot=rotations, shift=shifts)
@settings(max_examples=5, deadline=None)
def test_rotating_a_lattice_leaves_h_unchanged(em: Emitters, rot, shift) -> None:
    # the rotated copy is off-grid, so this also compares the lattice fast path
    # (original) with the all-pairs path (rotated)
    _assert_same_h(coupling_matrix(em, FreeSpace()),
                   coupling_matrix(em.transformed(rot, shift), FreeSpace()))


@given(em=clusters())
@settings(max_examples=40, deadline=None)
def test_j_and_gamma_are_hermitian_and_rebuild_h(em: Emitters) -> None:
    H = coupling_matrix(em, FreeSpace())
    J, G = exchange_operator(H), decay_operator(H)
    tol = 1e-14 * np.max(np.abs(H))
    np.testing.assert_allclose(J, J.conj().T, rtol=0, atol=tol)
    np.testing.assert_allclose(G, G.conj().T, rtol=0, atol=tol)
    np.testing.assert_allclose(J - 0.5j * G, H, rtol=0, atol=tol)
    # the diagonal of Γ is the single-emitter rate Γ0 (H_ii = −iΓ0/2, DESIGN.md)
    np.testing.assert_allclose(np.diag(G), 1.0, rtol=0, atol=1e-15)
    # Γ is positive semidefinite: the far-field power c†Γc is never negative
    # (DESIGN.md, far-field identity); round-off in eigvalsh is ~N·eps·|Γ|
    assert np.min(np.linalg.eigvalsh(G)) > -1e-12 * np.max(np.abs(G)) * em.n


@given(em=clusters())
@settings(max_examples=30, deadline=None)
def test_swapping_emitters_permutes_h(em: Emitters) -> None:
    perm = np.roll(np.arange(em.n), 1)
    swapped = Emitters(em.positions[perm], em.dipoles[perm])
    H = coupling_matrix(em, FreeSpace())
    np.testing.assert_allclose(coupling_matrix(swapped, FreeSpace()), H[np.ix_(perm, perm)],
                               rtol=1e-14, atol=1e-14 * np.max(np.abs(H)))


# ---------------------------------------------------------------------------
# refused geometries and finiteness


def test_coincident_emitters_are_refused_naming_both_indices() -> None:
    pos = np.array([[0, 0, 0], [0.5, 0, 0], [1, 0, 0], [0.5, 0, 0]], float)
    em = Emitters(pos, "x")
    with pytest.raises(ValueError, match=r"positions: emitters 1 and 3 are 0 λ0 apart"):
        coupling_matrix(em, FreeSpace())
    # also on a generated lattice, where the fast path would otherwise be used
    grid = lattices.square(8, 8, 0.3)
    dup = Emitters(np.vstack([grid.positions, grid.positions[10]]), "x")
    with pytest.raises(ValueError, match=r"emitters 10 and 64 are 0 λ0 apart"):
        coupling_matrix(dup, FreeSpace())


def test_emitters_closer_than_the_minimum_are_refused() -> None:
    em = Emitters([[0, 0, 0], [0.3, 0, 0], [0.3, 0.5 * MIN_DISTANCE, 0]], "z")
    with pytest.raises(ValueError, match=r"emitters 1 and 2 are 5e-05 λ0 apart.*minimum"):
        coupling_matrix(em, FreeSpace())
    check_separation(Emitters([[0, 0, 0], [0, 0, 2 * MIN_DISTANCE]], "z"))  # accepted


@given(
    n_pairs=st.integers(1, 4),
    seps=st.lists(st.floats(1.01 * MIN_DISTANCE, 1e-2), min_size=4, max_size=4),
    dirs=st.lists(st.tuples(st.floats(0, np.pi), st.floats(0, 2 * np.pi)), min_size=4, max_size=4),
    dipole=st.sampled_from(["x", "y", "z", "sigma+", "sigma-"]),
)
@settings(max_examples=40, deadline=None)
def test_h_is_finite_down_to_the_minimum_separation(n_pairs, seps, dirs, dipole) -> None:
    # pairs of emitters just above MIN_DISTANCE, pairs 1 λ0 apart from each other
    pos = []
    for k in range(n_pairs):
        th, ph = dirs[k]
        u = np.array([np.sin(th) * np.cos(ph), np.sin(th) * np.sin(ph), np.cos(th)])
        base = np.array([float(k), 0.0, 0.0])
        pos += [base, base + seps[k] * u]
    H = coupling_matrix(Emitters(np.array(pos), dipole), FreeSpace())
    assert np.all(np.isfinite(H))


@pytest.mark.parametrize(
    "build",
    [
        pytest.param(lambda: lattices.chain(300, 0.001, "x"), id="dense-chain"),
        pytest.param(lambda: lattices.disk(0.01, 0.001, "z"), id="dense-disk"),
        pytest.param(lambda: lattices.cubic(6, 6, 6, 0.001, "sigma+"), id="dense-cube"),
        pytest.param(lambda: lattices.square(40, 40, 50.0, "y"), id="sparse-square"),
    ],
)
def test_h_is_finite_for_extreme_generated_arrays(build) -> None:
    H = coupling_matrix(build(), FreeSpace())
    assert np.all(np.isfinite(H))
    np.testing.assert_allclose(np.diag(H), -0.5j, rtol=0, atol=1e-15)


def test_single_emitter_has_the_bare_rate() -> None:
    H = coupling_matrix(Emitters([[0.0, 0.0, 0.0]], "sigma+"), FreeSpace())
    assert H.shape == (1, 1)
    assert H[0, 0] == pytest.approx(-0.5j, abs=1e-15)
    assert H.dtype == np.complex128
