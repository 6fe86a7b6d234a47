"""Infinite lattices: lattice sums, Bloch bands, light cone, finite vs infinite.

Each check names its outside reference beside it.
"""
import mpmath as mp
import numpy as np
import pytest

from physics import bands as B
from physics import lattices
from physics.free_space import K0, FreeSpace, greens_tensor
from physics.modes import solve_modes

LATTICES = [
    ("square", {"spacing": 0.3}),
    ("rectangular", {"spacing_x": 0.35, "spacing_y": 0.45}),
    ("triangular", {"spacing": 0.42}),
    ("honeycomb", {"spacing": 0.2}),
    ("kagome", {"spacing": 0.22}),
]


# ------------------------------------------------------------ polylogarithms

@pytest.mark.parametrize("order", [1, 2, 3])
def test_polylog_on_unit_circle_matches_mpmath(order):
    # Reference: mpmath.polylog (arbitrary-precision reference library).
    theta = np.array([1e-3, 0.1, 1.0, 2.5, np.pi, 3.3, -2.0, 5.9, 7.3, 2 * np.pi - 1e-4])
    ref = np.array([complex(mp.polylog(order, mp.exp(1j * mp.mpf(t)))) for t in theta])
    got = B.polylog_unit_circle(order, theta)
    assert np.max(np.abs(got - ref) / np.maximum(1.0, np.abs(ref))) < 1e-13


def test_clausen_functions_match_mpmath():
    # Reference: mpmath.clsin / mpmath.clcos (Clausen functions).
    theta = np.linspace(-7.0, 7.0, 57)
    assert np.max(np.abs(B.clausen2(theta) - [float(mp.clsin(2, t)) for t in theta])) < 1e-14
    assert np.max(np.abs(B.clausen3(theta) - [float(mp.clcos(3, t)) for t in theta])) < 1e-14


# ------------------------------------------------------------ chains

@pytest.mark.parametrize("d", [0.2, 0.3, 0.45])
def test_chain_decay_rates_inside_light_cone(d):
    # Closed forms for |k| < k0 and d < λ0/2 (one radiating order):
    # dipoles across the chain Γ_k = (3π/(4 k0 d))(1 + k²/k0²),
    # along the chain Γ_k = (3π/(2 k0 d))(1 − k²/k0²);
    # A. Asenjo-Garcia et al., Phys. Rev. X 7, 031024 (2017), Eqs. for the 1D chain.
    lat = B.Chain(d, "x")
    k = np.linspace(-0.98, 0.98, 23) * K0
    across = B.bands(lat, k, "y").decay_rate[:, 0]
    along = B.bands(lat, k, "x").decay_rate[:, 0]
    np.testing.assert_allclose(across, 3 * np.pi / (4 * K0 * d) * (1 + k ** 2 / K0 ** 2), rtol=1e-12)
    np.testing.assert_allclose(along, 3 * np.pi / (2 * K0 * d) * (1 - k ** 2 / K0 ** 2), rtol=1e-12)


@pytest.mark.parametrize("dipole", ["x", "y", "z", (1.0, 1.0j, 0.0)])
def test_chain_zero_decay_outside_light_cone(dipole):
    # Outside the light cone (|k| > k0, d < λ0/2) no order radiates: Γ_k = 0
    # (Phys. Rev. X 7, 031024 (2017)).
    lat = B.Chain(0.3, "x")
    k = np.linspace(1.02 * K0, np.pi / 0.3, 30)
    b = B.bands(lat, np.concatenate([k, -k]), dipole)
    assert np.all(b.orders == 0)
    assert np.max(np.abs(b.decay_rate)) < 1e-12


def _chain_direct(d, k, dipole, eps):
    """Σ_{j≠0} H_0j e^{ikjd} e^{−ε|j|d}, summed until the damping is e^{−40}."""
    n = int(40.0 / (eps * d)) + 1
    j = np.concatenate([-np.arange(1, n + 1), np.arange(1, n + 1)])
    r = np.zeros((len(j), 3))
    r[:, 0] = j * d
    G = greens_tensor(r)
    w = np.exp(1j * k * j * d - eps * np.abs(j) * d)
    dv = np.asarray(dipole, dtype=complex)
    return -(3 * np.pi / K0) * np.einsum("n,a,nab,b->", w, np.conj(dv), G, dv) - 0.5j


@pytest.mark.parametrize("dipole", [(0, 1.0, 0), (1.0, 0, 0), (0.6, 0, 0.8)])
def test_chain_closed_form_equals_damped_direct_sum(dipole):
    # Reference: the defining lattice sum, made absolutely convergent with a
    # factor e^{−ε r} and extrapolated to ε → 0 (Richardson, cubic in ε;
    # common practice, no source).  Agreement to 1e-6 relative.
    d, k = 0.37, 3.1
    eps = np.array([0.2, 0.1, 0.05, 0.025])
    vals = np.array([_chain_direct(d, k, dipole, e) for e in eps])
    ref = np.polyfit(eps, vals, 3)[-1]
    got = B.bloch_hamiltonian(B.Chain(d, "x"), [k], np.array(dipole, dtype=complex))[0, 0, 0]
    assert abs(got - ref) < 1e-6 * abs(got)


# ------------------------------------------------------------ planar lattices

@pytest.mark.parametrize("a", [0.2, 0.5, 0.8])
@pytest.mark.parametrize("dipole", ["x", "y", (1.0, 1.0j, 0.0)])
def test_square_lattice_normal_mode_decay(a, dipole):
    # Γ(k=0) = (3/4π)(λ0/a)² Γ0 for in-plane dipoles and a < λ0:
    # E. Shahmoon et al., Phys. Rev. Lett. 118, 113601 (2017).
    b = B.bands(B.periodic_lattice("square", {"spacing": a}), np.zeros((1, 2)), dipole)
    assert b.decay_rate[0, 0] == pytest.approx(3.0 / (4.0 * np.pi) / a ** 2, rel=1e-12)


def test_out_of_plane_uniform_mode_is_dark():
    # A uniform sheet of z-dipoles radiates no plane wave along z (the
    # transverse projector (I − ẑẑ) removes it; Weyl expansion, common practice).
    b = B.bands(B.periodic_lattice("square", {"spacing": 0.6}), np.zeros((1, 2)), "z")
    assert abs(b.decay_rate[0, 0]) < 1e-12


@pytest.mark.parametrize("kind,geo", LATTICES)
def test_zero_decay_outside_light_cone_2d(kind, geo):
    # Spacing < λ0/2: the whole zone boundary lies outside the light cone and
    # Bloch modes there cannot radiate (Phys. Rev. X 7, 031024 (2017)).
    lat = B.periodic_lattice(kind, geo)
    path = B.band_path(lat, 120, "vector")
    b = B.bands(lat, path.k, "vector")
    outside = b.orders == 0
    assert outside.sum() > 20
    assert np.nanmax(np.abs(b.decay_rate[outside])) < 1e-12
    inside = b.orders > 0
    assert np.nanmax(b.decay_rate[inside]) > 0.5


@pytest.mark.parametrize("kind,geo", LATTICES + [("square", {"spacing": 2.7}), ("kagome", {"spacing": 1.9})])
def test_ewald_independent_of_splitting(kind, geo):
    # The exact lattice sum does not depend on the Ewald splitting parameter
    # (P. P. Ewald, Ann. Phys. 369, 253 (1921)); the truncated sums must agree
    # to 1e-11 relative over a factor 3 in E.
    lat = B.periodic_lattice(kind, geo)
    k = B.band_path(lat, 40, "vector").k
    E = B._splitting(lat)
    ref = B.bloch_hamiltonian(lat, k, "vector", splitting=E)
    ok = np.isfinite(ref).all(axis=(1, 2))
    for factor in (0.7, 2.0):
        other = B.bloch_hamiltonian(lat, k, "vector", splitting=factor * E)
        err = np.max(np.abs(other[ok] - ref[ok]), axis=(1, 2)) / np.max(np.abs(ref[ok]), axis=(1, 2))
        assert err.max() < 1e-11
    assert B.ewald_check(lat, k, "vector") < 1e-11


def _planar_direct(lat, k, rho, eps):
    """Σ_R G(ρ − R) e^{ik·R} e^{−ε|R|} with R out to damping e^{−36}."""
    R = B.lattice_points(lat.vectors, 36.0 / eps)
    disp = rho - R
    keep = np.hypot(*disp.T) > 1e-12
    R, disp = R[keep], disp[keep]
    w = np.exp(1j * (R @ k) - eps * np.hypot(*R.T))
    total = np.zeros((3, 3), dtype=complex)
    for s in range(0, len(R), 100000):
        r3 = np.zeros((len(disp[s:s + 100000]), 3))
        r3[:, :2] = disp[s:s + 100000]
        total += np.einsum("n,nab->ab", w[s:s + 100000], greens_tensor(r3))
    return total


@pytest.mark.slow
def test_ewald_equals_damped_direct_sum_honeycomb():
    # Reference: the defining sum with a convergence factor e^{−ε|R|},
    # extrapolated quadratically to ε → 0 (common practice, no source).  The
    # direct sum converges slowly; with ε down to 0.1/λ0 it is good to ~1e-4,
    # so the stated tolerance is 5e-4 of the largest tensor element, on the
    # same-site and the neighbouring-site sums, all nine components.
    lat = B.periodic_lattice("honeycomb", {"spacing": 0.7 / np.sqrt(3.0)})
    k = np.array([1.3, 0.4])
    S = B.lattice_sum(lat, k[None])[0]
    eps = np.array([0.4, 0.2, 0.1])
    for a, b in [(0, 0), (0, 1)]:
        rho = lat.basis_array[a] - lat.basis_array[b]
        vals = np.array([_planar_direct(lat, k, rho, e) for e in eps]).reshape(3, -1)
        ref = np.linalg.solve(np.vander(eps, 3), vals)[-1].reshape(3, 3)
        assert np.max(np.abs(ref - S[a, b])) < 5e-4 * np.max(np.abs(S[a, b]))


def test_decay_inside_light_cone_is_radiation_into_open_orders():
    # Inside the light cone Γ(k) equals the power radiated into the open plane-wave
    # orders of the sheet, Γ = (3π/(A k0)) Σ_G (1/k_zG) [1 − (|K̂₊·d|² + |K̂₋·d|²)/2]
    # (Weyl expansion of the Green's function; common practice, no source).
    lat = B.periodic_lattice("rectangular", {"spacing_x": 1.3, "spacing_y": 0.8})
    d = np.array([0.6, 0.0, 0.8])
    k = np.array([[0.4, -0.9], [2.0, 1.0], [0.0, 0.0]])
    got = B.bands(lat, k, d).decay_rate[:, 0]
    G = B.lattice_points(lat.reciprocal, 3 * K0)
    for i, kk in enumerate(k):
        ref = 0.0
        for g in G:
            q = kk + g
            kz2 = K0 ** 2 - q @ q
            if kz2 <= 0:
                continue
            kz = np.sqrt(kz2)
            kp, km = np.array([*q, kz]) / K0, np.array([*q, -kz]) / K0
            ref += (1.0 - 0.5 * ((kp @ d) ** 2 + (km @ d) ** 2)) / kz
        ref *= 3 * np.pi / (lat.area * K0)
        assert got[i] == pytest.approx(ref, rel=1e-11)


def test_vector_problem_separates_in_and_out_of_plane():
    # Mirror symmetry z → −z of a planar array decouples z-polarised from
    # in-plane polarised bands (common practice, no source): the vector
    # problem's bands are the union of the z-dipole bands and in-plane bands.
    lat = B.periodic_lattice("honeycomb", {"spacing": 0.25})
    k = B.band_path(lat, 30, "vector").k
    vec = B.bands(lat, k, "vector")
    z = B.bands(lat, k, "z")
    oop = vec.out_of_plane > 0.5
    assert np.all(oop.sum(axis=1) == 2)
    np.testing.assert_allclose(np.sort(vec.shift[oop].reshape(-1, 2), axis=1), z.shift, atol=1e-10)


def test_brillouin_zone_area():
    # The first Brillouin zone has area (2π)²/A (any solid-state text, e.g.
    # N. W. Ashcroft and N. D. Mermin, Solid State Physics (1976), Ch. 5).
    for kind, geo in LATTICES:
        lat = B.periodic_lattice(kind, geo)
        kx, ky, inside = B.brillouin_zone_grid(lat, 401)
        cell = (kx[1] - kx[0]) * (ky[1] - ky[0])
        assert inside.sum() * cell == pytest.approx((2 * np.pi) ** 2 / lat.area, rel=0.02)


def test_band_path_corners_and_labels():
    sq = B.periodic_lattice("square", {"spacing": 0.5})
    p = B.band_path(sq, 100, "x")
    assert [t[1] for t in p.ticks] == ["Γ", "X", "M", "Y", "Γ"]
    assert [t[1] for t in B.band_path(sq, 100, "z").ticks] == ["Γ", "X", "M", "Γ"]
    hexa = B.band_path(B.periodic_lattice("triangular", {"spacing": 0.5}), 100, "z")
    assert [t[1] for t in hexa.ticks] == ["Γ", "M", "K", "Γ"]
    # |Γ K| = 4π/(3a) for the triangular lattice (Ashcroft & Mermin, Ch. 5)
    assert hexa.ticks[2][0] - hexa.ticks[1][0] == pytest.approx(
        np.hypot(4 * np.pi / 1.5 - np.pi / 0.5, np.pi / (np.sqrt(3) * 0.5)))
    assert np.all(np.diff(p.distance) >= 0)
    with pytest.raises(ValueError, match="points: 1 is out of range"):
        B.band_path(sq, 1)


def test_open_orders_and_notes_follow_the_spacing():
    # Orders open at k = 0 once the period passes λ0, and the zone edge enters
    # the light cone once it passes λ0/2 (grating equation; common practice).
    for a, n0, edge in [(0.45, 1, 0), (0.7, 1, 2), (1.2, 5, 6)]:
        lat = B.periodic_lattice("square", {"spacing": a})
        assert B.open_orders(lat, [[0.0, 0.0]])[0] == n0
        assert B.open_orders(lat, [[np.pi / a, 0.0]])[0] == edge
    assert "outside the light cone" in " ".join(B.lattice_notes(B.Chain(0.3)))
    assert "diffraction orders radiate" in " ".join(B.lattice_notes(B.periodic_lattice("square", {"spacing": 1.2})))


def test_refusals_name_the_field():
    with pytest.raises(ValueError, match=r"spacing: 7 λ0 is out of range; allowed \(0, 5\] λ0"):
        B.Chain(7.0)
    with pytest.raises(ValueError, match="geometry.lattice: 'ring' has no infinite counterpart"):
        B.periodic_lattice("ring", {})
    with pytest.raises(ValueError, match="dipole: a zero vector"):
        B.bands(B.Chain(0.3), [0.0], (0.0, 0.0, 0.0))


# ------------------------------------------------------------ finite arrays on the bands

def test_mode_momenta_recovers_a_bloch_wave():
    lat = B.periodic_lattice("honeycomb", {"spacing": 0.3})
    em = lattices.honeycomb(12, 10, 0.3, "z")
    cells, sub = B.site_cells(lat, em)
    assert set(sub) == {0, 1}
    k = 2 * np.pi * (np.array([3, 2]) / np.array([12, 10])) @ np.linalg.inv(lat.vectors).T
    R = cells @ lat.vectors
    c = np.exp(1j * R @ k) * np.where(sub == 0, 1.0, 0.5j)
    got = B.mode_momenta(lat, em, c[:, None])
    np.testing.assert_allclose(got["k"][0], np.abs(lat.fold(k)), atol=1e-12)
    assert got["weight"][0] == pytest.approx(1.0)
    assert B.site_cells(lat, lattices.explicit([[0, 0, 0], [0.31, 0.02, 0]])) is None


@pytest.mark.slow
def test_finite_band_centre_mode_approaches_infinite_lattice():
    # The finite array's mode at the zone centre tends to the infinite-lattice
    # value at k = 0 as the array grows (Phys. Rev. X 7, 031024 (2017); the
    # k = 0 rate is (3/4π)(λ0/a)², Phys. Rev. Lett. 118, 113601 (2017)).
    a = 0.4
    lat = B.periodic_lattice("square", {"spacing": a})
    inf = B.bands(lat, np.zeros((1, 2)), "x")
    errs = []
    for n in (8, 16, 24):
        em = lattices.square(n, n, a, "x")
        m = solve_modes(em, FreeSpace())
        mm = B.mode_momenta(lat, em, m.vectors)
        kk = np.linalg.norm(mm["k"], axis=1)
        centre = np.flatnonzero(kk == kk.min())
        i = centre[np.argmax(mm["weight"][centre])]
        errs.append((abs(m.shifts[i] - inf.shift[0, 0]), abs(m.decay_rates[i] - inf.decay_rate[0, 0])))
    errs = np.array(errs)
    assert np.all(np.diff(errs, axis=0) < 0), errs
    assert errs[-1, 0] < 0.005 and errs[-1, 1] < 1e-4


# ------------------------------------------------------------ reflection of the infinite sheet

@pytest.mark.parametrize("a", [0.3, 0.6, 0.9])
def test_infinite_sheet_is_a_perfect_mirror_on_resonance(a):
    # Normal incidence on a square sheet of x-dipoles, a < λ0: r(Δ) is a
    # Lorentzian reaching r = −1 at Δ = ω(0), with full width Γ(0) = (3/4π)(λ0/a)²
    # (E. Shahmoon et al., Phys. Rev. Lett. 118, 113601 (2017)).
    lat = B.periodic_lattice("square", {"spacing": a})
    mode = B.bands(lat, np.zeros((1, 2)), "x")
    w, g = mode.shift[0, 0], mode.decay_rate[0, 0]
    assert g == pytest.approx(3 / (4 * np.pi) / a ** 2, rel=1e-12)
    det = w + g * np.array([-1.0, -0.5, 0.0, 0.5, 1.0])
    out = B.specular_response(lat, det, "x")
    assert out["r"][2] == pytest.approx(-1.0, abs=1e-12)
    np.testing.assert_allclose(out["r"], 1j * (g / 2) / (w - det - 1j * g / 2), atol=1e-12)
    np.testing.assert_allclose(out["R"][[1, 3]], 0.5, atol=1e-12)   # half maximum at ±Γ/2
    np.testing.assert_allclose(out["R"] + out["T"], 1.0, atol=1e-12)


@pytest.mark.parametrize("kind,geo", [("square", {"spacing": 1.4}), ("honeycomb", {"spacing": 0.5}),
                                      ("kagome", {"spacing": 0.7})])
@pytest.mark.parametrize("direction,pol", [((0, 0, 1), (1, 0, 0)), ((0.3, 0.2, 0.9), (0, 1, 0)),
                                           ((0.5, 0, 0.8), (0.8, 0, -0.5))])
def test_sheet_conserves_energy_with_diffraction(kind, geo, direction, pol):
    # Lossless sheet: reflected + transmitted + diffracted power = incident power
    # (energy conservation / optical theorem; common practice, no source).
    lat = B.periodic_lattice(kind, geo)
    out = B.specular_response(lat, np.linspace(-4, 4, 9), "y", direction=direction, polarization=pol)
    np.testing.assert_allclose(out["R"] + out["T"] + out["diffracted"], 1.0, atol=1e-12)
    assert np.all(out["orders"] >= 1)


def test_finite_modes_sit_on_their_bands_ever_closer():
    # Bulk modes of a finite array are close to Bloch waves: at the momentum of
    # their Fourier peak, their shift approaches the infinite lattice's band value
    # as the array grows (finite-size convergence; Phys. Rev. X 7, 031024 (2017)).
    # Both bands of the honeycomb lattice must receive modes.
    lat = B.periodic_lattice("honeycomb", {"spacing": 0.2})
    medians = []
    for n in (8, 16):
        em = lattices.honeycomb(n, n, 0.2, "z")
        m = solve_modes(em, FreeSpace())
        placed = B.finite_on_bands(lat, em, m.vectors, "z", B.band_path(lat, 100, "z"))
        clean = placed["weight"] > 0.3
        assert set(placed["band"][clean]) == {0, 1}
        medians.append(np.median(np.abs(m.shifts - placed["shift"])[clean]))
    assert medians[1] < 0.5 * medians[0] and medians[1] < 0.01


def test_sheet_seen_from_above_is_the_mirror_image():
    # A planar array is mapped onto itself by z → −z; light from above on dipoles d
    # behaves as light from below on the mirrored dipoles (symmetry; common practice).
    lat = B.periodic_lattice("honeycomb", {"spacing": 0.5})
    det = np.linspace(-3, 3, 7)
    above = B.specular_response(lat, det, (0.6, 0.0, 0.8), direction=(0.3, 0.2, -0.9),
                                polarization=(0, 1, 0.3))
    below = B.specular_response(lat, det, (0.6, 0.0, -0.8), direction=(0.3, 0.2, 0.9),
                                polarization=(0, 1, -0.3))
    np.testing.assert_allclose(above["R"], below["R"], atol=1e-14)
    np.testing.assert_allclose(above["R"] + above["T"] + above["diffracted"], 1.0, atol=1e-12)


def test_finite_mirror_approaches_the_infinite_sheet():
    # A Gaussian beam of waist w on an L × L array tends to the infinite sheet's
    # plane-wave reflection once L ≫ w ≫ λ0 (Phys. Rev. Lett. 118, 113601 (2017),
    # which discusses the finite-size and finite-waist corrections).  Stated
    # tolerance: the peak reflection within 0.01 of the sheet's 1 for a 16 × 16
    # array at a = 0.6 λ0 and w = 2 λ0 (measured 0.0009), closer than for 8 × 8
    # (0.065, the beam's wings miss the array).
    from physics.driving import Probe, probe_scan
    from physics.free_space import FreeSpace

    a = 0.6
    lat = B.periodic_lattice("square", {"spacing": a})
    mode = B.bands(lat, np.zeros((1, 2)), "x")
    w0, g0 = mode.shift[0, 0], mode.decay_rate[0, 0]
    probe = Probe("gaussian_beam", waist=2.0, detuning_min=w0 - 3 * g0,
                  detuning_max=w0 + 3 * g0, points=121)
    sheet = B.probe_on_sheet(lat, "x", probe)
    assert np.max(sheet["R"]) == pytest.approx(1.0, abs=1e-9)
    assert sheet["band_decay_rate"][0] == pytest.approx(3 / (4 * np.pi) / a ** 2, rel=1e-12)
    gaps = []
    for n in (8, 16):
        scan = probe_scan(lattices.square(n, n, a, "x"), FreeSpace(), probe)
        gaps.append(1.0 - np.max(np.abs(scan["r"]) ** 2))
    assert gaps[1] < gaps[0] and gaps[1] < 0.01
