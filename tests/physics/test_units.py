"""Tests for physics/units.py: conversion between internal and lab units."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from physics import TRANSITIONS, Transition


def _rounding_tolerance(*quoted: tuple[float, float]) -> float:
    """Relative tolerance from values quoted to a last digit: Σ (half a unit)/value."""
    return sum(0.5 * unit / value for value, unit in quoted)


@pytest.mark.parametrize(
    ("name", "linewidth_mhz", "lifetime_ns"),
    [
        # D. A. Steck, "Rubidium 87 D Line Data": Γ/2π = 6.0666 MHz, τ = 26.2348 ns
        # (D2 line; from memory)
        pytest.param("Rb87 D2", (6.0666, 1e-4), (26.2348, 1e-4), id="Rb87-D2"),
        # D. A. Steck, "Cesium D Line Data": Γ/2π = 5.2227 MHz, τ = 30.473 ns
        # (D2 line; from memory)
        pytest.param("Cs133 D2", (5.2227, 1e-4), (30.473, 1e-3), id="Cs133-D2"),
    ],
)
def test_lifetime_from_linewidth(name: str, linewidth_mhz, lifetime_ns) -> None:
    # τ = 1/Γ0 = 1/(2π · Γ/2π).  The handbook quotes both numbers rounded to their
    # last digit, so they agree only to the sum of the two rounding errors.
    t = TRANSITIONS[name]
    assert t.linewidth_mhz == pytest.approx(linewidth_mhz[0], rel=1e-12)
    tol = _rounding_tolerance(linewidth_mhz, lifetime_ns)
    assert t.lifetime_ns == pytest.approx(lifetime_ns[0], rel=tol)


@pytest.mark.parametrize("name", [pytest.param(k, id=k) for k in TRANSITIONS])
def test_transition_constants_are_consistent(name: str) -> None:
    t = TRANSITIONS[name]
    assert t.name == name
    # Γ0 [1/s] × τ [s] = 1, and one internal unit maps onto the defining constants
    assert t.gamma0_per_s * t.lifetime_ns * 1e-9 == pytest.approx(1.0, rel=1e-14)
    assert t.length_nm(1.0) == pytest.approx(t.wavelength_nm, rel=1e-15)
    assert t.frequency_mhz(1.0) == pytest.approx(t.linewidth_mhz, rel=1e-15)
    assert t.time_ns(1.0) == pytest.approx(t.lifetime_ns, rel=1e-15)


def test_rb87_numbers() -> None:
    t = TRANSITIONS["Rb87 D2"]
    # 0.5 λ0 at 780.241 nm (Steck, Rubidium 87 D Line Data, from memory)
    assert t.length_nm(0.5) == pytest.approx(390.1206, rel=1e-6)
    # Γ0 = 2π × 6.0666 MHz = 3.8117e7 s⁻¹ (Steck, from memory)
    assert t.gamma0_per_s == pytest.approx(3.8117e7, rel=2e-5)
    # a collective shift of −2.5 Γ0 is −2.5 × 6.0666 MHz as an ordinary frequency
    assert t.frequency_mhz(-2.5) == pytest.approx(-15.1665, rel=1e-12)


values = st.floats(-1e6, 1e6, allow_nan=False)
transitions = st.sampled_from(list(TRANSITIONS.values()))


@given(t=transitions, x=values)
@settings(max_examples=100, deadline=None)
def test_round_trips(t: Transition, x: float) -> None:
    # one multiplication and one division: a few ulp (common practice, no source)
    rel, atol = 1e-15, 1e-300
    assert float(t.length_internal(t.length_nm(x))) == pytest.approx(x, rel=rel, abs=atol)
    assert float(t.length_nm(t.length_internal(x))) == pytest.approx(x, rel=rel, abs=atol)
    assert float(t.frequency_internal(t.frequency_mhz(x))) == pytest.approx(x, rel=rel, abs=atol)
    assert float(t.frequency_mhz(t.frequency_internal(x))) == pytest.approx(x, rel=rel, abs=atol)
    assert float(t.time_internal(t.time_ns(x))) == pytest.approx(x, rel=rel, abs=atol)
    assert float(t.time_ns(t.time_internal(x))) == pytest.approx(x, rel=rel, abs=atol)


def test_conversions_accept_arrays() -> None:
    t = Transition(500.0, 10.0)
    np.testing.assert_allclose(t.length_nm(np.array([0.1, 2.0])), [50.0, 1000.0], rtol=1e-15)
    np.testing.assert_allclose(t.frequency_internal(np.array([5.0, -20.0])), [0.5, -2.0],
                               rtol=1e-15)
    assert t.name == "custom"


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        pytest.param({"wavelength_nm": 0.5, "linewidth_mhz": 1.0}, r"wavelength_nm", id="short"),
        pytest.param({"wavelength_nm": np.nan, "linewidth_mhz": 1.0}, r"wavelength_nm", id="nan"),
        pytest.param({"wavelength_nm": 780.0, "linewidth_mhz": 0.0}, r"linewidth_mhz", id="zero"),
        pytest.param({"wavelength_nm": 780.0, "linewidth_mhz": np.inf}, r"linewidth_mhz", id="inf"),
    ],
)
def test_bad_transitions_are_refused(kwargs, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        Transition(**kwargs)
