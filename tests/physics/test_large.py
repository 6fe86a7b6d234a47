"""Fast paths for large arrays agree with the plain dense solve (common practice, no source).

Reference everywhere: ``solve_modes(..., use_symmetry=False)`` — one dense
LAPACK eigen-decomposition of the whole coupling matrix.
"""
import numpy as np
import pytest

from physics import large, lattices
from physics.free_space import FreeSpace
from physics.imperfections import Imperfections, realise
from physics.modes import solve_modes

ARRAYS = {
    "square-x": lambda: lattices.square(9, 8, 0.3, "x"),
    "square-sigma": lambda: lattices.square(8, 8, 0.45, "sigma+"),
    "triangular-z": lambda: lattices.triangular(8, 7, 0.4, "z"),
    "honeycomb-y": lambda: lattices.honeycomb(5, 5, 0.25, "y"),
    "chain-z": lambda: lattices.chain(60, 0.3, "z"),
    "ring-tangential": lambda: lattices.ring(24, 0.3, "tangential"),
    "jittered": lambda: realise(lattices.square(8, 8, 0.4, "x"),
                                Imperfections((0.02, 0.02, 0.02), 0.9, seed=3), 1),
}


def _dense(em):
    return solve_modes(em, FreeSpace(), use_symmetry=False)


def _rel(a, b):
    return np.max(np.abs(a - b)) / max(1.0, np.max(np.abs(b)))


@pytest.mark.parametrize("name", ARRAYS)
def test_spectrum_alone_equals_dense_eigenvalues(name):
    em = ARRAYS[name]()
    w, sector, names = large.spectrum(em, FreeSpace())
    ref = _dense(em).eigenvalues
    # pair the two sorted lists; degenerate pairs may swap, so compare as sets
    assert len(w) == len(ref)
    d = np.abs(w[:, None] - ref[None, :]).min(axis=1)
    assert d.max() / max(1.0, np.abs(ref).max()) < 1e-9
    assert sector.max() < len(names)


@pytest.mark.parametrize("name", ARRAYS)
@pytest.mark.parametrize("which", ["subradiant", "radiant"])
def test_chosen_modes_equal_the_dense_extremes(name, which):
    em = ARRAYS[name]()
    ref = _dense(em)
    k = 7
    got = large.chosen_modes(em, FreeSpace(), k, which)
    rates = ref.decay_rates if which == "subradiant" else ref.decay_rates[::-1]
    np.testing.assert_allclose(np.sort(got.decay_rates), np.sort(rates[:k]),
                               rtol=1e-9, atol=1e-9 * max(1.0, rates.max()))
    assert got.residual.max() < 1e-8 * max(1.0, np.abs(ref.eigenvalues).max())
    # each vector lies in the dense eigenspace of its eigenvalue (degeneracies allowed)
    for j, lam in enumerate(got.eigenvalues):
        same = np.abs(ref.eigenvalues - lam) < 1e-7 * max(1.0, abs(lam))
        basis, _ = np.linalg.qr(ref.vectors[:, same])
        c = got.vectors[:, j]
        assert np.linalg.norm(basis.conj().T @ c) == pytest.approx(1.0, abs=1e-7)


def test_modes_near_a_target(monkeypatch):
    em = ARRAYS["square-x"]()
    ref = _dense(em).eigenvalues
    target = complex(0.3, -0.2)
    want = ref[np.argsort(np.abs(ref - target))[:5]]
    for limit in (large.DENSE_BLOCK_LIMIT, 10):  # dense blocks, then shift-invert Arnoldi
        monkeypatch.setattr(large, "DENSE_BLOCK_LIMIT", limit)
        got = large.chosen_modes(em, FreeSpace(), 5, "near", target)
        np.testing.assert_allclose(np.sort_complex(got.eigenvalues), np.sort_complex(want),
                                   atol=1e-9)
    assert got.method == "shift-invert Arnoldi"


def test_arnoldi_for_blocks_beyond_the_dense_limit(monkeypatch):
    em = ARRAYS["jittered"]()  # no symmetry: one block of N
    monkeypatch.setattr(large, "DENSE_BLOCK_LIMIT", 20)
    ref = _dense(em)
    got = large.chosen_modes(em, FreeSpace(), 4, "radiant")
    assert got.method == "Arnoldi"
    np.testing.assert_allclose(np.sort(got.decay_rates), np.sort(ref.decay_rates[-4:]), rtol=1e-9)


def test_refusals_name_the_field_and_the_numbers(monkeypatch):
    em = ARRAYS["square-x"]()
    with pytest.raises(ValueError, match=r"modes: 0 is out of range; allowed 1 to 72"):
        large.chosen_modes(em, FreeSpace(), 0)
    with pytest.raises(ValueError, match="which: 'dark' is not allowed"):
        large.chosen_modes(em, FreeSpace(), 3, "dark")
    with pytest.raises(ValueError, match="target: 'near' needs"):
        large.chosen_modes(em, FreeSpace(), 3, "near")
    monkeypatch.setattr(large, "free_memory", lambda: 10_000)
    with pytest.raises(large.MemoryRequestError, match=r"N = 72 emitters: .* GiB are free"):
        large.chosen_modes(em, FreeSpace(), 3)


def test_participation_ratio_of_chosen_modes_matches_the_dense_one():
    em = ARRAYS["jittered"]()  # no degeneracies: each eigenvector is unique up to phase
    ref = _dense(em)
    got = large.chosen_modes(em, FreeSpace(), 5, "subradiant")
    np.testing.assert_allclose(got.participation_ratio, ref.participation_ratio[:5], rtol=1e-8)


@pytest.mark.parametrize("kind", ["jittered", "chiral-guide-partly", "ring"])
def test_one_mode_matches_the_full_decomposition(kind):
    """Inverse iteration from a known eigenvalue gives that mode's vector, left vector,
    participation ratio and Petermann factor as the dense solve does (LAPACK via numpy;
    Golub & Van Loan, Matrix Computations (2013) §7.6.1; common practice, no source)."""
    from physics import FreeSpace, coupling_matrix, lattices, solve_modes
    from physics.geometry import Emitters
    from physics.large import one_mode
    from physics.waveguide import Waveguide

    rng = np.random.default_rng(3)
    if kind == "jittered":
        em0 = lattices.square(nx=12, ny=12, spacing=0.3, dipole="x")
        em = Emitters(positions=em0.positions + rng.normal(scale=0.02, size=(144, 3)),
                      dipoles=em0.dipoles[0])
        env = FreeSpace()
    elif kind == "chiral-guide-partly":
        em = lattices.chain(n=20, spacing=0.37, dipole="z", axis="x")
        env = FreeSpace() + Waveguide(0.3, 0.1, k_guided=7.0, axis="x")
    else:  # degenerate pairs: any vector of the pair's space is valid
        em = lattices.ring(n=15, spacing=0.3, dipole="tangential")
        env = FreeSpace()
    H = coupling_matrix(em, env)
    modes = solve_modes(em, env, use_symmetry=False)
    tol = 1e-9  # inverse iteration converges to rounding in three steps here
    for m in (0, modes.n // 2, modes.n - 1):
        one = one_mode(H, modes.eigenvalues[m])
        assert abs(one.eigenvalue - modes.eigenvalues[m]) < tol * max(1.0, abs(one.eigenvalue))
        assert one.residual < tol * np.linalg.norm(H)
        assert abs(np.vdot(one.left, one.vector) - 1.0) < tol
        if modes.multiplicity[m] == 1:  # a simple eigenvalue: the same vector up to phase
            assert abs(abs(np.vdot(modes.vectors[:, m], one.vector)) - 1.0) < tol
            assert one.participation_ratio == pytest.approx(modes.participation_ratio[m],
                                                            rel=1e-8)
            assert one.petermann == pytest.approx(modes.petermann[m], rel=1e-6)
        else:  # inside the degenerate space of mode m
            space = modes.vectors[:, modes.cluster == modes.cluster[m]]
            coeff = np.linalg.lstsq(space, one.vector, rcond=None)[0]
            assert np.linalg.norm(space @ coeff - one.vector) < 1e-8
