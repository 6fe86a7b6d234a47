"""The ``choir`` command line: run scenarios headless, validate and write scenario files.

Exit codes: 0 success, 2 bad input (message on stderr), 1 unexpected failure.
"""
from __future__ import annotations

import argparse
import csv
import io
import os
import sys
from dataclasses import replace
from pathlib import Path
from typing import Sequence

import numpy as np

from physics import scenario as scn
from physics.driving import field_intensity_map, fit_resonance, probe_scan, scan_signal
from physics.dynamics import decay_observables, evolve, pulse_state, single_emitter_state
from physics import bands as bnd
from physics.exports import (bands_csv, bands_map_csv, decay_csv, far_field_csv, field_map_csv,
                             finite_bands_csv, guided_csv, read_amplitudes_csv, scan_csv,
                             sheet_csv, spectrum_csv)
from physics.hamiltonian import coupling_matrix
from physics.far_field import lens_fraction
from physics.lattices import GENERATORS
from physics.solution import solve_scenario
from physics.waveguide import guided_figures
from physics.units import TRANSITIONS

__all__ = ["main"]

MODEL_LIMITS = (
    "Model: single excitation (weak excitation, linear optics), Markov approximation "
    "(no retardation across the array; for a cavity, the bad-cavity limit), point two-level "
    "dipoles at rest."
)


class UsageError(Exception):
    """Bad input from the user: reported on stderr with exit code 2."""


# ------------------------------------------------------------------ formatting

def _fmt_rate(rate: float, tr) -> str:
    """Decay rate in Γ0, as Γ/2π in lab units, and the lifetime."""
    hz = float(tr.frequency_mhz(rate)) * 1e6
    tau_ns = float(tr.time_ns(1.0 / rate)) if rate > 0 else float("inf")
    return f"Γ = {rate:.4g} Γ0  (Γ/2π = {_hz(hz)}, lifetime {_seconds(tau_ns * 1e-9)})"


def _hz(hz: float) -> str:
    for unit, scale in (("GHz", 1e9), ("MHz", 1e6), ("kHz", 1e3)):
        if abs(hz) >= scale:
            return f"{hz / scale:.4g} {unit}"
    return f"{hz:.4g} Hz"


def _seconds(s: float) -> str:
    if not np.isfinite(s):
        return "∞ (rate at round-off level)"
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9)):
        if s >= scale:
            return f"{s / scale:.4g} {unit}"
    return f"{s / 1e-12:.4g} ps"


def _geometry_text(sc: scn.Scenario, n: int) -> str:
    g = dict(sc.geometry)
    lat = g.pop("lattice")
    if lat == "explicit":
        return f"{n} emitters at explicit positions"
    parts = []
    for key, val in g.items():
        if key.startswith("spacing") or key == "radius":
            parts.append(f"{key} {val:g} λ0 = {float(sc.transition.length_nm(val)):.4g} nm")
        else:
            parts.append(f"{key} {val}")
    return f"{n} emitters, {lat} ({', '.join(parts)})"


def _dipole_text(sc: scn.Scenario) -> str:
    d = dict(sc.dipole)
    if "preset" in d:
        return d["preset"]
    if "theta_deg" in d:
        return f"θ = {d['theta_deg']:g}°, φ = {d['phi_deg']:g}°"
    if "vector" in d:
        return "(" + ", ".join(f"{c:.3g}" for c in d["vector"]) + ")"
    return "one vector per emitter"


# ------------------------------------------------------------------ commands

def _load(path: str) -> scn.Scenario:
    try:
        return scn.load(path)
    except scn.ScenarioError as exc:
        raise UsageError(f"{path}: {exc}") from None


def cmd_validate(args) -> int:
    sc = _load(args.scenario)
    em = sc.emitters()
    print(f"{args.scenario}: valid Choir scenario (version {scn.VERSION}); "
          f"{_geometry_text(sc, em.n)}")
    return 0


#: Largest symmetry block (or array without symmetry) that `choir solve` diagonalises
#: with every eigenvector; beyond it, --modes K gives the chosen few.
FULL_SOLVE_BLOCK_LIMIT = 5000


def _largest_block(sc) -> tuple[int, int]:
    from physics.large import largest_block

    em = sc.emitters()
    return em.n, largest_block(em, sc.environment_model())


def _bar(fraction: float, text: str) -> None:
    """A progress bar on stderr (redrawn in place on a terminal, one line each otherwise)."""
    bar = "█" * int(30 * fraction) + "·" * (30 - int(30 * fraction))
    end = "\n" if fraction >= 1.0 else ""
    if sys.stderr.isatty():
        print(f"\r[{bar}] {100 * fraction:5.1f} % {text:40s}", end=end, file=sys.stderr, flush=True)
    else:
        print(f"[{bar}] {100 * fraction:5.1f} % {text}", file=sys.stderr, flush=True)


def cmd_solve_chosen(args, sc) -> int:
    """choir solve --modes K: a few chosen modes of a (large) array."""
    from physics import large

    tr = sc.transition
    em, env = sc.emitters(), sc.environment_model()
    target = None
    if args.target is not None:
        try:
            w, g = (float(v) for v in args.target.split(","))
        except ValueError:
            raise UsageError(f"--target: {args.target!r} is not 'shift,rate' in Γ0 "
                             f"(e.g. 0.5,0.01)") from None
        target = complex(w, -g / 2.0)
    if args.which == "near" and target is None:
        raise UsageError("--target: --which near needs --target shift,rate [Γ0]")
    try:
        ch = large.chosen_modes(em, env, args.modes, args.which, target, progress=_bar)
    except large.MemoryRequestError as exc:
        raise UsageError(f"--modes: {exc}") from None
    out = _out_dir(args, "-results")
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["rank", "shift_gamma0", "decay_rate_gamma0", "lifetime_per_gamma0", "shift_mhz",
                "decay_rate_mhz", "lifetime_ns", "participation_ratio", "residual_gamma0",
                "symmetry"])
    pr = ch.participation_ratio
    for r in range(len(ch.eigenvalues)):
        g, sft = float(ch.decay_rates[r]), float(ch.shifts[r])
        life = 1.0 / g if g > 0 else float("inf")
        w.writerow([r, repr(sft), repr(g), repr(life), repr(float(tr.frequency_mhz(sft))),
                    repr(float(tr.frequency_mhz(g))), repr(float(tr.time_ns(life))),
                    repr(float(pr[r])), repr(float(ch.residual[r])),
                    ch.sector_names[ch.sector[r]]])
    (out / "spectrum.csv").write_text(buf.getvalue(), encoding="utf-8")
    np.savez_compressed(out / "modes.npz", eigenvalues=ch.eigenvalues, vectors=ch.vectors,
                        positions_lambda0=em.positions, dipoles=em.dipoles,
                        wavelength_nm=tr.wavelength_nm, linewidth_mhz=tr.linewidth_mhz)
    what = {"subradiant": "most subradiant", "radiant": "most radiant",
            "near": f"nearest ω = {target.real:g} Γ0, Γ = {-2 * target.imag:g} Γ0"
            if target is not None else ""}[args.which]
    lines = [f"Choir — {sc.name or Path(args.scenario).name}",
             f"  array:        {_geometry_text(sc, em.n)}",
             f"  environment:  {env.describe()}",
             f"  {len(ch.eigenvalues)} {what} modes ({ch.method}; largest residual "
             f"‖Hc − λc‖ = {ch.residual.max():.1e} Γ0):"]
    for r in range(min(len(ch.eigenvalues), 10)):
        lines.append(f"    {r}: shift {ch.shifts[r]:+.5g} Γ0, {_fmt_rate(ch.decay_rates[r], tr)}, "
                     f"participation ratio {pr[r]:.4g} ({ch.sector_names[ch.sector[r]]})")
    if len(ch.eigenvalues) > 10:
        lines.append(f"    … {len(ch.eigenvalues) - 10} more in spectrum.csv")
    lines += [f"  {MODEL_LIMITS}", f"  wrote {out / 'spectrum.csv'}, {out / 'modes.npz'}"]
    print("\n".join(lines))
    return 0


def cmd_solve(args) -> int:
    sc = _load(args.scenario)
    if args.modes is not None:
        return cmd_solve_chosen(args, sc)
    n, block = _largest_block(sc)
    if block > FULL_SOLVE_BLOCK_LIMIT:
        raise UsageError(
            f"geometry: {n} emitters with a largest symmetry block of {block} is beyond the full "
            f"solve (every eigenvector; allowed blocks up to {FULL_SOLVE_BLOCK_LIMIT}); ask for "
            f"the modes you need with --modes K [--which subradiant|radiant|near]")
    tr = sc.transition
    sol = solve_scenario(sc, guided_points=801)
    em, env, modes, defective = sol.emitters, sol.environment, sol.modes, sol.defective
    out = _out_dir(args, "-results")

    sel = sc.selected_mode
    rates = modes.decay_rates
    single = -2.0 * float(np.sum(np.diag(env.coupling(em)).imag))
    lines = [
        f"Choir — {sc.name or Path(args.scenario).name}",
        f"  array:        {_geometry_text(sc, em.n)}",
        f"  dipoles:      {_dipole_text(sc)}",
        f"  environment:  {env.describe()}",
        *([f"  guided:       β-factor {g['beta']:.3g} (guided share of one emitter's decay), "
           f"directionality {g['directionality']:+.3g}"] if (g := guided_figures(env)) else []),
        f"  transition:   {tr.name}, λ0 = {tr.wavelength_nm:.6g} nm, Γ0/2π = "
        f"{_hz(tr.linewidth_mhz * 1e6)}, 1/Γ0 = {_seconds(tr.lifetime_ns * 1e-9)}",
        f"  most radiant:     mode {modes.n - 1}: {_fmt_rate(rates[-1], tr)}",
        f"  most subradiant:  mode 0: {_fmt_rate(rates[0], tr)}",
        f"  selected mode {sel}: shift {modes.shifts[sel]:+.4g} Γ0 "
        f"({_hz(float(tr.frequency_mhz(modes.shifts[sel])) * 1e6)}), {_fmt_rate(rates[sel], tr)}",
    ]
    written = [out / "spectrum.csv", out / "modes.npz"]
    if defective:
        lines.append("      the coupling matrix is defective (for a chiral waveguide it is "
                     "triangular and all eigenvalues coincide): eigenvectors carry no meaning, so "
                     "no mode profile, far field, channel split or lens fraction is given; the "
                     "eigenvalues above are still right")
    else:
        c = modes.vectors[:, sel]
        frac_up = lens_fraction(em, env, c, sc.lens_na, "+z", float(rates[sel]))
        frac_down = lens_fraction(em, env, c, sc.lens_na, "-z", float(rates[sel]))
        channels = env.emitted_power(em, c)
        lines += [
            f"      participation ratio {modes.participation_ratio[sel]:.4g} of {em.n}, "
            f"Petermann factor {modes.petermann[sel]:.4g}",
            "      emitted into: " + ", ".join(f"{k} {v:.4g} Γ0" for k, v in channels.items()),
            f"      lens NA {sc.lens_na:g}: collects {100 * frac_up:.3g}% along +z, "
            f"{100 * frac_down:.3g}% along −z of the mode's emission"
            if env.free_space_weight > 0 else "      no free-space channel: no lens figures",
        ]
        if env.free_space_weight > 0:
            (out / "far_field.csv").write_text(
                far_field_csv(em, c, label=f"of mode {sel}", weight=env.free_space_weight),
                encoding="utf-8")
            written.append(out / "far_field.csv")
    if sol.guided is not None:
        resp = sol.guided
        probe_text, decay_text = guided_csv(resp, tr)
        (out / "guided_probe.csv").write_text(probe_text, encoding="utf-8")
        (out / "decay.csv").write_text(decay_text, encoding="utf-8")
        written += [out / "guided_probe.csv", out / "decay.csv"]
        mid = len(resp["detunings"]) // 2
        lines.append(f"  guided probe on resonance: transmission {abs(resp['t'][mid]) ** 2:.4g}, "
                     f"reflection {abs(resp['r'][mid]) ** 2:.4g} (exact, no eigenvectors used)")
    lines += [
        f"  check: Σ decay rates = {rates.sum():.6g} Γ0 (sum of single-emitter rates "
        f"{single:.6g} Γ0 expected)",
        f"  {MODEL_LIMITS}",
    ]
    for note in sol.notes:
        lines.append(f"  warning: {note}")
    (out / "spectrum.csv").write_text(spectrum_csv(modes, tr), encoding="utf-8")
    np.savez_compressed(
        out / "modes.npz", eigenvalues=modes.eigenvalues, vectors=modes.vectors,
        left_vectors=modes.left_vectors, positions_lambda0=em.positions, dipoles=em.dipoles,
        wavelength_nm=tr.wavelength_nm, linewidth_mhz=tr.linewidth_mhz, defective=defective)
    lines.append("  wrote " + ", ".join(str(p) for p in written))
    print("\n".join(lines))
    return 0


_FLAG_FOR_FIELD = {
    "geometry.n": "--n", "geometry.nx": "--nx", "geometry.ny": "--ny", "geometry.nz": "--nz",
    "geometry.spacing": "--spacing", "geometry.spacing_x": "--spacing-x",
    "geometry.spacing_y": "--spacing-y", "geometry.radius": "--radius",
    "geometry.axis": "--axis", "geometry.disk_lattice": "--disk-lattice",
    "dipole.preset": "--dipole", "transition.preset": "--transition", "dipole.theta_deg": "--theta-deg", "dipole.phi_deg": "--phi-deg",
    "transition.wavelength_nm": "--wavelength-nm", "transition.linewidth_mhz": "--linewidth-mhz",
    "analysis.lens_na": "--na", "analysis.selected_mode": "--mode", "name": "--name",
}
_FLAG_FOR_ENV = {"scale": "--free-space-scale", "gamma_forward": "--waveguide-forward",
                 "gamma_backward": "--waveguide-backward", "gamma_loss": "--waveguide-loss",
                 "k_guided": "--waveguide-k", "g": "--cavity-g", "kappa": "--cavity-kappa",
                 "detuning": "--cavity-detuning", "waist": "--cavity-waist",
                 "polarization": "--cavity-polarization"}


def _environment_from_flags(args) -> list[dict]:
    parts: list[dict] = []
    if not args.no_free_space:
        part: dict = {"kind": "free_space"}
        if args.free_space_scale is not None:
            part["scale"] = args.free_space_scale
        parts.append(part)
    wg = {k: getattr(args, f"waveguide_{k}") for k in ("forward", "backward", "loss", "k", "axis")}
    if any(v is not None for v in wg.values()):
        if wg["forward"] is None or wg["backward"] is None:
            raise UsageError("--waveguide-forward and --waveguide-backward go together "
                             "(rates into the two guided directions, in Γ0)")
        part = {"kind": "waveguide", "gamma_forward": wg["forward"],
                "gamma_backward": wg["backward"]}
        for key, name in (("loss", "gamma_loss"), ("k", "k_guided"), ("axis", "axis")):
            if wg[key] is not None:
                part[name] = wg[key]
        parts.append(part)
    cav = {k: getattr(args, f"cavity_{k}") for k in ("g", "kappa", "detuning", "axis",
                                                     "polarization", "waist")}
    if any(v is not None for v in cav.values()) or args.cavity_uniform:
        if cav["g"] is None or cav["kappa"] is None:
            raise UsageError("--cavity-g and --cavity-kappa go together (both in Γ0)")
        part = {"kind": "cavity", **{k: v for k, v in cav.items() if v is not None}}
        if args.cavity_uniform:
            part["standing_wave"] = False
        parts.append(part)
    if not parts:
        raise UsageError("--no-free-space leaves no environment: add a waveguide or a cavity")
    return parts


def cmd_new(args) -> int:
    geo = {"lattice": args.lattice}
    for key in ("n", "nx", "ny", "nz", "spacing", "spacing_x", "spacing_y", "radius", "axis",
                "disk_lattice"):
        val = getattr(args, key)
        if val is not None:
            geo[key] = val
    if args.theta_deg is not None or args.phi_deg is not None:
        dipole = {"theta_deg": args.theta_deg if args.theta_deg is not None else 90.0,
                  "phi_deg": args.phi_deg if args.phi_deg is not None else 0.0}
    else:
        dipole = {"preset": args.dipole}
    if args.wavelength_nm is not None or args.linewidth_mhz is not None:
        if args.wavelength_nm is None or args.linewidth_mhz is None:
            raise UsageError("--wavelength-nm and --linewidth-mhz go together (or use --transition)")
        transition = {"wavelength_nm": args.wavelength_nm, "linewidth_mhz": args.linewidth_mhz}
    else:
        transition = {"preset": args.transition}
    doc = {"format": scn.FORMAT, "version": scn.VERSION}
    if args.name:
        doc["name"] = args.name
    doc.update({"transition": transition, "geometry": geo, "dipole": dipole,
                "environment": _environment_from_flags(args),
                "analysis": {"selected_mode": args.mode, "lens_na": args.na, "lens_axis": "+z"}})
    try:
        sc = scn.from_dict(doc)
    except scn.ScenarioError as exc:
        flag = _FLAG_FOR_FIELD.get(exc.path)
        if flag is None and exc.path.startswith("environment["):
            field_name = exc.path.rsplit(".", 1)[-1]
            if field_name == "axis":
                kind = doc["environment"][int(exc.path[12])]["kind"]
                flag = "--waveguide-axis" if kind == "waveguide" else "--cavity-axis"
            else:
                flag = _FLAG_FOR_ENV.get(field_name)
        if flag is None and exc.path == "geometry" and "missing field" in exc.message:
            missing = exc.message.split("'")[1]
            flag = _FLAG_FOR_FIELD.get(f"geometry.{missing}", missing)
            raise UsageError(f"{flag} is required for --lattice {args.lattice}") from None
        if flag is None and exc.path == "geometry" and "does not belong" in exc.message:
            raise UsageError(f"--lattice {args.lattice}: {exc.message}") from None
        raise UsageError(f"{flag or exc.path}: {exc.message}") from None
    sys.stdout.write(scn.dumps(sc))
    return 0


def _out_dir(args, suffix: str) -> Path:
    out = Path(args.out) if args.out else Path(Path(args.scenario).stem + suffix)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"--out: cannot create {out}: {exc.strerror}") from None
    return out


def cmd_scan(args) -> int:
    sc = _load(args.scenario)
    tr = sc.transition
    probe = sc.probe_model()
    changes = {k: v for k, v in (("kind", args.probe), ("detuning_min", args.detuning_min),
                                 ("detuning_max", args.detuning_max), ("points", args.points),
                                 ("waist", args.waist), ("from_end", args.from_end))
               if v is not None}
    try:
        probe = replace(probe, **changes)
        em, env = sc.emitters(), sc.environment_model()
        scan = probe_scan(em, env, probe)
    except ValueError as exc:
        flag = {"kind": "--probe", "detuning_min": "--detuning-min", "points": "--points",
                "waist": "--waist", "from_end": "--from-end"}.get(str(exc).split(":")[0].split(
                    ".")[-1].split(",")[0])
        raise UsageError(f"{flag}: {str(exc).split(': ', 1)[-1]}" if flag else str(exc)) from None
    out = _out_dir(args, "-scan")
    (out / "scan.csv").write_text(scan_csv(scan, tr), encoding="utf-8")
    written = [out / "scan.csv"]
    signal, what = scan_signal(scan, probe.kind)
    if args.map_plane:
        if probe.kind == "guided":
            raise UsageError("--map-plane: a guided probe has no free-space field to map")
        peak = int(np.argmax(signal))
        half = max(2.0, 0.5 * float(np.ptp(em.positions, axis=0).max()) + 1.0)
        u, v, inten = field_intensity_map(em, probe, scan["amplitudes"][peak], args.map_plane,
                                          half, args.map_pixels, args.map_offset)
        (out / "field_map.csv").write_text(
            field_map_csv(u, v, inten, args.map_plane, float(scan["detunings"][peak])),
            encoding="utf-8")
        written.append(out / "field_map.csv")
    sheet_lines = []
    if args.infinite:
        lat, dipole, notes = sc.periodic_model()
        try:
            sheet = bnd.probe_on_sheet(lat, dipole, probe)
        except ValueError as exc:
            raise UsageError(f"--infinite: {str(exc).split(': ', 1)[-1]}") from None
        (out / "sheet.csv").write_text(sheet_csv(sheet, tr), encoding="utf-8")
        written.append(out / "sheet.csv")
        best = int(np.argmax(sheet["R"]))
        sheet_lines = [
            f"  infinite array (same lattice, plane wave"
            f"{' at normal incidence' if probe.kind == 'gaussian_beam' else ''}): peak reflection "
            f"{sheet['R'][best]:.4g} at Δ = {sheet['detunings'][best]:.4g} Γ0; "
            f"{int(sheet['orders'][0])} open order(s) per side",
            "  its collective resonance(s) at that in-plane momentum: " + "; ".join(
                f"shift {w:+.4g} Γ0, width {g:.4g} Γ0"
                for w, g in zip(sheet["band_shift"], sheet["band_decay_rate"])),
            *(f"  {n}" for n in notes)]
    fit = fit_resonance(scan["detunings"], signal)
    lines = [
        f"Choir scan — {sc.name or Path(args.scenario).name}",
        f"  probe: {probe.kind} from Δ = {probe.detuning_min:g} to {probe.detuning_max:g} Γ0 "
        f"({probe.points} points)",
        f"  peak {what}: {signal.max():.4g} at Δ = {scan['detunings'][int(np.argmax(signal))]:.4g} Γ0",
        f"  fitted Lorentzian: centre {fit['centre']:+.4g} Γ0 "
        f"({_hz(float(tr.frequency_mhz(fit['centre'])) * 1e6)}), width (FWHM) "
        f"{fit['width']:.4g} Γ0 ({_hz(float(tr.frequency_mhz(fit['width'])) * 1e6)})"
        + ("" if fit["residual"] < 0.05 else
           f"  [poor fit, largest residual {100 * fit['residual']:.0f} % — several resonances?]"),
    ]
    if "cross_section" in scan:
        lines.append(f"  peak extinction cross-section {scan['cross_section'].max():.4g} λ0² "
                     f"({scan['cross_section'].max() * tr.wavelength_nm ** 2 * 1e-6:.4g} µm²)")
    lines += sheet_lines
    lines += [f"  {MODEL_LIMITS}", "  Linear response: valid for probe intensities far below "
              "saturation. Laser safety follows local rules and licensed practice, which Choir "
              "does not assess.", "  wrote " + ", ".join(str(p) for p in written)]
    print("\n".join(lines))
    return 0


def cmd_decay(args) -> int:
    sc = _load(args.scenario)
    tr = sc.transition
    sol = solve_scenario(sc)
    em, env = sol.emitters, sol.environment
    H = coupling_matrix(em, env)
    try:
        if args.initial == "emitter":
            c0 = single_emitter_state(em.n, args.emitter)
            label = f"emitter {args.emitter} excited"
        elif args.initial == "mode":
            if sol.defective:
                raise UsageError("--initial mode: the coupling matrix is defective, its "
                                 "eigenvectors mean nothing; use --initial emitter or pulse")
            if not 0 <= args.mode < em.n:
                raise UsageError(f"--mode: {args.mode} is out of range; allowed 0 to {em.n - 1}")
            c0 = sol.modes.vectors[:, args.mode]
            label = f"mode {args.mode} excited"
        elif args.initial == "vector":
            if not args.amplitudes:
                raise UsageError("--initial vector needs --amplitudes FILE (CSV: re, im per "
                                 "emitter)")
            try:
                text = Path(args.amplitudes).read_text(encoding="utf-8")
            except (OSError, UnicodeDecodeError) as exc:
                raise UsageError(f"--amplitudes: cannot read {args.amplitudes}: {exc}") from None
            c0 = read_amplitudes_csv(text, em.n)
            c0 = c0 / np.linalg.norm(c0)
            label = f"amplitudes from {Path(args.amplitudes).name} (normalised)"
        else:
            probe = sc.probe_model()
            c0 = pulse_state(em, probe.direction, probe.polarization_vector())
            label = "state written by a short plane-wave pulse"
        times, amps = evolve(H, c0, args.t_max, args.points)
    except ValueError as exc:
        raise UsageError(f"--{str(exc).split(':')[0].replace('_', '-')}: "
                         f"{str(exc).split(': ', 1)[-1]}") from None
    obs = decay_observables(H, times, amps, channels=(em, env))
    out = _out_dir(args, "-decay")
    (out / "decay.csv").write_text(decay_csv(obs, tr, label), encoding="utf-8")
    pop = obs["population"]
    below = np.flatnonzero(pop <= np.exp(-1.0))
    t_e = f"{times[below[0]]:.4g}/Γ0 ({_seconds(float(tr.time_ns(times[below[0]])) * 1e-9)})" \
        if below.size else f"later than {args.t_max:g}/Γ0"
    print("\n".join([
        f"Choir decay — {sc.name or Path(args.scenario).name}: {label}",
        f"  population falls to 1/e at t = {t_e}; at t = {args.t_max:g}/Γ0 it is {pop[-1]:.4g}",
        "  computed as e^{−iHt} acting on the initial state (exact also for defective matrices)",
        f"  {MODEL_LIMITS}", f"  wrote {out / 'decay.csv'}"]))
    return 0


def _rate_text(g: float) -> str:
    """A decay rate, with rounding noise (|Γ| < 1e-12 Γ0) shown as 0."""
    return "0" if abs(g) < 1e-12 else f"{g:.4g}"


#: Largest finite array whose modes `choir bands --finite` places on the bands (dense solve).
FINITE_ON_BANDS_LIMIT = 3000


def cmd_bands(args) -> int:
    sc = _load(args.scenario)
    tr = sc.transition
    lat, dipole, notes = sc.periodic_model()
    vector = args.polarization == "all"
    pol = "vector" if vector else dipole
    try:
        path = bnd.band_path(lat, args.points, pol)
    except ValueError as exc:
        raise UsageError(f"--points: {str(exc).split(': ', 1)[-1]}") from None
    res = bnd.bands(lat, path.k, pol)
    out = _out_dir(args, "-bands")
    (out / "bands.csv").write_text(bands_csv(path, res, tr), encoding="utf-8")
    written = [out / "bands.csv"]
    if args.map:
        if isinstance(lat, bnd.Chain):
            raise UsageError("--map: a chain's zone is a line; its path already covers it")
        try:
            kx, ky, inside = bnd.brillouin_zone_grid(lat, args.map)
        except ValueError as exc:
            raise UsageError(f"--map: {str(exc).split(': ', 1)[-1]}") from None
        k = np.stack(np.meshgrid(kx, ky), axis=-1)[inside]
        (out / "bands_map.csv").write_text(bands_map_csv(k, bnd.bands(lat, k, pol)), encoding="utf-8")
        written.append(out / "bands_map.csv")
    if args.finite:
        em = sc.emitters()
        if em.n > FINITE_ON_BANDS_LIMIT:
            raise UsageError(f"--finite: the array has {em.n} emitters; placing every mode on the "
                             f"bands needs all eigenvectors, allowed up to {FINITE_ON_BANDS_LIMIT}")
        sol = solve_scenario(replace(sc, environment=((("kind", "free_space"),),)))
        placed = bnd.finite_on_bands(lat, em, sol.modes.vectors, dipole, path)
        (out / "finite_modes.csv").write_text(finite_bands_csv(sol.modes, placed), encoding="utf-8")
        written.append(out / "finite_modes.csv")
    k0 = bnd.bands(lat, np.zeros((1,) if isinstance(lat, bnd.Chain) else (1, 2)), pol)
    inside = res.orders > 0
    dark = np.nanmax(np.abs(res.decay_rate[~inside])) if (~inside).any() else None
    check = bnd.ewald_check(lat, path.k[:: max(1, len(path.k) // 20)], pol)
    lines = [
        f"Choir bands — {sc.name or Path(args.scenario).name}",
        *(f"  {n}" for n in bnd.lattice_notes(lat) + notes),
        f"  dipoles: {'all three polarisations (vector problem)' if vector else _dipole_text(sc)}",
        f"  path {' – '.join(t[1] for t in path.ticks)}, {len(path.k)} points, "
        f"{res.shift.shape[1]} band(s)",
        "  k = 0: " + "; ".join(f"shift {w:+.4g} Γ0, decay rate {_rate_text(g)} Γ0"
                                for w, g in zip(k0.shift[0], k0.decay_rate[0])),
        f"  shifts from {np.nanmin(res.shift):+.4g} to {np.nanmax(res.shift):+.4g} Γ0; "
        f"decay rates up to {np.nanmax(res.decay_rate):.4g} Γ0",
        (f"  outside the light cone ({int((~inside).sum())} points): largest |decay rate| {dark:.1e} Γ0"
         if dark is not None else "  every path point lies inside the light cone of some order"),
        f"  lattice-sum check: {check:.1e} relative change with the Ewald splitting parameter"
        if not isinstance(lat, bnd.Chain) else "  lattice sums: closed form (polylogarithms)",
    ]
    if np.isnan(res.shift).any():
        lines.append(f"  {int(np.isnan(res.shift).any(axis=1).sum())} point(s) lie on the light "
                     "line of an order, where the shift diverges (left empty)")
    lines += [f"  {MODEL_LIMITS}", "  wrote " + ", ".join(str(p) for p in written)]
    print("\n".join(lines))
    return 0


def _progress(done: int, total: int, seconds: float) -> None:
    """A progress bar on stderr with the time remaining (a line per 10 % when not a terminal)."""
    frac = done / total if total else 1.0
    left = seconds * (1.0 - frac) / frac if frac > 0 else float("nan")
    if sys.stderr.isatty() or int(10 * frac) != getattr(_progress, "last", -1) or done == total:
        _progress.last = int(10 * frac)
        _bar(frac, f"{done}/{total} realisations · {seconds:.1f} s · ~{left:.0f} s left")


def cmd_sweep(args) -> int:
    from app import sweeps
    from physics.ensembles import FIGURES, FigureRequest

    sc = _load(args.scenario)
    doc = scn.to_dict(sc)
    imp = doc.setdefault("imperfections", {})
    if args.jitter is not None:
        vals = [v for v in args.jitter.split(",") if v.strip()]
        try:
            sig = [float(v) for v in vals]
        except ValueError:
            raise UsageError(f"--jitter: {args.jitter!r} is not one number or three x,y,z") from None
        if len(sig) not in (1, 3):
            raise UsageError(f"--jitter: give one value (all axes) or three x,y,z; got {len(sig)}")
        imp.pop("jitter_nm", None)
        imp["jitter_lambda0"] = sig * 3 if len(sig) == 1 else sig
    if args.filling is not None:
        imp["filling"] = args.filling
    seed = args.seed if args.seed is not None else (sc.seed if sc.seed is not None else 0)
    if not 0 <= seed <= 2 ** 32 - 1:
        raise UsageError(f"--seed: {seed} is out of range; allowed 0 to 4294967295")
    if args.plot not in FIGURES:
        raise UsageError(f"--plot: {args.plot!r} is not a figure; allowed: {', '.join(FIGURES)}")
    try:
        request = FigureRequest(args.mode, args.detuning, not args.no_spectra)
    except ValueError as exc:
        raise UsageError(f"--{str(exc).split(':')[0]}: {str(exc).split(': ', 1)[-1]}") from None
    if args.plot not in request.names():
        raise UsageError(f"--plot: {args.plot} needs " + ("--mode" if "mode" in args.plot
                                                          else "--detuning"))
    try:
        axes = tuple(sweeps.parse_axis(v) for v in args.vary)
        plan = sweeps.Plan(doc, axes, args.realisations, request, seed)
    except sweeps.SweepError as exc:
        raise UsageError(str(exc)) from None
    if args.fit == "power" and len(plan.axes) != 1:
        raise UsageError("--fit: a power-law fit needs exactly one --vary parameter")
    if args.workers is not None and not 1 <= args.workers <= 256:
        raise UsageError(f"--workers: {args.workers} is out of range; allowed 1 to 256")
    out = _out_dir(args, "-sweep")
    try:
        report = sweeps.run_plan(plan, out, scheduler=args.scheduler, workers=args.workers,
                                 resume=args.resume, progress=_progress)
    except sweeps.SweepError as exc:
        raise UsageError(str(exc)) from None
    except KeyboardInterrupt:
        print(f"\nchoir: interrupted; finished realisations are saved in {out}; run the same "
              f"command with --resume to continue", file=sys.stderr)
        return 130
    except OSError as exc:
        raise UsageError(f"--scheduler: cannot reach {args.scheduler}: {exc}") from None
    _, rows = sweeps.read_results(out)
    summary = sweeps.summary_rows(plan, rows)
    cols = ["point"] + [a.label for a in plan.axes] + ["figure", "n", "mean", "sem", "std",
                                                       "p05", "p25", "median", "p75", "p95"]
    with open(out / "summary.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(cols)
        for s in summary:
            w.writerow([s[c] if isinstance(s[c], (int, str)) else repr(float(s[c])) for c in cols])
    fit = sweeps.scaling_fit(plan, summary, args.plot) if args.fit == "power" else None
    sweeps.plot_png(plan, summary, args.plot, out / "plot.png", fit,
                    out / sweeps.SPECTRA_FILE if request.spectrum else None)
    lines = [f"Choir sweep — {sc.name or Path(args.scenario).name}",
             f"  {plan.n_points} point(s) × {plan.realisations} realisation(s), seed {seed}; "
             f"ran on {report.where or 'nothing (all done before)'}",
             f"  {report.already} realisation(s) found done, {report.computed} computed in "
             f"{report.tasks} task(s), {report.seconds:.1f} s"
             + (f"; {report.failed} refused (see the note column)" if report.failed else "")]
    pts = [s for s in summary if s["figure"] == args.plot]
    for s in pts[:20]:
        where = ", ".join(f"{a.label} = {s[a.label]:g}" for a in plan.axes) or "ensemble"
        lines.append(f"  {where}: {args.plot} = {s['mean']:.5g} ± {s['sem']:.2g} "
                     f"(median {s['median']:.5g}, 5–95 % {s['p05']:.4g} … {s['p95']:.4g})")
    if len(pts) > 20:
        lines.append(f"  … {len(pts) - 20} more points in summary.csv")
    if fit is not None:
        lines.append(f"  power-law fit: {args.plot} ∝ {plan.axes[0].label}^"
                     f"({fit['exponent']:.4f} ± {fit['exponent_error']:.4f})")
    lines += [f"  {MODEL_LIMITS}",
              f"  wrote {out / 'results.csv'}, {out / 'summary.csv'}, {out / 'plot.png'}"
              + (f", {out / sweeps.SPECTRA_FILE}" if request.spectrum else "")]
    print("\n".join(lines))
    return 0


def cmd_serve(args) -> int:
    sc = _load(args.scenario) if args.scenario else None
    if not 1 <= args.port <= 65535:
        raise UsageError(f"--port: {args.port} is out of range; allowed 1 to 65535")
    from app.explorer import serve  # panel is imported only for this command

    if args.address not in ("127.0.0.1", "localhost", "::1"):
        print(f"choir: serving on {args.address}: anyone who can reach this address can use "
              f"the explorer (no login). Restrict access with a firewall or --allow-origin.",
              file=sys.stderr)
    serve(sc, port=args.port, address=args.address, show=args.show,
          allow_origin=args.allow_origin,
          autosave_dir="" if args.no_autosave else args.autosave_dir)
    return 0


# ------------------------------------------------------------------ parser

class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # exit 2 with a one-line message, as argparse does
        self.print_usage(sys.stderr)
        self.exit(2, f"choir: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="choir", description="Collective modes of emitter arrays (single-excitation "
                "spin model). " + MODEL_LIMITS)
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    s = sub.add_parser("solve", help="solve a scenario: summary, spectrum CSV, modes NPZ, far field")
    s.add_argument("scenario", help="scenario file (.json)")
    s.add_argument("--out", help="output folder (default: <scenario name>-results)")
    s.add_argument("--modes", type=int, help="only K chosen modes (large arrays): see --which")
    s.add_argument("--which", choices=["subradiant", "radiant", "near"], default="subradiant",
                   help="with --modes: the most subradiant, most radiant, or nearest --target")
    s.add_argument("--target", help="with --which near: shift,rate [Γ0], e.g. 0.5,0.01")
    s.set_defaults(func=cmd_solve)

    v = sub.add_parser("validate", help="check a scenario file and report what it describes")
    v.add_argument("scenario")
    v.set_defaults(func=cmd_validate)

    n = sub.add_parser("new", help="write a scenario from flags to standard output")
    n.add_argument("--lattice", required=True, choices=list(GENERATORS))
    n.add_argument("--n", type=int, help="emitters in a chain or ring")
    n.add_argument("--nx", type=int, help="emitters (or cells) along x")
    n.add_argument("--ny", type=int, help="emitters (or cells) along y")
    n.add_argument("--nz", type=int, help="emitters along z (cubic)")
    n.add_argument("--spacing", type=float, help="nearest-neighbour distance [λ0]")
    n.add_argument("--spacing-x", dest="spacing_x", type=float, help="rectangular: spacing along x [λ0]")
    n.add_argument("--spacing-y", dest="spacing_y", type=float, help="rectangular: spacing along y [λ0]")
    n.add_argument("--radius", type=float, help="disk radius [λ0]")
    n.add_argument("--axis", help="chain axis: x, y or z")
    n.add_argument("--disk-lattice", dest="disk_lattice", help="disk: square or triangular")
    n.add_argument("--dipole", default="x", help="x, y, z, sigma+, sigma-, radial, tangential")
    n.add_argument("--theta-deg", dest="theta_deg", type=float, help="dipole polar angle [deg]")
    n.add_argument("--phi-deg", dest="phi_deg", type=float, help="dipole azimuth [deg]")
    n.add_argument("--transition", default="Rb87 D2", help="preset: " + ", ".join(TRANSITIONS))
    n.add_argument("--wavelength-nm", dest="wavelength_nm", type=float, help="custom λ0 [nm]")
    n.add_argument("--linewidth-mhz", dest="linewidth_mhz", type=float, help="custom Γ0/2π [MHz]")
    n.add_argument("--na", type=float, default=0.5, help="lens numerical aperture (0, 1]")
    n.add_argument("--no-free-space", dest="no_free_space", action="store_true",
                   help="leave free space out of the environment")
    n.add_argument("--free-space-scale", dest="free_space_scale", type=float,
                   help="scale of the free-space coupling (default 1)")
    n.add_argument("--waveguide-forward", dest="waveguide_forward", type=float,
                   help="waveguide: decay rate into +axis [Γ0]")
    n.add_argument("--waveguide-backward", dest="waveguide_backward", type=float,
                   help="waveguide: decay rate into −axis [Γ0]")
    n.add_argument("--waveguide-loss", dest="waveguide_loss", type=float,
                   help="waveguide: other decay Γ' [Γ0] (keep 0 with free space)")
    n.add_argument("--waveguide-k", dest="waveguide_k", type=float,
                   help="waveguide: guided wavenumber 2π·n_eff [1/λ0] (default 2π)")
    n.add_argument("--waveguide-axis", dest="waveguide_axis", help="waveguide axis x, y or z")
    n.add_argument("--cavity-g", dest="cavity_g", type=float, help="cavity: peak coupling g [Γ0]")
    n.add_argument("--cavity-kappa", dest="cavity_kappa", type=float,
                   help="cavity: energy decay rate κ [Γ0]")
    n.add_argument("--cavity-detuning", dest="cavity_detuning", type=float,
                   help="cavity: ω_cavity − ω0 [Γ0]")
    n.add_argument("--cavity-axis", dest="cavity_axis", help="cavity axis x, y or z")
    n.add_argument("--cavity-polarization", dest="cavity_polarization",
                   help="cavity polarisation x, y or z (not the axis)")
    n.add_argument("--cavity-waist", dest="cavity_waist", type=float, help="cavity waist [λ0]")
    n.add_argument("--cavity-uniform", dest="cavity_uniform", action="store_true",
                   help="cavity: equal coupling along the axis (no standing wave)")
    n.add_argument("--mode", type=int, default=0, help="selected mode (0 = most subradiant)")
    n.add_argument("--name", help="scenario name")
    n.set_defaults(func=cmd_new)

    s2 = sub.add_parser("scan", help="detuning scan of a weak probe: extinction, scattering, "
                        "transmission and reflection (CSV), fitted resonance")
    s2.add_argument("scenario")
    s2.add_argument("--probe", choices=["plane_wave", "gaussian_beam", "guided"],
                    help="probe kind (default: the scenario's probe, else a plane wave along +z)")
    s2.add_argument("--detuning-min", dest="detuning_min", type=float, help="[Γ0]")
    s2.add_argument("--detuning-max", dest="detuning_max", type=float, help="[Γ0]")
    s2.add_argument("--points", type=int, help="number of detunings (3 to 20001)")
    s2.add_argument("--waist", type=float, help="Gaussian beam waist [λ0]")
    s2.add_argument("--from-end", dest="from_end", choices=["-", "+"],
                    help="guided probe: enter at the −axis or +axis end")
    s2.add_argument("--map-plane", dest="map_plane", choices=["xz", "yz", "xy"],
                    help="also write |E|² on this plane through the array centre at the peak")
    s2.add_argument("--map-pixels", dest="map_pixels", type=int, default=101,
                    help="pixels across the field map (default 101)")
    s2.add_argument("--map-offset", dest="map_offset", type=float, default=0.0,
                    help="shift of the map plane along its normal from the array centre [λ0]")
    s2.add_argument("--infinite", action="store_true",
                    help="also the infinite array's reflection and transmission per unit cell "
                         "(planar lattices; sheet.csv)")
    s2.add_argument("--out", help="output folder (default: <scenario name>-scan)")
    s2.set_defaults(func=cmd_scan)

    s3 = sub.add_parser("decay", help="time evolution from an initial state: population and "
                        "emitted power per channel (CSV)")
    s3.add_argument("scenario")
    s3.add_argument("--initial", choices=["emitter", "mode", "pulse", "vector"],
                    default="emitter",
                    help="one excited emitter, one mode, the state a short pulse writes (the "
                         "scenario's probe direction and polarisation), or your own amplitudes")
    s3.add_argument("--amplitudes", help="with --initial vector: CSV file, one row per emitter, "
                                         "'re, im'")
    s3.add_argument("--emitter", type=int, default=0, help="with --initial emitter (index)")
    s3.add_argument("--mode", type=int, default=0, help="with --initial mode (0 = most subradiant)")
    s3.add_argument("--t-max", dest="t_max", type=float, default=10.0, help="last time [1/Γ0]")
    s3.add_argument("--points", type=int, default=201, help="time points")
    s3.add_argument("--out", help="output folder (default: <scenario name>-decay)")
    s3.set_defaults(func=cmd_decay)

    b = sub.add_parser("bands", help="bands of the infinite lattice behind a generated array: "
                       "collective shifts and decay rates vs quasi-momentum (CSV)")
    b.add_argument("scenario")
    b.add_argument("--points", type=int, default=200, help="k-points along the path (2 to 20000)")
    b.add_argument("--polarization", choices=["scenario", "all"], default="scenario",
                   help="the scenario's dipole on every site, or all three polarisations")
    b.add_argument("--map", type=int, help="also a map over the Brillouin zone, N × N points (5 to 1001)")
    b.add_argument("--finite", action="store_true",
                   help="also place the finite array's modes on the bands (finite_modes.csv)")
    b.add_argument("--out", help="output folder (default: <scenario name>-bands)")
    b.set_defaults(func=cmd_bands)

    w = sub.add_parser("sweep", help="ensembles of imperfect arrays and parameter sweeps, on "
                       "Dask: tidy CSV, summary and a PNG plot")
    w.add_argument("scenario")
    w.add_argument("--vary", action="append", default=[],
                   help="PATH[,PATH]=VALUES, e.g. geometry.spacing=0.2:0.8:7, "
                        "geometry.nx,geometry.ny=4,8,16 or imperfections.filling=log:0.5:1:5 "
                        "(repeat for a second parameter)")
    w.add_argument("--realisations", type=int, default=1, help="random realisations per point")
    w.add_argument("--seed", type=int, help="seed of the realisations (default: the scenario's, or 0)")
    w.add_argument("--jitter", help="position jitter σ [λ0]: one value or three x,y,z")
    w.add_argument("--filling", type=float, help="probability that a site holds an emitter (0, 1]")
    w.add_argument("--mode", type=int, help="also record the mode with this index (0 = most subradiant)")
    w.add_argument("--detuning", type=float, help="also record the probe signal at this detuning [Γ0]")
    w.add_argument("--no-spectra", dest="no_spectra", action="store_true",
                   help="do not keep every mode's shift and rate (spectra.csv)")
    w.add_argument("--plot", default="most_subradiant_rate", help="figure drawn in plot.png")
    w.add_argument("--fit", choices=["none", "power"], default="none",
                   help="power-law fit of the plotted figure against the swept parameter")
    w.add_argument("--scheduler", default="local",
                   help="'local' (default: a local Dask cluster), 'inline' (this process) or a "
                        "scheduler address tcp://host:port")
    w.add_argument("--workers", type=int, help="local cluster: worker processes (default: all cores)")
    w.add_argument("--out", help="output folder (default: <scenario name>-sweep)")
    w.add_argument("--resume", action="store_true", help="continue an interrupted sweep in --out")
    w.set_defaults(func=cmd_sweep)

    e = sub.add_parser("serve", help="open the explorer in the browser (localhost by default)")
    e.add_argument("scenario", nargs="?", help="scenario file to start from (.json)")
    e.add_argument("--port", type=int, default=5006, help="TCP port (default 5006)")
    e.add_argument("--address", default="127.0.0.1",
                   help="address to listen on (default 127.0.0.1: this machine only)")
    e.add_argument("--show", action="store_true", help="open a browser tab")
    e.add_argument("--autosave-dir", dest="autosave_dir",
                   help="folder for each session's current scenario (default "
                        "~/.cache/choir/sessions, or $CHOIR_AUTOSAVE_DIR)")
    e.add_argument("--no-autosave", dest="no_autosave", action="store_true",
                   help="keep nothing on the server (a reload then starts afresh)")
    e.add_argument("--allow-origin", dest="allow_origin", action="append",
                   help="host:port allowed to open the page's websocket (repeatable)")
    e.set_defaults(func=cmd_serve)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except UsageError as exc:
        print(f"choir: error: {exc}", file=sys.stderr)
        return 2
    except ValueError as exc:  # physics refusals (geometry, ranges) are bad input too
        print(f"choir: error: {exc}", file=sys.stderr)
        return 2
    except MemoryError:
        print("choir: error: not enough memory for this array on this machine; reduce N",
              file=sys.stderr)
        return 2
    except np.linalg.LinAlgError as exc:  # e.g. an eigen-solver that did not converge
        print(f"choir: error: the linear-algebra solver failed ({exc}); try fewer or different "
              f"modes (--modes, --which) or a smaller array", file=sys.stderr)
        return 2
    except RuntimeError as exc:  # ARPACK's no-convergence is a RuntimeError
        if "ARPACK" not in str(exc) and "converge" not in str(exc):
            raise
        print(f"choir: error: the iterative eigen-solver did not converge ({exc}); ask for "
              f"fewer modes or use --which near with a --target", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into e.g. `head`, which stopped reading
        sys.stdout = open(os.devnull, "w")
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
