"""Exporters: results as text files (CSV) for colleagues and other tools.

Pure functions from results to text; the command line writes the text to
files and the explorer offers it as downloads.  Floats use Python's
round-trip representation, so nothing is lost.
"""
from __future__ import annotations

import csv
import io

import numpy as np

from .far_field import directions_from_angles, far_field_power
from .geometry import Emitters
from .modes import Modes
from .units import Transition

__all__ = ["spectrum_csv", "far_field_csv", "guided_csv", "scan_csv", "decay_csv", "field_map_csv",
           "read_amplitudes_csv", "bands_csv", "bands_map_csv", "finite_bands_csv",
           "sheet_csv",
           "SPECTRUM_COLUMNS"]

#: Columns of the spectrum file, with their units.
SPECTRUM_COLUMNS = {
    "mode": "index, ascending decay rate (0 = most subradiant)",
    "shift_gamma0": "collective frequency shift ω_m [Γ0]",
    "decay_rate_gamma0": "collective decay rate Γ_m [Γ0]",
    "lifetime_per_gamma0": "1/Γ_m [1/Γ0]",
    "shift_mhz": "ω_m/2π [MHz]",
    "decay_rate_mhz": "Γ_m/2π [MHz]",
    "lifetime_ns": "1/Γ_m [ns]",
    "participation_ratio": "(Σ|c|²)²/Σ|c|⁴, 1 to N",
    "petermann": "Petermann factor, ≥ 1",
}


def spectrum_csv(modes: Modes, transition: Transition) -> str:
    """All modes as CSV text, internal and lab units side by side."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(SPECTRUM_COLUMNS))
    shifts, rates, life = modes.shifts, modes.decay_rates, modes.lifetimes
    pr, pk = modes.participation_ratio, modes.petermann
    for m in range(modes.n):
        w.writerow([m, repr(float(shifts[m])), repr(float(rates[m])), repr(float(life[m])),
                    repr(float(transition.frequency_mhz(shifts[m]))),
                    repr(float(transition.frequency_mhz(rates[m]))),
                    repr(float(transition.time_ns(life[m]))),
                    repr(float(pr[m])), repr(float(pk[m]))])
    return buf.getvalue()


def far_field_csv(em: Emitters, amplitudes: np.ndarray, *, label: str = "",
                  step_deg: float = 2.0, weight: float = 1.0) -> str:
    """dP/dΩ on a regular (θ, φ) grid as CSV text [Γ0 per steradian].

    ``weight`` is the environment's free-space weight (1 in vacuum).
    """
    theta = np.radians(np.arange(0.0, 180.0 + 1e-9, step_deg))
    phi = np.radians(np.arange(0.0, 360.0, 2.0 * step_deg))
    TH, PH = np.meshgrid(theta, phi, indexing="ij")
    power = weight * far_field_power(em, amplitudes,
                                     directions_from_angles(TH.ravel(), PH.ravel()))
    buf = io.StringIO()
    buf.write(f"# far field {label}: dP/dOmega in units of Gamma0 per steradian; "
              f"theta from +z, phi from +x\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["theta_deg", "phi_deg", "dP_dOmega_gamma0_per_sr"])
    for t, p, v in zip(np.degrees(TH.ravel()), np.degrees(PH.ravel()), power):
        w.writerow([f"{t:.6g}", f"{p:.6g}", repr(float(v))])
    return buf.getvalue()


def guided_csv(response: dict, transition: Transition) -> tuple[str, str]:
    """Guided probe spectrum and decay curve (physics.waveguide.guided_response) as CSV texts."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["detuning_gamma0", "detuning_mhz", "t_real", "t_imag", "r_real", "r_imag",
                "transmission", "reflection"])
    for d, t, r in zip(response["detunings"], response["t"], response["r"]):
        w.writerow([repr(float(d)), repr(float(transition.frequency_mhz(d))),
                    repr(float(t.real)), repr(float(t.imag)), repr(float(r.real)),
                    repr(float(r.imag)), repr(float(abs(t) ** 2)), repr(float(abs(r) ** 2))])
    probe = buf.getvalue()
    buf = io.StringIO()
    buf.write(f"# excited population after exciting emitter {response['first']} "
              f"(furthest upstream)\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["time_per_gamma0", "time_ns", "population"])
    for t, p in zip(response["times"], response["population"]):
        w.writerow([repr(float(t)), repr(float(transition.time_ns(t))), repr(float(p))])
    return probe, buf.getvalue()


def scan_csv(scan: dict, transition: Transition) -> str:
    """A detuning scan (physics.driving.probe_scan) as CSV text: powers in Γ0,
    cross-section in λ0², complex t and r per unit input photon flux."""
    cols = ["detuning_gamma0", "detuning_mhz", "extinction_gamma0", "scattered_gamma0"]
    if "cross_section" in scan:
        cols.append("cross_section_lambda0_sq")
    if "t" in scan:
        cols += ["t_real", "t_imag", "r_real", "r_imag", "transmission", "reflection"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for k, d in enumerate(scan["detunings"]):
        row = [d, float(transition.frequency_mhz(d)), scan["extinction"][k], scan["scattered"][k]]
        if "cross_section" in scan:
            row.append(scan["cross_section"][k])
        if "t" in scan:
            t, r = scan["t"][k], scan["r"][k]
            row += [t.real, t.imag, r.real, r.imag, abs(t) ** 2, abs(r) ** 2]
        w.writerow([repr(float(v)) for v in row])
    return buf.getvalue()


def decay_csv(observables: dict, transition: Transition, label: str = "") -> str:
    """Decay observables (physics.dynamics.decay_observables) as CSV text."""
    names = [k for k in observables if k not in ("times",)]
    buf = io.StringIO()
    buf.write(f"# {label}: population (no unit) and emitted powers [Gamma0]\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["time_per_gamma0", "time_ns"] + [n.replace(" ", "_").replace(",", "")
                                                 for n in names])
    for k, t in enumerate(observables["times"]):
        w.writerow([repr(float(t)), repr(float(transition.time_ns(t)))]
                   + [repr(float(observables[n][k])) for n in names])
    return buf.getvalue()


def field_map_csv(u: np.ndarray, v: np.ndarray, intensity: np.ndarray, plane: str,
                  detuning: float) -> str:
    """A field map (physics.driving.field_intensity_map) as long-format CSV text."""
    buf = io.StringIO()
    buf.write(f"# |E_in + E_sc|^2 on the {plane}-plane at probe detuning {detuning!r} Gamma0; "
              f"coordinates in lambda0; NaN next to an emitter\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([f"{plane[0]}_lambda0", f"{plane[1]}_lambda0", "intensity"])
    for q, vv in enumerate(v):
        for p, uu in enumerate(u):
            w.writerow([repr(float(uu)), repr(float(vv)), repr(float(intensity[q, p]))])
    return buf.getvalue()


def read_amplitudes_csv(text: str, n: int) -> np.ndarray:
    """Complex amplitudes from CSV text: one row per emitter, ``re`` or ``re, im``.

    Lines starting with '#' and a header row of words are skipped.  Raises
    ValueError naming the row when something does not fit.
    """
    rows = []
    for number, line in enumerate(text.splitlines(), start=1):
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        cells = [c.strip() for c in line.split(",")]
        try:
            values = [float(c) for c in cells]
        except ValueError:
            if not rows and number == 1 or (not rows and all(c.isidentifier() for c in cells)):
                continue  # a header
            raise ValueError(f"amplitudes: row {number} is not numbers: {line[:40]!r}") from None
        if len(values) not in (1, 2) or not np.all(np.isfinite(values)):
            raise ValueError(f"amplitudes: row {number} needs 1 or 2 finite numbers (re, im)")
        rows.append(complex(values[0], values[1] if len(values) == 2 else 0.0))
    if len(rows) != n:
        raise ValueError(f"amplitudes: {len(rows)} rows; allowed exactly {n} (one per emitter)")
    c = np.array(rows, dtype=complex)
    if np.linalg.norm(c) < 1e-12:
        raise ValueError("amplitudes: all zero; give a non-zero state")
    return c


def _k_columns(k: np.ndarray) -> tuple[list[str], np.ndarray]:
    """Quasi-momentum columns in units of k0 (one for a chain, two for a plane)."""
    k = np.asarray(k, dtype=float)
    if k.ndim == 1:
        return ["k_per_k0"], k[:, None] / (2.0 * np.pi)
    return ["kx_per_k0", "ky_per_k0"], k / (2.0 * np.pi)


def bands_csv(path, result, transition: Transition) -> str:
    """Bands along a path (physics.bands.band_path + bands) as long-format CSV text.

    One row per (k-point, band); decay rates outside the light cone are zero
    to rounding; NaN where an order lies on the light line.
    """
    names, kcols = _k_columns(path.k)
    buf = io.StringIO()
    buf.write("# path: " + "  ".join(f"{label} at {float(s)!r}" for s, label in path.ticks)
              + " (arc length in 1/lambda0)\n")
    w = csv.writer(buf, lineterminator="\n")
    extra = ["out_of_plane_weight"] if result.out_of_plane is not None else []
    w.writerow(["arc_length_per_lambda0"] + names + ["band", "shift_gamma0", "decay_rate_gamma0",
                                                     "shift_mhz", "decay_rate_mhz", "open_orders"]
               + extra)
    for i in range(len(path.distance)):
        for b in range(result.shift.shape[1]):
            row = [path.distance[i], *kcols[i], b, result.shift[i, b], result.decay_rate[i, b],
                   float(transition.frequency_mhz(result.shift[i, b])),
                   float(transition.frequency_mhz(result.decay_rate[i, b])), result.orders[i]]
            row += [result.out_of_plane[i, b]] if extra else []
            w.writerow([repr(float(v)) if isinstance(v, float) else int(v) for v in row])
    return buf.getvalue()


def bands_map_csv(k: np.ndarray, result) -> str:
    """Bands on a grid over the Brillouin zone as long-format CSV text (points inside the zone)."""
    names, kcols = _k_columns(k)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(names + ["band", "shift_gamma0", "decay_rate_gamma0", "open_orders"])
    for i in range(len(kcols)):
        for b in range(result.shift.shape[1]):
            w.writerow([repr(float(v)) for v in kcols[i]]
                       + [b, repr(float(result.shift[i, b])), repr(float(result.decay_rate[i, b])),
                          int(result.orders[i])])
    return buf.getvalue()


def finite_bands_csv(modes: Modes, placed: dict) -> str:
    """A finite array's modes beside the infinite lattice's band at their quasi-momentum."""
    names, kcols = _k_columns(placed["k"])
    buf = io.StringIO()
    buf.write("# k: peak of each mode's Fourier transform, folded to k >= 0; momentum_weight: "
              "share of the mode in that peak (1 = a clean Bloch wave)\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["mode", "shift_gamma0", "decay_rate_gamma0"] + names
               + ["momentum_weight", "band", "band_shift_gamma0", "band_decay_rate_gamma0",
                  "path_arc_length_per_lambda0", "distance_from_path_per_lambda0"])
    for m in range(modes.n):
        w.writerow([m, repr(float(modes.shifts[m])), repr(float(modes.decay_rates[m]))]
                   + [repr(float(v)) for v in kcols[m]]
                   + [repr(float(placed["weight"][m])), int(placed["band"][m]),
                      repr(float(placed["shift"][m])), repr(float(placed["decay_rate"][m])),
                      repr(float(placed["path_distance"][m])), repr(float(placed["off_path"][m]))])
    return buf.getvalue()


def sheet_csv(sheet: dict, transition: Transition) -> str:
    """The infinite array's specular response (physics.bands.probe_on_sheet) as CSV text."""
    buf = io.StringIO()
    kp = [float(v) for v in sheet["k_parallel"] / (2.0 * np.pi)]
    buf.write(f"# infinite array, in-plane probe momentum ({kp[0]!r}, {kp[1]!r}) k0; powers per "
              f"incident power; r, t projected on the probe polarisation\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["detuning_gamma0", "detuning_mhz", "r_real", "r_imag", "t_real", "t_imag",
                "reflection", "transmission", "diffracted", "open_orders"])
    for k, d in enumerate(sheet["detunings"]):
        r, t = sheet["r"][k], sheet["t"][k]
        w.writerow([repr(float(v)) for v in (d, transition.frequency_mhz(d), r.real, r.imag,
                                              t.real, t.imag, sheet["R"][k], sheet["T"][k],
                                              sheet["diffracted"][k])]
                   + [int(sheet["orders"][k])])
    return buf.getvalue()
