"""Benchmark: one 1-D solve in-process after import (target: <= 10 ms, issue 16), per shape and model.

Prints a table: shape, model, Newton iterations, median wall time of repeated solves
(each a full `gnflow.solve`, from case to converged Solution, no output files), and the
ratio to the Newtonian solve of the same shape measured in the same run.

    python bench/one_solve.py [--repeat 7]
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


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()
    print(f"{'shape':9s} {'model':18s} {'iter':>5s} {'median ms':>10s} {'/newtonian':>11s}")
    for shape, (geometry, drive) in SHAPES.items():
        base = None
        for name, fluid in FLUIDS.items():
            case = Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive})
            solve(case)  # warm caches
            times = []
            for _ in range(args.repeat):
                start = time.perf_counter()
                solution = solve(case)
                times.append(time.perf_counter() - start)
            median = statistics.median(times) * 1e3
            base = base or median
            print(f"{shape:9s} {name:18s} {solution.iterations:5d} {median:10.1f} "
                  f"{median / base:11.1f}")


if __name__ == "__main__":
    main()
