"""Newton and Picard iterations over the apparent viscosity, the line search, and the
stress-consistent initial state."""

from __future__ import annotations

import math

import numpy as np

from .. import rheology
from ..case import Case
from .assembly import Problem
from .line_flow import flow_curve_rates, line_solution
from .solution import Iteration


def newton(problem: Problem, u, gradient, target_rate, tol, max_iterations, history,
            start_iteration):
    """Newton with backtracking on the residual; returns (u, G, converged, iterations).

    The steps are primal-dual (:class:`DualStress`) where that state can be formed; a
    primal-dual step that does not reduce the residual by 10 % is replaced by the primal
    Newton step from the same iterate, so the iteration never does worse than primal
    Newton with its line search. The convergence test is the residual of ``u`` alone.
    """
    fixed_gradient = target_rate is None
    iteration = start_iteration
    dual_ok = (type(problem) is Problem and problem.model.name != "newtonian"
               and not problem.model.is_yield_stress)   # why: see DualStress
    dual = DualStress(problem, u) if dual_ok else None

    def merit(u_, g_, progress_from=None):
        # the round-off share (an extra pass over the elements) is taken out only where
        # it can decide the test: a raw residual within the tolerance passes either way,
        # and while the iteration makes progress (the residual at least halves from
        # ``progress_from``) so does one above the tolerance by more than
        # ROUND_OFF_MARGIN times the share last found (|r - b| >= |r| - |b|; near the
        # solution the share, the rounding of the state, changes little from one iterate
        # to the next; a stalling iteration, which a larger share would explain, always
        # measures it afresh)
        r = problem.relative_residual(u_, g_, beyond_round_off=False)
        level = problem.round_off_level
        if not r <= tol and (level is None or progress_from is None
                             or not r <= 0.5 * progress_from
                             or r - ROUND_OFF_MARGIN * level <= tol):
            r = problem.relative_residual(u_, g_)
        if fixed_gradient:
            return r
        return max(r, abs(problem.flow_rate(u_) - target_rate) / abs(target_rate))

    def direction(J, r, forcing):
        """The Newton correction (du, dG) of the system (J, r), bordered for a target."""
        problem.linear.prepare(J)
        du = np.zeros_like(u)
        du[problem.free] = problem.linear.solve(-r[problem.free], forcing)
        d_gradient = 0.0
        if not fixed_gradient:
            dg = np.zeros_like(u)
            dg[problem.free] = problem.linear.solve(-problem.load[problem.free], 1e-10)
            d_gradient = (target_rate - problem.flow_rate(u) - problem.flow_rate(du)) / \
                problem.flow_rate(dg)
            du += d_gradient * dg
        if d_gradient == 0.0 and not np.any(du):
            # a nonzero residual whose correction is exactly zero: the velocities the
            # balance asks for lie below the floating-point range (they underflow)
            raise FloatingPointError("the Newton correction underflows to zero: the "
                                     "velocities are below the floating-point range")
        return du, d_gradient

    def primal_system():
        return problem.tangent(u), problem.residual(u, gradient)

    current = merit(u, gradient)
    previous = current
    for _ in range(max_iterations):
        if current <= tol:
            return u, gradient, True, iteration
        iteration += 1
        forcing = forcing_term(current, previous, tol, iteration == start_iteration + 1)
        previous = current
        system = None
        if dual is not None and not dual.fresh:
            system = dual.linearised(u, gradient)
            if system is None:
                # its rates could not be found: primal Newton from here on
                dual, dual_ok = None, False
        fresh = system is None
        du, d_gradient = direction(*(system or primal_system()), forcing)
        # the full Newton step when it reduces the residual (quadratic convergence near
        # the solution), else the minimum of the dissipation along the direction
        step = 1.0
        trial_u, trial_g = u + du, gradient + d_gradient
        trial = merit(trial_u, trial_g, current)
        if not trial < 0.9 * current and not fresh:
            # the primal-dual step fails: the primal Newton step from u instead
            dual = DualStress(problem, u)
            du, d_gradient = direction(*primal_system(), forcing)
            trial_u, trial_g = u + du, gradient + d_gradient
            trial = merit(trial_u, trial_g, current)
        if not trial < 0.9 * current:
            step = line_search(problem, u, gradient, du, d_gradient)
            trial_u, trial_g = u + step * du, gradient + step * d_gradient
            trial = merit(trial_u, trial_g)
        elif dual is None and trial > POOR_STEP * current:
            # a poor full primal step: the shorter one may overshoot less (POOR_STEP)
            short_u = u + SHORTER_STEP * du
            short_g = gradient + SHORTER_STEP * d_gradient
            short = merit(short_u, short_g, current)
            if short < trial:
                step, trial_u, trial_g, trial = SHORTER_STEP, short_u, short_g, short
        if not np.isfinite(trial):
            history.append(Iteration(iteration, "newton", current, 0.0, gradient))
            return u, gradient, False, iteration
        if dual is not None and trial > tol:
            if step == 1.0:
                dual.advance(du)
            else:   # a damped step: the linearised stress is no guide; start afresh
                dual = DualStress(problem, trial_u)
        u, gradient, current = trial_u, trial_g, trial
        history.append(Iteration(iteration, "newton", current, step, gradient,
                                 getattr(problem.model, "regularisation_parameter", None)))
        if step < 1e-3:
            # the Newton direction no longer reduces the residual: a Picard step moves on
            u, gradient = picard_step(problem, u, gradient, target_rate)
            current = merit(u, gradient)
            history.append(Iteration(iteration, "picard", current, 1.0, gradient))
            dual = DualStress(problem, u) if dual_ok else None
    return u, gradient, current <= tol, iteration


class DualStress:
    """The stress at the quadrature points carried as an unknown of its own: the state of
    a primal-dual Newton iteration.

    Primal Newton linearises the flow curve ``tau = S(gamma) = eta(|gamma|) gamma`` at
    the current rates ``gamma = s grad u``. For a shear-thinning fluid that linearisation
    is good only within a fraction of the rate itself, so where the rate vanishes (the
    centre and the corners of a duct) a start whose rates there are off by a factor (as
    a coarse-mesh solution's are: the rate there, ~r^2, is not resolved) costs one step
    per halving of that factor. Measured on a 160k-unknown square duct, power law
    n = 0.5: 11 fine-level steps, the residual falling linearly from 4e-5 to 1.3e-6 over
    8 of them. The primal-dual method (Chan, Golub & Mulet 1999, SIAM J. Sci. Comput.
    20, for total-variation problems of the same structure) keeps the stress field
    ``tau`` and linearises the inverse relation ``gamma = H(tau)`` instead, which is
    mild where the rate vanishes. With the rate ``h = H(|tau|)`` on the flow curve and
    ``C = DH^-1``, the flow curve's tangent at ``h`` in the direction ``n = tau/|tau|``,
    one step solves

        int a s (tau + C (s grad u - H(tau)) + C s grad du) . grad v + G int a v = 0,
        tau <- tau + C (s grad (u + du) - H(tau)),

    whose matrix is the primal tangent's form at the rate ``h`` and direction ``n``
    (symmetric positive definite for a monotone flow curve). Its fixed points are the
    primal ones (``tau = S(s grad u)``). A fresh state (``tau = S(s grad u)``) gives the
    primal Newton step. The rate floor of the problem (``sqrt(g^2 + floor^2)``) is part
    of the flow curve inverted here, so both iterations solve the same equations.

    Not used for yield-stress fluids: at the knee of a regularised flow curve (stress
    just above the yield stress) it is the inverse relation that is steep, a small error
    of the stress moves the rate by decades, and the primal-dual steps converged more
    slowly than the primal ones (40k-unknown square duct, Herschel-Bulkley n = 0.5:
    residual 1.7e-4, 1.1e-5, 9.2e-8 against 3.8e-4, 6.4e-6, 1.3e-9).
    """

    def __init__(self, problem: Problem, u):
        self.problem = problem
        self.u = u
        self.fresh = True
        self.tau = self.rate = self._parts = None

    def _flow_curve(self, rate):
        """Viscosity and ``eta'(r) g^2 / r`` (the tangent's extra term along ``n``) at the
        rates ``g``, with ``r = sqrt(g^2 + floor^2)``."""
        model, floor = self.problem.model, self.problem.rate_floor
        floored = np.sqrt(rate * rate + floor * floor)
        eta = model.viscosity(floored)
        return eta, model.viscosity_derivative(floored) * rate * (rate / floored)

    def linearised(self, u, pressure_gradient):
        """(matrix, residual) of the step from ``u`` of a state that is not fresh (a fresh
        one's is the primal tangent and residual), or None if the state's rates cannot
        be found or are not finite."""
        p = self.problem
        size = np.sqrt(np.sum(self.tau * self.tau, axis=0))
        guess = self.rate
        if p.model.name == "power-law":
            # the rates without the floor, in closed form: where the floor is negligible
            # (all but the points of vanishing stress) the inversion ends in one step
            with np.errstate(all="ignore"):
                closed = (size / p.model.consistency) ** (1.0 / p.model.flow_index)
            guess = np.where(np.isfinite(closed) & (closed > 0), closed, guess)
        rate = flow_curve_rates(p.model, p.rate_floor, size, guess)
        if rate is None:
            return None
        eta, along = self._flow_curve(rate)
        normal = self.tau / np.where(size > 0, size, 1.0)
        gamma = p.rate_factor * p.state_gradient(u)
        mismatch = _tangent_times(eta, along, normal, gamma - rate * normal)
        weight = p.area_weight * p.rate_factor
        with np.errstate(all="ignore"):
            flux = weight * (self.tau + mismatch)
            if not all(np.all(np.isfinite(c)) for c in (rate, eta, along, flux)):
                return None
        self.rate, self._parts = rate, (eta, along, normal, mismatch)
        scale = weight * p.rate_factor
        matrix = p.plan.matrix(scale * eta, scale * along, normal)
        return matrix, p.plan.force(flux) + pressure_gradient * p.load

    def advance(self, du) -> None:
        """The stress after the full step ``du`` from the state's iterate (the state is
        no longer fresh)."""
        p = self.problem
        if self.fresh:
            # the primal relation at u, formed only now: a step that ends the iteration
            # never needs it
            gamma = p.rate_factor * p.state_gradient(self.u)
            rate = np.sqrt(np.sum(gamma * gamma, axis=0))
            eta, along = self._flow_curve(rate)
            self.tau = eta * gamma
            self.rate = rate
            normal = gamma / np.where(rate > 0, rate, 1.0)
            mismatch = 0.0
        else:
            eta, along, normal, mismatch = self._parts
        change = _tangent_times(eta, along, normal, p.rate_factor * p.plan.gradient(du))
        self.tau = self.tau + change + mismatch
        self.fresh, self.u, self._parts = False, None, None


def _tangent_times(eta, along, normal, v):
    """``C v = eta v + along (n . v) n``: the flow curve's tangent applied to ``v``."""
    return eta * v + along * np.sum(normal * v, axis=0) * normal


#: Loosest linear tolerance of a Newton step. Eisenstat & Walker (1996, SIAM J. Sci.
#: Comput. 17) allow up to 0.9; here one Newton step (tangent assembly, residuals, a
#: line-search trial) costs as much as several preconditioned CG iterations, so a loose
#: step buys little. Measured on 40k-unknown square ducts (AMG, 2026-12-02, 2 loaded
#: cores; CPU seconds of power law + Herschel-Bulkley + Carreau): cap 0.1: 14.6,
#: 1e-2: 13.3, 1e-3: 13.7, 1e-4: 15.7.
FORCING_MAX = 1e-2
#: A full primal step that reduces the residual by less than POOR_STEP is compared with
#: the step SHORTER_STEP times as long, and the better one is taken. Near a yield surface
#: the full step overshoots: along the first Newton directions from a grid-sequencing
#: start (160k-unknown duct, Herschel-Bulkley) the residual ratio at lengths 0.5, 0.75,
#: 1 and 1.25 was 0.47, 0.23, 0.28, 0.52 and then 0.34, 0.10, 0.38, 0.65. Taking the
#: shorter step there cut the fine-level steps from 6 to 4 (2026-12-03); over nine
#: yield-stress cases (square, rectangle, eccentric annulus, pipe, slit) the Newton steps
#: of all levels fell from 216 to 204, none of the finest levels needed more.
POOR_STEP = 0.2
SHORTER_STEP = 0.75
#: The last Newton step's linear solve aims FORCING_MARGIN times below the tolerance: near
#: the solution the step's nonlinear remainder is far smaller (quadratic convergence),
#: so the linear residual decides, and aiming lower only solves past the tolerance.
#: Square ducts at 160k unknowns, tolerance 1e-10 (2026-12-04), fine-level CG iterations
#: with a margin of 1000 / 10: Herschel-Bulkley 81 / 64 (final residual 1.0e-12 /
#: 5.9e-12), power law n = 1.5 37 / 32, power law n = 0.5 53 / 53; Carreau 30 / 30 but
#: 57 / 46 over all levels; no case took another step, flow rates equal to 11 digits.
FORCING_MARGIN = 10.0
#: See newton.merit: the round-off share of a residual is computed again unless the raw
#: residual exceeds the tolerance by this many times the share at the last state where
#: it was computed
ROUND_OFF_MARGIN = 4.0


def forcing_term(current: float, previous: float, tol: float, first: bool) -> float:
    """Relative tolerance of the linear solve of a Newton step (inexact Newton).

    Eisenstat-Walker choice 2, ``0.9 (r_k / r_{k-1})^2``, kept below FORCING_MAX and
    above the tolerance that takes the residual FORCING_MARGIN times below ``tol`` (no
    tighter is ever needed); the first step has no history and takes FORCING_MAX.
    """
    floor = max(tol / (FORCING_MARGIN * max(current, 1e-300)), 1e-12)
    wanted = FORCING_MAX if first else 0.9 * (current / previous) ** 2
    return min(FORCING_MAX, max(wanted, floor))


def line_search(problem: Problem, u, gradient, du, d_gradient) -> float:
    """Step length along a Newton direction: the minimum of the dissipation functional.

    For a fixed pressure gradient the problem is the minimisation of the convex
    functional ``Phi(u) = int a Psi(g) dx + G int a u dx`` with ``Psi' = tau``, whose
    directional derivative is ``R(u + t du) . du``. With a flow-rate target every step
    keeps the flow rate (the constraint is linear), so the same derivative applies. The
    step is 1 unless ``Phi`` rises before it; then a few false-position steps find the
    root of the derivative.
    """
    free = problem.free

    def slope(t):
        value = float(problem.residual(u + t * du, gradient + t * d_gradient)[free] @ du[free])
        return value if np.isfinite(value) else math.inf

    s0 = slope(0.0)
    if not s0 < 0:
        return 1.0
    s1 = slope(1.0)
    if s1 <= 0.25 * abs(s0):
        return 1.0
    low, high, s_low, s_high = 0.0, 1.0, s0, s1
    t = 1.0
    for _ in range(12):
        if math.isinf(s_high):
            t = 0.5 * (low + high)
        else:
            t = low - s_low * (high - low) / (s_high - s_low)
            t = min(max(t, low + 0.02 * (high - low)), high - 0.02 * (high - low))
        st = slope(t)
        if abs(st) <= 0.25 * abs(s0):
            return t
        if st < 0:
            low, s_low = t, st
        else:
            high, s_high = t, st
    return t


def picard_step(problem: Problem, u, gradient, target_rate, coefficient=None):
    """Solve with the viscosity frozen at ``u`` (or with a given coefficient field)."""
    if coefficient is None:
        coefficient = problem.frozen_coefficient(u)
    base = problem.boundary_values()
    problem.linear.prepare(problem.frozen(coefficient))
    lift = problem.frozen_action(coefficient, base)[problem.free]
    guess = u[problem.free] if problem.linear.method == "amg" else None
    if target_rate is None:
        new = base.copy()
        new[problem.free] = problem.linear.solve(-lift - gradient * problem.load[problem.free],
                                                 1e-12, guess)
        return new, gradient
    # u = u_walls + G * u_unit: the flow rate is affine in G for a frozen viscosity
    walls = base.copy()
    walls[problem.free] = problem.linear.solve(-lift, 1e-12)
    unit = np.zeros_like(u)
    unit[problem.free] = problem.linear.solve(-problem.load[problem.free], 1e-12)
    new_gradient = (target_rate - problem.flow_rate(walls)) / problem.flow_rate(unit)
    return walls + new_gradient * unit, new_gradient


def picard(problem, u, gradient, target_rate, tol, max_iterations, history, start_iteration):
    iteration = start_iteration
    for _ in range(max_iterations):
        residual = problem.relative_residual(u, gradient)
        constraint = 0.0 if target_rate is None else abs(
            problem.flow_rate(u) - target_rate) / abs(target_rate)
        if max(residual, constraint) <= tol:
            return u, gradient, True, iteration
        iteration += 1
        u, gradient = picard_step(problem, u, gradient, target_rate)
        history.append(Iteration(iteration, "picard", problem.relative_residual(u, gradient),
                                 1.0, gradient))
    residual = problem.relative_residual(u, gradient)
    return u, gradient, residual <= tol, iteration


def initial_state(problem: Problem, case: Case, model: rheology.Model, rate: float):
    """The start of the nonlinear iteration: the exact solution of a 1-D flow driven by a
    pressure gradient or by wall motion (:func:`line_solution`), else a Newtonian solution
    with the model's viscosity at the characteristic rate, refined by one Picard step
    with the viscosity of the Newtonian stress field."""
    if hasattr(problem, "slip_start"):
        # slipping walls: the no-slip start, then the slip its wall stresses call for
        return problem.slip_start(initial_state(problem.without_slip(), case, model, rate),
                                  case.drive.flow_rate)
    gradient = case.drive.pressure_gradient or 0.0
    domain = problem.domain
    if (domain.dimension == 1 and type(problem) is Problem
            and case.drive.flow_rate is None and model.name != "newtonian"
            and not (model.is_yield_stress and domain.shape in ("slit", "pipe"))):
        # The start is the exact solution made the discrete one cell by cell
        # (line_solution), which Newton then only confirms (1000-case power-law pipe
        # sweep: 3000 Newton steps -> 0, CPU 1.9-2.0 s -> 0.8-0.9 s; 2026-12-04). In an
        # annulus the Newtonian zero-stress radius is not the fluid's, and even the exact
        # start saved most of the damped steps (bench/one_solve.py, inner wall moving:
        # Bingham 18/6, Herschel-Bulkley 16/2, power law n = 0.5 6/3; walls fixed:
        # Bingham 26/7, Herschel-Bulkley 15/5); rotational flows 2-3/1 (2026-12-03).
        # A regularised yield-stress fluid in a slit or a pipe keeps the start below:
        # there the Newtonian stress is the exact one (or, with a moving wall, close),
        # and Newton from it cost about as much as from the discrete start (2026-12-04,
        # bench/one_solve.py: slit Bingham 5 / 2 steps but 3.5 / 3.2 ms, Herschel-Bulkley
        # 3 / 2 steps, 2.8 / 3.4 ms; pipe 2.9 / 2.7 and 2.5 / 2.7 ms): at the plug's
        # edge the knee of the flow curve is a twentieth of a cell wide. Smooth fluids in
        # a slit: power law n = 0.5 3 -> 0 steps, 2.4 -> 1.7 ms; Carreau and Cross 1 ->
        # 0, 2.4 -> 2.2 ms.
        exact = line_solution(problem, model, gradient)
        if exact is not None:
            return exact, gradient
    reference = rheology.Newtonian(float(model.viscosity(np.array([rate]))[0]))
    newtonian = problem.sibling(reference)
    u, gradient = picard_step(newtonian, newtonian.boundary_values(), gradient,
                               case.drive.flow_rate)
    if model.name == "newtonian":
        return u, gradient
    if problem.domain.kind != "axial":
        # smooth fluids converge from the Newtonian start in a few iterations; a partly
        # yielded gap needs the statics-consistent start (else 70-100+ iterations)
        if not model.is_yield_stress:
            return u, gradient
        return _rotational_start(problem, newtonian, reference, model, u)
    # The Newtonian stress field is the exact one wherever statics fixes the stress (slit
    # and pipe without moving walls) and close to it elsewhere; the viscosity the model
    # has at that stress, point by point, gives a start far closer than any constant.
    rate_n = newtonian.shear_rate(u)
    stress = reference.viscosity_value * rate_n
    rates = _rates_at_stress(model, stress, np.maximum(rate_n, 1e-300))
    # at the rate floor, as the problem evaluates it: where the stress vanishes (slit
    # mid-plane, pipe axis) a power law with n = 0.1 has rates of 1e-35 1/s and viscosities
    # 30 decades above the wall's, and a linear solve with that coefficient is round-off
    floor = problem.rate_floor
    viscosity = model.viscosity(np.sqrt(rates * rates + floor * floor))
    if not np.all(np.isfinite(viscosity)) or not np.all(viscosity > 0):
        return u, gradient
    coefficient = problem.area_weight * problem.rate_factor ** 2 * viscosity
    return picard_step(problem, u, gradient, case.drive.flow_rate, coefficient)


def _rotational_start(problem: Problem, newtonian: Problem, reference, model, u):
    """A start for rotational flow from statics: the torque is constant across the gap,
    so the stress is ``M / (2 pi r^2)`` for every fluid, and only its size ``M`` is
    unknown. The Newtonian stress has that shape; it is scaled by the factor ``c`` at
    which the model's rates give the prescribed speed difference,
    ``int rate(c tau_N) / r dr = int rate_N / r dr``, and the viscosity at that stress,
    point by point, starts a Picard step."""
    rate_n = newtonian.shear_rate(u)
    stress = reference.viscosity_value * rate_n
    weight = problem.plan.dx / problem.rate_factor      # d(omega) = rate / r dr
    wanted = float(np.sum(rate_n * weight))
    if not (wanted > 0 and np.all(np.isfinite(stress))):
        return u, 0.0
    start = np.maximum(rate_n, 1e-300)

    def mismatch(log_c):
        return math.log(max(float(np.sum(_rates_at_stress(
            model, math.exp(log_c) * stress, start) * weight)), 1e-300)) - math.log(wanted)
    low, high = -40.0, 40.0
    if not mismatch(low) < 0 < mismatch(high):
        return u, 0.0
    from scipy.optimize import brentq
    scale = math.exp(brentq(mismatch, low, high, xtol=1e-3))   # a start: 0.1 % will do
    rates = _rates_at_stress(model, scale * stress, start)
    viscosity = model.viscosity(np.maximum(rates, problem.rate_floor))
    if not np.all(np.isfinite(viscosity)) or not np.all(viscosity > 0):
        return u, 0.0
    coefficient = problem.area_weight * problem.rate_factor ** 2 * viscosity
    return picard_step(problem, u, 0.0, None, coefficient)


def _rates_at_stress(model: rheology.Model, stress, start) -> np.ndarray:
    """Shear rates at which the model's stress equals ``stress`` (array), by a
    safeguarded Newton iteration on log(rate), vectorised; a few digits suffice here."""
    stress, start = np.broadcast_arrays(np.asarray(stress, dtype=float),
                                        np.asarray(start, dtype=float))
    target = np.log(np.maximum(stress, 1e-300)).ravel()
    log_rate = np.log(start).ravel()   # a new array: ravel of a fresh result
    active = np.arange(log_rate.size)
    with np.errstate(all="ignore"):
        for _ in range(30):
            # only the points not yet converged: a point of vanishing stress (on an axis
            # of symmetry) walks toward the floor in clipped steps and would keep every
            # other point iterating
            rate = np.exp(log_rate[active])
            tau = model.stress(rate)
            slope = model.stress_derivative(rate) * rate / np.maximum(tau, 1e-300)
            step = (np.log(np.maximum(tau, 1e-300)) - target[active]) / np.maximum(slope, 1e-3)
            log_rate[active] -= np.clip(step, -5.0, 5.0)
            active = active[~(np.abs(step) < 1e-6)]
            if active.size == 0:
                break
    return np.exp(np.clip(log_rate, -690, 690)).reshape(stress.shape)
