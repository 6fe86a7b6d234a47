"""Tests for physics/environment.py: sums of environments and their channel split.

Everything here is exact algebra on the definitions (H of a sum is the sum of
the parts' H; Γ = i(H − H†); for a unit-norm eigenvector c, c†Γc = −2 Im λ),
plus reciprocity (H = Hᵀ) of each channel where its Green's function is
symmetric: free space (Lehmberg, Phys. Rev. A 2, 883 (1970)), a bidirectional
guide and a cavity mode with real couplings (module docstrings of
physics/waveguide.py and physics/cavity.py, checked by hand).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from emitter_strategies import clusters
from physics import (CavityMode, Combined, Emitters, FreeSpace, ModelLimitWarning, Waveguide,
                     coupling_matrix, lattices, solve_modes, total_power)
from physics.hamiltonian import decay_operator
from physics.waveguide import guided_figures

# Sums of a few O(1–10 Γ0) matrices and quadratic forms of vectors with
# ‖c‖ = O(1): round-off is a few eps relative to the largest term; 1e-12
# relative is ample (common practice, no source).
SUM_TOL = 1e-12


def _cluster(n: int = 6, seed: int = 2, real: bool = True) -> Emitters:
    rng = np.random.default_rng(seed)
    pos = 0.45 * np.arange(n)[:, None] * np.array([0.3, 0.4, 1.0]) + rng.uniform(-0.1, 0.1, (n, 3))
    dip = rng.standard_normal((n, 3))
    if not real:
        dip = dip + 1j * rng.standard_normal((n, 3))
    return Emitters(pos, dip)


def _three() -> tuple:
    return (FreeSpace(scale=0.7), Waveguide(0.4, 0.2, 0.05, k_guided=8.0),
            CavityMode(1.0, 40.0, detuning=2.0, waist=1.5))


# ---------------------------------------------------------------------------
# building sums


def test_sum_is_a_combined_whose_coupling_is_the_sum_of_the_parts() -> None:
    fs, wg, _ = _three()
    env = fs + wg
    assert isinstance(env, Combined) and env.parts == (fs, wg)
    em = _cluster()
    H = coupling_matrix(em, env)
    parts = coupling_matrix(em, fs) + coupling_matrix(em, wg)
    np.testing.assert_allclose(H, parts, rtol=0, atol=SUM_TOL * np.max(np.abs(H)))
    # diagonals add too: one emitter's rate is 0.7 + Γ_f + Γ_b + Γ' (module docstring)
    np.testing.assert_allclose(np.diag(H), -0.5j * (0.7 + 0.65), rtol=0, atol=1e-15)


def test_sum_is_associative_and_flat() -> None:
    a, b, c = _three()
    left, right = (a + b) + c, a + (b + c)
    assert left == right == Combined((a, b, c))
    assert (a + b) + (c + a) == Combined((a, b, c, a))
    assert hash(left) == hash(right)  # frozen: usable as a cache key
    em = _cluster()
    np.testing.assert_allclose(coupling_matrix(em, left), coupling_matrix(em, right), rtol=0,
                               atol=SUM_TOL * np.max(np.abs(coupling_matrix(em, left))))


def test_describe_names_every_part() -> None:
    a, b, c = _three()
    text = (a + b + c).describe()
    assert text == " + ".join([a.describe(), b.describe(), c.describe()])
    assert "free space × 0.7" in text and "waveguide along z" in text and "cavity mode" in text


def test_only_environments_can_be_added() -> None:
    with pytest.raises(TypeError):
        FreeSpace() + 1.0
    with pytest.raises(TypeError):
        "free space" + FreeSpace()
    with pytest.raises(ValueError, match=r"^environment: a sum needs at least one part$"):
        Combined(())


@pytest.mark.parametrize("parts, expected", [
    pytest.param((FreeSpace(), Waveguide(0.5, 0.5)), set(FreeSpace.symmetry_operations),
                 id="free-space+bidirectional"),
    pytest.param((FreeSpace(), Waveguide(0.5, 0.2, axis="z")), {"mirror x", "mirror y", "C2 z"},
                 id="free-space+partly-chiral-z"),
    pytest.param((Waveguide(1.0, 0.0, axis="x"), Waveguide(1.0, 0.0, axis="z")), {"mirror y"},
                 id="chiral-x+chiral-z"),
    pytest.param((FreeSpace(), Waveguide(0.5, 0.5), CavityMode(1.0, 50.0)), set(),
                 id="with-cavity"),
])
def test_symmetry_operations_are_the_intersection(parts, expected) -> None:
    # a point operation is a symmetry of H = Σ H_k if it is one of every H_k
    env = Combined(parts)
    assert set(env.symmetry_operations) == expected
    for p in parts:
        assert set(env.symmetry_operations) <= set(p.symmetry_operations)


def test_model_notes_of_all_parts_are_collected() -> None:
    em = lattices.chain(4, 0.3)
    strong = CavityMode(5.0, 10.0)  # 2·g_coll = 20 Γ0 > 0.5·κ = 5 Γ0
    assert FreeSpace().check(em) == [] and Waveguide(1.0, 0.0).check(em) == []
    # the chain lies along x with x dipoles: a second cavity along y with
    # polarisation x couples every emitter with g = 4 (2·g_coll = 16 > 4)
    env = FreeSpace() + strong + Waveguide(1.0, 0.0) + CavityMode(4.0, 8.0, axis="y",
                                                                   polarization="x")
    notes = env.check(em)
    assert len(notes) == 2 and all(n.startswith("cavity: collective coupling") for n in notes)
    with pytest.warns(ModelLimitWarning) as record:
        coupling_matrix(em, env)
    assert len(record) == 2


def test_free_space_weight_adds_over_the_parts() -> None:
    # the far field of a state is this weight times the vacuum formula
    a, b, c = _three()
    assert (a + b + c).free_space_weight == pytest.approx(0.7, rel=1e-15)
    assert (FreeSpace() + FreeSpace(scale=0.5)).free_space_weight == pytest.approx(1.5, rel=1e-15)
    assert (b + c).free_space_weight == 0.0


def test_guided_figures_count_every_channel() -> None:
    # β = Γ_1D/(free-space weight + Σ(Γ_1D + Γ')), D = (Γ_f − Γ_b)/(Γ_f + Γ_b)
    # (docstring of physics.waveguide.guided_figures)
    fig = guided_figures(FreeSpace() + Waveguide(0.6, 0.2, 0.1))
    assert fig["beta"] == pytest.approx(0.8 / 1.9, rel=1e-15)
    assert fig["directionality"] == pytest.approx(0.5, rel=1e-15)
    assert guided_figures(FreeSpace() + CavityMode(1.0, 40.0)) is None


# ---------------------------------------------------------------------------
# reciprocity of sums


RECIPROCAL = [
    pytest.param(lambda: FreeSpace(), id="free-space"),
    pytest.param(lambda: Waveguide(0.6, 0.6, 0.1, k_guided=7.0), id="bidirectional-guide"),
    pytest.param(lambda: CavityMode(1.2, 30.0, detuning=-3.0, waist=1.0), id="cavity"),
    pytest.param(lambda: FreeSpace(0.8) + Waveguide(0.3, 0.3, axis="x")
                 + CavityMode(1.0, 40.0, axis="y", polarization="z"), id="sum-of-three"),
]


@pytest.mark.parametrize("make", RECIPROCAL)
def test_reciprocal_channels_give_a_symmetric_h(make) -> None:
    # real (linear) dipoles that differ from emitter to emitter, real cavity
    # profile: H_ij = H_ji for each channel, hence for the sum
    H = coupling_matrix(_cluster(real=True), make())
    np.testing.assert_allclose(H, H.T, rtol=0, atol=1e-14 * np.max(np.abs(H)))


@pytest.mark.parametrize("guide", [pytest.param(Waveguide(0.6, 0.0), id="chiral"),
                                   pytest.param(Waveguide(0.6, 0.3), id="partly-chiral")])
def test_a_directional_guide_breaks_reciprocity_of_the_sum(guide: Waveguide) -> None:
    # the symmetric parts cancel in H − Hᵀ, leaving the guide's antisymmetric part,
    # |H_ij − H_ji| = |Γ_f − Γ_b| off the diagonal (emitters at distinct z)
    em = _cluster(real=True)
    H = coupling_matrix(em, FreeSpace() + guide + CavityMode(1.0, 40.0))
    off = ~np.eye(em.n, dtype=bool)
    np.testing.assert_allclose(np.abs(H - H.T)[off], abs(guide.gamma_forward
                                                          - guide.gamma_backward), rtol=1e-12)


# ---------------------------------------------------------------------------
# the channel split: emitted powers add up to the decay of the state


CHANNEL_SUMS = [
    pytest.param(lambda: Combined(_three()), id="free-space+guide+cavity"),
    pytest.param(lambda: FreeSpace(scale=0.3) + Waveguide(1.0, 0.0, 0.0, axis="x"), id="chiral"),
    pytest.param(lambda: Waveguide(0.5, 0.2, 0.1, axis="z") + Waveguide(0.3, 0.3, 0.2, axis="x"),
                 id="two-guides"),
    pytest.param(lambda: CavityMode(1.0, 30.0) + CavityMode(0.7, 20.0, axis="x", polarization="y",
                                                            detuning=5.0), id="two-cavities"),
    pytest.param(lambda: FreeSpace(0.5) + FreeSpace(0.5), id="split-free-space"),
]


@pytest.mark.parametrize("make", CHANNEL_SUMS)
def test_channel_powers_add_up_to_the_decay_of_any_state(make) -> None:
    # Σ_k c†Γ_k c = c†Γc with Γ = Σ_k Γ_k, exactly; no channel may be lost when
    # two parts are of one kind
    env = make()
    em = _cluster(real=False)
    gamma = decay_operator(coupling_matrix(em, env))
    rng = np.random.default_rng(1)
    for _ in range(5):
        c = rng.standard_normal(em.n) + 1j * rng.standard_normal(em.n)
        split = env.emitted_power(em, c)
        total = float(np.vdot(c, gamma @ c).real)
        assert sum(split.values()) == pytest.approx(total, rel=SUM_TOL)
        assert all(v >= -SUM_TOL * total for v in split.values())
        # one entry per channel of every part
        assert len(split) == sum(len(p.emitted_power(em, c)) for p in env.parts)
        for p in env.parts:  # and each part's own entries are its own c†Γ_k c
            gk = decay_operator(coupling_matrix(em, p))
            assert sum(p.emitted_power(em, c).values()) == pytest.approx(
                float(np.vdot(c, gk @ c).real), rel=SUM_TOL, abs=SUM_TOL * total)


def test_repeated_channel_names_are_kept_apart() -> None:
    em = lattices.chain(3, 0.4, axis="z")
    env = CavityMode(1.0, 30.0) + FreeSpace() + CavityMode(1.0, 30.0, standing_wave=False)
    c = np.array([1.0, 0.0, 0.0])
    split = env.emitted_power(em, c)
    assert list(split) == ["cavity output", "free space", "cavity output (part 3)"]
    # emitter 0 sits at z = −0.4: u = cos(2π·0.4) for the standing wave, 1 for the uniform mode
    rate = 4.0 / 30.0
    assert split["cavity output"] == pytest.approx(rate * np.cos(0.8 * np.pi) ** 2, rel=1e-13)
    assert split["cavity output (part 3)"] == pytest.approx(rate, rel=1e-13)


@pytest.mark.parametrize("make", [
    pytest.param(lambda: lattices.square(4, 3, 0.3, "y"), id="square"),
    pytest.param(lambda: lattices.chain(7, 0.37, "x", axis="z"), id="chain"),
    pytest.param(lambda: _cluster(real=False), id="complex-cluster"),
])
def test_eigenvector_channel_powers_add_up_to_its_decay_rate(make) -> None:
    # for H c = λ c with c†c = 1: c†Γc = i(λ − λ*) = −2 Im λ, the mode's rate
    em = make()
    env = Combined(_three())
    modes = solve_modes(em, env)
    for m in range(modes.n):
        split = env.emitted_power(em, modes.vectors[:, m])
        assert sum(split.values()) == pytest.approx(modes.decay_rates[m], rel=1e-10, abs=1e-12)


def test_free_space_channel_is_the_far_field_integral() -> None:
    # an independent route: the free-space entry equals scale × the power found by
    # integrating the far field over the sphere (DESIGN.md, far-field identity;
    # the quadrature is exact to round-off, see tests/physics/test_far_field.py)
    em = _cluster(real=False)
    env = FreeSpace(scale=0.6) + Waveguide(0.5, 0.5)
    c = np.random.default_rng(3).standard_normal(em.n) + 0j
    assert env.emitted_power(em, c)["free space"] == pytest.approx(
        0.6 * total_power(em, c), rel=1e-10)


# ---------------------------------------------------------------------------
# positivity of the decay operator of any sum


@given(em=clusters(min_n=1, max_n=8),
       rates=st.tuples(*[st.floats(0.0, 10.0)] * 5),
       k=st.floats(0.01, 40.0), axis=st.sampled_from("xyz"))
@settings(max_examples=40, deadline=None)
def test_decay_operator_of_a_sum_is_positive_semidefinite(em, rates, k, axis) -> None:
    # each channel's Γ_k is positive semidefinite (a far-field integral, a
    # rank-two guided form plus Γ', a rank-one cavity form), so their sum is;
    # eigvalsh round-off ~N·eps·‖Γ‖; the norm, not the largest entry, sets the scale
    # (a rank-one guided Γ of N emitters has entries 1 but eigenvalue N); ‖Γ‖∞ bounds it
    scale, gf, gb, loss, g = rates
    env = (FreeSpace(scale=scale) + Waveguide(gf, gb, loss, k_guided=k, axis=axis)
           + CavityMode(g, 50.0 + 10.0 * g, detuning=3.0, waist=1.0, standing_wave=True))
    gamma = decay_operator(coupling_matrix(em, env))
    bound = 1e-13 * max(1.0, float(np.max(np.sum(np.abs(gamma), axis=1)))) * em.n
    np.testing.assert_allclose(gamma, gamma.conj().T, rtol=0, atol=bound)
    assert np.min(np.linalg.eigvalsh(gamma)) > -bound
