"""Tests for physics/geometry.py: emitter positions and dipole orientations."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from physics import Emitters, dipole_vector, polar_dipole
from physics.geometry import DIPOLE_PRESETS

# Normalisation is one division by a norm: the result is a unit vector to a few
# ulp (common practice, no source).
UNIT_TOL = 1e-14

finite = st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False)


@pytest.mark.parametrize("name", [pytest.param(k, id=k) for k in DIPOLE_PRESETS])
def test_presets_are_unit_vectors(name: str) -> None:
    d = dipole_vector(name)
    assert d.shape == (3,)
    assert d.dtype == np.complex128
    assert abs(np.linalg.norm(d) - 1.0) < UNIT_TOL


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        pytest.param("x", (1, 0, 0), id="x"),
        pytest.param("y", (0, 1, 0), id="y"),
        pytest.param("z", (0, 0, 1), id="z"),
        # circular dipoles about z: (x̂ ± iŷ)/√2 (common practice, no source)
        pytest.param("sigma+", (2 ** -0.5, 1j * 2 ** -0.5, 0), id="sigma+"),
        pytest.param("sigma-", (2 ** -0.5, -1j * 2 ** -0.5, 0), id="sigma-"),
    ],
)
def test_preset_components(name: str, expected: tuple[complex, complex, complex]) -> None:
    np.testing.assert_allclose(dipole_vector(name), np.array(expected, complex),
                               rtol=0, atol=UNIT_TOL)


def test_unknown_preset_is_refused_with_the_allowed_names() -> None:
    with pytest.raises(ValueError, match=r"unknown preset 'w'.*sigma\+"):
        dipole_vector("w")


@given(re=st.tuples(finite, finite, finite), im=st.tuples(finite, finite, finite))
@settings(max_examples=60, deadline=None)
def test_unnormalised_vector_is_normalised_and_keeps_its_direction(re, im) -> None:
    v = np.array(re) + 1j * np.array(im)
    norm = np.linalg.norm(v)
    assume(norm > 1e-6)  # the zero vector is tested separately
    d = dipole_vector(v)
    assert abs(np.linalg.norm(d) - 1.0) < UNIT_TOL
    np.testing.assert_allclose(d * norm, v, rtol=1e-12, atol=1e-12 * norm)


def test_zero_dipole_vector_is_refused() -> None:
    with pytest.raises(ValueError, match=r"dipole: dipole vector is zero"):
        dipole_vector((0, 0, 0))


def test_zero_dipole_of_one_emitter_is_refused_naming_it() -> None:
    pos = np.arange(9.0).reshape(3, 3)
    dip = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 0]], complex)
    with pytest.raises(ValueError, match=r"dipole vector is zero \(emitter 2\)"):
        Emitters(pos, dip)


def test_wrong_dipole_shape_is_refused() -> None:
    with pytest.raises(ValueError, match=r"expected 3 components"):
        dipole_vector((1, 0))
    with pytest.raises(ValueError, match=r"dipoles: expected shape"):
        Emitters(np.zeros((2, 3)), np.ones((3, 3)))


def test_non_finite_dipole_is_refused() -> None:
    with pytest.raises(ValueError, match="finite"):
        dipole_vector((np.nan, 0, 1))


@pytest.mark.parametrize(
    ("theta", "phi", "expected"),
    [
        pytest.param(0.0, 1.234, (0, 0, 1), id="north-pole"),
        pytest.param(np.pi / 2, 0.0, (1, 0, 0), id="x"),
        pytest.param(np.pi / 2, np.pi / 2, (0, 1, 0), id="y"),
        pytest.param(np.pi, 0.0, (0, 0, -1), id="south-pole"),
        # (sinθcosφ, sinθsinφ, cosθ), spherical coordinates (common practice, no source)
        pytest.param(np.pi / 3, np.pi / 4,
                     (np.sqrt(3 / 8), np.sqrt(3 / 8), 0.5), id="generic"),
    ],
)
def test_polar_dipole(theta: float, phi: float, expected: tuple[float, float, float]) -> None:
    d = polar_dipole(theta, phi)
    np.testing.assert_allclose(d, np.array(expected, complex), rtol=0, atol=UNIT_TOL)
    assert abs(np.linalg.norm(d) - 1.0) < UNIT_TOL


def test_emitters_broadcasts_one_dipole_and_normalises_rows() -> None:
    pos = np.array([[0, 0, 0], [1, 0, 0], [0, 2, 0]], float)
    em = Emitters(pos, (0, 0, 3))
    np.testing.assert_allclose(em.dipoles, np.tile([0, 0, 1], (3, 1)), rtol=0, atol=UNIT_TOL)
    em2 = Emitters(pos, np.array([[2, 0, 0], [0, 1j, 1j], [1, 1, 1]]))
    np.testing.assert_allclose(np.linalg.norm(em2.dipoles, axis=1), 1.0, rtol=0, atol=UNIT_TOL)
    assert em2.uniform_dipole is None
    np.testing.assert_allclose(em.uniform_dipole, [0, 0, 1], rtol=0, atol=UNIT_TOL)
    assert em.n == len(em) == 3


@pytest.mark.parametrize(
    ("positions", "message"),
    [
        pytest.param(np.zeros((3, 2)), r"expected shape \(N, 3\)", id="two-columns"),
        pytest.param(np.zeros((0, 3)), r"at least one emitter", id="empty"),
        pytest.param([[0, 0, 0], [0, np.inf, 0]], r"emitter 1 has a non-finite", id="inf"),
    ],
)
def test_bad_positions_are_refused(positions, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        Emitters(positions)


def test_emitters_are_read_only_and_hash_by_content() -> None:
    pos = np.array([[0, 0, 0], [0.3, 0, 0]])
    em = Emitters(pos, "x")
    pos[1, 0] = 5.0  # the caller's array was copied
    np.testing.assert_allclose(em.positions[1], [0.3, 0.0, 0.0], rtol=0, atol=1e-15)
    with pytest.raises(ValueError):
        em.positions[0, 0] = 1.0
    with pytest.raises(ValueError):
        em.dipoles[0, 0] = 1.0
    same = Emitters([[0, 0, 0], [0.3, 0, 0]], "x")
    other = Emitters([[0, 0, 0], [0.3, 0, 0]], "y")
    assert em == same and hash(em) == hash(same)
    assert em != other
    assert em.with_dipoles("y") == other


def test_transformed_rotates_positions_and_dipoles_then_shifts() -> None:
    # rotation by +90° about z: x̂ → ŷ, ŷ → −x̂ (common practice, no source)
    rz = np.array([[0.0, -1.0, 0.0], [1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])
    em = Emitters([[1.0, 0.0, 0.0], [0.0, 2.0, 0.0]], [[1, 0, 0], [0, 1j, 0]])
    out = em.transformed(rz, shift=(0.0, 0.0, 5.0))
    np.testing.assert_allclose(out.positions, [[0, 1, 5], [-2, 0, 5]], rtol=0, atol=1e-15)
    np.testing.assert_allclose(out.dipoles, [[0, 1, 0], [-1j, 0, 0]], rtol=0, atol=1e-15)
