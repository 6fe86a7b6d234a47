"""Fuzzing: malformed and extreme scenario files and command-line flags.

Property (common practice, no source): every input either works or is refused
with a ScenarioError (files) / exit code 2 and a one-line message (command
line) — never another exception, never a traceback.  Inputs are mutations of
the demo scenarios (keys deleted, values replaced by JSON of any type or by
extreme numbers) and random JSON or text.  A longer run of the same
strategies: ``python bench/fuzz_long.py``.
"""
from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from app.cli import main
from physics import scenario as scn

ROOT = Path(__file__).parents[1]
DEMOS = [json.loads(p.read_text()) for p in sorted((ROOT / "scenarios").glob("*.json"))]

EXTREME = st.sampled_from([0, -1, 1e-300, -1e-300, 1e300, -1e300, 2 ** 63, -(2 ** 63), 10 ** 30,
                           0.5, 1e-4, 1e4, 9999, 10001, 3.5, True, False, None, "", "x", "NaN",
                           "Infinity", [], {}, [0, 0, 0], [[0, 1]] * 3, "1e9"])
JSON = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=12) | EXTREME,
    lambda children: st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=8),
                                                                       children, max_size=4),
    max_leaves=12)


def _paths(doc, prefix=()):
    """Every (path) to a value inside a JSON document."""
    out = [prefix]
    if isinstance(doc, dict):
        for k, v in doc.items():
            out += _paths(v, prefix + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc[:4]):
            out += _paths(v, prefix + (i,))
    return out


@st.composite
def mutated(draw):
    doc = copy.deepcopy(draw(st.sampled_from(DEMOS)))
    for _ in range(draw(st.integers(1, 4))):
        paths = [p for p in _paths(doc) if p]
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = doc
        for key in path[:-1]:
            parent = parent[key]
        action = draw(st.sampled_from(["replace", "extreme", "delete", "add"]))
        if action == "delete" and isinstance(parent, dict):
            del parent[path[-1]]
        elif action == "add" and isinstance(parent, dict):
            parent[draw(st.text(max_size=10))] = copy.deepcopy(draw(JSON))
        else:  # copies: sampled lists and dicts are shared objects
            parent[path[-1]] = copy.deepcopy(draw(EXTREME if action == "extreme" else JSON))
    return doc


def _must_load_or_refuse(text):
    try:
        scn.loads(text)
    except scn.ScenarioError as exc:
        msg = str(exc)
        assert msg and "\n" not in msg and "Traceback" not in msg


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated())
def test_mutated_scenarios_load_or_are_refused(doc):
    _must_load_or_refuse(json.dumps(doc))


@settings(max_examples=200, deadline=None)
@given(st.one_of(JSON.map(json.dumps), st.text(max_size=200), st.binary(max_size=200)))
def test_any_text_loads_or_is_refused(text):
    _must_load_or_refuse(text)


def test_deep_nesting_and_huge_numbers_are_refused():
    _must_load_or_refuse("[" * 100000 + "]" * 100000)
    _must_load_or_refuse('{"format": "choir-scenario", "version": 1' + "0" * 5000 + "}")
    doc = copy.deepcopy(DEMOS[0])
    doc["geometry"] = {"lattice": "chain", "n": 10 ** 400, "spacing": 0.3}
    _must_load_or_refuse(json.dumps(doc))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.function_scoped_fixture])
@given(mutated())
def test_validate_and_solve_exit_0_or_2(tmp_path_factory, capsys, doc):
    path = tmp_path_factory.mktemp("fuzz") / "s.json"
    path.write_text(json.dumps(doc))
    code = main(["validate", str(path)])
    assert code in (0, 2)
    if code == 0 and scn.load(path).emitters().n <= 400:
        assert main(["solve", str(path), "--out", str(path.parent / "out")]) in (0, 2)
    err = capsys.readouterr().err
    assert "Traceback" not in err


FLAGS = ["--lattice", "--n", "--nx", "--ny", "--nz", "--spacing", "--spacing-x", "--spacing-y",
         "--radius", "--axis", "--disk-lattice", "--dipole", "--theta-deg", "--phi-deg",
         "--transition", "--wavelength-nm", "--linewidth-mhz", "--na", "--free-space-scale",
         "--waveguide-forward", "--waveguide-backward", "--waveguide-k", "--waveguide-axis",
         "--cavity-g", "--cavity-kappa", "--cavity-axis", "--cavity-waist", "--mode", "--name"]
VALUES = st.sampled_from(["0", "-1", "1", "3", "0.3", "1e-9", "1e9", "nan", "inf", "x", "square",
                          "chain", "ring", "z", "sigma+", "Rb87 D2", "", "10001", "2.5"])


#: Flags that make a valid scenario for each lattice; random flags are added after them.
BASE = {"chain": ["--n", "5", "--spacing", "0.3"], "ring": ["--n", "6", "--spacing", "0.3"],
        "square": ["--nx", "3", "--ny", "3", "--spacing", "0.3"],
        "rectangular": ["--nx", "3", "--ny", "2", "--spacing-x", "0.3", "--spacing-y", "0.4"],
        "triangular": ["--nx", "3", "--ny", "3", "--spacing", "0.3"],
        "honeycomb": ["--nx", "2", "--ny", "2", "--spacing", "0.3"],
        "kagome": ["--nx", "2", "--ny", "2", "--spacing", "0.3"],
        "disk": ["--radius", "1", "--spacing", "0.4"],
        "cubic": ["--nx", "2", "--ny", "2", "--nz", "2", "--spacing", "0.3"]}
LATTICES = st.sampled_from(sorted(BASE))
FLAG_SETS = st.tuples(LATTICES, st.lists(st.tuples(st.sampled_from(FLAGS[1:]), VALUES),
                                         max_size=6))


@settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(FLAG_SETS)
def test_new_with_any_flags_exits_0_or_2(flag_set):
    lattice, pairs = flag_set
    argv = ["new", "--lattice", lattice] + BASE[lattice] + [x for pair in pairs for x in pair]
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse refusals exit 2 with a usage line
        code = exc.code
    assert code in (0, 2)


@pytest.mark.parametrize("argv", [
    ["scan", "scenarios/nonagon_ring.json", "--points", "nan"],
    ["decay", "scenarios/nonagon_ring.json", "--t-max", "inf"],
    ["bands", "scenarios/mirror_square_16x16.json", "--points", "-5"],
    ["sweep", "scenarios/subradiant_chain.json", "--vary", "geometry.n=1e400:2:3"],
    ["solve", "scenarios/nonagon_ring.json", "--modes", "100000"],
])
def test_odd_numeric_flags_are_refused(argv, capsys):
    import os

    os.chdir(ROOT)
    try:
        code = main(argv)
    except SystemExit as exc:
        code = exc.code
    assert code == 2
    assert "Traceback" not in capsys.readouterr().err
