"""Far-field emission of an amplitude vector in free space.

dP/dΩ(n̂) = (3Γ0/8π) |Σ_j c_j (I − n̂n̂)·d_j e^{−ik0 n̂·r_j}|²   [Γ0 per steradian]

This is the input–output relation (field radiated through the far-zone
Green's function) with the emitted power counted in photons per 1/Γ0.  For a
unit-norm amplitude vector its integral over the sphere equals c†Γc with
Γ = i(H − H†), so for an eigenvector it is that mode's decay rate exactly.

References
----------
J. D. Jackson, *Classical Electrodynamics*, 3rd ed. (Wiley, 1999), Sec. 9.2
(electric dipole radiation); A. Asenjo-Garcia et al., Phys. Rev. X 7, 031024
(2017) (input–output relation for emitter arrays).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .free_space import K0
from .geometry import Emitters, grid_indices

__all__ = [
    "far_field_power",
    "sphere_grid",
    "cap_grid",
    "total_power",
    "collected_fraction",
    "angular_order",
    "AngularGrid",
    "directions_from_angles",
    "hemisphere_directions",
    "far_field_image",
    "lens_fraction",
]

_PREF = 3.0 / (8.0 * np.pi)
_CHUNK_ELEMENTS = 4_000_000  # directions × emitters per block (64 MB of complex)


def directions_from_angles(theta: np.ndarray, phi: np.ndarray) -> np.ndarray:
    """Unit vectors (..., 3) for polar angle θ from +z and azimuth φ [rad]."""
    st = np.sin(theta)
    return np.stack([st * np.cos(phi), st * np.sin(phi), np.cos(theta)], axis=-1)


def far_field_power(em: Emitters, amplitudes: np.ndarray, directions: np.ndarray) -> np.ndarray:
    """Power radiated per unit solid angle in each direction.

    Parameters
    ----------
    em : Emitters
    amplitudes : (N,) array_like of complex
        Excitation amplitudes c_j (for example a mode's eigenvector).
    directions : (M, 3) array_like of float
        Observation directions (normalised here).

    Returns
    -------
    (M,) float ndarray
        dP/dΩ [Γ0 per steradian].

    References
    ----------
    Jackson, *Classical Electrodynamics* (1999), Eq. (9.22), in units where a
    single excited emitter radiates Γ0 in total.
    """
    c = np.asarray(amplitudes, dtype=complex)
    if c.shape != (em.n,):
        raise ValueError(f"amplitudes: expected shape ({em.n},), got {c.shape}")
    n_hat = np.atleast_2d(np.asarray(directions, dtype=float))
    if n_hat.shape[-1] != 3:
        raise ValueError(f"directions: expected shape (M, 3), got {n_hat.shape}")
    n_hat = n_hat / np.linalg.norm(n_hat, axis=1, keepdims=True)
    field = _phase_sum(em.positions, c[:, None] * em.dipoles, n_hat)
    field -= n_hat * np.sum(n_hat * field, axis=1, keepdims=True)
    return _PREF * np.sum(np.abs(field) ** 2, axis=1)


def _phase_sum(positions: np.ndarray, weighted: np.ndarray, n_hat: np.ndarray) -> np.ndarray:
    """F(n̂) = Σ_j w_j e^{−ik0 n̂·r_j}, (M, 3), up to a global phase per direction.

    On a grid r_j = r_min + (k_x s_x, k_y s_y, k_z s_z) the phase factor
    separates into three one-dimensional factors, so only (K_x + K_y + K_z)
    exponentials per direction are needed instead of N (the sum itself is a
    few matrix products).  Other arrangements use the direct sum.
    """
    n = positions.shape[0]
    grid = _separable_grid(positions)
    out = np.empty((n_hat.shape[0], 3), dtype=complex)
    if grid is None:
        pos = positions - positions.mean(axis=0)  # small phases
        step = max(1, _CHUNK_ELEMENTS // max(n, 1))
        for s in range(0, n_hat.shape[0], step):
            nb = n_hat[s:s + step]
            out[s:s + step] = np.exp(-1j * K0 * (nb @ pos.T)) @ weighted
        return out
    kk, steps = grid
    dims = kk.max(axis=0) + 1
    kx, ky, kz = dims
    coeff = np.zeros((kx, ky, kz, 3), dtype=complex)
    coeff[kk[:, 0], kk[:, 1], kk[:, 2]] = weighted
    coeff = coeff.reshape(kx, ky * kz * 3)
    axes = [np.arange(d) * st for d, st in zip(dims, steps)]
    step = max(1, _CHUNK_ELEMENTS // int(np.prod(dims) * 3))
    for s in range(0, n_hat.shape[0], step):
        nb = n_hat[s:s + step]
        fx, fy, fz = (np.exp(-1j * K0 * np.outer(nb[:, c], axes[c])) for c in range(3))
        t = (fx @ coeff).reshape(-1, ky, kz * 3)
        t = np.einsum("qb,qbr->qr", fy, t).reshape(-1, kz, 3)
        out[s:s + step] = np.einsum("qc,qcd->qd", fz, t)
    return out


def _separable_grid(positions: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Grid indices and steps when the per-axis separable sum pays off, else None."""
    n = positions.shape[0]
    grid = grid_indices(positions) if n >= 16 else None
    if grid is not None and np.prod(grid[0].max(axis=0) + 1) > 8 * n:
        return None  # beyond this the direct sum is cheaper
    return grid


@dataclass(frozen=True)
class AngularGrid:
    """Directions with quadrature weights: ∫ f dΩ ≈ Σ w_k f(n̂_k).

    Gauss–Legendre in cos θ times a uniform (trapezoidal) rule in φ, exact for
    band-limited angular functions up to the resolved order.
    """

    theta: np.ndarray  # (M,) [rad]
    phi: np.ndarray  # (M,) [rad]
    weights: np.ndarray  # (M,) [sr]

    @property
    def directions(self) -> np.ndarray:
        return directions_from_angles(self.theta, self.phi)


def angular_order(em: Emitters) -> int:
    """Angular band limit L of |far field|² for this arrangement.

    The amplitude has plane-wave phases k0 n̂·r_j with |r_j| ≤ R about the
    centroid, so |E|² is band-limited to about 2k0R plus the dipole factor; the
    spherical-Bessel tails beyond order k0R fall off over a width ∝ (k0R)^{1/3}
    (common practice, no source), hence the margin.  With it the sphere
    integral of a mode reproduces its decay rate to ~1e-14 (tests).
    """
    pos = em.positions - em.positions.mean(axis=0)
    kr = K0 * float(np.max(np.linalg.norm(pos, axis=1)))
    return int(np.ceil(2.0 * kr + 16.0 + 10.0 * kr ** (1.0 / 3.0)))


def _grid(order: int, mu_low: float, mu_high: float) -> AngularGrid:
    n_mu = order // 2 + 2
    n_phi = order + 2
    x, w = np.polynomial.legendre.leggauss(n_mu)
    mu = 0.5 * (mu_high - mu_low) * x + 0.5 * (mu_high + mu_low)
    w_mu = 0.5 * (mu_high - mu_low) * w
    phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
    MU, PHI = np.meshgrid(mu, phi, indexing="ij")
    W = np.repeat(w_mu[:, None] * (2.0 * np.pi / n_phi), n_phi, axis=1)
    return AngularGrid(np.arccos(np.clip(MU.ravel(), -1, 1)), PHI.ravel(), W.ravel())


def sphere_grid(order: int) -> AngularGrid:
    """Quadrature over the full sphere, exact for spherical harmonics up to ``order``."""
    return _grid(max(int(order), 4), -1.0, 1.0)


def cap_grid(order: int, half_angle: float, axis: str = "+z") -> AngularGrid:
    """Quadrature over the cap θ ≤ half_angle about +z (or about −z with axis="-z")."""
    mu0 = float(np.cos(half_angle))
    g = _grid(max(int(order), 4), mu0, 1.0)
    if axis == "+z":
        return g
    if axis == "-z":
        return AngularGrid(np.pi - g.theta, g.phi, g.weights)
    raise ValueError(f"axis: {axis!r} is not allowed; allowed: +z, -z")


def total_power(em: Emitters, amplitudes: np.ndarray) -> float:
    """Total emitted power ∫ dP/dΩ dΩ [Γ0], by quadrature over the sphere."""
    g = sphere_grid(angular_order(em))
    return float(np.sum(g.weights * far_field_power(em, amplitudes, g.directions)))


def hemisphere_directions(ux: np.ndarray, uy: np.ndarray, side: str = "+z") -> np.ndarray:
    """Directions (..., 3) from direction cosines (u_x, u_y) with u_x² + u_y² ≤ 1.

    This is the orthographic ("back focal plane") view of a hemisphere: a lens
    of numerical aperture NA along ±z accepts exactly the disc u_x² + u_y² ≤ NA².
    ``side`` "+z" gives n_z ≥ 0, "-z" gives n_z ≤ 0.
    """
    ux, uy = np.asarray(ux, float), np.asarray(uy, float)
    nz = np.sqrt(np.clip(1.0 - ux * ux - uy * uy, 0.0, None))
    if side == "-z":
        nz = -nz
    elif side != "+z":
        raise ValueError(f"side: {side!r} is not allowed; allowed: +z, -z")
    return np.stack([ux, uy, nz], axis=-1)


def far_field_image(em: Emitters, amplitudes: np.ndarray, u: np.ndarray,
                    side: str = "+z") -> np.ndarray:
    """dP/dΩ on a square grid of direction cosines of one hemisphere [Γ0 per sr].

    Parameters
    ----------
    em : Emitters
    amplitudes : (N,) array_like of complex
        Excitation amplitudes c_j.
    u : (P,) ndarray of float
        Direction-cosine samples used for both u_x and u_y (within [−1, 1]).
    side : "+z" or "-z"
        Hemisphere.

    Returns
    -------
    (P, P) float ndarray
        Row q, column p is the direction (u_x, u_y) = (u[p], u[q]); NaN where
        u_x² + u_y² > 1.

    Notes
    -----
    Same quantity as :func:`far_field_power` (the direct sum), evaluated
    faster.  On the Cartesian pixel grid the in-plane phase separates,
    e^{−ik0(u_x x + u_y y)} = e^{−ik0 u_x x} e^{−ik0 u_y y}, so a sum over
    emitters with weights v_j is the matrix product Y·diag(v)·Xᵀ (P × N times
    N × P).  The z phase does not separate; the emitters are grouped into
    clusters of nearby z (z_j = z̄_g + δ_j) and, with u_z = u_c + a
    (u_c = ±½ the middle of the hemisphere, |a| ≤ ½),

        e^{−ik0 u_z z_j} = e^{−ik0 u_z z̄_g} e^{−ik0 u_c δ_j} Σ_{k<K} (−ik0 δ_j a)^k/k!,

    one more matrix product per term.  For real x the Taylor remainder of
    e^{ix} after K terms is at most |x|^K / K!, so the error of each pixel's
    amplitude is at most Σ_j |w_j| (k0 max|δ| / 2)^K / K!; K is the smallest
    number of terms that brings this below ``_EXPANSION_TOL`` Σ_j |w_j|, the
    size of the direct sum's own rounding.  Layers (δ = 0) need one term.  The
    cluster width is chosen by an operation count, and the direct sum is used
    when it is cheaper.  With equal dipoles a scalar amplitude is summed once
    instead of three vector components.

    References
    ----------
    Jackson, *Classical Electrodynamics* (1999), Eq. (9.22) (the direct sum);
    the Taylor expansion of the z phase is common practice (no source).
    """
    c = np.asarray(amplitudes, dtype=complex)
    if c.shape != (em.n,):
        raise ValueError(f"amplitudes: expected shape ({em.n},), got {c.shape}")
    u = np.asarray(u, dtype=float)
    ux, uy = np.meshgrid(u, u, indexing="xy")
    inside = ux * ux + uy * uy <= 1.0
    out = np.full(ux.shape, np.nan)
    n_hat = hemisphere_directions(ux, uy, side)
    pos = em.positions - em.positions.mean(axis=0)
    scalar = bool(np.all(em.dipoles == em.dipoles[0]))
    plan = _cluster_plan(pos[:, 2], u.size, int(np.count_nonzero(inside)), 1 if scalar else 3)
    if plan is None:
        out[inside] = far_field_power(em, c, n_hat[inside])
        return out
    weights = c[:, None] if scalar else c[:, None] * em.dipoles  # (N, C)
    centre = 0.5 if side == "+z" else -0.5  # middle of u_z on this hemisphere
    field = _expanded_sum(pos, weights, u, n_hat[..., 2], centre, plan)  # (P, P, C)
    if scalar:
        d = em.dipoles[0]
        nd = n_hat @ d  # (P, P) complex
        power = np.abs(field[..., 0]) ** 2 * (np.vdot(d, d).real - np.abs(nd) ** 2)
    else:
        field -= n_hat * np.sum(n_hat * field, axis=-1, keepdims=True)
        power = np.sum(np.abs(field) ** 2, axis=-1)
    out[inside] = _PREF * power[inside]
    return out


# Remainder of the z expansion relative to Σ_j |w_j| (about the rounding of the
# direct sum, whose phases k0 n̂·r_j are themselves rounded at this level).
_EXPANSION_TOL = 1e-16
# Operation costs [ns] on one core, measured roughly (numpy 2, OpenBLAS): one
# complex multiply–add inside a matrix product, one element of an array
# expression, one complex exponential.
_COST_MATMUL, _COST_ELEMENT, _COST_EXP = 0.3, 3.0, 25.0


_MAX_TERMS = 200  # beyond this the expansion is never the cheaper sum


def _terms_needed(x_max: float) -> int:
    """Smallest K ≥ 1 with x_max^K / K! ≤ _EXPANSION_TOL (Taylor remainder bound).

    Arguments needing more than ``_MAX_TERMS`` terms return ``_MAX_TERMS + 1``.
    """
    if x_max > 0.25 * _MAX_TERMS:  # up to 50, 50^200/200! ≈ 1e-35: the loop ends by K = 200
        return _MAX_TERMS + 1
    k, bound = 0, 1.0
    while bound > _EXPANSION_TOL:
        k += 1
        bound *= x_max / k
    return max(k, 1)


def _clusters(z: np.ndarray, width: float) -> list[tuple[np.ndarray, float, int]]:
    """Group emitters into z intervals of at most ``width`` [λ0] (greedy, fewest groups).

    Returns (indices, centre z̄ [λ0], number of Taylor terms) per group.
    """
    order = np.argsort(z, kind="stable")
    zs = z[order]
    groups = []
    i = 0
    while i < zs.size:
        j = int(np.searchsorted(zs, zs[i] + width, side="right"))
        lo, hi = zs[i], zs[j - 1]
        groups.append((order[i:j], 0.5 * (lo + hi), _terms_needed(K0 * 0.25 * (hi - lo))))
        i = j
    return groups


def _cluster_plan(z: np.ndarray, p: int, n_inside: int, n_comp: int):
    """The cheapest clustering of z for the expanded sum, or None if the direct sum is cheaper."""
    n = z.size
    direct = n_inside * n * (_COST_EXP + 3 * _COST_MATMUL)
    best, best_cost = None, direct
    spread = float(z.max() - z.min()) if n else 0.0
    widths = [1e-9] + [w for w in 0.02 * 2.0 ** np.arange(12) if w < 2 * spread] + [2 * spread]
    for width in widths[::-1]:  # widest first: narrower widths only add groups
        groups = _clusters(z, width)
        if len(groups) * p * p * _COST_EXP > best_cost:
            break
        cost = 2 * p * n * _COST_EXP
        for idx, _, terms in groups:
            cost += p * p * (_COST_EXP + 2 * n_comp * _COST_ELEMENT * terms)
            cost += terms * n_comp * idx.size * p * (p * _COST_MATMUL + _COST_ELEMENT)
        if cost < best_cost:
            best, best_cost = groups, cost
    return best


def _expanded_sum(pos: np.ndarray, weights: np.ndarray, u: np.ndarray, uz: np.ndarray,
                  centre: float, groups) -> np.ndarray:
    """F(q, p) = Σ_j w_j e^{−ik0 n̂·r_j} on the pixel grid by the z expansion, (P, P, C).

    ``pos`` (N, 3) [λ0], ``weights`` (N, C), ``u`` (P,), ``uz`` (P, P) the z
    direction cosine of each pixel, ``centre`` the expansion point in u_z
    (|u_z − centre| ≤ ½), ``groups`` from :func:`_clusters`.
    """
    p, n_comp = u.size, weights.shape[1]
    xf = np.exp(-1j * K0 * np.outer(u, pos[:, 0]))  # (P, N) along u_x
    yf = np.exp(-1j * K0 * np.outer(u, pos[:, 1]))  # (P, N) along u_y
    a = uz - centre  # |a| ≤ ½ on the hemisphere
    field = np.zeros((p, p, n_comp), dtype=complex)
    for idx, z_bar, terms in groups:
        delta = pos[idx, 2] - z_bar
        b = -1j * K0 * delta  # (n_g,)
        w = weights[idx] * np.exp(-1j * K0 * centre * delta)[:, None]  # (n_g, C)
        y_g, x_t = yf[:, idx], xf[:, idx].T
        powers = np.ones((terms, idx.size), dtype=complex)  # b^k / k!, (K, n_g)
        for k in range(1, terms):
            powers[k] = powers[k - 1] * (b / k)
        wk = powers[:, None, :] * w.T[None, :, :]  # (K, C, n_g)
        acc = None
        chunk = max(1, _CHUNK_ELEMENTS // (n_comp * p * idx.size))
        for top in range(terms, 0, -chunk):  # terms top−1 … bottom, in one product
            bottom = max(0, top - chunk)
            stacked = (wk[bottom:top, :, None, :] * y_g).reshape(-1, idx.size)
            m = (stacked @ x_t).reshape(top - bottom, n_comp, p, p)
            for k in range(top - bottom - 1, -1, -1):  # Horner: S = M_k + a S
                if acc is None:
                    acc = m[k].copy()
                else:
                    acc *= a
                    acc += m[k]
        acc *= np.exp(-1j * K0 * uz * z_bar)
        field += acc.transpose(1, 2, 0)
    return field


def _cap_power(em: Emitters, c: np.ndarray, order: int, half_angle: float, axis: str) -> float:
    """∫_cap dP/dΩ dΩ [Γ0] on the cap quadrature of :func:`cap_grid` (φ count made even).

    The same Gauss–Legendre × uniform-φ rule, summed faster: with an even number
    of azimuths, φ and φ + π flip the in-plane phase, so on each ring
    F(φ) = Σ_j v_j (cos − i sin)(k0 ρ p_j(φ)) and F(φ + π) the same with + i sin,
    where v_j = w_j e^{−ik0 μ z_j}, ρ = sin θ and p_j(φ) = x_j cos φ + y_j sin φ.
    Half as many (real) phase evaluations as the direct sum, and real matrix
    products.  Exact algebra; the quadrature is exact for the band limit as in
    :func:`cap_grid` (more azimuths only add exactness).
    """
    if axis not in ("+z", "-z"):
        raise ValueError(f"axis: {axis!r} is not allowed; allowed: +z, -z")
    order = max(int(order), 4)
    mu0 = float(np.cos(half_angle))
    n_mu, n_phi = order // 2 + 2, order + 2
    n_phi += n_phi % 2
    half = n_phi // 2
    x, w = np.polynomial.legendre.leggauss(n_mu)
    mu = 0.5 * (1.0 - mu0) * x + 0.5 * (1.0 + mu0)
    w_ring = 0.5 * (1.0 - mu0) * w * (2.0 * np.pi / n_phi)
    if axis == "-z":
        mu = -mu
    rho = np.sqrt(np.clip(1.0 - mu * mu, 0.0, None))
    phi = 2.0 * np.pi * np.arange(half) / n_phi
    pos = em.positions - em.positions.mean(axis=0)
    proj = np.outer(np.cos(phi), pos[:, 0]) + np.outer(np.sin(phi), pos[:, 1])  # (half, N)
    scalar = bool(np.all(em.dipoles == em.dipoles[0]))
    weights = c[:, None] if scalar else c[:, None] * em.dipoles  # (N, C)
    n_comp = weights.shape[1]
    total = 0.0
    step = max(1, _CHUNK_ELEMENTS // max(half * em.n, 1))
    for s in range(0, n_mu, step):
        m_r, r_r = mu[s:s + step], rho[s:s + step]
        v = np.exp(-1j * K0 * np.outer(m_r, pos[:, 2]))[:, :, None] * weights  # (R, N, C)
        v_real = np.concatenate([v.real, v.imag], axis=2)  # (R, N, 2C)
        arg = (K0 * r_r)[:, None, None] * proj  # (R, half, N)
        cos_part = np.cos(arg) @ v_real  # (R, half, 2C)
        sin_part = np.sin(arg) @ v_real
        a = cos_part[..., :n_comp] + 1j * cos_part[..., n_comp:]
        b = sin_part[..., :n_comp] + 1j * sin_part[..., n_comp:]
        for sign, field in ((1.0, a - 1j * b), (-1.0, a + 1j * b)):
            n_hat = np.stack(np.broadcast_arrays(
                sign * r_r[:, None] * np.cos(phi), sign * r_r[:, None] * np.sin(phi),
                m_r[:, None]), axis=-1)  # (R, half, 3)
            if scalar:
                d = em.dipoles[0]
                power = np.abs(field[..., 0]) ** 2 * (np.vdot(d, d).real - np.abs(n_hat @ d) ** 2)
            else:
                nf = np.sum(n_hat * field, axis=-1)
                power = np.sum(np.abs(field) ** 2, axis=-1) - np.abs(nf) ** 2
            total += float(np.sum(w_ring[s:s + step, None] * power))
    return _PREF * total


def collected_fraction(em: Emitters, amplitudes: np.ndarray, na: float,
                       axis: str = "+z", *, total: float | None = None) -> float:
    """Fraction of the emitted power inside a lens of numerical aperture ``na``.

    The lens (in vacuum) looks along ``axis`` ("+z" or "−z" written "-z") and
    accepts directions within arcsin(NA) of it.

    Parameters
    ----------
    na : float
        Numerical aperture, 0 < NA ≤ 1.
    total : float, optional
        Total emitted power [Γ0] if already known (for a unit-norm eigenvector
        in free space, its decay rate); otherwise computed by quadrature.

    Returns
    -------
    float
        Collected share of the total, NaN when nothing is emitted.

    Notes
    -----
    The cap integral uses the Gauss–Legendre × uniform-φ rule of
    :func:`cap_grid` at :func:`angular_order`; on a grid the separable sum of
    :func:`far_field_power` evaluates it, otherwise half-turn pairs of azimuths
    share their phases (:func:`_cap_power`).

    References
    ----------
    Jackson, *Classical Electrodynamics* (1999), Eq. (9.22) (the integrand).
    """
    na = float(na)
    if not 0.0 < na <= 1.0:
        raise ValueError(f"na: {na} is out of range; allowed 0 < NA ≤ 1 (lens in vacuum)")
    c = np.asarray(amplitudes, dtype=complex)
    if c.shape != (em.n,):
        raise ValueError(f"amplitudes: expected shape ({em.n},), got {c.shape}")
    order, half_angle = angular_order(em), float(np.arcsin(na))
    if _separable_grid(em.positions) is not None:  # the grid sum is faster there
        cap = cap_grid(order, half_angle, axis)
        inside = float(np.sum(cap.weights * far_field_power(em, c, cap.directions)))
    else:
        inside = _cap_power(em, c, order, half_angle, axis)
    if total is None:
        total = total_power(em, amplitudes)
    if total <= 0.0:
        return float("nan")
    return inside / total


def lens_fraction(em: Emitters, environment, amplitudes: np.ndarray, na: float, axis: str,
                  decay_rate: float) -> float:
    """Share of a state's *total* emission (all channels) that a lens collects.

    The lens sees only free-space radiation, ``environment.free_space_weight``
    times the vacuum far field; ``decay_rate`` [Γ0] is the state's total
    emitted power (for a unit-norm eigenvector, its decay rate).  NaN when the
    environment has no free-space channel or nothing is emitted.
    """
    weight = float(getattr(environment, "free_space_weight", 0.0))
    if weight <= 0.0 or decay_rate <= 0.0:
        return float("nan")
    return collected_fraction(em, amplitudes, na, axis, total=decay_rate / weight)
