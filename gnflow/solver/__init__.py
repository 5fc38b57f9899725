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
until it reaches the value chosen from the case's own scales (see
:func:`default_regularisation`).
"""


from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np

from .. import rheology
from ..case import Case
from ..geometry import Domain, build_domain
from .assembly import (RATE_FLOOR, AssemblyPlan, Problem, area_integral, axial_momentum,  # noqa: F401
                       axial_residual, axial_tangent, stiffness_diagonal)
from .linear import DIRECT_LIMIT, DIRECT_LIMIT_2D, LinearSolver  # noqa: F401
from .newton import initial_state, newton, picard, picard_step
from .scales import (REGULARISATION_SHARPNESS, characteristic_rate, default_regularisation,  # noqa: F401
                     expected_to_yield, invert_flow_curve)
from .sequencing import SEQUENCING_LIMIT, interpolated
from .solution import Iteration, Solution, _History  # noqa: F401


def solve(case: Case, cells: int | None = None, domain: Domain | None = None,
          estimate_regularisation: bool = True, progress=None) -> Solution:
    """Solve a case; returns a :class:`Solution` (converged or not, never raises for
    non-convergence).

    >>> from gnflow.case import Case
    >>> case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 1.0},
    ...     "geometry": {"shape": "slit", "gap": 1.0}, "drive": {"pressure_gradient": -12.0}})
    >>> round(solve(case).summary()["flow_rate"], 9)   # -G h^3 / (12 mu) per unit width
    1.0
    """
    started = time.perf_counter()
    domain = domain or build_domain(case, cells)
    coarse = None
    if (domain.dimension == 2 and domain.shape in ("rectangle", "annulus")
            and domain.dofs > SEQUENCING_LIMIT and domain.cells >= 4
            and case.fluid.model.name != "newtonian"):  # a linear problem: one solve
        # the coarse solution is only a start: a loose tolerance there suffices
        rough = replace(case, solver=replace(case.solver,
                                             tolerance=max(case.solver.tolerance, 1e-6)))
        coarse = solve(rough, cells=domain.cells // 2, estimate_regularisation=False,
                       progress=progress)
        if not coarse.converged:
            coarse = None
    spec = case.solver
    model = case.fluid.model
    history = _History(progress)   # progress(entry) is called on every iteration
    rate = characteristic_rate(case, domain, model)
    yields = expected_to_yield(case, domain, model)
    regularisation = None
    yield_stress = model.is_yield_stress
    user_parameter = case.fluid.regularisation_parameter
    if yield_stress:
        # The stress-consistent start (see initial_state) is close enough for Newton at
        # the target sharpness, so the solve starts there; if that fails it begins again
        # soft and sharpens by continuation.
        def regularised_start(softening):
            start = default_regularisation(model, rate) * (
                softening if model.regularisation == "papanastasiou" else 1 / softening)
            if user_parameter is not None:
                start = min(start, user_parameter) if model.regularisation == \
                    "papanastasiou" else max(start, user_parameter)
            return model.with_regularisation(start)
        sharp_start = True   # cleared when the sharp start has failed once
        soft_model = regularised_start(1e-3)
        model = regularised_start(1.0) if sharp_start else soft_model
    if coarse is not None and yield_stress:
        model = coarse.model  # already regularised as sharply as the flow needs
    problem = Problem(domain, model)
    problem.rate_floor = RATE_FLOOR * rate
    problem.linear = LinearSolver(spec.linear_solver, problem.free.size,
                                  dimension=domain.dimension)
    if coarse is not None:
        u = interpolated(coarse, domain)
        for wall in domain.walls.values():
            u[wall.dofs] = wall.value
        gradient = coarse.pressure_gradient
    else:
        u, gradient = initial_state(problem, case, model, rate)
    target = case.drive.flow_rate
    iterate = newton if spec.method == "newton" else picard
    budget = spec.max_iterations
    used = 0
    converged = False
    stages = 0
    final_stage = not yield_stress
    step = 10.0          # how much sharper each continuation stage makes the regularisation
    last_good = None     # (u, gradient, model) of the last stage that converged
    papanastasiou = yield_stress and model.regularisation == "papanastasiou"
    while True:
        # intermediate stages of the regularisation continuation need only be rough, and
        # get a bounded share of the iterations so that a hard stage can be retried
        tolerance = spec.tolerance if final_stage else max(spec.tolerance, 1e-6)
        allowance = budget - used if final_stage else min(budget - used, 40)
        try:
            u_new, g_new, converged, used = iterate(problem, u, gradient, target, tolerance,
                                                    allowance, history, used)
        except (RuntimeError, np.linalg.LinAlgError, ValueError) as err:
            # a singular or non-finite system: report it as a failure to converge
            converged, u_new, g_new = False, u, gradient
            failure = f"the linear solver failed ({err})"
            history.append(Iteration(used, spec.method, math.inf, 0.0, gradient))
        else:
            failure = None
        if converged:
            u, gradient = u_new, g_new
        if not yield_stress or used >= budget:
            break
        if not converged:
            if last_good is None and sharp_start:
                # the sharp start failed: begin again, soft, and continue from there
                sharp_start, model = False, soft_model
                problem.model = model
                u, gradient = initial_state(problem, case, model, rate)
                continue
            if last_good is None or step < 1.2:
                break
            # the stage was too big a jump: go back and sharpen more gently
            u, gradient, model = last_good
            step = math.sqrt(step)
            final_stage = False
        else:
            last_good = (u, gradient, model)
            largest = float(np.max(problem.shear_rate(u)))
            # a fluid that barely yields (or not at all) creeps with vanishing rates: the
            # regularisation is never made sharper than the case's own rate scale needs
            scale = max(largest, (1e-3 if yields else 1.0) * rate)
            wanted = user_parameter if user_parameter is not None else \
                default_regularisation(case.fluid.model, scale)
            current = model.regularisation_parameter
            done = (current >= wanted * (1 - 1e-9)) if papanastasiou else \
                (current <= wanted * (1 + 1e-9))
            if done:
                if final_stage:
                    break
                final_stage = True
                continue
        stages += 1
        current = model.regularisation_parameter
        following = min(current * step, wanted) if papanastasiou else \
            max(current / step, wanted)
        model = model.with_regularisation(following)
        problem.model = model
    problem.model = model
    if yield_stress:
        estimate = _regularisation_error(problem, u, gradient, target, spec) \
            if converged and estimate_regularisation else None
        regularisation = {"method": model.regularisation,
                          "parameter": model.regularisation_parameter,
                          "unit": model.regularisation_unit,
                          "chosen": "user" if user_parameter is not None else "automatic",
                          "continuation_stages": stages,
                          "error_estimate": estimate,
                          "error_estimate_definition": (
                              "relative change of the flow rate (torque) when the "
                              "regularisation is made half as sharp; the error of a "
                              "regularisation falls as 1/sharpness, so this estimates it")}
    residual = problem.relative_residual(u, gradient)
    converged = converged and residual <= spec.tolerance
    if converged:
        message = f"converged in {used} iterations (relative residual {residual:.2e})"
    elif failure:
        message = (f"not converged: {failure} after {used} iterations; last relative "
                   f"residual {residual:.2e}")
    else:
        message = (f"not converged: {spec.method} reached {used} of {spec.max_iterations} "
                   f"iterations with relative residual {residual:.2e} "
                   f"(tolerance {spec.tolerance:.1e})")
        if spec.method == "picard":
            message += "; try solver.method = \"newton\""
        else:
            message += "; try more solver.max_iterations or a finer mesh"
    solution = Solution(case, domain, model, u,
                        float(gradient) if domain.kind == "axial" else 0.0,
                        bool(converged), used, float(residual), history, message,
                        time.perf_counter() - started, regularisation, [], problem.rate_floor)
    solution.linear_solver = {"method": problem.linear.method,
                              "amg_setups": problem.linear.setups,
                              "cg_iterations": sum(problem.linear.cg_iterations)}
    solution.coarse = coarse
    problem.model = model
    solution._problem = problem
    return solution


def _regularisation_error(problem: Problem, u, gradient, target, spec) -> float | None:
    """Relative change of the flow rate (or torque) with the regularisation half as sharp."""
    model = problem.model
    factor = 0.5 if model.regularisation == "papanastasiou" else 2.0
    softer = problem.sibling(model.with_regularisation(model.regularisation_parameter * factor))
    # an estimate of a 1e-4-sized effect to two digits: a residual of 1e-7 is enough
    u2, g2, ok, _ = newton(softer, u.copy(), gradient, target, max(spec.tolerance, 1e-7), 50,
                            [], 0)
    if not ok:
        return None
    if problem.domain.kind == "rotational":
        inner = problem.domain.walls["inner"].dofs
        sharp = problem.internal_force(u)[inner].sum()
        soft = softer.internal_force(u2)[inner].sum()
    elif target is not None:
        sharp, soft = gradient, g2
    else:
        sharp, soft = problem.flow_rate(u), softer.flow_rate(u2)
    return float(abs(soft - sharp) / max(abs(sharp), 1e-300))
