"""Benchmark: a 1000-case 1-D sweep with 1 and 2 worker processes (target: <= 2 s on 2 cores, issue 16).

The case is a shear-thinning (power-law, n = 0.5) fluid in a pipe, driven by a pressure
gradient varied over 1000 values; every case is a full build, solve and summary, no
output files. Prints a table: cases, workers, wall seconds, cases per second, the
speed-up over one worker measured in the same run, and the CPU seconds the solving
processes used (this process for one worker, the worker processes otherwise). On a
shared machine the wall time of several workers depends on what else runs; the CPU
seconds per worker (``cpu s / workers``) are what the wall time would be on idle cores,
less the pool's start-up.

    python bench/sweep.py [--cases 1000] [--workers 1 2] [--cells 200] [--stages]

``--stages`` first times the stages of each case in this process (building the case,
the solve, the summary, its flattening) and counts the Newton iterations, then the sweep.
"""

import argparse
import os
import statistics
import time

from gnflow import Case, solve
from gnflow.sweep import build_case, flatten_summary, grid, parse_vary, run_sweep
from gnflow.units import remembering_texts


def stages(case, vary, repeat=3):
    """Median over ``repeat`` passes of the milliseconds per case of each stage, and the
    Newton iterations of one pass."""
    names = ("build", "solve", "summary", "flatten")
    passes, iterations = [], 0
    for _ in range(repeat):
        spent = dict.fromkeys(names, 0.0)
        iterations = 0
        with remembering_texts():   # as solve_chunk reads them
            for values in grid([vary]):
                start = time.perf_counter()
                built = build_case(case.raw, (vary.key,), values)
                built_at = time.perf_counter()
                solution = solve(built)
                solved_at = time.perf_counter()
                summary = solution._summary
                summarised_at = time.perf_counter()
                flatten_summary(summary)
                spent["build"] += built_at - start
                spent["solve"] += solved_at - built_at
                spent["summary"] += summarised_at - solved_at
                spent["flatten"] += time.perf_counter() - summarised_at
                iterations += solution.iterations
        passes.append(spent)
    count = len(vary.values)
    return {name: statistics.median(p[name] for p in passes) * 1e3 / count
            for name in names}, iterations


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--cases", type=int, default=1000)
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--cells", type=int, default=200)
    parser.add_argument("--stages", action="store_true",
                        help="time the stages of each case in this process first")
    args = parser.parse_args()
    case = Case.from_dict({
        "title": "bench: power-law pipe",
        "fluid": {"model": "power-law", "consistency": 2.0, "flow_index": 0.5,
                  "density": 1100.0},
        "geometry": {"shape": "pipe", "radius": "25 mm"},
        "drive": {"pressure_gradient": "-1 kPa/m"},
        "mesh": {"cells": args.cells}})
    vary = parse_vary(f"drive.pressure_gradient=-0.5kPa/m:-50kPa/m:{args.cases}", case)
    print(f"{args.cases}-case sweep of drive.pressure_gradient, power-law pipe, "
          f"{args.cells} cells P2; {os.cpu_count()} cores, load average "
          f"{os.getloadavg()[0]:.1f} at start")
    if args.stages:
        spent, iterations = stages(case, vary)
        print("ms per case, in this process: " + ", ".join(
            f"{name} {value:.3f}" for name, value in spent.items())
            + f"; total {sum(spent.values()):.3f}; Newton iterations {iterations} "
            f"({iterations / len(vary.values):.2f} per case)")
    print(f"{'cases':>6s} {'workers':>8s} {'seconds':>8s} {'cases/s':>8s} {'speed-up':>9s} "
          f"{'failed':>7s} {'cpu s':>6s}")
    base = None
    for workers in args.workers:
        before = os.times()
        table = run_sweep(case, [vary], workers=workers, show_progress=False)
        after = os.times()
        if workers == 1:
            cpu = (after.user + after.system) - (before.user + before.system)
        else:   # the workers, joined when the pool closed
            cpu = (after.children_user + after.children_system) - \
                (before.children_user + before.children_system)
        base = base or table.seconds
        print(f"{len(table.rows):6d} {workers:8d} {table.seconds:8.1f} "
              f"{len(table.rows) / table.seconds:8.1f} {base / table.seconds:9.2f} "
              f"{table.failed:7d} {cpu:6.1f}")
    print(f"load average {os.getloadavg()[0]:.1f} at the end")


if __name__ == "__main__":
    main()
