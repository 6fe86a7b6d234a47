"""A one-dimensional waveguide: emitters coupled through one guided mode.

Emitters at coordinates s_i along the waveguide axis emit into the forward
(+axis) direction at rate Γ_f, into the backward direction at Γ_b, and
elsewhere at Γ' (all in Γ0).  With guided wavenumber k (units 1/λ0, k = 2π n_eff)
the Markovian coupling is

    H_ij = −i Γ_f e^{ik(s_i − s_j)}     if s_i > s_j  (i downstream of j)
    H_ij = −i Γ_b e^{−ik(s_i − s_j)}    if s_i < s_j
    H_ij = −i (Γ_f + Γ_b)/2             if s_i = s_j, i ≠ j
    H_ii = −i (Γ_f + Γ_b + Γ')/2

so that Γ = i(H − H†) = Γ_f u u† + Γ_b v v† + Γ' I with u_i = e^{iks_i},
v_i = e^{−iks_i}.  At equal coordinates the step function is taken as ½ (the
emitter sits on the other's emission point in both directions); this keeps
Γ of that rank-two form, so decay rates stay non-negative, and for a
bidirectional guide it agrees with both one-sided formulas.  The coupling is
scalar: the dipole orientation enters only through the rates.

References
----------
D. E. Chang, L. Jiang, A. V. Gorshkov, H. J. Kimble, New J. Phys. 14, 063003
(2012) — bidirectional waveguide QED with atomic arrays;
P. Lodahl et al., Nature 541, 473 (2017) — chiral quantum optics (review);
H. Pichler, T. Ramos, A. J. Daley, P. Zoller, Phys. Rev. A 91, 042116 (2015)
— cascaded (chiral) master equations.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .environment import Summable, parts_of
from .geometry import Emitters

__all__ = ["Waveguide", "waveguides", "upstream_emitter", "guided_figures", "guided_response"]

_AXES = {"x": 0, "y": 1, "z": 2}
_FLIPS = {"x": ("mirror x", "C2 y", "C2 z", "inversion"),
          "y": ("mirror y", "C2 x", "C2 z", "inversion"),
          "z": ("mirror z", "C2 x", "C2 y", "inversion")}
_ALL_OPS = ("mirror x", "mirror y", "mirror z", "C2 z", "C2 x", "C2 y", "inversion")


def _rate(name: str, value: float) -> float:
    value = float(value)
    if not (np.isfinite(value) and 0.0 <= value <= 1e4):
        raise ValueError(f"{name}: {value!r} is out of range; allowed 0 to 1e4 Γ0")
    return value


@dataclass(frozen=True)
class Waveguide(Summable):
    """Coupling through one guided mode along ``axis``.

    Parameters
    ----------
    gamma_forward, gamma_backward : float
        Decay rates into the guided mode towards +axis and −axis [Γ0].
    gamma_loss : float
        Γ': decay into everything else [Γ0] (0 when free space is added).
    k_guided : float
        Guided wavenumber [1/λ0], i.e. 2π n_eff (2π: the guided wave has λ0).
    axis : "x", "y" or "z"
        Direction of the waveguide.
    """

    gamma_forward: float
    gamma_backward: float
    gamma_loss: float = 0.0
    k_guided: float = 2.0 * np.pi
    axis: str = "z"

    def __post_init__(self) -> None:
        _rate("gamma_forward", self.gamma_forward)
        _rate("gamma_backward", self.gamma_backward)
        _rate("gamma_loss", self.gamma_loss)
        k = float(self.k_guided)
        if not (np.isfinite(k) and 0.01 <= k <= 1e3):
            raise ValueError(f"k_guided: {self.k_guided!r} is out of range; allowed 0.01 to "
                             f"1000 per λ0 (2π·n_eff)")
        if self.axis not in _AXES:
            raise ValueError(f"axis: {self.axis!r} is not allowed; allowed: x, y, z")

    @property
    def gamma_guided(self) -> float:
        """Γ_1D = Γ_f + Γ_b [Γ0]."""
        return self.gamma_forward + self.gamma_backward

    @property
    def beta(self) -> float:
        """β-factor: the fraction of a single emitter's decay that is guided."""
        total = self.gamma_guided + self.gamma_loss
        return self.gamma_guided / total if total > 0 else 0.0

    @property
    def directionality(self) -> float:
        """(Γ_f − Γ_b)/(Γ_f + Γ_b): 0 bidirectional, ±1 perfectly chiral."""
        g = self.gamma_guided
        return (self.gamma_forward - self.gamma_backward) / g if g > 0 else 0.0

    @property
    def n_eff(self) -> float:
        """Effective index k_guided/(2π)."""
        return self.k_guided / (2.0 * np.pi)

    @property
    def symmetry_operations(self) -> tuple[str, ...]:
        # operations that reverse the axis swap forward and backward
        if np.isclose(self.gamma_forward, self.gamma_backward, rtol=0, atol=1e-15):
            return _ALL_OPS
        return tuple(op for op in _ALL_OPS if op not in _FLIPS[self.axis])

    def coordinates(self, em: Emitters) -> np.ndarray:
        """Coordinate s_i of each emitter along the axis [λ0]."""
        return em.positions[:, _AXES[self.axis]]

    def coupling(self, em: Emitters) -> np.ndarray:
        """(N, N) complex contribution to H [Γ0], diagonal −i(Γ_f + Γ_b + Γ')/2."""
        s = self.coordinates(em)
        ds = s[:, None] - s[None, :]
        phase = np.exp(1j * self.k_guided * np.abs(ds))
        # coordinates equal to 1e-12 λ0 count as equal (round-off in generated arrays)
        ahead = ds > 1e-12
        behind = ds < -1e-12
        H = np.where(ahead, -1j * self.gamma_forward * phase,
                     np.where(behind, -1j * self.gamma_backward * phase,
                              -0.5j * self.gamma_guided + 0j))
        np.fill_diagonal(H, -0.5j * (self.gamma_guided + self.gamma_loss))
        return H

    def guided_power(self, em: Emitters, amplitudes: np.ndarray) -> tuple[float, float]:
        """Power emitted into the forward and backward guided mode [Γ0].

        P_f = Γ_f |Σ_j c_j e^{−iks_j}|², P_b = Γ_b |Σ_j c_j e^{iks_j}|²; with Γ'‖c‖²
        they add up to c†Γc, the total decay of the state in this channel.
        """
        c = np.asarray(amplitudes, dtype=complex)
        s = self.coordinates(em)
        fwd = self.gamma_forward * abs(np.sum(c * np.exp(-1j * self.k_guided * s))) ** 2
        bwd = self.gamma_backward * abs(np.sum(c * np.exp(1j * self.k_guided * s))) ** 2
        return float(fwd), float(bwd)

    def emitted_power(self, em: Emitters, amplitudes: np.ndarray) -> dict[str, float]:
        fwd, bwd = self.guided_power(em, amplitudes)
        c = np.asarray(amplitudes, dtype=complex)
        out = {f"guided, towards +{self.axis}": fwd, f"guided, towards −{self.axis}": bwd}
        if self.gamma_loss > 0:
            out["waveguide loss Γ'"] = float(self.gamma_loss * np.vdot(c, c).real)
        return out

    def probe(self, em: Emitters, from_end: str = "-") -> np.ndarray:
        """Drive Ω_j of a guided probe of unit photon flux.

        ``from_end="-"``: entering at the −axis end, travelling +axis,
        Ω_j = √Γ_f e^{iks_j}; ``"+"``: entering at the +axis end, Ω_j = √Γ_b e^{−iks_j}.
        """
        s = self.coordinates(em)
        if from_end == "-":
            return np.sqrt(self.gamma_forward) * np.exp(1j * self.k_guided * s)
        if from_end == "+":
            return np.sqrt(self.gamma_backward) * np.exp(-1j * self.k_guided * s)
        raise ValueError(f"from_end: {from_end!r} is not allowed; allowed: -, +")

    def transmission(self, em: Emitters, amplitudes: np.ndarray, from_end: str = "-"
                     ) -> tuple[np.ndarray, np.ndarray]:
        """Guided transmission t and reflection r for steady states c (…, N).

        For a probe from the −axis end: t = 1 − i√Γ_f Σ_j e^{−iks_j} c_j and
        r = −i√Γ_b Σ_j e^{iks_j} c_j (phases referred to s = 0); from the +axis
        end the roles of Γ_f and Γ_b and the signs of the phases swap.

        References
        ----------
        J.-T. Shen and S. Fan, Opt. Lett. 30, 2001 (2005) (single emitter);
        Chang et al., New J. Phys. 14, 063003 (2012) (arrays).
        """
        c = np.asarray(amplitudes, dtype=complex)
        phase = np.exp(1j * self.k_guided * self.coordinates(em))
        if from_end == "+":
            phase = np.conj(phase)
            g_in, g_back = self.gamma_backward, self.gamma_forward
        elif from_end == "-":
            g_in, g_back = self.gamma_forward, self.gamma_backward
        else:
            raise ValueError(f"from_end: {from_end!r} is not allowed; allowed: -, +")
        t = 1.0 - 1j * np.sqrt(g_in) * (c @ np.conj(phase))
        r = -1j * np.sqrt(g_back) * (c @ phase)
        return t, r

    def describe(self) -> str:
        kind = ("bidirectional" if abs(self.directionality) < 1e-12 else
                "chiral" if abs(abs(self.directionality) - 1) < 1e-12 else "partly chiral")
        return (f"{kind} waveguide along {self.axis} (Γ_f = {self.gamma_forward:g}, "
                f"Γ_b = {self.gamma_backward:g}, Γ' = {self.gamma_loss:g} Γ0, "
                f"n_eff = {self.n_eff:.4g})")


def waveguides(environment) -> list[Waveguide]:
    """The waveguide channels of an environment (possibly none)."""
    return [p for p in parts_of(environment) if isinstance(p, Waveguide)]


def upstream_emitter(em: Emitters, environment) -> int:
    """Index of the emitter furthest upstream on the first waveguide (0 without one)."""
    guides = waveguides(environment)
    return int(np.argmin(guides[0].coordinates(em))) if guides else 0


def guided_figures(environment) -> dict[str, float] | None:
    """β-factor and directionality of one emitter in ``environment``, or None without a guide.

    β = Γ_1D / (total single-emitter decay rate), counting every channel of the
    sum: free space (its weight), each waveguide's Γ_f + Γ_b + Γ'.  A cavity's
    contribution depends on where the emitter sits and is left out (β of an
    emitter away from the cavity mode).  Directionality = (Γ_f − Γ_b)/(Γ_f + Γ_b).
    """
    guides = waveguides(environment)
    if not guides:
        return None
    fwd = sum(g.gamma_forward for g in guides)
    bwd = sum(g.gamma_backward for g in guides)
    total = float(getattr(environment, "free_space_weight", 0.0)) + sum(
        g.gamma_guided + g.gamma_loss for g in guides)
    return {"beta": (fwd + bwd) / total if total > 0 else 0.0,
            "directionality": (fwd - bwd) / (fwd + bwd) if fwd + bwd > 0 else 0.0}


def guided_response(em: Emitters, environment, detunings: np.ndarray, t_max: float,
                    num_times: int = 200) -> dict[str, np.ndarray] | None:
    """What a waveguide experiment sees, exact also for defective (chiral) matrices.

    - Guided probe from the −axis end of the first waveguide in ``environment``:
      transmission t(Δ) and reflection r(Δ) from (H − Δ)c = −Ω (one Schur
      decomposition, physics.driving).
    - Decay after exciting the emitter furthest upstream: total excited
      population Σ|c_j(t)|² from c(t) = e^{−iHt} c(0) (physics.dynamics).

    Returns None when the environment has no waveguide.

    Parameters
    ----------
    detunings : (D,) float ndarray [Γ0]
    t_max : float [1/Γ0]
    """
    from .driving import steady_states
    from .dynamics import evolve
    from .hamiltonian import coupling_matrix

    guides = waveguides(environment)
    if not guides:
        return None
    guide = guides[0]
    H = coupling_matrix(em, environment)
    amps = steady_states(H, guide.probe(em), detunings)
    t, r = guide.transmission(em, amps)
    first = upstream_emitter(em, environment)
    c0 = np.zeros(em.n, dtype=complex)
    c0[first] = 1.0
    times, c = evolve(H, c0, t_max, num_times)
    return {"detunings": np.asarray(detunings, float), "t": t, "r": r, "times": times,
            "population": np.sum(np.abs(c) ** 2, axis=1), "first": first}
