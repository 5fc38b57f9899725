"""Where the time of one solve goes: a profile of ``gnflow.solve`` split into phases.

Issue 16 asks every model to solve within 1.5x of one Newtonian solve. This script shows
what limits that: it runs one solve under :mod:`cProfile` (the same square duct as
``bench/sections.py``, or a 1-D case) and charges every function's own time to a phase,
by the gnflow function it was called from:

* ``viscosity``   the rheology model (apparent viscosity and its derivative);
* ``assembly``    building residuals and tangent matrices (quadrature loops, sparse sums);
* ``amg setup``   building the multigrid hierarchy (pyamg);
* ``cg + cycles`` the preconditioned conjugate gradients and the V-cycles they apply
                  (smoothing, restriction, prolongation: scipy / numpy kernels);
* ``direct``      sparse or banded factorisations and their solves;
* ``sequencing``  interpolating coarse solutions onto finer meshes;
* ``mesh``        building the mesh and basis (scikit-fem);
* ``other``       everything else (post-processing of the summary is not included).

Phases are attributed by walking each function's callers up to the first gnflow frame
with a known role; cProfile's overhead (about 10-30 %) falls on the Python-level loops
more than on compiled kernels, so read shares, not absolute seconds. The wall time of the
same solve without the profiler is printed first.

    python bench/profile_solve.py [--cells 200] [--models newtonian,power-law,...]
    python bench/profile_solve.py --one-d      # a 1-D pipe, 200 solves per model
    python bench/profile_solve.py --calls      # also: calls and seconds of the hot routines

``--calls`` prints, per model, the number of calls and the cumulative profiled seconds of
each routine in ``CALLS`` (all mesh levels of the grid sequencing together), and the
seconds per fine-level Newton step of the whole solve.

    python bench/profile_solve.py --stages [--cells 500]

``--stages`` times (wall clock, no profiler) the stages of one solve instead, per model:
the fine mesh and basis, the coarser levels of the grid sequencing (each a whole solve),
the fine level (start state, assembly plan, Newton, with its own linear solves), the
mesh-error and regularisation-error estimates of a yield-stress fluid, and the fine-level
CG iterations; the Newtonian row is the reference every other model is compared with.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import time

from sections import FLUIDS, make_case

PHASES = (
    ("viscosity", ("gnflow/rheology.py",)),
    ("amg setup", ("_build_hierarchy", "pyamg/aggregation", "pyamg/multilevel.py:__init__",
                   "smoothed_aggregation")),
    ("cg + cycles", ("_cg", "_v_cycle", "cycle", "pyamg/relaxation")),
    ("direct", ("_banded", "_BandFactor", "spsolve", "splu", "factorized", "cholesky",
                "_band_layout", "solve_banded", "cho_")),
    ("sequencing", ("sequencing.py",)),
    ("mesh", ("geometry.py", "drawing.py", "meshfile.py", "skfem/mesh",
              "skfem/assembly/basis", "skfem/element", "skfem/quadrature")),
    ("assembly", ("assembly.py", "slip.py")),
)


#: (label, file suffix, function name) of the routines listed by --calls
CALLS = (
    ("plan.matrix", "solver/assembly.py", "matrix"),
    ("plan.gradient", "solver/assembly.py", "gradient"),
    ("plan.force", "solver/assembly.py", "force"),
    ("plan.diagonal", "solver/assembly.py", "diagonal"),
    ("plan.magnitude", "solver/assembly.py", "magnitude"),
    ("plan build", "solver/assembly.py", "__init__"),
    ("viscosity", "gnflow/rheology.py", "viscosity"),
    ("viscosity'", "gnflow/rheology.py", "viscosity_derivative"),
    ("amg setup", "solver/linear.py", "_build_hierarchy"),
    ("linear prepare", "solver/linear.py", "prepare"),
    ("linear solve", "solver/linear.py", "solve"),
)


def call_table(profile: cProfile.Profile) -> list[tuple[str, int, float]]:
    """(label, calls, cumulative seconds) of each routine in CALLS."""
    stats = pstats.Stats(profile)
    rows = []
    for label, suffix, name in CALLS:
        count, seconds = 0, 0.0
        for (filename, _, function), (_, ncalls, _, cumulative, _) in stats.stats.items():
            if function == name and filename.endswith(suffix):
                count += ncalls
                seconds += cumulative
        rows.append((label, count, seconds))
    return rows


def phase_of(key, stats: pstats.Stats, depth: int = 0, seen=None) -> str:
    """The phase of a function: its own if its file or name matches, else its callers'."""
    filename, _, name = key
    text = f"{filename}:{name}"
    for phase, marks in PHASES:
        if any(mark in text for mark in marks):
            return phase
    if depth > 25:
        return "other"
    seen = seen or set()
    callers = stats.stats[key][4]
    # the caller that spent the most time calling this function decides
    best = sorted(callers.items(), key=lambda item: -item[1][3])
    for caller, _ in best:
        if caller in seen:
            continue
        seen.add(caller)
        phase = phase_of(caller, stats, depth + 1, seen)
        if phase != "other":
            return phase
    return "other"


def phases(profile: cProfile.Profile) -> tuple[dict[str, float], float]:
    stats = pstats.Stats(profile)
    shares: dict[str, float] = {}
    total = 0.0
    for key, (_, _, own, _, _) in stats.stats.items():
        phase = phase_of(key, stats)
        shares[phase] = shares.get(phase, 0.0) + own
        total += own
    return shares, total


def one_d_case(model: str):
    from gnflow import Case
    return Case.from_dict({"fluid": FLUIDS[model],
                           "geometry": {"shape": "pipe", "radius": 0.015},
                           "drive": {"pressure_gradient": -6000.0}})


def stage_times(case) -> tuple[dict[str, float], object, int]:
    """Wall seconds of the stages of one solve of ``case`` (see ``--stages``), the
    solution, and the fine level's CG iterations."""
    import gnflow.solver as flow
    from gnflow import solve
    from gnflow.solver.linear import LinearSolver
    seconds = dict.fromkeys(("mesh", "coarse levels", "fine level", "estimates"), 0.0)
    depth = [0]
    fine_cg = []
    originals = {name: getattr(flow, name) for name in
                 ("build_domain", "_sequenced_coarse", "_mesh_error", "_estimate_level",
                  "_regularisation_report")}
    stage_of = {"build_domain": "mesh", "_sequenced_coarse": "coarse levels",
                "_mesh_error": "estimates", "_estimate_level": "estimates",
                "_regularisation_report": "estimates"}

    def timed(name):
        def call(*args, **kwargs):
            depth[0] += 1
            started = time.perf_counter()
            try:
                return originals[name](*args, **kwargs)
            finally:
                depth[0] -= 1
                if depth[0] == 0:   # the outermost call only (levels solve recursively)
                    seconds[stage_of[name]] += time.perf_counter() - started
        return call
    original_cg = LinearSolver._cg

    def counted_cg(self, *args, **kwargs):
        out = original_cg(self, *args, **kwargs)
        if depth[0] == 0:
            fine_cg.append(self.cg_iterations[-1])
        return out
    try:
        for name in originals:
            setattr(flow, name, timed(name))
        LinearSolver._cg = counted_cg
        started = time.perf_counter()
        results = solve(case)
        total = time.perf_counter() - started
    finally:
        for name, function in originals.items():
            setattr(flow, name, function)
        LinearSolver._cg = original_cg
    seconds["fine level"] = total - sum(seconds.values())
    seconds["total"] = total
    return seconds, results.solution, sum(fine_cg)


def print_stages(args) -> None:
    from gnflow import solve
    names = ("mesh", "coarse levels", "fine level", "estimates", "total")
    print(f"square duct, P2, {(2 * args.cells + 1) ** 2:,d} unknowns; wall seconds per stage "
          "(one solve each, after a warm-up solve of the same case on 8 x 8 cells)")
    print(f"{'model':18s} {'fine it':>7s} {'fine CG':>7s} {'coarse it':>10s} "
          + " ".join(f"{n:>13s}" for n in names) + f" {'/ Newtonian':>11s}")
    reference = None
    for model in args.models.split(","):
        solve(make_case(8, model, "amg"))
        seconds, solution, fine_cg = stage_times(make_case(args.cells, model))
        levels, coarse = [], solution.coarse
        while coarse is not None:
            levels.append(str(coarse.iterations))
            coarse = coarse.coarse
        if model == "newtonian":
            reference = seconds
        ratio = f"{seconds['total'] / reference['total']:.2f}" if reference else "-"
        print(f"{model:18s} {solution.iterations:7d} {fine_cg:7d} {'+'.join(levels) or '-':>10s} "
              + " ".join(f"{seconds[n]:13.2f}" for n in names) + f" {ratio:>11s}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=200, help="cells per side (200: 160k)")
    parser.add_argument("--models", default=",".join(FLUIDS))
    parser.add_argument("--one-d", action="store_true", help="profile 1-D pipe solves")
    parser.add_argument("--calls", action="store_true",
                        help="also print calls and seconds of the hot routines")
    parser.add_argument("--stages", action="store_true",
                        help="wall seconds per stage of one solve instead of a profile")
    args = parser.parse_args()
    if args.stages:
        print_stages(args)
        return
    from gnflow import solve

    names = [p for p, _ in PHASES] + ["other"]
    header = f"{'model':18s} {'wall s':>7s} {'iter':>5s} " + " ".join(f"{n:>11s}" for n in names)
    print(("1-D pipe, 200 cells, 200 solves" if args.one_d else
           f"square duct, P2, {2 * args.cells + 1}^2 unknowns") + "; shares of profiled time")
    print(header)
    for model in args.models.split(","):
        case = one_d_case(model) if args.one_d else make_case(args.cells, model)
        repeat = 200 if args.one_d else 1
        solve(case)   # warm caches (imports, quadrature tables)
        started = time.perf_counter()
        for _ in range(repeat):
            solution = solve(case)
        wall = (time.perf_counter() - started) / repeat
        profile = cProfile.Profile()
        profile.enable()
        for _ in range(repeat):
            solve(case)
        profile.disable()
        shares, total = phases(profile)
        cells = " ".join(f"{100 * shares.get(n, 0.0) / total:10.1f}%" for n in names)
        shown = f"{wall * 1e3:6.2f}m" if args.one_d else f"{wall:7.2f}"
        print(f"{model:18s} {shown:>7s} {solution.iterations:5d} {cells}", flush=True)
        if args.calls:
            steps = max(solution.iterations, 1) * repeat
            print(f"    {'routine':16s} {'calls':>6s} {'cum s':>7s} {'ms/call':>8s}"
                  f"   (profiled {total / repeat:.2f} s, {total / steps:.3f} s per fine step)")
            for label, count, seconds in call_table(profile):
                if count:
                    print(f"    {label:16s} {count // repeat:6d} {seconds / repeat:7.3f} "
                          f"{1e3 * seconds / count:8.2f}")


if __name__ == "__main__":
    main()
