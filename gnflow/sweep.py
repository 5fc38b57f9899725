"""Design studies: a case solved over a grid of values of some of its keys.

A study varies dotted case keys (``drive.pressure_gradient``, ``fluid.flow_index``,
``geometry.eccentricity``, ...) over evenly or geometrically spaced values, solves every
combination, and tabulates every number of each case's summary (flow rate, velocities,
wall shear stress and rate per wall, plug fraction, torque, Reynolds number, ...). The
cases run in worker processes on this machine, or on a running dask.distributed cluster.
A case that cannot be built (an impossible geometry, a bad fluid parameter) or does not
converge is recorded in its row, and the study goes on.

A varied key is written ``KEY=FROM..TO`` with the number of values apart
(``--points``): the two dots read as "from ... to", never as a step. The older
``KEY=START:STOP:COUNT`` is still read (:func:`is_legacy_vary` tells it apart).

The system curve is the special study for pump matching: pressure drop per length
against flow rate for one passage and fluid (given as a range of either).

>>> case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 2.0, "flow_index": 0.5},
...     "geometry": {"shape": "pipe", "radius": "20 mm"}, "drive": {"pressure_gradient": -3000.0}})
>>> spec = parse_vary("drive.pressure_gradient=-1kPa/m..-4kPa/m", case, points=4)
>>> spec.column, spec.values
('drive.pressure_gradient [Pa/m]', (-1000.0, -2000.0, -3000.0, -4000.0))
>>> [round(v, 9) for v in parse_vary("fluid.flow_index=0.3..0.9", case, points=3).values]
[0.3, 0.6, 0.9]
>>> table = run_sweep(case, [spec], workers=1, show_progress=False)
>>> [round(row["flow_rate"] * 1e6, 3) for row in table.rows]  # pi R^3 (tau_w/K)^2 / 5, mL/s
[125.664, 502.655, 1130.973, 2010.619]
"""

from __future__ import annotations

import copy
import csv
import difflib
import functools
import itertools
import json
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
from .units import quantity, remembering_texts, si_unit

#: the SI unit of each summary number a study tabulates; ``None`` entries are left out
#: (mesh and timing figures, which describe the run rather than the design)
SUMMARY_UNITS = {
    "flow_rate": "m^3/s", "pressure_gradient": "Pa/m", "pressure_drop_per_length": "Pa/m",
    "mean_velocity": "m/s", "max_velocity": "m/s", "min_velocity": "m/s",
    "max_speed": "m/s", "mean_speed": "m/s",
    "hydraulic_diameter": "m", "cross_section_area": "m^2",
    "pumping_power_per_length": "W/m", "torque_per_length": "N*m/m",
    "power_per_length": "W/m", "yield_stress": "Pa", "temperature": "K",
    "start_up_pressure_gradient": "Pa/m", "regularisation_error_estimate": "-",
    "iterations": "-", "residual": "-",
    "dofs": None, "cells": None, "degree": None, "solve_seconds": None,
    "torque_imbalance": None, "force_balance_error": None,
    "inner_angular_speed": None, "outer_angular_speed": None,
}
#: units by prefix (per-wall columns) and by suffix (dimensionless groups)
PREFIX_UNITS = {"wall_shear_stress_": "Pa", "wall_shear_rate_": "1/s"}
DIMENSIONLESS_SUFFIXES = ("_number", "_factor", "_fraction", "_ratio")
#: units that are per unit width on a slit (a slit section is a strip of unit width)
PER_WIDTH_UNITS = {"flow_rate": "m^2/s", "cross_section_area": "m",
                   "pumping_power_per_length": "W/m^2"}
#: the columns of a system curve, in order
SYSTEM_CURVE_OUTPUTS = ("pressure_gradient", "pressure_drop_per_length", "flow_rate",
                        "mean_velocity", "wall_shear_stress_mean", "reynolds_number",
                        "laminar_limit_reynolds_number", "beyond_laminar_limit")
#: columns about the solve rather than the design: placed last
SOLVER_COLUMNS = ("iterations", "residual")
#: true/false columns: no unit
FLAG_COLUMNS = {"beyond_laminar_limit"}
#: values per varied key when ``--points`` is not given
DEFAULT_POINTS = 5
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
        if shape == "annulus":   # rotation beside the axial drive: helical flow
            keys["drive.inner_angular_speed"] = "angular_speed"
            keys["drive.outer_angular_speed"] = "angular_speed"
        for wall, law in case.drive.slip.items():
            for name, value in law.__dict__.items():
                if value is not None and name != "exponent":
                    dimension = {"length": "length", "yield_stress": "stress"}.get(
                        name, "slip_coefficient" if law.exponent == 1.0 else "dimensionless")
                    keys[f"drive.slip.{wall}.{name}"] = dimension
    else:
        keys["drive.inner_angular_speed"] = "angular_speed"
        keys["drive.outer_angular_speed"] = "angular_speed"
    if case.heat is not None:
        keys["heat.conductivity"] = "thermal_conductivity"
    keys.update({"mesh.cells": "whole", "mesh.wall_refinement": "dimensionless",
                 "solver.tolerance": "dimensionless", "solver.max_iterations": "whole"})
    return keys


def _unit(dimension: str, case: Case) -> str:
    if dimension in ("whole", "dimensionless"):
        return ""
    flow_index = getattr(case.fluid.model, "flow_index", None)
    return si_unit(dimension, flow_index)


EXAMPLE_VARY = "drive.pressure_gradient=-1kPa/m..-10kPa/m"


def is_legacy_vary(spec: str) -> bool:
    """Whether ``spec`` is the older ``KEY=START:STOP:COUNT`` form.

    >>> is_legacy_vary("fluid.flow_index=0.3:0.9:3"), is_legacy_vary("fluid.flow_index=0.3..0.9")
    (True, False)
    """
    ranges = spec.partition("=")[2] if isinstance(spec, str) else ""
    return ".." not in ranges and ranges.count(":") == 2


def parse_vary(spec: str, case: Case, log: bool = False, points: int | None = None) -> Vary:
    """Read ``KEY=FROM..TO`` (``points`` values, ends included) into a :class:`Vary`.

    FROM and TO are numbers in SI or carry units (``-1kPa/m``, ``"2 L/s"``); ``points``
    defaults to :data:`DEFAULT_POINTS`. The older ``KEY=START:STOP:COUNT`` is read too,
    its COUNT standing for ``points``. ``log`` spaces the values geometrically (FROM and
    TO then need the same sign, neither zero). Values come back in SI. Raises
    :class:`CaseError` naming the option for anything it cannot read.
    """
    where = "--vary"
    if not isinstance(spec, str) or "=" not in spec:
        raise CaseError(where, spec, f"KEY=FROM..TO, e.g. {EXAMPLE_VARY} --points 10")
    key, _, ranges = spec.partition("=")
    key = key.strip()
    keys = sweepable_keys(case)
    if key not in keys:
        close = difflib.get_close_matches(key, list(keys), n=1, cutoff=0.6)
        hint = f' (did you mean "{close[0]}"?)' if close else ""
        raise CaseError(where, message=(
            f"--vary {key}: not a key this case can vary{hint}; this {case.fluid.name} "
            f"{case.geometry.shape} case can vary: {', '.join(sorted(keys))}"))
    if is_legacy_vary(spec):
        *parts, count_text = ranges.split(":")
        try:
            count = int(count_text.strip())
        except ValueError:
            raise CaseError(where, spec, "a whole number of values COUNT >= 1 in "
                            "KEY=START:STOP:COUNT") from None
    else:
        parts = ranges.split("..")
        if len(parts) != 2 or "..." in ranges:
            raise CaseError(where, spec, f"KEY=FROM..TO with two dots between the ends, "
                            f"e.g. {EXAMPLE_VARY}")
        count = DEFAULT_POINTS if points is None else points
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)):
            raise CaseError("--points", count, "a whole number of values >= 1")
    if not 1 <= count <= MAX_CASES:
        raise CaseError("--points", count, f"a number of values from 1 to {MAX_CASES}")
    dimension = keys[key]
    flow_index = getattr(case.fluid.model, "flow_index", None)
    ends = []
    for text in parts:
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
    start, stop = ends
    if log:
        if start == 0 or stop == 0 or (start > 0) != (stop > 0):
            raise CaseError(where, spec, "FROM and TO of the same sign and not zero, for "
                            "--log spacing")
        values = np.geomspace(start, stop, count) if count > 1 else np.array([start])
    else:
        values = np.linspace(start, stop, count) if count > 1 else np.array([start])
    if dimension == "whole":
        values = [int(round(v)) for v in values]
    else:
        values = [float(v) for v in values]
    # geomspace and linspace end exactly on TO; keep FROM exact too
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


def _plain_copy(value):
    """A copy of a case mapping: new dicts and lists all the way down (what ``assign``
    may change), the leaves (numbers, strings) shared; anything else deep-copied. Less
    than half the time of ``copy.deepcopy`` on a case (4 us against 10 us, a pipe case)."""
    if isinstance(value, dict):
        return {key: _plain_copy(item) for key, item in value.items()}
    if isinstance(value, list):
        return [_plain_copy(item) for item in value]
    if isinstance(value, (str, int, float, bool, type(None))):
        return value
    return copy.deepcopy(value)


def build_case(raw: dict, keys: tuple, values: tuple, source=None) -> Case:
    """The case of one grid point: ``raw`` with each key set to its value."""
    mapping = _plain_copy(raw)
    for key, value in zip(keys, values):
        assign(mapping, key, value)
    # the mapping is this case's own: the case keeps it rather than a copy of it
    return Case.from_dict(mapping, source, copy_raw=False)


# --------------------------------------------------------------------------- one case

def column_unit(name: str, per_width: bool = False) -> str | None:
    """The SI unit of a flattened summary number, or ``None`` for one a study leaves out.

    >>> column_unit("wall_shear_stress_inner"), column_unit("hedstrom_number")
    ('Pa', '-')
    >>> column_unit("flow_rate", per_width=True), column_unit("dofs") is None
    ('m^2/s', True)
    """
    if per_width and name in PER_WIDTH_UNITS:
        return PER_WIDTH_UNITS[name]
    if name in SUMMARY_UNITS:
        return SUMMARY_UNITS[name]
    for prefix, unit in PREFIX_UNITS.items():
        if name.startswith(prefix):
            return unit
    if name.endswith(DIMENSIONLESS_SUFFIXES):
        return "-"
    return None


@functools.lru_cache(maxsize=4096)
def _kept_column(name: str) -> bool:
    """Whether a study tabulates a flattened summary number (it has a unit): asked for the
    same few dozen names of every case of a study."""
    return column_unit(name) is not None


def flatten_summary(summary: dict) -> dict:
    """Every design number of a run summary under one flat name, plus a laminar flag.

    Nested tables join their keys with ``_`` (``wall_shear_stress`` ``mean`` ->
    ``wall_shear_stress_mean``; per-wall values drop the ``per_wall`` level:
    ``wall_shear_stress_inner``); the regularisation contributes its error estimate.
    Numbers :func:`column_unit` has no unit for (mesh sizes, timings) are left out, as
    are texts. ``beyond_laminar_limit`` is true where the Reynolds number the laminar
    criterion is stated on (the plastic one for Bingham fluids) exceeds it.

    >>> flatten_summary({"flow_rate": 2.0, "dofs": 401, "wall_shear_stress": {"mean": 3.0,
    ...     "per_wall": {"wall": 3.0}}, "reynolds_number": 3000.0,
    ...     "laminar_limit": {"reynolds_number": 2100.0, "criterion": "2100"}})
    ... # doctest: +NORMALIZE_WHITESPACE
    {'flow_rate': 2.0, 'wall_shear_stress_mean': 3.0, 'wall_shear_stress_wall': 3.0,
     'reynolds_number': 3000.0, 'laminar_limit_reynolds_number': 2100.0,
     'beyond_laminar_limit': True}
    """
    flat: dict = {}

    def add(prefix: str, value) -> None:
        kind = type(value)   # the plain types of a summary first (every case of a study)
        if kind is float or kind is int:
            if _kept_column(prefix):
                flat[prefix] = value
        elif kind is str or kind is list or kind is bool or value is None:
            pass
        elif isinstance(value, dict):
            for key, inner in value.items():
                add(prefix if key == "per_wall" else f"{prefix}_{key}", inner)
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            if _kept_column(prefix):
                flat[prefix] = float(value) if isinstance(value, float) else int(value)

    for key, value in summary.items():
        if key == "regularisation" and isinstance(value, dict):
            estimate = value.get("error_estimate")
            if isinstance(estimate, (int, float)) and not isinstance(estimate, bool):
                flat["regularisation_error_estimate"] = float(estimate)
        else:
            add(key, value)
    limit = flat.get("laminar_limit_reynolds_number")
    compared = flat.get("plastic_reynolds_number", flat.get("reynolds_number"))
    if limit is not None and compared is not None:
        flat["beyond_laminar_limit"] = bool(compared > limit)
    return flat


def solve_point(raw: dict, keys: tuple, values: tuple, source, outputs: tuple | None) -> dict:
    """Build and solve one grid point; never raises for a bad or failing case.

    Returns ``{"outputs": {...}, "converged": bool, "error": str, "warnings": [...]}``;
    ``outputs`` holds :func:`flatten_summary` of the run (only the names in ``outputs``
    when given); ``error`` is empty for a converged case, else the reason it failed.
    """
    from . import solve  # imported here so a worker pays for it once, on first use

    try:
        case = build_case(raw, keys, values, source)
    except CaseError as err:
        return {"outputs": {}, "converged": False, "error": f"bad case: {err}",
                "warnings": []}
    try:
        # the summary itself, not summary()'s deep copy (a third of the post-processing
        # time of a 1-D case): it is only read here, its numbers and texts copied out
        summary = solve(case)._summary
    except (ArithmeticError, ValueError, RuntimeError, MemoryError,
            np.linalg.LinAlgError) as err:
        # a case the numerics cannot handle is one failed row, not the end of the study
        return {"outputs": {}, "converged": False,
                "error": f"solver failed: {type(err).__name__}: {err}", "warnings": []}
    flat = flatten_summary(summary)
    if outputs is not None:
        flat = {name: flat.get(name) for name in outputs}
    return {"outputs": flat, "converged": bool(summary["converged"]),
            "error": "" if summary["converged"] else summary["message"],
            "warnings": [w for w in summary["warnings"] if w != summary["message"]]}


def solve_chunk(raw: dict, keys: tuple, chunk: list, source, outputs: tuple) -> list:
    """Solve a batch of ``(index, values)`` grid points: one task for a worker.

    Batching keeps the pickling of the case mapping and the task overhead per case small.
    """
    with remembering_texts():   # the texts of raw ("25 mm") are read once per chunk
        return [(index, solve_point(raw, keys, values, source, outputs))
                for index, values in chunk]


# --------------------------------------------------------------------------- running

class _PlainLines:
    """A stream for tqdm off a terminal: each refresh becomes a line of its own, so a
    log file or a pipe gets readable lines instead of carriage returns."""

    def __init__(self, stream):
        self.stream = stream
        self.last = ""

    def write(self, text: str) -> None:
        text = text.replace("\r", "").rstrip()
        if text and text != self.last:  # tqdm redraws the last state when it closes
            self.stream.write(text + "\n")
            self.last = text

    def flush(self) -> None:
        self.stream.flush()


def progress_bar(total: int, description: str, unit: str = "case", stream=None,
                 enabled: bool = True):
    """A tqdm progress bar on ``stream`` (default stderr) saying what it runs.

    On a terminal it redraws one line; elsewhere it writes a plain line at the start, at
    each tenth of the work and at the end. Call ``update(n)`` as work finishes and
    ``close()`` at the end (or use it as a context manager).
    """
    from tqdm import tqdm

    stream = stream if stream is not None else sys.stderr
    common = {"total": total, "desc": description, "unit": unit, "disable": not enabled,
              "leave": True}
    if bool(getattr(stream, "isatty", lambda: False)()):
        return tqdm(file=stream, dynamic_ncols=True, **common)
    return tqdm(file=_PlainLines(stream), mininterval=0, miniters=max(1, math.ceil(total / 10)),
                bar_format="{desc}: {n_fmt}/{total_fmt} " + unit + "s, {elapsed} elapsed, "
                           "~{remaining} left{postfix}", **common)


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
    from .results import Results  # noqa: F401  imported before the fork: workers inherit it

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
    outputs: tuple | None

    def arguments(self, chunk):
        return self.raw, self.keys, chunk, self.source, self.outputs

    def __call__(self, chunk):
        return solve_chunk(*self.arguments(chunk))


@dataclass
class SweepTable:
    """The result of a study: one row per grid point, in grid order.

    ``outputs`` names the summary columns, in the order they first appear in the rows
    (a column some cases lack, such as a Reynolds number without a density, is empty
    there).
    """

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

    def unit(self, name: str) -> str:
        """The SI unit of a column (a varied key or a summary number)."""
        for v in self.varies:
            if v.key == name:
                return v.unit or "-"
        return column_unit(name, self.per_width) or "-"

    def columns(self) -> list[str]:
        names = [v.column for v in self.varies]
        names += [name if name in FLAG_COLUMNS else f"{name} [{self.unit(name)}]"
                  for name in self.outputs]
        return names + ["converged", "error", "warnings"]

    def records(self) -> list[list]:
        """Rows as lists in the order of :meth:`columns`."""
        out = []
        for row in self.rows:
            out.append([row[v.key] for v in self.varies] + [row[name] for name in self.outputs]
                       + [row["converged"], row["error"], "; ".join(row["warnings"])])
        return out


def _describe(varies: list[Vary], count: int, label: str) -> str:
    keys = " x ".join(v.key for v in varies)
    return f"{label}: {count} case{'s' if count != 1 else ''} over {keys}"


def run_sweep(case: Case, varies: list[Vary], workers: int | None = None,
              scheduler: str | None = None, outputs: tuple | None = None,
              progress_stream=None, show_progress: bool = True,
              label: str = "sweep") -> SweepTable:
    """Solve ``case`` at every grid point of ``varies``; returns a :class:`SweepTable`.

    ``workers``: local processes (default :func:`default_workers`; 1 runs in this
    process). ``scheduler``: the address of a dask.distributed scheduler, which then
    runs the cases instead (gnflow must be installed on its workers). ``outputs``: the
    summary columns to keep (default: every one, see :func:`flatten_summary`). Cases
    that cannot be built or do not converge are marked in their rows; the study always
    finishes. The progress display (stderr) names the study as ``label``.
    """
    if not varies:
        raise CaseError("--vary", message=f"a sweep needs at least one --vary KEY=FROM..TO, "
                        f"e.g. --vary {EXAMPLE_VARY}")
    names = [v.key for v in varies]
    if len(set(names)) != len(names):
        raise CaseError("--vary", names, "each key varied at most once")
    points = grid(varies)
    if len(points) > MAX_CASES:
        raise CaseError("--vary", len(points), f"at most {MAX_CASES} cases in one sweep")
    if workers is None:
        workers = default_workers()
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise CaseError("--workers", workers, "a whole number >= 1")
    workers = min(workers, max(1, len(points)))
    task = _Task(hold_consistency(case.raw, case, names), tuple(names), case.source,
                 None if outputs is None else tuple(outputs))
    chunks = _chunks(points, 1 if scheduler else workers)
    bar = progress_bar(len(points), _describe(varies, len(points), label),
                       stream=progress_stream, enabled=show_progress)
    failed = 0

    def progress(results):
        nonlocal failed
        failed += sum(not r["converged"] for _, r in results)
        if failed:
            bar.set_postfix_str(f"{failed} failed", refresh=False)
        bar.update(len(results))

    started = time.perf_counter()
    runner = _run_dask(task, chunks, scheduler, progress) if scheduler else \
        _run_local(task, chunks, workers, progress)
    by_index = {}
    with bar:
        for results in runner:
            by_index.update(results)
    columns = list(outputs) if outputs is not None else list(dict.fromkeys(
        name for index in range(len(points)) for name in by_index[index]["outputs"]))
    # design numbers first, the solver's own after them
    columns.sort(key=lambda name: name in SOLVER_COLUMNS)
    rows = []
    for index, values in enumerate(points):
        result = by_index[index]
        row = dict(zip(names, values))
        row.update({name: result["outputs"].get(name) for name in columns})
        row.update(converged=result["converged"], error=result["error"],
                   warnings=result["warnings"])
        rows.append(row)
    return SweepTable(list(varies), tuple(columns), rows, time.perf_counter() - started,
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


#: summary columns offered in "did you mean" hints for --plot (others are accepted too)
COMMON_COLUMNS = ("flow_rate", "pressure_gradient", "pressure_drop_per_length",
                  "mean_velocity", "max_velocity", "wall_shear_stress_mean",
                  "wall_shear_stress_max", "wall_shear_rate_mean", "wall_shear_rate_max",
                  "unyielded_fraction", "reynolds_number", "plastic_reynolds_number",
                  "fanning_friction_factor", "pumping_power_per_length", "torque_per_length",
                  "power_per_length", "taylor_number", "regularisation_error_estimate")


def default_response(case: Case, varies: list[Vary]) -> str:
    """The column a study plots unless told otherwise: what the varied drive gives.

    The torque for a rotating gap; the pressure drop per length when the flow rate is
    set (by the case or by a varied key); the flow rate otherwise.
    """
    if not case.geometry.is_axial:
        return "torque_per_length"
    keys = {v.key for v in varies}
    by_rate = "drive.flow_rate" in keys or (case.drive.flow_rate is not None
                                            and "drive.pressure_gradient" not in keys)
    return "pressure_drop_per_length" if by_rate else "flow_rate"


def check_plot_columns(names: list[str]) -> None:
    """Refuse a --plot name that cannot be a summary column, before anything runs."""
    for name in names:
        if column_unit(name) is None:
            close = difflib.get_close_matches(name, COMMON_COLUMNS, n=1, cutoff=0.6)
            hint = f' (did you mean "{close[0]}"?)' if close else ""
            raise CaseError("--plot", name, "a summary column such as " + ", ".join(
                COMMON_COLUMNS[:6]) + ", or a per-wall wall_shear_stress_<wall>" + hint)


def _words(name: str) -> str:
    return name.split(".")[-1].replace("_", " ")


def sweep_plot(table: SweepTable, output: str, path: Path, log: bool = False) -> None:
    """``output`` against the first varied key, one line per value of the second (and
    of any further keys, up to 12 lines); failed cases marked x, cases past the laminar
    limit circled red."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    first, others = table.varies[0], table.varies[1:]
    groups: dict[tuple, list] = {}
    for row in table.rows:
        groups.setdefault(tuple(row[v.key] for v in others), []).append(row)
    fig, ax = plt.subplots(figsize=(6.6, 4.5), layout="constrained")
    shown = list(groups.items())[:12]
    beyond_any = False
    for label, rows in shown:
        x = np.array([row[first.key] for row in rows], dtype=float)
        y = np.array([row.get(output) if row["converged"] and row.get(output) is not None
                      else np.nan for row in rows], dtype=float)
        name = ", ".join(f"{_words(v.key)} = {value:.4g} {v.unit}".rstrip()
                         for v, value in zip(others, label)) or None
        line, = ax.plot(x, y, marker="o", markersize=3, label=name)
        beyond = np.array([bool(row.get("beyond_laminar_limit")) for row in rows])
        if beyond.any():
            beyond_any = True
            ax.plot(x[beyond], y[beyond], "o", ms=8, mfc="none", color="tab:red")
        failed = np.array([not row["converged"] for row in rows])
        if failed.any():
            finite = y[np.isfinite(y)]
            ax.plot(x[failed], np.full(failed.sum(), finite.min() if finite.size else 0.0),
                    "x", color=line.get_color())
    if log:
        ax.set_xscale("symlog" if first.values[0] < 0 else "log")
    ax.set_xlabel(f"{_words(first.key)} [{first.unit or '-'}]")
    ax.set_ylabel(f"{_words(output)} [{table.unit(output)}]")
    notes = []
    if table.failed:
        notes.append(f"x: {table.failed} failed cases")
    if beyond_any:
        notes.append("red circles: past the laminar limit, where these results do not hold")
    if all(row.get(output) is None for row in table.rows):
        notes.append(f"no case gave a {_words(output)} (e.g. no density for a Reynolds number)")
    ax.set_title(f"{_words(output)} over {_words(first.key)}"
                 + ("\n" + "; ".join(notes) if notes else ""), fontsize=9)
    if others:
        note = "" if len(groups) <= len(shown) else f" (first {len(shown)} of {len(groups)})"
        ax.legend(fontsize=7, title=f"one line per{note}", title_fontsize=7)
    ax.grid(True, alpha=0.3)
    fig.savefig(path, dpi=120)
    plt.close(fig)


def cautions(case: Case) -> list[str]:
    """The caution lines of a case's results (the texts live in one place, post)."""
    from .post import cautions_for
    return cautions_for(case)


def print_cautions(texts: list[str]) -> None:
    for text in texts:
        print(f"  caution: {text}")


def _plot_file(index: int, name: str, stem: str) -> str:
    return f"{stem}.png" if index == 0 else f"{stem}_{name}.png"


def run_sweep_command(case_path: str, vary: list[str], log: bool = False,
                      workers: int | None = None, scheduler: str | None = None,
                      out_dir: str | None = None, plot_key=None, points=None,
                      quiet: bool = False) -> int:
    """``gnflow sweep CASE --vary KEY=FROM..TO [--points N] ...``: run, print, write files.

    ``points``: one count for every --vary, or a list with one per --vary (default
    :data:`DEFAULT_POINTS`). ``plot_key``: a column name or a list of them (default
    :func:`default_response`). Writes ``sweep.csv`` (every summary number a column),
    ``sweep.json`` (what was varied, the column units, the caution), ``sweep.png`` (the
    first plot) and ``sweep_<column>.png`` for further ones into ``out_dir`` (default
    ``results/<case stem>-sweep/``), replacing it in one rename. Returns 0 when every
    case converged and 3 when some failed (their rows say why); bad input raises
    :class:`CaseError`.
    """
    from .export import atomic_directory

    case = load_case(case_path)
    specs = list(vary or [])
    counts = _points_per_vary(points, len(specs))
    legacy = [spec for spec in specs if is_legacy_vary(spec)]
    if legacy:
        print("gnflow: note: --vary KEY=START:STOP:COUNT is deprecated (it reads like a "
              "start:step:stop range); write --vary KEY=START..STOP --points COUNT",
              file=sys.stderr)
    varies = [parse_vary(spec, case, log, count) for spec, count in zip(specs, counts)]
    plot_keys = [plot_key] if isinstance(plot_key, str) else list(plot_key or [])
    check_plot_columns(plot_keys)
    if scheduler is not None and workers is not None:
        raise CaseError("--workers", workers, "no --workers with --scheduler (the cluster "
                        "has its own workers)")
    out = Path(out_dir) if out_dir else Path("results") / f"{Path(case_path).stem}-sweep"
    table = run_sweep(case, varies, workers, scheduler, show_progress=not quiet)
    plot_keys = plot_keys or [default_response(case, varies)]
    caution = cautions(case)
    with atomic_directory(out) as staging:
        write_table_csv(staging / "sweep.csv", table.columns(), table.records())
        for index, name in enumerate(plot_keys):
            sweep_plot(table, name, staging / _plot_file(index, name, "sweep"), log)
        _write_json(staging / "sweep.json", {
            "case": str(case_path), "title": case.title,
            "varied": {v.key: {"unit": v.unit or "-", "values": list(v.values)}
                       for v in varies},
            "cases": len(table.rows), "failed": table.failed,
            "columns": {name: table.unit(name) for name in table.outputs},
            "cautions": caution})
        written = sorted(p.name for p in staging.iterdir())
    count = len(table.rows)
    beyond = sum(bool(row.get("beyond_laminar_limit")) for row in table.rows)
    warning = (f"WARNING: {beyond} cases are past the laminar limit, where these laminar "
               "results do not hold (column beyond_laminar_limit)") if beyond else ""
    if quiet:
        if warning:
            print(warning, file=sys.stderr)
        return 3 if table.failed else 0
    where = f"on {table.where}" if scheduler else f"with {table.workers} worker" + (
        "s" if table.workers > 1 else "")
    print(f"gnflow sweep: {count} cases {where} in {table.seconds:.1f} s "
          f"({count / max(table.seconds, 1e-9):.1f} cases/s); "
          f"{count - table.failed} converged, {table.failed} failed")
    if warning:
        print(f"  {warning}")
    print(f"  {len(table.outputs)} summary columns; plotted: {', '.join(plot_keys)}")
    print(f"  wrote {out}/: {', '.join(written)}")
    print_cautions(caution)
    return 3 if table.failed else 0


def _points_per_vary(points, count: int) -> list[int | None]:
    """One ``--points`` for every --vary, or one per --vary in order."""
    if points is None or isinstance(points, (int, np.integer)):
        return [points] * count
    points = list(points)
    if len(points) == 1:
        return points * count
    if len(points) != count:
        raise CaseError("--points", points, f"one count for all {count} --vary options, or "
                        f"one per --vary ({count})")
    return points


def _write_json(path: Path, data: dict) -> None:
    path.write_text(json.dumps(data, indent=2, allow_nan=False) + "\n", encoding="utf-8")


# --------------------------------------------------------------------------- system curves

def system_curve(case: Case, gradient_range: tuple | None = None,
                 flow_rate_range: tuple | None = None, count: int = 25, log: bool = False,
                 workers: int | None = 1, show_progress: bool = False) -> SweepTable:
    """Pressure drop per length against flow rate for a case's passage and fluid.

    Give exactly one of ``gradient_range`` (dp/dz from, to; Pa/m or strings with units;
    negative drives the flow toward +z) or ``flow_rate_range`` (m^3/s, slit m^2/s).
    Everything else (shape, fluid, wall speeds, mesh) comes from ``case``; its own
    drive is replaced. The table's columns are :data:`SYSTEM_CURVE_OUTPUTS`; the
    friction of fully developed laminar flow only (no entrance, fittings or static head).
    """
    if not case.geometry.is_axial:
        raise CaseError("geometry.shape", case.geometry.shape,
                        "an axial passage for a system curve (" + ", ".join(
                            ("slit", "pipe", "annulus", "rectangle", "mesh")) + ")")
    if (gradient_range is None) == (flow_rate_range is None):
        raise CaseError("system curve", message="give exactly one of a pressure-gradient range "
                        "and a flow-rate range")
    key = "drive.pressure_gradient" if gradient_range is not None else "drive.flow_rate"
    start, stop = gradient_range if gradient_range is not None else flow_rate_range
    spec = f"{key}={start}..{stop}"
    vary = parse_vary(spec, case, log, count)
    if key == "drive.pressure_gradient":
        still = [v for v in vary.values if v == 0 and not any(case.drive.wall_speed.values())]
        if still:
            raise CaseError("system curve", spec, "a range without zero (no drive at dp/dz = 0)")
    return run_sweep(case, [vary], workers, None, SYSTEM_CURVE_OUTPUTS,
                     show_progress=show_progress, label="system curve")


def flow_direction(flow_rate) -> str:
    """``"+z"``, ``"-z"`` or ``""`` (no value or no flow): which way the fluid moves."""
    if flow_rate is None or flow_rate == 0:
        return ""
    return "+z" if flow_rate > 0 else "-z"


def system_curve_records(table: SweepTable) -> tuple[list[str], list[list]]:
    """The system-curve CSV: the summary columns with a flow direction after the flow rate."""
    columns = [c for c in table.columns() if not c.startswith("drive.")]
    at = columns.index(f"flow_rate [{table.unit('flow_rate')}]") + 1
    columns.insert(at, "flow_direction")
    records = []
    for row, record in zip(table.rows, table.records()):
        record = record[len(table.varies):]
        record.insert(at, flow_direction(row["flow_rate"]))
        records.append(record)
    return columns, records


def system_curve_plot(table: SweepTable, path: Path) -> None:
    """Pressure drop per length against flow rate, points past the laminar limit marked.

    A curve whose flow runs toward -z throughout is drawn in magnitudes, and says so; one
    that changes direction (a moving wall against the pressure) is drawn signed.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    good = [row for row in table.rows if row["converged"]]
    q = np.array([row["flow_rate"] for row in good], dtype=float)
    # the drop toward +z from dp/dz itself, whatever sign convention the summary's own
    # pressure-drop entry follows
    dp = -np.array([row["pressure_gradient"] for row in good], dtype=float)
    beyond = np.array([bool(row.get("beyond_laminar_limit")) for row in good], dtype=bool)
    notes = []
    reversed_flow = q.size and np.all(q <= 0) and np.any(q < 0)
    if reversed_flow:
        q, dp = -q, -dp
        notes.append("the flow runs toward -z (dp/dz > 0): magnitudes shown")
    elif np.any(q < 0):
        notes.append("negative flow rate: the fluid moves toward -z")
    order = np.argsort(q)
    fig, ax = plt.subplots(figsize=(6.6, 4.6), layout="constrained")
    ax.plot(q[order], dp[order], marker="o", markersize=3, color="tab:blue",
            label="computed: laminar, fully developed")
    if beyond.any():
        ax.plot(q[beyond], dp[beyond], "o", ms=8, mfc="none", color="tab:red",
                label="past the laminar limit: not valid")
        notes.append(f"caution: {int(beyond.sum())} points are past the laminar limit; the "
                     "real pressure drop there is higher")
    unit = "m^2/s per unit width" if table.per_width else "m^3/s"
    ax.set_xlabel(f"flow rate{' magnitude' if reversed_flow else ''} [{unit}]")
    ax.set_ylabel("pressure drop per length" + (" along the flow" if reversed_flow else
                                                 " toward +z, -dp/dz") + " [Pa/m]")
    ax.set_title("system curve: friction per metre of straight line (times the length to "
                 "lay over a pump curve;\nno entrance, fittings or static head)"
                 + ("\n" + "\n".join(notes) if notes else ""), fontsize=8)
    if table.failed:
        ax.text(0.02, 0.95, f"{table.failed} cases failed (see system_curve.csv)",
                transform=ax.transAxes, fontsize=8, color="tab:red", va="top")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="lower right")
    fig.savefig(path, dpi=120)
    plt.close(fig)


def run_system_curve_command(case_path: str, start, stop, count: int = 25,
                             by: str = "pressure_gradient", out_dir: str | None = None,
                             log: bool = False, workers: int | None = 1,
                             quiet: bool = False) -> int:
    """``gnflow system-curve CASE --from A --to B [--points N] [--by flow_rate]``.

    Writes ``system_curve.csv`` (the columns of :data:`SYSTEM_CURVE_OUTPUTS` with units,
    ``flow_direction`` after the flow rate, then ``converged``, ``error``, ``warnings``),
    ``system_curve.json`` (the caution and the laminar count) and ``system_curve.png``
    into ``out_dir`` (default ``results/<case stem>-system-curve/``). Returns 0, or 3
    when some points failed.
    """
    from .export import atomic_directory

    if by not in ("pressure_gradient", "flow_rate"):
        raise CaseError("--by", by, '"pressure_gradient" or "flow_rate"')
    case = load_case(case_path)
    ranges = {"gradient_range" if by == "pressure_gradient" else "flow_rate_range":
              (start, stop)}
    table = system_curve(case, count=count, log=log, workers=workers,
                         show_progress=not quiet, **ranges)
    out = Path(out_dir) if out_dir else Path("results") / f"{Path(case_path).stem}-system-curve"
    columns, records = system_curve_records(table)
    beyond = sum(bool(row.get("beyond_laminar_limit")) for row in table.rows)
    directions = sorted({flow_direction(row["flow_rate"]) for row in table.rows} - {""})
    caution = cautions(case)
    with atomic_directory(out) as staging:
        write_table_csv(staging / "system_curve.csv", columns, records)
        system_curve_plot(table, staging / "system_curve.png")
        _write_json(staging / "system_curve.json", {
            "case": str(case_path), "title": case.title, "by": by, "points": len(table.rows),
            "failed": table.failed, "beyond_laminar_limit": beyond,
            "flow_direction": directions,
            "columns": {name: table.unit(name) for name in table.outputs},
            "cautions": caution})
    warning = (f"WARNING: {beyond} points are past the laminar limit (marked in the plot "
               "and in the column beyond_laminar_limit); the laminar pressure drop there is "
               "too low") if beyond else ""
    if quiet:
        if warning:
            print(warning, file=sys.stderr)
        return 3 if table.failed else 0
    print(f"gnflow system-curve: {len(table.rows)} points by {_words(by)} in "
          f"{table.seconds:.1f} s; {len(table.rows) - table.failed} converged, "
          f"{table.failed} failed")
    if directions == ["-z"]:
        print("  the flow runs toward -z at every point (negative flow rates; the plot "
              "shows magnitudes)")
    elif len(directions) > 1:
        print("  the flow changes direction along the curve: negative flow rates run "
              "toward -z")
    if warning:
        print(f"  {warning}")
    print(f"  wrote {out}/: system_curve.csv, system_curve.json, system_curve.png")
    print_cautions(caution)
    return 3 if table.failed else 0


__all__ = ["Vary", "SweepTable", "parse_vary", "is_legacy_vary", "sweepable_keys", "grid",
           "assign", "build_case", "flatten_summary", "column_unit", "solve_point",
           "solve_chunk", "run_sweep", "run_sweep_command", "system_curve",
           "run_system_curve_command", "write_table_csv", "progress_bar"]
