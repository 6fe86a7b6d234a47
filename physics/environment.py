"""What all environments share: summing them with ``+``.

An environment is a frozen dataclass with

- ``coupling(em) -> (N, N) complex`` [Γ0], its diagonal included: the part of
  the effective Hamiltonian that this electromagnetic channel contributes;
- ``describe() -> str``;
- ``symmetry_operations``: names of the point operations (physics.symmetry)
  that leave the channel's coupling invariant for any arrangement.

Sums
----
``FreeSpace() + Waveguide(...)`` adds the channels' matrices, diagonals
included: an emitter's total decay rate is the sum of the rates into each
channel.  Γ0 stays the unit (the decay rate of one emitter in vacuum); the
free-space part can be scaled, ``FreeSpace(scale=0.8)``, to model emitters
whose non-guided emission is modified (e.g. near a nanofibre).  The
``gamma_loss`` (Γ') of a waveguide stands for *all non-guided* decay when free
space is not modelled; when ``FreeSpace`` is part of the sum it already
provides that emission, so Γ' should then hold only extra losses (usually 0)
— otherwise Γ0 is counted twice.  Choir does not guess: the sum is literal.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .geometry import Emitters

__all__ = ["Summable", "Combined", "parts_of"]


class Summable:
    """Mixin: environments add up with ``+``."""

    #: Weight of free-space radiation in this channel: the far field of a state
    #: is this times the vacuum formula (physics.far_field).  0 for guided or
    #: cavity channels, `scale` for FreeSpace, summed for a Combined.
    free_space_weight: float = 0.0

    def __add__(self, other):
        if not isinstance(other, Summable):
            return NotImplemented
        return Combined(parts_of(self) + parts_of(other))

    def check(self, em: Emitters) -> list[str]:
        """Model-validity notes for this arrangement (empty when all is well)."""
        return []

    def emitted_power(self, em: Emitters, amplitudes: np.ndarray) -> dict[str, float]:
        """Power the state c sends into this channel, c†Γ_k c with Γ_k = i(H_k − H_k†) [Γ0].

        Summed over the channels of an environment it is the state's total
        decay rate (for a unit-norm eigenvector, the mode's decay rate).
        Subclasses split a channel further where that is meaningful.
        """
        c = np.asarray(amplitudes, dtype=complex)
        H = self.coupling(em)
        gamma = 1j * (H - H.conj().T)
        return {self.describe(): float(np.real(np.vdot(c, gamma @ c)))}


def parts_of(env) -> tuple:
    """The channels of an environment: its parts for a sum, else the environment alone."""
    return env.parts if isinstance(env, Combined) else (env,)


@dataclass(frozen=True)
class Combined(Summable):
    """A sum of environments: H = Σ_k H_k (diagonals included)."""

    parts: tuple

    def __post_init__(self) -> None:
        if len(self.parts) < 1:
            raise ValueError("environment: a sum needs at least one part")

    def coupling(self, em: Emitters) -> np.ndarray:
        H = self.parts[0].coupling(em)
        for part in self.parts[1:]:
            H = H + part.coupling(em)
        return H

    def describe(self) -> str:
        return " + ".join(p.describe() for p in self.parts)

    @property
    def symmetry_operations(self) -> tuple[str, ...]:
        ops = [set(p.symmetry_operations) for p in self.parts]
        common = set.intersection(*ops)
        return tuple(o for o in self.parts[0].symmetry_operations if o in common)

    def check(self, em: Emitters) -> list[str]:
        return [note for p in self.parts for note in p.check(em)]

    @property
    def free_space_weight(self) -> float:
        return float(sum(p.free_space_weight for p in self.parts))

    def emitted_power(self, em: Emitters, amplitudes: np.ndarray) -> dict[str, float]:
        out: dict[str, float] = {}
        for k, p in enumerate(self.parts):
            for name, value in p.emitted_power(em, amplitudes).items():
                if name in out:  # two parts of one kind: keep both, or the sum is lost
                    name = f"{name} (part {k + 1})"
                out[name] = value
        return out
