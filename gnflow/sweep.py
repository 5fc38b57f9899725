"""Design studies: a case solved over a grid of values of some of its keys.

A study varies dotted case keys (``drive.pressure_gradient``, ``fluid.flow_index``,
``geometry.eccentricity``, ...) over evenly or geometrically spaced values, solves every
combination, and tabulates a few engineering outputs per case. The cases run in
worker processes on this machine, or on a running dask.distributed cluster. A case that
cannot be built (an impossible geometry, a bad fluid parameter) or does not converge is
recorded in its row, and the study goes on.

A flow curve is the special study for pump matching: flow rate against pressure
gradient for one passage and fluid (or the inverse, pressure gradient against flow rate).

>>> case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 2.0, "flow_index": 0.5},
...     "geometry": {"shape": "pipe", "radius": "20 mm"}, "drive": {"pressure_gradient": -3000.0}})
>>> spec = parse_vary("drive.pressure_gradient=-1kPa/m:-4kPa/m:4", case)
>>> spec.column, spec.values
('drive.pressure_gradient [Pa/m]', (-1000.0, -2000.0, -3000.0, -4000.0))
>>> [round(v, 9) for v in parse_vary("fluid.flow_index=0.3:0.9:3", case).values]
[0.3, 0.6, 0.9]
>>> table = run_sweep(case, [spec], workers=1, show_progress=False)
>>> [round(row["flow_rate"] * 1e6, 3) for row in table.rows]  # pi R^3 (tau_w/K)^2 / 5, mL/s
[125.664, 502.655, 1130.973, 2010.619]
"""

from __future__ import annotations

import copy
import csv
import difflib
import itertools
import math
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .case import GEOMETRY_KEYS, MODEL_KEYS, Case, assign, load_case
from .errors import CaseError
from .units import quantity, si_unit

#: outputs tabulated per case (summary key, unit); slit flow rates are per unit width
AXIAL_OUTPUTS = ("flow_rate", "pressure_gradient", "wall_shear_stress_mean", "reynolds_number")
ROTATIONAL_OUTPUTS = ("torque_per_length", "wall_shear_stress_mean")
FLOW_CURVE_OUTPUTS = ("pressure_gradient", "pressure_drop_per_length", "flow_rate",
                      "mean_velocity", "wall_shear_stress_mean", "reynolds_number")
OUTPUT_UNITS = {"flow_rate": "m^3/s", "pressure_gradient": "Pa/m",
                "pressure_drop_per_length": "Pa/m", "mean_velocity": "m/s",
                "wall_shear_stress_mean": "Pa", "reynolds_number": "-",
                "torque_per_length": "N*m/m"}
#: a sweep larger than this is almost surely a typing slip (and would run for days)
MAX_CASES = 1_000_000
#: most worker processes started by default, whatever the core count
DEFAULT_WORKER_CAP = 8


# --------------------------------------------------------------------------- the grid

@dataclass(frozen=True)
class Vary:
    """One varied key: its values in SI and the SI unit they are in."""

    key: str
    values: tuple
    unit: str

    @property
    def column(self) -> str:
        return f"{self.key} [{self.unit or '-'}]"


def sweepable_keys(case: Case) -> dict[str, str]:
    """The dotted keys a study may vary for this case -> dimension name.

    Besides the :mod:`gnflow.units` dimensions, ``"whole"`` marks a whole number
    (mesh cells) and ``"dimensionless"`` a plain number.
    """
    keys = {f"fluid.{name}": dimension
            for name, (dimension, _) in MODEL_KEYS[case.fluid.name].items()}
    keys["fluid.density"] = "density"
    shape = case.geometry.shape
    for name, dimension in GEOMETRY_KEYS[shape].items():
        if dimension is not None:
            keys[f"geometry.{name}"] = dimension
        elif name == "eccentricity":
            keys[f"geometry.{name}"] = "dimensionless"
    if case.geometry.is_axial:
        keys["drive.pressure_gradient"] = "pressure_gradient"
        keys["drive.flow_rate"] = "flow_rate_per_width" if shape == "slit" else "flow_rate"
        walls = {"slit": ("bottom", "top"), "pipe": ("wall",), "annulus": ("inner", "outer"),
                 "rectangle": ("bottom", "top", "left", "right")}.get(
                     shape, tuple(case.drive.wall_speed))
        for wall in walls:
            keys[f"drive.wall_speed.{wall}"] = "velocity"
    else:
        keys["drive.inner_angular_speed"] = "angular_speed"
        keys["drive.outer_angular_speed"] = "angular_speed"
    keys.update({"mesh.cells": "whole", "mesh.grading": "dimensionless",
                 "solver.tolerance": "dimensionless", "solver.max_iterations": "whole"})
    return keys


def _unit(dimension: str, case: Case) -> str:
    if dimension in ("whole", "dimensionless"):
        return ""
    flow_index = getattr(case.fluid.model, "flow_index", None)
    return si_unit(dimension, flow_index)


def parse_vary(spec: str, case: Case, log: bool = False) -> Vary:
    """Read ``KEY=START:STOP:COUNT`` into a :class:`Vary` (values in SI).

    START and STOP are numbers in SI or carry units (``-1kPa/m``, ``"2 L/s"``); COUNT is
    the number of values, ends included. ``log`` spaces them geometrically (START and
    STOP then need the same sign, neither zero). Raises :class:`CaseError` naming the
    option for anything it cannot read.
    """
    where = "--vary"
    if not isinstance(spec, str) or "=" not in spec:
        raise CaseError(where, spec, "KEY=START:STOP:COUNT, e.g. "
                        "drive.pressure_gradient=-1kPa/m:-10kPa/m:10")
    key, _, ranges = spec.partition("=")
    key = key.strip()
    keys = sweepable_keys(case)
    if key not in keys:
        close = difflib.get_close_matches(key, list(keys), n=1, cutoff=0.6)
        hint = f' (did you mean "{close[0]}"?)' if close else ""
        raise CaseError(where, message=(
            f"--vary {key}: not a key this case can vary{hint}; this {case.fluid.name} "
            f"{case.geometry.shape} case can vary: {', '.join(sorted(keys))}"))
    parts = ranges.split(":")
    if len(parts) != 3:
        raise CaseError(where, spec, "KEY=START:STOP:COUNT (three fields after '=')")
    dimension = keys[key]
    flow_index = getattr(case.fluid.model, "flow_index", None)
    ends = []
    for text in parts[:2]:
        text = text.strip()
        if dimension in ("whole", "dimensionless"):
            try:
                ends.append(float(text))
            except ValueError:
                raise CaseError(where, spec, f"plain numbers for {key}") from None
            if not math.isfinite(ends[-1]):
                raise CaseError(where, spec, f"finite numbers for {key}")
        else:
            ends.append(quantity(text, dimension, f"--vary {key}", flow_index))
    try:
        count = int(parts[2].strip())
    except ValueError:
        raise CaseError(where, spec, "a whole number of values COUNT >= 1") from None
    if not 1 <= count <= MAX_CASES:
        raise CaseError(where, spec, f"a number of values COUNT from 1 to {MAX_CASES}")
    start, stop = ends
    if log:
        if start == 0 or stop == 0 or (start > 0) != (stop > 0):
            raise CaseError(where, spec, "START and STOP of the same sign and not zero, for "
                            "--log spacing")
        values = np.geomspace(start, stop, count) if count > 1 else np.array([start])
    else:
        values = np.linspace(start, stop, count) if count > 1 else np.array([start])
    if dimension == "whole":
        values = [int(round(v)) for v in values]
    else:
        values = [float(v) for v in values]
    # geomspace and linspace end exactly on STOP; keep START exact too
    if dimension != "whole":
        values[0] = float(start)
    return Vary(key, tuple(values), _unit(dimension, case))


def grid(varies: list[Vary]) -> list[tuple]:
    """Every combination of the varied values; the first key varies slowest."""
    return list(itertools.product(*(v.values for v in varies)))


def hold_consistency(raw: dict, case: Case, keys) -> dict:
    """``raw`` with the consistency in SI when the flow index varies.

    A consistency with units (``"0.8 Pa*s^0.5"``) only fits one flow index; a study over
    ``fluid.flow_index`` holds ``K`` at its SI value, in Pa s^n for each n.
    """
    raw = copy.deepcopy(raw)
    fluid = raw.get("fluid", {})
    if "fluid.flow_index" in keys and "fluid.consistency" not in keys and isinstance(
            fluid.get("consistency"), str):
        fluid["consistency"] = case.fluid.model.consistency
    return raw


def build_case(raw: dict, keys: tuple, values: tuple, source=None) -> Case:
    """The case of one grid point: ``raw`` with each key set to its value."""
    mapping = copy.deepcopy(raw)
    for key, value in zip(keys, values):
        assign(mapping, key, value)
    return Case.from_dict(mapping, source)


# --------------------------------------------------------------------------- one case

def _outputs(summary: dict, outputs: tuple) -> dict:
    flat = dict(summary)
    flat["wall_shear_stress_mean"] = summary["wall_shear_stress"]["mean"]
    return {name: flat.get(name) for name in outputs}


def solve_point(raw: dict, keys: tuple, values: tuple, source, outputs: tuple) -> dict:
    """Build and solve one grid point; never raises for a bad or failing case.

    Returns ``{"outputs": {...}, "converged": bool, "error": str, "warnings": [...]}``;
    ``error`` is empty for a converged case, else the reason it failed.
    """
    from .solver import solve  # imported here so a worker pays for it once, on first use

    empty = dict.fromkeys(outputs)
    try:
        case = build_case(raw, keys, values, source)
    except CaseError as err:
        return {"outputs": empty, "converged": False, "error": f"bad case: {err}",
                "warnings": []}
    try:
        solution = solve(case)
        summary = solution.summary()
    except (ArithmeticError, ValueError, RuntimeError, MemoryError,
            np.linalg.LinAlgError) as err:
        # a case the numerics cannot handle is one failed row, not the end of the study
        return {"outputs": empty, "converged": False,
                "error": f"solver failed: {type(err).__name__}: {err}", "warnings": []}
    return {"outputs": _outputs(summary, outputs), "converged": bool(summary["converged"]),
            "error": "" if summary["converged"] else summary["message"],
            "warnings": [w for w in summary["warnings"] if w != summary["message"]]}


def solve_chunk(raw: dict, keys: tuple, chunk: list, source, outputs: tuple) -> list:
    """Solve a batch of ``(index, values)`` grid points: one task for a worker.

    Batching keeps the pickling of the case mapping and the task overhead per case small.
    """
    return [(index, solve_point(raw, keys, values, source, outputs)) for index, values in chunk]


# --------------------------------------------------------------------------- running

class ProgressBar:
    """A one-line text progress bar (a line per tenth when the stream is not a terminal)."""

    def __init__(self, total: int, stream=None, label: str = "sweep", width: int = 30):
        self.total, self.label, self.width = total, label, width
        self.stream = stream if stream is not None else sys.stderr
        self.done = self.failed = 0
        self.started = time.perf_counter()
        self.interactive = bool(getattr(self.stream, "isatty", lambda: False)())
        self._last_tenth = -1

    def advance(self, count: int, failed: int = 0) -> None:
        self.done += count
        self.failed += failed
        tenth = 10 * self.done // max(self.total, 1)
        if self.interactive:
            self.stream.write("\r" + self._line())
            if self.done >= self.total:
                self.stream.write("\n")
        elif tenth != self._last_tenth:
            self.stream.write(self._line() + "\n")
        self._last_tenth = tenth
        self.stream.flush()

    def _line(self) -> str:
        filled = self.width * self.done // max(self.total, 1)
        elapsed = time.perf_counter() - self.started
        left = ""
        if 0 < self.done < self.total:
            left = f", ~{elapsed * (self.total - self.done) / self.done:.0f} s left"
        failed = f", {self.failed} failed" if self.failed else ""
        return (f"{self.label} |{'#' * filled}{'.' * (self.width - filled)}| "
                f"{self.done}/{self.total} cases, {elapsed:.1f} s{left}{failed}")


def default_workers() -> int:
    """Worker processes used when none are asked for: the cores, at most 8."""
    return max(1, min(os.cpu_count() or 1, DEFAULT_WORKER_CAP))


def _chunks(points: list, workers: int) -> list[list]:
    # about 16 tasks per worker: fine enough for the progress bar and the load balance,
    # coarse enough that task overhead stays well below the solve time
    size = max(1, min(50, math.ceil(len(points) / (16 * workers))))
    indexed = list(enumerate(points))
    return [indexed[i:i + size] for i in range(0, len(indexed), size)]


def _failed_chunk(chunk, message: str) -> list:
    return [(index, {"outputs": {}, "converged": False, "error": message, "warnings": []})
            for index, _ in chunk]


def _run_local(task, chunks, workers, progress):
    from . import solver  # noqa: F401  imported before the fork, so no worker imports it again

    if workers == 1:
        for chunk in chunks:
            results = task(chunk)
            yield results
            progress(results)
        return
    with ProcessPoolExecutor(max_workers=workers) as pool:
        futures = {pool.submit(solve_chunk, *task.arguments(chunk)): chunk for chunk in chunks}
        for future in as_completed(futures):
            try:
                results = future.result()
            except Exception as err:  # a crashed worker: its cases fail, the rest go on
                results = _failed_chunk(futures[future], f"worker failed: {err!r}")
            yield results
            progress(results)


def _run_dask(task, chunks, scheduler, progress):
    try:
        from dask.distributed import Client, as_completed as dask_completed
    except ImportError:
        raise CaseError("--scheduler", message=(
            "--scheduler needs dask.distributed, which is not installed; install it with: "
            "pip install 'gnflow[cluster]'")) from None
    try:
        client = Client(scheduler, timeout=15)
    except (OSError, TimeoutError, ValueError) as err:
        raise CaseError("--scheduler", scheduler, f"the address of a running dask scheduler, "
                        f"e.g. tcp://10.0.0.5:8786 (could not connect: {err})") from None
    try:
        futures = [client.submit(solve_chunk, *task.arguments(chunk), pure=False)
                   for chunk in chunks]
        owner = {future.key: chunk for future, chunk in zip(futures, chunks)}
        for future in dask_completed(futures):
            try:
                results = future.result()
            except Exception as err:  # a lost worker or a missing gnflow there
                results = _failed_chunk(owner[future.key], f"cluster task failed: {err!r}")
            yield results
            progress(results)
    finally:
        client.close()


@dataclass
class _Task:
    raw: dict
    keys: tuple
    source: object
    outputs: tuple

    def arguments(self, chunk):
        return self.raw, self.keys, chunk, self.source, self.outputs

    def __call__(self, chunk):
        return solve_chunk(*self.arguments(chunk))


@dataclass
class SweepTable:
    """The result of a study: one row per grid point, in grid order."""

    varies: list[Vary]
    outputs: tuple
    rows: list[dict] = field(default_factory=list)
    seconds: float = 0.0
    workers: int = 1
    where: str = "local"
    per_width: bool = False

    @property
    def failed(self) -> int:
        return sum(not row["converged"] for row in self.rows)

    def columns(self) -> list[str]:
        names = [v.column for v in self.varies]
        for name in self.outputs:
            unit = OUTPUT_UNITS[name]
            if self.per_width and name in ("flow_rate",):
                unit = "m^2/s"
            names.append(f"{name} [{unit}]")
        return names + ["converged", "error", "warnings"]

    def records(self) -> list[list]:
        """Rows as lists in the order of :meth:`columns`."""
        out = []
        for row in self.rows:
            out.append([row[v.key] for v in self.varies] + [row[name] for name in self.outputs]
                       + [row["converged"], row["error"], "; ".join(row["warnings"])])
        return out


def run_sweep(case: Case, varies: list[Vary], workers: int | None = None,
              scheduler: str | None = None, outputs: tuple | None = None,
              progress_stream=None, show_progress: bool = True) -> SweepTable:
    """Solve ``case`` at every grid point of ``varies``; returns a :class:`SweepTable`.

    ``workers``: local processes (default :func:`default_workers`; 1 runs in this
    process). ``scheduler``: the address of a dask.distributed scheduler, which then
    runs the cases instead (gnflow must be installed on its workers). Cases that cannot
    be built or do not converge are marked in their rows; the study always finishes.
    """
    if not varies:
        raise CaseError("--vary", message="a sweep needs at least one --vary KEY=START:STOP:COUNT")
    names = [v.key for v in varies]
    if len(set(names)) != len(names):
        raise CaseError("--vary", names, "each key varied at most once")
    points = grid(varies)
    if len(points) > MAX_CASES:
        raise CaseError("--vary", len(points), f"at most {MAX_CASES} cases in one sweep")
    if outputs is None:
        outputs = AXIAL_OUTPUTS if case.geometry.is_axial else ROTATIONAL_OUTPUTS
    if workers is None:
        workers = default_workers()
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise CaseError("--workers", workers, "a whole number >= 1")
    workers = min(workers, max(1, len(points)))
    task = _Task(hold_consistency(case.raw, case, names), tuple(names), case.source,
                 tuple(outputs))
    chunks = _chunks(points, 1 if scheduler else workers)
    bar = ProgressBar(len(points), progress_stream) if show_progress else None

    def progress(results):
        if bar is not None:
            bar.advance(len(results), sum(not r["converged"] for _, r in results))

    started = time.perf_counter()
    runner = _run_dask(task, chunks, scheduler, progress) if scheduler else \
        _run_local(task, chunks, workers, progress)
    by_index = {}
    for results in runner:
        by_index.update(results)
    rows = []
    for index, values in enumerate(points):
        result = by_index[index]
        row = dict(zip(names, values))
        row.update({name: result["outputs"].get(name) for name in outputs})
        row.update(converged=result["converged"], error=result["error"],
                   warnings=result["warnings"])
        rows.append(row)
    return SweepTable(list(varies), tuple(outputs), rows, time.perf_counter() - started,
                      1 if scheduler else workers, scheduler or "local",
                      case.geometry.shape == "slit")


# --------------------------------------------------------------------------- files

def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:.12g}" if math.isfinite(value) else ""
    return str(value)


def write_table_csv(path: Path, columns: list[str], records: list[list]) -> None:
    """A CSV with unit-labelled column names; empty cells where there is no value."""
    with Path(path).open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(columns)
        writer.writerows([[_cell(v) for v in record] for record in records])


def sweep_plot(table: SweepTable, output: str, path: Path, log: bool = False) -> None:
    """One output against the first varied key; a line per combination of the others."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    first, others = table.varies[0], table.varies[1:]
    groups: dict[tuple, list] = {}
    for row in table.rows:
        groups.setdefault(tuple(row[v.key] for v in others), []).append(row)
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    shown = list(groups.items())[:12]
    for label, rows in shown:
        x = np.array([row[first.key] for row in rows], dtype=float)
        y = np.array([row[output] if row["converged"] and row[output] is not None
                      else np.nan for row in rows], dtype=float)
        name = ", ".join(f"{v.key.split('.')[-1]} = {value:.4g} {v.unit}".rstrip()
                         for v, value in zip(others, label)) or None
        line, = ax.plot(x, y, marker="o", markersize=3, label=name)
        bad = ~np.isfinite(y)
        if bad.any():
            ax.plot(x[bad], np.zeros(bad.sum()), "x", color=line.get_color())
    if log:
        ax.set_xscale("symlog" if first.values[0] < 0 else "log")
    unit = [c for c in table.columns() if c.startswith(output + " [")]
    ax.set_xlabel(first.column)
    ax.set_ylabel(unit[0] if unit else output)
    title = f"{output} over {first.key}"
    if table.failed:
        title += f"  (x: {table.failed} failed cases)"
    ax.set_title(title, fontsize=10)
    if others:
        note = "" if len(groups) <= len(shown) else f" (first {len(shown)} of {len(groups)})"
        ax.legend(fontsize=7, title=f"lines{note}", title_fontsize=7)
    ax.grid(True, alpha=0.3)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def run_sweep_command(case_path: str, vary: list[str], log: bool = False,
                      workers: int | None = None, scheduler: str | None = None,
                      out_dir: str | None = None, plot_key: str | None = None) -> int:
    """``gnflow sweep CASE --vary KEY=START:STOP:COUNT ...``: run, print, write files.

    Writes ``sweep.csv`` and ``sweep.png`` into ``out_dir`` (default
    ``results/<case stem>-sweep/``), replacing it in one rename. Returns 0 when every case
    converged and 3 when some failed (their rows say why); bad input raises
    :class:`CaseError`.
    """
    from .export import atomic_directory

    case = load_case(case_path)
    varies = [parse_vary(spec, case, log) for spec in vary or []]
    outputs = AXIAL_OUTPUTS if case.geometry.is_axial else ROTATIONAL_OUTPUTS
    plot_key = plot_key or outputs[0]
    if plot_key not in outputs:
        raise CaseError("--plot", plot_key, "one of " + ", ".join(outputs))
    if scheduler is not None and workers is not None:
        raise CaseError("--workers", workers, "no --workers with --scheduler (the cluster "
                        "has its own workers)")
    out = Path(out_dir) if out_dir else Path("results") / f"{Path(case_path).stem}-sweep"
    table = run_sweep(case, varies, workers, scheduler, outputs)
    with atomic_directory(out) as staging:
        write_table_csv(staging / "sweep.csv", table.columns(), table.records())
        sweep_plot(table, plot_key, staging / "sweep.png", log)
    count = len(table.rows)
    where = f"on {table.where}" if scheduler else f"with {table.workers} worker" + (
        "s" if table.workers > 1 else "")
    print(f"gnflow sweep: {count} cases {where} in {table.seconds:.1f} s "
          f"({count / max(table.seconds, 1e-9):.1f} cases/s); "
          f"{count - table.failed} converged, {table.failed} failed")
    beyond = sum(any("laminar" in w for w in row["warnings"]) for row in table.rows)
    if beyond:
        print(f"  WARNING: {beyond} cases are past the laminar limit (see the warnings column)")
    print(f"  wrote {out}/: sweep.csv, sweep.png")
    return 3 if table.failed else 0


# --------------------------------------------------------------------------- flow curves

def flow_curve(case: Case, gradient_range: tuple | None = None,
               flow_rate_range: tuple | None = None, count: int = 25, log: bool = False,
               workers: int | None = 1, show_progress: bool = False) -> SweepTable:
    """Flow rate against pressure gradient for a case's passage and fluid (or the inverse).

    Give exactly one of ``gradient_range`` (dp/dz from, to; Pa/m or strings with units;
    negative drives the flow toward +z) or ``flow_rate_range`` (m^3/s, slit m^2/s).
    Everything else (shape, fluid, wall speeds, mesh) comes from ``case``; its own
    drive is replaced. The table's columns are :data:`FLOW_CURVE_OUTPUTS`.
    """
    if not case.geometry.is_axial:
        raise CaseError("geometry.shape", case.geometry.shape,
                        "an axial passage for a flow curve (" + ", ".join(
                            ("slit", "pipe", "annulus", "rectangle", "mesh")) + ")")
    if (gradient_range is None) == (flow_rate_range is None):
        raise CaseError("flow curve", message="give exactly one of a pressure-gradient range "
                        "and a flow-rate range")
    key = "drive.pressure_gradient" if gradient_range is not None else "drive.flow_rate"
    start, stop = gradient_range if gradient_range is not None else flow_rate_range
    spec = f"{key}={start}:{stop}:{count}"
    vary = parse_vary(spec, case, log)
    if key == "drive.pressure_gradient":
        still = [v for v in vary.values if v == 0 and not any(case.drive.wall_speed.values())]
        if still:
            raise CaseError("flow curve", spec, "a range without zero (no drive at dp/dz = 0)")
    table = run_sweep(case, [vary], workers, None, FLOW_CURVE_OUTPUTS,
                      show_progress=show_progress)
    return table


def flow_curve_plot(table: SweepTable, path: Path) -> None:
    """Pressure drop per length against flow rate: the system curve for one length."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    good = [row for row in table.rows if row["converged"]]
    q = np.array([row["flow_rate"] for row in good], dtype=float)
    dp = np.array([row["pressure_drop_per_length"] for row in good], dtype=float)
    order = np.argsort(q)
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    ax.plot(q[order], dp[order], marker="o", markersize=3, color="tab:blue")
    unit = "m^2/s per unit width" if table.per_width else "m^3/s"
    ax.set_xlabel(f"flow rate [{unit}]")
    ax.set_ylabel("pressure drop per length -dp/dz [Pa/m]")
    ax.set_title("flow curve of the passage: multiply by the line length to lay it "
                 "over a pump curve", fontsize=9)
    if table.failed:
        ax.text(0.02, 0.95, f"{table.failed} cases failed (see flow_curve.csv)",
                transform=ax.transAxes, fontsize=8, color="tab:red", va="top")
    ax.grid(True, alpha=0.3)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def run_flow_curve_command(case_path: str, start, stop, count: int = 25,
                           by: str = "pressure_gradient", out_dir: str | None = None,
                           log: bool = False, workers: int | None = 1) -> int:
    """``gnflow flow-curve CASE --from A --to B [--points N] [--by flow_rate]``.

    Writes ``flow_curve.csv`` (columns ``pressure_gradient [Pa/m]``,
    ``pressure_drop_per_length [Pa/m]``, ``flow_rate [m^3/s]``, ``mean_velocity [m/s]``,
    ``wall_shear_stress_mean [Pa]``, ``reynolds_number [-]``, ``converged``, ``error``,
    ``warnings``) and ``flow_curve.png`` into ``out_dir`` (default
    ``results/<case stem>-flow-curve/``). Returns 0, or 3 when some points failed.
    """
    from .export import atomic_directory

    if by not in ("pressure_gradient", "flow_rate"):
        raise CaseError("--by", by, '"pressure_gradient" or "flow_rate"')
    case = load_case(case_path)
    ranges = {"gradient_range" if by == "pressure_gradient" else "flow_rate_range":
              (start, stop)}
    table = flow_curve(case, count=count, log=log, workers=workers, show_progress=True,
                       **ranges)
    out = Path(out_dir) if out_dir else Path("results") / f"{Path(case_path).stem}-flow-curve"
    columns = [c for c in table.columns() if not c.startswith("drive.")]
    records = [record[1:] for record in table.records()]
    with atomic_directory(out) as staging:
        write_table_csv(staging / "flow_curve.csv", columns, records)
        flow_curve_plot(table, staging / "flow_curve.png")
    print(f"gnflow flow-curve: {len(table.rows)} points by {by} in {table.seconds:.1f} s; "
          f"{len(table.rows) - table.failed} converged, {table.failed} failed")
    print(f"  wrote {out}/: flow_curve.csv, flow_curve.png")
    return 3 if table.failed else 0


__all__ = ["Vary", "SweepTable", "parse_vary", "sweepable_keys", "grid", "assign",
           "build_case", "solve_point", "solve_chunk", "run_sweep", "run_sweep_command",
           "flow_curve", "run_flow_curve_command", "write_table_csv", "ProgressBar"]
