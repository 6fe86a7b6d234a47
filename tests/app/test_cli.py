"""The choir command line: every demo scenario solves, bad input exits 2 with a message."""
from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from app.cli import main
from physics import scenario as scn

ROOT = Path(__file__).parents[2]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.json"))


def run_cli(*args: str) -> subprocess.CompletedProcess:
    """Run ``choir`` as a separate process, exactly as a user would."""
    return subprocess.run([sys.executable, "-m", "app.cli", *args], capture_output=True,
                          text=True, cwd=ROOT, timeout=300)


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_every_demo_scenario_solves(path, tmp_path):
    res = run_cli("solve", str(path), "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert "most subradiant" in res.stdout and "Model:" in res.stdout
    sc = scn.load(path)
    n = sc.emitters().n
    with open(tmp_path / "spectrum.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == n
    rates = np.array([float(r["decay_rate_gamma0"]) for r in rows])
    # sum rule Σ Γ_m = Σ_i (single-emitter rate of i) — the trace of the decay
    # matrix (exact identity); N Γ0 in free space
    single = -2.0 * np.diag(sc.environment_model().coupling(sc.emitters())).imag
    assert rates.sum() == pytest.approx(single.sum(), rel=1e-9)
    # lab units: lifetime [ns] = 1 / (2π · Γ/2π[MHz] · 1e6) · 1e9 (definition)
    r = rows[-1]
    assert float(r["lifetime_ns"]) == pytest.approx(
        1e3 / (2 * np.pi * float(r["decay_rate_mhz"])), rel=1e-12)
    data = np.load(tmp_path / "modes.npz")
    assert data["vectors"].shape == (n, n)
    if "defective" in res.stdout:
        assert not (tmp_path / "far_field.csv").exists()
        return
    far = np.loadtxt(tmp_path / "far_field.csv", delimiter=",", skiprows=2)
    assert far.shape[1] == 3 and np.all(far[:, 2] >= 0)


def test_new_writes_a_scenario_that_validates(tmp_path):
    res = run_cli("new", "--lattice", "square", "--nx", "10", "--ny", "10", "--spacing", "0.3")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["geometry"] == {"lattice": "square", "nx": 10, "ny": 10, "spacing": 0.3}
    path = tmp_path / "my.json"
    path.write_text(res.stdout)
    val = run_cli("validate", str(path))
    assert val.returncode == 0 and "100 emitters" in val.stdout


@pytest.mark.parametrize("args, words", [
    pytest.param(["new", "--lattice", "square", "--nx", "0", "--ny", "2", "--spacing", "0.3"],
                 "--nx: 0 is out of range; allowed 1 to 10000", id="range"),
    pytest.param(["new", "--lattice", "square", "--nx", "3", "--spacing", "0.3"],
                 "--ny is required for --lattice square", id="missing"),
    pytest.param(["new", "--lattice", "ring", "--n", "5", "--spacing", "0.3", "--nx", "2"],
                 "does not belong", id="foreign"),
    pytest.param(["new", "--lattice", "chain", "--n", "5", "--spacing", "0.3", "--dipole", "q"],
                 "--dipole: 'q' is not allowed", id="dipole"),
    pytest.param(["new", "--lattice", "chain", "--n", "5", "--spacing", "0.3", "--na", "2"],
                 "--na: 2.0 is out of range", id="na"),
    pytest.param(["new", "--lattice", "chain", "--n", "5", "--spacing", "0.3",
                  "--wavelength-nm", "780"], "go together", id="half-transition"),
    pytest.param(["new", "--lattice", "pentagon"], "invalid choice", id="argparse"),
    pytest.param(["solve", "does-not-exist.json"], "cannot read", id="no-file"),
])
def test_bad_input_exits_2_with_a_message(args, words):
    res = run_cli(*args)
    assert res.returncode == 2
    assert words in res.stderr
    assert "Traceback" not in res.stderr


def test_bad_scenario_file_exits_2_naming_the_field(tmp_path, capsys):
    doc = json.loads((SCENARIOS[0]).read_text())
    doc["geometry"] = {"lattice": "chain", "n": 4, "spacing": 2000}
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(doc))
    assert main(["solve", str(bad), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "geometry.spacing: 2000 is out of range; allowed 0.001 to 1000" in err


def test_console_script_is_declared():
    """pyproject declares the `choir` entry point (setuptools convention)."""
    text = (ROOT / "pyproject.toml").read_text()
    assert 'choir = "app.cli:main"' in text


def test_chiral_guide_gets_a_plain_statement_and_exact_guided_outputs(tmp_path):
    """Perfectly chiral, 12 emitters, Γ_f = 1, Γ' = 0.1 Γ0: eigenvectors are meaningless, the
    guided transmission on resonance is ((Γ_f − Γ')/(Γ_f + Γ'))^(2N) (cascaded single-emitter
    results, Shen & Fan, Opt. Lett. 30, 2001 (2005), from memory)."""
    res = run_cli("solve", "scenarios/chiral_waveguide_defective.json", "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert "coupling matrix is defective" in res.stdout
    assert not (tmp_path / "far_field.csv").exists()
    probe = np.loadtxt(tmp_path / "guided_probe.csv", delimiter=",", skiprows=1)
    mid = probe[np.argmin(np.abs(probe[:, 0]))]
    assert abs(mid[0]) < 1e-12
    assert mid[6] == pytest.approx((0.9 / 1.1) ** 24, rel=1e-9)
    decay = np.loadtxt(tmp_path / "decay.csv", delimiter=",", skiprows=2)
    assert decay[0, 2] == pytest.approx(1.0) and np.all(np.diff(decay[:, 2]) <= 1e-12)


def test_scan_of_a_mirror_array_and_its_fitted_resonance(tmp_path):
    """Gaussian beam on the 16×16 demo array: reflection near 1 on resonance (mirror-like
    response; Phys. Rev. Lett. 118, 113601 (2017) for the infinite-array limit)."""
    res = run_cli("scan", "scenarios/mirror_square_16x16.json", "--probe", "gaussian_beam",
                  "--waist", "2", "--detuning-min", "-3", "--detuning-max", "3",
                  "--map-plane", "xz", "--map-pixels", "31", "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert "fitted Lorentzian" in res.stdout and "Laser safety" in res.stdout
    data = np.genfromtxt(tmp_path / "scan.csv", delimiter=",", names=True)
    assert data["reflection"].max() > 0.95
    fmap = np.loadtxt(tmp_path / "field_map.csv", delimiter=",", skiprows=2)
    assert fmap.shape == (31 * 31, 3)
    # a near-perfect mirror: far less light behind the array (z > 1) than in front of it
    behind, front = fmap[fmap[:, 1] > 1.0, 2], fmap[fmap[:, 1] < -1.0, 2]
    assert np.nanmean(behind) < 0.1 * np.nanmean(front)
    # optical theorem, exact in this model: extinction equals scattered power
    np.testing.assert_allclose(data["extinction_gamma0"], data["scattered_gamma0"], rtol=1e-9,
                               atol=1e-12)


def test_decay_of_one_emitter_is_exponential(tmp_path):
    """A single emitter decays as e^{−Γ0 t} (Weisskopf–Wigner; textbook)."""
    doc = json.loads((ROOT / "scenarios" / "hand_placed_cluster.json").read_text())
    doc["geometry"] = {"lattice": "explicit", "positions": [[0.0, 0.0, 0.0]]}
    doc["dipole"] = {"preset": "x"}
    doc["analysis"]["selected_mode"] = 0
    path = tmp_path / "one.json"
    path.write_text(json.dumps(doc))
    res = run_cli("decay", str(path), "--t-max", "3", "--points", "31", "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    data = np.loadtxt(tmp_path / "decay.csv", delimiter=",", skiprows=2)
    np.testing.assert_allclose(data[:, 2], np.exp(-data[:, 0]), atol=1e-10)
    np.testing.assert_allclose(data[:, 3], np.exp(-data[:, 0]), atol=1e-10)  # emitted power


@pytest.mark.parametrize("args, words", [
    pytest.param(["scan", "scenarios/nonagon_ring.json", "--points", "1"],
                 "--points: 1 is out of range", id="scan-points"),
    pytest.param(["scan", "scenarios/nonagon_ring.json", "--probe", "guided"],
                 "needs a waveguide", id="guided-without-guide"),
    pytest.param(["decay", "scenarios/chiral_waveguide_defective.json", "--initial", "mode"],
                 "defective", id="mode-of-defective"),
    pytest.param(["decay", "scenarios/nonagon_ring.json", "--emitter", "9"],
                 "--emitter: 9 is out of range", id="emitter-index"),
    pytest.param(["decay", "scenarios/nonagon_ring.json", "--t-max", "-1"],
                 "--t-max", id="t-max"),
])
def test_scan_and_decay_refuse_bad_input(args, words):
    res = run_cli(*args)
    assert res.returncode == 2 and words in res.stderr and "Traceback" not in res.stderr


def test_bands_of_a_square_array(tmp_path):
    # Square lattice a = 0.4 λ0, x-dipoles: Γ(k = 0) = (3/4π)(λ0/a)² Γ0
    # (E. Shahmoon et al., Phys. Rev. Lett. 118, 113601 (2017)); zero outside the light cone.
    res = run_cli("new", "--lattice", "square", "--nx", "6", "--ny", "6", "--spacing", "0.4")
    (tmp_path / "sq.json").write_text(res.stdout)
    res = run_cli("bands", str(tmp_path / "sq.json"), "--points", "120", "--map", "21",
                  "--finite", "--out", str(tmp_path / "out"))
    assert res.returncode == 0, res.stderr
    assert "path Γ – X – M – Y – Γ" in res.stdout and "Model:" in res.stdout
    with open(tmp_path / "out" / "bands.csv", newline="") as fh:
        rows = list(csv.DictReader(line for line in fh if not line.startswith("#")))
    assert len(rows) == 120 or abs(len(rows) - 120) <= 4
    first = rows[0]
    assert float(first["decay_rate_gamma0"]) == pytest.approx(3 / (4 * np.pi) / 0.16, rel=1e-12)
    dark = [abs(float(r["decay_rate_gamma0"])) for r in rows
            if r["open_orders"] == "0" and r["shift_gamma0"] != "nan"]
    assert dark and max(dark) < 1e-12
    with open(tmp_path / "out" / "finite_modes.csv", newline="") as fh:
        modes = list(csv.DictReader(line for line in fh if not line.startswith("#")))
    assert len(modes) == 36
    assert (tmp_path / "out" / "bands_map.csv").stat().st_size > 1000


@pytest.mark.parametrize("args, words", [
    pytest.param(["bands", "scenarios/nonagon_ring.json"],
                 "geometry.lattice: 'ring' has no infinite counterpart", id="ring"),
    pytest.param(["bands", "scenarios/mirror_square_16x16.json", "--points", "1"],
                 "--points: 1 is out of range; allowed 2…20000", id="points"),
    pytest.param(["bands", "scenarios/mirror_square_16x16.json", "--map", "3"],
                 "--map: 3 is out of range; allowed 5…1001", id="map"),
])
def test_bands_refuses_bad_input(args, words):
    res = run_cli(*args)
    assert res.returncode == 2 and words in res.stderr and "Traceback" not in res.stderr


def test_scan_compares_with_the_infinite_array(tmp_path):
    # The infinite sheet at normal incidence reflects fully at its collective
    # resonance (E. Shahmoon et al., Phys. Rev. Lett. 118, 113601 (2017)).
    res = run_cli("scan", "scenarios/mirror_square_16x16.json", "--infinite", "--points", "401",
                  "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert "infinite array" in res.stdout
    data = np.loadtxt(tmp_path / "sheet.csv", delimiter=",", skiprows=2)
    assert data.shape == (401, 10)
    np.testing.assert_allclose(data[:, 6] + data[:, 7] + data[:, 8], 1.0, atol=1e-12)
    assert data[:, 6].max() > 0.99
    res = run_cli("scan", "scenarios/subradiant_chain.json", "--infinite")
    assert res.returncode == 2 and "--infinite: a chain is not a sheet" in res.stderr


def test_solve_chosen_modes_of_a_large_array(tmp_path):
    # The few-mode path agrees with the dense solve on the five most subradiant
    # modes (common practice, no source; see tests/physics/test_large.py).
    res = run_cli("solve", "scenarios/mirror_square_16x16.json", "--modes", "5",
                  "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert "5 most subradiant modes (dense blocks" in res.stdout and "100.0 %" in res.stderr
    got = np.loadtxt(tmp_path / "spectrum.csv", delimiter=",", skiprows=1, usecols=2)
    sc = scn.load(ROOT / "scenarios" / "mirror_square_16x16.json")
    from physics.modes import solve_modes

    ref = solve_modes(sc.emitters(), sc.environment_model(), use_symmetry=False).decay_rates[:5]
    np.testing.assert_allclose(got, ref, rtol=1e-9)


def test_full_solve_of_a_huge_unsymmetric_array_points_to_modes(tmp_path):
    d = scn.to_dict(scn.load(ROOT / "scenarios" / "mirror_square_16x16.json"))
    d["geometry"].update(nx=80, ny=80)
    d["analysis"]["selected_mode"] = 0
    d["imperfections"] = {"seed": 2, "jitter_lambda0": [0.01, 0.01, 0.01]}
    (tmp_path / "big.json").write_text(scn.dumps(scn.from_dict(d)))
    res = run_cli("solve", str(tmp_path / "big.json"), "--out", str(tmp_path / "o"))
    assert res.returncode == 2 and "--modes K" in res.stderr and "6400 emitters" in res.stderr
    res = run_cli("solve", str(tmp_path / "big.json"), "--modes", "2", "--which", "near")
    assert res.returncode == 2 and "--target: --which near needs" in res.stderr


def test_solver_failures_become_messages(monkeypatch, capsys):
    # A non-converging iterative solve must reach the user as a message, exit 2.
    import scipy.sparse.linalg

    from physics import large

    def no_convergence(*a, **k):
        raise scipy.sparse.linalg.ArpackNoConvergence("ARPACK error -1: No convergence", [], [])

    monkeypatch.setattr(large, "DENSE_BLOCK_LIMIT", 1)  # every block goes to ARPACK
    monkeypatch.setattr(scipy.sparse.linalg, "eigs", no_convergence)
    code = main(["solve", str(ROOT / "scenarios" / "nonagon_ring.json"), "--modes", "2",
                 "--out", str(ROOT / "artifacts" / "noconv")])
    err = capsys.readouterr().err
    assert code == 2 and "did not converge" in err and "Traceback" not in err
