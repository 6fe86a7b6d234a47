"""Where the emitters sit and how their transition dipoles point.

All lengths are in units of the transition wavelength λ0.  A dipole is a
complex unit vector in Cartesian components (x, y, z); the quantisation axis
of the circular presets is z.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence, Union

import numpy as np

__all__ = [
    "Emitters",
    "DIPOLE_PRESETS",
    "DipoleLike",
    "dipole_vector",
    "polar_dipole",
    "MIN_DISTANCE",
    "nearest_neighbour_distance",
    "grid_indices",
]

#: Smallest separation between two emitters [λ0].  Below it the near-field
#: part of the free-space Green's function (∝ 1/r³) is meaningless for point
#: dipoles and numerically explosive, so geometries are refused.
MIN_DISTANCE = 1e-4

_S = 1.0 / np.sqrt(2.0)

#: Named dipole orientations.  "sigma+" / "sigma-" are circular dipoles about
#: the z axis, (x̂ ± iŷ)/√2 (a global phase does not change any observable).
DIPOLE_PRESETS: dict[str, tuple[complex, complex, complex]] = {
    "x": (1.0, 0.0, 0.0),
    "y": (0.0, 1.0, 0.0),
    "z": (0.0, 0.0, 1.0),
    "sigma+": (_S, 1j * _S, 0.0),
    "sigma-": (_S, -1j * _S, 0.0),
}

DipoleLike = Union[str, Sequence[complex], np.ndarray]


def polar_dipole(theta: float, phi: float) -> np.ndarray:
    """Real unit dipole along the direction with polar angle θ and azimuth φ.

    Parameters
    ----------
    theta : float
        Polar angle from +z [rad].
    phi : float
        Azimuth from +x towards +y [rad].

    Returns
    -------
    (3,) complex ndarray
    """
    return np.array(
        [np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi), np.cos(theta)],
        dtype=complex,
    )


def _normalise_rows(d: np.ndarray, what: str) -> np.ndarray:
    if not np.all(np.isfinite(d)):
        raise ValueError(f"{what}: dipole components must be finite numbers")
    norms = np.linalg.norm(d, axis=-1)
    bad = np.flatnonzero(np.atleast_1d(norms) < 1e-12)
    if bad.size:
        where = "" if d.ndim == 1 else f" (emitter {int(bad[0])})"
        raise ValueError(f"{what}: dipole vector is zero{where}; give a non-zero vector")
    # leave rows that are already unit (to round-off) untouched, so normalising
    # is idempotent bit for bit and saved files reload exactly
    done = np.abs(norms - 1.0) <= 4 * np.finfo(float).eps
    return np.where(done[..., None], d, d / norms[..., None])


def dipole_vector(spec: DipoleLike) -> np.ndarray:
    """Turn a preset name or a 3-vector into a normalised complex dipole.

    Parameters
    ----------
    spec : str or (3,) array_like of complex
        One of ``DIPOLE_PRESETS`` or Cartesian components (normalised here).

    Returns
    -------
    (3,) complex ndarray, unit 2-norm.
    """
    if isinstance(spec, str):
        try:
            return np.array(DIPOLE_PRESETS[spec], dtype=complex)
        except KeyError:
            names = ", ".join(DIPOLE_PRESETS)
            raise ValueError(f"dipole: unknown preset {spec!r}; allowed: {names}") from None
    d = np.asarray(spec, dtype=complex)
    if d.shape != (3,):
        raise ValueError(f"dipole: expected 3 components (x, y, z), got shape {d.shape}")
    return _normalise_rows(d, "dipole")


@dataclass(frozen=True, eq=False)
class Emitters:
    """A fixed arrangement of two-level emitters.

    Parameters
    ----------
    positions : (N, 3) array_like of float
        Positions [λ0].
    dipoles : (N, 3) or (3,) array_like of complex, or str
        Transition dipole of each emitter, or one for all, or a preset name.
        Vectors are normalised; a zero vector is an error.

    Notes
    -----
    The arrays are stored read-only, so an ``Emitters`` can be shared and used
    as a cache key (hashing is by content).
    """

    positions: np.ndarray
    dipoles: np.ndarray

    def __init__(self, positions, dipoles: DipoleLike = "x") -> None:
        pos = np.array(positions, dtype=float, copy=True)
        if pos.ndim != 2 or pos.shape[1] != 3:
            raise ValueError(f"positions: expected shape (N, 3), got {pos.shape}")
        if pos.shape[0] == 0:
            raise ValueError("positions: at least one emitter is needed")
        if not np.all(np.isfinite(pos)):
            row = int(np.flatnonzero(~np.all(np.isfinite(pos), axis=1))[0])
            raise ValueError(f"positions: emitter {row} has a non-finite coordinate")
        if isinstance(dipoles, str):
            dip = np.broadcast_to(dipole_vector(dipoles), pos.shape).copy()
        else:
            dip = np.array(dipoles, dtype=complex, copy=True)
            if dip.shape == (3,):
                dip = np.broadcast_to(dipole_vector(dip), pos.shape).copy()
            elif dip.shape == pos.shape:
                dip = _normalise_rows(dip, "dipoles")
            else:
                raise ValueError(
                    f"dipoles: expected shape (3,) or {pos.shape}, got {dip.shape}"
                )
        pos.setflags(write=False)
        dip.setflags(write=False)
        object.__setattr__(self, "positions", pos)
        object.__setattr__(self, "dipoles", dip)

    @property
    def n(self) -> int:
        """Number of emitters N."""
        return self.positions.shape[0]

    def __len__(self) -> int:
        return self.n

    @property
    def uniform_dipole(self) -> np.ndarray | None:
        """The common dipole (3,) if all emitters share one, else ``None``."""
        d0 = self.dipoles[0]
        if np.allclose(self.dipoles, d0, rtol=0.0, atol=1e-14):
            return d0
        return None

    def _key(self) -> tuple[bytes, bytes]:
        return (self.positions.tobytes(), self.dipoles.tobytes())

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Emitters):
            return NotImplemented
        return self.positions.shape == other.positions.shape and self._key() == other._key()

    def __hash__(self) -> int:
        return hash(self._key())

    def __repr__(self) -> str:
        return f"Emitters(N={self.n})"

    def with_dipoles(self, dipoles: DipoleLike) -> "Emitters":
        """Same positions, new dipoles."""
        return Emitters(self.positions, dipoles)

    def transformed(self, rotation: np.ndarray | None = None, shift=(0.0, 0.0, 0.0)) -> "Emitters":
        """Rotate positions and dipoles by a 3×3 rotation, then translate [λ0]."""
        R = np.eye(3) if rotation is None else np.asarray(rotation, dtype=float)
        return Emitters(self.positions @ R.T + np.asarray(shift, float), self.dipoles @ R.T)


def nearest_neighbour_distance(em: Emitters) -> float:
    """Smallest distance between two emitters [λ0] (inf for a single emitter)."""
    if em.n < 2:
        return float("inf")
    from scipy.spatial import cKDTree

    dist, _ = cKDTree(em.positions).query(em.positions, k=2)
    return float(dist[:, 1].min())


def _axis_steps(x: np.ndarray) -> tuple[np.ndarray, float] | None:
    """Integer grid indices k and step s with x = x.min() + s·k, or None."""
    lo = x.min()
    span = x.max() - lo
    if span <= 1e-12:
        return np.zeros(x.shape, dtype=np.int64), 1.0
    # smallest gap between distinct coordinates (gaps below 1e-9·span are
    # round-off), then the step that fits a whole number of times into the span:
    # rounding to fixed decimals instead fails at small spacings (k·1e-10 error)
    # and at large coordinates (round-off straddling a rounding boundary)
    gaps = np.diff(np.sort(x))
    step = gaps[gaps > 1e-9 * span].min()
    step = span / np.round(span / step)
    k = (x - lo) / step
    kr = np.round(k)
    if not np.allclose(k, kr, rtol=0.0, atol=1e-7) or kr.max() > 1e6:
        return None
    step = float(np.dot(kr, x - lo) / np.dot(kr, kr))  # least-squares step: no rounding error
    if not np.allclose(lo + step * kr, x, rtol=0.0, atol=1e-12 * max(1.0, span)):
        return None
    return kr.astype(np.int64), step


def grid_indices(positions: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Integer indices k (N, 3) and steps s (3,) [λ0] with r = r_min + k·s, or None.

    Every generated lattice (square, triangular, honeycomb, kagome, cubic,
    disks, chains) lies on such a grid per axis, possibly with empty sites;
    rings and drawn arrangements usually do not.
    """
    out = [_axis_steps(positions[:, c]) for c in range(3)]
    if any(o is None for o in out):
        return None
    return np.stack([o[0] for o in out], axis=1), np.array([o[1] for o in out])
