"""Benchmark: per-call time of the assembly plan's routines on the square duct (P2).

Times ``AssemblyPlan.matrix`` (frozen viscosity, and with the tangent term),
``.gradient``, ``.force``, ``.diagonal`` and ``.magnitude`` on the square duct of
``bench/sections.py`` with ``cells`` x ``cells`` P2 triangles ((2 cells + 1)^2 unknowns),
and prints the median and the range of repeated calls in milliseconds. With
``--reference FILE`` (a copy of an earlier ``gnflow/solver/assembly.py``) the same calls
of that file's plan are timed alternately in the same run, and the largest relative
difference of the results is printed (round-off only is expected).

    python bench/assembly_calls.py [--cells 100,200] [--repeat 9] [--reference FILE]
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from sections import make_case


def load_reference(path):
    """The module at ``path`` as a sibling of gnflow.solver.assembly (relative imports)."""
    spec = importlib.util.spec_from_file_location("gnflow.solver._assembly_reference", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def calls(plan, u, gradient, coefficient, derivative):
    flux = coefficient * gradient
    return {
        "matrix": lambda: plan.matrix(coefficient),
        "matrix+tangent": lambda: plan.matrix(coefficient, derivative, gradient),
        "gradient": lambda: plan.gradient(u),
        "force": lambda: plan.force(flux),
        "diagonal": lambda: plan.diagonal(coefficient),
        "magnitude": lambda: plan.magnitude(coefficient, u),
    }


def difference(a, b) -> float:
    if hasattr(a, "toarray") or hasattr(a, "tocsr"):
        d = abs(a - b).max()
        return float(d / abs(b).max())
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", default="100,200", help="cells per side (100: 40k, 200: 160k)")
    parser.add_argument("--repeat", type=int, default=9)
    parser.add_argument("--reference", help="an earlier assembly.py to time alongside")
    args = parser.parse_args()
    from gnflow.geometry import build_domain
    from gnflow.solver import AssemblyPlan, Problem

    reference = load_reference(args.reference) if args.reference else None
    load = " ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"assembly plan, square duct P2; load average {load}")
    head = f"{'unknowns':>9s} {'call':15s} {'ms median':>10s} {'ms range':>14s}"
    if reference:
        head += f" {'ref median':>10s} {'ref range':>14s} {'speed-up':>8s} {'rel diff':>9s}"
    print(head)
    for cells in [int(c) for c in args.cells.split(",")]:
        case = make_case(cells, "power-law")
        domain = build_domain(case)
        problem = Problem(domain, case.fluid.model)
        problem.rate_floor = 1e-9
        u = np.random.default_rng(1).standard_normal(domain.dofs)
        gradient, coefficient, derivative = problem._coefficients(u, True)
        built = time.perf_counter()
        plan = AssemblyPlan(domain.basis, problem.free)
        built = time.perf_counter() - built
        mine = calls(plan, u, gradient, coefficient, derivative)
        theirs = None
        if reference:
            ref_built = time.perf_counter()
            ref_plan = reference.AssemblyPlan(domain.basis, problem.free)
            ref_built = time.perf_counter() - ref_built
            theirs = calls(ref_plan, u, gradient, coefficient, derivative)
        line = f"{domain.dofs:9,d} {'plan build':15s} {1e3 * built:10.1f} {'':>14s}"
        if reference:
            line += f" {1e3 * ref_built:10.1f}"
        print(line, flush=True)
        for name in mine:
            times, ref_times = [], []
            for _ in range(args.repeat):
                pairs = [(mine[name], times)] + ([(theirs[name], ref_times)] if theirs else [])
                for fn, store in pairs:
                    start = time.perf_counter()
                    fn()
                    store.append(time.perf_counter() - start)
            med = 1e3 * statistics.median(times)
            line = (f"{domain.dofs:9,d} {name:15s} {med:10.2f} "
                    f"{1e3 * min(times):6.2f}-{1e3 * max(times):<7.2f}")
            if theirs:
                ref = 1e3 * statistics.median(ref_times)
                line += (f" {ref:10.2f} {1e3 * min(ref_times):6.2f}-{1e3 * max(ref_times):<7.2f}"
                         f" {ref / med:8.2f} {difference(mine[name](), theirs[name]()):9.1e}")
            print(line, flush=True)
    print(f"load average at end {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
