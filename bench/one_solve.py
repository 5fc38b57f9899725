"""Benchmark: one 1-D solve in-process after import (target: <= 10 ms, issue 16), per shape and model.

Prints a table: shape, model, Newton iterations, median wall time of repeated solves
(each a full `gnflow.solve`, from case to converged Solution, no output files), and the
ratio to the Newtonian solve of the same shape measured in the same run.

    python bench/one_solve.py [--repeat 7] [--uniform | --compare]

``--uniform`` gives every case ``[mesh] cells = 200``: the former default, solved on the
200 uniform cells as given, without the error estimate and adapted re-solve of the
default mesh (gnflow.solver.adapt), for a before/after comparison in the same run
conditions; ``--compare`` times both, alternately, case by case (the fairest comparison
on a shared machine). The ``cells`` column is the mesh solved on (more than 200: adapted).
"""

import argparse
import statistics
import time

from gnflow import Case, solve

FLUIDS = {
    "newtonian": {"model": "newtonian", "viscosity": 0.8},
    "power-law n=0.5": {"model": "power-law", "consistency": 3.0, "flow_index": 0.5},
    "power-law n=0.3": {"model": "power-law", "consistency": 3.0, "flow_index": 0.3},
    "carreau": {"model": "carreau", "zero_shear_viscosity": 12.0, "time_constant": 0.5,
                "flow_index": 0.4},
    "cross": {"model": "cross", "zero_shear_viscosity": 8.0, "time_constant": 0.3,
              "rate_exponent": 0.75},
    "bingham": {"model": "bingham", "yield_stress": 15.0, "plastic_viscosity": 0.6},
    "herschel-bulkley": {"model": "herschel-bulkley", "yield_stress": 15.0, "consistency": 2.0,
                         "flow_index": 0.5},
}
SHAPES = {
    "slit": ({"shape": "slit", "gap": 0.02}, {"pressure_gradient": -6000.0}),
    "pipe": ({"shape": "pipe", "radius": 0.015}, {"pressure_gradient": -6000.0}),
    "annulus": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03},
                {"pressure_gradient": -3000.0, "wall_speed": {"inner": 0.2}}),
    "coaxial": ({"shape": "coaxial-cylinders", "inner_radius": 0.04, "outer_radius": 0.05},
                {"inner_angular_speed": "120 rpm"}),
}


def _timed(case, repeat):
    solve(case)  # warm caches
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        solution = solve(case)
        times.append(time.perf_counter() - start)
    return statistics.median(times) * 1e3, solution


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--uniform", action="store_true",
                        help="[mesh] cells = 200 given: no adaptation of the default mesh")
    parser.add_argument("--compare", action="store_true",
                        help="time each case both ways, alternately, in the same run")
    args = parser.parse_args()
    mesh = {"mesh": {"cells": 200}} if args.uniform else {}
    if args.compare:
        print(f"{'shape':9s} {'model':18s} {'200 ms':>7s} {'default ms':>11s} {'cells':>6s}")
    else:
        print(f"{'shape':9s} {'model':18s} {'iter':>5s} {'cells':>6s} {'median ms':>10s} "
              f"{'/newtonian':>11s}")
    medians, uniform_medians = [], []
    for shape, (geometry, drive) in SHAPES.items():
        base = None
        for name, fluid in FLUIDS.items():
            tables = {"fluid": fluid, "geometry": geometry, "drive": drive}
            case = Case.from_dict({**tables, **mesh})
            if args.compare:
                uniform = Case.from_dict({**tables, "mesh": {"cells": 200}})
                pairs = [(_timed(uniform, 1)[0], _timed(case, 1)) for _ in range(args.repeat)]
                before = statistics.median(p[0] for p in pairs)
                median = statistics.median(p[1][0] for p in pairs)
                solution = pairs[-1][1][1]
                uniform_medians.append(before)
                medians.append(median)
                print(f"{shape:9s} {name:18s} {before:7.1f} {median:11.1f} "
                      f"{solution.solution.domain.cells:6d}")
                continue
            median, solution = _timed(case, args.repeat)
            medians.append(median)
            base = base or median
            print(f"{shape:9s} {name:18s} {solution.iterations:5d} "
                  f"{solution.solution.domain.cells:6d} {median:10.1f} {median / base:11.1f}")
    if args.compare:
        print(f"median of the {len(medians)} cases: 200 cells {statistics.median(uniform_medians):.1f} ms, "
              f"default {statistics.median(medians):.1f} ms")
    else:
        print(f"median of the {len(medians)} cases: {statistics.median(medians):.1f} ms")


if __name__ == "__main__":
    main()
