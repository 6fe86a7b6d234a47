"""Tests for physics/modes.py: collective modes, their decay rates and derived figures."""
from __future__ import annotations

from typing import Callable

import numpy as np
import pytest
from hypothesis import given, settings

from emitter_strategies import clusters
from physics import (DefectiveMatrixWarning, Emitters, FreeSpace, Modes, coupling_matrix,
                     lattices, solve_modes)
from physics.free_space import K0
from physics.hamiltonian import decay_operator
from physics.modes import modes_from_matrix

# Eigen-decomposition is backward stable: residuals ‖Hc − λc‖ stay within a few
# N·eps·‖H‖, far below this bound for N ≤ 100 (common practice, no source).
RESID_TOL = 1e-12
# Biorthogonality from V⁻¹ holds to about eps·cond(V); cond(V) ≲ 10 for these
# cases (measured), so 1e-11 leaves a wide margin (common practice, no source).
BIORTH_TOL = 1e-11


def _mixed_circular_cluster() -> Emitters:
    """Non-planar cluster with alternating σ+ / σ− dipoles: H is not symmetric."""
    rng = np.random.default_rng(7)
    pos = 0.6 * np.array(np.meshgrid(*[np.arange(2)] * 3, indexing="ij")).reshape(3, -1).T
    pos = pos + 0.1 * rng.standard_normal(pos.shape)
    s = 2 ** -0.5
    dip = np.array([[s, 1j * s, 0] if k % 2 else [s, -1j * s, 0] for k in range(len(pos))])
    return Emitters(pos, dip)


def _random_complex_cluster() -> Emitters:
    rng = np.random.default_rng(11)
    pos = 0.3 * np.array(np.meshgrid(*[np.arange(3)] * 3, indexing="ij")).reshape(3, -1).T
    pos = pos + 0.05 * rng.standard_normal(pos.shape)
    dip = rng.standard_normal((len(pos), 3)) + 1j * rng.standard_normal((len(pos), 3))
    return Emitters(pos, dip)


def _uniform_sigma_cluster() -> Emitters:
    rng = np.random.default_rng(3)
    return Emitters(rng.uniform(-0.5, 0.5, (12, 3)), "sigma+")


def _random_nonsymmetric_matrix() -> np.ndarray:
    rng = np.random.default_rng(5)
    return rng.standard_normal((15, 15)) + 1j * rng.standard_normal((15, 15)) - 3j * np.eye(15)


MatrixCase = Callable[[], np.ndarray]

# complex-symmetric H (reciprocal, uniform dipoles): several have degenerate modes
SYMMETRIC = [
    pytest.param(lambda: coupling_matrix(lattices.ring(10, 0.2, "z"), FreeSpace()), id="ring-z"),
    pytest.param(lambda: coupling_matrix(lattices.square(6, 6, 0.3, "z"), FreeSpace()),
                 id="square-z"),
    pytest.param(lambda: coupling_matrix(lattices.cubic(3, 3, 3, 0.25, "x"), FreeSpace()),
                 id="cube-x"),
    pytest.param(lambda: coupling_matrix(lattices.chain(20, 0.3, "y"), FreeSpace()), id="chain-y"),
    pytest.param(lambda: coupling_matrix(_uniform_sigma_cluster(), FreeSpace()),
                 id="cluster-sigma+"),
]
NONSYMMETRIC = [
    pytest.param(lambda: coupling_matrix(_mixed_circular_cluster(), FreeSpace()),
                 id="cluster-sigma+-"),
    pytest.param(lambda: coupling_matrix(_random_complex_cluster(), FreeSpace()),
                 id="cluster-complex"),
    pytest.param(_random_nonsymmetric_matrix, id="random-matrix"),
]


def test_uniform_dipoles_give_a_complex_symmetric_h_and_mixed_ones_do_not() -> None:
    # H_ji = conj(d_j)·G·d_i and G(r) = G(−r) = Gᵀ: H = Hᵀ whenever all dipoles are
    # equal, even circular ones off the plane; σ+ next to σ− breaks it
    # (algebra on the definition in DESIGN.md).
    H = coupling_matrix(_uniform_sigma_cluster(), FreeSpace())
    scale = np.max(np.abs(H))
    assert np.max(np.abs(H - H.T)) < 1e-14 * scale
    assert np.max(np.abs(H - H.conj().T)) > 0.1 * scale  # and not Hermitian
    M = coupling_matrix(_mixed_circular_cluster(), FreeSpace())
    assert np.max(np.abs(M - M.T)) > 0.01 * np.max(np.abs(M))


@pytest.mark.parametrize("make", SYMMETRIC + NONSYMMETRIC)
def test_eigenpairs(make: MatrixCase) -> None:
    H = make()
    n = H.shape[0]
    modes = modes_from_matrix(H)
    V, L, lam = modes.vectors, modes.left_vectors, modes.eigenvalues
    norm_h = np.linalg.norm(H, 2)
    # right vectors: c†c = 1 and H c = λ c
    np.testing.assert_allclose(np.linalg.norm(V, axis=0), 1.0, rtol=0, atol=1e-14)
    assert np.max(np.linalg.norm(H @ V - V * lam, axis=0)) < RESID_TOL * norm_h
    # left vectors: l† H = λ l†
    left_res = np.linalg.norm(L.conj().T @ H - lam[:, None] * L.conj().T, axis=1)
    assert np.max(left_res / np.linalg.norm(L, axis=0)) < RESID_TOL * norm_h
    # biorthogonal pairing l_m† c_n = δ_mn, also inside degenerate eigenspaces
    np.testing.assert_allclose(L.conj().T @ V, np.eye(n), rtol=0, atol=BIORTH_TOL)
    # ordering and derived arrays
    assert np.all(np.diff(modes.decay_rates) >= -1e-12 * norm_h)
    np.testing.assert_allclose(modes.decay_rates, -2 * lam.imag, rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(modes.shifts, lam.real, rtol=1e-15, atol=1e-15)
    assert modes.most_subradiant() == 0 and modes.most_radiant() == n - 1
    # Petermann factor K ≥ 1 (Cauchy–Schwarz); round-off allowance 1e-10
    assert np.all(modes.petermann >= 1.0 - 1e-10)


@pytest.mark.parametrize("make", SYMMETRIC + NONSYMMETRIC)
def test_expansion_in_modes_reconstructs_a_state(make: MatrixCase) -> None:
    H = make()
    modes = modes_from_matrix(H)
    rng = np.random.default_rng(0)
    c = rng.standard_normal(H.shape[0]) + 1j * rng.standard_normal(H.shape[0])
    np.testing.assert_allclose(modes.vectors @ modes.expand(c), c, rtol=0,
                               atol=BIORTH_TOL * np.linalg.norm(c))


def test_degenerate_ring_modes_are_paired() -> None:
    # a ring has pairs of degenerate modes (±m); LAPACK returns any basis of each pair
    modes = solve_modes(lattices.ring(8, 0.2, "z"), FreeSpace())
    lam = modes.eigenvalues
    gaps = np.abs(lam[:, None] - lam[None, :]) + np.eye(8)
    assert np.min(gaps) < 1e-10  # the case is really degenerate
    np.testing.assert_allclose(modes.left_vectors.conj().T @ modes.vectors, np.eye(8),
                               rtol=0, atol=BIORTH_TOL)


@pytest.mark.parametrize("kind", [pytest.param(k, id=k) for k in ("real-symmetric", "hermitian")])
def test_petermann_is_one_for_a_normal_matrix(kind: str) -> None:
    # Hermitian plus a scalar is normal: orthonormal eigenvectors, K = 1
    # (Siegman, Phys. Rev. A 39, 1253 (1989), from memory)
    rng = np.random.default_rng(1)
    A = rng.standard_normal((12, 12))
    if kind == "hermitian":
        A = A + 1j * rng.standard_normal((12, 12))
    H = 0.5 * (A + A.conj().T) - 0.5j * np.eye(12)
    modes = modes_from_matrix(H)
    np.testing.assert_allclose(modes.petermann, 1.0, rtol=0, atol=1e-10)
    np.testing.assert_allclose(modes.decay_rates, 1.0, rtol=0, atol=1e-12)


def test_petermann_exceeds_one_for_a_non_normal_matrix() -> None:
    # 2×2 with eigenvectors (1, 0) and (1, −i)/√2, |c1†c2|² = 1/2: for two modes
    # K = 1/(1 − |c1†c2|²) = 2 for both (worked out by hand, no source)
    H = np.array([[0.0, 1.0], [0.0, -1j]])
    np.testing.assert_allclose(modes_from_matrix(H).petermann, 2.0, rtol=1e-12)


def test_participation_ratio_of_localised_modes_is_one() -> None:
    # a diagonal H: every mode sits on one emitter
    modes = modes_from_matrix(np.diag(-0.5j * np.arange(1, 9) + np.arange(8)))
    np.testing.assert_allclose(modes.participation_ratio, 1.0, rtol=0, atol=1e-14)


@pytest.mark.parametrize(("n", "lam"), [pytest.param(20, 0.3 - 0.5j, id="N20"),
                                         pytest.param(2, 0.0, id="N2-nilpotent")])
def test_jordan_block_warns_defective(n: int, lam: complex) -> None:
    # λ on the diagonal and 1 on the superdiagonal: a single eigenvector
    H = np.diag(np.full(n, lam)) + np.diag(np.ones(n - 1), 1)
    with pytest.warns(DefectiveMatrixWarning, match="numerically defective"):
        modes = modes_from_matrix(H)
    assert modes.n == n


@pytest.mark.parametrize("make", [SYMMETRIC[3], NONSYMMETRIC[2]])
def test_left_vectors_without_the_inverse(make: MatrixCase, monkeypatch) -> None:
    # the fallback used when V is exactly singular: each left vector scaled by its
    # own overlap, enough when no eigenvalue is degenerate (chain, random matrix)
    def singular(_):
        raise np.linalg.LinAlgError("forced for the test")

    monkeypatch.setattr(np.linalg, "inv", singular)
    H = make()
    modes = modes_from_matrix(H)
    np.testing.assert_allclose(modes.left_vectors.conj().T @ modes.vectors, np.eye(H.shape[0]),
                               rtol=0, atol=BIORTH_TOL)


def test_non_square_matrix_is_refused() -> None:
    with pytest.raises(ValueError, match="square"):
        modes_from_matrix(np.zeros((3, 4)))


def test_lifetimes() -> None:
    modes = Modes(eigenvalues=np.array([0.1 + 0.0j, 2.0 - 0.25j]),
                  vectors=np.eye(2, dtype=complex), left_vectors=np.eye(2, dtype=complex))
    assert np.isposinf(modes.lifetimes[0])  # zero rate: infinite lifetime
    assert modes.lifetimes[1] == pytest.approx(2.0, rel=1e-15)


# ---------------------------------------------------------------------------
# collective decay: exact identities and published limits


@given(em=clusters(min_n=1, max_n=10))
@settings(max_examples=60, deadline=None)
def test_decay_rates_sum_to_n(em: Emitters) -> None:
    # Σ_m Γ_m = −2 Im tr H = tr Γ = N Γ0: an exact identity (trace is basis-free);
    # eigenvalue round-off ≲ N·eps·‖H‖ (common practice, no source)
    modes = solve_modes(em, FreeSpace())
    norm_h = np.linalg.norm(coupling_matrix(em, FreeSpace()), 2)
    assert np.sum(modes.decay_rates) == pytest.approx(em.n, abs=1e-12 * em.n * norm_h)


@pytest.mark.parametrize("n", [pytest.param(n, id=f"N{n}") for n in (6, 9, 12)])
def test_dicke_limit_of_a_small_ring(n: int) -> None:
    # N z-dipoles on a ring of radius R = 0.01 λ0: one superradiant mode with NΓ0,
    # the others dark (Dicke, Phys. Rev. 93, 99 (1954)).
    # Tolerance: every pair is at α = 90° with x = k0 r ≤ 2k0R, where
    # Γ_ij = 1 − x²/5 + O(x⁴) (series of the Lehmberg closed form, worked out by
    # hand), so Γ = (all-ones) − E with 0 ≤ E_ij ≤ (2k0R)²/5 and ‖E‖ ≤ N(2k0R)²/5.
    # The ring is C_N symmetric, H is circulant and its eigenvectors (Fourier modes)
    # also diagonalise Γ, so by Weyl's inequality every decay rate lies within
    # N(2k0R)²/5 of (N, 0, …, 0): 0.038 Γ0 at N = 12.
    radius = 0.01
    em = lattices.ring(n, 2 * radius * np.sin(np.pi / n), "z")
    modes = solve_modes(em, FreeSpace())
    tol = n * (2 * K0 * radius) ** 2 / 5
    assert modes.decay_rates[-1] == pytest.approx(n, abs=tol)
    assert np.all(np.abs(modes.decay_rates[:-1]) < tol)
    # the superradiant mode is the uniform one: participation ratio N
    assert modes.participation_ratio[-1] == pytest.approx(n, rel=1e-10)
    overlap = abs(np.sum(modes.vectors[:, -1])) ** 2 / n
    assert overlap == pytest.approx(1.0, abs=1e-10)


@pytest.mark.slow
@pytest.mark.parametrize("dipole", [pytest.param("x", id="along-chain"),
                                    pytest.param("y", id="across-chain")])
def test_chain_subradiance_scales_as_n_to_minus_three(dipole: str) -> None:
    # Most subradiant rate of a chain at 0.3 λ0 falls as N⁻³ (Asenjo-Garcia et al.,
    # Phys. Rev. X 7, 031024 (2017)).  Measured with this code for N = 50, 100, 200,
    # 400: Γ_min = 2.25e-5, 2.87e-6, 3.63e-7, 4.55e-8 (x) and 3.50e-5, 4.34e-6,
    # 5.41e-7, 6.75e-8 (y); fitted slopes −2.984 (x) and −3.006 (y); local slopes
    # approach −3 with a deviation ∝ 1/N (x: −2.972, −2.986, −2.993).  Tolerance 0.05
    # on the fit and 0.02 on the last local slope: well clear of those, and far from
    # N⁻² or N⁻⁴.
    sizes = np.array([50, 100, 200, 400])
    rates = np.array([solve_modes(lattices.chain(int(n), 0.3, dipole), FreeSpace()).decay_rates[0]
                      for n in sizes])
    assert np.all(rates > 0)
    slope = np.polyfit(np.log(sizes), np.log(rates), 1)[0]
    assert slope == pytest.approx(-3.0, abs=0.05)
    local = np.diff(np.log(rates)) / np.diff(np.log(sizes))
    assert local[-1] == pytest.approx(-3.0, abs=0.02)


def _infinite_square_rate(a: float) -> float:
    # uniform-phase decay rate of an infinite square array, in-plane dipoles, a < λ0:
    # (3/4π)(λ0/a)² Γ0 (Bettles, Gardiner & Adams, Phys. Rev. Lett. 116, 103602 (2016);
    # Shahmoon et al., Phys. Rev. Lett. 118, 113601 (2017))
    return 3.0 / (4.0 * np.pi) / a**2


@pytest.mark.parametrize("a", [pytest.param(0.5, id="a0.5"), pytest.param(0.7, id="a0.7")])
def test_uniform_state_of_a_square_array_approaches_the_infinite_lattice(a: float) -> None:
    # c = 1/√N, rate c†Γc with Γ = i(H − H†).  Measured relative errors (this code):
    #   a = 0.5: 0.0114 (10×10), 0.0067 (20×20), 0.0047 (30×30)
    #   a = 0.7: 0.066  (10×10), 0.035  (20×20), 0.024  (30×30)
    # The excess is an edge effect: n·error ≈ 0.14 (a = 0.5) and 0.7 (a = 0.7),
    # roughly constant from 10 to 60 per side, i.e. error ∝ perimeter/area ∝ 1/n.
    # Tolerance at the largest size: 1/n, which bounds both prefactors.
    ref = _infinite_square_rate(a)
    errors = []
    for n in (10, 20, 30):
        H = coupling_matrix(lattices.square(n, n, a, "x"), FreeSpace())
        c = np.full(n * n, 1.0 / n)
        rate = np.real(c.conj() @ decay_operator(H) @ c)
        errors.append(abs(rate - ref) / ref)
    assert errors[0] > errors[1] > errors[2]
    assert errors[2] < 1.0 / 30


@pytest.mark.slow
@pytest.mark.parametrize("a", [pytest.param(0.5, id="a0.5"), pytest.param(0.7, id="a0.7")])
def test_uniform_mode_of_a_square_array_approaches_the_infinite_lattice(a: float) -> None:
    # The eigenmode with the largest overlap with c = 1/√N.  Measured relative errors
    # (this code): a = 0.5: 2.3e-4 (10×10), 2.8e-5 (20×20), 8.3e-6 (30×30);
    # a = 0.7: 2.5e-3, 3.2e-4, 9.5e-5; overlaps |c_m†c|² ≈ 0.68–0.73.  The error falls
    # about 8× per doubling (≈ n⁻³).  Tolerance at 20×20: 1e-3, three times the worst
    # measured value; 30×30 is left out to keep the run short.
    ref = _infinite_square_rate(a)
    errors = []
    for n in (10, 20):
        modes = solve_modes(lattices.square(n, n, a, "x"), FreeSpace())
        overlaps = np.abs(modes.vectors.conj().T @ np.full(n * n, 1.0 / n)) ** 2
        m = int(np.argmax(overlaps))
        assert overlaps[m] > 0.5  # a clear match, not one of many small overlaps
        errors.append(abs(modes.decay_rates[m] - ref) / ref)
    assert errors[0] > errors[1]
    assert errors[1] < 1e-3


@pytest.mark.parametrize("n", [pytest.param(8, id="N8"), pytest.param(13, id="N13")])
def test_degenerate_normal_matrix_has_petermann_one(n: int) -> None:
    # z dipoles on a ring: H is circulant, hence normal, with pairs of degenerate
    # modes e^{±i m φ} (group theory of the cyclic group; common practice, no source)
    em = lattices.ring(n, 0.3, "z")
    H = coupling_matrix(em, FreeSpace())
    np.testing.assert_allclose(H @ H.conj().T, H.conj().T @ H, atol=1e-12)
    modes = modes_from_matrix(H)
    assert modes.multiplicity.max() == 2
    assert np.sum(modes.multiplicity == 2) == 2 * ((n - 1) // 2)
    # K = 1 exactly for a normal matrix; 1e-10 allows round-off in V⁻¹
    np.testing.assert_allclose(modes.petermann, 1.0, atol=1e-10)
    np.testing.assert_allclose(H @ modes.vectors, modes.vectors * modes.eigenvalues, atol=1e-12)
