"""Infinite periodic arrays: Bloch Hamiltonians, band structures and the light cone.

Units: lengths in λ0 (k0 = 2π), quasi-momenta in 1/λ0, rates and shifts in Γ0.

An infinite array with emitters at r_b + R (basis sites r_b, Bravais vectors
R) and one dipole d_b per basis site has Bloch eigenmodes c_{b,R} = c_b e^{ik·R}.
Putting them into the coupling matrix of free space gives the Bloch Hamiltonian

    H_ab(k) = −(3π/k0) conj(d_a)·S_ab(k)·d_b − (i/2) δ_ab ,
    S_ab(k) = Σ'_R G(r_a − r_b − R) e^{ik·R}     (R = 0 left out when a = b),

whose eigenvalues are ω(k) − iΓ(k)/2: the collective shift and decay rate of
the band at quasi-momentum k.  S(k + G) = S(k) for every reciprocal vector G.

The lattice sums converge far too slowly to be summed term by term (the
far-field part of G falls off as 1/R).  They are done in closed form:

* chains: the sums are polylogarithms on the unit circle, written with
  Clausen functions (Bernoulli-number series, exact to rounding);
* planar lattices (with any basis in the plane): Ewald's method, splitting
  the scalar Green's function into a fast-decaying real-space part and a
  fast-decaying reciprocal-space part; the dyadic follows from derivatives
  taken analytically.  The splitting parameter is E = max(√(π/A), k0/4), the
  usual optimum √(π/A) raised at large spacing so that e^{(k0/2E)²} ≤ e⁴ keeps
  the two parts from cancelling catastrophically; both sums are cut where
  their terms fall below 1e-16 of the leading ones.

Only the plane-wave order k + G with |k + G| < k0 radiates; outside the light
cone of every order the decay rate vanishes (here to rounding, ~1e-15).

References
----------
P. P. Ewald, Ann. Phys. 369, 253 (1921) — the splitting;
K. E. Jordan, G. R. Richter and P. Sheng, J. Comput. Phys. 63, 222 (1986)
and F. Capolino, D. R. Wilton and W. A. Johnson, IEEE Trans. Antennas Propag.
53, 2977 (2005) — Ewald for the 2D-periodic 3D Helmholtz Green's function,
choice of the splitting parameter at high frequency;
C. M. Linton, SIAM Rev. 52, 630 (2010) — lattice sums for the Helmholtz
equation, polylogarithm form of 1D sums;
L. Lewin, *Polylogarithms and Associated Functions* (North Holland, 1981),
Ch. 4 — Clausen functions and their Bernoulli series;
A. Asenjo-Garcia et al., Phys. Rev. X 7, 031024 (2017) — bands of 1D and 2D
emitter arrays.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.special import erfc, erfi, zeta

from .free_space import K0
from .geometry import Emitters, dipole_vector

__all__ = [
    "Chain",
    "PlanarLattice",
    "PERIODIC_KINDS",
    "periodic_lattice",
    "clausen2",
    "clausen3",
    "polylog_unit_circle",
    "lattice_sum",
    "lattice_points",
    "bloch_hamiltonian",
    "ewald_check",
    "BandPath",
    "band_path",
    "Bands",
    "bands",
    "brillouin_zone_grid",
    "open_orders",
    "lattice_notes",
    "site_cells",
    "mode_momenta",
    "finite_on_bands",
    "specular_response",
    "probe_on_sheet",
]

#: Largest spacing (any primitive vector) the band solver accepts [λ0].
MAX_PERIOD = 5.0
_HIGH_FREQUENCY = 2.0      # E ≥ k0/(2·_HIGH_FREQUENCY): cancellation ≤ e^{4}
_CUT = 40.0                # keep terms down to e^{-40} ≈ 4e-18
_LIGHT_LINE = 1e-9         # |γ| below this (in k0) counts as on the light line

# ------------------------------------------------------------------ polylogarithms

_K = np.arange(1, 41)
# |B_2k| / (2k)! = 2 ζ(2k) / (2π)^{2k}: coefficients of the Clausen series
_CLAUSEN_C = 2.0 * zeta(2.0 * _K) / (2.0 * np.pi) ** (2 * _K) / (2 * _K * (2 * _K + 1))
_ZETA3 = float(zeta(3.0))


def _reduced(theta) -> np.ndarray:
    """θ brought into [−π, π)."""
    return np.mod(np.asarray(theta, dtype=float) + np.pi, 2.0 * np.pi) - np.pi


def clausen2(theta) -> np.ndarray:
    """Clausen function Cl₂(θ) = Σ_{n≥1} sin(nθ)/n² (Lewin 1981, Eq. 4.28)."""
    t = _reduced(theta)
    s, a = np.sign(t), np.abs(t)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_term = np.where(a > 0, a * np.log(np.where(a > 0, a, 1.0)), 0.0)
    series = np.polynomial.polynomial.polyval(a * a, np.concatenate([[0.0], _CLAUSEN_C])) * a
    return s * (a - log_term + series)


def clausen3(theta) -> np.ndarray:
    """Clausen function Cl₃(θ) = Σ_{n≥1} cos(nθ)/n³, the integral of −Cl₂."""
    a = np.abs(_reduced(theta))
    with np.errstate(divide="ignore", invalid="ignore"):
        log_term = np.where(a > 0, a * a * np.log(np.where(a > 0, a, 1.0)), 0.0)
    coeff = np.concatenate([[0.0], _CLAUSEN_C / (2 * _K + 2)])
    series = np.polynomial.polynomial.polyval(a * a, coeff) * a * a
    return _ZETA3 - 0.75 * a * a + 0.5 * log_term - series


def polylog_unit_circle(order: int, theta) -> np.ndarray:
    """Li_n(e^{iθ}) for n = 1, 2, 3 and real θ (Lewin 1981, Ch. 4).

    Li₁ diverges at θ ∈ 2πℤ; there the value is complex infinity (returned as
    nan + nan·i so that callers see it).
    """
    th = np.mod(np.asarray(theta, dtype=float), 2.0 * np.pi)
    if order == 1:
        with np.errstate(divide="ignore"):
            re = -np.log(np.abs(2.0 * np.sin(th / 2.0)))
        out = re + 1j * (np.pi - th) / 2.0
        return np.where(np.isfinite(re), out, np.nan + 1j * np.nan)
    if order == 2:
        return (np.pi ** 2 / 6.0 - th * (2.0 * np.pi - th) / 4.0) + 1j * clausen2(th)
    if order == 3:
        return clausen3(th) + 1j * (np.pi ** 2 * th / 6.0 - np.pi * th ** 2 / 4.0 + th ** 3 / 12.0)
    raise ValueError(f"order: {order} is not allowed; allowed: 1, 2, 3")


# ------------------------------------------------------------------ lattices

@dataclass(frozen=True)
class Chain:
    """An infinite chain of emitters ``spacing`` apart along ``axis``."""

    spacing: float
    axis: str = "x"

    def __post_init__(self) -> None:
        if not (np.isfinite(self.spacing) and 0.0 < self.spacing <= MAX_PERIOD):
            raise ValueError(f"spacing: {self.spacing:g} λ0 is out of range; "
                             f"allowed (0, {MAX_PERIOD:g}] λ0")
        if self.axis not in ("x", "y", "z"):
            raise ValueError(f"axis: {self.axis!r} is not allowed; allowed: x, y, z")

    kind = "chain"
    n_basis = 1
    dimension = 1

    @property
    def unit_axis(self) -> np.ndarray:
        u = np.zeros(3)
        u["xyz".index(self.axis)] = 1.0
        return u

    @property
    def reciprocal(self) -> float:
        return 2.0 * np.pi / self.spacing

    def fold(self, k) -> np.ndarray:
        """k brought into the first Brillouin zone [−π/d, π/d)."""
        b = self.reciprocal
        return np.mod(np.asarray(k, dtype=float) + b / 2.0, b) - b / 2.0


@dataclass(frozen=True)
class PlanarLattice:
    """A Bravais lattice in the xy-plane with a basis of emitters in the same plane.

    ``a1``, ``a2`` primitive vectors and ``basis`` offsets, all in λ0.
    """

    kind: str
    a1: tuple[float, float]
    a2: tuple[float, float]
    basis: tuple[tuple[float, float], ...] = ((0.0, 0.0),)
    dimension: int = field(default=2, init=False)

    def __post_init__(self) -> None:
        for name in ("a1", "a2"):
            n = float(np.hypot(*getattr(self, name)))
            if not (np.isfinite(n) and 0.0 < n <= MAX_PERIOD):
                raise ValueError(f"{name}: length {n:g} λ0 is out of range; allowed (0, {MAX_PERIOD:g}] λ0")
        if self.area < 1e-9:
            raise ValueError("a2: parallel to a1; a planar lattice needs two independent vectors")

    @property
    def n_basis(self) -> int:
        return len(self.basis)

    @property
    def area(self) -> float:
        return float(abs(self.a1[0] * self.a2[1] - self.a1[1] * self.a2[0]))

    @property
    def vectors(self) -> np.ndarray:
        return np.array([self.a1, self.a2], dtype=float)

    @property
    def reciprocal(self) -> np.ndarray:
        """Rows b1, b2 with a_i·b_j = 2π δ_ij [1/λ0]."""
        return 2.0 * np.pi * np.linalg.inv(self.vectors).T

    @property
    def basis_array(self) -> np.ndarray:
        return np.array(self.basis, dtype=float).reshape(-1, 2)

    def fold(self, k) -> np.ndarray:
        """k brought into the first Brillouin zone (the reciprocal vector of least |k + G|)."""
        k = np.asarray(k, dtype=float)
        b = self.reciprocal
        frac = k @ self.vectors.T / (2.0 * np.pi)
        base = k - np.round(frac) @ b
        shifts = np.array([(i, j) for i in (-1, 0, 1) for j in (-1, 0, 1)], dtype=float) @ b
        cand = base[..., None, :] + shifts
        best = np.argmin(np.sum(cand ** 2, axis=-1), axis=-1)
        return np.take_along_axis(cand, best[..., None, None], axis=-2)[..., 0, :]


#: Scenario lattices that have an infinite-lattice counterpart.
PERIODIC_KINDS = ("chain", "square", "rectangular", "triangular", "honeycomb", "kagome")


def periodic_lattice(kind: str, geometry: dict) -> Chain | PlanarLattice:
    """The infinite lattice behind a generated array (scenario ``geometry`` block).

    The vectors and basis are those of :mod:`physics.lattices`, so a finite
    array's sites are ``origin + cell + basis`` of this lattice.
    """
    g = geometry
    if kind == "chain":
        return Chain(float(g["spacing"]), g.get("axis", "x"))
    if kind == "square":
        a = float(g["spacing"])
        return PlanarLattice("square", (a, 0.0), (0.0, a))
    if kind == "rectangular":
        return PlanarLattice("rectangular", (float(g["spacing_x"]), 0.0), (0.0, float(g["spacing_y"])))
    if kind == "triangular":
        a = float(g["spacing"])
        return PlanarLattice("triangular", (a, 0.0), (a / 2.0, a * np.sqrt(3.0) / 2.0))
    if kind == "honeycomb":
        d = float(g["spacing"])
        a = np.sqrt(3.0) * d
        return PlanarLattice("honeycomb", (a, 0.0), (a / 2.0, a * np.sqrt(3.0) / 2.0),
                             ((0.0, 0.0), (0.0, d)))
    if kind == "kagome":
        d = float(g["spacing"])
        return PlanarLattice("kagome", (2.0 * d, 0.0), (d, d * np.sqrt(3.0)),
                             ((0.0, 0.0), (d, 0.0), (d / 2.0, d * np.sqrt(3.0) / 2.0)))
    raise ValueError(f"geometry.lattice: {kind!r} has no infinite counterpart; "
                     f"allowed: {', '.join(PERIODIC_KINDS)}")


# ------------------------------------------------------------------ chain sums

def _chain_tensor(lat: Chain, k: np.ndarray) -> np.ndarray:
    """S(k) = Σ_{j≠0} G(j d u) e^{ikjd} for a chain, (nk, 3, 3), in closed form.

    With r = |j| d, G = e^{ik0 r}/(4πr) [A I + B uu], A = 1 + i/(k0r) − 1/(k0r)²,
    B = −1 − 3i/(k0r) + 3/(k0r)², so every sum is P_n = Σ_{j≠0} e^{ik0|j|d + ikjd}/|j|^n
    = Li_n(e^{i(k0+k)d}) + Li_n(e^{i(k0−k)d}).
    """
    d = lat.spacing
    x = K0 * d
    p = [polylog_unit_circle(n, (K0 + k) * d) + polylog_unit_circle(n, (K0 - k) * d) for n in (1, 2, 3)]
    alpha = (p[0] + 1j * p[1] / x - p[2] / x ** 2) / (4.0 * np.pi * d)
    beta = (-p[0] - 3j * p[1] / x + 3.0 * p[2] / x ** 2) / (4.0 * np.pi * d)
    u = lat.unit_axis
    return alpha[:, None, None] * np.eye(3) + beta[:, None, None] * np.outer(u, u)


# ------------------------------------------------------------------ Ewald sums

def _splitting(lat: PlanarLattice) -> float:
    return max(np.sqrt(np.pi / lat.area), K0 / (2.0 * _HIGH_FREQUENCY))


def lattice_points(vectors: np.ndarray, radius: float, centre=(0.0, 0.0)) -> np.ndarray:
    """All m v1 + n v2 within ``radius`` of ``centre``."""
    v = np.asarray(vectors, dtype=float)
    # |m| ≤ radius·|row of inverse| bounds every point inside the disc
    inv = np.linalg.inv(v)
    c = np.asarray(centre, dtype=float) @ inv
    span = radius * np.linalg.norm(inv, axis=0) + 1.0
    m = np.arange(np.floor(c[0] - span[0]), np.ceil(c[0] + span[0]) + 1)
    n = np.arange(np.floor(c[1] - span[1]), np.ceil(c[1] + span[1]) + 1)
    mm, nn = np.meshgrid(m, n, indexing="ij")
    pts = np.column_stack([mm.ravel(), nn.ravel()]) @ v
    return pts[np.hypot(*(pts - centre).T) <= radius]


def _real_space_terms(R: np.ndarray, E: float) -> np.ndarray:
    """Real-space Ewald part of G at in-plane displacements R (m, 2), R ≠ 0 → (m, 3, 3)."""
    r = np.hypot(R[:, 0], R[:, 1])
    a = K0 / (2.0 * E)
    hp = np.exp(1j * K0 * r) * erfc(r * E + 1j * a)
    hm = np.exp(-1j * K0 * r) * erfc(r * E - 1j * a)
    q = np.exp(-(r * E) ** 2 + a * a)
    s = hp + hm
    s1 = 1j * K0 * (hp - hm) - 4.0 * E / np.sqrt(np.pi) * q
    s2 = -K0 ** 2 * s + 8.0 * E ** 3 * r / np.sqrt(np.pi) * q
    f = s / (8.0 * np.pi * r)
    f1 = (s1 / r - s / r ** 2) / (8.0 * np.pi)
    f2 = (s2 / r - 2.0 * s1 / r ** 2 + 2.0 * s / r ** 3) / (8.0 * np.pi)
    rhat = np.zeros((len(r), 3))
    rhat[:, :2] = R / r[:, None]
    outer = rhat[:, :, None] * rhat[:, None, :]
    eye = np.eye(3)
    return (f[:, None, None] * eye
            + (f2[:, None, None] * outer + (f1 / r)[:, None, None] * (eye - outer)) / K0 ** 2)


def _real_space_self(E: float) -> complex:
    """lim_{r→0} of the real-space part minus e^{ik0r}/(4πr), as a multiple of I.

    From the Taylor series of the screened part, F(r) = F0 + F2 r² + …, the
    dyadic limit is (F0 + 2F2/k0²) I.  Its imaginary part is −k0/(6π), which
    removes the emitter's own decay Γ0 from the lattice sum exactly.
    """
    a = K0 / (2.0 * E)
    ea = np.exp(a * a)
    one = 1.0 + 1j * erfi(a)  # 1 + erf(i a)
    b1 = -4.0 * E * ea / np.sqrt(np.pi) - 2j * K0 * one
    b3 = (((4.0 * E ** 3 + 2.0 * E * K0 ** 2) * ea + 1j * np.sqrt(np.pi) * K0 ** 3 * one)
          / (3.0 * np.sqrt(np.pi)))
    return complex((b1 + 2.0 * b3 / K0 ** 2) / (8.0 * np.pi))


@dataclass
class _Ewald:
    """Precomputed real-space sums of a planar lattice; reciprocal sums per call."""

    lat: PlanarLattice
    E: float

    def __post_init__(self) -> None:
        lat, E = self.lat, self.E
        a = K0 / (2.0 * E)
        basis = lat.basis_array
        self.rho = (basis[:, None, :] - basis[None, :, :]).reshape(-1, 2)  # pairs (a, b)
        reach = np.sqrt(_CUT + a * a) / E
        self.real = []
        for p, rho in enumerate(self.rho):
            R = lattice_points(lat.vectors, reach + np.hypot(*rho) + 1e-9, centre=(0.0, 0.0))
            disp = rho - R
            near = np.hypot(disp[:, 0], disp[:, 1]) < 1e-12
            keep = ~near & (np.hypot(disp[:, 0], disp[:, 1]) <= reach)
            terms = _real_space_terms(disp[keep], E).reshape(-1, 9)
            self.real.append((R[keep], terms, bool(near.any())))
        self.self_term = _real_space_self(E)
        span = float(np.max(np.linalg.norm(lat.reciprocal, axis=1)))
        self.G = lattice_points(lat.reciprocal, 2.0 * E * np.sqrt(_CUT) + span)

    def tensor(self, k: np.ndarray) -> np.ndarray:
        """S_ab(k) for folded k (nk, 2) → (nk, nb, nb, 3, 3)."""
        lat, E = self.lat, self.E
        nk, nb = len(k), lat.n_basis
        q = k[:, None, :] + self.G[None, :, :]                       # (nk, nG, 2)
        q2 = np.sum(q * q, axis=-1)
        gamma = np.where(q2 >= K0 ** 2, np.sqrt(np.abs(q2 - K0 ** 2)) + 0j,
                         -1j * np.sqrt(np.abs(K0 ** 2 - q2)))
        on_line = np.abs(gamma) < _LIGHT_LINE * K0
        gamma = np.where(on_line, 1.0, gamma)
        ec = erfc(gamma / (2.0 * E))
        base = ec / (2.0 * lat.area * gamma)
        zz = (gamma * ec - 2.0 * E / np.sqrt(np.pi) * np.exp(-gamma ** 2 / (4.0 * E * E))) / (2.0 * lat.area)
        comps = np.zeros(q.shape[:2] + (9,), dtype=complex)
        comps[..., 0] = base * (1.0 - q[..., 0] ** 2 / K0 ** 2)
        comps[..., 1] = comps[..., 3] = -base * q[..., 0] * q[..., 1] / K0 ** 2
        comps[..., 4] = base * (1.0 - q[..., 1] ** 2 / K0 ** 2)
        comps[..., 8] = base + zz / K0 ** 2
        out = np.empty((nk, len(self.rho), 9), dtype=complex)
        for p, rho in enumerate(self.rho):
            phase = np.exp(1j * (q @ rho))                            # (nk, nG)
            out[:, p] = np.einsum("kg,kgc->kc", phase, comps)
            R, terms, has_self = self.real[p]
            if len(R):
                out[:, p] += np.exp(1j * (k @ R.T)) @ terms
            if has_self:
                out[:, p, [0, 4, 8]] += self.self_term
        out[on_line.any(axis=1)] = np.nan
        return out.reshape(nk, nb, nb, 3, 3)


def lattice_sum(lat: Chain | PlanarLattice, k, *, splitting: float | None = None) -> np.ndarray:
    """S_ab(k) = Σ'_R G(r_a − r_b − R) e^{ik·R} [1/λ0].

    Parameters
    ----------
    lat : Chain or PlanarLattice
    k : (nk,) for a chain, (nk, 2) for a planar lattice [1/λ0]
    splitting : Ewald splitting parameter E [1/λ0]; default chosen automatically.

    Returns
    -------
    (nk, nb, nb, 3, 3) complex; NaN where some order k + G lies on the light
    line |k + G| = k0 (the sum diverges there).
    """
    if isinstance(lat, Chain):
        kk = lat.fold(np.atleast_1d(np.asarray(k, dtype=float)))
        return _chain_tensor(lat, kk)[:, None, None]
    kk = lat.fold(np.atleast_2d(np.asarray(k, dtype=float)))
    E = _splitting(lat) if splitting is None else float(splitting)
    return _Ewald(lat, E).tensor(kk)


def _dipoles(lat, dipole) -> np.ndarray:
    d = np.asarray(dipole_vector(dipole) if isinstance(dipole, str) else dipole, dtype=complex)
    if d.ndim == 1:
        d = np.tile(d, (lat.n_basis, 1))
    if d.shape != (lat.n_basis, 3):
        raise ValueError(f"dipole: needs one 3-vector or one per basis site ({lat.n_basis}); "
                         f"got shape {d.shape}")
    n = np.linalg.norm(d, axis=1)
    if np.any(n == 0):
        raise ValueError("dipole: a zero vector has no direction; allowed: any non-zero 3-vector")
    return d / n[:, None]


def bloch_hamiltonian(lat: Chain | PlanarLattice, k, dipole="x", *,
                      splitting: float | None = None) -> np.ndarray:
    """H(k) [Γ0] for every k.

    ``dipole`` is a preset name or vector (same on every site), an array of
    one vector per basis site, or ``"vector"`` for the full problem with all
    three polarisations on every site (3·nb × 3·nb, index = 3·site + axis).

    Returns (nk, n, n) complex with n = nb, or 3·nb for ``"vector"``.
    """
    S = lattice_sum(lat, k, splitting=splitting)
    nk, nb = S.shape[:2]
    if isinstance(dipole, str) and dipole == "vector":
        H = -(3.0 * np.pi / K0) * S.transpose(0, 1, 3, 2, 4).reshape(nk, 3 * nb, 3 * nb)
        return H - 0.5j * np.eye(3 * nb)
    d = _dipoles(lat, dipole)
    H = -(3.0 * np.pi / K0) * np.einsum("ai,kabij,bj->kab", np.conj(d), S, d)
    return H - 0.5j * np.eye(nb)


def ewald_check(lat: PlanarLattice, k, dipole="x") -> float:
    """Largest relative change of H(k) when the splitting parameter is raised by 60 %.

    The exact sum does not depend on the splitting; a small number (≲1e-11)
    shows that both truncated sums converged.
    """
    if isinstance(lat, Chain):
        return 0.0
    E = _splitting(lat)
    h1 = bloch_hamiltonian(lat, k, dipole, splitting=E)
    h2 = bloch_hamiltonian(lat, k, dipole, splitting=1.6 * E)
    ok = np.isfinite(h1).all(axis=(1, 2))
    if not ok.any():
        return 0.0
    scale = np.max(np.abs(h1[ok]), axis=(1, 2))
    return float(np.max(np.max(np.abs(h1[ok] - h2[ok]), axis=(1, 2)) / scale))


# ------------------------------------------------------------------ paths, maps, orders

@dataclass(frozen=True)
class BandPath:
    """Quasi-momenta along a path through the Brillouin zone.

    ``distance`` is the arc length [1/λ0]; ``ticks`` the (distance, label) of
    the high-symmetry points.
    """

    k: np.ndarray
    distance: np.ndarray
    ticks: tuple[tuple[float, str], ...]


def _corners(lat: Chain | PlanarLattice, dipole) -> list[tuple[str, np.ndarray]]:
    if isinstance(lat, Chain):
        g = lat.reciprocal / 2.0
        return [("−π/d", np.array([-g])), ("Γ", np.array([0.0])), ("π/d", np.array([g]))]
    b = lat.reciprocal
    if lat.kind in ("square", "rectangular"):
        X, Y = b[0] / 2.0, b[1] / 2.0
        pts = [("Γ", 0 * X), ("X", X), ("M" if lat.kind == "square" else "S", X + Y)]
        vector = isinstance(dipole, str) and dipole == "vector"
        d = None if vector else _dipoles(lat, dipole)[0]
        symmetric = lat.kind == "square" and (d is None or bool(np.isclose(abs(d[0]), abs(d[1]))))
        if symmetric:
            return pts + [("Γ", 0 * X)]
        return pts + [("Y", Y), ("Γ", 0 * X)]
    # hexagonal Bravais lattices (triangular, honeycomb, kagome): a1 along x
    a = float(np.hypot(*lat.a1))
    M = np.array([np.pi / a, np.pi / (np.sqrt(3.0) * a)])
    K = np.array([4.0 * np.pi / (3.0 * a), 0.0])
    return [("Γ", np.zeros(2)), ("M", M), ("K", K), ("Γ", np.zeros(2))]


def band_path(lat: Chain | PlanarLattice, n_points: int = 200, dipole="x") -> BandPath:
    """A path through the Brillouin zone with about ``n_points`` samples.

    Square: Γ–X–M–Γ (and on to Y when the dipoles break the x ↔ y symmetry);
    rectangular: Γ–X–S–Y–Γ; hexagonal lattices: Γ–M–K–Γ; chain: −π/d → π/d.
    Samples are spread in proportion to segment length; corners are included.
    """
    if not 2 <= int(n_points) <= 20000:
        raise ValueError(f"points: {n_points} is out of range; allowed 2…20000")
    corners = _corners(lat, dipole)
    pts = [c[1] for c in corners]
    lengths = np.array([np.linalg.norm(pts[i + 1] - pts[i]) for i in range(len(pts) - 1)])
    counts = np.maximum(2, np.round(n_points * lengths / lengths.sum()).astype(int))
    ks, dist, ticks, s0 = [], [], [(0.0, corners[0][0])], 0.0
    for i, n in enumerate(counts):
        t = np.linspace(0.0, 1.0, n, endpoint=(i == len(counts) - 1))
        ks.append(pts[i] + t[:, None] * (pts[i + 1] - pts[i]))
        dist.append(s0 + t * lengths[i])
        s0 += lengths[i]
        ticks.append((s0, corners[i + 1][0]))
    k = np.concatenate(ks)
    return BandPath(k[:, 0] if isinstance(lat, Chain) else k, np.concatenate(dist), tuple(ticks))


def open_orders(lat: Chain | PlanarLattice, k) -> np.ndarray:
    """Number of diffraction orders k + G inside the light cone (|k + G| < k0) for each k.

    Zero means the Bloch mode is outside the light cone: it cannot radiate.
    """
    if isinstance(lat, Chain):
        k = np.atleast_1d(np.asarray(k, dtype=float))
        m = np.arange(-int(K0 / lat.reciprocal) - 2, int(K0 / lat.reciprocal) + 3)
        return np.sum(np.abs(k[:, None] + m * lat.reciprocal) < K0, axis=1)
    k = lat.fold(np.atleast_2d(np.asarray(k, dtype=float)))
    G = lattice_points(lat.reciprocal, K0 + float(np.max(np.linalg.norm(lat.reciprocal, axis=1))))
    q = k[:, None, :] + G[None]
    return np.sum(np.sum(q * q, axis=-1) < K0 ** 2, axis=1)


def brillouin_zone_grid(lat: PlanarLattice, n: int = 81) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """An n × n grid of (kx, ky) over the box around the first Brillouin zone.

    Returns kx (n,), ky (n,) and a boolean mask (n, n) [iy, ix] of the points
    inside the zone.
    """
    if not 5 <= int(n) <= 1001:
        raise ValueError(f"grid: {n} is out of range; allowed 5…1001")
    b = lat.reciprocal
    near = np.array([(i, j) for i in (-1, 0, 1) for j in (-1, 0, 1) if (i, j) != (0, 0)], dtype=float) @ b

    def grid(half, m):
        kx = np.linspace(-half[0], half[0], m)
        ky = np.linspace(-half[1], half[1], m)
        k = np.stack(np.meshgrid(kx, ky), axis=-1)
        dist0 = np.sum(k * k, axis=-1)
        inside = np.all(np.sum((k[..., None, :] - near) ** 2, axis=-1) >= dist0[..., None] - 1e-9, axis=-1)
        return kx, ky, k, inside

    # a generous box first, then the tight box around the zone it reveals
    wide = np.full(2, float(np.max(np.linalg.norm(b, axis=1))))
    _, _, k, inside = grid(wide, 201)
    half = np.max(np.abs(k[inside]), axis=0) + 2.0 * wide / 200
    kx, ky, _, inside = grid(half, n)
    return kx, ky, inside


@dataclass(frozen=True)
class Bands:
    """Bands of an infinite lattice at a set of quasi-momenta.

    ``shift`` and ``decay_rate`` are (nk, n_bands) [Γ0], bands sorted by shift
    at each k; ``orders`` (nk,) the number of radiating diffraction orders;
    ``out_of_plane`` (nk, n_bands) the weight of z-polarisation (vector problem
    only, else None); ``vectors`` (nk, n, n_bands) Bloch eigenvectors.
    """

    k: np.ndarray
    shift: np.ndarray
    decay_rate: np.ndarray
    orders: np.ndarray
    vectors: np.ndarray
    out_of_plane: np.ndarray | None = None


def bands(lat: Chain | PlanarLattice, k, dipole="x", *, splitting: float | None = None) -> Bands:
    """Collective shifts and decay rates of every band at quasi-momenta ``k``."""
    k = np.asarray(k, dtype=float)
    H = bloch_hamiltonian(lat, k, dipole, splitting=splitting)
    n = H.shape[-1]
    good = np.isfinite(H).all(axis=(1, 2))
    vals = np.full(H.shape[:2], np.nan + 0j)
    vecs = np.full(H.shape, np.nan + 0j)
    if good.any():
        w, v = np.linalg.eig(H[good])
        order = np.argsort(w.real, axis=1)
        vals[good] = np.take_along_axis(w, order, axis=1)
        vecs[good] = np.take_along_axis(v, order[:, None, :], axis=2)
    oop = None
    if isinstance(dipole, str) and dipole == "vector":
        oop = np.sum(np.abs(vecs.reshape(len(k), n // 3, 3, n)[:, :, 2, :]) ** 2, axis=1)
    return Bands(k, vals.real, -2.0 * vals.imag, open_orders(lat, k), vecs, oop)


def lattice_notes(lat: Chain | PlanarLattice) -> list[str]:
    """Plain statements on the light cone and diffraction for this lattice."""
    if isinstance(lat, Chain):
        d = lat.spacing
        edge = np.pi / d
        notes = [f"Chain spacing d = {d:.4g} λ0; Brillouin-zone edge π/d = {edge / K0:.4g} k0."]
        if d < 0.5:
            notes.append("d < λ0/2: the zone edge lies outside the light cone; modes with |k| > k0 "
                         "are guided along the chain and do not radiate.")
        elif d < 1.0:
            notes.append("λ0/2 ≤ d < λ0: every k lies inside the light cone of some order; "
                         "the zone edge radiates.")
        else:
            notes.append("d ≥ λ0: several diffraction orders radiate even at k = 0.")
        return notes
    reach = 2.0 * np.max(np.linalg.norm(lat.reciprocal, axis=1))
    G = np.linalg.norm(lattice_points(lat.reciprocal, reach), axis=1)
    b_min = float(np.min(G[G > 0]))
    notes = [f"{lat.kind} lattice, {lat.n_basis} site(s) per cell, cell area {lat.area:.4g} λ0²."]
    if b_min > 2.0 * K0:
        notes.append("Shortest reciprocal vector > 2k0: the zone boundary lies outside the light cone; "
                     "edge modes cannot radiate.")
    elif b_min > K0:
        notes.append("k0 < |G|min ≤ 2k0: only the zeroth order radiates at k = 0, but parts of the zone "
                     "edge lie inside the light cone of a diffracted order.")
    else:
        notes.append("|G|min ≤ k0 (period ≥ λ0): diffraction orders radiate even at normal incidence.")
    return notes


# ------------------------------------------------------------------ finite arrays on the bands

def site_cells(lat: Chain | PlanarLattice, em: Emitters) -> tuple[np.ndarray, np.ndarray] | None:
    """Integer cell coordinates (N, dim) and basis index (N,) of a finite array's sites.

    Returns None when the sites are not a patch of ``lat`` (a drawn or jittered array).
    """
    pos = em.positions
    if isinstance(lat, Chain):
        ax = "xyz".index(lat.axis)
        others = np.delete(pos, ax, axis=1)
        x = (pos[:, ax] - pos[0, ax]) / lat.spacing
        if np.ptp(others, axis=0).max(initial=0.0) > 1e-9 or np.max(np.abs(x - np.round(x))) > 1e-6:
            return None
        return np.round(x).astype(int)[:, None], np.zeros(len(pos), dtype=int)
    if np.ptp(pos[:, 2]) > 1e-9:
        return None
    basis = lat.basis_array
    origin = pos[0, :2] - basis[0]
    inv = np.linalg.inv(lat.vectors)
    cells = np.zeros((len(pos), 2), dtype=int)
    sub = np.full(len(pos), -1)
    for b, off in enumerate(basis):
        frac = (pos[:, :2] - origin - off) @ inv
        hit = (np.max(np.abs(frac - np.round(frac)), axis=1) < 1e-6) & (sub < 0)
        cells[hit] = np.round(frac[hit]).astype(int)
        sub[hit] = b
    if np.any(sub < 0):
        return None
    return cells, sub


def mode_momenta(lat: Chain | PlanarLattice, em: Emitters, vectors: np.ndarray,
                 oversample: int = 4) -> dict[str, np.ndarray] | None:
    """An approximate quasi-momentum for each finite-array mode, from its Fourier transform.

    For each mode c (a column of ``vectors``), |Σ_b |Σ_{sites of b} c_s e^{−ik·R_s}|²
    is evaluated on a grid ``oversample`` times finer than the array's own
    (zero-padded FFT) and its maximum is taken.  Open arrays have standing
    waves, whose transforms peak at ±k; the result is folded to
    kx, ky ≥ 0 (a mirror image has the same band for x-, y- or z-dipoles).

    Returns None when ``em`` is not a patch of ``lat``; else a dict with
    ``k`` (M, dim) and ``weight`` (M,), the fraction of |c|² in the peak bin
    (low for modes without a clear momentum).
    """
    found = site_cells(lat, em)
    if found is None:
        return None
    cells, sub = found
    cells = cells - cells.min(axis=0)
    shape = tuple(int(s) * oversample for s in cells.max(axis=0) + 1)
    v = np.asarray(vectors)
    if v.ndim == 1:
        v = v[:, None]
    n_modes, nb = v.shape[1], lat.n_basis
    n_cells = len(np.unique(cells, axis=0))
    ks, weights = np.empty((n_modes, len(shape))), np.empty(n_modes)
    axes = tuple(range(1, len(shape) + 1))
    for start in range(0, n_modes, 64):
        block = v[:, start:start + 64]
        power = np.zeros((block.shape[1],) + shape)
        for b in range(nb):
            grid = np.zeros((block.shape[1],) + shape, dtype=complex)
            sel = sub == b
            grid[(slice(None),) + tuple(cells[sel].T)] = block[sel].T
            power += np.abs(np.fft.fftn(grid, axes=axes)) ** 2
        flat = power.reshape(len(power), -1)
        best = np.argmax(flat, axis=1)
        norm = n_cells * np.maximum(np.sum(np.abs(block) ** 2, axis=0), 1e-300)
        weights[start:start + 64] = flat[np.arange(len(flat)), best] / norm
        idx = np.array(np.unravel_index(best, shape)).T / np.array(shape)  # fractions of b_i
        frac = np.mod(idx + 0.5, 1.0) - 0.5
        if isinstance(lat, Chain):
            ks[start:start + 64] = frac * lat.reciprocal
        else:
            ks[start:start + 64] = lat.fold(frac @ lat.reciprocal)
    folded = np.abs(ks)
    return {"k": folded[:, 0] if isinstance(lat, Chain) else folded,
            "k_peak": ks[:, 0] if isinstance(lat, Chain) else ks,
            "weight": np.clip(weights, 0.0, 1.0), "cells": cells, "sublattice": sub}


def _point_group(lat: PlanarLattice, dipole) -> np.ndarray:
    """2×2 operations on k that leave the bands unchanged for this lattice and dipole.

    Mirrors kx → −kx and ky → −ky hold for all lattices here with dipoles along
    x, y or z (a mirror flips at most the dipole's sign, a gauge).  With
    out-of-plane dipoles (or all three polarisations) the full point group of
    the lattice holds: C4v for square, C6v for the hexagonal lattices.
    """
    mirrors = [np.diag([sx, sy]) for sx in (1.0, -1.0) for sy in (1.0, -1.0)]
    d = None if (isinstance(dipole, str) and dipole == "vector") else _dipoles(lat, dipole)[0]
    full = d is None or bool(np.allclose(np.abs(d), [0.0, 0.0, 1.0]))
    if not full or lat.kind == "rectangular":
        return np.array(mirrors)
    n = 4 if lat.kind == "square" else 6
    rots = [np.array([[np.cos(t), -np.sin(t)], [np.sin(t), np.cos(t)]])
            for t in 2.0 * np.pi * np.arange(n) / n]
    return np.array([r @ m for r in rots for m in mirrors])


def finite_on_bands(lat: Chain | PlanarLattice, em: Emitters, vectors: np.ndarray, dipole,
                    path: BandPath, oversample: int = 4) -> dict[str, np.ndarray] | None:
    """Place a finite array's modes on the infinite lattice's bands.

    For each mode (column of ``vectors``): its approximate quasi-momentum
    (:func:`mode_momenta`), the band whose Bloch vector at that k overlaps it
    most, that band's shift and decay rate at that k, and the nearest point
    of ``path`` (arc-length coordinate and distance from it [1/λ0]; the
    comparison is meaningful only when the distance is small).

    Returns None when ``em`` is not a patch of ``lat``.
    """
    mm = mode_momenta(lat, em, vectors, oversample)
    if mm is None:
        return None
    v = np.asarray(vectors)
    v = v[:, None] if v.ndim == 1 else v
    kp = mm["k_peak"]
    H = bloch_hamiltonian(lat, kp, dipole)
    n_modes, nb = v.shape[1], lat.n_basis
    band = np.zeros(n_modes, dtype=int)
    shift = np.full(n_modes, np.nan)
    rate = np.full(n_modes, np.nan)
    cells, sub = mm["cells"], mm["sublattice"]
    R = cells * lat.spacing if isinstance(lat, Chain) else cells @ lat.vectors
    good = np.flatnonzero(np.isfinite(H).all(axis=(1, 2)))
    if len(good):
        w, u = np.linalg.eig(H[good])                       # batched over modes
        order = np.argsort(w.real, axis=1)
        pick = np.zeros(len(good), dtype=int)
        if nb > 1:
            phase = np.exp(-1j * (R[:, :1] * kp[good][None, :] if isinstance(lat, Chain)
                                  else R @ kp[good].T))     # (N, M)
            amp = np.stack([np.sum(v[sub == b][:, good] * phase[sub == b], axis=0)
                            for b in range(nb)], axis=1)    # (M, nb)
            u = u / np.linalg.norm(u, axis=1, keepdims=True)
            pick = np.argmax(np.abs(np.einsum("mba,mb->ma", np.conj(u), amp)), axis=1)
        chosen = w[np.arange(len(good)), pick]
        band[good] = np.argmax(order == pick[:, None], axis=1)
        shift[good], rate[good] = chosen.real, -2.0 * chosen.imag
    if isinstance(lat, Chain):
        dist = np.abs(mm["k"][:, None] - np.abs(path.k)[None, :])
    else:
        images = lat.fold(np.einsum("oij,mj->moi", _point_group(lat, dipole), kp))   # (M, ops, 2)
        dist = np.min(np.linalg.norm(images[:, :, None, :] - path.k[None, None], axis=-1), axis=1)
    near = np.argmin(dist, axis=1)
    return {"k": mm["k"], "weight": mm["weight"], "band": band, "shift": shift,
            "decay_rate": rate, "path_distance": path.distance[near],
            "off_path": dist[np.arange(n_modes), near]}


# ------------------------------------------------------------------ specular reflection

def specular_response(lat: PlanarLattice, detunings, dipole="x", *, direction=(0.0, 0.0, 1.0),
                      polarization=(1.0, 0.0, 0.0)) -> dict[str, np.ndarray]:
    """Reflection and transmission of a plane wave by an infinite planar array, per unit cell.

    The plane wave E0 ε e^{ik_in·r} (|E0| = 1) with k_in = k0 n̂ drives
    the Bloch mode of k∥ = (k_in,x, k_in,y) with Ω_b = conj(d_b)·ε e^{ik∥·r_b}; the
    amplitudes solve (H(k∥) − Δ) c = −Ω.  The sheet radiates plane waves into
    each order k∥ + G with |k∥ + G| < k0 (Weyl expansion of G):

        E_G^± = −(3π/k0) (i/(2A k_zG)) Σ_b (I − K̂K̂) d_b c_b e^{−i(k∥+G)·r_b},

    K = (k∥ + G, ±k_zG).  Returned (each (D,)):

    ``r``, ``t``  specular amplitudes projected on the incident polarisation
                  (for ``r`` mirrored in the array plane; normal incidence on
                  x-dipoles at resonance gives r = −1);
    ``R``, ``T``  specular powers (all polarisations);
    ``diffracted`` power in all other open orders, both sides;
    ``orders``    number of open orders on each side.

    With no loss R + T + diffracted = 1 exactly: every photon taken out of the
    probe is re-emitted into the open orders.  Light coming from above (n̂_z < 0)
    is treated as the mirror image z → −z of light from below.
    """
    n_hat = np.asarray(direction, dtype=float)
    n_hat = n_hat / np.linalg.norm(n_hat)
    if abs(n_hat[2]) <= 1e-6:
        raise ValueError("direction: must cross the array plane (non-zero z-component)")
    if n_hat[2] < 0:
        # incidence from above is the mirror image z → −z of incidence from below
        flip = np.array([1.0, 1.0, -1.0])
        d = _dipoles(lat, dipole) * flip
        return specular_response(lat, detunings, d, direction=n_hat * flip,
                                 polarization=np.asarray(polarization, dtype=complex) * flip)
    eps = np.asarray(polarization, dtype=complex)
    eps = eps - n_hat * (n_hat @ eps)
    if np.linalg.norm(eps) < 1e-9:
        raise ValueError("polarization: parallel to the direction; a plane wave is transverse")
    eps = eps / np.linalg.norm(eps)
    k_par = K0 * n_hat[:2]
    det = np.atleast_1d(np.asarray(detunings, dtype=float))
    basis = lat.basis_array
    H = bloch_hamiltonian(lat, k_par[None, :], dipole)[0]
    if not np.isfinite(H).all():
        raise ValueError("direction: a diffraction order lies on the light line (grazing); "
                         "the sheet's response diverges there — tilt the probe slightly")
    d = _dipoles(lat, dipole)
    drive = (np.conj(d) @ eps) * np.exp(1j * basis @ k_par)
    n = H.shape[0]
    lhs = H[None] - det[:, None, None] * np.eye(n)[None]
    c = np.linalg.solve(lhs, -np.broadcast_to(drive, (len(det), n))[..., None])[..., 0]
    G = lattice_points(lat.reciprocal, 2.0 * K0)
    kz_in = K0 * n_hat[2]
    out = {"R": np.zeros(len(det)), "T": np.zeros(len(det)), "diffracted": np.zeros(len(det))}
    n_open = 0
    for g in G:
        q = k_par + g
        kz2 = K0 ** 2 - q @ q
        if kz2 <= 0:
            continue
        n_open += 1
        kz = np.sqrt(kz2)
        phase = np.exp(-1j * basis @ q)                         # (nb,)
        src = (c * phase[None, :]) @ d                           # (D, 3) Σ_b d_b c_b e^{−iq·r_b}
        specular = bool(np.allclose(g, 0.0))
        for side in (+1, -1):
            K = np.array([q[0], q[1], side * kz]) / K0
            proj = np.eye(3) - np.outer(K, K)
            field = -(3.0 * np.pi / K0) * (1j / (2.0 * lat.area * kz)) * (src @ proj.T)
            if specular and side > 0:
                field = field + eps
                out["t"] = field @ np.conj(eps)
                out["T"] = np.sum(np.abs(field) ** 2, axis=1)
            elif specular:
                mirror = eps * np.array([1.0, 1.0, -1.0])
                out["r"] = field @ np.conj(mirror)
                out["R"] = np.sum(np.abs(field) ** 2, axis=1)
            else:
                out["diffracted"] += np.sum(np.abs(field) ** 2, axis=1) * kz / kz_in
    out["orders"] = np.full(len(det), n_open)
    out["amplitudes"] = c
    return out


def probe_on_sheet(lat: Chain | PlanarLattice, dipole, probe) -> dict[str, np.ndarray]:
    """The infinite array's specular response to a scenario's probe (physics.driving.Probe).

    A plane wave keeps its direction and polarisation; a Gaussian beam is
    compared with the plane wave at normal incidence along its axis (the
    limit of a wide waist).  Adds ``k_parallel`` and the Bloch modes' shifts
    and decay rates at that in-plane momentum (``band_shift``,
    ``band_decay_rate``), whose Lorentzians make up the spectrum.
    """
    if probe.kind == "guided":
        raise ValueError("kind: a guided probe has no infinite-sheet counterpart")
    if isinstance(lat, Chain):
        raise ValueError("geometry.lattice: a chain is not a sheet; reflection of the infinite "
                         "array needs a planar lattice")
    if probe.kind == "plane_wave":
        direction = np.asarray(probe.direction, dtype=float)
    else:
        direction = np.array([0.0, 0.0, 1.0 if probe.beam_direction == "+z" else -1.0])
    direction = direction / np.linalg.norm(direction)
    out = specular_response(lat, probe.detunings, dipole, direction=direction,
                            polarization=probe.polarization_vector())
    k_par = K0 * direction[:2]
    modes = bands(lat, k_par[None, :], dipole)
    out.update(detunings=probe.detunings, k_parallel=k_par, band_shift=modes.shift[0],
               band_decay_rate=modes.decay_rate[0])
    return out
