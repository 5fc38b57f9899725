"""Benchmark: whole square-duct solves with the current assembly plan and with an earlier
one, alternately, each in a fresh interpreter.

For a before/after comparison of ``gnflow/solver/assembly.py`` in one run: with
``--reference FILE`` (a copy of an earlier assembly.py) every solve is also run with that
file's ``AssemblyPlan`` put in place of the current one (in ``gnflow.solver.assembly`` and
in the modules that imported it), the two alternating so that both see the same machine
load. Prints, per model and variant, the wall times of the repeats (seconds), the
iterations and the flow rate, and the ratio of the median time to that of the Newtonian
solve of the same variant.

    python bench/assembly_solves.py [--cells 200] [--repeat 3] [--models ...] [--reference FILE]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)


def one(cells: int, model: str, reference: str | None) -> dict:
    """One solve in this process (the ``--one`` mode); the plan swapped if ``reference``."""
    # imported in both variants before the clock starts (the swap needs them)
    import gnflow.solver.assembly as assembly
    import gnflow.solver.exact as exact
    if reference:
        from assembly_calls import load_reference
        plan = load_reference(reference).AssemblyPlan
        assembly.AssemblyPlan = exact.AssemblyPlan = plan
    from sections import make_case
    from gnflow import solve
    case = make_case(cells, model)
    start = time.perf_counter()
    solution = solve(case)
    seconds = time.perf_counter() - start
    import resource
    return {"seconds": seconds, "iterations": solution.iterations,
            "flow_rate": float(solution.problem().flow_rate(solution.u)),
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}


def run(cells, model, reference) -> dict:
    command = [sys.executable, os.path.abspath(__file__), "--one", str(cells), model]
    if reference:
        command += ["--reference", reference]
    done = subprocess.run(command, capture_output=True, text=True)
    lines = [line for line in done.stdout.splitlines() if line.startswith("{")]
    if done.returncode != 0 or not lines:
        raise SystemExit(f"{model}: {done.stderr.strip().splitlines()[-1:]}")
    return json.loads(lines[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--one", nargs=2, metavar=("CELLS", "MODEL"))
    parser.add_argument("--cells", type=int, default=200)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--models", default="newtonian,power-law,carreau,herschel-bulkley")
    parser.add_argument("--reference", help="an earlier assembly.py to compare with")
    args = parser.parse_args()
    if args.one:
        print(json.dumps(one(int(args.one[0]), args.one[1], args.reference)))
        return
    variants = [("current", None)] + ([("reference", args.reference)] if args.reference else [])
    models = args.models.split(",")
    print(f"square duct P2, {(2 * args.cells + 1) ** 2:,d} unknowns, fresh process per solve; "
          f"load average {' '.join(f'{x:.2f}' for x in os.getloadavg())}", flush=True)
    results = {(m, v): [] for m in models for v, _ in variants}
    for _ in range(args.repeat):
        for model in models:
            for name, path in variants:
                results[model, name].append(run(args.cells, model, path))
    print(f"{'model':18s} {'variant':10s} {'seconds (repeats)':>26s} {'median':>7s} "
          f"{'/newtonian':>10s} {'ratio range':>12s} {'iter':>5s} {'flow rate':>22s} "
          f"{'peak MiB':>9s}")
    for name, _ in variants:
        base = statistics.median(r["seconds"] for r in results[models[0], name])
        for model in models:
            rows = results[model, name]
            times = [r["seconds"] for r in rows]
            median = statistics.median(times)
            # the ratio in each repeat, to the Newtonian solve of the same round
            ratios = [t / r["seconds"] for t, r in zip(times, results[models[0], name])]
            print(f"{model:18s} {name:10s} {' '.join(f'{t:7.2f}' for t in times):>26s} "
                  f"{median:7.2f} {median / base:10.2f} {min(ratios):5.2f}-{max(ratios):<6.2f} "
                  f"{rows[-1]['iterations']:5d} "
                  f"{rows[-1]['flow_rate']:22.15e} {max(r['peak_mib'] for r in rows):9.0f}")
    print(f"load average at end {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
