"""Choir physics core: the single-excitation, Markovian spin model of emitter arrays.

Internal units, used by every function in this package
-----------------------------------------------------
- lengths: the transition wavelength λ0 (so k0 = 2π);
- rates and frequency shifts: the single-emitter decay rate Γ0;
- times: 1/Γ0.
Values in other units carry a suffix (``wavelength_nm``, ``linewidth_mhz``)
and are converted only at the edges (:mod:`physics.units`, the scenario file,
the app).

Model limits (state them to users): Markov approximation (no retardation
across the array, no strong coupling), point dipoles, two-level emitters,
single excitation (linear optics), emitters at rest; for a cavity, the
bad-cavity limit (2 g√N ≪ κ).

This package imports numpy and scipy only: no UI or plotting libraries.
"""
from __future__ import annotations

from . import lattices
from .far_field import collected_fraction, far_field_power, total_power
from .cavity import CavityMode
from .environment import Combined
from .free_space import FreeSpace
from .geometry import Emitters, dipole_vector, polar_dipole
from .hamiltonian import ModelLimitWarning, coupling_matrix
from .modes import DefectiveMatrixWarning, Modes, solve_modes
from .units import TRANSITIONS, Transition
from .waveguide import Waveguide

__all__ = [
    "Emitters",
    "lattices",
    "dipole_vector",
    "polar_dipole",
    "FreeSpace",
    "Waveguide",
    "CavityMode",
    "Combined",
    "ModelLimitWarning",
    "coupling_matrix",
    "solve_modes",
    "Modes",
    "DefectiveMatrixWarning",
    "far_field_power",
    "total_power",
    "collected_fraction",
    "Transition",
    "TRANSITIONS",
]
