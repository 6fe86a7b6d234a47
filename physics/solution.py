"""One call from a scenario to everything the views and exports need.

Solving captures the warnings that matter to a user (a defective matrix,
leaving the model's range) as plain notes, and for waveguide environments adds
the guided probe spectrum and decay curve, which stay meaningful when the
eigenvectors do not.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from .geometry import Emitters
from .hamiltonian import ModelLimitWarning
from .modes import DefectiveMatrixWarning, Modes, solve_modes
from .waveguide import guided_figures, guided_response

__all__ = ["Solution", "solve_scenario", "GUIDED_POINTS"]

#: Detuning points of the default guided probe scan.
GUIDED_POINTS = 401


@dataclass(frozen=True, eq=False)
class Solution:
    """Modes of one scenario and what comes with them."""

    emitters: Emitters
    environment: Any
    modes: Modes
    notes: tuple[str, ...]  # model-limit warnings, in words
    defective: bool  # eigenvectors meaningless (e.g. a chiral waveguide)
    guided: dict | None  # physics.waveguide.guided_response, or None without a waveguide


def solve_scenario(sc, *, guided_points: int = GUIDED_POINTS) -> Solution:
    """Solve a :class:`physics.scenario.Scenario`.

    The guided scan (waveguide environments only) spans ± max(10 Γ_1, 2 Γ_max)
    in detuning, Γ_1 the largest single-emitter rate and Γ_max the largest
    collective rate, and the decay curve runs to 20/Γ_1.
    """
    em = sc.emitters()
    env = sc.environment_model()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DefectiveMatrixWarning)
        warnings.simplefilter("always", ModelLimitWarning)
        modes = solve_modes(em, env)
    defective = any(issubclass(w.category, DefectiveMatrixWarning) for w in caught)
    notes = tuple(str(w.message) for w in caught
                  if not issubclass(w.category, DefectiveMatrixWarning))
    guided = None
    if guided_figures(env) is not None:
        single = float(-2.0 * np.diagonal(env.coupling(em)).imag.max())
        span = max(10.0 * single, 2.0 * float(modes.decay_rates.max()))
        guided = guided_response(em, env, np.linspace(-span, span, guided_points), 20.0 / single)
    return Solution(em, env, modes, notes, defective, guided)
