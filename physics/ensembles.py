"""Figures of one realisation of an imperfect array, and statistics over many.

The engine that runs many realisations (locally or on a Dask cluster) lives
in :mod:`app.sweeps`; everything it computes per realisation comes from
:func:`realisation_figures` here, so a figure has one definition.

Per realisation (rates and shifts in Γ0, ordered by decay rate as everywhere
in Choir — mode 0 is the most subradiant):

``n_emitters``, ``most_subradiant_rate``, ``most_subradiant_shift``,
``most_radiant_rate``, ``most_radiant_shift``; with a chosen mode index m,
``mode_rate`` and ``mode_shift`` of the m-th mode (clipped to the last mode
when vacancies leave fewer than m + 1 emitters); with a probe detuning Δ,
``probe_signal`` — what the probe panel shows at Δ: |r|² into the beam's mode
for a Gaussian beam, the extinction cross-section [λ0²] for a plane wave,
1 − |t|² for a guided probe.

References
----------
B. Efron and R. J. Tibshirani, *An Introduction to the Bootstrap* (1993),
Ch. 2 — standard error of a mean, s/√M;
W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007), §15.2 — straight-line
fits with errors (used for power laws in log–log form).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .driving import probe_scan, scan_signal
from .hamiltonian import coupling_matrix

__all__ = ["FigureRequest", "FIGURES", "realisation_figures", "summarise", "power_law_fit",
           "power_law",
           "log_histogram"]

#: Every per-realisation figure, with its unit.
FIGURES = {
    "n_emitters": "emitters left after vacancies",
    "most_subradiant_rate": "smallest decay rate [Γ0]",
    "most_subradiant_shift": "shift of the most subradiant mode [Γ0]",
    "most_radiant_rate": "largest decay rate [Γ0]",
    "most_radiant_shift": "shift of the most radiant mode [Γ0]",
    "mode_rate": "decay rate of the chosen mode index [Γ0]",
    "mode_shift": "shift of the chosen mode index [Γ0]",
    "probe_signal": "probe signal at the chosen detuning (|r|², cross-section [λ0²] or 1 − |t|²)",
}


@dataclass(frozen=True)
class FigureRequest:
    """What to compute per realisation beyond the always-present figures.

    mode : int or None
        Index of a mode in ascending decay rate (0 = most subradiant).
    detuning : float or None
        Probe detuning [Γ0]; the scenario's probe block (or the default plane
        wave) is used.
    spectrum : bool
        Keep every shift and decay rate (for histograms).
    """

    mode: int | None = None
    detuning: float | None = None
    spectrum: bool = True

    def __post_init__(self) -> None:
        if self.mode is not None and not 0 <= int(self.mode) <= 9999:
            raise ValueError(f"mode: {self.mode} is out of range; allowed 0 to 9999")
        if self.detuning is not None and not (np.isfinite(self.detuning)
                                              and abs(self.detuning) <= 1e6):
            raise ValueError(f"detuning: {self.detuning} is out of range; allowed −1e6 to 1e6 Γ0")

    def names(self) -> list[str]:
        out = ["n_emitters", "most_subradiant_rate", "most_subradiant_shift",
               "most_radiant_rate", "most_radiant_shift"]
        if self.mode is not None:
            out += ["mode_rate", "mode_shift"]
        if self.detuning is not None:
            out.append("probe_signal")
        return out


def realisation_figures(sc, index: int, request: FigureRequest
                        ) -> tuple[dict[str, float], np.ndarray | None]:
    """Figures of realisation ``index`` of scenario ``sc`` (a physics.scenario.Scenario).

    Returns (figures, spectrum) with spectrum an (n, 2) array of (shift, decay
    rate) sorted by decay rate, or None when not requested.  Eigenvalues
    only (no eigenvectors): a realisation costs one N×N assembly and one
    eigenvalue solve.
    """
    em = sc.realisation_emitters(index)
    env = sc.environment_model()
    H = coupling_matrix(em, env)
    w = np.linalg.eigvals(H)
    rates, shifts = -2.0 * w.imag, w.real
    order = np.argsort(rates, kind="stable")
    rates, shifts = rates[order], shifts[order]
    out = {"n_emitters": float(em.n),
           "most_subradiant_rate": float(rates[0]), "most_subradiant_shift": float(shifts[0]),
           "most_radiant_rate": float(rates[-1]), "most_radiant_shift": float(shifts[-1])}
    if request.mode is not None:
        m = min(int(request.mode), em.n - 1)
        out["mode_rate"], out["mode_shift"] = float(rates[m]), float(shifts[m])
    if request.detuning is not None:
        probe = sc.probe_model()
        scan = probe_scan(em, env, probe, [request.detuning])
        out["probe_signal"] = float(scan_signal(scan, probe.kind)[0][0])
    spectrum = np.column_stack([shifts, rates]) if request.spectrum else None
    return out, spectrum


def summarise(values) -> dict[str, float]:
    """Mean, its standard error s/√M, standard deviation and percentiles of finite values."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    m = len(v)
    if m == 0:
        nan = float("nan")
        return dict(n=0, mean=nan, sem=nan, std=nan, p05=nan, p25=nan, median=nan, p75=nan,
                    p95=nan)
    std = float(v.std(ddof=1)) if m > 1 else 0.0
    p = np.percentile(v, [5, 25, 50, 75, 95])
    return dict(n=m, mean=float(v.mean()), sem=std / np.sqrt(m), std=std, p05=float(p[0]),
                p25=float(p[1]), median=float(p[2]), p75=float(p[3]), p95=float(p[4]))


def power_law_fit(x, y, sem=None) -> dict[str, float]:
    """Fit y = A x^p by a straight line in log–log form; returns p, A and their 1σ errors.

    With standard errors ``sem`` of y the points are weighted by y/sem (the
    error of log y) and the parameter errors follow from those weights;
    without them (or with any zero), an unweighted fit whose errors are
    scaled by the scatter of the residuals (needs ≥ 3 points).
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if len(x) < 2 or np.any(x <= 0) or np.any(y <= 0):
        raise ValueError("fit: a power law needs at least 2 points with positive x and y")
    lx, ly = np.log(x), np.log(y)
    weighted = sem is not None and np.all(np.asarray(sem) > 0)
    A = np.column_stack([lx, np.ones_like(lx)])
    if weighted:
        s = np.asarray(sem, dtype=float) / y
        Aw, bw = A / s[:, None], ly / s
        coef, *_ = np.linalg.lstsq(Aw, bw, rcond=None)
        cov = np.linalg.inv(Aw.T @ Aw)
    else:
        coef, *_ = np.linalg.lstsq(A, ly, rcond=None)
        dof = len(x) - 2
        resid = ly - A @ coef
        s2 = float(resid @ resid) / dof if dof > 0 else float("nan")
        cov = np.linalg.inv(A.T @ A) * s2
    p, lna = coef
    return dict(exponent=float(p), exponent_error=float(np.sqrt(cov[0, 0])),
                prefactor=float(np.exp(lna)), prefactor_error=float(np.exp(lna) * np.sqrt(cov[1, 1])),
                weighted=bool(weighted))


def power_law(fit: dict[str, float], x) -> np.ndarray:
    """The fitted power law A x^p of :func:`power_law_fit` at ``x``."""
    return fit["prefactor"] * np.asarray(x, dtype=float) ** fit["exponent"]


def log_histogram(rates, bins: int = 40, floor: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """Histogram of decay rates on logarithmic bins: (edges [Γ0], counts).

    Rates below ``floor`` (round-off of dark modes) are counted in the first bin.
    """
    r = np.maximum(np.asarray(rates, dtype=float).ravel(), floor)
    lo, hi = np.log10(r.min()), np.log10(r.max())
    if hi - lo < 1e-9:
        lo, hi = lo - 0.5, hi + 0.5
    edges = np.logspace(lo, hi, int(bins) + 1)
    counts, _ = np.histogram(r, bins=edges)
    return edges, counts
