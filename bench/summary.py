"""Benchmark: the summary and point fields of a solved 2-D section, stage by stage.

After ``gnflow.solve`` a run builds the summary and the point fields of the solution
(:class:`gnflow.results.Results`). This script times that post-processing on a square
duct (20 mm x 20 mm, dp/dz = -6000 Pa/m, P2 on a structured mesh of cells x cells squares
of two triangles: cells = 250 and 500 give 251 001 and 1 002 001 unknowns) for a
Herschel-Bulkley fluid (tau_y = 15 Pa, K = 2 Pa s^n, n = 0.5) and a power law (K = 2
Pa s^n, n = 0.5). Each case is solved once; its post-processing is then repeated on that
solution, alternating this tree's
``gnflow.post`` with the one of a git revision (``--before REV``, read with ``git show``
and imported beside it), so that both meet the same load of a shared machine. Stages:

* ``mass matrix``   the projection's mass matrix and preconditioner (its first use on
                    the basis: each run starts without them);
* ``point fields``  ``post.fields``: the gradient at the quadrature points, its two
                    projections, viscosity and stress at the dofs;
* ``walls``         ``post.wall_distributions`` (stress and rate along each wall);
* ``summary``       ``post.summarise`` with those (wall stresses from the reaction,
                    unyielded fraction of a yield-stress fluid, Reynolds number, ...);
* ``total``         their sum: what ``results.summary()`` and ``results.fields`` cost.

Printed per row: the median over the runs and every run's seconds, before and after.

    python bench/summary.py [--cells 250,500] [--models herschel-bulkley,power-law]
                            [--before REV] [--runs 3]
"""

from __future__ import annotations

import argparse
import importlib.util
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

FLUIDS = {
    "herschel-bulkley": {"model": "herschel-bulkley", "yield_stress": 15.0, "consistency": 2.0,
                         "flow_index": 0.5},
    "power-law": {"model": "power-law", "consistency": 2.0, "flow_index": 0.5},
}
STAGES = ("mass matrix", "point fields", "walls", "summary", "total")


def make_case(cells: int, model: str):
    from gnflow import Case
    return Case.from_dict({
        "title": f"bench: square duct {model}", "fluid": FLUIDS[model],
        "geometry": {"shape": "rectangle", "width": 0.02, "height": 0.02},
        "drive": {"pressure_gradient": -6000.0}, "mesh": {"cells": cells}})


def post_at(revision: str):
    """``gnflow/post.py`` of a git revision, imported as a module of the package."""
    source = subprocess.run(["git", "show", f"{revision}:gnflow/post.py"], cwd=ROOT,
                            check=True, capture_output=True, text=True).stdout
    with tempfile.TemporaryDirectory(prefix="gnflow-bench-") as folder:
        path = Path(folder) / "post_before.py"
        path.write_text(source, encoding="utf-8")
        spec = importlib.util.spec_from_file_location("gnflow._post_before", path)
        module = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(module)
    return module


def stages(post, solution) -> dict[str, float]:
    """Seconds of each stage of one post-processing of ``solution`` by module ``post``."""
    post._MASS_SYSTEMS.clear()
    basis = solution.domain.basis
    times = {}
    start = time.perf_counter()
    post._mass_system(basis)
    times["mass matrix"] = time.perf_counter() - start
    start = time.perf_counter()
    fields = post.fields(solution)
    times["point fields"] = time.perf_counter() - start
    start = time.perf_counter()
    walls = post.wall_distributions(solution)
    times["walls"] = time.perf_counter() - start
    start = time.perf_counter()
    post.summarise(solution, fields if solution.model.is_yield_stress else None, walls)
    times["summary"] = time.perf_counter() - start
    times["total"] = sum(times.values())
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--cells", default="250,500")
    parser.add_argument("--models", default="herschel-bulkley,power-law")
    parser.add_argument("--before", default=None,
                        help="git revision whose gnflow/post.py to compare with")
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()

    import gnflow.case
    from gnflow import post, solve

    largest = max(int(c) for c in args.cells.split(","))
    gnflow.case.MAX_SECTION_CELLS = max(gnflow.case.MAX_SECTION_CELLS, 2 * largest ** 2)
    variants = {"after": post}
    if args.before:
        variants = {"before": post_at(args.before), "after": post}
    solve(make_case(8, "herschel-bulkley"))   # first-use imports and costs, not timed
    rows = []
    for cells in (int(c) for c in args.cells.split(",")):
        for model in args.models.split(","):
            start = time.perf_counter()
            solution = solve(make_case(cells, model)).solution
            solve_seconds = time.perf_counter() - start
            solution.problem()   # the discrete problem, built once for every run
            seen = {name: [] for name in variants}
            for _ in range(args.runs):   # alternating: before, after, before, after, ...
                for name, module in variants.items():
                    seen[name].append(stages(module, solution))
            rows.append((cells, model, int(solution.domain.dofs), solve_seconds, seen))
            print(f"solved {model} on {cells} cells ({solution.domain.dofs} unknowns) in "
                  f"{solve_seconds:.1f} s", flush=True)

    names = list(variants)
    header = f"{'unknowns':>9} {'model':<17} {'stage':<13}" + "".join(
        f" {name + ' (median)':>16} {name + ' runs':<22}" for name in names)
    print()
    print(header)
    print("-" * len(header))
    for cells, model, dofs, solve_seconds, seen in rows:
        for stage in STAGES:
            line = f"{dofs:>9} {model:<17} {stage:<13}"
            for name in names:
                runs = [run[stage] for run in seen[name]]
                each = " ".join(f"{r:.3f}" for r in runs)
                line += f" {statistics.median(runs):>16.3f} {each:<22}"
            print(line)
        print(f"{dofs:>9} {model:<17} {'(solve)':<13} {solve_seconds:>16.1f}")


if __name__ == "__main__":
    main()
