"""Viscous heating: the momentum balance coupled with the fully developed energy balance.

In the asymptotic state where conduction to the walls removes the heat that shearing
generates (no axial convection: long dies and slow flows, the "fully developed thermal"
limit), the temperature ``T`` over the section obeys

    -div(k grad T) = eta(gamma, T) gamma^2          (viscous dissipation as the source)

with ``T`` prescribed on heated or cooled walls and no heat flux through insulated ones,
while the momentum balance keeps its form with the viscosity now a function of ``T`` too.
The temperature enters by time-temperature superposition (Ferry, *Viscoelastic
Properties of Polymers*, ch. 11; as :func:`gnflow.temperature.at_temperature`):
``eta(gamma, T) = a(T) eta_ref(a(T) gamma)``, with the shift factor ``a(T)`` of the
fluid's Arrhenius law or of the exponential law ``a = exp(-b (T - T_ref))`` (Nahme's law).

Weak forms (area weight ``A``, rate factor ``s``; :mod:`gnflow.geometry`):

    R_u[v]   = int A s^2 eta grad u . grad v + G int A v
    R_T[psi] = int A k grad T . grad psi - int A eta g^2 psi,       g = s |grad u|

Newton's method runs on both fields at once, with the exact Jacobian

    J_uu = the isothermal consistent tangent at T
    J_uT = int A s^2 (d eta/dT) dT grad u . grad v
    J_Tu = -int A s^2 (g d eta/dg + 2 eta) (grad u . grad du) psi
    J_TT = int A k grad dT . grad psi - int A (d eta/dT) g^2 dT psi

where ``d eta/dT = (d ln a/dT) a tau_ref'(a g)``. The coupled system is not symmetric, so
it is solved by a sparse LU factorisation.

**Thermal runaway.** When the drive is a pressure gradient (stress-controlled), the
dissipation grows faster with temperature than conduction can remove it beyond a critical
drive, and no steady solution exists (a turning point of the solution branch: the
Frank-Kamenetskii / Bratu problem; Gavis & Laurence 1968, Ind. Eng. Chem. Fundam. 7, for
the flows between moving surfaces). :func:`solve_heated` reaches the drive by
continuation, and when the branch turns before the drive is reached it reports the
bracket of the critical drive instead of a bare failure to converge.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from skfem import BilinearForm, LinearForm, asm
from skfem.helpers import dot, grad

from ..errors import CaseError
from ..geometry import Domain, build_domain, wall_force_shares
from .solution import Iteration, Solution
from ..specs import HeatSpec, TemperatureShift  # noqa: F401  (TemperatureShift re-exported)

#: shear rates are floored smoothly at this fraction of the flow's rate scale, as in the
#: isothermal solver (gnflow.solver.assembly.RATE_FLOOR), so the tangent stays finite
RATE_FLOOR = 1e-9

#: at most this many continuation steps in the drive (the halving rule of
#: DriveContinuation ends a turned branch within about 25)
MAX_CONTINUATION_STEPS = 120

#: Newton iterations allowed per continuation step: from the secant predictor a step
#: converges in 2-8 (measured on the tests' cases); one that needs more is better halved
STEP_ITERATIONS = 15


@dataclass
class HeatedSolution(Solution):
    """A solution with its temperature field at the dofs (K) and the heating numbers."""

    temperature: np.ndarray | None = None
    heat: dict = field(default_factory=dict)
    spec: HeatSpec | None = None    # as solved: its reference model carries the regularisation

    def local_viscosity(self, rate, temperature):
        """The local apparent viscosity (Pa s) at shear rates ``rate`` (1/s) and
        temperatures ``temperature`` (K): ``eta(g, T) = a(T) eta_ref(a(T) g)``, the law
        the coupled balance solves (time-temperature superposition, module docstring)."""
        rate = np.asarray(rate, dtype=float)
        shift = self.spec.shift.shift(np.asarray(temperature, dtype=float)) \
            if self.spec.shift else np.ones_like(rate)
        return shift * self.spec.reference_model.viscosity(shift * rate)


# --------------------------------------------------------------------------- weak forms

@BilinearForm
def momentum_tangent(du, v, w):
    """J_uu: the isothermal consistent tangent with the local temperature."""
    return w.viscous * dot(grad(du), grad(v)) + w.along * (
        dot(w.grad_u, grad(du)) * dot(w.grad_u, grad(v)))


@BilinearForm
def momentum_temperature(dT, v, w):
    """J_uT: how a temperature change alters the viscous force."""
    return w.thermal * dT * dot(w.grad_u, grad(v))


@BilinearForm
def dissipation_velocity(du, psi, w):
    """J_Tu: how a velocity change alters the heat generated."""
    return -w.heating * dot(w.grad_u, grad(du)) * psi


@BilinearForm
def energy_tangent(dT, psi, w):
    """J_TT: conduction, less the change of dissipation with temperature."""
    return w.conduction * dot(grad(dT), grad(psi)) - w.source_slope * dT * psi


@LinearForm
def momentum_residual(v, w):
    return w.viscous * dot(w.grad_u, grad(v)) + w.pressure_gradient * w.area * v


@LinearForm
def energy_residual(psi, w):
    return w.conduction * dot(w.grad_T, grad(psi)) - w.source * psi


@LinearForm
def weighted_integral(v, w):
    return w.area * v


@LinearForm
def operator_diagonal(v, w):
    """The diagonal of a diffusion operator with coefficient ``w.coefficient``."""
    return w.coefficient * dot(grad(v), grad(v))


# --------------------------------------------------------------------------- the problem

class HeatedProblem:
    """The coupled discrete problem on one domain: residuals and the Newton Jacobian."""

    def __init__(self, domain: Domain, heat: HeatSpec, rate_scale: float):
        self.domain = domain
        self.heat = heat
        self.model = heat.reference_model
        basis = domain.basis
        x = np.asarray(basis.global_coordinates())
        self.area = domain.area_weight(x)
        self.s2 = domain.rate_factor(x) ** 2
        self.floor2 = (RATE_FLOOR * rate_scale) ** 2
        self.load = asm(weighted_integral, basis, area=self.area)
        n = basis.N
        self.size = n
        self.fixed_u = domain.wall_dofs
        heated = [domain.walls[name].dofs for name in heat.wall_temperature]
        self.fixed_T = np.unique(np.concatenate(heated)) if heated else np.array([], int)
        self.free_u = np.setdiff1d(np.arange(n), self.fixed_u)
        self.free_T = np.setdiff1d(np.arange(n), self.fixed_T)
        # the unknown is the rise above this temperature, not the absolute temperature:
        # round-off then scales with the rise (often a fraction of a kelvin), not with T
        temperatures = list(heat.wall_temperature.values())
        self.base_temperature = float(np.mean(temperatures)) if temperatures else 0.0

    def boundary_values(self, speed_factor: float = 1.0):
        u = np.zeros(self.size)
        for wall in self.domain.walls.values():
            u[wall.dofs] = speed_factor * wall.value
        T = np.zeros(self.size)
        # corners shared by walls at different temperatures take the later wall's value;
        # the mesh resolves the jump as well as it can (it is a singular point)
        for name, value in self.heat.wall_temperature.items():
            T[self.domain.walls[name].dofs] = value - self.base_temperature
        return u, T

    def coefficients(self, u, T):
        """Coefficients at the quadrature points; ``T`` is the rise above
        :attr:`base_temperature`."""
        basis = self.domain.basis
        grad_u = basis.interpolate(u).grad
        temperature = np.asarray(basis.interpolate(T)) + self.base_temperature
        temperature = np.maximum(temperature, 1.0)   # an iterate is never below 1 K
        law = self.heat.shift
        a = law.shift(temperature) if law else np.ones_like(temperature)
        dlna = law.log_shift_derivative(temperature) if law else np.zeros_like(temperature)
        g = np.sqrt(self.s2 * np.sum(grad_u ** 2, axis=0) + self.floor2)
        with np.errstate(over="ignore", invalid="ignore"):
            eta = a * self.model.viscosity(a * g)
            eta_g = a * a * self.model.viscosity_derivative(a * g)
            eta_T = dlna * a * self.model.stress_derivative(a * g)
        A, s2 = self.area, self.s2
        return {
            "grad_u": grad_u, "grad_T": basis.interpolate(T).grad, "rate": g, "eta": eta,
            "viscous": A * s2 * eta, "along": A * s2 * s2 * eta_g / g,
            "thermal": A * s2 * eta_T, "heating": A * s2 * (g * eta_g + 2 * eta),
            "conduction": A * self.heat.conductivity, "source": A * eta * g * g,
            "source_slope": A * eta_T * g * g, "area": A,
        }

    def residuals(self, u, T, G, c=None):
        c = c or self.coefficients(u, T)
        basis = self.domain.basis
        r_u = asm(momentum_residual, basis, viscous=c["viscous"], grad_u=c["grad_u"],
                  pressure_gradient=G, area=c["area"])
        r_T = asm(energy_residual, basis, conduction=c["conduction"], grad_T=c["grad_T"],
                  source=c["source"])
        return r_u, r_T, c

    def jacobian(self, c):
        basis = self.domain.basis
        J_uu = asm(momentum_tangent, basis, viscous=c["viscous"], along=c["along"],
                   grad_u=c["grad_u"])
        J_uT = asm(momentum_temperature, basis, thermal=c["thermal"], grad_u=c["grad_u"])
        J_Tu = asm(dissipation_velocity, basis, heating=c["heating"], grad_u=c["grad_u"])
        J_TT = asm(energy_tangent, basis, conduction=c["conduction"],
                   source_slope=c["source_slope"])
        fu, fT = self.free_u, self.free_T
        return sp.bmat([[J_uu[fu][:, fu], J_uT[fu][:, fT]],
                        [J_Tu[fT][:, fu], J_TT[fT][:, fT]]], format="csc")

    def relative_residual(self, r_u, r_T, c, G) -> float:
        """The larger of the two balances' residuals, each over the size of its terms.

        Both are measured in the norm scaled by the operator's diagonal, ``|D^-1/2 r|``,
        as in the isothermal solver (gnflow.solver.assembly.Problem.relative_residual):
        on graded meshes the plain norm stalls at round-off well above the tolerance.
        """
        basis = self.domain.basis
        weight_u = 1.0 / np.sqrt(asm(operator_diagonal, basis, coefficient=c["viscous"]))
        weight_T = 1.0 / np.sqrt(asm(operator_diagonal, basis, coefficient=c["conduction"]))
        viscous = asm(momentum_residual, basis, viscous=c["viscous"], grad_u=c["grad_u"],
                      pressure_gradient=0.0, area=c["area"])
        scale_u = max(np.linalg.norm(viscous * weight_u),
                      np.linalg.norm(G * self.load * weight_u), 1e-300)
        heat = asm(weighted_integral, basis, area=c["source"])
        scale_T = max(np.linalg.norm(heat * weight_T), 1e-300)
        return max(np.linalg.norm((r_u * weight_u)[self.free_u]) / scale_u,
                   np.linalg.norm((r_T * weight_T)[self.free_T]) / scale_T)


def _newton(problem: HeatedProblem, u, T, G, target, tol, max_iterations, history, start):
    """Coupled Newton with backtracking on the residual; returns (u, T, G, converged, its)."""
    fu, fT = problem.free_u, problem.free_T
    nu, nT = fu.size, fT.size
    iteration = start

    def merit(u_, T_, G_):
        r_u, r_T, c = problem.residuals(u_, T_, G_)
        value = problem.relative_residual(r_u, r_T, c, G_)
        if target is not None:
            value = max(value, abs(problem.load @ u_ - target) / abs(target))
        return (value if np.isfinite(value) else math.inf), r_u, r_T, c

    current, r_u, r_T, c = merit(u, T, G)
    for _ in range(max_iterations):
        if current <= tol:
            return u, T, G, True, iteration
        iteration += 1
        J = problem.jacobian(c)
        rhs = -np.concatenate([r_u[fu], r_T[fT]])
        if target is not None:   # the pressure gradient as one more unknown (bordered)
            column = np.concatenate([problem.load[fu], np.zeros(nT)])
            row = np.concatenate([problem.load[fu], np.zeros(nT)])
            J = sp.bmat([[J, column[:, None]], [row[None, :], None]], format="csc")
            rhs = np.append(rhs, target - problem.load @ u)
        try:
            step_vector = spla.spsolve(J, rhs)
        except (RuntimeError, ValueError):
            return u, T, G, False, iteration
        if not np.all(np.isfinite(step_vector)):
            return u, T, G, False, iteration
        du, dT = np.zeros_like(u), np.zeros_like(T)
        du[fu], dT[fT] = step_vector[:nu], step_vector[nu:nu + nT]
        dG = step_vector[-1] if target is not None else 0.0
        step = 1.0
        while step > 1e-4:
            trial = merit(u + step * du, T + step * dT, G + step * dG)
            if trial[0] < (1 - 1e-4 * step) * current or trial[0] <= tol:
                break
            step *= 0.5
        else:
            return u, T, G, False, iteration
        u, T, G = u + step * du, T + step * dT, G + step * dG
        current, r_u, r_T, c = trial
        history.append(Iteration(iteration, "newton", current, step, G))
    return u, T, G, current <= tol, iteration


# --------------------------------------------------------------------------- continuation

@dataclass
class DriveContinuation:
    """Reaches the case's drive in steps of a load factor ``lam`` in (0, 1].

    The drive (pressure gradient, flow rate or wall speeds) is ``lam`` times the case's.
    Each step starts from the last converged state; a failed step is halved. When the step
    falls below ``smallest`` before ``lam = 1`` the solution branch has turned (no steady
    state beyond it): :attr:`critical` then brackets the critical load factor.
    """

    step: float = 1.0
    smallest: float = 1e-3
    reached: float = 0.0
    critical: tuple[float, float] | None = None

    def next(self) -> float | None:
        if self.reached >= 1.0 or self.critical is not None:
            return None
        return min(1.0, self.reached + self.step)

    def accept(self, lam: float) -> None:
        self.reached = lam
        self.step = min(2 * self.step, 1.0)

    #: before any step has converged, halving stops here: a case that fails at 1/64 of
    #: its drive from the isothermal start is not near a turning point but far beyond it
    first_smallest: float = 1.0 / 64

    def reject(self, lam: float) -> None:
        self.step *= 0.5
        floor = self.smallest if self.reached > 0 else self.first_smallest
        if self.step < floor:
            self.critical = (self.reached, lam)


def _scaled_case(case, lam: float):
    """The case with its drive (pressure gradient, flow rate, wall speeds) times ``lam``."""
    d = case.drive
    drive = replace(d, pressure_gradient=None if d.pressure_gradient is None
                    else lam * d.pressure_gradient,
                    flow_rate=None if d.flow_rate is None else lam * d.flow_rate,
                    wall_speed={k: lam * v for k, v in d.wall_speed.items()},
                    inner_angular_speed=lam * d.inner_angular_speed,
                    outer_angular_speed=lam * d.outer_angular_speed)
    return replace(case, drive=drive)


def solve_heated(case, heat: HeatSpec, domain: Domain | None = None, cells: int | None = None,
                 progress=None) -> HeatedSolution:
    """Solve the coupled momentum and energy balances of a case with a ``[heat]`` section.

    Newton on both fields, the drive reached by continuation (:class:`DriveContinuation`)
    with a secant predictor; the first state is the isothermal flow at the mean wall
    temperature. Never raises for non-convergence.
    """
    from ..temperature import at_temperature
    from . import solve as isothermal_solve
    from .scales import characteristic_rate

    started = time.perf_counter()
    domain = domain or build_domain(case, cells)
    if not heat.wall_temperature:
        raise CaseError("heat.insulated", message=(
            "heat.insulated: at least one wall must have a temperature; with every wall "
            "insulated the heat generated has nowhere to go and no steady state exists"))
    mean_wall_T = float(np.mean(list(heat.wall_temperature.values())))
    a0 = float(heat.shift.shift(np.array(mean_wall_T))) if heat.shift else 1.0
    isothermal = replace(case, heat=None, fluid=replace(
        case.fluid, model=at_temperature(heat.reference_model, a0)))
    first = isothermal_solve(isothermal, domain=domain)
    # the model as the isothermal solve regularised it, back at the law's reference
    heat = replace(heat, reference_model=at_temperature(first.model, 1.0 / a0))
    problem = HeatedProblem(domain, heat, characteristic_rate(case, domain,
                                                              heat.reference_model))
    spec, target = case.solver, case.drive.flow_rate
    history: list = []
    schedule = DriveContinuation()
    states: list[tuple] = []            # converged (lam, u, T, G), the last two kept
    used, converged, steps = 0, False, 0
    lam = schedule.next()
    # each continuation step gets the case's iteration budget (at most 40); the number of
    # steps is bounded by the halving rule of DriveContinuation (and this guard)
    while lam is not None and steps < MAX_CONTINUATION_STEPS:
        steps += 1
        scaled = _scaled_case(case, lam)
        if not states:
            start = first if lam == 1.0 else isothermal_solve(
                _scaled_case(isothermal, lam), domain=domain)
            guess = (start.u.copy(), problem.boundary_values(lam)[1], start.pressure_gradient)
        else:
            guess = _predicted(states, lam)
        u_b, T_b = problem.boundary_values(lam)
        u0, T0, G0 = guess
        u0[problem.fixed_u], T0[problem.fixed_T] = u_b[problem.fixed_u], T_b[problem.fixed_T]
        if target is None:
            G0 = scaled.drive.pressure_gradient or 0.0
        u, T, G, ok, used = _newton(problem, u0, T0, G0, scaled.drive.flow_rate,
                                    spec.tolerance, min(STEP_ITERATIONS, spec.max_iterations), history, used)
        if ok:
            states = (states + [(lam, u, T, G)])[-2:]
            schedule.accept(lam)
            converged = lam >= 1.0
            if progress:
                progress(Iteration(used, "newton", 0.0, lam, G))
        else:
            schedule.reject(lam)
        lam = schedule.next()
    if states:
        _, u, T, G = states[-1]
    else:
        u, T, G = first.u, problem.boundary_values()[1], first.pressure_gradient
    return _solution(case, domain, heat, problem, u, T, G, converged, used, history,
                     schedule, time.perf_counter() - started)


def _predicted(states, lam):
    """Secant predictor from the last two converged states (the last one alone at first)."""
    if len(states) == 1:
        _, u, T, G = states[-1]
        return u.copy(), T.copy(), G
    (l0, u0, T0, G0), (l1, u1, T1, G1) = states
    t = (lam - l1) / (l1 - l0)
    return u1 + t * (u1 - u0), T1 + t * (T1 - T0), G1 + t * (G1 - G0)


def _solution(case, domain, heat, problem, u, T, G, converged, used, history, schedule,
              seconds) -> HeatedSolution:
    r_u, r_T, c = problem.residuals(u, T, G)
    residual = problem.relative_residual(r_u, r_T, c, G)
    T = T + problem.base_temperature
    warnings = []
    # the wall shear stress from the coupled balance's own reaction (the isothermal
    # problem's reaction would use the viscosity at the wall temperature everywhere)
    shares = wall_force_shares(domain)
    wall_stress = {name: -float(shares[name][1] @ r_u[shares[name][0]]) / wall.perimeter
                   for name, wall in domain.walls.items()}
    if domain.kind == "rotational":
        wall_stress = {name: abs(float(np.sum(r_u[wall.dofs]))) / (wall.perimeter * wall.position)
                       for name, wall in domain.walls.items()}
    if converged:
        message = f"converged in {used} iterations (relative residual {residual:.2e})"
    elif schedule.critical is not None:
        low, high = schedule.critical
        drive, unit = _drive_of(case)
        if case.drive.pressure_gradient and case.drive.flow_rate is None:
            cause = ("thermal runaway: the heat generated outgrows what conduction to the "
                     "walls removes")
        else:
            cause = "the solution branch turns (a fold in the drive)"
        message = (f"not converged: no steady solution beyond {low:.4g} to {high:.4g} of the "
                   f"drive ({low * drive:.5g} to {high * drive:.5g} {unit}); {cause}")
        if low == 0.0:
            message = (f"not converged: no steady heated solution even at {high:.3g} of the "
                       f"drive ({high * drive:.4g} {unit}); check the drive and sizes")
        warnings.append(message)
    else:
        message = (f"not converged after {used} iterations (relative residual "
                   f"{residual:.2e}); the drive reached {schedule.reached:.3g} of the case's")
    lam = schedule.reached if not converged else 1.0
    mean_wall_T = float(np.mean(list(heat.wall_temperature.values())))
    area = float(problem.load.sum())
    mean_T = float(problem.load @ T) / area
    numbers = {
        "max_temperature": float(np.max(T)),
        "mean_temperature": mean_T,
        "mean_wall_temperature": mean_wall_T,
        "max_temperature_rise": float(np.max(T) - mean_wall_T),
        "mean_temperature_rise": mean_T - mean_wall_T,
        "load_factor_reached": lam,
        "critical_load_factor": list(schedule.critical) if schedule.critical else None,
        "dissipation_per_length": float(asm(weighted_integral, domain.basis,
                                            area=c["source"]).sum()),
        "wall_shear_stress": wall_stress,
    }
    numbers.update(_dimensionless(case, domain, heat, problem, u, c, mean_wall_T))
    model = heat.reference_model
    if heat.shift is not None:
        from ..temperature import at_temperature
        model = at_temperature(heat.reference_model,
                               float(heat.shift.shift(np.array(mean_wall_T))))
    return HeatedSolution(case, domain, model, u, float(G) if domain.kind == "axial" else 0.0,
                          bool(converged), used, float(residual), history, message, seconds,
                          None, warnings, math.sqrt(problem.floor2),
                          temperature=T, heat=numbers, spec=heat)


def _dimensionless(case, domain, heat, problem, u, c, wall_T) -> dict:
    """Nahme-Griffith and Brinkman numbers from the flow's own scales.

    ``Na = beta eta V^2 / k`` with ``beta = -d ln(eta)/dT`` at the mean wall temperature,
    ``V`` the characteristic speed (the largest speed in the section) and ``eta`` the
    apparent viscosity at the mean wall shear rate scale ``V / L``; ``Na > 1`` means the
    heating changes the viscosity by a factor of order e (Pearson 1985, *Mechanics of
    Polymer Processing*, ch. 4 — recalled from memory). ``Br = eta V^2 / (k dT_w)`` needs a
    wall temperature difference ``dT_w`` and is given only when the walls differ.
    """
    speed = float(np.max(np.abs(u * (domain.basis.doflocs[0] if domain.kind != "axial"
                                     else 1.0))))
    L = domain.length_scale
    rate = max(speed / L, 1e-300)
    eta = float(heat.reference_model.viscosity(np.array([rate]))[0])
    beta = heat.shift.sensitivity(wall_T) if heat.shift else 0.0
    out = {"nahme_griffith_number": beta * eta * speed ** 2 / heat.conductivity,
           "characteristic_speed": speed}
    temperatures = list(heat.wall_temperature.values())
    spread = max(temperatures) - min(temperatures)
    out["brinkman_number"] = (eta * speed ** 2 / (heat.conductivity * spread)
                              if spread > 0 else None)
    return out


def _drive_of(case) -> tuple[float, str]:
    """The case's drive as one number and its unit, for messages."""
    d = case.drive
    if d.flow_rate is not None:
        return d.flow_rate, "m^3/s"
    if d.pressure_gradient:
        return d.pressure_gradient, "Pa/m"
    if d.inner_angular_speed or d.outer_angular_speed:
        return d.inner_angular_speed or d.outer_angular_speed, "rad/s"
    return max(d.wall_speed.values(), key=abs, default=0.0), "m/s (wall speed)"
