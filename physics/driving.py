"""Weak coherent driving in linear response: drives, steady states and what a detector sees.

A weak probe of detuning Δ = ω_laser − ω0 with Rabi amplitudes Ω_j on the
emitters gives, in the single-excitation (linear) regime and the frame of the
laser, the steady state

    (H − Δ) c = −Ω .

Field convention (consistent with H_ij = −(3π/k0) conj(d_i)·G(r_i, r_j)·d_j):
an incident field E_in drives Ω_j = conj(d_j)·E_in(r_j), and the emitters
radiate E_sc(r) = −(3π/k0) Σ_j G(r − r_j)·d_j c_j, so that every emitter is
driven by the incident field plus the field scattered by all others.  Fields
are in units where conj(d)·E is a Rabi frequency in Γ0; a plane wave of
amplitude E0 then carries the photon flux density (2k0²/3π)|E0|² [photons per
1/Γ0 per λ0²], which fixes the cross-sections below (a single resonant
emitter scatters 3λ0²/2π).

Paraxial modes as channels: a beam normalised to unit photon flux drives
Ω^u_j; by the same input–output argument as for a waveguide, its transmission
is t = 1 − i Σ_j conj(Ω^u_j) c_j and the reflection into the counter-
propagating mode v is r = −i Σ_j conj(Ω^v_j) c_j (valid while k0·w ≫ 1).

For a scan over many detunings one complex Schur decomposition H = Z T Z† is
computed once; each detuning is then one triangular solve, O(N²).  The Schur
form is unitary and exists for every matrix, so this stays exact for defective
matrices (a chiral waveguide), where an eigen-expansion fails.

When the modes of H are already known and well conditioned (see
:func:`eigenbasis_usable`), the same steady states follow from the mode
expansion c(Δ) = −Σ_m c_m (l_m†Ω)/(λ_m − Δ): O(N²) once and O(N) per detuning
(a single matrix product for the whole scan).  Otherwise, and always when
no modes are given, the Schur path is used.

References
----------
G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed. (2013), §7.6
(Schur decomposition); A. Asenjo-Garcia et al., Phys. Rev. X 7, 031024 (2017)
(input–output relation for emitter arrays); S. J. van Enk and H. J. Kimble,
Phys. Rev. A 63, 023809 (2001) (a dipole coupled to a focused Gaussian beam);
J. D. Jackson, *Classical Electrodynamics*, 3rd ed. (1999), §10.11 (optical
theorem); L. N. Trefethen and M. Embree, *Spectra and Pseudospectra*
(Princeton, 2005), ch. 52 (non-normal matrices: the eigenvector condition
number bounds how much an eigen-expansion amplifies round-off).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.optimize import OptimizeWarning, curve_fit

from .free_space import K0, greens_sum
from .geometry import MIN_DISTANCE, Emitters

__all__ = [
    "EIGENBASIS_PETERMANN_MAX",
    "eigenbasis_usable",
    "steady_states",
    "plane_wave_field",
    "gaussian_beam_field",
    "drive_from_field",
    "scattered_field",
    "extinguished_power",
    "scattered_power",
    "plane_wave_flux",
    "gaussian_beam_amplitude",
    "beam_transmission",
    "fit_resonance",
    "Probe",
    "probe_scan",
    "field_intensity_map",
    "scan_signal",
    "field_intensity_line",
]


#: Largest Petermann factor for which mode expansions replace the exact solvers.
#: With l_m†c_m = 1 and unit c_m, K_m = |l_m|²; V has ‖V‖_F² = N and V⁻¹ = L† has
#: ‖V⁻¹‖_F² = Σ_m K_m, so the condition number of V is at most N·√(max K).  An
#: expansion loses about that factor more digits than a backward-stable Schur solve
#: or Taylor exponential: below ~1e-16·400·√1e3 ≈ 1e-12 at N = 400 for this bound,
#: well inside the 1e-10 agreement the tests check (common practice, no source).
#: Matrices at or near an exceptional point (a chiral waveguide: K → ∞) fail it.
EIGENBASIS_PETERMANN_MAX = 1e3


def eigenbasis_usable(modes, n: int) -> bool:
    """Whether ``modes`` can replace linear solves and exponentials for an (n, n) matrix.

    True when the modes carry eigenvectors (not a spectrum alone), match the
    size, and every Petermann factor is finite and at most
    :data:`EIGENBASIS_PETERMANN_MAX` (the eigenvector matrix is then well
    conditioned).  The caller guarantees that ``modes`` are those of the
    matrix in question.

    Parameters
    ----------
    modes : physics.modes.Modes or None
    n : int
        Size of the coupling matrix.

    References
    ----------
    Trefethen & Embree, *Spectra and Pseudospectra* (2005), ch. 52;
    K. Petermann, IEEE J. Quantum Electron. 15, 566 (1979).
    """
    if modes is None or getattr(modes, "vectors", None) is None \
            or getattr(modes, "left_vectors", None) is None or modes.n != n:
        return False
    k = np.asarray(modes.petermann)
    return bool(np.all(np.isfinite(k)) and np.max(k) <= EIGENBASIS_PETERMANN_MAX)


def steady_states(H: np.ndarray, drive: np.ndarray, detunings: np.ndarray, *,
                  modes=None) -> np.ndarray:
    """Steady-state amplitudes c(Δ) solving (H − Δ) c = −Ω for every detuning.

    Parameters
    ----------
    H : (N, N) complex ndarray [Γ0]
    drive : (N,) complex ndarray
        Ω_j [Γ0].
    detunings : (D,) float ndarray [Γ0]
    modes : physics.modes.Modes, optional
        The modes of this very H.  When :func:`eigenbasis_usable` accepts
        them, c(Δ) = −V diag(1/(λ − Δ)) V⁻¹ Ω with V⁻¹ = L† (O(N²) + O(DN²)
        in one matrix product); otherwise the exact Schur path is used.

    Returns
    -------
    (D, N) complex ndarray

    References
    ----------
    Golub & Van Loan, *Matrix Computations* (2013), §7.6 (Schur path);
    the expansion is the spectral decomposition of (H − Δ)⁻¹ for a
    diagonalisable H (same book, §7.1).
    """
    H = np.asarray(H, dtype=complex)
    d = np.asarray(detunings, dtype=float)
    if eigenbasis_usable(modes, H.shape[0]):
        coeff = modes.left_vectors.conj().T @ np.asarray(drive, dtype=complex)
        weights = coeff[None, :] / (d[:, None] - modes.eigenvalues[None, :])
        return weights @ modes.vectors.T
    T, Z = scipy.linalg.schur(H, output="complex")
    rhs = Z.conj().T @ (-np.asarray(drive, dtype=complex))
    eye = np.eye(H.shape[0])
    out = np.empty((len(d), H.shape[0]), dtype=complex)
    for k, delta in enumerate(d):
        out[k] = Z @ scipy.linalg.solve_triangular(T - delta * eye, rhs, check_finite=False)
    return out


def _unit(v, name: str) -> np.ndarray:
    v = np.asarray(v, dtype=complex)
    if v.shape != (3,) or not np.all(np.isfinite(v)) or np.linalg.norm(v) < 1e-12:
        raise ValueError(f"{name}: expected a non-zero 3-vector, got {v!r}")
    return v / np.linalg.norm(v)


def plane_wave_field(points: np.ndarray, direction, polarization, amplitude: float = 1.0
                     ) -> np.ndarray:
    """E_in(r) = E0 ε e^{ik0 k̂·r} at points (M, 3) [λ0] → (M, 3) complex.

    ``polarization`` is made transverse (its part along k̂ removed); a
    polarisation along k̂ is an error.
    """
    k_hat = np.real(_unit(direction, "direction"))
    eps = _unit(polarization, "polarization")
    eps = eps - k_hat * np.dot(k_hat, eps)
    if np.linalg.norm(eps) < 1e-9:
        raise ValueError("polarization: must not be parallel to the direction of propagation")
    eps = eps / np.linalg.norm(eps)
    phase = np.exp(1j * K0 * (np.asarray(points, float) @ k_hat))
    return amplitude * phase[:, None] * eps[None, :]


def gaussian_beam_amplitude(waist: float) -> float:
    """Focal field amplitude E0 of a Gaussian beam carrying one photon per 1/Γ0.

    The flux is (2k0²/3π)|E0|² πw²/2, hence E0 = √3/(k0 w).
    """
    return float(np.sqrt(3.0) / (K0 * waist))


def gaussian_beam_field(points: np.ndarray, waist: float, focus=(0.0, 0.0, 0.0),
                        direction: str = "+z", polarization="x",
                        amplitude: float | None = None) -> np.ndarray:
    """Paraxial Gaussian beam along ±z at points (M, 3) [λ0] → (M, 3) complex.

    E = E0 ε (w0/w(z)) exp(−ρ²/w(z)²) exp(±i[k0 z + k0 ρ²/2R(z) − ψ(z)]) with
    z measured from ``focus`` along the axis, Rayleigh range z_R = π w0²,
    Gouy phase ψ = arctan(z/z_R).  By default E0 gives unit photon flux
    (:func:`gaussian_beam_amplitude`), so drives from it are channel couplings.

    References
    ----------
    A. E. Siegman, *Lasers* (University Science Books, 1986), ch. 17.
    """
    waist = float(waist)
    if not (np.isfinite(waist) and 0.1 <= waist <= 1e4):
        raise ValueError(f"waist: {waist!r} is out of range; allowed 0.1 to 1e4 λ0")
    if direction not in ("+z", "-z"):
        raise ValueError(f"direction: {direction!r} is not allowed; allowed: +z, -z")
    eps = np.array({"x": (1, 0, 0), "y": (0, 1, 0)}[polarization], dtype=complex) \
        if isinstance(polarization, str) else _unit(polarization, "polarization")
    if abs(eps[2]) > 1e-12:
        raise ValueError("polarization: a beam along z needs a transverse (x, y) polarisation")
    e0 = gaussian_beam_amplitude(waist) if amplitude is None else float(amplitude)
    rel = np.asarray(points, float) - np.asarray(focus, float)
    z = rel[:, 2] if direction == "+z" else -rel[:, 2]
    rho2 = rel[:, 0] ** 2 + rel[:, 1] ** 2
    zr = np.pi * waist ** 2
    wz = waist * np.sqrt(1.0 + (z / zr) ** 2)
    inv_r = z / (z ** 2 + zr ** 2)  # 1/R(z), 0 at the focus
    phase = K0 * z + 0.5 * K0 * rho2 * inv_r - np.arctan(z / zr)
    env = (waist / wz) * np.exp(-rho2 / wz ** 2)
    return e0 * (env * np.exp(1j * phase))[:, None] * eps[None, :]


def drive_from_field(em: Emitters, field: np.ndarray) -> np.ndarray:
    """Ω_j = conj(d_j)·E(r_j) [Γ0] for a field (N, 3) evaluated at the emitters."""
    return np.sum(np.conj(em.dipoles) * np.asarray(field), axis=1)


def scattered_field(em: Emitters, amplitudes: np.ndarray, points: np.ndarray) -> np.ndarray:
    """E_sc(r) = −(3π/k0) Σ_j G(r − r_j)·d_j c_j at points (M, 3) → (M, 3) complex.

    G·d is contracted analytically (:func:`physics.free_space.greens_sum`), no
    3×3 tensors are formed.  Points closer than MIN_DISTANCE to an emitter are
    returned as NaN (the field of a point dipole diverges there).
    """
    pts = np.asarray(points, dtype=float)
    src = np.asarray(amplitudes, dtype=complex)[:, None] * em.dipoles  # (N, 3)
    field, near = greens_sum(pts, em.positions, src, min_distance=MIN_DISTANCE)
    out = -(3.0 * np.pi / K0) * field
    out[near] = np.nan
    return out


def extinguished_power(drive: np.ndarray, amplitudes: np.ndarray) -> np.ndarray:
    """P_ext = −2 Im(Ω†c) [Γ0]: power taken out of the probe (optical theorem).

    Works on (N,) or (D, N) amplitudes.  In this model it equals the
    scattered power c†Γc exactly (all decay is emission into some channel).
    """
    return -2.0 * np.imag(np.asarray(amplitudes) @ np.conj(np.asarray(drive)))


def scattered_power(H: np.ndarray, amplitudes: np.ndarray) -> np.ndarray:
    """P_sc = c†Γc with Γ = i(H − H†) [Γ0], for (N,) or (D, N) amplitudes."""
    H = np.asarray(H, dtype=complex)
    gamma = 1j * (H - H.conj().T)
    c = np.atleast_2d(np.asarray(amplitudes, dtype=complex))
    out = np.real(np.sum(c.conj() * (c @ gamma.T), axis=1))
    return out if np.ndim(amplitudes) == 2 else out[0]


def plane_wave_flux(amplitude: float = 1.0) -> float:
    """Photon flux density of a plane wave of amplitude E0 [photons per 1/Γ0 per λ0²]."""
    return float(2.0 * K0 ** 2 / (3.0 * np.pi) * abs(amplitude) ** 2)


def beam_transmission(em: Emitters, amplitudes: np.ndarray, waist: float,
                      focus=(0.0, 0.0, 0.0), polarization="x") -> tuple[np.ndarray, np.ndarray]:
    """Transmission into the same Gaussian mode and reflection into the reversed one.

    For steady states c (D, N) driven by the unit-flux beam along +z
    (:func:`gaussian_beam_field`), t = 1 − i Σ conj(Ω^+_j) c_j and
    r = −i Σ conj(Ω^−_j) c_j, Ω^± the drives of the forward and backward beams.
    Paraxial: trustworthy for k0·w ≳ 10.
    """
    c = np.asarray(amplitudes, dtype=complex)
    fwd = drive_from_field(em, gaussian_beam_field(em.positions, waist, focus, "+z",
                                                   polarization))
    bwd = drive_from_field(em, gaussian_beam_field(em.positions, waist, focus, "-z",
                                                   polarization))
    return 1.0 - 1j * (c @ np.conj(fwd)), -1j * (c @ np.conj(bwd))


def _lorentzian(x, x0, width, height, floor):
    return floor + height / (1.0 + (2.0 * (x - x0) / width) ** 2)


def fit_resonance(detunings: np.ndarray, signal: np.ndarray) -> dict[str, float]:
    """Fit one Lorentzian to a spectrum: centre (collective shift) and FWHM (width) [Γ0].

    Returns centre, width, height, floor and the largest relative residual,
    so a poor fit (several resonances) can be recognised.
    """
    x = np.asarray(detunings, float)
    y = np.asarray(signal, float)
    k = int(np.argmax(y))
    half = y[k] / 2.0
    above = np.flatnonzero(y >= half)
    guess_w = max(float(x[above[-1]] - x[above[0]]), float(np.diff(x).mean()))
    p0 = (float(x[k]), guess_w, float(y[k] - y.min()), float(y.min()))
    with warnings.catch_warnings():  # a perfect fit leaves no covariance; it is not used
        warnings.simplefilter("ignore", OptimizeWarning)
        popt, _ = curve_fit(_lorentzian, x, y, p0=p0, maxfev=20000)
    resid = np.max(np.abs(_lorentzian(x, *popt) - y)) / max(float(np.ptp(y)), 1e-300)
    return {"centre": float(popt[0]), "width": float(abs(popt[1])), "height": float(popt[2]),
            "floor": float(popt[3]), "residual": float(resid)}


@dataclass(frozen=True)
class Probe:
    """A weak probe and the detuning range to scan.

    Parameters
    ----------
    kind : "plane_wave", "gaussian_beam" or "guided"
    direction : (3,) float
        Plane wave: propagation direction (normalised here).
    polarization : str or (3,) complex
        "x", "y", "z", "sigma+", "sigma-" or a vector (made transverse).
    waist : float
        Gaussian beam waist [λ0] (beam along ±z through ``focus``).
    focus : (3,) float [λ0]
    beam_direction : "+z" or "-z"
    from_end : "-" or "+"
        Guided probe: the end of the (first) waveguide it enters from.
    detuning_min, detuning_max : float [Γ0]
    points : int
    """

    kind: str = "plane_wave"
    direction: tuple = (0.0, 0.0, 1.0)
    polarization: object = "x"
    waist: float = 2.0
    focus: tuple = (0.0, 0.0, 0.0)
    beam_direction: str = "+z"
    from_end: str = "-"
    detuning_min: float = -5.0
    detuning_max: float = 5.0
    points: int = 401

    def __post_init__(self) -> None:
        if self.kind not in ("plane_wave", "gaussian_beam", "guided"):
            raise ValueError(f"kind: {self.kind!r} is not allowed; allowed: plane_wave, "
                             f"gaussian_beam, guided")
        if not (np.isfinite(self.detuning_min) and np.isfinite(self.detuning_max)
                and -1e6 <= self.detuning_min < self.detuning_max <= 1e6):
            raise ValueError(f"detuning_min, detuning_max: {self.detuning_min!r} to "
                             f"{self.detuning_max!r} is not a range; allowed −1e6 ≤ min < max "
                             f"≤ 1e6 Γ0")
        if not 3 <= int(self.points) <= 20001:
            raise ValueError(f"points: {self.points!r} is out of range; allowed 3 to 20001")

    @property
    def detunings(self) -> np.ndarray:
        return np.linspace(self.detuning_min, self.detuning_max, int(self.points))

    def polarization_vector(self) -> np.ndarray:
        if isinstance(self.polarization, str):
            from .geometry import dipole_vector

            return dipole_vector(self.polarization)
        return _unit(self.polarization, "polarization")

    def incident_field(self, points: np.ndarray) -> np.ndarray:
        """E_in at points (M, 3) [λ0] (not defined for guided probes)."""
        if self.kind == "plane_wave":
            return plane_wave_field(points, self.direction, self.polarization_vector())
        if self.kind == "gaussian_beam":
            return gaussian_beam_field(points, self.waist, self.focus, self.beam_direction,
                                       self.polarization_vector())
        raise ValueError("kind: a guided probe has no free-space incident field")


def _guide(environment):
    from .waveguide import waveguides

    guides = waveguides(environment)
    if not guides:
        raise ValueError("probe.kind: a guided probe needs a waveguide in the environment")
    return guides[0]


def probe_scan(em: Emitters, environment, probe: Probe, detunings=None, *,
               coupling: np.ndarray | None = None, modes=None) -> dict[str, np.ndarray]:
    """Everything a detuning scan measures, as arrays over ``probe.detunings``
    (or over ``detunings`` [Γ0] when given, e.g. a single detuning).

    Always: "detunings" [Γ0], "extinction" and "scattered" power [Γ0] (equal in
    this model), "amplitudes" (D, N).  Plane wave: "cross_section" [λ0²]
    (extinction per incident flux).  Gaussian beam (from −z, going +z) and
    guided probes: complex "t" and "r" into the probe's own mode and the
    reversed one, per unit incident photon flux.

    ``coupling`` is the (N, N) matrix [Γ0] of ``em`` in ``environment`` when the
    caller has it already (it is not built again); ``modes`` are its modes,
    used for the steady states when well conditioned (:func:`steady_states`).
    """
    from .hamiltonian import coupling_matrix

    H = coupling_matrix(em, environment) if coupling is None else coupling
    if probe.kind == "guided":
        guide = _guide(environment)
        drive = guide.probe(em, probe.from_end)
    else:
        drive = drive_from_field(em, probe.incident_field(em.positions))
    d = probe.detunings if detunings is None else np.atleast_1d(np.asarray(detunings, float))
    c = steady_states(H, drive, d, modes=modes)
    out = {"detunings": d, "amplitudes": c, "extinction": extinguished_power(drive, c),
           "scattered": scattered_power(H, c)}
    if probe.kind == "plane_wave":
        out["cross_section"] = out["extinction"] / plane_wave_flux()
    elif probe.kind == "gaussian_beam":
        t, r = beam_transmission(em, c, probe.waist, probe.focus, probe.polarization_vector())
        if probe.beam_direction == "-z":
            raise ValueError("beam_direction: reflection/transmission are computed for a beam "
                             "going +z; mirror the array instead")
        out["t"], out["r"] = t, r
    else:
        out["t"], out["r"] = guide.transmission(em, c, probe.from_end)
    return out


def field_intensity_map(em: Emitters, probe: Probe, amplitudes: np.ndarray, plane: str = "xz",
                        half_width: float = 3.0, pixels: int = 101, offset: float = 0.0
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """|E_in + E_sc|² on a square of a coordinate plane through the array centre.

    Parameters
    ----------
    plane : "xy", "xz" or "yz"
    half_width : float [λ0]
    offset : float [λ0]
        Shift of the plane along its normal from the array centre.

    Returns
    -------
    u, v : (P,) coordinates along the plane's two axes [λ0]
    intensity : (P, P) float, row = v, column = u; NaN next to an emitter.
    Free-space probes only (the scattered field is the free-space one).
    """
    axes = {"xy": (0, 1, 2), "xz": (0, 2, 1), "yz": (1, 2, 0)}[plane]
    centre = em.positions.mean(axis=0)
    u = np.linspace(-half_width, half_width, pixels)
    U, V = np.meshgrid(u, u, indexing="xy")
    pts = np.zeros((U.size, 3)) + centre
    pts[:, axes[0]] += U.ravel()
    pts[:, axes[1]] += V.ravel()
    pts[:, axes[2]] += offset
    total = probe.incident_field(pts) + scattered_field(em, amplitudes, pts)
    return (u + centre[axes[0]], u + centre[axes[1]],
            np.sum(np.abs(total) ** 2, axis=1).reshape(U.shape))


def scan_signal(scan: dict, kind: str) -> tuple[np.ndarray, str]:
    """The natural one-number spectrum of a scan and its name.

    Guided probe: the loss from the guided mode 1 − |t|²; Gaussian beam: the
    reflection |r|² into the beam's own mode; plane wave: the extinction
    cross-section [λ0²].
    """
    if kind == "guided":
        return 1.0 - np.abs(scan["t"]) ** 2, "1 − |t|² (loss from the guided probe)"
    if kind == "gaussian_beam":
        return np.abs(scan["r"]) ** 2, "|r|² (reflection into the beam's mode)"
    return scan["cross_section"], "extinction cross-section [λ0²]"


def field_intensity_line(em: Emitters, probe: Probe, amplitudes: np.ndarray, start, end,
                         points: int = 201) -> tuple[np.ndarray, np.ndarray]:
    """|E_in + E_sc|² along the segment start → end [λ0].

    Returns the distance from ``start`` (P,) [λ0] and the intensity (P,), NaN
    next to an emitter.  Free-space probes only.
    """
    a, b = np.asarray(start, float), np.asarray(end, float)
    if a.shape != (3,) or b.shape != (3,) or np.allclose(a, b):
        raise ValueError("start, end: expected two different points (x, y, z) [λ0]")
    s = np.linspace(0.0, 1.0, int(points))
    pts = a[None, :] + s[:, None] * (b - a)[None, :]
    total = probe.incident_field(pts) + scattered_field(em, amplitudes, pts)
    return s * np.linalg.norm(b - a), np.sum(np.abs(total) ** 2, axis=1)
