"""Free space: the 3D electromagnetic dyadic Green's function and the coupling it gives.

Units: lengths in λ0, so k0 = 2π; couplings in Γ0.

References
----------
R. H. Lehmberg, Phys. Rev. A 2, 883 (1970) — dipole–dipole couplings Ω_ij, Γ_ij.
L. Novotny and B. Hecht, *Principles of Nano-Optics*, 2nd ed. (Cambridge, 2012),
Sec. 8.3.1 — the free-space dyadic Green's function.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .environment import Summable
from .geometry import Emitters, grid_indices

__all__ = ["K0", "FreeSpace", "greens_tensor", "greens_sum", "pair_coupling"]

#: Free-space wavenumber in units of 1/λ0.
K0 = 2.0 * np.pi

# Row block for the all-pairs evaluation: bounds the temporary memory to
# a few times 16·_BLOCK·N bytes.
_BLOCK = 512


def _radial_factors(r: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return e^{ik0 r}/(k0 r), a(r), b(r) with G = k0 e^{ik0 r}/(4π k0 r) [a I + b r̂r̂]."""
    x = K0 * r
    inv = 1.0 / x
    a = 1.0 + 1j * inv - inv * inv
    b = -1.0 - 3j * inv + 3.0 * inv * inv
    return np.exp(1j * x) * inv, a, b


def greens_tensor(r_vec: np.ndarray) -> np.ndarray:
    """Free-space dyadic Green's function G(r) for r ≠ 0.

    G(r) = e^{ik0 r}/(4π r) [(1 + i/(k0 r) − 1/(k0 r)²) I + (−1 − 3i/(k0 r) + 3/(k0 r)²) r̂ r̂],
    the solution of ∇×∇×G − k0² G = δ(r) I.

    Parameters
    ----------
    r_vec : (..., 3) ndarray of float
        Displacements [λ0], none of them zero.

    Returns
    -------
    (..., 3, 3) complex ndarray [1/λ0]

    References
    ----------
    Novotny & Hecht, *Principles of Nano-Optics* (2012), Eq. (8.55).
    """
    r_vec = np.asarray(r_vec, dtype=float)
    r = np.linalg.norm(r_vec, axis=-1)
    if np.any(r == 0):
        raise ValueError("greens_tensor: r = 0 is a singular point of the free-space Green's function")
    # asarray: for a single (3,) displacement the factors are Python scalars
    e, a, b = (np.asarray(f) for f in _radial_factors(r))
    rhat = r_vec / r[..., None]
    pref = K0 * e / (4.0 * np.pi)
    outer = rhat[..., :, None] * rhat[..., None, :]
    return pref[..., None, None] * (a[..., None, None] * np.eye(3) + b[..., None, None] * outer)


#: Field points per block of :func:`greens_sum`: bounds its temporaries to a few
#: arrays of _SUM_BLOCK·N numbers.
_SUM_BLOCK = 128

#: e^{2πi k/M} for the table-driven phase factor of :func:`_phase` (M a power of two).
_PHASE_STEPS = 4096
_PHASE_TABLE = np.exp(2j * np.pi * np.arange(_PHASE_STEPS) / _PHASE_STEPS)


def _phase(r: np.ndarray) -> np.ndarray:
    """e^{ik0 r} = e^{2πi r} for r in λ0, table-driven: 3-4 times faster than cos + sin.

    r = k/M + δ with |δ| ≤ 1/2M (exact in floating point, M a power of two); the
    table holds e^{2πik/M} and e^{2πiδ} is a Taylor polynomial, |2πδ| ≤ 7.7e-4,
    truncated after θ⁴ (remainder below 3e-18).  Agrees with numpy's exp to
    rounding (a few 1e-16 relative to 1 plus the rounding of k0 r itself).

    References
    ----------
    P. T. P. Tang, ACM Trans. Math. Softw. 15, 144 (1989) (table-driven
    elementary functions).
    """
    k = np.rint(r * _PHASE_STEPS)
    theta = (r - k / _PHASE_STEPS) * (2.0 * np.pi)
    t2 = theta * theta
    small = (1.0 - t2 * (0.5 - t2 / 24.0)) + 1j * (theta * (1.0 - t2 / 6.0))
    return _PHASE_TABLE[k.astype(np.int64) & (_PHASE_STEPS - 1)] * small


def greens_sum(points: np.ndarray, positions: np.ndarray, vectors: np.ndarray, *,
               min_distance: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Σ_j G(r − r_j)·p_j at many points, without forming 3×3 tensors.

    With the factors of :func:`greens_tensor`, G(r)·p = (k0 e^{ik0r}/4πk0r)
    [a p + b r̂ (r̂·p)]: two scalar functions of r per pair, so the cost is a
    few operations per (point, source) pair instead of a 3×3 tensor.  The sum
    over sources of the r̂(r̂·p) part is taken per axis with r = r_m − r_j.

    Parameters
    ----------
    points : (M, 3) float ndarray
        Field points [λ0].
    positions : (N, 3) float ndarray
        Source positions r_j [λ0].
    vectors : (N, 3) complex ndarray
        Source vectors p_j (any unit; the result carries it times 1/λ0).
    min_distance : float
        Pairs closer than this [λ0] are left out of the sum and their point is
        flagged; pairs at r = 0 are always left out (G is singular there).

    Returns
    -------
    field : (M, 3) complex ndarray
        Σ_j G(r_m − r_j)·p_j [1/λ0 × unit of p].
    near : (M,) bool ndarray
        True where some source lies closer than ``min_distance`` (or at r = 0).

    References
    ----------
    Novotny & Hecht, *Principles of Nano-Optics* (2012), Eq. (8.55), contracted
    with p.
    """
    pts = np.asarray(points, dtype=float)
    pos = np.asarray(positions, dtype=float)
    vec = np.asarray(vectors, dtype=complex)
    out = np.empty((pts.shape[0], 3), dtype=complex)
    near = np.zeros(pts.shape[0], dtype=bool)
    limit = max(float(min_distance), 0.0) ** 2
    for start in range(0, pts.shape[0], _SUM_BLOCK):
        p = pts[start:start + _SUM_BLOCK]
        d = [p[:, k, None] - pos[None, :, k] for k in range(3)]  # 3 × (m, N), r_m − r_j
        r2 = d[0] * d[0] + d[1] * d[1] + d[2] * d[2]
        bad = (r2 <= limit) | (r2 == 0.0)
        any_bad = bool(bad.any())
        if any_bad:
            r2[bad] = 1.0  # placeholder; these pairs get zero weight below
        r = np.sqrt(r2)
        inv = 1.0 / (K0 * r)  # 1/(k0 r)
        inv2 = inv * inv
        e = _phase(r) * ((K0 / (4.0 * np.pi)) * inv)  # k0 e^{ik0r}/(4π k0 r)
        ea = e * ((1.0 - inv2) + 1j * inv)  # times a
        eb = e * (((3.0 * inv2 - 1.0) - 3j * inv) / r2)  # times b/r²: r̂r̂ → r r
        rp = d[0] * vec[None, :, 0] + d[1] * vec[None, :, 1] + d[2] * vec[None, :, 2]
        w = eb * rp
        if any_bad:
            ea[bad] = 0.0
            w[bad] = 0.0
            near[start:start + _SUM_BLOCK] = bad.any(axis=1)
        block = ea @ vec
        for k in range(3):
            block[:, k] += np.einsum("ij,ij->i", w, d[k])
        out[start:start + _SUM_BLOCK] = block
    return out, near


def pair_coupling(r_vec: np.ndarray, d_i: np.ndarray, d_j: np.ndarray) -> np.ndarray:
    """Off-diagonal element H_ij = −(3π Γ0/k0) conj(d_i)·G(r_i − r_j)·d_j.

    Written out, H_ij = −(3/4) e^{ik0 r}/(k0 r) [a (d_i*·d_j) + b (d_i*·r̂)(r̂·d_j)].

    Parameters
    ----------
    r_vec : (..., 3) ndarray of float
        r_i − r_j [λ0], non-zero.
    d_i, d_j : (..., 3) ndarray of complex
        Unit dipoles (broadcast against ``r_vec``).

    Returns
    -------
    (...) complex ndarray [Γ0]

    References
    ----------
    Lehmberg, Phys. Rev. A 2, 883 (1970); the sign and conjugation follow
    i dc/dt = H c with H_ii = −iΓ0/2.
    """
    r = np.linalg.norm(r_vec, axis=-1)
    e, a, b = _radial_factors(r)
    rhat = r_vec / r[..., None]
    dci = np.conj(d_i)
    dd = np.sum(dci * d_j, axis=-1)
    proj = np.sum(dci * rhat, axis=-1) * np.sum(rhat * d_j, axis=-1)
    return -0.75 * e * (a * dd + b * proj)


def _uniform_pairs(em: Emitters) -> np.ndarray:
    """H for emitters that share one dipole d, at any positions: each pair once.

    With one dipole, H_ij = −(3/4) e^{ik0 r}/(k0 r) [a |d|² + b |r̂·d|²] depends
    on r̂ only through |r̂·d|², so H is symmetric (also for complex d) and only
    the pairs i < j are evaluated, by row blocks against the columns to their
    right; the phase factor comes from :func:`_phase`.  Same values as
    :func:`pair_coupling` to rounding (tested).
    """
    n = em.n
    pos, d = em.positions, em.uniform_dipole
    dd = float(np.real(np.vdot(d, d)))
    H = np.empty((n, n), dtype=complex)
    for start in range(0, n, _BLOCK):
        stop = min(start + _BLOCK, n)
        r_vec = pos[start:stop, None, :] - pos[None, start:, :]  # columns j ≥ start
        rows = np.arange(stop - start)
        r_vec[rows, rows] = (1.0, 0.0, 0.0)  # placeholder for i = j
        r = np.sqrt(np.einsum("ijk,ijk->ij", r_vec, r_vec))
        x = K0 * r
        inv = 1.0 / x
        along = np.abs(r_vec @ d) ** 2 / (r * r)  # |r̂·d|²
        coupling = (-0.75 * inv) * _phase(r) * (dd * (1.0 + 1j * inv - inv * inv)
                                                + along * (-1.0 - 3j * inv + 3.0 * inv * inv))
        H[start:stop, start:] = coupling
        H[start:, start:stop] = coupling.T
        H[start + rows, start + rows] = -0.5j
    return H


def _lattice_gather(em: Emitters) -> np.ndarray | None:
    """H off-diagonal by evaluating G once per distinct displacement, or None.

    Applies when all dipoles are equal and every coordinate lies on a uniform
    grid (all generated lattices); then H_ij depends only on integer
    displacement indices, of which there are far fewer than N².
    """
    d = em.uniform_dipole
    if d is None or em.n < 64:
        return None
    grid = grid_indices(em.positions)
    if grid is None:
        return None
    kk, steps = grid
    ks = [kk[:, 0], kk[:, 1], kk[:, 2]]
    m = kk.max(axis=0)
    shape = 2 * m + 1
    if np.prod(shape) > em.n * em.n // 4:
        return None
    axes = [np.arange(-mi, mi + 1) for mi in m]
    dk = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    r_vec = dk * steps
    zero = np.all(dk == 0, axis=1)
    r_vec[zero] = (1.0, 0.0, 0.0)  # placeholder; the centre entry is the diagonal
    table = pair_coupling(r_vec, d, d)
    table[zero] = -0.5j
    lin = (ks[0] * shape[1] + ks[1]) * shape[2] + ks[2]
    offset = (m[0] * shape[1] + m[1]) * shape[2] + m[2]
    return table[lin[:, None] - lin[None, :] + offset]


@dataclass(frozen=True)
class FreeSpace(Summable):
    """Emitters in vacuum (or a uniform medium folded into λ0 and Γ0).

    H_ij = −(3π Γ0/k0) conj(d_i)·G(r_i − r_j)·d_j for i ≠ j and H_ii = −iΓ0/2;
    the divergent real part of the self-term is absorbed into ω0 (Lamb shift).

    Parameters
    ----------
    scale : float
        Multiplies the whole free-space contribution (1 = vacuum).  Used in
        sums with other channels whose presence modifies the non-guided
        emission; see :mod:`physics.environment`.

    References
    ----------
    Lehmberg, Phys. Rev. A 2, 883 (1970); Ficek & Tanaś, Phys. Rep. 372, 369 (2002).
    """

    scale: float = 1.0

    def __post_init__(self) -> None:
        if not (np.isfinite(self.scale) and 0.0 <= self.scale <= 10.0):
            raise ValueError(f"scale: {self.scale!r} is out of range; allowed 0 to 10")

    @property
    def free_space_weight(self) -> float:
        return float(self.scale)

    #: Free space is isotropic: every point operation leaves G covariant.
    symmetry_operations = ("mirror x", "mirror y", "mirror z", "C2 z", "C2 x", "C2 y",
                           "inversion")

    def coupling(self, em: Emitters) -> np.ndarray:
        """Full (N, N) complex coupling matrix [Γ0], diagonal included.

        Geometry must already be checked (no two emitters closer than
        :data:`physics.geometry.MIN_DISTANCE`); see
        :func:`physics.hamiltonian.coupling_matrix`.
        """
        H = _lattice_gather(em)
        if H is None:
            H = _uniform_pairs(em) if em.uniform_dipole is not None else self._all_pairs(em)
        return H if self.scale == 1.0 else self.scale * H

    @staticmethod
    def _all_pairs(em: Emitters) -> np.ndarray:
        n = em.n
        pos, dip = em.positions, em.dipoles
        H = np.empty((n, n), dtype=complex)
        for start in range(0, n, _BLOCK):
            stop = min(start + _BLOCK, n)
            r_vec = pos[start:stop, None, :] - pos[None, :, :]
            rows = np.arange(start, stop)
            r_vec[rows - start, rows] = (1.0, 0.0, 0.0)  # placeholder for i = j
            H[start:stop] = pair_coupling(r_vec, dip[start:stop, None, :], dip[None, :, :])
            H[rows, rows] = -0.5j
        return H

    def describe(self) -> str:
        """One-line human description."""
        return "free space" if self.scale == 1.0 else f"free space × {self.scale:g}"

    def emitted_power(self, em: Emitters, amplitudes: np.ndarray) -> dict[str, float]:
        return {"free space": super().emitted_power(em, amplitudes)[self.describe()]}
