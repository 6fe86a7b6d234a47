"""One cavity mode in the bad-cavity (Markov) limit.

Model (ħ = 1, frame rotating at ω0):  H = Δc a†a + Σ_i (g_i σ_i† a + g_i* a† σ_i),
Δc = ω_cavity − ω0, photon loss at the energy decay rate κ.  When κ is the
fastest rate (2 g√N ≪ κ), the mode follows the emitters adiabatically,
a ≈ −Σ_j g_j* σ_j / (Δc − iκ/2), and eliminating it adds

    H_ij = − g_i g_j* / (Δc − iκ/2)

to the coupling matrix: collective shifts −g_i g_j* Δc/(Δc² + κ²/4) and
dissipative couplings g_i g_j* κ/(Δc² + κ²/4).  On resonance a single emitter
gains the Purcell rate 4g²/κ; N equally coupled emitters share one bright mode
at N·4g²/κ.

Coupling of emitter i: g_i = g · u(r_i) · (ε·d_i*), with the mode profile
u = cos(k_c (s − s_0)) · exp(−ρ²/w²) (s along the cavity axis through
``center``, ρ the distance from that axis, s_0 an antinode at ``center``) and ε
the (real) polarisation; the conjugate on d_i matches the free-space convention
conj(d_i)·G·d_j.

References
----------
H. J. Carmichael, *Statistical Methods in Quantum Optics 2* (Springer, 2008),
ch. 13 (bad-cavity limit, adiabatic elimination); H. Tanji-Suzuki et al., Adv.
At. Mol. Opt. Phys. 60, 201 (2011) (collective coupling to a cavity mode);
E. M. Purcell, Phys. Rev. 69, 681 (1946).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .environment import Summable
from .geometry import Emitters

__all__ = ["CavityMode", "MARKOV_RATIO"]

_AXES = {"x": 0, "y": 1, "z": 2}
_UNIT = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}

#: The bad-cavity description is flagged when 2 g_coll ≥ MARKOV_RATIO · κ, with
#: g_coll = √(Σ|g_i|²) the collective coupling (vacuum Rabi splitting 2 g_coll).
MARKOV_RATIO = 0.5


@dataclass(frozen=True)
class CavityMode(Summable):
    """A single cavity mode, adiabatically eliminated.

    Parameters
    ----------
    g : float
        Peak single-emitter coupling g [Γ0] (vacuum Rabi frequency 2g).
    kappa : float
        Cavity energy decay rate κ [Γ0].
    detuning : float
        Δc = ω_cavity − ω0 [Γ0].
    axis : "x", "y" or "z"
        Cavity axis.
    polarization : "x", "y" or "z"
        Linear polarisation of the mode, perpendicular to the axis.
    standing_wave : bool
        cos(k_c s) profile along the axis (Fabry–Pérot); False = uniform (ring cavity
        or emitters at antinodes).
    waist : float or None
        Gaussian waist w [λ0]; None = no transverse dependence.
    k_cavity : float
        Mode wavenumber [1/λ0] (2π for a mode at λ0).
    center : (3,) tuple of float
        A point on the axis that is an antinode [λ0].
    """

    g: float
    kappa: float
    detuning: float = 0.0
    axis: str = "z"
    polarization: str = "x"
    standing_wave: bool = True
    waist: float | None = None
    k_cavity: float = 2.0 * np.pi
    center: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def __post_init__(self) -> None:
        checks = [("g", self.g, 0.0, 1e6), ("kappa", self.kappa, 1e-6, 1e8),
                  ("detuning", self.detuning, -1e8, 1e8), ("k_cavity", self.k_cavity, 0.01, 1e3)]
        if self.waist is not None:
            checks.append(("waist", self.waist, 0.05, 1e4))
        for name, value, lo, hi in checks:
            v = float(value)
            if not (np.isfinite(v) and lo <= v <= hi):
                raise ValueError(f"{name}: {value!r} is out of range; allowed {lo:g} to {hi:g}")
        if self.axis not in _AXES:
            raise ValueError(f"axis: {self.axis!r} is not allowed; allowed: x, y, z")
        if self.polarization not in _AXES or self.polarization == self.axis:
            allowed = ", ".join(a for a in _AXES if a != self.axis)
            raise ValueError(f"polarization: {self.polarization!r} is not allowed for a cavity "
                             f"along {self.axis}; allowed: {allowed}")
        object.__setattr__(self, "center", tuple(float(c) for c in self.center))

    def mode_profile(self, positions: np.ndarray) -> np.ndarray:
        """u(r) at each position (real, |u| ≤ 1)."""
        rel = np.asarray(positions, float) - np.asarray(self.center)
        a = _AXES[self.axis]
        u = np.cos(self.k_cavity * rel[:, a]) if self.standing_wave else np.ones(len(rel))
        if self.waist is not None:
            rho2 = np.sum(np.delete(rel, a, axis=1) ** 2, axis=1)
            u = u * np.exp(-rho2 / self.waist ** 2)
        return u

    def couplings(self, em: Emitters) -> np.ndarray:
        """g_i = g u(r_i) (ε·d_i*) [Γ0], (N,) complex."""
        eps = np.array(_UNIT[self.polarization])
        return self.g * self.mode_profile(em.positions) * (np.conj(em.dipoles) @ eps)

    def collective_coupling(self, em: Emitters) -> float:
        """g_coll = √(Σ|g_i|²) [Γ0]."""
        return float(np.sqrt(np.sum(np.abs(self.couplings(em)) ** 2)))

    def coupling(self, em: Emitters) -> np.ndarray:
        """(N, N) complex contribution −g_i g_j*/(Δc − iκ/2) [Γ0]."""
        gi = self.couplings(em)
        return -np.outer(gi, np.conj(gi)) / (self.detuning - 0.5j * self.kappa)

    def purcell_rate(self) -> float:
        """Single-emitter rate into the mode at peak coupling, g²κ/(Δc² + κ²/4) [Γ0]."""
        return self.g ** 2 * self.kappa / (self.detuning ** 2 + 0.25 * self.kappa ** 2)

    def check(self, em: Emitters) -> list[str]:
        gc = self.collective_coupling(em)
        if 2.0 * gc >= MARKOV_RATIO * self.kappa:  # the message asks for a strict <
            return [f"cavity: collective coupling 2·g_coll = {2 * gc:.3g} Γ0 is not small "
                    f"compared with κ = {self.kappa:g} Γ0 (needs 2·g_coll < "
                    f"{MARKOV_RATIO:g}·κ): the array and the mode are (near) strong coupling, "
                    f"vacuum Rabi oscillations and polaritons appear, and the eliminated-mode "
                    f"(bad-cavity) model used here does not describe them"]
        return []

    def emitted_power(self, em: Emitters, amplitudes: np.ndarray) -> dict[str, float]:
        """|Σ_j g_j* c_j|² κ/(Δc² + κ²/4): photons leaking out of the cavity [Γ0]."""
        amp = np.vdot(self.couplings(em), np.asarray(amplitudes, dtype=complex))
        return {"cavity output": float(abs(amp) ** 2 * self.kappa
                                       / (self.detuning ** 2 + 0.25 * self.kappa ** 2))}

    @property
    def symmetry_operations(self) -> tuple[str, ...]:
        return ()  # the mode is anchored at `center`, not at the array's centroid

    def describe(self) -> str:
        prof = "standing wave" if self.standing_wave else "uniform"
        w = f", waist {self.waist:g} λ0" if self.waist is not None else ""
        return (f"cavity mode along {self.axis} ({prof}{w}; g = {self.g:g}, κ = {self.kappa:g}, "
                f"Δc = {self.detuning:g} Γ0; peak single-emitter rate into the mode "
                f"{self.purcell_rate():.3g} Γ0)")
