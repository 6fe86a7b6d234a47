"""Ensembles and sweeps: exactness, statistics, scaling, Dask set-ups, resuming."""
from __future__ import annotations

import csv
import os
import re
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from app import sweeps as S
from physics import scenario as scn
from physics.ensembles import FigureRequest, power_law_fit, realisation_figures
from physics.free_space import FreeSpace
from physics.modes import solve_modes

ROOT = Path(__file__).parents[2]


def _doc(name="mirror_square_16x16", **geometry):
    d = scn.to_dict(scn.load(ROOT / "scenarios" / f"{name}.json"))
    d["geometry"].update(geometry)
    return d


def _rows(folder) -> list[dict]:
    return S.read_results(folder)[1]


# ------------------------------------------------------------ axes and plans

@pytest.mark.parametrize("text, paths, values", [
    ("geometry.spacing=0.2:0.8:4", ("geometry.spacing",), (0.2, 0.4, 0.6, 0.8)),
    ("geometry.nx,geometry.ny=4,8", ("geometry.nx", "geometry.ny"), (4.0, 8.0)),
    ("imperfections.filling=log:0.25:1:3", ("imperfections.filling",), (0.25, 0.5, 1.0)),
])
def test_axis_forms(text, paths, values):
    a = S.parse_axis(text)
    assert a.paths == paths
    np.testing.assert_allclose(a.values, values)


@pytest.mark.parametrize("text, words", [
    ("geometry.spacing", "needs the form path=values"),
    ("geometry.spacing=0.2:x:4", "'x' is not a number"),
    ("geometry.spacing=0.2:0.8:1", "number of values is out of range"),
    ("1bad=3", "is not a dotted scenario path"),
])
def test_axis_refusals(text, words):
    with pytest.raises(S.SweepError, match=re.escape(words)):
        S.parse_axis(text)


def test_bad_point_is_refused_before_any_work(tmp_path):
    plan = S.Plan(_doc(nx=4, ny=4), (S.parse_axis("geometry.spacing=0.5,-1"),))
    with pytest.raises(S.SweepError, match=r"geometry.spacing.*\(at geometry.spacing = -1\)"):
        S.run_plan(plan, tmp_path, scheduler="inline")
    assert not (tmp_path / "results.csv").exists()
    plan = S.Plan(_doc(nx=4, ny=4), (S.parse_axis("geometry.nx=2.5,3"),))
    with pytest.raises(S.SweepError, match="takes whole numbers"):
        plan.scenario_at(0)


# ------------------------------------------------------------ physics through the engine

def test_zero_jitter_and_full_filling_reproduce_the_clean_array_exactly(tmp_path):
    doc = _doc(nx=5, ny=5)
    doc["imperfections"] = {"jitter_lambda0": [0.0, 0.0, 0.0], "filling": 1.0}
    plan = S.Plan(doc, (), 6, FigureRequest(mode=3))
    S.run_plan(plan, tmp_path, scheduler="inline")
    rows = _rows(tmp_path)
    clean, _ = realisation_figures(scn.from_dict(_doc(nx=5, ny=5)), 0, FigureRequest(mode=3))
    for row in rows:
        for k, v in clean.items():
            assert row[k] == v  # bit for bit
    modes = solve_modes(scn.from_dict(_doc(nx=5, ny=5)).emitters(), FreeSpace())
    assert rows[0]["most_subradiant_rate"] == pytest.approx(modes.decay_rates[0], rel=1e-9)


def test_chain_subradiant_exponent_from_a_size_sweep(tmp_path):
    # Most subradiant decay rate of a chain (d < λ0/2) ∝ N^−3:
    # A. Asenjo-Garcia et al., Phys. Rev. X 7, 031024 (2017).
    plan = S.Plan(_doc("subradiant_chain"), (S.parse_axis("geometry.n=50,100,200,400"),), 1,
                  FigureRequest(spectrum=False))
    S.run_plan(plan, tmp_path, scheduler="inline")
    p, rows = S.read_results(tmp_path)
    fit = S.scaling_fit(p, S.summary_rows(p, rows), "most_subradiant_rate")
    assert fit["exponent"] == pytest.approx(-3.0, abs=0.05)
    assert fit["exponent_error"] < 0.05


def test_ensemble_mean_converges_as_one_over_root_m(tmp_path):
    # Central limit theorem (common practice): the spread of an M-realisation
    # mean falls as M^−1/2.  Blocks of M = 16, 64, 256 out of 4096 jittered
    # realisations of a 3 × 3 array; the fitted exponent must be −0.5 ± 0.15.
    doc = _doc(nx=3, ny=3)
    doc["imperfections"] = {"jitter_lambda0": [0.05, 0.05, 0.05]}
    plan = S.Plan(doc, (), 4096, FigureRequest(spectrum=False), seed=17)
    S.run_plan(plan, tmp_path, scheduler="inline")
    x = np.array([r["most_radiant_rate"] for r in _rows(tmp_path)])
    grand = x.mean()
    ms, spread = [16, 64, 256], []
    for m in ms:
        means = x[: (len(x) // m) * m].reshape(-1, m).mean(axis=1)
        spread.append(np.sqrt(np.mean((means - grand) ** 2)))
    fit = power_law_fit(ms, spread)
    assert fit["exponent"] == pytest.approx(-0.5, abs=0.15)
    # and the reported standard error is s/√M
    summ = S.summary_rows(plan, _rows(tmp_path))
    s = next(r for r in summ if r["figure"] == "most_radiant_rate")
    assert s["sem"] == pytest.approx(x.std(ddof=1) / np.sqrt(len(x)))


def test_power_law_fit_recovers_exponent_and_error():
    # Straight-line fit with known errors (Numerical Recipes, 3rd ed., §15.2):
    # on exact data the exponent is exact; with weights the error is finite.
    x = np.array([10.0, 20.0, 40.0, 80.0])
    y = 3.0 * x ** -2.5
    fit = power_law_fit(x, y, 0.01 * y)
    assert fit["exponent"] == pytest.approx(-2.5, abs=1e-12)
    assert fit["prefactor"] == pytest.approx(3.0, rel=1e-12)
    # error of the slope for equal relative errors s: s / sqrt(Σ(ln x − mean)²)
    lx = np.log(x)
    assert fit["exponent_error"] == pytest.approx(0.01 / np.sqrt(np.sum((lx - lx.mean()) ** 2)))


# ------------------------------------------------------------ Dask set-ups

def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def dask_cluster():
    """A real distributed set-up on loopback: one scheduler and two worker processes."""
    port = _free_port()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    procs = [subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_scheduler",
                               "--host", "127.0.0.1", "--port", str(port), "--no-dashboard"],
                              cwd=ROOT, env=env, stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL)]
    addr = f"tcp://127.0.0.1:{port}"
    for _ in range(2):
        procs.append(subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_worker", addr,
                                       "--nthreads", "1", "--no-dashboard"],
                                      cwd=ROOT, env=env, stdout=subprocess.DEVNULL,
                                      stderr=subprocess.DEVNULL))
    from dask.distributed import Client

    deadline = time.time() + 60
    while time.time() < deadline:
        try:
            with Client(addr, timeout="2s") as c:
                if len(c.scheduler_info()["workers"]) == 2:
                    break
        except OSError:
            pass
        time.sleep(0.5)
    else:
        for p in procs:
            p.kill()
        raise RuntimeError("the test's Dask scheduler and workers did not come up in 60 s")
    yield addr
    for p in procs[::-1]:
        p.terminate()
    for p in procs:
        p.wait(timeout=30)


def _sweep_plan() -> S.Plan:
    doc = _doc(nx=6, ny=6)
    doc["imperfections"] = {"jitter_lambda0": [0.02, 0.02, 0.04], "filling": 0.85}
    return S.Plan(doc, (S.parse_axis("geometry.spacing=0.4,0.6,0.8"),), 12,
                  FigureRequest(mode=1, detuning=0.0), seed=9)


@pytest.mark.slow
def test_local_default_and_distributed_setup_give_identical_results(tmp_path, dask_cluster):
    plan = _sweep_plan()
    local = S.run_plan(plan, tmp_path / "local")            # default: a local cluster
    remote = S.run_plan(plan, tmp_path / "remote", scheduler=dask_cluster)
    assert "local Dask cluster" in local.where and "2 workers" in remote.where
    for name in ("results.csv", "spectra.csv"):
        a = (tmp_path / "local" / name).read_text()
        assert a == (tmp_path / "remote" / name).read_text()
        assert len(a.splitlines()) > 36
    S.run_plan(plan, tmp_path / "inline", scheduler="inline")
    assert (tmp_path / "inline" / "results.csv").read_text() == \
        (tmp_path / "local" / "results.csv").read_text()


# ------------------------------------------------------------ interruption

def test_killed_run_resumes_without_recomputing(tmp_path):
    doc = _doc(nx=7, ny=7)
    doc["imperfections"] = {"seed": 5, "jitter_lambda0": [0.03, 0.03, 0.03]}
    path = tmp_path / "jittered.json"
    path.write_text(scn.dumps(scn.from_dict(doc)))
    out = tmp_path / "run"
    cmd = [sys.executable, "-m", "app.cli", "sweep", str(path), "--realisations", "400",
           "--vary", "geometry.spacing=0.3,0.5", "--scheduler", "inline", "--out", str(out)]
    proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    results = out / "results.csv"
    deadline = time.time() + 120
    while time.time() < deadline:
        if results.exists() and len(results.read_text().splitlines()) > 60:
            break
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    before = results.read_text().splitlines()
    assert 60 < len(before) - 1 < 800, "the run finished before it could be killed"
    with open(results, "a") as fh:  # a torn last write, as a kill mid-line leaves it
        fh.write("1,0.5,399,49.0,0.1")
    done = len(before) - 1
    res = subprocess.run(cmd + ["--resume"], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    assert f"{done} realisation(s) found done, {800 - done} computed" in res.stdout
    rows = list(csv.DictReader(results.read_text().splitlines()))
    keys = [(r["point"], r["realisation"]) for r in rows]
    assert len(rows) == 800 and len(set(keys)) == 800
    # the same sweep without interruption gives the same file
    again = tmp_path / "again"
    res = subprocess.run(cmd[:-1] + [str(again)], cwd=ROOT, capture_output=True, text=True,
                         timeout=300)
    assert res.returncode == 0, res.stderr
    assert (again / "results.csv").read_text() == results.read_text()
    assert (again / "spectra.csv").read_text() == (out / "spectra.csv").read_text()


# ------------------------------------------------------------ command line

def _cli(*args):
    return subprocess.run([sys.executable, "-m", "app.cli", *args], cwd=ROOT, capture_output=True,
                          text=True, timeout=300)


def test_cli_sweep_writes_tidy_files_and_a_plot(tmp_path):
    res = _cli("sweep", "scenarios/subradiant_chain.json", "--vary", "geometry.n=40,80,160",
               "--fit", "power", "--scheduler", "inline", "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert "power-law fit: most_subradiant_rate ∝ geometry.n^(-3.0" in res.stdout
    assert "100.0 %" in res.stderr  # the progress bar reached its end
    head = (tmp_path / "summary.csv").read_text().splitlines()[0]
    assert head.startswith("point,geometry.n,figure,n,mean,sem")
    assert (tmp_path / "plot.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("args, words", [
    (["--realisations", "0"], "--realisations: 0 is out of range; allowed 1 to 100000"),
    (["--vary", "geometry.spacing"], "--vary: 'geometry.spacing' needs the form path=values"),
    (["--vary", "geometry.spacing=0.0001,0.3"], "(at geometry.spacing = 0.0001)"),
    (["--jitter", "0.1,0.2"], "--jitter: give one value (all axes) or three x,y,z"),
    (["--jitter", "0.1,0.1,5"], "imperfections.jitter_lambda0[2]: 5.0 is out of range; allowed 0 to 1"),
    (["--filling", "0"], "imperfections.filling: 0.0 is out of range"),
    (["--plot", "mode_rate"], "--plot: mode_rate needs --mode"),
    (["--fit", "power"], "--fit: a power-law fit needs exactly one --vary parameter"),
    (["--mode", "-1"], "--mode: -1 is out of range; allowed 0 to 9999"),
])
def test_cli_sweep_refusals(args, words, tmp_path):
    res = _cli("sweep", "scenarios/subradiant_chain.json", "--scheduler", "inline",
               "--out", str(tmp_path / "x"), *args)
    assert res.returncode == 2 and words in res.stderr and "Traceback" not in res.stderr


def test_cli_refuses_to_mix_sweeps_in_one_folder(tmp_path):
    base = ["sweep", "scenarios/subradiant_chain.json", "--scheduler", "inline", "--out",
            str(tmp_path)]
    assert _cli(*base).returncode == 0
    res = _cli(*base)
    assert res.returncode == 2 and "already holds a sweep; add --resume" in res.stderr
    res = _cli(*base, "--realisations", "3", "--resume")
    assert res.returncode == 2 and "holds a different sweep" in res.stderr
