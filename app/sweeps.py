"""Ensembles and parameter sweeps: many realisations of a scenario, on Dask or in-process.

A *plan* is a scenario, up to two swept parameters (each a dotted path into
the scenario file, e.g. ``geometry.spacing`` or ``imperfections.filling``, or
several paths set together such as ``geometry.nx,geometry.ny``), a number of
random realisations per point and the figures to record
(:class:`physics.ensembles.FigureRequest`).  Realisation r of every point uses
the random streams (seed, r), so neighbouring points differ by the parameter,
not by the noise.

Work is cut into tasks of several realisations of one point, sized to take
about a second, so that scheduling overhead stays small next to the work.
Tasks run on

* a local Dask cluster of worker processes (default; no set-up),
* any running Dask scheduler, given by address (``tcp://host:port``),
* or in the calling process ("inline": notebooks, the explorer, tests).

Each worker limits BLAS to one thread, so workers do not oversubscribe the
cores.  Results stream back as tasks finish and are appended to
``results.csv`` (one row per realisation; tidy) and ``spectra.csv`` (one row
per mode) at once, each task in a single flushed write.  ``plan.json``
records the plan; a run started again with ``resume=True`` on the same folder
skips every realisation already in ``results.csv`` (a partly written last line
from a killed run is discarded).

No physics here: figures come from :mod:`physics.ensembles`.
"""
from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

from physics import scenario as scn
from physics.ensembles import (FigureRequest, power_law, power_law_fit, realisation_figures,
                               summarise)

__all__ = ["Axis", "Plan", "parse_axis", "run_plan", "RunReport", "summary_rows", "estimate_seconds",
           "MAX_REALISATIONS", "MAX_POINTS", "SweepError"]

#: Largest number of realisations per point and of points per sweep.
MAX_REALISATIONS = 100_000
MAX_POINTS = 10_000
#: Aimed duration of one task [s] (a few realisations of one point).
TASK_SECONDS = 1.0

PLAN_FILE, RESULTS_FILE, SPECTRA_FILE = "plan.json", "results.csv", "spectra.csv"


class SweepError(ValueError):
    """Bad sweep input; the message names the field or flag."""


# ------------------------------------------------------------------ axes

@dataclass(frozen=True)
class Axis:
    """One swept parameter: the scenario paths it sets and its values."""

    paths: tuple[str, ...]
    values: tuple[float, ...]

    @property
    def label(self) -> str:
        """Column name: the paths joined by "+" (a comma would split the CSV column)."""
        return "+".join(self.paths)


def _number(text: str, flag: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise SweepError(f"{flag}: {text!r} is not a number") from None
    if not math.isfinite(v):
        raise SweepError(f"{flag}: {text!r} is not a finite number")
    return v


def parse_axis(text: str, flag: str = "--vary") -> Axis:
    """``PATH[,PATH…]=VALUES`` with VALUES a list ``a,b,c``, a range ``start:stop:count``
    or a geometric range ``log:start:stop:count``."""
    if "=" not in text:
        raise SweepError(f"{flag}: {text!r} needs the form path=values, e.g. "
                         f"geometry.spacing=0.2:0.8:7")
    lhs, rhs = text.split("=", 1)
    paths = tuple(p.strip() for p in lhs.split(",") if p.strip())
    if not paths or any(not all(part.isidentifier() or part.isdigit() for part in p.split("."))
                        for p in paths):
        raise SweepError(f"{flag}: {lhs!r} is not a dotted scenario path such as geometry.spacing")
    parts = rhs.split(":")
    if parts[0] == "log" and len(parts) == 4:
        a, b, n = _number(parts[1], flag), _number(parts[2], flag), _number(parts[3], flag)
        if a <= 0 or b <= 0:
            raise SweepError(f"{flag}: a geometric range needs positive ends, got {a:g} and {b:g}")
        values = np.geomspace(a, b, int(n)) if 2 <= n <= MAX_POINTS else None
    elif len(parts) == 3:
        a, b, n = (_number(p, flag) for p in parts)
        values = np.linspace(a, b, int(n)) if 2 <= n <= MAX_POINTS else None
    elif len(parts) == 1:
        values = np.array([_number(p, flag) for p in rhs.split(",")])
    else:
        raise SweepError(f"{flag}: {rhs!r} is not a list a,b,c or a range start:stop:count")
    if values is None or not 1 <= len(values) <= MAX_POINTS:
        raise SweepError(f"{flag}: the number of values is out of range; allowed 2 to {MAX_POINTS} "
                         f"for a range")
    return Axis(paths, tuple(float(v) for v in values))


def _set_path(doc: dict, path: str, value: float) -> None:
    keys = path.split(".")
    node = doc
    for k in keys[:-1]:
        if k.isdigit() and isinstance(node, list):
            k = int(k)
        elif not isinstance(node, dict):
            raise SweepError(f"--vary: {path!r} does not lead to a number in the scenario")
        if isinstance(node, dict) and k not in node:
            node[k] = {}
        node = node[k]
    last = keys[-1]
    if isinstance(node, list) and last.isdigit():
        last = int(last)
        if last >= len(node):
            raise SweepError(f"--vary: {path!r} indexes past the end of a list")
        old = node[last]
    elif isinstance(node, dict):
        old = node.get(last)
    else:
        raise SweepError(f"--vary: {path!r} does not lead to a number in the scenario")
    if isinstance(old, bool) or (old is not None and not isinstance(old, (int, float))):
        raise SweepError(f"--vary: {path!r} holds {json.dumps(old)[:40]}, not a number")
    if isinstance(old, int):
        if abs(value - round(value)) > 1e-9:
            raise SweepError(f"--vary: {path!r} takes whole numbers; got {value:g}")
        value = int(round(value))
    node[last] = value


# ------------------------------------------------------------------ plans

@dataclass(frozen=True)
class Plan:
    """A sweep: base scenario document, axes, realisations per point, figures, seed."""

    scenario: dict
    axes: tuple[Axis, ...] = ()
    realisations: int = 1
    request: FigureRequest = field(default_factory=FigureRequest)
    seed: int = 0

    def __post_init__(self) -> None:
        if len(self.axes) > 2:
            raise SweepError("--vary: at most two parameters at once")
        if not 1 <= int(self.realisations) <= MAX_REALISATIONS:
            raise SweepError(f"--realisations: {self.realisations} is out of range; allowed 1 to "
                             f"{MAX_REALISATIONS}")
        if self.n_points > MAX_POINTS:
            raise SweepError(f"--vary: {self.n_points} points; allowed at most {MAX_POINTS}")

    @property
    def n_points(self) -> int:
        return int(np.prod([len(a.values) for a in self.axes])) if self.axes else 1

    def point_values(self, p: int) -> tuple[float, ...]:
        if not self.axes:
            return ()
        shape = [len(a.values) for a in self.axes]
        idx = np.unravel_index(p, shape)
        return tuple(a.values[i] for a, i in zip(self.axes, idx))

    def scenario_at(self, p: int) -> scn.Scenario:
        """The scenario of point ``p`` (validated; refusals name the swept field)."""
        doc = json.loads(json.dumps(self.scenario))
        for axis, v in zip(self.axes, self.point_values(p)):
            for path in axis.paths:
                _set_path(doc, path, v)
        doc.setdefault("imperfections", {})["seed"] = int(self.seed)
        doc.setdefault("analysis", {})["selected_mode"] = 0  # display only; sizes change here
        doc["imperfections"].pop("realisation", None)
        try:
            return scn.from_dict(doc)
        except scn.ScenarioError as exc:
            at = ", ".join(f"{a.label} = {v:g}" for a, v in zip(self.axes, self.point_values(p)))
            raise SweepError(f"{exc}" + (f" (at {at})" if at else "")) from None

    def to_json(self) -> str:
        return json.dumps({
            "scenario": self.scenario,
            "axes": [{"paths": list(a.paths), "values": list(a.values)} for a in self.axes],
            "realisations": int(self.realisations),
            "request": {"mode": self.request.mode, "detuning": self.request.detuning,
                        "spectrum": self.request.spectrum},
            "seed": int(self.seed)}, sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> "Plan":
        d = json.loads(text)
        return cls(d["scenario"], tuple(Axis(tuple(a["paths"]), tuple(a["values"]))
                                        for a in d["axes"]),
                   d["realisations"], FigureRequest(**d["request"]), d["seed"])

    @property
    def fingerprint(self) -> str:
        return hashlib.sha256(self.to_json().encode()).hexdigest()[:16]

    def columns(self) -> list[str]:
        return (["point"] + [a.label for a in self.axes] + ["realisation"]
                + self.request.names() + ["note"])


# ------------------------------------------------------------------ tasks

def run_task(plan_json: str, point: int, realisations: list[int]) -> list[tuple]:
    """Compute the given realisations of one point (runs on a worker).

    Returns [(point, realisation, figures dict or None, spectrum or None, note)].
    BLAS is held to one thread so that worker processes share the cores.
    """
    from threadpoolctl import threadpool_limits

    plan = Plan.from_json(plan_json)
    out = []
    with threadpool_limits(1):
        sc = plan.scenario_at(point)
        for r in realisations:
            try:
                figs, spectrum = realisation_figures(sc, r, plan.request)
                out.append((point, r, figs, spectrum, ""))
            except (ValueError, np.linalg.LinAlgError) as exc:
                out.append((point, r, None, None, str(exc)))
    return out


def _cost_estimate(sc: scn.Scenario) -> float:
    """Rough seconds per realisation on one core: eigenvalues ∝ N³ (measured here: 0.11 s at N = 400)."""
    n = sc.clean_emitters().n
    return 2e-3 + 1.8e-9 * n ** 3


def estimate_seconds(plan: Plan) -> float:
    """Rough single-core time of the whole plan [s]."""
    return sum(_cost_estimate(plan.scenario_at(p)) for p in range(plan.n_points)) \
        * plan.realisations


def _tasks(plan: Plan, missing: dict[int, list[int]], workers: int) -> list[tuple[int, list[int]]]:
    tasks = []
    total = sum(len(v) for v in missing.values())
    for p, reals in sorted(missing.items()):
        per = _cost_estimate(plan.scenario_at(p))
        size = max(1, int(TASK_SECONDS / per))
        # keep every worker busy: at least ~3 tasks per worker when there is enough work
        size = max(1, min(size, math.ceil(total / (3 * max(1, workers)))))
        for k in range(0, len(reals), size):
            tasks.append((p, reals[k:k + size]))
    return tasks


# ------------------------------------------------------------------ files

def _complete_lines(path: Path) -> list[str]:
    """Lines of a CSV file; a last line without its newline (a killed write) is dropped."""
    if not path.exists():
        return []
    text = path.read_text(encoding="utf-8")
    if text and not text.endswith("\n"):
        text = text[: text.rfind("\n") + 1]
        path.write_text(text, encoding="utf-8")
    return text.splitlines()


def _done(out: Path, plan: Plan) -> set[tuple[int, int]]:
    lines = _complete_lines(out / RESULTS_FILE)
    if not lines:
        return set()
    rows = list(csv.reader(lines[1:]))
    rcol = plan.columns().index("realisation")
    done = {(int(r[0]), int(r[rcol])) for r in rows}
    spectra = _complete_lines(out / SPECTRA_FILE)
    if spectra:  # keep only spectra of realisations whose results row was written
        keep = [spectra[0]] + [ln for ln in spectra[1:]
                               if tuple(int(v) for v in ln.split(",")[:2]) in done]
        if len(keep) != len(spectra):
            (out / SPECTRA_FILE).write_text("\n".join(keep) + "\n", encoding="utf-8")
    return done


def _append(path: Path, text: str) -> None:
    with open(path, "a", encoding="utf-8") as fh:
        fh.write(text)
        fh.flush()
        os.fsync(fh.fileno())


def _rows_text(plan: Plan, rows: list[tuple]) -> tuple[str, str]:
    res, spec = io.StringIO(), io.StringIO()
    rw, sw = csv.writer(res, lineterminator="\n"), csv.writer(spec, lineterminator="\n")
    names = plan.request.names()
    for point, r, figs, spectrum, note in rows:
        vals = [repr(float(v)) for v in plan.point_values(point)]
        fig_vals = ([repr(float(figs[n])) for n in names] if figs is not None
                    else ["nan"] * len(names))
        rw.writerow([point, *vals, r, *fig_vals, note])
        if spectrum is not None:
            for m, (w, g) in enumerate(spectrum):
                sw.writerow([point, r, m, repr(float(w)), repr(float(g))])
    return res.getvalue(), spec.getvalue()


# ------------------------------------------------------------------ running

@dataclass
class RunReport:
    """What a run did."""

    total: int            # realisations in the plan
    already: int          # found in the results folder (resumed)
    computed: int = 0     # computed in this run
    failed: int = 0       # realisations that gave a refusal (noted in results.csv)
    tasks: int = 0
    seconds: float = 0.0
    cancelled: bool = False
    where: str = ""


def local_cluster(workers: int):
    """A Dask cluster on this machine: one single-threaded worker process per core asked for.

    Loopback only; its HTTP status server gets a free port (never a fixed 8787).
    """
    from dask.distributed import LocalCluster

    return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                        host="127.0.0.1", dashboard_address="127.0.0.1:0",
                        scheduler_kwargs={"dashboard": False}, silence_logs=40)


def _client(scheduler: str | None, workers: int | None):
    from dask.distributed import Client

    if scheduler in (None, "local"):
        n = workers or os.cpu_count() or 1
        cluster = local_cluster(n)
        return Client(cluster), cluster, f"local Dask cluster, {n} worker processes"
    client = Client(scheduler, timeout="10s")
    n = len(client.scheduler_info().get("workers", {}))
    return client, None, f"Dask scheduler {scheduler}, {n} workers"


def run_plan(plan: Plan, out: str | Path, *, scheduler: str | None = None,
             workers: int | None = None, resume: bool = False,
             progress: Callable[[int, int, float], None] | None = None,
             cancel: threading.Event | None = None) -> RunReport:
    """Run (or continue) a plan, writing into folder ``out``.

    ``scheduler``: None or "local" (a local Dask cluster), "inline" (this
    process, one task after another), or a Dask scheduler address.
    ``progress(done_realisations, total_realisations, seconds)`` is called
    after each task; setting ``cancel`` stops after the tasks in flight.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    plan_path = out / PLAN_FILE
    if plan_path.exists():
        if not resume:
            raise SweepError(f"--out: {out} already holds a sweep; add --resume to continue it or "
                             f"choose another folder")
        if Plan.from_json(plan_path.read_text(encoding="utf-8")).fingerprint != plan.fingerprint:
            raise SweepError(f"--resume: {out} holds a different sweep (other scenario, values, "
                             f"realisations or figures); choose another folder")
    for p in range(plan.n_points):
        plan.scenario_at(p)  # refuse bad points before any work starts
    if not plan_path.exists():
        plan_path.write_text(plan.to_json() + "\n", encoding="utf-8")
        (out / RESULTS_FILE).write_text(",".join(plan.columns()) + "\n", encoding="utf-8")
        if plan.request.spectrum:
            (out / SPECTRA_FILE).write_text("point,realisation,mode,shift_gamma0,"
                                            "decay_rate_gamma0\n", encoding="utf-8")
    done = _done(out, plan)
    missing: dict[int, list[int]] = {}
    for p in range(plan.n_points):
        reals = [r for r in range(plan.realisations) if (p, r) not in done]
        if reals:
            missing[p] = reals
    total = plan.n_points * plan.realisations
    report = RunReport(total=total, already=len(done))
    start = time.perf_counter()
    text = plan.to_json()

    def accept(rows):
        res_text, spec_text = _rows_text(plan, rows)
        if spec_text:
            _append(out / SPECTRA_FILE, spec_text)
        _append(out / RESULTS_FILE, res_text)  # last: marks these realisations as done
        report.computed += len(rows)
        report.failed += sum(1 for row in rows if row[2] is None)
        report.tasks += 1
        if progress is not None:
            progress(report.already + report.computed, total, time.perf_counter() - start)

    if missing:
        if scheduler == "inline":
            report.where = "this process"
            for p, reals in _tasks(plan, missing, 1):
                if cancel is not None and cancel.is_set():
                    report.cancelled = True
                    break
                accept(run_task(text, p, reals))
        else:
            from dask.distributed import as_completed

            client, cluster, report.where = _client(scheduler, workers)
            try:
                n_workers = max(1, len(client.scheduler_info().get("workers", {})))
                tasks = _tasks(plan, missing, n_workers)
                futures = [client.submit(run_task, text, p, reals, pure=False)
                           for p, reals in tasks]
                for fut in as_completed(futures):
                    accept(fut.result())
                    if cancel is not None and cancel.is_set():
                        client.cancel(futures)
                        report.cancelled = True
                        break
            finally:
                client.close()
                if cluster is not None:
                    cluster.close()
    report.seconds = time.perf_counter() - start
    if not report.cancelled and report.already + report.computed == total:
        _sort_results(out)
    return report


def _sort_results(out: Path) -> None:
    """Rewrite the finished files in (point, realisation[, mode]) order, atomically."""
    for name, width in ((RESULTS_FILE, None), (SPECTRA_FILE, 3)):
        path = out / name
        if not path.exists():
            continue
        lines = _complete_lines(path)
        head, body = lines[0], lines[1:]
        if name == RESULTS_FILE:
            header = head.split(",")
            rcol = header.index("realisation")
            key = (lambda ln: (int(ln.split(",")[0]), int(ln.split(",")[rcol])))
        else:
            key = (lambda ln: tuple(int(v) for v in ln.split(",")[:width]))
        body.sort(key=key)
        tmp = path.with_suffix(".tmp")
        tmp.write_text("\n".join([head] + body) + "\n", encoding="utf-8")
        os.replace(tmp, path)


# ------------------------------------------------------------------ summaries

def read_results(out: str | Path) -> tuple[Plan, list[dict[str, Any]]]:
    """The plan and the result rows (numbers as floats) of a results folder."""
    out = Path(out)
    plan = Plan.from_json((out / PLAN_FILE).read_text(encoding="utf-8"))
    rows = list(csv.DictReader(_complete_lines(out / RESULTS_FILE)))
    for row in rows:
        for k in list(row):
            if k != "note":
                row[k] = float(row[k])
    return plan, rows


def summary_rows(plan: Plan, rows: list[dict]) -> list[dict[str, Any]]:
    """Per point and figure: the parameter values and the statistics of the realisations."""
    out = []
    by_point: dict[int, list[dict]] = {}
    for row in rows:
        by_point.setdefault(int(row["point"]), []).append(row)
    for p in sorted(by_point):
        vals = plan.point_values(p)
        for name in plan.request.names():
            stats = summarise([r[name] for r in by_point[p]])
            out.append({"point": p, **{a.label: v for a, v in zip(plan.axes, vals)},
                        "figure": name, **stats})
    return out


def scaling_fit(plan: Plan, summary: list[dict], figure: str) -> dict[str, float] | None:
    """Power-law fit of a figure's mean against the (single) swept parameter."""
    if len(plan.axes) != 1:
        return None
    pts = [s for s in summary if s["figure"] == figure and s["n"] > 0]
    x = np.array([s[plan.axes[0].label] for s in pts])
    y = np.array([s["mean"] for s in pts])
    sem = np.array([s["sem"] for s in pts])
    return power_law_fit(x, y, sem if plan.realisations > 1 else None)


# ------------------------------------------------------------------ pictures

def plot_png(plan: Plan, summary: list[dict], figure: str, path: str | Path,
             fit: dict | None = None, spectra: Path | None = None) -> None:
    """A PNG of the sweep: the figure's mean ± standard error against the swept parameter
    (log axes with a power-law fit), a map for two parameters, or for an ensemble
    without parameters the histogram of all decay rates."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from physics.ensembles import FIGURES, log_histogram

    fig, ax = plt.subplots(figsize=(6.4, 4.4), dpi=120)
    pts = [s for s in summary if s["figure"] == figure]
    label = f"{figure.replace('_', ' ')} — {FIGURES[figure]}"
    if len(plan.axes) == 0:
        if spectra is not None and spectra.exists():
            rates = np.loadtxt(spectra, delimiter=",", skiprows=1, usecols=4, ndmin=1)
            edges, counts = log_histogram(rates)
            ax.stairs(counts, edges, fill=True, color="#7e57c2")
            ax.set_xscale("log")
            ax.set_xlabel("decay rate Γ/Γ0 (all modes of all realisations)")
            ax.set_ylabel("number of modes")
            ax.set_title(f"{plan.realisations} realisations")
        else:
            s = pts[0]
            ax.bar([0], [s["mean"]], yerr=[s["sem"]], color="#7e57c2")
            ax.set_ylabel(label)
    elif len(plan.axes) == 1:
        x = np.array([s[plan.axes[0].label] for s in pts])
        y = np.array([s["mean"] for s in pts])
        e = np.array([s["sem"] for s in pts])
        ax.errorbar(x, y, yerr=e if plan.realisations > 1 else None, fmt="o", color="#4527a0",
                    capsize=3, label=("one realisation per point" if plan.realisations == 1 else
                           f"mean of {plan.realisations} realisations ± standard error"))
        if fit is not None:
            xx = np.geomspace(x.min(), x.max(), 100)
            ax.plot(xx, power_law(fit, xx), color="#ef6c00",
                    label=f"fit ∝ x^({fit['exponent']:.3f} ± {fit['exponent_error']:.3f})")
            ax.set_xscale("log")
            ax.set_yscale("log")
        ax.set_xlabel(plan.axes[0].label)
        ax.set_ylabel(label, fontsize=8)
        ax.legend(fontsize=8)
    else:
        a0, a1 = plan.axes
        grid = np.full((len(a1.values), len(a0.values)), np.nan)
        for s in pts:
            i, j = np.unravel_index(s["point"], (len(a0.values), len(a1.values)))
            grid[j, i] = s["mean"]
        mesh = ax.pcolormesh(a0.values, a1.values, grid, shading="nearest", cmap="cividis")
        fig.colorbar(mesh, ax=ax, label=f"mean {figure.replace('_', ' ')}")
        ax.set_xlabel(a0.label)
        ax.set_ylabel(a1.label)
    ax.text(0.0, -0.2, "Model: single excitation, Markov, point two-level dipoles at rest.",
            transform=ax.transAxes, fontsize=7, color="#555555")
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
