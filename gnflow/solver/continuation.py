"""Regularisation continuation for yield-stress fluids, and the estimate of the error the
regularisation leaves.

A regularised yield-stress model (Papanastasiou exponent ``m``, or the bi-viscous critical
rate) is solved first at the sharpness the case's rate scale calls for; if Newton fails
there, the solve starts again soft and the regularisation is sharpened stage by stage.
:class:`RegularisationSchedule` is that state machine; :func:`continue_regularisation`
drives the nonlinear iteration through it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .. import rheology
from .assembly import Problem
from .newton import newton, picard
from .scales import default_regularisation

#: Exceptions a nonlinear iteration can raise on a degenerate or non-finite system; each
#: ends the solve as "not converged" with its message, never as a traceback.
NUMERICAL_FAILURES = (ArithmeticError, RuntimeError, ValueError, np.linalg.LinAlgError)


@dataclass(frozen=True)
class Stage:
    """One continuation stage: the model to solve and how tightly."""

    model: rheology.Model
    final: bool


@dataclass
class RegularisationSchedule:
    """Which regularisation to solve next, given how the last stage went.

    ``sharper(p)`` is the parameter one step sharper than ``p`` (Papanastasiou: larger
    exponent; bi-viscous: smaller critical rate); ``reached(p, wanted)`` says whether ``p``
    is at least as sharp as ``wanted``. After a failed stage the step shrinks to its
    square root (the jump was too big); below ``smallest_step`` the schedule gives up.

    >>> s = RegularisationSchedule("papanastasiou", step=10.0)
    >>> s.sharper(1.0, wanted=50.0), s.sharper(10.0, wanted=50.0)
    (10.0, 50.0)
    >>> s.back_off(), s.step
    (True, 3.1622776601683795)
    """

    method: str
    step: float = 10.0
    smallest_step: float = 1.2
    stages: int = 0

    @property
    def grows(self) -> bool:
        """Whether a sharper regularisation has the larger parameter."""
        return self.method == "papanastasiou"

    def sharper(self, parameter: float, wanted: float) -> float:
        if self.grows:
            return min(parameter * self.step, wanted)
        return max(parameter / self.step, wanted)

    def reached(self, parameter: float, wanted: float) -> bool:
        if self.grows:
            return parameter >= wanted * (1 - 1e-9)
        return parameter <= wanted * (1 + 1e-9)

    def softened(self, parameter: float, factor: float) -> float:
        """``parameter`` made ``factor`` times softer (factor > 1)."""
        return parameter / factor if self.grows else parameter * factor

    def back_off(self) -> bool:
        """Shrink the step after a failed stage; False once it is too small to try."""
        if self.step < self.smallest_step:
            return False
        self.step = math.sqrt(self.step)
        return True


@dataclass
class Outcome:
    """Where a nonlinear solve ended."""

    u: np.ndarray
    gradient: float
    model: rheology.Model
    converged: bool
    iterations: int
    failure: str | None = None
    stages: int = 0


def iterate_once(problem: Problem, u, gradient, target, method: str, tolerance: float,
                 allowance: int, history, used: int) -> Outcome:
    """One call of Newton or Picard; a numerical failure ends it as not converged."""
    iterate = newton if method == "newton" else picard
    try:
        u_new, g_new, converged, used = iterate(problem, u, gradient, target, tolerance,
                                                allowance, history, used)
    except NUMERICAL_FAILURES as err:
        return Outcome(u, gradient, problem.model, False, used,
                       f"the {method} iteration failed ({_one_line(err)})")
    if converged and not (np.all(np.isfinite(u_new)) and math.isfinite(g_new)):
        converged = False
    if not converged:
        finite = np.all(np.isfinite(u_new)) and math.isfinite(g_new)
        return Outcome(u_new if finite else u, g_new if finite else gradient, problem.model,
                       False, used, None if finite else "the iterate became non-finite")
    return Outcome(u_new, g_new, problem.model, True, used)


def _one_line(err: Exception) -> str:
    text = " ".join(str(err).split()) or type(err).__name__
    return text if len(text) <= 120 else text[:117] + "..."


def continue_regularisation(problem: Problem, start, soft_start, target, spec, history,
                            wanted_for) -> Outcome:
    """Solve a regularised yield-stress problem, sharpening by continuation if needed.

    ``start`` is ``(u, gradient)`` for the sharp model already set on ``problem``;
    ``soft_start()`` returns ``(u, gradient, model)`` for a restart with a soft model;
    ``wanted_for(u)`` is the parameter the converged flow ``u`` calls for.
    Intermediate stages are solved to 1e-6 with at most 40 iterations each, so that a
    hard stage leaves iterations for a gentler retry.

    A start whose model is already as sharp as its flow calls for (a grid-sequencing
    start carries the coarse level's final model) is solved to the tolerance in one
    Newton call. Solved first to 1e-6 and then again, the second call's first step
    took the loosest linear tolerance, not the one its residual history asked for, and
    lost a step: 160k-unknown duct, Herschel-Bulkley, residuals 4.7e-5, 7.0e-7 (1e-6
    reached), 3.0e-9, 3.0e-13.
    """
    schedule = RegularisationSchedule(problem.model.regularisation)
    u, gradient = start
    used, restarted = 0, False
    final = schedule.reached(problem.model.regularisation_parameter, wanted_for(u))
    last_good = None    # (u, gradient, model) of the last stage that converged
    budget = spec.max_iterations
    while True:
        tolerance = spec.tolerance if final else max(spec.tolerance, 1e-6)
        # a first stage keeps iterations back for a softer restart, final or not
        allowance = budget - used if final and last_good is not None else \
            min(budget - used, 40)
        out = iterate_once(problem, u, gradient, target, spec.method, tolerance, allowance,
                           history, used)
        used = out.iterations
        if out.converged:
            u, gradient = out.u, out.gradient
        if used >= budget:
            break
        if not out.converged:
            if last_good is None and not restarted:
                restarted = True
                u, gradient, problem.model = soft_start()
                continue
            if last_good is None or not schedule.back_off():
                break
            u, gradient, problem.model = last_good
            final = False
        else:
            last_good = (u, gradient, problem.model)
            wanted = wanted_for(u)
            if schedule.reached(problem.model.regularisation_parameter, wanted):
                if final:
                    break
                final = True
                continue
            final = False   # solved to the tolerance, but the flow calls for sharper
        schedule.stages += 1
        problem.model = problem.model.with_regularisation(
            schedule.sharper(problem.model.regularisation_parameter, wanted))
    return replace(out, u=u, gradient=gradient, model=problem.model, iterations=used,
                   stages=schedule.stages)


def sharpness_wanted(problem: Problem, case_model: rheology.Model, user_parameter,
                     rate: float, yields: bool):
    """``wanted_for(u)``: the parameter a converged flow ``u`` calls for.

    A fluid that barely yields (or not at all) creeps with vanishing rates: the
    regularisation is never made sharper than the case's own rate scale needs.
    """
    def wanted_for(u) -> float:
        if user_parameter is not None:
            return user_parameter
        largest = float(np.max(problem.shear_rate(u)))
        scale = max(largest, (1e-3 if yields else 1.0) * rate)
        return default_regularisation(case_model, scale)
    return wanted_for


@dataclass(frozen=True)
class RegularisationError:
    """The regularisation's share of the error in the solve's headline quantity.

    ``estimate``: relative error; ``observed_ratio``: ``r = 2^p``, the ratio of
    successive changes of ``Q`` that halving the sharpness twice would show, with ``p``
    the observed order of the error in the softening; ``reliable``: whether ``r`` shows
    the asymptotic behaviour the estimate relies on.
    """

    estimate: float
    observed_ratio: float
    reliable: bool

    #: how the estimate is formed, for the summary
    definition = (
        "linearised sensitivity to the regularisation: with the sharpness m divided by a "
        "softening factor L, the derivatives Q' and Q'' of the headline quantity Q (flow "
        "rate, pressure gradient or torque) at L = 1 follow from the converged Newton "
        "tangent; for an error C L^p they give the order p = 1 + Q''/Q' and the error "
        "|Q'|/p (an error falling as 1/m has p = 1). Reported ratio r = 2^p; where r < "
        "1.25 the error is not in that regime and the estimate (the change a four-fold "
        "softening would cause) is not reliable")


#: Relative steps of the softening factor for the finite differences of the residual
#: and the headline quantity: the first derivative by central differences (truncation
#: 1e-6, round-off 1e-13 of the forces), the second along the sensitivity direction
#: (truncation 1e-4, round-off 1e-12): both far below the two digits an estimate needs.
FIRST_STEP, SECOND_STEP = 1e-3, 1e-2
#: Relative tolerances of the two sensitivity solves (first and second derivative). The
#: estimate is reported to two digits; on square ducts at 240 cells (estimate on 120,
#: AMG, 2026-12-04; Herschel-Bulkley with yield stresses 2, 10 and 20 Pa, and a Bingham
#: fluid at a given flow rate) the estimates with (3e-4, 3e-3) are within 0.06 % of
#: those with (1e-6, 1e-4) and the observed ratios within 0.2 %, for 30-37 % fewer CG
#: iterations (107 + 64 -> 67 + 43 at a yield stress of 20 Pa).
SENSITIVITY_RTOL = (3e-4, 3e-3)


def regularisation_error(problem: Problem, u, gradient, target, spec) -> RegularisationError | None:
    """Estimate of the regularisation error of a converged solve from its sensitivity to
    the regularisation (None if the linear solves fail).

    Softening the regularisation by a factor ``L`` (Papanastasiou ``m/L``, bi-viscous
    critical rate ``L gamma_c``), the regularised solution moves along ``u(L)`` with
    ``R(u(L), G(L), L) = 0``. Its derivatives at ``L = 1`` solve linear systems with the
    converged tangent ``J`` (one factorisation or AMG hierarchy, reused):

        J u' = -R_L,    J u'' = -d^2/de^2 R(u + e u', G + e G', 1 + e)

    (a flow-rate target adds ``G`` as unknown with ``int a u'' = 0``). For a Bingham
    fluid the regularised flow differs from the exact one by ``O(1/m)`` where the
    yielded region is well developed, so ``Q(L) = Q_exact - C L^p`` with ``p = 1``; near
    the flow-stop limit the order falls (the creeping plug dominates), which
    ``p = 1 + Q''/Q'`` detects. The error is ``|Q'|/p`` for ``p >= log2(1.25)``, never
    crediting more than ``p = 1``. The linear solves are as tight as the two digits of
    the estimate need (SENSITIVITY_RTOL), never tighter than ``spec.tolerance`` asks of
    the solve itself.
    """
    model = problem.model
    schedule = RegularisationSchedule(model.regularisation)

    def softened(factor: float) -> Problem:
        return problem.sibling(model.with_regularisation(
            schedule.softened(model.regularisation_parameter, factor)))
    free, fixed_gradient = problem.free, target is None
    first_rtol = max(spec.tolerance, SENSITIVITY_RTOL[0])
    second_rtol = max(spec.tolerance, SENSITIVITY_RTOL[1])
    try:
        problem.linear.prepare(problem.tangent(u))
        if not fixed_gradient:
            unit = problem.linear.solve(-problem.load[free], first_rtol)

        def sensitivity(rhs, rtol):
            """(du, dG) with J du + dG load = -rhs and, with a target, int a du = 0."""
            du = np.zeros_like(u)
            du[free] = problem.linear.solve(-rhs[free], rtol)
            if fixed_gradient:
                return du, 0.0
            dg = -float(problem.load[free] @ du[free]) / float(problem.load[free] @ unit)
            du[free] += dg * unit
            return du, dg
        h = FIRST_STEP
        first = (softened(1 + h).residual(u, gradient)
                 - softened(1 - h).residual(u, gradient)) / (2 * h)
        du, dg = sensitivity(first, first_rtol)
        e = SECOND_STEP
        curvature = (softened(1 + e).residual(u + e * du, gradient + e * dg)
                     - 2 * problem.residual(u, gradient)
                     + softened(1 - e).residual(u - e * du, gradient - e * dg)) / e ** 2
        ddu, ddg = sensitivity(curvature, second_rtol)
    except NUMERICAL_FAILURES:
        return None
    q0 = _headline(problem, u, gradient, target)
    plus = _headline(softened(1 + e), u + e * du + 0.5 * e * e * ddu,
                     gradient + e * dg + 0.5 * e * e * ddg, target)
    minus = _headline(softened(1 - e), u - e * du + 0.5 * e * e * ddu,
                      gradient - e * dg + 0.5 * e * e * ddg, target)
    slope, bend = (plus - minus) / (2 * e), (plus - 2 * q0 + minus) / e ** 2
    scale = max(abs(q0), 1e-300)
    if not all(math.isfinite(v) for v in (q0, slope, bend)):
        return None
    if slope == 0.0:
        return RegularisationError(0.0, 2.0, True)
    order = 1.0 + bend / slope
    ratio = 2.0 ** min(max(order, -60.0), 60.0)
    reliable = ratio >= 1.25
    if reliable:
        estimate = abs(slope) / min(order, 1.0)
    else:
        # the change a four-fold softening causes at this order: a lower bound
        estimate = abs(slope) * (math.log(4.0) if order <= 1e-9 else (4.0 ** order - 1) / order)
    return RegularisationError(float(estimate / scale), float(ratio), bool(reliable))


def _headline(problem: Problem, u, gradient, target) -> float:
    """The quantity whose error is estimated: torque, pressure gradient or flow rate."""
    if problem.domain.kind == "rotational":
        return float(problem.internal_force(u)[problem.domain.walls["inner"].dofs].sum())
    if target is not None:
        return float(gradient)
    return problem.flow_rate(u)
