"""Guided probes and time evolution without eigenvectors (also for defective matrices)."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from physics import Emitters, FreeSpace, Waveguide, coupling_matrix, lattices
from physics.driving import steady_states
from physics.dynamics import evolve
from physics.waveguide import guided_response

DETUNINGS = np.linspace(-4.0, 4.0, 41)
# triangular solves and Taylor-series exponentials: round-off only
TIGHT = 1e-11


def _probe(em, wg, env=None):
    H = coupling_matrix(em, env or wg)
    return wg.transmission(em, steady_states(H, wg.probe(em), DETUNINGS))


@pytest.mark.parametrize("loss", [pytest.param(0.0, id="lossless"), pytest.param(0.4, id="lossy")])
def test_single_emitter_on_a_chiral_guide(loss):
    """t(Δ) = (Δ − i(Γ_f − Γ')/2)/(Δ + i(Γ_f + Γ')/2), no reflection.

    Single emitter coupled to a one-way waveguide: J.-T. Shen and S. Fan,
    Opt. Lett. 30, 2001 (2005), written here in this project's sign
    convention (from memory, re-derived from (H − Δ)c = −Ω).
    """
    wg = Waveguide(1.0, 0.0, loss, axis="x")
    t, r = _probe(Emitters([[0.0, 0.0, 0.0]], "x"), wg)
    want = (DETUNINGS - 0.5j * (1.0 - loss)) / (DETUNINGS + 0.5j * (1.0 + loss))
    np.testing.assert_allclose(t, want, atol=TIGHT)
    np.testing.assert_allclose(r, 0.0, atol=TIGHT)
    if loss == 0.0:
        np.testing.assert_allclose(np.abs(t), 1.0, atol=TIGHT)  # only a phase: lossless


def test_cascaded_emitters_multiply_their_transmissions():
    """On a one-way guide every emitter sees only the field from upstream, so the chain
    transmits t_1(Δ)^N whatever the spacing (cascaded systems; common practice, no source)."""
    wg = Waveguide(0.8, 0.0, 0.3, k_guided=7.3, axis="x")
    em = lattices.chain(7, 0.37, "x")
    t, _ = _probe(em, wg)
    t1 = (DETUNINGS - 0.5j * (0.8 - 0.3)) / (DETUNINGS + 0.5j * (0.8 + 0.3))
    np.testing.assert_allclose(t, t1 ** 7, atol=1e-10)


def test_single_emitter_on_a_bidirectional_guide_is_a_mirror_on_resonance():
    """Lossless, Γ_f = Γ_b: r(0) = −1, t(0) = 0 (Shen & Fan, Opt. Lett. 30, 2001 (2005);
    Chang et al., New J. Phys. 14, 063003 (2012)); |t|² + |r|² = 1 at every detuning."""
    wg = Waveguide(0.5, 0.5, 0.0, axis="z")
    t, r = _probe(Emitters([[0.0, 0.0, 0.0]], "z"), wg)
    mid = len(DETUNINGS) // 2
    assert abs(t[mid]) < TIGHT and abs(r[mid] + 1.0) < TIGHT
    np.testing.assert_allclose(np.abs(t) ** 2 + np.abs(r) ** 2, 1.0, atol=TIGHT)


def test_steady_states_solve_the_linear_response_equation():
    """(H − Δ)c = −Ω holds for each detuning (the defining equation; design notes)."""
    em = lattices.square(4, 4, 0.3, "sigma+")
    env = FreeSpace() + Waveguide(0.3, 0.1, axis="x")
    H = coupling_matrix(em, env)
    drive = np.random.default_rng(1).normal(size=em.n) + 0j
    c = steady_states(H, drive, DETUNINGS)
    for k, delta in enumerate(DETUNINGS):
        np.testing.assert_allclose((H - delta * np.eye(em.n)) @ c[k], -drive, atol=1e-10)


def test_evolution_matches_the_dense_exponential():
    """c(t) = e^{−iHt} c(0), compared with scipy.linalg.expm (reference library)."""
    em = lattices.ring(8, 0.3, "z")
    H = coupling_matrix(em, FreeSpace())
    c0 = np.random.default_rng(2).normal(size=8) + 0j
    times, c = evolve(H, c0, 3.0, 7)
    for k, t in enumerate(times):
        np.testing.assert_allclose(c[k], scipy.linalg.expm(-1j * H * t) @ c0, atol=1e-10)


def test_two_cascaded_emitters_follow_the_jordan_block_solution():
    """Perfectly chiral, lossless, Γ_f = Γ0: exciting the upstream emitter gives
    |c_2(t)| = Γ t e^{−Γt/2} downstream (solution of the 2×2 Jordan block;
    common practice, no source) — the case where eigenvectors fail."""
    wg = Waveguide(1.0, 0.0, 0.0, k_guided=5.0, axis="x")
    em = lattices.chain(2, 0.4, "x")
    H = coupling_matrix(em, wg)
    up = int(np.argmin(wg.coordinates(em)))
    c0 = np.zeros(2, dtype=complex)
    c0[up] = 1.0
    times, c = evolve(H, c0, 6.0, 13)
    np.testing.assert_allclose(np.abs(c[:, up]), np.exp(-times / 2), atol=TIGHT)
    np.testing.assert_allclose(np.abs(c[:, 1 - up]), times * np.exp(-times / 2), atol=TIGHT)


def test_guided_response_bundles_both_and_needs_a_waveguide():
    em = lattices.chain(5, 0.3, "x")
    assert guided_response(em, FreeSpace(), DETUNINGS, 5.0) is None
    out = guided_response(em, FreeSpace() + Waveguide(0.2, 0.2, axis="x"), DETUNINGS, 5.0, 11)
    assert out["t"].shape == DETUNINGS.shape and out["population"].shape == (11,)
    assert out["population"][0] == pytest.approx(1.0, abs=1e-14)
    assert np.all(np.diff(out["population"]) <= 1e-12)  # only losses: never grows


@pytest.mark.parametrize("kwargs, words", [
    pytest.param({"t_max": 0.0}, "t_max", id="t-max"),
    pytest.param({"t_max": 1.0, "num": 1}, "num", id="num"),
])
def test_evolve_refuses_bad_times(kwargs, words):
    with pytest.raises(ValueError, match=words):
        evolve(np.eye(2), np.ones(2), **kwargs)
