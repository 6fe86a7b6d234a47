"""Hypothesis strategies shared by the physics tests (not a test module)."""
from __future__ import annotations

import numpy as np
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

from physics import Emitters

#: Random rotation matrices, from a rotation vector of length ≤ π√3.
rotations = st.tuples(*[st.floats(-np.pi, np.pi)] * 3).map(
    lambda v: Rotation.from_rotvec(v).as_matrix()
)


@st.composite
def clusters(draw, min_n: int = 2, max_n: int = 8) -> Emitters:
    """Irregular clusters with general complex unit dipoles, no two closer than 0.05 λ0.

    Each emitter sits in its own cell of a 0.25 λ0 grid (5 cells per axis) and is
    jittered by at most 0.1 λ0 per coordinate, so two emitters always differ by at
    least 0.25 − 2·0.1 = 0.05 λ0 along some axis.  A dipole is
    (sinθ cosφ e^{iα}, sinθ sinφ e^{iβ}, cosθ e^{iγ}): unit norm, any complex direction.
    """
    cell = st.tuples(*[st.integers(0, 4)] * 3)
    cells = draw(st.lists(cell, min_size=min_n, max_size=max_n, unique=True))
    n = len(cells)
    jitter = draw(st.lists(st.tuples(*[st.floats(-0.1, 0.1)] * 3), min_size=n, max_size=n))
    pos = 0.25 * np.array(cells, float) + np.array(jitter)
    angles = draw(st.lists(st.tuples(st.floats(0, np.pi), *[st.floats(0, 2 * np.pi)] * 4),
                           min_size=n, max_size=n))
    a = np.array(angles)
    dip = np.stack([np.sin(a[:, 0]) * np.cos(a[:, 1]) * np.exp(1j * a[:, 2]),
                    np.sin(a[:, 0]) * np.sin(a[:, 1]) * np.exp(1j * a[:, 3]),
                    np.cos(a[:, 0]) * np.exp(1j * a[:, 4])], axis=1)
    return Emitters(pos, dip)
