"""Timing of helical-flow solves (not a test): the concentric 1-D case at the default mesh
and the eccentric 2-D section (e = 0.5) at growing meshes; 27 cells across the gap is
about 100k unknowns. Each case runs in a fresh process, so that its peak memory is its
own. Prints a table; run it with the machine otherwise idle (the load average is shown).

    python bench/helical.py [--cells 6 12 27] [--repeats 5]
"""

import argparse
import multiprocessing
import os
import resource
import time

FLUID = {"model": "power-law", "consistency": 0.8, "flow_index": 0.5}
BINGHAM = {"model": "bingham", "yield_stress": 5.0, "plastic_viscosity": 0.03}
AT_FLOW_RATE = {"flow_rate": 0.004, "inner_angular_speed": 20.0}
AT_GRADIENT = {"pressure_gradient": -2000.0, "inner_angular_speed": 20.0}


def case(fluid, drive, eccentricity=0.0, cells=None):
    from gnflow.case import Case
    mapping = {"fluid": fluid, "drive": drive,
               "geometry": {"shape": "annulus", "inner_radius": 0.05, "outer_radius": 0.1,
                            "eccentricity": eccentricity}}
    if cells:
        mapping["mesh"] = {"cells": cells}
    return Case.from_dict(mapping)


def measure(arguments):
    """Best of ``repeats`` solves in this (fresh) process: unknowns, seconds, iterations,
    converged, peak MiB."""
    fluid, drive, eccentricity, cells, repeats = arguments
    from gnflow.solver.coupled import solve_helical
    best, solution = None, None
    for _ in range(repeats):
        c = case(fluid, drive, eccentricity, cells)
        started = time.perf_counter()
        solution = solve_helical(c)
        elapsed = time.perf_counter() - started
        best = elapsed if best is None else min(best, elapsed)
    if solution.velocity_basis is None:
        unknowns = 2 * solution.domain.dofs
    else:
        unknowns = (solution.velocity_basis.N + solution.domain.dofs
                    + solution.pressure_basis.N)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024   # kB on Linux
    return unknowns, best, solution.iterations, solution.converged, peak


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--cells", type=int, nargs="*", default=[6, 12, 27])
    parser.add_argument("--repeats", type=int, default=5, help="repeats of each 1-D case")
    args = parser.parse_args()
    runs = [("concentric, power-law, flow rate", (FLUID, AT_FLOW_RATE, 0.0, None, args.repeats)),
            ("concentric, power-law, gradient", (FLUID, AT_GRADIENT, 0.0, None, args.repeats)),
            ("concentric, Bingham, gradient", (BINGHAM, AT_GRADIENT, 0.0, None, args.repeats)),
            ("concentric, Bingham, flow rate", (BINGHAM, AT_FLOW_RATE, 0.0, None, args.repeats))]
    runs += [(f"eccentric 0.5, power-law, {n} cells", (FLUID, AT_FLOW_RATE, 0.5, n, 1))
             for n in args.cells]
    print(f"{'case':38s} {'unknowns':>9s} {'seconds':>9s} {'iterations':>10s} "
          f"{'converged':>9s} {'peak MiB':>9s} {'load 1 min':>10s}")
    context = multiprocessing.get_context("spawn")
    for label, arguments in runs:
        load = os.getloadavg()[0]
        with context.Pool(1) as pool:
            unknowns, seconds, iterations, converged, peak = pool.apply(measure, (arguments,))
        print(f"{label:38s} {unknowns:9d} {seconds:9.3f} {iterations:10d} "
              f"{str(converged):>9s} {peak:9.0f} {load:10.2f}", flush=True)


if __name__ == "__main__":
    main()
