"""Refusals of the infinite-lattice, large-array, imperfection and sweep code: each
message names the field and what is allowed (common practice, no source)."""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from app import sweeps as S
from app.cli import main
from app.state import ExplorerState
from physics import bands as B
from physics import lattices
from physics import scenario as scn
from physics.driving import Probe
from physics.imperfections import Imperfections, realise

ROOT = Path(__file__).parents[1]
SQ = B.periodic_lattice("square", {"spacing": 0.5})


@pytest.mark.parametrize("call, words", [
    (lambda: B.bloch_hamiltonian(SQ, [[0, 0]], np.ones((2, 3))),
     "dipole: needs one 3-vector or one per basis site (1); got shape (2, 3)"),
    (lambda: B.specular_response(SQ, [0.0], direction=(1, 0, 0)),
     "direction: must cross the array plane (non-zero z-component)"),
    (lambda: B.specular_response(SQ, [0.0], direction=(0, 0, 1), polarization=(0, 0, 1)),
     "polarization: parallel to the direction; a plane wave is transverse"),
    (lambda: B.specular_response(B.periodic_lattice("square", {"spacing": 1.0}), [0.0],
                                 direction=(0, 0, 1)),
     "direction: a diffraction order lies on the light line"),
    (lambda: B.probe_on_sheet(SQ, "x", Probe("guided")),
     "kind: a guided probe has no infinite-sheet counterpart"),
    (lambda: B.PlanarLattice("square", (0.5, 0.0), (1.0, 0.0)),
     "a2: parallel to a1; a planar lattice needs two independent vectors"),
    (lambda: B.PlanarLattice("square", (9.0, 0.0), (0.0, 1.0)),
     "a1: length 9 λ0 is out of range; allowed (0, 5] λ0"),
    (lambda: B.brillouin_zone_grid(SQ, 2), "grid: 2 is out of range; allowed 5…1001"),
    (lambda: B.Chain(0.3, "w"), "axis: 'w' is not allowed; allowed: x, y, z"),
    (lambda: realise(lattices.chain(3, 0.3), Imperfections(filling=0.5, seed=1), -1),
     "realisation: -1 is out of range; allowed 0 to 4294967295"),
    (lambda: realise(lattices.explicit(np.arange(5)[:, None] * [5e-5, 0.0, 0.0]),
                     Imperfections((1e-9, 1e-9, 1e-9), seed=1)),
     "imperfections.jitter: 20 draws each put two emitters closer than"),
])
def test_physics_refusals(call, words):
    with pytest.raises(ValueError, match=re.escape(words)):
        call()


def _doc():
    return scn.to_dict(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))


@pytest.mark.parametrize("make, words", [
    (lambda: S.Plan(_doc(), tuple(S.parse_axis(t) for t in ("geometry.nx=2,3", "geometry.ny=2,3",
                                                              "geometry.spacing=0.3,0.4"))),
     "--vary: at most two parameters at once"),
    (lambda: S.Plan(_doc(), (S.parse_axis("geometry.lattice=1,2"),)).scenario_at(0),
     "--vary: 'geometry.lattice' holds \"square\", not a number"),
    (lambda: S.Plan(_doc(), (S.parse_axis("transition.preset.x=1,2"),)).scenario_at(0),
     "--vary: 'transition.preset.x' does not lead to a number in the scenario"),
    (lambda: S.parse_axis("geometry.spacing=log:-1:2:3"),
     "--vary: a geometric range needs positive ends, got -1 and 2"),
    (lambda: S.parse_axis("geometry.spacing=1:2:3:4:5"),
     "--vary: '1:2:3:4:5' is not a list a,b,c or a range start:stop:count"),
])
def test_sweep_refusals(make, words):
    with pytest.raises(S.SweepError, match=re.escape(words)):
        make()


def test_explorer_sweep_refusals():
    st = ExplorerState(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    st.solve()
    st.sweep_vary = "dipole θ [deg] (polar-angle dipoles)"
    st.run_sweep()
    assert st.message == "Sweep not started — sweep: θ can be varied only for 'polar angles' dipoles"
    st.sweep_vary = "emitters N (chain, ring)"
    st.run_sweep()
    assert st.message == "Sweep not started — sweep: this array type has no 'n'"


@pytest.mark.parametrize("argv, words", [
    (["sweep", "scenarios/subradiant_chain.json", "--workers", "0"],
     "--workers: 0 is out of range; allowed 1 to 256"),
    (["sweep", "scenarios/subradiant_chain.json", "--seed", "-3"],
     "--seed: -3 is out of range; allowed 0 to 4294967295"),
    (["sweep", "scenarios/subradiant_chain.json", "--plot", "beauty"],
     "--plot: 'beauty' is not a figure; allowed: n_emitters"),
    (["sweep", "scenarios/subradiant_chain.json", "--scheduler", "tcp://127.0.0.1:9"],
     "--scheduler: cannot reach tcp://127.0.0.1:9"),
    (["solve", "scenarios/nonagon_ring.json", "--modes", "2", "--which", "near", "--target", "x"],
     "--target: 'x' is not 'shift,rate' in Γ0"),
    (["bands", "scenarios/kagome_circular.json", "--finite", "--points", "0"],
     "--points: 0 is out of range; allowed 2…20000"),
])
def test_cli_refusals(argv, words, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    try:
        code = main(argv + ["--out", str(tmp_path / "o")])
    except SystemExit as exc:
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2 and words in err and "Traceback" not in err
