"""Exact yield-stress method against the regularised solve: time and peak memory.

Square duct of unit side, Bingham at tau_y / tau_c = 0.5 (tau_c = G L / (2 + sqrt(pi)),
Mosolov & Miasnikov 1965), dp/dz = -1 Pa/m, plastic viscosity 1 Pa s, P2. Each run is a
fresh process, so its peak resident memory is its own. Prints one table, with the load
average of the (shared) machine at the start and end. Not a test.

    python bench/exact.py [--large]      # --large adds the 160k-unknown exact solve
    python bench/exact.py --settings [cells]   # clarabel's KKT settings (default 120 cells)

``--settings`` solves the same program (flow only) with clarabel's defaults and with the
settings :func:`gnflow.solver.exact._settings` changes, one fresh process each, and
prints wall and CPU seconds (CPU time is the fairer figure on a shared machine).
"""

from __future__ import annotations

import math
import multiprocessing
import os
import resource
import sys
import time

TAU_C = 1 / (2 + math.sqrt(math.pi))


def _case(cells: int):
    from gnflow.case import Case
    return Case.from_dict({
        "fluid": {"model": "bingham", "yield_stress": 0.5 * TAU_C, "plastic_viscosity": 1.0},
        "geometry": {"shape": "rectangle", "width": 1.0, "height": 1.0},
        "drive": {"pressure_gradient": -1.0}, "mesh": {"cells": cells, "degree": 2}})


def _child(method: str, cells: int, queue) -> None:
    from gnflow.geometry import build_domain
    case = _case(cells)
    domain = build_domain(case)
    started, cpu = time.perf_counter(), time.process_time()
    if method == "exact":
        from gnflow.solver.exact import solve_exact
        solution = solve_exact(case, domain=domain)
        extra = f"{solution.iterations} IP iterations, {solution.regularisation['cones']} cones"
    elif method == "exact, no stopping ratio":
        from gnflow.solver.exact import conic_section, flow_program, _run, read_flow
        section = conic_section(domain)
        program = flow_program(case, section)
        result = _run(program.P, program.q, program.A, program.b, program.cones, 1e-9)
        flow = read_flow(case, section, program, result)
        seconds = time.perf_counter() - started
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        queue.put((seconds, time.process_time() - cpu, rss, float(section.load @ flow.u),
                   domain.dofs, f"{result.iterations} IP iterations"))
        return
    elif method == "limit load":
        from gnflow.solver.exact import flow_stop_pressure_gradient
        value = flow_stop_pressure_gradient(domain, 0.5 * TAU_C)
        seconds = time.perf_counter() - started
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        queue.put((seconds, time.process_time() - cpu, rss, value, domain.dofs, "G_c (Pa/m)"))
        return
    else:
        from gnflow.solver import solve
        solution = solve(case, domain=domain, estimate_regularisation=False)
        extra = f"{solution.iterations} Newton iterations"
    seconds = time.perf_counter() - started
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    queue.put((seconds, time.process_time() - cpu, rss, solution.problem().flow_rate(solution.u),
               domain.dofs, extra))


#: KKT settings compared by --settings: (label, changes to clarabel's defaults)
SETTINGS = [("clarabel defaults (qdldl, refinement)", {}),
            ("qdldl, no iterative refinement", {"iterative_refinement_enable": False}),
            ("faer, no refinement, 1 thread", {"iterative_refinement_enable": False,
                                               "direct_solve_method": "faer", "max_threads": 1}),
            ("faer, no refinement, 2 threads", {"iterative_refinement_enable": False,
                                                "direct_solve_method": "faer", "max_threads": 2})]


def _settings_child(changes: dict, cells: int, queue) -> None:
    import clarabel
    import numpy as np
    import scipy.sparse as sp
    from gnflow.geometry import build_domain
    from gnflow.solver import exact
    case = _case(cells)
    domain = build_domain(case)
    section = exact.conic_section(domain)
    program = exact.flow_program(case, section)
    settings = clarabel.DefaultSettings()
    tuned = exact._settings(1e-9)
    for name in ("verbose", "tol_gap_abs", "tol_gap_rel", "tol_feas", "tol_ktratio", "max_iter"):
        setattr(settings, name, getattr(tuned, name))   # the same tolerances as the method's
    for name, value in changes.items():
        setattr(settings, name, value)
    wall, cpu = time.perf_counter(), time.process_time()
    solver = clarabel.DefaultSolver(sp.triu(program.P).tocsc(), program.q, program.A.tocsc(),
                                    program.b, program.cones, settings)
    solution = solver.solve()
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    u = exact._wall_values(domain)
    u[section.free] = program.scales.speed * np.asarray(solution.x)[:section.free.size]
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    queue.put((wall, cpu, rss, float(section.load @ u), domain.dofs, int(solution.iterations),
               str(solution.status)))


def compare_settings(cells: int) -> None:
    load_start = os.getloadavg()
    rows = [(label, *_spawned(_settings_child, changes, cells)) for label, changes in SETTINGS]
    load_end = os.getloadavg()
    print(f"square duct, Bingham tau_y/tau_c = 0.5, P2, {cells} cells, flow only, tolerance "
          f"1e-9; load average start {load_start[0]:.2f}, end {load_end[0]:.2f}, "
          f"{os.cpu_count()} cores")
    print(f"| {'KKT settings':40s} | {'unknowns':>8s} | {'iter':>4s} | {'wall s':>7s} | "
          f"{'CPU s':>7s} | {'peak MiB':>8s} | {'Q':>16s} | status")
    print("|" + "-" * 42 + "|" + "-" * 10 + "|" + "-" * 6 + "|" + "-" * 9 + "|" + "-" * 9
          + "|" + "-" * 10 + "|" + "-" * 18 + "|-------")
    for label, wall, cpu, rss, q, dofs, iterations, status in rows:
        print(f"| {label:40s} | {dofs:8d} | {iterations:4d} | {wall:7.2f} | {cpu:7.2f} | "
              f"{rss:8.0f} | {q:16.10e} | {status}")


def _spawned(target, *args):
    context = multiprocessing.get_context("spawn")
    queue = context.Queue()
    process = context.Process(target=target, args=(*args, queue))
    process.start()
    result = queue.get()
    process.join()
    return result


def run(method: str, cells: int):
    return _spawned(_child, method, cells)


def main(argv):
    if "--settings" in argv:
        rest = argv[argv.index("--settings") + 1:]
        compare_settings(int(rest[0]) if rest else 120)
        return
    plan = [("regularised", 63), ("exact", 63), ("exact, no stopping ratio", 63),
            ("limit load", 63)]
    if "--large" in argv:
        # the whole method, as a case runs it: the program, the solve, the reaction
        # and the stress field read back from the duals
        plan += [("exact", 200)]
    load_start = os.getloadavg()
    rows = [(method, cells, *run(method, cells)) for method, cells in plan]
    load_end = os.getloadavg()
    print(f"square duct, Bingham tau_y/tau_c = 0.5, P2; load average (1, 5, 15 min) "
          f"start {load_start[0]:.2f} {load_start[1]:.2f} {load_start[2]:.2f}, "
          f"end {load_end[0]:.2f} {load_end[1]:.2f} {load_end[2]:.2f}, {os.cpu_count()} cores")
    print(f"| {'method':26s} | {'cells':>5s} | {'unknowns':>8s} | {'seconds':>8s} | "
          f"{'CPU s':>8s} | {'peak MiB':>8s} | {'Q or G_c':>14s} | notes")
    print("|" + "-" * 28 + "|" + "-" * 7 + "|" + "-" * 10 + "|" + "-" * 10 + "|" + "-" * 10
          + "|" + "-" * 10 + "|" + "-" * 16 + "|------")
    for method, cells, seconds, cpu, rss, value, dofs, extra in rows:
        print(f"| {method:26s} | {cells:5d} | {dofs:8d} | {seconds:8.2f} | {cpu:8.2f} | "
              f"{rss:8.0f} | {value:14.8e} | {extra}")
    times = {(m, c): s for m, c, s, *_ in rows}
    ratio = times[("exact", 63)] / times[("regularised", 63)]
    core = times[("exact, no stopping ratio", 63)] / times[("regularised", 63)]
    print(f"\nexact / regularised time at 16k unknowns: {ratio:.2f} (with the stopping ratio), "
          f"{core:.2f} (flow only); target <= 10")


if __name__ == "__main__":
    main(sys.argv[1:])
