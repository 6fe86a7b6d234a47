"""Scenario files: the one place where Choir reads and writes configurations.

A scenario is a versioned JSON document (schema shipped as
``physics/schema/scenario-v1.schema.json``) mapped onto the frozen
:class:`Scenario`.  Loading validates structure with the schema, then the
physics (emitter count, separations, dipoles); every refusal is a
:class:`ScenarioError` naming the field path and the allowed range.

Floats are written with Python's shortest round-trip representation, so
save → load reproduces every number bit for bit.
"""
from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, replace
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any, Callable

import numpy as np

from . import lattices
from .cavity import CavityMode
from .free_space import FreeSpace
from .geometry import Emitters, polar_dipole
from .imperfections import Imperfections
from .hamiltonian import check_separation
from .units import TRANSITIONS, Transition
from .waveguide import Waveguide

__all__ = [
    "FORMAT",
    "VERSION",
    "Scenario",
    "ScenarioError",
    "load",
    "loads",
    "save",
    "dumps",
    "from_dict",
    "to_dict",
    "schema",
    "MAX_FILE_BYTES",
]

FORMAT = "choir-scenario"
#: Version written by this Choir; files up to it are read (older ones migrated).
VERSION = 4
#: Largest scenario file read [bytes].
MAX_FILE_BYTES = 20_000_000

#: Migrations: MIGRATIONS[v] turns a version-v document into version v + 1.
def _v1_to_v2(doc: dict) -> dict:
    """Version 2 allows several environment channels: the single object becomes a list."""
    out = dict(doc)
    if "environment" in out:
        out["environment"] = [out["environment"]]
    return out


def _v2_to_v3(doc: dict) -> dict:
    """Version 3 adds the optional probe block; nothing else changes."""
    return dict(doc)


def _v3_to_v4(doc: dict) -> dict:
    """Version 4 adds jitter, filling and realisation to the imperfections block."""
    return dict(doc)


MIGRATIONS: dict[int, Callable[[dict], dict]] = {1: _v1_to_v2, 2: _v2_to_v3, 3: _v3_to_v4}


class ScenarioError(ValueError):
    """A scenario that cannot be used, with the JSON path of the offending field."""

    def __init__(self, path: str, message: str) -> None:
        self.path = path
        self.message = message
        super().__init__(f"{path}: {message}" if path else message)


@dataclass(frozen=True)
class Scenario:
    """One emitter array in one environment, tied to a lab transition.

    Attributes
    ----------
    geometry : tuple of (key, value) pairs
        ``lattice`` plus its generator parameters (lengths in λ0), or
        ``lattice = "explicit"`` with ``positions`` as a tuple of (x, y, z) [λ0].
    dipole : tuple of (key, value) pairs
        ``preset``, or ``theta_deg``/``phi_deg``, or ``vector`` (3 complex),
        or ``per_emitter`` (N × 3 complex).
    environment : tuple of parts, each a tuple of (key, value) pairs
        ``kind`` ("free_space", "waveguide", "cavity") and that channel's
        parameters; the channels add up (:mod:`physics.environment`).
    """

    transition: Transition
    geometry: tuple
    dipole: tuple = (("preset", "x"),)
    environment: tuple = ((("kind", "free_space"),),)
    name: str = ""
    description: str = ""
    seed: int | None = None
    selected_mode: int = 0
    lens_na: float = 0.5
    lens_axis: str = "+z"
    display_units: str = "lab"
    color_by: str = "participation_ratio"
    transition_preset: str | None = None
    probe: tuple | None = None  # (key, value) pairs of a physics.driving.Probe
    imperfections: tuple = ()  # (key, value) pairs: jitter_lambda0 | jitter_nm, filling, realisation

    def probe_model(self):
        """The probe of this scenario (a default plane wave along +z when none is given)."""
        from .driving import Probe

        if self.probe is None:
            return Probe()
        kw = dict(self.probe)
        pol = kw.get("polarization")
        if isinstance(pol, tuple):
            kw["polarization"] = np.array(pol, dtype=complex)
        try:
            return Probe(**kw)
        except ValueError as exc:
            field_name, _, msg = str(exc).partition(": ")
            raise ScenarioError(f"probe.{field_name.split(',')[0]}", msg) from None

    @property
    def lattice(self) -> str:
        return dict(self.geometry)["lattice"]

    def emitters(self) -> Emitters:
        """The emitters of this scenario: its realisation of the imperfect array, if any."""
        return self.realisation_emitters(self.realisation)

    def clean_emitters(self) -> Emitters:
        """The array without vacancies or jitter."""
        return _build_emitters(self)

    @property
    def realisation(self) -> int:
        return int(dict(self.imperfections).get("realisation", 0))

    def imperfections_model(self):
        """The :class:`physics.imperfections.Imperfections` of this scenario, or None if perfect."""
        imp = dict(self.imperfections)
        if "jitter_nm" in imp:
            jitter = tuple(float(v) / self.transition.wavelength_nm for v in imp["jitter_nm"])
            jitter_field = "imperfections.jitter_nm"
        else:
            jitter = tuple(float(v) for v in imp.get("jitter_lambda0", (0.0, 0.0, 0.0)))
            jitter_field = "imperfections.jitter_lambda0"
        filling = float(imp.get("filling", 1.0))
        if filling == 1.0 and not any(jitter):
            return None
        if self.seed is None:
            raise ScenarioError("imperfections.seed", "required with jitter or vacancies (a whole "
                                "number 0 to 4294967295), so that every realisation can be "
                                "drawn again")
        try:
            return Imperfections(jitter, filling, self.seed)
        except ValueError as exc:
            field_name, _, msg = str(exc).partition(": ")
            name = jitter_field if field_name == "jitter" else f"imperfections.{field_name}"
            raise ScenarioError(name, msg) from None

    def realisation_emitters(self, index: int) -> Emitters:
        """Realisation ``index`` of this scenario's imperfect array (the clean array if perfect)."""
        from .imperfections import realise

        clean = _build_emitters(self)
        imp = self.imperfections_model()
        if imp is None:
            return clean
        try:
            return realise(clean, imp, index)
        except ValueError as exc:
            field_name, _, msg = str(exc).partition(": ")
            raise ScenarioError(field_name if "." in field_name else f"imperfections.{field_name}",
                                msg) from None

    def with_realisation(self, index: int) -> "Scenario":
        """This scenario showing realisation ``index``."""
        imp = dict(self.imperfections)
        imp["realisation"] = int(index)
        return replace(self, imperfections=tuple(sorted(imp.items())))

    def environment_model(self):
        """The environment object for :func:`physics.coupling_matrix` (a sum if several parts)."""
        return _build_environment(self.environment)

    def periodic_model(self):
        """The infinite lattice behind this array, its dipole and notes on what bands leave out.

        Returns (lattice, dipole vector, notes).  Raises ScenarioError when the
        geometry has no infinite counterpart or the dipole varies between sites.
        """
        from . import bands

        if self.lattice not in bands.PERIODIC_KINDS:
            raise ScenarioError("geometry.lattice", f"'{self.lattice}' has no infinite counterpart; "
                                f"bands need one of: {', '.join(bands.PERIODIC_KINDS)}")
        try:
            lat = bands.periodic_lattice(self.lattice, dict(self.geometry))
        except ValueError as exc:
            field_name, _, msg = str(exc).partition(": ")
            raise ScenarioError(f"geometry.{field_name.split('.')[-1]}", msg) from None
        d = self.emitters().uniform_dipole
        if d is None:
            raise ScenarioError("dipole", "bands need the same dipole on every site; "
                                "'radial' and 'tangential' vary from site to site")
        notes = []
        if self.imperfections_model() is not None:
            notes.append("Bands are those of the perfect lattice; this array has vacancies or "
                         "jitter, so its modes are not placed on them.")
        kinds = [dict(part)["kind"] for part in self.environment]
        scale = [dict(part).get("scale", 1.0) for part in self.environment
                 if dict(part)["kind"] == "free_space"]
        if kinds != ["free_space"] or scale != [1.0]:
            notes.append("Bands are for emitters in free space only; this scenario's "
                         + ", ".join(k for k in kinds) + " environment is left out of them.")
        return lat, d, notes

    def with_emitters(self, em: Emitters) -> "Scenario":
        """This scenario with an explicit list of positions and per-emitter dipoles."""
        geo = (("lattice", "explicit"),
               ("positions", tuple(tuple(float(v) for v in p) for p in em.positions)))
        dip = (("per_emitter", tuple(tuple(complex(v) for v in d) for d in em.dipoles)),)
        # the list is the realised arrangement: imperfections must not act on it again
        return replace(self, geometry=geo, dipole=dip, imperfections=())


# ---------------------------------------------------------------- schema

@lru_cache(maxsize=1)
def schema() -> dict:
    """The JSON Schema of the current version (a dict)."""
    text = resources.files("physics").joinpath(f"schema/scenario-v{VERSION}.schema.json").read_text(
        encoding="utf-8")
    return json.loads(text)


@lru_cache(maxsize=1)
def _validator():
    import jsonschema

    return jsonschema.Draft202012Validator(schema())


def _path(parts) -> str:
    out = ""
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out or "scenario"


def _range_text(s: dict) -> str:
    lo = s.get("minimum", s.get("exclusiveMinimum"))
    hi = s.get("maximum", s.get("exclusiveMaximum"))
    lo_op = "> " if "exclusiveMinimum" in s else ""
    if lo is not None and hi is not None:
        return f"allowed {lo_op}{lo:g} to {hi:g}" if lo_op == "" else f"allowed {lo_op}{lo:g} and ≤ {hi:g}"
    if lo is not None:
        return f"allowed {lo_op or '≥ '}{lo:g}"
    return f"allowed ≤ {hi:g}"


_TYPE_WORDS = {"integer": "a whole number", "number": "a number", "string": "text",
               "object": "an object {…}", "array": "a list […]", "boolean": "true or false"}


def _explain(err) -> ScenarioError:
    """Turn a jsonschema error into a message a physicist can act on."""
    path = _path(err.absolute_path)
    v, s, inst = err.validator, err.schema, err.instance
    if v in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
        return ScenarioError(path, f"{inst!r} is out of range; {_range_text(s)}")
    if v == "type":
        want = s["type"] if isinstance(s["type"], str) else s["type"][0]
        return ScenarioError(path, f"expected {_TYPE_WORDS.get(want, want)}, got {json.dumps(inst)[:60]}")
    if v == "enum" and "propertyNames" in err.absolute_schema_path:
        return ScenarioError(path, f"field {inst!r} does not belong to this lattice; allowed "
                             f"fields: " + ", ".join(s["enum"]))
    if v == "enum":
        allowed = ", ".join(str(x) for x in s["enum"])
        return ScenarioError(path, f"{inst!r} is not allowed; allowed: {allowed}")
    if v == "const":
        return ScenarioError(path, f"must be {s['const']!r}, got {inst!r}")
    if v == "required":
        missing = re.findall(r"'([^']+)' is a required property", err.message)
        name = missing[0] if missing else err.message
        return ScenarioError(path, f"missing field {name!r}")
    if v == "additionalProperties":
        extra = sorted(set(inst) - set(s.get("properties", {})))
        allowed = ", ".join(s.get("properties", {}))
        return ScenarioError(path, f"unknown field {extra[0]!r}; allowed fields: {allowed}")
    if v in ("minItems", "maxItems"):
        lo, hi = s.get("minItems", 0), s.get("maxItems", "any number of")
        return ScenarioError(path, f"has {len(inst)} entries; allowed {lo} to {hi}")
    if v in ("oneOf", "maxProperties", "not"):
        return ScenarioError(path, _ONE_OF_HELP.get(path, "fields do not fit together"))
    return ScenarioError(path, err.message)


_ONE_OF_HELP = {
    "transition": "give either 'preset' or both 'wavelength_nm' and 'linewidth_mhz', not both",
    "dipole": "give exactly one of: 'preset'; 'theta_deg' with 'phi_deg'; 'vector'; 'per_emitter'",
    "imperfections": "give the jitter either as 'jitter_lambda0' or as 'jitter_nm', not both",
}


def _check_schema(doc: dict) -> None:
    import jsonschema.exceptions

    errors = list(_validator().iter_errors(doc))
    if errors:
        best = jsonschema.exceptions.best_match(errors, key=jsonschema.exceptions.relevance)
        # descend into if/then branches for the concrete error; a failed oneOf
        # of alternatives is explained as a whole
        while best.context and not (best.validator == "oneOf"
                                    and _path(best.absolute_path) in _ONE_OF_HELP):
            best = jsonschema.exceptions.best_match(best.context)
        raise _explain(best)


# ---------------------------------------------------------------- dict <-> Scenario

def _migrate(doc: dict) -> dict:
    if not isinstance(doc, dict):
        raise ScenarioError("scenario", "a scenario file must hold a JSON object {…}")
    if doc.get("format") != FORMAT:
        raise ScenarioError("format", f"must be {FORMAT!r}: this is not a Choir scenario file")
    version = doc.get("version")
    if isinstance(version, bool) or not isinstance(version, int):
        raise ScenarioError("version", f"expected a whole number, got {json.dumps(version)}")
    if version > VERSION:
        raise ScenarioError("version", f"{version} is newer than this Choir reads (up to "
                            f"{VERSION}); update Choir to open this file")
    if version < 1:
        raise ScenarioError("version", f"{version} is out of range; allowed 1 to {VERSION}")
    while version < VERSION:
        doc = MIGRATIONS[version](doc)
        version += 1
        doc["version"] = version
    return doc


def _complex(pair) -> complex:
    return complex(float(pair[0]), float(pair[1]))


def from_dict(doc: Any) -> Scenario:
    """Validate a parsed scenario document and build the :class:`Scenario`.

    Raises
    ------
    ScenarioError
        Naming the field path and the allowed range or values.
    """
    doc = _migrate(doc)
    _check_schema(doc)
    t = doc["transition"]
    preset = t.get("preset")
    if preset is not None:
        transition = TRANSITIONS[preset]
    else:
        transition = Transition(float(t["wavelength_nm"]), float(t["linewidth_mhz"]),
                                t.get("label", "custom"))
    g = doc["geometry"]
    geo: list[tuple[str, Any]] = [("lattice", g["lattice"])]
    for key in sorted(k for k in g if k != "lattice"):
        val = g[key]
        if key == "positions":
            val = tuple(tuple(float(v) for v in p) for p in val)
        geo.append((key, val))
    d = doc["dipole"]
    if "vector" in d:
        dip = (("vector", tuple(_complex(c) for c in d["vector"])),)
    elif "per_emitter" in d:
        dip = (("per_emitter", tuple(tuple(_complex(c) for c in v) for v in d["per_emitter"])),)
    else:
        dip = tuple(sorted(d.items()))
    analysis = doc.get("analysis", {})
    display = doc.get("display", {})
    probe = None
    if "probe" in doc:
        items = []
        for key, val in sorted(doc["probe"].items()):
            if key == "polarization" and isinstance(val, list):
                val = tuple(_complex(c) for c in val)
            elif isinstance(val, list):
                val = tuple(float(v) for v in val)
            items.append((key, val))
        probe = tuple(items)
    sc = Scenario(
        probe=probe,
        transition=transition,
        transition_preset=preset,
        geometry=tuple(geo),
        dipole=dip,
        environment=tuple(tuple(sorted((k, tuple(v) if isinstance(v, list) else v)
                                       for k, v in part.items()))
                          for part in doc["environment"]),
        name=doc.get("name", ""),
        description=doc.get("description", ""),
        seed=doc.get("imperfections", {}).get("seed"),
        imperfections=tuple(sorted((k, tuple(float(x) for x in v) if isinstance(v, list) else v)
                                   for k, v in doc.get("imperfections", {}).items()
                                   if k != "seed")),
        selected_mode=analysis.get("selected_mode", 0),
        lens_na=float(analysis.get("lens_na", 0.5)),
        lens_axis=analysis.get("lens_axis", "+z"),
        display_units=display.get("units", "lab"),
        color_by=display.get("color_by", "participation_ratio"),
    )
    _build_environment(sc.environment)  # parameter combinations (e.g. polarisation ⟂ axis)
    if sc.probe is not None:
        sc.probe_model()  # detuning range etc.
    em = sc.emitters()  # physics checks: counts, dipoles, separations
    if sc.selected_mode >= em.n:
        raise ScenarioError("analysis.selected_mode",
                            f"{sc.selected_mode} is out of range; allowed 0 to {em.n - 1} "
                            f"(the array has {em.n} emitters)")
    return sc


def _pair(z: complex) -> list[float]:
    return [float(z.real), float(z.imag)]


def to_dict(sc: Scenario) -> dict:
    """The JSON-ready document of a scenario (current version)."""
    if sc.transition_preset is not None:
        t: dict[str, Any] = {"preset": sc.transition_preset}
    else:
        t = {"wavelength_nm": sc.transition.wavelength_nm,
             "linewidth_mhz": sc.transition.linewidth_mhz}
        if sc.transition.name != "custom":
            t["label"] = sc.transition.name
    geo: dict[str, Any] = {}
    for key, val in sc.geometry:
        geo[key] = [list(p) for p in val] if key == "positions" else val
    dip: dict[str, Any] = {}
    for key, val in sc.dipole:
        if key == "vector":
            dip[key] = [_pair(c) for c in val]
        elif key == "per_emitter":
            dip[key] = [[_pair(c) for c in v] for v in val]
        else:
            dip[key] = val
    doc: dict[str, Any] = {"format": FORMAT, "version": VERSION}
    if sc.name:
        doc["name"] = sc.name
    if sc.description:
        doc["description"] = sc.description
    doc.update({"transition": t, "geometry": geo, "dipole": dip,
                "environment": [{k: list(v) if isinstance(v, tuple) else v for k, v in part}
                                for part in sc.environment]})
    if sc.seed is not None or sc.imperfections:
        imp: dict[str, Any] = {} if sc.seed is None else {"seed": sc.seed}
        imp.update({k: list(v) if isinstance(v, tuple) else v for k, v in sc.imperfections})
        doc["imperfections"] = imp
    if sc.probe is not None:
        doc["probe"] = {k: ([_pair(c) for c in v] if k == "polarization" and isinstance(v, tuple)
                            else list(v) if isinstance(v, tuple) else v) for k, v in sc.probe}
    doc["analysis"] = {"selected_mode": sc.selected_mode, "lens_na": sc.lens_na,
                       "lens_axis": sc.lens_axis}
    doc["display"] = {"units": sc.display_units, "color_by": sc.color_by}
    return doc


# ---------------------------------------------------------------- building

def _build_environment(parts: tuple):
    models = []
    for k, part in enumerate(parts):
        p = dict(part)
        kind = p.pop("kind")
        try:
            if kind == "free_space":
                models.append(FreeSpace(**p))
            elif kind == "waveguide":
                models.append(Waveguide(**p))
            elif kind == "cavity":
                if "center" in p:
                    p["center"] = tuple(p["center"])
                models.append(CavityMode(**p))
            else:
                raise ScenarioError(f"environment[{k}].kind", f"{kind!r} is not supported")
        except ValueError as exc:
            if isinstance(exc, ScenarioError):
                raise
            field_name, _, msg = str(exc).partition(": ")
            raise ScenarioError(f"environment[{k}].{field_name}", msg) from None
    env = models[0]
    for m in models[1:]:
        env = env + m
    return env


def _build_emitters(sc: Scenario) -> Emitters:
    g = dict(sc.geometry)
    lattice = g.pop("lattice")
    d = dict(sc.dipole)
    if "preset" in d:
        dipole: Any = d["preset"]
    elif "theta_deg" in d:
        dipole = polar_dipole(math.radians(d["theta_deg"]), math.radians(d["phi_deg"]))
    elif "vector" in d:
        dipole = np.array(d["vector"], dtype=complex)
    else:
        dipole = np.array(d["per_emitter"], dtype=complex)
    if lattice != "explicit" and "per_emitter" in d:
        raise ScenarioError("dipole.per_emitter", "per-emitter dipoles need an explicit "
                            "geometry (lattice 'explicit' with positions)")
    if lattice == "explicit" and "per_emitter" in d and len(d["per_emitter"]) != len(g["positions"]):
        raise ScenarioError("dipole.per_emitter", f"has {len(d['per_emitter'])} entries; "
                            f"allowed exactly {len(g['positions'])} (one per position)")
    try:
        if lattice == "explicit":
            em = lattices.explicit(np.array(g["positions"], dtype=float), dipole)
        else:
            kwargs = dict(g)
            if lattice == "disk" and "disk_lattice" in kwargs:
                kwargs["lattice"] = kwargs.pop("disk_lattice")
            em = lattices.GENERATORS[lattice](**kwargs, dipole=dipole)
    except ValueError as exc:
        field_name = str(exc).split(":", 1)[0]
        prefix = "dipole" if "dipole" in field_name else "geometry"
        raise ScenarioError(prefix if field_name.startswith(prefix) else f"{prefix}.{field_name}",
                            str(exc).split(": ", 1)[-1]) from None
    try:
        check_separation(em)
    except ValueError as exc:
        raise ScenarioError("geometry.positions", str(exc).split(": ", 1)[-1]) from None
    return em


# ---------------------------------------------------------------- text and files

def _reject_constant(name: str):
    raise ScenarioError("", f"{name} is not a number JSON allows; use a finite value")


def loads(text: str | bytes) -> Scenario:
    """Parse and validate scenario text."""
    if len(text) > MAX_FILE_BYTES:
        raise ScenarioError("", f"file is {len(text)} bytes; the limit is {MAX_FILE_BYTES} bytes")
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise ScenarioError("", f"not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    try:
        doc = json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise ScenarioError("", f"not valid JSON: {exc.msg} at line {exc.lineno}, "
                            f"column {exc.colno}") from None
    except RecursionError:
        raise ScenarioError("", "not a usable scenario: nesting is too deep") from None
    except ValueError as exc:  # e.g. an integer of thousands of digits
        raise ScenarioError("", f"not a usable scenario: {str(exc).split(';')[0]}") from None
    return from_dict(doc)


def load(path: str | Path) -> Scenario:
    """Read and validate a scenario file."""
    p = Path(path)
    try:
        size = p.stat().st_size
        if size > MAX_FILE_BYTES:
            raise ScenarioError("", f"{p} is {size} bytes; the limit is {MAX_FILE_BYTES} bytes")
        data = p.read_bytes()
    except OSError as exc:
        raise ScenarioError("", f"cannot read {p}: {exc.strerror}") from None
    return loads(data)


_NUMBER_LIST = re.compile(r"\[\s*(-?[\d.eE+-]+(?:\s*,\s*-?[\d.eE+-]+)*)\s*\]")


def dumps(sc: Scenario) -> str:
    """Scenario as JSON text; innermost number lists kept on one line."""
    text = json.dumps(to_dict(sc), indent=2, ensure_ascii=False, allow_nan=False)
    text = _NUMBER_LIST.sub(lambda m: "[" + ", ".join(v.strip() for v in m.group(1).split(","))
                            + "]", text)
    return text + "\n"


def save(sc: Scenario, path: str | Path) -> None:
    """Write a scenario file (UTF-8 JSON)."""
    Path(path).write_text(dumps(sc), encoding="utf-8")
