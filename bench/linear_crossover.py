"""Benchmark: sparse direct (SuperLU) against AMG-preconditioned CG inside the Newton
solve of 2-D P2 square-duct sections, to place the "auto" crossover
(gnflow.solver.linear.DIRECT_LIMIT_2D).

Prints a table: fluid, cells, free unknowns, method, Newton iterations, CG iterations,
wall time (one full gnflow.solve each, after a warm-up), and the AMG/direct time ratio.

    python bench/linear_crossover.py [--cells 32 64 96] [--fluids bingham power-law]

Last run (2026-12-02, 2 shared cores, other jobs running; --cells 32 64):

    fluid      cells  unknowns  method newton     cg  seconds amg/direct
    bingham       32      3969  direct     19      0     1.26
    bingham       32      3969     amg     21   1064     4.53       3.61
    bingham       64     16129  direct     25      0    38.27
    bingham       64     16129     amg     22   1323    54.68       1.43
    power-law     32      3969  direct      3      0     0.44
    power-law     32      3969     amg      3    215     0.80       1.80
    power-law     64     16129  direct      3      0     4.22
    power-law     64     16129     amg      3    331    30.93       7.34
"""

import argparse
import math
import time

from gnflow import Case, solve

SIDE, GRADIENT = 1.0, -1.0
FLUIDS = {
    # half the Mosolov & Miasnikov stopping yield stress tau_c = |G| L / (2 + sqrt(pi))
    "bingham": {"model": "bingham", "yield_stress": 0.5 * SIDE / (2 + math.sqrt(math.pi)),
                "plastic_viscosity": 1.0},
    "power-law": {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
}


def run(fluid: str, cells: int, method: str):
    case = Case.from_dict({"fluid": FLUIDS[fluid],
                           "geometry": {"shape": "rectangle", "width": SIDE, "height": SIDE},
                           "drive": {"pressure_gradient": GRADIENT},
                           "mesh": {"cells": cells}, "solver": {"linear_solver": method}})
    start = time.perf_counter()
    solution = solve(case, estimate_regularisation=False)
    return solution, time.perf_counter() - start


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--cells", type=int, nargs="+", default=[32, 64, 96])
    parser.add_argument("--fluids", nargs="+", default=list(FLUIDS))
    args = parser.parse_args()
    run("power-law", 8, "amg")   # warm imports and caches
    print(f"{'fluid':10s} {'cells':>5s} {'unknowns':>9s} {'method':>7s} {'newton':>6s} "
          f"{'cg':>6s} {'seconds':>8s} {'amg/direct':>10s}")
    for fluid in args.fluids:
        for cells in args.cells:
            seconds = {}
            for method in ("direct", "amg"):
                solution, seconds[method] = run(fluid, cells, method)
                report = solution.linear_solver
                ratio = f"{seconds['amg'] / seconds['direct']:10.2f}" if method == "amg" else ""
                print(f"{fluid:10s} {cells:5d} {solution.problem().free.size:9d} {method:>7s} "
                      f"{solution.iterations:6d} {report['cg_iterations']:6d} "
                      f"{seconds[method]:8.2f} {ratio}", flush=True)


if __name__ == "__main__":
    main()
