"""The session's scenario binding: explorer parameters ↔ scenario documents.

Two pure functions: :func:`scenario_document` turns the values of an
explorer session (anything with the parameters of
:class:`app.state.ExplorerState` as attributes) into a scenario document,
and :func:`parameters_of` turns a loaded :class:`physics.scenario.Scenario`
into the parameter values that show it.  Validation stays in
:mod:`physics.scenario`.
"""
from __future__ import annotations

from typing import Any

import numpy as np

from physics import scenario as scn
from physics.driving import Probe
from physics.geometry import polar_dipole

__all__ = ["ENVIRONMENTS", "scenario_document", "parameters_of", "probe_of", "ANALYSIS_POINTS"]

#: Environments the explorer edits; "as loaded from file" keeps a file's own list.
ENVIRONMENTS = ["free space", "free space + waveguide", "waveguide", "free space + cavity",
                "cavity", "waveguide + cavity", "free space + waveguide + cavity",
                "as loaded from file"]
#: Detunings of the explorer's probe scan (saved with the probe block).
ANALYSIS_POINTS = 201


def probe_of(v) -> Probe:
    """The probe described by the values (raises ValueError with the field named)."""
    direction = tuple(float(x) for x in polar_dipole(
        np.radians(v.probe_theta_deg), np.radians(v.probe_phi_deg)).real)
    return Probe(v.probe_kind, direction=direction, polarization=v.probe_polarization,
                 waist=v.probe_waist, from_end=v.probe_from_end,
                 detuning_min=v.probe_detuning_min, detuning_max=v.probe_detuning_max,
                 points=ANALYSIS_POINTS)


def _geometry(v, positions) -> dict[str, Any]:
    lat = "explicit" if positions is not None else v.lattice
    if positions is None:
        positions = v.positions
    geo: dict[str, Any] = {"lattice": lat}
    if lat in ("chain", "ring"):
        geo.update(n=v.n, spacing=v.spacing)
        if lat == "chain":
            geo["axis"] = v.chain_axis
    elif lat in ("square", "triangular", "honeycomb", "kagome"):
        geo.update(nx=v.nx, ny=v.ny, spacing=v.spacing)
    elif lat == "rectangular":
        geo.update(nx=v.nx, ny=v.ny, spacing_x=v.spacing, spacing_y=v.spacing_y)
    elif lat == "disk":
        geo.update(radius=v.radius, spacing=v.spacing, disk_lattice=v.disk_lattice)
    elif lat == "cubic":
        geo.update(nx=v.nx, ny=v.ny, nz=v.nz, spacing=v.spacing)
    else:
        if positions is None:
            raise scn.ScenarioError("geometry.positions", "no explicit positions yet")
        geo["positions"] = [[float(x) for x in p] for p in positions]
    return geo


def _dipole(v, explicit: bool, dipoles) -> dict[str, Any]:
    if v.dipole == "polar angles":
        return {"theta_deg": v.theta_deg, "phi_deg": v.phi_deg}
    if v.dipole == "complex vector":
        if v.dipole_vector is None:
            raise scn.ScenarioError("dipole", "no complex dipole vector loaded")
        return {"vector": [[float(c.real), float(c.imag)] for c in v.dipole_vector]}
    if v.dipole == "per emitter":
        if dipoles is None or not explicit:
            raise scn.ScenarioError("dipole", "per-emitter dipoles need an explicit geometry")
        return {"per_emitter": [[[float(c.real), float(c.imag)] for c in d] for d in dipoles]}
    return {"preset": v.dipole}


def _environment(v, file_environment: tuple) -> list[dict]:
    if v.environment == "as loaded from file":
        return [{k: list(x) if isinstance(x, tuple) else x for k, x in part}
                for part in file_environment]
    parts: list[dict] = []
    if "free space" in v.environment:
        parts.append({"kind": "free_space"} if v.free_space_scale == 1.0 else
                     {"kind": "free_space", "scale": v.free_space_scale})
    if "waveguide" in v.environment:
        parts.append({"kind": "waveguide", "gamma_forward": v.wg_forward,
                      "gamma_backward": v.wg_backward, "gamma_loss": v.wg_loss,
                      "k_guided": v.wg_k, "axis": v.wg_axis})
    if "cavity" in v.environment:
        part = {"kind": "cavity", "g": v.cav_g, "kappa": v.cav_kappa,
                "detuning": v.cav_detuning, "axis": v.cav_axis,
                "polarization": v.cav_polarization, "standing_wave": v.cav_standing_wave}
        if v.cav_waist is not None:
            part["waist"] = v.cav_waist
        parts.append(part)
    return parts


def _probe_block(v) -> dict:
    block: dict[str, Any] = {"kind": v.probe_kind, "detuning_min": v.probe_detuning_min,
                             "detuning_max": v.probe_detuning_max, "points": ANALYSIS_POINTS}
    if v.probe_kind == "plane_wave":
        block["direction"] = list(probe_of(v).direction)
        block["polarization"] = v.probe_polarization
    elif v.probe_kind == "gaussian_beam":
        block.update(waist=v.probe_waist, polarization=v.probe_polarization)
    else:
        block["from_end"] = v.probe_from_end
    return block


def is_imperfect(v) -> bool:
    """Whether the values ask for vacancies or jitter."""
    return v.filling < 1.0 or any((v.jitter_x, v.jitter_y, v.jitter_z))


def scenario_document(v, *, seed: int | None, file_environment: tuple,
                      positions: np.ndarray | None = None,
                      dipoles: np.ndarray | None = None) -> dict:
    """Scenario document of the values ``v``.

    ``positions``/``dipoles`` replace the geometry by an explicit (drawn) one,
    which is the realised arrangement: it carries no imperfections.  ``seed``
    is the session's random seed (needed when the values are imperfect);
    ``file_environment`` the environment list of the last file, kept verbatim
    when the environment is "as loaded from file".
    """
    edited = positions is not None
    geo = _geometry(v, positions)
    tr: dict[str, Any] = {"preset": v.transition}
    if v.transition == "custom":
        tr = {"wavelength_nm": v.wavelength_nm, "linewidth_mhz": v.linewidth_mhz}
        if v.transition_label and v.transition_label != "custom":
            tr["label"] = v.transition_label
    doc: dict[str, Any] = {"format": scn.FORMAT, "version": scn.VERSION}
    if v.scenario_name:
        doc["name"] = v.scenario_name
    if v.description:
        doc["description"] = v.description
    doc.update(transition=tr, geometry=geo,
               dipole=_dipole(v, geo["lattice"] == "explicit",
                              dipoles if dipoles is not None else v.dipoles_explicit),
               environment=_environment(v, file_environment),
               analysis={"lens_na": v.lens_na, "lens_axis": v.lens_axis},
               display={"units": v.units, "color_by": v.color_by})
    imperfect = not edited and is_imperfect(v)
    if imperfect and seed is None:
        raise ValueError("imperfections need the session's seed")
    if seed is not None:
        doc["imperfections"] = {"seed": seed}
    if imperfect:
        doc["imperfections"].update(jitter_lambda0=[v.jitter_x, v.jitter_y, v.jitter_z],
                                    filling=v.filling, realisation=v.realisation)
    doc["probe"] = _probe_block(v)
    return doc


def _environment_values(parts: tuple, upd: dict) -> None:
    """Map a scenario's environment onto the editable parameters, or keep it verbatim."""
    kinds = [dict(p)["kind"] for p in parts]
    names = {"free_space": "free space", "waveguide": "waveguide", "cavity": "cavity"}
    label = " + ".join(names[k] for k in ("free_space", "waveguide", "cavity") if k in kinds)
    fits = len(kinds) == len(set(kinds)) and label in ENVIRONMENTS
    fits = fits and kinds == [k for k in ("free_space", "waveguide", "cavity") if k in kinds]
    cav = [dict(p) for p in parts if dict(p)["kind"] == "cavity"]
    fits = fits and not (cav and "center" in cav[0] and any(cav[0]["center"]))
    fits = fits and not (cav and "k_cavity" in cav[0] and cav[0]["k_cavity"] != 2 * np.pi)
    if not fits:
        upd["environment"] = "as loaded from file"
        return
    upd["environment"] = label
    for part in parts:
        p = dict(part)
        if p["kind"] == "free_space":
            upd["free_space_scale"] = p.get("scale", 1.0)
        elif p["kind"] == "waveguide":
            upd.update(wg_forward=p["gamma_forward"], wg_backward=p["gamma_backward"],
                       wg_loss=p.get("gamma_loss", 0.0), wg_k=p.get("k_guided", 2 * np.pi),
                       wg_axis=p.get("axis", "z"))
        else:
            upd.update(cav_g=p["g"], cav_kappa=p["kappa"], cav_detuning=p.get("detuning", 0.0),
                       cav_axis=p.get("axis", "z"), cav_polarization=p.get("polarization", "x"),
                       cav_waist=p.get("waist"), cav_standing_wave=p.get("standing_wave", True))


def _probe_values(sc: scn.Scenario, upd: dict) -> None:
    if sc.probe is None:
        kinds = [dict(p)["kind"] for p in sc.environment]
        upd["probe_kind"] = "guided" if "waveguide" in kinds else "plane_wave"
        return
    p = dict(sc.probe)
    upd["probe_kind"] = p["kind"]
    for key, name in (("detuning_min", "probe_detuning_min"),
                      ("detuning_max", "probe_detuning_max"), ("waist", "probe_waist"),
                      ("from_end", "probe_from_end")):
        if key in p:
            upd[name] = p[key]
    if isinstance(p.get("polarization"), str) and p["polarization"] in ("x", "y", "sigma+",
                                                                         "sigma-"):
        upd["probe_polarization"] = p["polarization"]
    if "direction" in p:
        d = np.asarray(p["direction"], float)
        d = d / np.linalg.norm(d)
        upd["probe_theta_deg"] = float(np.degrees(np.arccos(np.clip(d[2], -1.0, 1.0))))
        upd["probe_phi_deg"] = float(np.degrees(np.arctan2(d[1], d[0])))


def parameters_of(sc: scn.Scenario) -> dict[str, Any]:
    """The explorer parameter values that show ``sc`` (one ``param.update`` applies them)."""
    g = dict(sc.geometry)
    d = dict(sc.dipole)
    upd: dict[str, Any] = {"lattice": g["lattice"]}
    for key, name in (("n", "n"), ("nx", "nx"), ("ny", "ny"), ("nz", "nz"),
                      ("spacing", "spacing"), ("spacing_x", "spacing"),
                      ("spacing_y", "spacing_y"), ("radius", "radius"),
                      ("disk_lattice", "disk_lattice"), ("axis", "chain_axis")):
        if key in g:
            upd[name] = g[key]
    upd["positions"] = np.array(g["positions"], float) if "positions" in g else None
    upd["dipoles_explicit"] = None
    if "preset" in d:
        upd["dipole"] = d["preset"]
    elif "theta_deg" in d:
        phi = d["phi_deg"]
        if not -180.0 <= phi <= 180.0:  # same direction, within the slider's range
            phi = ((phi + 180.0) % 360.0) - 180.0
        upd.update(dipole="polar angles", theta_deg=d["theta_deg"], phi_deg=phi)
    elif "vector" in d:
        upd.update(dipole="complex vector", dipole_vector=np.array(d["vector"], dtype=complex))
    else:
        upd.update(dipole="per emitter", dipoles_explicit=np.array(d["per_emitter"], dtype=complex))
    if upd["lattice"] == "explicit" and upd["positions"] is None:
        upd["positions"] = np.array(sc.emitters().positions)
    _environment_values(sc.environment, upd)
    _probe_values(sc, upd)
    tr = sc.transition
    if sc.transition_preset is not None:
        upd["transition"] = sc.transition_preset
    else:
        upd.update(transition="custom", wavelength_nm=tr.wavelength_nm,
                   linewidth_mhz=tr.linewidth_mhz, transition_label=tr.name)
    upd.update(units=sc.display_units, color_by=sc.color_by, lens_na=sc.lens_na,
               lens_axis=sc.lens_axis, scenario_name=sc.name, description=sc.description,
               selected_mode=sc.selected_mode)
    try:
        imp = sc.imperfections_model()
    except scn.ScenarioError:
        imp = None
    jx, jy, jz = imp.jitter if imp is not None else (0.0, 0.0, 0.0)
    upd.update(jitter_x=jx, jitter_y=jy, jitter_z=jz,
               filling=imp.filling if imp is not None else 1.0, realisation=sc.realisation)
    return upd
