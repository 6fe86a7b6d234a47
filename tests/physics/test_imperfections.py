"""Imperfect arrays: vacancies and jitter, reproducible realisations, scenario blocks."""
import numpy as np
import pytest

from physics import lattices
from physics import scenario as scn
from physics.free_space import FreeSpace
from physics.imperfections import Imperfections, realise
from physics.modes import solve_modes


def test_perfect_array_is_returned_unchanged_and_solves_identically():
    # Zero jitter and full filling must reproduce the clean result exactly
    # (issue requirement; no source needed).
    em = lattices.square(6, 6, 0.3, "x")
    same = realise(em, Imperfections((0.0, 0.0, 0.0), 1.0, seed=5), 3)
    assert same is em
    a, b = solve_modes(em, FreeSpace()), solve_modes(same, FreeSpace())
    assert np.array_equal(a.decay_rates, b.decay_rates) and np.array_equal(a.shifts, b.shifts)


def test_realisations_are_reproducible_and_distinct():
    em = lattices.square(8, 8, 0.5, "x")
    imp = Imperfections((0.02, 0.02, 0.05), 0.8, seed=11)
    assert realise(em, imp, 4) == realise(em, imp, 4)
    assert realise(em, imp, 4) != realise(em, imp, 5)
    assert realise(em, imp, 4) != realise(em, Imperfections((0.02, 0.02, 0.05), 0.8, seed=12), 4)


def test_vacancy_and_jitter_statistics():
    # Kept sites ~ Binomial(N, f), displacements ~ Normal(0, σ) per axis
    # (definitions of the model; tolerances at 5 standard errors, common practice).
    em = lattices.square(40, 40, 0.5, "z")
    sigma = np.array([0.01, 0.02, 0.04])
    kept, disp = [], []
    for i in range(10):
        r = realise(em, Imperfections(tuple(sigma), 0.7, seed=3), i)
        kept.append(r.n)
    n = em.n
    frac = np.sum(kept) / (10 * n)
    assert abs(frac - 0.7) < 5 * np.sqrt(0.7 * 0.3 / (10 * n))
    r = realise(em, Imperfections(tuple(sigma), 1.0, seed=3), 0)
    disp = r.positions - em.positions
    std = disp.std(axis=0)
    np.testing.assert_allclose(std, sigma, rtol=5 / np.sqrt(2 * n))
    assert np.all(np.abs(disp.mean(axis=0)) < 5 * sigma / np.sqrt(n))


def test_common_random_numbers_across_a_jitter_sweep():
    # The same (seed, realisation) scales the same noise: twice the jitter gives
    # exactly twice the displacements (design choice, see physics.imperfections).
    em = lattices.chain(30, 0.3, "x")
    one = realise(em, Imperfections((0.01, 0.01, 0.01), 0.9, seed=2), 7)
    two = realise(em, Imperfections((0.02, 0.02, 0.02), 0.9, seed=2), 7)
    assert one.n == two.n
    base = realise(em, Imperfections((1e-12, 1e-12, 1e-12), 0.9, seed=2), 7).positions
    np.testing.assert_allclose(two.positions - base, 2 * (one.positions - base), atol=1e-12)


@pytest.mark.parametrize("kwargs, words", [
    (dict(jitter=(2.0, 0.0, 0.0)), "jitter: (2.0, 0.0, 0.0) is out of range; allowed three values from 0 to 1 λ0"),
    (dict(filling=0.0), "filling: 0.0 is out of range; allowed (0, 1]"),
    (dict(seed=-1), "seed: -1 is out of range"),
])
def test_refusals_name_the_field(kwargs, words):
    with pytest.raises(ValueError, match=words.replace("(", r"\(").replace(")", r"\)")
                       .replace("[", r"\[").replace("]", r"\]")):
        Imperfections(**kwargs)


def test_no_emitter_left_is_refused():
    em = lattices.chain(2, 0.3)
    with pytest.raises(ValueError, match="imperfections.filling: realisation"):
        for i in range(200):
            realise(em, Imperfections(filling=0.01, seed=1), i)


def _doc(**imperfections):
    d = scn.to_dict(scn.load("scenarios/mirror_square_16x16.json"))
    d["imperfections"] = imperfections
    return d


def test_scenario_block_round_trips_and_realises():
    sc = scn.from_dict(_doc(seed=7, jitter_nm=[30.0, 30.0, 60.0], filling=0.9, realisation=2))
    assert sc.emitters().n < 256
    again = scn.loads(scn.dumps(sc))
    assert again == sc and again.emitters() == sc.emitters()
    assert sc.with_realisation(3).emitters() != sc.emitters()
    # nm are converted with the scenario's wavelength (780.241 nm for Rb87 D2, see units.py)
    model = sc.imperfections_model()
    assert model.jitter[2] == pytest.approx(60.0 / sc.transition.wavelength_nm)


@pytest.mark.parametrize("block, words", [
    (dict(jitter_nm=[30.0, 30.0, 60.0]), "imperfections.seed: required with jitter or vacancies"),
    (dict(seed=1, jitter_nm=[1.0, 1.0, 1.0], jitter_lambda0=[0.0, 0.0, 0.0]),
     "imperfections: give the jitter either as 'jitter_lambda0' or as 'jitter_nm', not both"),
    (dict(seed=1, filling=0.0), "imperfections.filling: 0.0 is out of range"),
    (dict(seed=1, jitter_lambda0=[2.0, 0.0, 0.0]), "imperfections.jitter_lambda0[0]: 2.0 is out of range"),
])
def test_scenario_refusals(block, words):
    with pytest.raises(scn.ScenarioError) as info:
        scn.from_dict(_doc(**block))
    assert words in str(info.value)


def test_version_3_files_still_open():
    d = _doc(seed=3)
    d["version"] = 3
    sc = scn.from_dict(d)
    assert sc.seed == 3 and sc.imperfections == () and scn.to_dict(sc)["version"] == scn.VERSION
