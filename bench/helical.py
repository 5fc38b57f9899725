"""Timing of helical-flow solves (not a test): concentric 1-D at the default mesh and the
eccentric 2-D section at growing meshes. Prints a table; run with the machine otherwise idle.

    python bench/helical.py [--cells 6 12 24]
"""

import argparse
import time

from gnflow.case import Case
from gnflow.solver.coupled import solve_helical

FLUID = {"model": "power-law", "consistency": 0.8, "flow_index": 0.5}


def case(eccentricity, cells=None, drive=None):
    mapping = {"fluid": FLUID,
               "geometry": {"shape": "annulus", "inner_radius": 0.05, "outer_radius": 0.1,
                            "eccentricity": eccentricity},
               "drive": drive or {"flow_rate": 0.004, "inner_angular_speed": 20.0}}
    if cells:
        mapping["mesh"] = {"cells": cells}
    return Case.from_dict(mapping)


def timed(c, repeats=1):
    best = None
    for _ in range(repeats):
        started = time.perf_counter()
        solution = solve_helical(c)
        elapsed = time.perf_counter() - started
        best = elapsed if best is None else min(best, elapsed)
    return solution, best


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--cells", type=int, nargs="*", default=[6, 12])
    args = parser.parse_args()
    print(f"{'case':34s} {'unknowns':>9s} {'iterations':>10s} {'seconds':>9s}")
    for label, drive in (("concentric, flow rate", None),
                         ("concentric, pressure gradient",
                          {"pressure_gradient": -2000.0, "inner_angular_speed": 20.0})):
        solution, seconds = timed(case(0.0, drive=drive), repeats=5)
        print(f"{label:34s} {2 * solution.domain.dofs:9d} {solution.iterations:10d} {seconds:9.3f}")
    for cells in args.cells:
        solution, seconds = timed(case(0.5, cells))
        unknowns = (solution.velocity_basis.N + solution.domain.dofs
                    + solution.pressure_basis.N)
        print(f"{f'eccentric e=0.5, {cells} cells':34s} {unknowns:9d} "
              f"{solution.iterations:10d} {seconds:9.3f}")


if __name__ == "__main__":
    main()
