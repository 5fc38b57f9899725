"""Nonlinear solution of the momentum balance: Picard and Newton over the viscosity.

The problem on every domain (see :mod:`gnflow.geometry`) is: find ``u`` with the wall
values prescribed and

    R(u)[v] = int a s^2 eta(g) grad u . grad v dx + G int a v dx = 0   for all v,

with ``g = s |grad u|`` the shear rate, ``a`` the area weight and ``s`` the rate
factor. Newton's method uses the consistent tangent (DESIGN §1)

    J[du, v] = int a s^2 (eta grad du . grad v + s^2 (eta'(g)/g) (grad u . grad du)(grad u . grad v)),

whose coefficient in the direction of ``grad u`` is ``a s^2 d tau/d g > 0`` for every
monotone flow curve, so ``J`` stays symmetric positive definite.

Given a flow rate instead of ``G``, the pressure gradient is one more unknown and the
flow rate one more equation (a bordered Newton system), so the target is met to the
solver tolerance in the same iteration.

Yield-stress fluids are solved with the regularisation parameter raised by continuation
(:mod:`gnflow.solver.continuation`) until it reaches the value chosen from the case's
own scales (see :func:`default_regularisation`). ``solve`` dispatches: exact yield-stress
flow (``[fluid.regularisation] method = "none"``) to :mod:`.exact`, helical annular flow
to :mod:`.coupled`, everything else to the regularised Newton solve below.
"""


from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np

from ..case import Case
from ..geometry import Domain, build_domain
from .assembly import (RATE_FLOOR, AssemblyPlan, Problem, area_integral, axial_momentum,  # noqa: F401
                       axial_residual, axial_tangent, stiffness_diagonal)
from .continuation import (Outcome, RegularisationError, RegularisationSchedule,  # noqa: F401
                           continue_regularisation, iterate_once, regularisation_error,
                           sharpness_wanted)
from .linear import DIRECT_LIMIT, DIRECT_LIMIT_2D, LinearSolver  # noqa: F401
from .newton import initial_state, newton, picard, picard_step  # noqa: F401
from .scales import (REGULARISATION_SHARPNESS, characteristic_rate, default_regularisation,  # noqa: F401
                     expected_to_yield, invert_flow_curve, stopping_warnings)
from .sequencing import SEQUENCE_FLOOR, SEQUENCING_LIMIT, interpolated
from .solution import Iteration, Solution, _History  # noqa: F401

#: Unknowns above which a regularised section's regularisation error is estimated on the
#: half-fine mesh of its mesh-error estimate (see _regularisation_report)
HALF_MESH_ESTIMATE_LIMIT = SEQUENCING_LIMIT
#: Loosest relative residual of the half-fine solve of a mesh-error estimate: the
#: estimate is a relative change of the flow rate of 1e-5 or more (first order near the
#: yield surfaces) given to two digits, which a residual of 1e-8 (a flow-rate error of
#: that order) leaves exact; a case's own tolerance applies where it is looser
MESH_ERROR_TOLERANCE = 1e-8
#: Unknowns of the coarsest grid-sequence level a large section's regularisation error
#: may be estimated on (see _estimate_level)
ESTIMATE_UNKNOWNS = 40_000
#: Relative residual to which the levels of a grid sequence below the finest are solved:
#: a start only, whose interpolation to the finer mesh leaves a residual of 1e-5 to 1e-4
#: there in any case. Square ducts at 160k unknowns (2026-12-04), Newton steps on the
#: coarser levels and CG iterations of all levels with 1e-6 / 1e-5 / 1e-4: power law
#: n = 0.5 3+3+2, 79 / 2+3+2, 69 / 1+2+2, 67 (but 63 fine-level CG iterations instead of
#: 53); Herschel-Bulkley 3+3+6, 162 / 3+3+5, 160 / 2+2+4, 166; Carreau 46 / 44 / 46 with
#: a third fine-level step; power law n = 1.5 46 / 42 / 36
SEQUENCE_TOLERANCE = 1e-5


def solve(case: Case, cells: int | None = None, domain: Domain | None = None,
          estimate_regularisation: bool = True, progress=None, *,
          sequence_level: bool = False) -> Solution:
    """Solve a case; returns a :class:`Solution` (converged or not, never raises for
    non-convergence). ``sequence_level``: the solve is a coarse level of a grid
    sequence, itself sequenced down to SEQUENCE_FLOOR unknowns (internal).

    >>> from gnflow.case import Case
    >>> case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 1.0},
    ...     "geometry": {"shape": "slit", "gap": 1.0}, "drive": {"pressure_gradient": -12.0}})
    >>> solution = solve(case)
    >>> round(solution.problem().flow_rate(solution.u), 9)   # -G h^3 / (12 mu) per width
    1.0
    """
    if _is_helical(case):   # before the exact method, which has no rotation
        from .coupled import solve_helical
        return solve_helical(case, domain=domain, cells=cells, progress=progress)
    if getattr(case.fluid, "regularisation", None) == "none":
        from .exact import solve_exact
        return solve_exact(case, domain=domain, cells=cells, progress=progress)
    if getattr(case, "heat", None) is not None:
        from .heat import solve_heated
        return solve_heated(case, case.heat, domain=domain, cells=cells, progress=progress)
    started = time.perf_counter()
    adaptable = cells is None and domain is None   # the default 1-D mesh may be adapted
    domain = domain or build_domain(case, cells)
    coarse = _sequenced_coarse(case, domain, progress,
                               SEQUENCE_FLOOR if sequence_level else SEQUENCING_LIMIT)
    history = _History(progress)   # progress(entry) is called on every iteration
    problem, start, soft_start, wanted_for = _setup(case, domain, coarse)
    early = None
    if adaptable and domain.dimension == 1 and not case.fluid.model.is_yield_stress:
        # from an exact start the mesh error is estimated before any solve: a default
        # mesh found too coarse is never solved on (see adapt.adapted_at_once)
        from .adapt import adapted_at_once
        early = adapted_at_once(case, problem, start, history)
        adaptable = early is None
    if early is not None:
        domain, problem, outcome = early
    elif case.fluid.model.is_yield_stress:
        outcome = continue_regularisation(problem, start, soft_start, case.drive.flow_rate,
                                          case.solver, history, wanted_for)
    else:
        outcome = iterate_once(problem, *start, case.drive.flow_rate, case.solver.method,
                               case.solver.tolerance, case.solver.max_iterations, history, 0)
    problem.model = outcome.model
    if outcome.failure:
        history.append(Iteration(outcome.iterations, case.solver.method, math.inf, 0.0,
                                 outcome.gradient))
    solution = _finish(case, domain, problem, outcome, history, time.perf_counter() - started)
    solution.coarse = coarse
    if adaptable and domain.dimension == 1:
        from .adapt import refined
        adapted = refined(case, solution, history)
        if adapted is not None:
            coarse, seconds = solution.coarse, solution.seconds
            solution = _finish(case, *adapted, history, seconds)
            solution.coarse = coarse
    if case.fluid.model.is_yield_stress:
        estimate = estimate_regularisation and solution.converged
        mesh, half = _mesh_error(case, solution) if estimate and domain.dimension == 2 \
            else ({}, None)
        # a large section's regularisation error is estimated on the half-fine mesh of
        # the mesh-error solve (same regularisation): see _regularisation_report
        on = half if half is not None and domain.dofs > HALF_MESH_ESTIMATE_LIMIT else None
        if on is not None:
            on = _estimate_level(case, solution, on)
        solution.regularisation = _regularisation_report(case, problem, outcome, estimate, on)
        solution.regularisation.update(mesh)
        if estimate:
            solution.warnings.extend(stopping_warnings(case, domain, solution))
    solution.seconds = time.perf_counter() - started
    return solution


def _is_helical(case: Case) -> bool:
    """An annulus with a rotating wall: axial and azimuthal flow coupled (helical)."""
    drive = case.drive
    return case.geometry.shape == "annulus" and bool(
        getattr(drive, "inner_angular_speed", 0.0) or getattr(drive, "outer_angular_speed", 0.0))


def _sequenced_coarse(case: Case, domain: Domain, progress, limit: int) -> Solution | None:
    """A converged solve on a mesh half as fine, as the start of a 2-D nonlinear solve
    of more than ``limit`` unknowns (grid sequencing), or None."""
    if not (domain.dimension == 2 and domain.shape in ("rectangle", "annulus")
            and domain.dofs > limit and domain.cells >= 4
            and case.fluid.model.name != "newtonian"):   # a linear problem: one solve
        return None
    # the coarse solution is only a start: a loose tolerance there suffices
    rough = replace(case, solver=replace(case.solver, tolerance=max(case.solver.tolerance,
                                                                    SEQUENCE_TOLERANCE)))
    coarse = solve(rough, cells=domain.cells // 2, estimate_regularisation=False,
                   progress=progress, sequence_level=True)
    return coarse if coarse.converged else None


def _setup(case: Case, domain: Domain, coarse: Solution | None):
    """The problem with its first model, the start state, a soft restart and the
    regularisation the flow calls for."""
    model = case.fluid.model
    rate = characteristic_rate(case, domain, model)
    user_parameter = case.fluid.regularisation_parameter
    schedule = RegularisationSchedule(getattr(model, "regularisation", "papanastasiou"))

    def regularised(softening: float):
        # The stress-consistent start (see initial_state) is close enough for Newton at
        # the target sharpness, so the solve starts there; if that fails it begins again
        # soft (softening 1e3) and sharpens by continuation.
        parameter = schedule.softened(default_regularisation(model, rate), softening)
        if user_parameter is not None:
            parameter = min(parameter, user_parameter) if schedule.grows else \
                max(parameter, user_parameter)
        return model.with_regularisation(parameter)
    if model.is_yield_stress:
        model = coarse.model if coarse is not None else regularised(1.0)
    problem = _problem(case, domain, model)
    problem.rate_floor = RATE_FLOOR * rate
    problem.linear = LinearSolver(case.solver.linear_solver, problem.free.size,
                                  dimension=domain.dimension)
    if coarse is not None:
        u = interpolated(coarse, domain)
        for wall in domain.walls.values():
            u[wall.dofs] = wall.value
        start = (u, coarse.pressure_gradient)
    else:
        start = _initial_state(problem, case, model, rate)

    def soft_start():
        soft = regularised(1e3)
        problem.model = soft
        return (*_initial_state(problem, case, soft, rate), soft)
    wanted_for = sharpness_wanted(problem, case.fluid.model, user_parameter, rate,
                                  expected_to_yield(case, domain, case.fluid.model))
    return problem, start, soft_start, wanted_for


def _problem(case: Case, domain: Domain, model) -> Problem:
    """The discrete problem: with slip laws on some walls (:mod:`.slip`), their dofs become
    unknowns and the slip terms join the balance."""
    laws = getattr(case.drive, "slip", None)
    if not laws:
        return Problem(domain, model)
    from .slip import SlipProblem, WallSlip, speed_scale
    return SlipProblem(domain, model, WallSlip(domain, laws, model,
                                               speed_scale(case, domain, model)))


def _initial_state(problem: Problem, case: Case, model, rate: float):
    """The stress-consistent start; a Newtonian one if the model cannot be evaluated."""
    try:
        return initial_state(problem, case, model, rate)
    except (ArithmeticError, ValueError, RuntimeError, np.linalg.LinAlgError):
        return problem.boundary_values(), case.drive.pressure_gradient or 0.0


def _finish(case: Case, domain: Domain, problem: Problem, outcome: Outcome, history,
            seconds: float) -> Solution:
    """The :class:`Solution` of an outcome, with the message saying how it ended."""
    spec = case.solver
    u, gradient, used = outcome.u, outcome.gradient, outcome.iterations
    try:
        # the raw residual where it meets the tolerance (the round-off share, an extra
        # pass over the elements, would only lower it), else the part beyond round-off
        raw = problem.relative_residual(u, gradient, beyond_round_off=False)
        residual = raw if raw <= spec.tolerance else problem.relative_residual(u, gradient)
    except (ArithmeticError, ValueError):
        raw = residual = math.inf
    finite = bool(np.all(np.isfinite(u)) and math.isfinite(residual))
    converged = outcome.converged and finite and residual <= spec.tolerance
    shown = f"{residual:.2e}" if math.isfinite(residual) else "not finite"
    if converged:
        if raw > residual:   # the rest is the round-off of the state itself
            shown = f"{raw:.2e}, at the round-off level"
        message = (f"converged in {used} iterations (relative residual {shown})" if used else
                   f"converged at the start, no iteration needed: the start state meets "
                   f"the tolerance (relative residual {shown})")
    elif outcome.failure:
        message = (f"not converged: {outcome.failure} after {used} iterations; last relative "
                   f"residual {shown}")
    else:
        message = (f"not converged: {spec.method} reached {used} of {spec.max_iterations} "
                   f"iterations with relative residual {shown} "
                   f"(tolerance {spec.tolerance:.1e})")
        message += ("; try solver.method = \"newton\"" if spec.method == "picard" else
                    "; try more solver.max_iterations or a finer mesh")
    if not finite:
        # never hand non-finite numbers to post-processing: keep the wall values only
        u = problem.boundary_values()
        gradient = gradient if math.isfinite(gradient) else 0.0
    solution = Solution(case, domain, problem.model, u,
                        float(gradient) if domain.kind == "axial" else 0.0,
                        bool(converged), used, float(residual), history, message,
                        seconds, None, [], problem.rate_floor)
    solution.linear_solver = problem.linear.report()
    solution._problem = problem
    return solution


def _regularisation_report(case: Case, problem: Problem, outcome: Outcome,
                           estimate: bool, on=None) -> dict:
    """What the summary says about the regularisation used and the error it causes.

    ``on``: ``(problem, u, gradient)`` of the same regularised flow on the mesh half as
    fine, or on a coarser level of the grid sequence (:func:`_estimate_level`), to
    estimate the error there. The estimate is a property of the regularised
    model, not of the mesh (its mesh dependence is of the order of the mesh error, far
    below the two digits it is given to), and its two sensitivity solves cost a quarter
    as much there: on a 160k-unknown duct (Herschel-Bulkley) 1.7 s against 0.3 s, where
    the fine solve itself takes 4 s; the sharp plug makes CG need 30-45 iterations.
    """
    model = problem.model
    where, u, gradient = on if on is not None else (problem, outcome.u, outcome.gradient)
    error = regularisation_error(where, u, gradient, case.drive.flow_rate,
                                 case.solver) if estimate else None
    report = {"method": model.regularisation,
              "parameter": model.regularisation_parameter,
              "unit": model.regularisation_unit,
              "chosen": "user" if case.fluid.regularisation_parameter is not None else "automatic",
              "continuation_stages": outcome.stages,
              "error_estimate": error.estimate if error else None,
              "error_estimate_definition": RegularisationError.definition + (
                  (f"; evaluated on the mesh half as fine ({on[0].domain.cells} cells)"
                   if on[0].domain.cells == problem.domain.cells // 2 else
                   f"; evaluated on a coarser mesh of the grid sequence "
                   f"({on[0].domain.cells} cells)")
                  if on is not None and error is not None else "")}
    if error is not None:
        report["error_estimate_ratio"] = error.observed_ratio
        report["error_estimate_reliable"] = error.reliable
        if not error.reliable:
            report["advice"] = (
                "the regularisation error does not fall as 1/sharpness here (the flow is "
                "near its stopping limit); the estimate is a lower bound: solve with "
                "[fluid.regularisation] method = \"none\" (exact yield-stress flow)")
    return report


def _estimate_level(case: Case, solution: Solution, half):
    """``(problem, u, gradient)`` of the regularised flow (the fine solve's parameter) on
    the coarsest level of the grid sequence with at least ESTIMATE_UNKNOWNS unknowns, or
    ``half`` (the half-fine solve of the mesh-error estimate) if that is the level.

    The regularisation-error estimate is a property of the regularised model; its mesh
    dependence is of the order of the mesh error. On square ducts (2026-12-04, estimate
    on the solve's own mesh, tolerance 1e-10) it was, at 30 / 60 / 125 / 250 cells:
    Herschel-Bulkley (tau_y = 2 Pa) 2.19 / 2.10 / 2.099 / 2.098e-6, (tau_y = 20 Pa)
    2.43 / 2.50 / 2.436 / 2.435e-3, Bingham (5 Pa) 0.94 / 1.043 / 1.042 / 1.031e-5: from
    about 40k unknowns (100 cells) on, within the two digits it is given to. Its
    sensitivity solves on the 250k-unknown half mesh of a 1M-unknown section took about
    2 s; on the 63k-unknown level a quarter of that, plus a Newton step or two there to
    reach the fine solve's regularisation from the sequence's own.
    """
    level, chosen = solution.coarse, None
    while level is not None and level.domain.dofs >= ESTIMATE_UNKNOWNS:
        chosen, level = level, level.coarse
    if chosen is None or chosen.domain.cells >= half[0].domain.cells:
        return half
    problem = chosen.problem().sibling(solution.model)
    problem.rate_floor = solution.problem().rate_floor
    finished = _estimate_solve(case, problem, chosen.u, chosen.pressure_gradient)
    if not finished.converged:
        return half
    return problem, finished.u, finished.gradient


def _estimate_solve(case: Case, problem: Problem, u, gradient):
    """Newton on a coarser mesh of an error estimate, from a nearby state, to
    MESH_ERROR_TOLERANCE (or the case's own tolerance where looser)."""
    return iterate_once(problem, u, gradient, case.drive.flow_rate, "newton",
                        max(case.solver.tolerance, MESH_ERROR_TOLERANCE),
                        case.solver.max_iterations, [], 0)


def _mesh_error(case: Case, solution: Solution):
    """The mesh's share of the error of a 2-D regularised solve: the same regularised
    problem (same parameter) solved on a mesh half as fine. Returns the summary's
    entries and ``(problem, u, gradient)`` of that coarse solve (None if there is none).

    Estimate ``|Q_h - Q_2h| / |Q_h|``, the Richardson estimate for first-order
    convergence: near yield surfaces the solution is only C^1, so P2 converges at about
    first order in the flow rate there, and ``p = 1`` is the cautious choice.
    """
    domain = solution.domain
    if domain.shape not in ("rectangle", "annulus") or domain.cells < 8:
        return {}, None
    parameter = solution.model.regularisation_parameter
    sequenced = solution.coarse
    if (sequenced is not None and sequenced.domain.cells == domain.cells // 2
            and sequenced.model.regularisation_parameter == parameter):
        # the grid-sequencing solve is that problem, solved to a loose tolerance: a
        # Newton step or two finish it, on its own mesh, plan and AMG hierarchy
        # (160k-unknown duct: 0.85 s -> 0.2 s)
        problem = sequenced.problem()
        u, gradient = sequenced.u, sequenced.pressure_gradient
    else:
        fixed = replace(case, fluid=replace(case.fluid, regularisation_parameter=parameter))
        # the meshes are nested: the fine solution at the coarse dofs is within O(h^3) of
        # the coarse one, so a few Newton steps at the same regularisation replace a
        # sequenced, continued solve of its own (20 s -> 4 s for a 160k-unknown duct)
        coarse_domain = build_domain(fixed, domain.cells // 2)
        problem = _problem(fixed, coarse_domain, solution.model)
        problem.rate_floor = solution.problem().rate_floor
        problem.linear = LinearSolver(case.solver.linear_solver, problem.free.size,
                                      dimension=coarse_domain.dimension)
        u = interpolated(solution, coarse_domain)
        for wall in coarse_domain.walls.values():
            u[wall.dofs] = wall.value
        gradient = solution.pressure_gradient
    coarse = _estimate_solve(case, problem, u, gradient)
    if not coarse.converged:
        return {"mesh_error_estimate": None}, None
    fine_q = solution.problem().flow_rate(solution.u)
    coarse_q = problem.flow_rate(coarse.u)
    if case.drive.flow_rate is not None:
        fine_q, coarse_q = solution.pressure_gradient, coarse.gradient
    return {"mesh_error_estimate": abs(fine_q - coarse_q) / max(abs(fine_q), 1e-300),
            "mesh_error_estimate_definition": (
                f"relative change of the headline quantity between {domain.cells} and "
                f"{domain.cells // 2} cells at the same regularisation (first order "
                f"assumed)")}, (problem, coarse.u, coarse.gradient)
