"""Conversion between internal units and lab units.

Internal units (used by every formula in ``physics``): lengths in λ0, rates
and frequency shifts in Γ0, times in 1/Γ0.  Lab units: nanometres,
megahertz as an ordinary frequency (Γ/2π, ω/2π) and nanoseconds.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Transition", "TRANSITIONS"]


@dataclass(frozen=True)
class Transition:
    """An optical transition that sets the internal units.

    Parameters
    ----------
    wavelength_nm : float
        Transition wavelength λ0 in vacuum [nm].
    linewidth_mhz : float
        Natural linewidth Γ0/2π [MHz].
    name : str
        Label shown to users.
    """

    wavelength_nm: float
    linewidth_mhz: float
    name: str = "custom"

    def __post_init__(self) -> None:
        if not (np.isfinite(self.wavelength_nm) and 1.0 <= self.wavelength_nm <= 1e7):
            raise ValueError(f"wavelength_nm: {self.wavelength_nm!r} is out of range; "
                             f"allowed 1 to 1e7 nm")
        if not (np.isfinite(self.linewidth_mhz) and 1e-12 <= self.linewidth_mhz <= 1e6):
            raise ValueError(f"linewidth_mhz: {self.linewidth_mhz!r} is out of range; "
                             f"allowed 1e-12 to 1e6 MHz")

    @property
    def gamma0_per_s(self) -> float:
        """Γ0 in s⁻¹ (angular), 2π × linewidth."""
        return 2.0 * np.pi * self.linewidth_mhz * 1e6

    @property
    def lifetime_ns(self) -> float:
        """Single-emitter lifetime 1/Γ0 [ns]."""
        return 1e9 / self.gamma0_per_s

    def length_nm(self, length):
        """λ0 → nm."""
        return np.asarray(length) * self.wavelength_nm

    def length_internal(self, length_nm):
        """nm → λ0."""
        return np.asarray(length_nm) / self.wavelength_nm

    def frequency_mhz(self, rate):
        """Γ0 → MHz as an ordinary frequency (a rate Γ becomes Γ/2π, a shift ω becomes ω/2π)."""
        return np.asarray(rate) * self.linewidth_mhz

    def frequency_internal(self, value_mhz):
        """MHz (Γ/2π or ω/2π) → Γ0."""
        return np.asarray(value_mhz) / self.linewidth_mhz

    def time_ns(self, time):
        """1/Γ0 → ns."""
        return np.asarray(time) * self.lifetime_ns

    def time_internal(self, time_ns):
        """ns → 1/Γ0."""
        return np.asarray(time_ns) / self.lifetime_ns


#: Common transitions.  Vacuum wavelengths and natural linewidths Γ/2π.
TRANSITIONS: dict[str, Transition] = {
    # D. A. Steck, "Rubidium 87 D Line Data", rev. 2.3.3 (2024), Tables 3 and 7 (values from memory)
    "Rb87 D2": Transition(780.241209686, 6.0666, "Rb87 D2"),
    # D. A. Steck, "Rubidium 87 D Line Data", rev. 2.3.3 (2024), Table 5 (values from memory)
    "Rb87 D1": Transition(794.978851156, 5.7500, "Rb87 D1"),
    # D. A. Steck, "Cesium D Line Data", rev. 2.3.3 (2024), Table 3 (values from memory)
    "Cs133 D2": Transition(852.34727582, 5.2227, "Cs133 D2"),
    # D. A. Steck, "Sodium D Line Data", rev. 2.3.2 (2023), Table 3 (values from memory)
    "Na23 D2": Transition(589.1583264, 9.7946, "Na23 D2"),
    # T. G. Tiecke, "Properties of Potassium" (2019), Table 7 (values from memory)
    "K39 D2": Transition(766.700921822, 6.035, "K39 D2"),
    # Sr 5s² ¹S0 → 5s5p ³P1 intercombination line, Γ/2π ≈ 7.4 kHz (from memory)
    "Sr88 689 nm": Transition(689.449, 7.4e-3, "Sr88 689 nm"),
    # Yb 6s² ¹S0 → 6s6p ³P1 intercombination line, Γ/2π ≈ 182 kHz (from memory)
    "Yb174 556 nm": Transition(555.802, 0.182, "Yb174 556 nm"),
}
