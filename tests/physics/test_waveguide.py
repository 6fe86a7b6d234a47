"""Tests for physics/waveguide.py: emitters coupled through one guided mode.

Reference results, recalled from memory rather than re-read: the bright mode of
emitters at (half-)guided-wavelength spacing on a bidirectional guide (Chang,
Jiang, Gorshkov, Kimble, New J. Phys. 14, 063003 (2012)); the cascaded
(triangular) coupling of a perfectly chiral guide (Pichler, Ramos, Daley, Zoller,
Phys. Rev. A 91, 042116 (2015)).  Each is also derived in a comment from the
coupling written in the module docstring; the remaining checks are exact
identities of that coupling (Γ = Γ_f u u† + Γ_b v v† + Γ' I), worked out by hand.
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from physics import (DefectiveMatrixWarning, Emitters, FreeSpace, Waveguide, coupling_matrix,
                     lattices, solve_modes)
from physics.hamiltonian import decay_operator
from physics.modes import modes_from_matrix
from physics.symmetry import OPERATIONS, find_symmetry

# The phases e^{ik|s_i − s_j|} are evaluated at k·|s| ≲ 100 rad, where the
# argument carries an absolute round-off of ~100·eps ≈ 2e-14; H entries are
# O(Γ_1D) ≤ 10 Γ0 here.  Eigenvalues of these small matrices (N ≤ 12, ‖H‖ ≲ 60)
# are backward stable to ~N·eps·‖H‖ ≈ 1e-13 (common practice, no source).
# 1e-11 absolute leaves two orders of margin on both.
EXACT_TOL = 1e-11
# Block-diagonalised against full eigenvalues: both backward stable, same bound
# as in test_symmetry.py.
EIG_TOL = 1e-11

AXES = {"x": 0, "y": 1, "z": 2}


def _on_axis(s, axis: str = "z", transverse=None, dipole="x") -> Emitters:
    """Emitters at coordinates ``s`` along ``axis``, optional transverse offsets (N, 2)."""
    s = np.asarray(s, float)
    pos = np.zeros((s.size, 3))
    a = AXES[axis]
    pos[:, a] = s
    if transverse is not None:
        others = [k for k in range(3) if k != a]
        pos[:, others] = np.asarray(transverse, float)
    return Emitters(pos, dipole)


# ---------------------------------------------------------------------------
# bright mode at (half-)guided-wavelength spacing


@pytest.mark.parametrize("n", [pytest.param(n, id=f"N{n}") for n in (2, 5, 12)])
@pytest.mark.parametrize("period", [pytest.param(0.5, id="half-guided-wavelength"),
                                    pytest.param(1.0, id="one-guided-wavelength"),
                                    pytest.param(2.5, id="five-half-wavelengths")])
@pytest.mark.parametrize("gamma_1d, gamma_loss", [pytest.param(1.0, 0.0, id="lossless"),
                                                  pytest.param(0.8, 0.35, id="lossy")])
def test_mirror_spacing_gives_one_bright_mode(n, period, gamma_1d, gamma_loss) -> None:
    # Chang, Jiang, Gorshkov, Kimble, New J. Phys. 14, 063003 (2012): with spacing a
    # multiple of half the guided wavelength the array couples to the guide only
    # through one symmetric ("bright") mode of rate N·Γ_1D + Γ'; all other modes
    # decay at Γ' alone.  Derivation in this model: e^{ik|s_i−s_j|} = (±1)^{i−j},
    # so H = −iΓ_1D/2 · u uᵀ − iΓ'/2 · I with u_j = (±1)^j: rank one plus a constant.
    k = 2 * np.pi * 1.37  # n_eff = 1.37: the guided wavelength differs from λ0
    spacing = period * 2 * np.pi / k
    env = Waveguide(gamma_1d / 2, gamma_1d / 2, gamma_loss, k_guided=k)
    em = lattices.chain(n, spacing, "y", axis="z")
    modes = solve_modes(em, env)
    rates = modes.decay_rates
    assert rates[-1] == pytest.approx(n * gamma_1d + gamma_loss, abs=EXACT_TOL)
    np.testing.assert_allclose(rates[:-1], gamma_loss, rtol=0, atol=EXACT_TOL)
    np.testing.assert_allclose(modes.shifts, 0.0, rtol=0, atol=EXACT_TOL)
    # the bright mode is the phase-matched one: |u†c|² = N for u_j = e^{iks_j}
    u = np.exp(1j * k * env.coordinates(em))
    assert abs(np.vdot(u, modes.vectors[:, -1])) ** 2 == pytest.approx(n, abs=EXACT_TOL)


def test_generic_spacing_has_no_single_bright_mode() -> None:
    # control for the test above: at a spacing that is not a multiple of half the
    # guided wavelength, u_j = e^{iks_j} and v_j = e^{−iks_j} are not parallel and
    # H acquires a coherent (real) part, so neither the rate N·Γ_1D + Γ' nor the
    # N − 1 dark modes at Γ' survive.  The margins (10 % of Γ_1D, shift 0.1 Γ0) are
    # far below what this case shows (rates and shifts of order Γ_1D), so the test
    # fails only if the spacing stops mattering.
    n, gamma_1d, gamma_loss = 6, 1.0, 0.2
    k = 2 * np.pi * 1.37
    env = Waveguide(gamma_1d / 2, gamma_1d / 2, gamma_loss, k_guided=k)
    em = lattices.chain(n, 0.3 * 2 * np.pi / k, "y", axis="z")
    modes = solve_modes(em, env)
    assert modes.decay_rates[-1] < n * gamma_1d + gamma_loss - 0.1 * gamma_1d
    assert np.sum(np.abs(modes.decay_rates - gamma_loss) < 0.1 * gamma_1d) < n - 1
    assert np.max(np.abs(modes.shifts)) > 0.1
    # what survives at any spacing: Σ rates = tr Γ = N(Γ_1D + Γ')
    assert np.sum(modes.decay_rates) == pytest.approx(n * (gamma_1d + gamma_loss), abs=EXACT_TOL)


# ---------------------------------------------------------------------------
# a perfectly chiral guide: cascaded, triangular, defective


@pytest.mark.parametrize("n", [pytest.param(n, id=f"N{n}") for n in (2, 4, 7)])
@pytest.mark.parametrize("forward", [pytest.param(True, id="forward"),
                                     pytest.param(False, id="backward")])
def test_chiral_guide_is_triangular_with_one_eigenvalue(n: int, forward: bool) -> None:
    # Γ_b = 0: emitter i is driven only by emitters upstream of it (cascaded
    # system, Pichler et al. 2015), so H ordered along the axis is strictly lower
    # triangular off the diagonal (upper for Γ_f = 0) and every eigenvalue is the
    # diagonal −i(Γ_1D + Γ')/2 (triangular matrix: common practice).
    rng = np.random.default_rng(n)
    gamma_1d, gamma_loss = 1.3, 0.4
    env = Waveguide(gamma_1d if forward else 0.0, 0.0 if forward else gamma_1d, gamma_loss,
                    k_guided=7.3, axis="x")
    s = rng.permutation(n) * 0.41 + rng.uniform(0, 0.05, n)  # shuffled order along x
    em = _on_axis(s, "x", transverse=rng.uniform(-0.5, 0.5, (n, 2)))
    H = coupling_matrix(em, env)
    order = np.argsort(s)
    Hs = H[np.ix_(order, order)]
    # the entries on the silent side are −iΓ·phase with Γ exactly 0: exactly zero
    silent = np.triu(Hs, 1) if forward else np.tril(Hs, -1)
    assert not np.any(silent)
    lam0 = -0.5j * (gamma_1d + gamma_loss)
    np.testing.assert_allclose(np.diag(Hs), lam0, rtol=0, atol=1e-15)
    # the other side is fully populated, |H_ij| = Γ_1D
    driven = np.tril(Hs, -1) if forward else np.triu(Hs, 1)
    mask = np.tri(n, k=-1, dtype=bool) if forward else np.tri(n, k=-1, dtype=bool).T
    np.testing.assert_allclose(np.abs(driven[mask]), gamma_1d, rtol=1e-14)

    # the matrix is a single Jordan-like block: both solvers say so
    with pytest.warns(DefectiveMatrixWarning, match="numerically defective"):
        modes = modes_from_matrix(H)
    with pytest.warns(DefectiveMatrixWarning, match="numerically defective"):
        solve_modes(em, env)
    # the eigenvalue sum is the trace, which is stable: N·λ0 to round-off
    assert np.sum(modes.eigenvalues) == pytest.approx(n * lam0, abs=EXACT_TOL)
    # each eigenvalue: a backward error δ ≈ eps·‖H‖ moves the eigenvalue of an
    # N×N Jordan block by up to ~(δ·‖H‖^{N−1})^{1/N} = ‖H‖·eps^{1/N}
    # (perturbation of a defective eigenvalue, common practice, from memory);
    # a factor 10 for the constant.
    norm_h = np.linalg.norm(H, 2)
    bound = 10 * norm_h * np.finfo(float).eps ** (1.0 / n)
    assert np.max(np.abs(modes.eigenvalues - lam0)) < bound


def test_partly_chiral_guide_is_not_defective() -> None:
    # control for the warning above: Γ_b > 0 couples back upstream, the matrix is
    # diagonalisable with well-separated eigenvalues, and no warning is raised
    # (pytest turns any warning into an error)
    env = Waveguide(1.0, 0.4, 0.1, k_guided=7.3)
    modes = solve_modes(lattices.chain(6, 0.41, "x", axis="z"), env)
    assert np.max(modes.petermann) < 1e3


# ---------------------------------------------------------------------------
# reciprocity


def _random_line(n: int = 7, seed: int = 3) -> Emitters:
    rng = np.random.default_rng(seed)
    s = np.sort(rng.uniform(-1.5, 1.5, n)) + 0.3 * np.arange(n)  # distinct, ≥ 0.3 apart
    return _on_axis(s, "z", transverse=rng.uniform(-0.2, 0.2, (n, 2)),
                    dipole=rng.standard_normal((n, 3)))


@pytest.mark.parametrize("gf, gb", [pytest.param(1.0, 0.0, id="chiral-forward"),
                                    pytest.param(0.0, 0.7, id="chiral-backward"),
                                    pytest.param(1.0, 0.4, id="partly-chiral")])
def test_directional_guide_is_not_reciprocal(gf: float, gb: float) -> None:
    # H_ij − H_ji = −i(Γ_f − Γ_b) e^{ik|s_i − s_j|} for s_i > s_j (module
    # docstring): |H − Hᵀ| is exactly |Γ_f − Γ_b| off the diagonal
    em = _random_line()
    H = coupling_matrix(em, Waveguide(gf, gb, 0.2, k_guided=9.1))
    off = ~np.eye(em.n, dtype=bool)
    np.testing.assert_allclose(np.abs(H - H.T)[off], abs(gf - gb), rtol=1e-13)


def test_bidirectional_guide_is_reciprocal() -> None:
    em = _random_line()
    H = coupling_matrix(em, Waveguide(0.6, 0.6, 0.2, k_guided=9.1))
    np.testing.assert_allclose(H, H.T, rtol=0, atol=1e-15)


# ---------------------------------------------------------------------------
# emitters at the same coordinate along the axis


@pytest.mark.parametrize("gf, gb", [pytest.param(0.7, 0.7, id="bidirectional"),
                                    pytest.param(1.0, 0.0, id="chiral"),
                                    pytest.param(0.2, 0.9, id="partly-chiral")])
def test_side_by_side_emitters(gf: float, gb: float) -> None:
    # two emitters at the same s, 0.4 λ0 apart across the guide: the documented
    # coupling is −i(Γ_f + Γ_b)/2 both ways (step function ½ at equal
    # coordinates); then H = −i(Γ_1D + Γ')/2 I − iΓ_1D/2 σx and the pair forms a
    # bright mode at 2Γ_1D + Γ' and a dark one at Γ' (algebra on the module
    # docstring: u = v = (1, 1) for this pair).
    gamma_loss = 0.25
    env = Waveguide(gf, gb, gamma_loss, k_guided=5.0)
    em = _on_axis([0.3, 0.3], "z", transverse=[[0.0, 0.0], [0.4, 0.0]])
    H = coupling_matrix(em, env)
    assert H[0, 1] == pytest.approx(-0.5j * (gf + gb), abs=1e-15)
    assert H[1, 0] == pytest.approx(-0.5j * (gf + gb), abs=1e-15)
    rates = solve_modes(em, env).decay_rates
    np.testing.assert_allclose(rates, [gamma_loss, 2 * (gf + gb) + gamma_loss], rtol=0,
                               atol=EXACT_TOL)


def test_coordinates_within_round_off_count_as_equal() -> None:
    # generated arrays carry ~1e-16 λ0 noise; the module treats |Δs| ≤ 1e-12 λ0 as equal
    env = Waveguide(1.0, 0.0, k_guided=5.0, axis="y")
    exact = coupling_matrix(_on_axis([0.2, 0.2], "y", [[0, 0], [0.5, 0]]), env)
    noisy = coupling_matrix(_on_axis([0.2, 0.2 + 1e-13], "y", [[0, 0], [0.5, 0]]), env)
    np.testing.assert_allclose(noisy, exact, rtol=0, atol=1e-15)
    # well above the round-off scale the chiral step applies: one side is silent
    apart = coupling_matrix(_on_axis([0.2, 0.2 + 1e-6], "y", [[0, 0], [0.5, 0]]), env)
    assert apart[0, 1] == 0 and abs(apart[1, 0]) == pytest.approx(1.0, rel=1e-9)


# ---------------------------------------------------------------------------
# the decay operator: exact rank-two form and positivity for any geometry


@st.composite
def guide_cases(draw):
    """Emitters with many equal coordinates along a random axis, and random rates.

    Each emitter has its own cell of a 0.3 λ0 grid (4 cells per axis); only the
    transverse coordinates are jittered (≤ 0.1 λ0), so coordinates along the axis
    are often exactly equal, and two emitters differ by ≥ 0.1 λ0 along some axis.
    """
    axis = draw(st.sampled_from("xyz"))
    cells = draw(st.lists(st.tuples(*[st.integers(0, 3)] * 3), min_size=1, max_size=9,
                          unique=True))
    n = len(cells)
    pos = 0.3 * np.array(cells, float)
    jitter = np.array(draw(st.lists(st.tuples(*[st.floats(-0.1, 0.1)] * 3),
                                    min_size=n, max_size=n)))
    jitter[:, AXES[axis]] = 0.0
    rate = st.one_of(st.just(0.0), st.floats(0.0, 20.0))
    env = Waveguide(draw(rate), draw(rate), draw(rate), k_guided=draw(st.floats(0.01, 60.0)),
                    axis=axis)
    amps = np.array(draw(st.lists(st.complex_numbers(max_magnitude=3.0, allow_nan=False,
                                                     allow_infinity=False),
                                  min_size=n, max_size=n)))
    return Emitters(pos + jitter), env, amps


@given(case=guide_cases())
@settings(max_examples=80, deadline=None)
def test_decay_operator_is_rank_two_plus_loss_and_positive(case) -> None:
    em, env, c = case
    H = coupling_matrix(em, env)
    gamma = decay_operator(H)
    s = env.coordinates(em)
    u = np.exp(1j * env.k_guided * s)
    v = np.conj(u)
    expected = (env.gamma_forward * np.outer(u, u.conj())
                + env.gamma_backward * np.outer(v, v.conj()) + env.gamma_loss * np.eye(em.n))
    scale = max(1.0, env.gamma_guided + env.gamma_loss)
    np.testing.assert_allclose(gamma, expected, rtol=0, atol=1e-13 * scale)
    # positive semidefinite (what the ½ step at equal coordinates guarantees);
    # ‖Γ‖ ≤ N·scale, so eigvalsh round-off ~N·eps·‖Γ‖ ≤ 81·eps·scale ≈ 2e-14·scale
    assert np.min(np.linalg.eigvalsh(gamma)) > -1e-13 * scale * em.n
    # the guided powers and the loss add up to the state's decay, c†Γc
    fwd, bwd = env.guided_power(em, c)
    total = float(np.real(np.vdot(c, gamma @ c)))
    norm2 = float(np.vdot(c, c).real)
    assert fwd >= 0 and bwd >= 0
    # quadratic forms of size ≤ N·scale·‖c‖², round-off a few eps of that
    tol = 1e-12 * scale * max(1.0, norm2) * em.n
    assert fwd + bwd + env.gamma_loss * norm2 == pytest.approx(total, abs=tol)
    assert sum(env.emitted_power(em, c).values()) == pytest.approx(total, abs=tol)


def test_guided_power_goes_forward_only_on_a_chiral_guide() -> None:
    # a single excited emitter on a perfectly chiral guide: all guided power
    # goes forward, Γ_f; the loss takes Γ'
    em = _on_axis([0.0, 0.37])
    env = Waveguide(0.9, 0.0, 0.3)
    fwd, bwd = env.guided_power(em, np.array([1.0, 0.0]))
    assert fwd == pytest.approx(0.9, rel=1e-15) and bwd == 0.0
    split = env.emitted_power(em, np.array([0.0, 1.0]))
    assert split == pytest.approx({"guided, towards +z": 0.9, "guided, towards −z": 0.0,
                                   "waveguide loss Γ'": 0.3}, rel=1e-15)


# ---------------------------------------------------------------------------
# the axis, and the symmetries the guide allows


@pytest.mark.parametrize("axis", [pytest.param(a, id=a) for a in "xyz"])
def test_only_the_coordinate_along_the_axis_matters(axis: str) -> None:
    # the coupling is scalar and depends on s_i − s_j only: the same line along
    # any axis, with any transverse offsets and dipoles, gives the same H
    rng = np.random.default_rng(8)
    s = np.array([0.0, 0.31, 0.77, 1.4, 2.05])
    env = Waveguide(0.8, 0.3, 0.1, k_guided=8.0, axis=axis)
    ref = coupling_matrix(_on_axis(s, "z"), Waveguide(0.8, 0.3, 0.1, k_guided=8.0, axis="z"))
    moved = _on_axis(s, axis, transverse=rng.uniform(-1, 1, (5, 2)),
                     dipole=rng.standard_normal((5, 3)) + 1j * rng.standard_normal((5, 3)))
    np.testing.assert_allclose(coupling_matrix(moved, env), ref, rtol=0, atol=1e-15)


@pytest.mark.parametrize("axis", [pytest.param(a, id=a) for a in "xyz"])
def test_symmetry_operations_keep_the_direction_of_a_directional_guide(axis: str) -> None:
    # an operation that reverses the axis swaps forward and backward emission:
    # allowed only when Γ_f = Γ_b.  Check the list against the sign of each
    # operation's matrix along the axis (physics.symmetry.OPERATIONS).
    keeps = {op for op, signs in OPERATIONS.items() if signs[AXES[axis]] == 1}
    assert set(Waveguide(0.5, 0.5, axis=axis).symmetry_operations) == set(OPERATIONS)
    assert set(Waveguide(0.5, 0.2, axis=axis).symmetry_operations) == keeps
    assert set(Waveguide(0.0, 1.0, axis=axis).symmetry_operations) == keeps
    assert len(keeps) == 3  # identity aside: two mirrors containing the axis, C2 about it


SYMMETRY_CASES = [
    pytest.param(lambda: lattices.chain(11, 0.37, "x", axis="z"), Waveguide(0.5, 0.5, 0.0),
                 ("mirror z",), id="chain-bidirectional"),
    pytest.param(lambda: lattices.square(5, 4, 0.3, "z"),
                 Waveguide(0.6, 0.6, 0.1, k_guided=8.0, axis="x"),
                 ("mirror x", "mirror y"), id="square-bidirectional"),
    pytest.param(lambda: lattices.square(5, 4, 0.3, "z"),
                 Waveguide(0.9, 0.3, 0.1, k_guided=8.0, axis="x"),
                 ("mirror y",), id="square-partly-chiral"),
    pytest.param(lambda: lattices.square(4, 4, 0.35, "x"),
                 Waveguide(0.2, 0.7, 0.0, k_guided=5.0, axis="y"),
                 ("mirror x",), id="square-partly-chiral-backward"),
]


@pytest.mark.parametrize("make, guide, gens", SYMMETRY_CASES)
def test_symmetry_blocks_match_the_full_matrix(make, guide: Waveguide, gens) -> None:
    em = make()
    env = FreeSpace() + guide
    used = find_symmetry(em, env.symmetry_operations)
    assert used is not None and used.generators == gens  # the blocks are really used
    blocked = solve_modes(em, env)
    full = modes_from_matrix(coupling_matrix(em, env))
    np.testing.assert_allclose(blocked.eigenvalues, full.eigenvalues, rtol=0, atol=EIG_TOL)
    assert len(set(blocked.sector)) == used.order


def test_an_axis_reversing_symmetry_would_give_wrong_modes() -> None:
    # control for the exclusion: forcing mirror x onto a partly chiral guide along
    # x splits H into blocks it does not commute with, and the eigenvalues change
    # by far more than round-off (measured: some eigenvalue of the wrong blocks
    # lies 1.6 Γ0 from every true one; 1e-3 Γ0 is the threshold used here)
    em = lattices.square(5, 4, 0.3, "z")
    env = FreeSpace() + Waveguide(0.9, 0.3, 0.1, k_guided=8.0, axis="x")
    H = coupling_matrix(em, env)
    wrong = find_symmetry(em, ("mirror x",))
    assert wrong is not None
    wrong_modes = modes_from_matrix(H, wrong)
    full = modes_from_matrix(H)
    dist = np.abs(wrong_modes.eigenvalues[:, None] - full.eigenvalues[None, :])
    assert np.max(np.min(dist, axis=1)) > 1e-3


# ---------------------------------------------------------------------------
# derived figures and validation


def test_beta_directionality_and_effective_index() -> None:
    # definitions in the class docstring: β = Γ_1D/(Γ_1D + Γ'), D = (Γ_f − Γ_b)/Γ_1D
    env = Waveguide(0.6, 0.2, 0.2, k_guided=2 * np.pi * 1.5)
    assert env.gamma_guided == pytest.approx(0.8, rel=1e-15)
    assert env.beta == pytest.approx(0.8, rel=1e-15)
    assert env.directionality == pytest.approx(0.5, rel=1e-15)
    assert env.n_eff == pytest.approx(1.5, rel=1e-15)
    assert Waveguide(0.0, 0.0, 0.0).beta == 0.0  # no decay at all: β defined as 0
    assert Waveguide(0.0, 0.0, 0.0).directionality == 0.0
    assert "chiral waveguide along z" in Waveguide(1.0, 0.0).describe()
    assert "partly chiral" in Waveguide(1.0, 0.5).describe()
    assert "bidirectional" in Waveguide(0.5, 0.5).describe()


@pytest.mark.parametrize("kwargs, match", [
    pytest.param(dict(gamma_forward=-0.1, gamma_backward=0.5),
                 r"^gamma_forward: -0\.1 is out of range; allowed 0 to 1e4 Γ0", id="negative-fwd"),
    pytest.param(dict(gamma_forward=0.5, gamma_backward=-1.0),
                 r"^gamma_backward: -1\.0 is out of range; allowed 0 to 1e4", id="negative-bwd"),
    pytest.param(dict(gamma_forward=0.5, gamma_backward=0.5, gamma_loss=-0.2),
                 r"^gamma_loss: -0\.2 is out of range; allowed 0 to 1e4", id="negative-loss"),
    pytest.param(dict(gamma_forward=float("nan"), gamma_backward=0.5),
                 r"^gamma_forward: nan is out of range", id="nan-rate"),
    pytest.param(dict(gamma_forward=2e4, gamma_backward=0.5),
                 r"^gamma_forward: 20000\.0 is out of range; allowed 0 to 1e4", id="huge-rate"),
    pytest.param(dict(gamma_forward=0.5, gamma_backward=0.5, k_guided=0.0),
                 r"^k_guided: 0\.0 is out of range; allowed 0\.01 to 1000 per λ0", id="k-zero"),
    pytest.param(dict(gamma_forward=0.5, gamma_backward=0.5, k_guided=2e3),
                 r"^k_guided: 2000\.0 is out of range; allowed 0\.01 to 1000", id="k-huge"),
    pytest.param(dict(gamma_forward=0.5, gamma_backward=0.5, axis="w"),
                 r"^axis: 'w' is not allowed; allowed: x, y, z$", id="bad-axis"),
])
def test_invalid_parameters_are_refused_naming_the_field(kwargs, match) -> None:
    with pytest.raises(ValueError, match=match):
        Waveguide(**kwargs)
