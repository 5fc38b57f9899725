"""Benchmark: 2-D square-duct sections at about 10k, 160k and 1M unknowns (P2).

The case is a square duct (width = height = 0.1 m) driven by dp/dz = -1000 Pa/m, meshed
with cells x cells structured triangles of degree 2, i.e. (2 cells + 1)^2 unknowns:
cells = 50, 200, 500 give 10 201, 160 801 and 1 002 001. Four fluids: Newtonian
(1 Pa s), power-law (K = 1, n = 0.5), Carreau (eta0 = 10 Pa s, lambda = 1 s, n = 0.4)
and Herschel-Bulkley (tau_y = 2 Pa, K = 1, n = 0.5).

Every measurement runs in a fresh interpreter (``--one SIZE MODEL SOLVER`` prints one
JSON line) so that its peak resident memory (``ru_maxrss``, which only ever grows) is
its own. Printed per row: Newton iterations on the fine mesh and on each coarser level
of the grid sequencing, wall time of ``gnflow.solve`` (case to converged Solution, no
output; after a warm-up solve of the same case on 8 x 8 cells in the same process, so
that lazy imports are not timed), peak RSS, and

  (a) the time over that of a Newtonian solve of the same mesh with the same linear
      solver, measured in the same run;
  (b) at 160k unknowns, the speed-up over a plain Picard iteration (frozen viscosity,
      ``scipy.sparse.linalg.spsolve`` every step, same relative-residual tolerance),
      implemented below; a capped Picard run gives a lower bound (">=").

    python bench/sections.py [--sizes 50,200,500] [--models newtonian,power-law,...]
                             [--solver auto] [--quick] [--picard-models power-law,carreau]
                             [--picard-seconds 600] [--timeout 480]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

FLUIDS = {
    "newtonian": {"model": "newtonian", "viscosity": 1.0},
    "power-law": {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
    "carreau": {"model": "carreau", "zero_shear_viscosity": 10.0, "time_constant": 1.0,
                "flow_index": 0.4},
    "herschel-bulkley": {"model": "herschel-bulkley", "yield_stress": 2.0,
                         "consistency": 1.0, "flow_index": 0.5},
    # shear-thickening: the primal-dual Newton steps are used here too (newton.DualStress)
    "thickening": {"model": "power-law", "consistency": 1.0, "flow_index": 1.5},
}
SHORT = {"newtonian": "Newtonian", "power-law": "power-law n=0.5",
         "carreau": "Carreau n=0.4", "herschel-bulkley": "HB ty=2 n=0.5",
         "thickening": "power-law n=1.5"}
#: targets (issue 16): ratio (a) for every model, (b), and the 1M Herschel-Bulkley solve
TARGET_A = 1.5
TARGET_B = 60.0
TARGET_1M_SECONDS = 30.0
TARGET_1M_GIB = 3.0
PICARD_SIZE = 200          # cells: 160 801 unknowns
PICARD_CAP = 200           # iterations
TOLERANCE = 1e-10


def make_case(cells: int, model: str, linear_solver: str = "auto"):
    from gnflow import Case
    return Case.from_dict({
        "title": f"bench: square duct {model}",
        "fluid": FLUIDS[model],
        "geometry": {"shape": "rectangle", "width": 0.1, "height": 0.1},
        "drive": {"pressure_gradient": -1000.0},
        "mesh": {"cells": cells, "degree": 2},
        "solver": {"method": "newton", "linear_solver": linear_solver,
                   "tolerance": TOLERANCE}})


def raise_input_limit(cells: int) -> None:
    """Let this process build a section above the input limit of 500,000 cells (a guard
    against case files asking for millions of cells, not a limit of the solver): the
    4M-unknown point of bench/scaling.py has 2,000,000 triangles."""
    import gnflow.case
    gnflow.case.MAX_SECTION_CELLS = max(gnflow.case.MAX_SECTION_CELLS, 2 * cells * cells)


def peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # KiB on Linux


# --------------------------------------------------------------------------- one measurement

def run_newton(cells: int, model: str, linear_solver: str) -> dict:
    from gnflow import solve
    # a solve of the same case on 8 x 8 cells first: the modules a solve imports on first
    # use (the results and post-processing, pyamg, about 0.6-0.8 s) and first-call costs
    # are paid before the timed solve, as in any process that has solved once
    solve(make_case(8, model, "direct" if linear_solver == "direct" else "amg"))
    case = make_case(cells, model, linear_solver)
    start, cpu = time.perf_counter(), time.process_time()
    solution = solve(case)
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    levels = []
    coarse = solution.coarse
    while coarse is not None:
        levels.append(coarse.iterations)
        coarse = coarse.coarse
    return {"kind": "newton", "cells": cells, "model": model, "solver": linear_solver,
            "dofs": int(solution.domain.dofs), "iterations": solution.iterations,
            "coarse_iterations": levels, "converged": solution.converged,
            "residual": solution.residual, "seconds": seconds, "cpu_seconds": cpu,
            "linear": solution.linear_solver, "flow_rate": solution.problem().flow_rate(
                solution.u), "peak_mib": peak_mib()}


def run_picard(cells: int, model: str, seconds_cap: float, iteration_cap: int) -> dict:
    """Plain Picard: frozen viscosity, a fresh ``spsolve`` each step, no sequencing.

    Started, like gnflow, from a Newtonian field with the model's viscosity at the
    flow's characteristic rate. Yield-stress fluids use the regularised model the Newton
    run ended with (its solve is not timed here).
    """
    import numpy as np
    import scipy.sparse.linalg as spla
    from gnflow import rheology, solve
    from gnflow.geometry import build_domain
    from gnflow.solver import RATE_FLOOR, Problem, characteristic_rate

    case = make_case(cells, model)
    fluid_model = case.fluid.model
    if fluid_model.is_yield_stress:
        fluid_model = solve(case).model
    start, cpu = time.perf_counter(), time.process_time()
    domain = build_domain(case, cells)
    rate = characteristic_rate(case, domain, case.fluid.model)
    problem = Problem(domain, fluid_model)
    problem.rate_floor = RATE_FLOOR * rate
    G = case.drive.pressure_gradient
    free = problem.free
    base = problem.boundary_values()

    def picard_solve(prob, u):
        # gnflow's own assembly (so only the iteration and the linear solver differ)
        coefficient = prob.frozen_coefficient(u)
        rhs = -prob.frozen_action(coefficient, base) - G * prob.load
        new = base.copy()
        new[free] = spla.spsolve(prob.frozen(coefficient), rhs[free])
        return new

    start_model = rheology.Newtonian(float(fluid_model.viscosity(np.array([rate]))[0]))
    start_problem = Problem(domain, start_model)
    u = picard_solve(start_problem, base)
    iterations, residual, capped = 0, problem.relative_residual(u, G), False
    while residual > TOLERANCE:
        if iterations >= iteration_cap or time.perf_counter() - start > seconds_cap:
            capped = True
            break
        u = picard_solve(problem, u)
        iterations += 1
        residual = problem.relative_residual(u, G)
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    return {"kind": "picard", "cells": cells, "model": model, "solver": "spsolve",
            "dofs": int(domain.dofs), "iterations": iterations, "coarse_iterations": [],
            "converged": not capped, "capped": capped, "residual": residual,
            "seconds": seconds, "cpu_seconds": cpu, "flow_rate": problem.flow_rate(u),
            "peak_mib": peak_mib()}


# --------------------------------------------------------------------------- driver

def measure(cells, model, solver, args) -> dict:
    """One measurement; a Newton solve is run ``args.repeat`` times (each in a fresh
    interpreter) and the run of median time is kept, with the spread in ``spread``."""
    if solver == "picard-spsolve" or getattr(args, "repeat", 1) <= 1:
        return measure_once(cells, model, solver, args)
    runs = [measure_once(cells, model, solver, args) for _ in range(args.repeat)]
    timed = sorted((r for r in runs if r.get("kind") == "newton"), key=lambda r: r["seconds"])
    if len(timed) < len(runs):
        return next(r for r in runs if r.get("kind") != "newton")
    chosen = timed[len(timed) // 2]
    chosen["spread"] = [r["seconds"] for r in timed]
    return chosen


def measure_once(cells, model, solver, args) -> dict:
    command = [sys.executable, os.path.abspath(__file__), "--one", str(cells), model, solver,
               "--picard-seconds", str(args.picard_seconds)]
    if getattr(args, "beyond_input_limit", False):
        command.append("--beyond-input-limit")
    timeout = args.timeout + (args.picard_seconds if solver == "picard-spsolve" else 0)
    started = time.perf_counter()
    try:
        done = subprocess.run(command, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"kind": "timeout", "cells": cells, "model": model, "solver": solver,
                "seconds": time.perf_counter() - started}
    lines = [line for line in done.stdout.splitlines() if line.startswith("{")]
    if done.returncode != 0 or not lines:
        return {"kind": "error", "cells": cells, "model": model, "solver": solver,
                "message": done.stderr.strip().splitlines()[-1:] or ["?"]}
    return json.loads(lines[-1])


def fmt_row(result: dict, newtonian: dict | None, picard: dict | None) -> str:
    cells, model = result["cells"], result["model"]
    dofs = (2 * cells + 1) ** 2
    name = SHORT.get(model, model)
    if result["kind"] in ("timeout", "error"):
        what = f"stopped after {result['seconds']:.0f} s" if result["kind"] == "timeout" \
            else "failed: " + " ".join(result["message"])
        return f"{dofs:>9,d} {name:16s} {result['solver']:8s} {what}"
    coarse = "+".join(str(i) for i in result["coarse_iterations"]) or "-"
    ratio_a = "-"
    if newtonian and newtonian.get("kind") == "newton" and model != "newtonian":
        ratio_a = f"{result['seconds'] / newtonian['seconds']:.2f}"
    ratio_b = "-"
    if picard and picard.get("kind") == "picard":
        speed = picard["seconds"] / result["seconds"]
        ratio_b = (">=" if picard["capped"] else "") + f"{speed:.1f}"
    elif picard and picard.get("kind") == "timeout":
        ratio_b = f">={picard['seconds'] / result['seconds']:.1f}"
    solver = result["linear"]["method"] if result["kind"] == "newton" else result["solver"]
    flag = "" if result["converged"] else " (NOT converged)"
    cpu = f"{result['cpu_seconds']:.2f}" if "cpu_seconds" in result else "-"
    spread = result.get("spread")
    spread = f"  {min(spread):.2f}-{max(spread):.2f}" if spread else ""
    return (f"{dofs:>9,d} {name:16s} {solver:8s} {result['iterations']:>4d} {coarse:>9s} "
            f"{result['seconds']:8.2f} {result['peak_mib']:8.0f} {ratio_a:>6s} {ratio_b:>8s}"
            f"{cpu:>8s}{spread}{flag}")


HEADER = (f"{'unknowns':>9s} {'model':16s} {'linear':8s} {'iter':>4s} {'coarse':>9s} "
          f"{'seconds':>8s} {'peak MiB':>8s} {'(a)':>6s} {'(b)':>8s} {'cpu s':>8s}"
          f"  {'runs min-max':>12s}")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--one", nargs=3, metavar=("CELLS", "MODEL", "SOLVER"),
                        help="run one measurement in this process and print a JSON line")
    parser.add_argument("--sizes", default="50,200,500", help="cells per side, comma-separated")
    parser.add_argument("--models", default=",".join(FLUIDS))
    parser.add_argument("--solver", default="auto", help="linear solver: auto, direct or amg")
    parser.add_argument("--quick", action="store_true", help="sizes 50 and 200 only")
    parser.add_argument("--picard-models", default="power-law,carreau,herschel-bulkley",
                        help="models for the Picard/spsolve baseline at 160k ('' for none)")
    parser.add_argument("--picard-seconds", type=float, default=600.0,
                        help="time cap of one Picard baseline run")
    parser.add_argument("--repeat", type=int, default=3,
                        help="runs of each Newton measurement; the median is shown")
    parser.add_argument("--timeout", type=float, default=480.0,
                        help="seconds after which one Newton measurement is stopped")
    parser.add_argument("--beyond-input-limit", action="store_true",
                        help="raise the case files' cell limit (gnflow.case.MAX_SECTION_CELLS) "
                             "in this benchmark's own processes, for sections above it")
    args = parser.parse_args()

    if args.one:
        cells, model, solver = int(args.one[0]), args.one[1], args.one[2]
        if args.beyond_input_limit:
            raise_input_limit(cells)
        if solver == "picard-spsolve":
            result = run_picard(cells, model, args.picard_seconds, PICARD_CAP)
        else:
            result = run_newton(cells, model, solver)
        print(json.dumps(result), flush=True)
        return

    sizes = [50, 200] if args.quick else [int(s) for s in args.sizes.split(",") if s]
    models = [m for m in args.models.split(",") if m]
    picard_models = [m for m in args.picard_models.split(",") if m]
    for m in models + picard_models:
        if m not in FLUIDS:
            parser.error(f"unknown model {m}; choose from {', '.join(FLUIDS)}")
    if "newtonian" not in models:
        models = ["newtonian"] + models   # the reference of ratio (a)

    print(f"gnflow square-duct sections, P2, dp/dz = -1000 Pa/m, tolerance {TOLERANCE:g}, "
          f"linear solver {args.solver!r}")
    print(f"host: {os.cpu_count()} cpus; load average at start "
          f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print("iter: Newton iterations on the fine mesh; coarse: on each coarser level of the "
          "grid sequencing (finest first)")
    print("(a): time / Newtonian time, same mesh and linear solver; (b): at 160k unknowns, "
          "Picard+spsolve time / this time (wall-clock ratios); cpu s: process CPU time of the "
          "solve (all threads); seconds: median of the runs (--repeat), each in a fresh "
          "interpreter after a warm-up solve on 8 x 8 cells")
    print(HEADER, flush=True)
    rows = []
    for cells in sizes:
        newtonian = None
        for model in models:
            result = measure(cells, model, args.solver, args)
            if model == "newtonian":
                newtonian = result
            picard = None
            if cells == PICARD_SIZE and model in picard_models:
                picard = measure(cells, model, "picard-spsolve", args)
                rows.append((result, picard))
            print(fmt_row(result, newtonian, picard), flush=True)
            if picard is not None:
                if picard.get("kind") == "picard":
                    tag = "stopped at cap, residual " if picard["capped"] else "residual "
                    print(f"{'':9s}   Picard+spsolve baseline: {picard['iterations']} "
                          f"iterations, {picard['seconds']:.1f} s, {tag}"
                          f"{picard['residual']:.1e}, peak {picard['peak_mib']:.0f} MiB",
                          flush=True)
                else:
                    print(f"{'':9s}   Picard+spsolve baseline: {picard.get('kind')}", flush=True)
    print(f"load average at end {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print(f"targets: (a) <= {TARGET_A:g} for every model; (b) >= {TARGET_B:g}x; "
          f"1M-unknown Herschel-Bulkley in <= {TARGET_1M_SECONDS:g} s and "
          f"<= {TARGET_1M_GIB:g} GiB")


if __name__ == "__main__":
    main()
