"""Tests for physics/free_space.py: the dyadic Green's function and the couplings it gives.

Reference values for two emitters come from Lehmberg's closed forms, evaluated
with mpmath at 50 significant digits so that the reference carries no
float64 cancellation of its own.
"""
from __future__ import annotations

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from emitter_strategies import clusters, rotations
from physics import Emitters, FreeSpace, coupling_matrix, lattices
from physics.free_space import K0, _lattice_gather, greens_tensor, pair_coupling
from physics.geometry import dipole_vector, polar_dipole

# Two-emitter couplings: float64 evaluation near k0 r = 0.3 combines terms up to
# 1/(k0 r)³ ≈ 37 that cancel to O(1), so round-off stays below ~1e2·eps·37 ≈ 1e-12
# (common practice, no source).
PAIR_ATOL = 1e-12

# Symmetries of G: both sides are built from the same floating-point operations
# up to the order of a product, so they agree to a few ulp (common practice, no source).
SYMMETRY_RTOL = 1e-14


def _lehmberg(x: float, cos2: float) -> tuple[float, float]:
    """Γ12 and J12 [Γ0] of two parallel dipoles at k0 r = x, angle α with cos²α = cos2.

    Γ12 = (3/2)[(1−cos²α) sin x/x + (1−3cos²α)(cos x/x² − sin x/x³)],
    J12 = (3/4)[−(1−cos²α) cos x/x + (1−3cos²α)(sin x/x² + cos x/x³)].
    Closed forms of R. H. Lehmberg, Phys. Rev. A 2, 883 (1970), as reviewed in
    Z. Ficek and R. Tanaś, Phys. Rep. 372, 369 (2002); written here from memory of
    those papers, then evaluated with mpmath at 50 digits.
    """
    with mpmath.workdps(50):
        X = mpmath.mpf(x)
        c2 = mpmath.mpf(cos2)
        s, c = mpmath.sin(X), mpmath.cos(X)
        gamma = mpmath.mpf(3) / 2 * ((1 - c2) * s / X + (1 - 3 * c2) * (c / X**2 - s / X**3))
        shift = mpmath.mpf(3) / 4 * (-(1 - c2) * c / X + (1 - 3 * c2) * (s / X**2 + c / X**3))
        return float(gamma), float(shift)


def _unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


# A separation direction away from the axes and a unit vector perpendicular to it,
# so that the tests do not rely on a Cartesian alignment.
_RHAT = _unit([0.3, -0.5, 0.8])
_PERP = _unit(np.cross(_RHAT, [1.0, 0.0, 0.0]))

KR_VALUES = [pytest.param(x, id=f"kr{x:g}") for x in (0.3, 1.0, 2.5, 5.0, 8.0)]
ANGLES = [
    pytest.param(0.0, id="parallel-to-r"),  # α = 0
    pytest.param(np.pi / 2, id="perpendicular-to-r"),  # α = 90°
    pytest.param(np.arccos(1 / np.sqrt(3.0)), id="magic-angle"),  # 1 − 3cos²α = 0
    pytest.param(0.4, id="generic"),
]


@pytest.mark.parametrize("alpha", ANGLES)
@pytest.mark.parametrize("kr", KR_VALUES)
def test_two_parallel_dipoles_match_lehmberg(kr: float, alpha: float) -> None:
    r_vec = (kr / K0) * _RHAT
    d = np.cos(alpha) * _RHAT + np.sin(alpha) * _PERP
    em = Emitters(np.array([np.zeros(3), r_vec]), d)
    H = coupling_matrix(em, FreeSpace())

    x = K0 * float(np.linalg.norm(r_vec))  # the k0 r the code sees
    cos2 = float(np.dot(d, _RHAT)) ** 2
    gamma12, j12 = _lehmberg(x, cos2)
    assert -2.0 * H[0, 1].imag == pytest.approx(gamma12, rel=0, abs=PAIR_ATOL)
    assert H[0, 1].real == pytest.approx(j12, rel=0, abs=PAIR_ATOL)
    # real dipoles: H is symmetric and its diagonal is the single-emitter −iΓ0/2
    assert H[1, 0] == pytest.approx(H[0, 1], rel=0, abs=PAIR_ATOL)
    np.testing.assert_allclose(np.diag(H), -0.5j, rtol=0, atol=1e-15)


def test_sigma_plus_pair_is_the_mean_of_parallel_and_perpendicular() -> None:
    # σ+ = (x̂ + iŷ)/√2, separation r along x: conj(d)·d = 1 and |x̂·d|² = 1/2, so the
    # coupling is ½(a) + ½(a + b) = the mean of the α = 90° and α = 0 couplings
    # (algebra on the closed forms, no source).
    d = dipole_vector("sigma+")
    r_vec = np.array([0.3, 0.0, 0.0])
    x = K0 * 0.3
    gamma_par, j_par = _lehmberg(x, 1.0)
    gamma_perp, j_perp = _lehmberg(x, 0.0)

    h12 = pair_coupling(r_vec, d, d)
    assert -2.0 * h12.imag == pytest.approx(0.5 * (gamma_par + gamma_perp), rel=0, abs=PAIR_ATOL)
    assert h12.real == pytest.approx(0.5 * (j_par + j_perp), rel=0, abs=PAIR_ATOL)
    # ≈ 0.55 Γ0 at 0.3 λ0 (value quoted in the design notes, DESIGN.md)
    assert -2.0 * h12.imag == pytest.approx(0.55, abs=5e-3)

    # Without the conjugate, d·d = 0 and (x̂·d)² = 1/2 leave only half the r̂r̂ term:
    # (Γ∥ − Γ⊥)/2 ≈ 0.14 Γ0, a different number (algebra on the closed forms).
    G = greens_tensor(r_vec)
    with_conj = -(3 * np.pi / K0) * (d.conj() @ G @ d)
    without_conj = -(3 * np.pi / K0) * (d @ G @ d)
    assert with_conj == pytest.approx(h12, rel=0, abs=PAIR_ATOL)
    assert -2.0 * without_conj.imag == pytest.approx(0.5 * (gamma_par - gamma_perp), abs=PAIR_ATOL)
    assert abs(-2.0 * without_conj.imag - (-2.0 * h12.imag)) > 0.4


def test_sigma_plus_pair_along_the_quantisation_axis_is_perpendicular() -> None:
    # r ∥ z ⟂ σ+: only the α = 90° terms survive (algebra on the closed forms)
    d = dipole_vector("sigma+")
    h12 = pair_coupling(np.array([0.0, 0.0, 0.2]), d, d)
    gamma_perp, j_perp = _lehmberg(K0 * 0.2, 0.0)
    assert -2.0 * h12.imag == pytest.approx(gamma_perp, rel=0, abs=PAIR_ATOL)
    assert h12.real == pytest.approx(j_perp, rel=0, abs=PAIR_ATOL)


@pytest.mark.parametrize("dipole", [pytest.param(k, id=k) for k in ("x", "z", "sigma+")])
def test_dissipative_coupling_tends_to_the_self_rate_at_short_distance(dipole: str) -> None:
    # Γ12 → Γ0 as r → 0, consistent with H_ii = −iΓ0/2.  Taylor expansion of the
    # closed forms: Γ12 = 1 − x²/5 + O(x⁴) at α = 90°, 1 − x²/10 + O(x⁴) at α = 0
    # (elementary series, no source); x = 2π·1e-3 gives a deviation below 1e-5.
    d = dipole_vector(dipole)
    h12 = pair_coupling(np.array([1e-3, 0.0, 0.0]), d, d)
    assert -2.0 * h12.imag == pytest.approx(1.0, abs=1e-5)


def test_greens_tensor_refuses_zero_displacement() -> None:
    with pytest.raises(ValueError, match="r = 0"):
        greens_tensor(np.zeros(3))


vectors = st.tuples(*[st.floats(-20.0, 20.0, allow_nan=False)] * 3).filter(
    lambda v: 1e-3 < np.linalg.norm(v)
)


@given(v=vectors)
@settings(max_examples=100, deadline=None)
def test_greens_tensor_is_even_and_symmetric(v) -> None:
    r = np.array(v)
    G = greens_tensor(r)
    scale = np.max(np.abs(G))
    np.testing.assert_allclose(greens_tensor(-r), G, rtol=0, atol=SYMMETRY_RTOL * scale)
    np.testing.assert_allclose(G.T, G, rtol=0, atol=SYMMETRY_RTOL * scale)


@given(v=vectors, R=rotations)
@settings(max_examples=50, deadline=None)
def test_greens_tensor_is_rotation_covariant(v, R: np.ndarray) -> None:
    # G(R r) = R G(r) Rᵀ: G is built from |r| and r̂r̂ only (common practice, no source)
    r = np.array(v)
    G = greens_tensor(r)
    scale = np.max(np.abs(G))
    np.testing.assert_allclose(greens_tensor(R @ r), R @ G @ R.T, rtol=0, atol=1e-12 * scale)


def test_greens_tensor_far_zone_is_transverse() -> None:
    # far zone (k0 r ≫ 1): G → e^{ik0 r}/(4π r) (I − r̂r̂) up to O(1/(k0 r))
    # (Novotny & Hecht, Principles of Nano-Optics, 2nd ed. (2012), Sec. 8.3.1, from memory)
    r = 500.0 * _RHAT
    G = greens_tensor(r)
    far = np.exp(1j * K0 * 500.0) / (4 * np.pi * 500.0) * (np.eye(3) - np.outer(_RHAT, _RHAT))
    # relative size of the next term: 1/(k0 r) ≈ 3e-4
    np.testing.assert_allclose(G, far, rtol=0, atol=1e-3 * np.max(np.abs(far)))


# ---------------------------------------------------------------------------
# the coupling matrix against greens_tensor, and the lattice fast path


@given(em=clusters())
@settings(max_examples=50, deadline=None)
def test_coupling_matrix_is_conj_d_dot_green_dot_d(em: Emitters) -> None:
    # H_ij = −(3π/k0) conj(d_i)·G(r_i − r_j)·d_j, H_ii = −i/2 (DESIGN.md; Lehmberg 1970)
    H = coupling_matrix(em, FreeSpace())
    n = em.n
    expected = np.full((n, n), -0.5j)
    for i in range(n):
        for j in range(n):
            if i != j:
                G = greens_tensor(em.positions[i] - em.positions[j])
                expected[i, j] = -(3 * np.pi / K0) * (em.dipoles[i].conj() @ G @ em.dipoles[j])
    np.testing.assert_allclose(H, expected, rtol=1e-12, atol=1e-13)


# Generators with parameters that give N ≥ 64 (the fast path's threshold),
# spacings from dense to very sparse.
_SPACING = st.floats(0.01, 100.0)
_DIPOLE = st.one_of(st.sampled_from(["x", "y", "z", "sigma+", "sigma-"]),
                    st.tuples(st.floats(-1, 1), st.floats(-1, 1), st.floats(0.1, 1)))
GRID_GENERATORS = [
    pytest.param(st.builds(lattices.chain, st.integers(64, 150), _SPACING, _DIPOLE,
                           axis=st.sampled_from("xyz")), id="chain"),
    pytest.param(st.builds(lattices.square, st.integers(8, 12), st.integers(8, 12), _SPACING,
                           _DIPOLE), id="square"),
    pytest.param(st.builds(lattices.rectangular, st.integers(8, 12), st.integers(8, 12),
                           _SPACING, _SPACING, _DIPOLE), id="rectangular"),
    pytest.param(st.builds(lattices.triangular, st.integers(8, 12), st.integers(8, 12),
                           _SPACING, _DIPOLE), id="triangular"),
    pytest.param(st.builds(lattices.honeycomb, st.integers(6, 9), st.integers(6, 9), _SPACING,
                           _DIPOLE), id="honeycomb"),
    pytest.param(st.builds(lattices.kagome, st.integers(5, 8), st.integers(5, 8), _SPACING,
                           _DIPOLE), id="kagome"),
    pytest.param(st.builds(lattices.disk, st.floats(5.0, 7.0), st.just(1.0), _DIPOLE,
                           lattice=st.sampled_from(["square", "triangular"])), id="disk"),
    pytest.param(st.builds(lattices.cubic, st.integers(4, 6), st.integers(4, 6),
                           st.integers(4, 6), _SPACING, _DIPOLE), id="cubic"),
]


@pytest.mark.parametrize("generator", GRID_GENERATORS)
@given(data=st.data())
@settings(max_examples=15, deadline=None)
def test_lattice_fast_path_equals_all_pairs(generator, data) -> None:
    em = data.draw(generator)
    assert em.n >= 64
    fast = _lattice_gather(em)
    assert fast is not None, "the fast path should apply to a generated lattice"
    slow = FreeSpace._all_pairs(em)
    # both evaluate the same formula at displacements that differ by round-off in
    # the positions; near-field terms (∝ 1/r³) triple the relative error
    # (common practice, no source)
    np.testing.assert_allclose(fast, slow, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(coupling_matrix(em, FreeSpace()), slow, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize(
    "build",
    [
        # cases where the grid detection once declined (found by the test above)
        pytest.param(lambda: lattices.chain(111, 0.09929440799042999), id="chain-small-step"),
        pytest.param(lambda: lattices.kagome(6, 6, 0.0511652225705305), id="kagome-small-step"),
        pytest.param(lambda: lattices.kagome(5, 22, 63.16224452550894), id="kagome-far-coords"),
    ],
)
def test_lattice_fast_path_applies(build) -> None:
    em = build()
    fast = _lattice_gather(em)
    assert fast is not None
    np.testing.assert_allclose(fast, FreeSpace._all_pairs(em), rtol=1e-10, atol=1e-12)


@given(n=st.integers(64, 120), spacing=_SPACING)
@settings(max_examples=5, deadline=None)
def test_ring_takes_the_all_pairs_path(n: int, spacing: float) -> None:
    # a ring is not on a uniform grid: the fast path must decline, not guess
    em = lattices.ring(n, spacing)
    assert _lattice_gather(em) is None
    np.testing.assert_allclose(coupling_matrix(em, FreeSpace()), FreeSpace._all_pairs(em),
                               rtol=1e-15, atol=1e-15)


def test_fast_path_declines_mixed_dipoles_and_small_arrays() -> None:
    em = lattices.square(8, 8, 0.3, "x")
    mixed = em.with_dipoles(np.where(np.arange(64)[:, None] % 2, [1, 0, 0], [0, 1, 0]))
    assert _lattice_gather(mixed) is None
    assert _lattice_gather(lattices.square(7, 7, 0.3)) is None  # N = 49 < 64


def test_polar_dipole_rotates_the_pair_coupling() -> None:
    # a dipole pair tilted by θ from z, separated along z, equals Lehmberg with α = θ
    theta = 0.7
    d = polar_dipole(theta, 0.3)
    h12 = pair_coupling(np.array([0.0, 0.0, 0.15]), d, d)
    gamma12, j12 = _lehmberg(K0 * 0.15, np.cos(theta) ** 2)
    assert -2.0 * h12.imag == pytest.approx(gamma12, rel=0, abs=PAIR_ATOL)
    assert h12.real == pytest.approx(j12, rel=0, abs=PAIR_ATOL)


@pytest.mark.parametrize("dipole", [
    pytest.param(np.array([1.0, 0.0, 0.0]), id="x"),
    pytest.param(np.array([1.0, 1j, 0.0]) / np.sqrt(2), id="sigma+"),
    pytest.param(np.array([0.3, 0.5 + 0.2j, 0.7]) / np.linalg.norm([0.3, 0.5 + 0.2j, 0.7]),
                 id="complex"),
])
@pytest.mark.parametrize("n", [pytest.param(60, id="one-block"), pytest.param(700, id="blocks")])
def test_one_dipole_path_equals_the_pairwise_formula(dipole, n):
    """Shared-dipole arrays off a grid: each pair once (H symmetric) = every pair by
    pair_coupling (Lehmberg, Phys. Rev. A 2, 883 (1970)), to rounding."""
    from physics.free_space import _uniform_pairs

    rng = np.random.default_rng(n)
    pos = rng.uniform(0.0, 0.45 * n ** (1 / 3), size=(n, 3))
    em = Emitters(positions=pos, dipoles=dipole)
    want = FreeSpace._all_pairs(em)
    got = _uniform_pairs(em)
    rounding = 1e-14  # a few ulp of the largest |H_ij| (close pairs reach ~1e3 Γ0)
    assert np.max(np.abs(got - want)) <= rounding * np.max(np.abs(want))
    np.testing.assert_array_equal(got, got.T)  # symmetric by construction
