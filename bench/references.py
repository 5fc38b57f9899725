"""Benchmark: the independent references of gnflow.analytic (not a test).

Prints, per shape, the time to build a semi-analytic reference and to evaluate its
velocity at 2000 unsorted points (about the nodes of a default 1-D mesh), median of
repeated runs. Target: well under 1 s per evaluation, so that verification studies
stay quick.

    python bench/references.py [--repeat 5]
"""

import argparse
import statistics
import time

import numpy as np

from gnflow.analytic import annulus_flow, pipe_flow, slit_flow
from gnflow.rheology import CarreauYasuda, HerschelBulkley

FLUID = CarreauYasuda(12.0, 0.0, 0.7, 0.35, 0.8)
YIELD = HerschelBulkley(15.0, 2.0, 0.5)
CASES = {
    "slit, Carreau-Yasuda": (lambda: slit_flow(FLUID, 0.02, -5000.0), (0.0, 0.02)),
    "pipe, Carreau-Yasuda": (lambda: pipe_flow(FLUID, 0.02, -5000.0), (0.0, 0.02)),
    "annulus, Carreau-Yasuda": (lambda: annulus_flow(FLUID, 0.02, 0.05, -5000.0, 0.1, 0.0),
                                (0.02, 0.05)),
    "pipe, Herschel-Bulkley": (lambda: pipe_flow(YIELD, 0.02, -5000.0), (0.0, 0.02)),
}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    points = np.random.default_rng(7).uniform(0.0, 1.0, 2000)
    print(f"{'reference':26s} {'build ms':>9s} {'2000 points ms':>15s}")
    for name, (build, (low, high)) in CASES.items():
        x = low + (high - low) * points
        builds, evaluations = [], []
        for _ in range(args.repeat):
            start = time.perf_counter()
            reference = build()
            builds.append(time.perf_counter() - start)
            start = time.perf_counter()
            reference.velocity(x)
            evaluations.append(time.perf_counter() - start)
        print(f"{name:26s} {statistics.median(builds) * 1e3:9.1f} "
              f"{statistics.median(evaluations) * 1e3:15.1f}")


if __name__ == "__main__":
    main()
