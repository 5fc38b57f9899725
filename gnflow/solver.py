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

import copy
import math
import time
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.optimize import brentq
from skfem import BilinearForm, LinearForm, asm
from skfem.helpers import dot, grad

from . import rheology
from .case import Case
from .geometry import Domain, build_domain

#: Shear rates below this fraction of the flow's rate scale are evaluated at the floor:
#: a power law with n < 1 has an infinite viscosity at zero rate (pipe axis, slit
#: mid-plane) and one with n > 1 a zero viscosity there, which would make the tangent
#: singular. The floor changes the velocity by less than floor * gap, far below the
#: discretisation error.
RATE_FLOOR = 1e-9

#: Papanastasiou exponent m (or the bi-viscous critical rate) is set so that
#: m * (largest shear rate of the flow) = REGULARISATION_SHARPNESS; the tests show the
#: flow-rate error against the exact Bingham solution stays below 0.1 % up to Bn = 10
#: (measured: the error falls as 1/sharpness, 4e-4 at Bn = 20 in a pipe).
REGULARISATION_SHARPNESS = 2e3


@BilinearForm
def axial_tangent(u, v, w):
    """Consistent Newton tangent of the momentum balance."""
    return w.coefficient * dot(grad(u), grad(v)) + w.tangent_coefficient * (
        dot(w.grad_state, grad(u)) * dot(w.grad_state, grad(v)))


@BilinearForm
def axial_momentum(u, v, w):
    """The momentum operator with the viscosity frozen (Picard)."""
    return w.coefficient * dot(grad(u), grad(v))


@LinearForm
def axial_residual(v, w):
    """Residual ``R(u)[v]`` for the pressure gradient ``G``."""
    return w.coefficient * dot(w.grad_state, grad(v)) + w.pressure_gradient * w.area_weight * v


@LinearForm
def stiffness_diagonal(v, w):
    """The diagonal of the frozen-viscosity operator, ``int a s^2 eta |grad v|^2``."""
    return w.coefficient * dot(grad(v), grad(v))


@LinearForm
def area_integral(v, w):
    """``int a v dx``: the flow rate of a field ``v`` (and the load of a unit G)."""
    return w.area_weight * v


@dataclass
class Iteration:
    iteration: int
    method: str
    residual: float
    step: float
    pressure_gradient: float
    regularisation_parameter: float | None = None


class _History(list):
    """The convergence history; each entry is also passed to a progress callback."""

    def __init__(self, progress=None):
        super().__init__()
        self.progress = progress

    def append(self, entry: Iteration) -> None:
        super().append(entry)
        if self.progress is not None:
            self.progress(entry)


@dataclass
class Solution:
    """The solved flow: the field ``u`` on ``domain.basis`` and how it was obtained."""

    case: Case
    domain: Domain
    model: rheology.Model            # the model as solved (with its regularisation)
    u: np.ndarray                    # axial velocity (m/s) or angular speed (rad/s) at dofs
    pressure_gradient: float         # dp/dz, Pa/m (0 for rotational flow)
    converged: bool
    iterations: int
    residual: float
    history: list[Iteration]
    message: str
    seconds: float = 0.0
    regularisation: dict | None = None
    warnings: list[str] = field(default_factory=list)
    rate_floor: float = 0.0
    linear_solver: dict = field(default_factory=dict)
    coarse: "Solution | None" = None   # the grid-sequencing solution this one started from
    _problem: "_Problem | None" = field(default=None, repr=False)
    #: derived fields, computed once by gnflow.post and shared by every output
    derived: dict = field(default_factory=dict, repr=False)

    def problem(self) -> "_Problem":
        """The discrete problem this solution solves (for post-processing)."""
        if self._problem is None:
            self._problem = _Problem(self.domain, self.model)
            self._problem.rate_floor = self.rate_floor
        return self._problem

    def summary(self) -> dict:
        """The dict written to ``summary.json`` (SI units)."""
        from .post import summarise  # post builds on the solver, not the other way round
        return summarise(self)


class AssemblyPlan:
    """Vectorised assembly of the forms above on one basis, for repeated use.

    The weak forms ``axial_tangent``, ``axial_momentum``, ``axial_residual`` and
    ``stiffness_diagonal`` define the discrete problem; scikit-fem's ``asm`` assembles
    them in general. A Newton solve assembles the same forms dozens of times on one mesh,
    so this plan stores the basis gradients at the quadrature points element by element,
    and the map from each element-matrix entry to its place in the CSR matrix of the free
    dofs, found once. Each assembly is then one batched matrix product and one
    ``bincount``, with no sparse-format conversion. ``tests/test_assembly.py`` checks the
    plan against ``asm`` of the forms.
    """

    def __init__(self, basis, free: np.ndarray):
        grads = np.array([basis.basis[i][0].grad for i in range(basis.Nbfun)])
        nb, dim, ne, nq = grads.shape
        self.dim, self.nq, self.size = dim, nq, basis.N
        # (elements, basis functions, dim * points): a batched matrix per element
        self.grads = np.ascontiguousarray(grads.transpose(2, 0, 1, 3).reshape(ne, nb, dim * nq))
        self.grads_squared = self.grads * self.grads
        self.dx = basis.dx
        self.dofs = basis.element_dofs.T.copy()                     # (elements, nb)
        index = -np.ones(basis.N, dtype=np.int64)
        index[free] = np.arange(free.size)
        local = index[self.dofs]
        rows = np.broadcast_to(local[:, :, None], (ne, nb, nb))
        cols = np.broadcast_to(local[:, None, :], (ne, nb, nb))
        self.keep = (rows >= 0) & (cols >= 0)
        keys = rows[self.keep] * free.size + cols[self.keep]
        unique, self.position = np.unique(keys, return_inverse=True)
        self.indices = (unique % free.size).astype(np.int32)
        counts = np.bincount(unique // free.size, minlength=free.size)
        self.indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
        self.free_size = free.size

    def gradient(self, u) -> np.ndarray:
        """grad u at the quadrature points, shape (dim, elements, points)."""
        values = np.matmul(u[self.dofs][:, None, :], self.grads)[:, 0, :]
        return values.reshape(-1, self.dim, self.nq).transpose(1, 0, 2)

    def _scatter(self, local) -> np.ndarray:
        return np.bincount(self.dofs.ravel(), weights=local.ravel(), minlength=self.size)

    def force(self, flux) -> np.ndarray:
        """``int flux . grad v`` for every dof; ``flux`` shape (dim, elements, points)."""
        weighted = (flux * self.dx).transpose(1, 0, 2).reshape(-1, self.dim * self.nq, 1)
        return self._scatter(np.matmul(self.grads, weighted)[:, :, 0])

    def diagonal(self, coefficient) -> np.ndarray:
        """``int coefficient |grad v|^2`` for every dof."""
        weight = np.tile(coefficient * self.dx, (1, self.dim))[:, :, None]
        return self._scatter(np.matmul(self.grads_squared, weight)[:, :, 0])

    def matrix(self, coefficient, tangent_coefficient=None, gradient=None) -> sp.csr_matrix:
        """The operator on the free dofs: ``int c grad du . grad v (+ t (g . grad du)(g . grad v))``."""
        weight = np.tile(coefficient * self.dx, (1, self.dim))[:, None, :]
        local = np.matmul(self.grads * weight, self.grads.transpose(0, 2, 1))
        if tangent_coefficient is not None:
            g = gradient.transpose(1, 0, 2).reshape(-1, 1, self.dim * self.nq)
            along = (self.grads * g).reshape(-1, self.grads.shape[1], self.dim, self.nq).sum(axis=2)
            weighted = along * (tangent_coefficient * self.dx)[:, None, :]
            local += np.matmul(weighted, along.transpose(0, 2, 1))
        data = np.bincount(self.position, weights=local[self.keep], minlength=self.indices.size)
        return sp.csr_matrix((data, self.indices, self.indptr),
                             shape=(self.free_size, self.free_size))


class _Problem:
    """The discrete problem on one domain with one model; assembles residual and tangent."""

    def __init__(self, domain: Domain, model: rheology.Model):
        self.domain = domain
        self.model = model
        basis = domain.basis
        x = np.asarray(basis.global_coordinates())
        self.area_weight = domain.area_weight(x)
        self.rate_factor = domain.rate_factor(x)
        self.load = asm(area_integral, basis, area_weight=self.area_weight)  # int a v
        self.fixed = domain.wall_dofs
        self.free = np.setdiff1d(np.arange(basis.N), self.fixed)
        self.rate_floor = 0.0
        self.linear = LinearSolver("direct", self.free.size)
        self._plan = None
        self._memo = None

    @property
    def plan(self) -> AssemblyPlan:
        if self._plan is None:
            self._plan = AssemblyPlan(self.domain.basis, self.free)
        return self._plan

    def boundary_values(self) -> np.ndarray:
        u = np.zeros(self.domain.basis.N)
        for wall in self.domain.walls.values():
            u[wall.dofs] = wall.value
        return u

    def shear_rate(self, u) -> np.ndarray:
        """Shear rate at the quadrature points, shape (elements, points)."""
        return self.rate_factor * np.sqrt(np.sum(self.plan.gradient(u) ** 2, axis=0))

    def _coefficients(self, u, tangent: bool):
        """grad u, the viscosity coefficient and (for the tangent) the derivative term at
        the quadrature points. The last state's values are kept: a Newton step evaluates
        the accepted iterate for its merit and again for the next tangent and residual.
        Iterates are never changed in place (each is a new array), so the identity of
        ``u`` (held here, so it cannot be reused) identifies the state."""
        key = (self.model, self.rate_floor)
        if self._memo is None or self._memo[0] is not u or self._memo[1] != key:
            gradient = self.plan.gradient(u)
            s2 = self.rate_factor ** 2
            # a smooth floor, sqrt(g^2 + floor^2), keeps the tangent continuous (RATE_FLOOR)
            rate = np.sqrt(s2 * np.sum(gradient ** 2, axis=0) + self.rate_floor ** 2)
            coefficient = self.area_weight * s2 * self.model.viscosity(rate)
            self._memo = [u, key, gradient, rate, coefficient, None]
        _, _, gradient, rate, coefficient, extra = self._memo
        if tangent and extra is None:
            s2 = self.rate_factor ** 2
            extra = self.area_weight * s2 * s2 * self.model.viscosity_derivative(rate) / rate
            self._memo[5] = extra
        return gradient, coefficient, extra if tangent else None

    def internal_force(self, u) -> np.ndarray:
        """``int a s^2 eta grad u . grad v``: the viscous force on each dof."""
        gradient, coefficient, _ = self._coefficients(u, False)
        return self.plan.force(coefficient * gradient)

    def residual(self, u, pressure_gradient) -> np.ndarray:
        return self.internal_force(u) + pressure_gradient * self.load

    def relative_residual(self, u, pressure_gradient) -> float:
        """Residual on the free dofs over the size of the forces in balance.

        Both are measured in the norm scaled by the operator's diagonal,
        ``|r|_D = |D^-1/2 r|``, an inexpensive stand-in for the energy dual norm. In the
        plug of a sharply regularised yield-stress fluid the viscosity is 1e3-1e4 times
        the yielded one and the velocity differences there sit at round-off level; the
        scaling weights each equation by its own stiffness so that those round-off
        residuals do not mask convergence elsewhere (nor fake it).
        """
        gradient, coefficient, _ = self._coefficients(u, False)
        internal = self.plan.force(coefficient * gradient)
        weight = 1.0 / np.sqrt(self.plan.diagonal(coefficient))
        residual = (internal + pressure_gradient * self.load)[self.free] * weight[self.free]
        scale = max(np.linalg.norm(internal * weight),
                    np.linalg.norm(pressure_gradient * self.load * weight), 1e-300)
        return float(np.linalg.norm(residual) / scale)

    def tangent(self, u) -> sp.csr_matrix:
        """The consistent Newton tangent on the free dofs."""
        gradient, coefficient, derivative = self._coefficients(u, True)
        return self.plan.matrix(coefficient, derivative, gradient)

    def frozen_coefficient(self, u) -> np.ndarray:
        return self._coefficients(u, False)[1]

    def frozen(self, coefficient) -> sp.csr_matrix:
        """The operator with a given viscosity coefficient, on the free dofs."""
        return self.plan.matrix(coefficient)

    def frozen_action(self, coefficient, v) -> np.ndarray:
        """The full operator with that coefficient applied to ``v`` (all dofs)."""
        return self.plan.force(coefficient * self.plan.gradient(v))

    def flow_rate(self, u) -> float:
        return float(self.load @ u)

    def sibling(self, model: rheology.Model) -> "_Problem":
        """The same discrete problem with another model (sharing the assembly plan)."""
        other = copy.copy(self)
        other.model = model
        other._memo = None
        return other


# --------------------------------------------------------------------------- linear algebra

#: Free unknowns above which "auto" chooses algebraic multigrid over a sparse direct solve
DIRECT_LIMIT = 60_000
DIRECT_LIMIT_2D = 12_000


class LinearSolver:
    """Solves the reduced (free-dof) systems of one nonlinear iteration.

    ``direct``: a sparse LU factorisation (SuperLU), reused for every right-hand side of
    the iteration. ``amg``: conjugate gradients preconditioned by a pyamg
    smoothed-aggregation hierarchy. The hierarchy is kept across Newton iterations (the
    tangent changes only through the viscosity) and rebuilt when CG needs more than
    ``rebuild_after`` iterations: rebuilding costs several CG solves, so it pays only
    once the old hierarchy has gone stale. The CG tolerance is the Newton forcing term
    (inexact Newton), so early iterations are solved loosely and late ones tightly.
    """

    def __init__(self, method: str, size: int, rebuild_after: int = 40, dimension: int = 1):
        if method == "auto":
            # 1-D systems are banded and factor in linear time; 2-D fill-in grows faster
            limit = DIRECT_LIMIT if dimension == 1 else DIRECT_LIMIT_2D
            method = "direct" if size <= limit else "amg"
        self.method = method
        self.rebuild_after = rebuild_after
        self.hierarchy = None
        self.preconditioner = None
        self.matrix = None
        self.factor = None
        self.cg_iterations: list[int] = []
        self.setups = 0

    def prepare(self, matrix: sp.csr_matrix) -> None:
        self.matrix = matrix
        if self.method == "direct":
            self.factor = spla.splu(matrix.tocsc())
        elif self.hierarchy is None or (self.cg_iterations and
                                        self.cg_iterations[-1] > self.rebuild_after):
            import pyamg
            self.hierarchy = pyamg.smoothed_aggregation_solver(
                matrix, symmetry="symmetric", max_coarse=500, coarse_solver="splu",
                # a local (Gershgorin-type) Jacobi weight needs no spectral-radius estimate
                smooth=("jacobi", {"weighting": "local"}))
            self.preconditioner = self.hierarchy.aspreconditioner(cycle="V")
            self.setups += 1

    def solve(self, rhs: np.ndarray, rtol: float = 1e-10, guess=None) -> np.ndarray:
        if self.method == "direct":
            return self.factor.solve(rhs)
        count = [0]

        def counter(_):
            count[0] += 1
        solution, info = spla.cg(self.matrix, rhs, x0=guess, rtol=rtol, maxiter=2000,
                                 M=self.preconditioner,
                                 callback=counter)
        self.cg_iterations.append(count[0])
        return solution


# --------------------------------------------------------------------------- scales

def invert_flow_curve(model: rheology.Model, stress: float) -> float:
    """The shear rate at which the model's stress equals ``stress`` (> 0)."""
    def gap(log_rate):
        return float(model.stress(np.array([math.exp(log_rate)]))[0]) - stress
    low, high = -60.0, 60.0
    if gap(low) >= 0:
        return math.exp(low)
    if gap(high) <= 0:
        return math.exp(high)
    return math.exp(brentq(gap, low, high, xtol=1e-10))


def characteristic_rate(case: Case, domain: Domain, model: rheology.Model) -> float:
    """A shear rate typical of the flow, from the drive and the fluid (1/s)."""
    L = domain.length_scale
    d = case.drive
    rates = []
    if domain.kind == "rotational":
        r_mean = 0.5 * (case.geometry.inner_radius + case.geometry.outer_radius)
        rates.append(abs(d.inner_angular_speed - d.outer_angular_speed) * r_mean / L)
    else:
        speeds = list(d.wall_speed.values()) + [0.0]
        if max(speeds) != min(speeds):
            rates.append((max(speeds) - min(speeds)) / L)
        if d.pressure_gradient:
            wall_stress = abs(d.pressure_gradient) * L / 2
            yield_stress = model.yield_stress if model.is_yield_stress else 0.0
            if wall_stress > 1.001 * yield_stress:
                # the rate the yielded fluid has at the wall
                rates.append(invert_flow_curve(_viscous_part(model), wall_stress - yield_stress))
            else:
                # it may not yield at all: a creep scale well below the viscous one
                rates.append(1e-3 * invert_flow_curve(_viscous_part(model), wall_stress))
        if d.flow_rate is not None:
            rates.append(6 * abs(d.flow_rate) / domain.area / L)
    return max(max(rates), 1e-300)


def expected_to_yield(case: Case, domain: Domain, model: rheology.Model) -> bool:
    """Whether the drive's wall-stress scale exceeds the yield stress (always true for
    flows driven by wall motion or a flow rate, which must yield somewhere)."""
    if not model.is_yield_stress or domain.kind != "axial" or not case.drive.pressure_gradient:
        return True
    if case.drive.wall_speed and any(case.drive.wall_speed.values()):
        return True
    return abs(case.drive.pressure_gradient) * domain.length_scale / 2 > model.yield_stress


def _viscous_part(model: rheology.Model) -> rheology.Model:
    """The model without its yield stress (for rate scales of yield-stress fluids)."""
    if model.is_yield_stress:
        return rheology.PowerLaw(model.consistency, model.flow_index)
    return model


def default_regularisation(model: rheology.Model, largest_rate: float) -> float:
    """The regularisation parameter for a flow whose largest shear rate is given.

    Papanastasiou exponent ``m = REGULARISATION_SHARPNESS / rate`` (s), or the
    bi-viscous critical rate ``rate / REGULARISATION_SHARPNESS`` (1/s).
    """
    if model.regularisation == "papanastasiou":
        return REGULARISATION_SHARPNESS / largest_rate
    return largest_rate / REGULARISATION_SHARPNESS


# --------------------------------------------------------------------------- iterations

def _newton(problem: _Problem, u, gradient, target_rate, tol, max_iterations, history,
            start_iteration):
    """Newton with backtracking on the residual; returns (u, G, converged, iterations)."""
    fixed_gradient = target_rate is None
    iteration = start_iteration

    def merit(u_, g_):
        r = problem.relative_residual(u_, g_)
        if fixed_gradient:
            return r, r
        constraint = abs(problem.flow_rate(u_) - target_rate) / abs(target_rate)
        return max(r, constraint), r

    current, residual = merit(u, gradient)
    previous = current
    for _ in range(max_iterations):
        if current <= tol:
            return u, gradient, True, iteration
        iteration += 1
        J = problem.tangent(u)
        r = problem.residual(u, gradient)
        problem.linear.prepare(J)
        # forcing term (Eisenstat-Walker choice 2 style): solve as tightly as the
        # nonlinear residual has just been reduced, never looser than 0.1
        forcing = min(0.1, max(0.9 * (current / previous) ** 2, 1e-3 * tol / max(current, 1e-300),
                               1e-12)) if iteration > start_iteration + 1 else 1e-2
        previous = current
        du = np.zeros_like(u)
        du[problem.free] = problem.linear.solve(-r[problem.free], forcing)
        d_gradient = 0.0
        if not fixed_gradient:
            dg = np.zeros_like(u)
            dg[problem.free] = problem.linear.solve(-problem.load[problem.free], 1e-10)
            d_gradient = (target_rate - problem.flow_rate(u) - problem.flow_rate(du)) / \
                problem.flow_rate(dg)
            du += d_gradient * dg
        # the full Newton step when it reduces the residual (quadratic convergence near
        # the solution), else the minimum of the dissipation along the direction
        step = 1.0
        trial_u, trial_g = u + du, gradient + d_gradient
        trial, trial_residual = merit(trial_u, trial_g)
        if not trial < 0.9 * current:
            step = _line_search(problem, u, gradient, du, d_gradient)
            trial_u, trial_g = u + step * du, gradient + step * d_gradient
            trial, trial_residual = merit(trial_u, trial_g)
        if not np.isfinite(trial):
            history.append(Iteration(iteration, "newton", current, 0.0, gradient))
            return u, gradient, False, iteration
        u, gradient, current = trial_u, trial_g, trial
        history.append(Iteration(iteration, "newton", current, step, gradient,
                                 getattr(problem.model, "regularisation_parameter", None)))
        if step < 1e-3:
            # the Newton direction no longer reduces the residual: a Picard step moves on
            u, gradient = _picard_step(problem, u, gradient, target_rate)
            current, _ = merit(u, gradient)
            history.append(Iteration(iteration, "picard", current, 1.0, gradient))
    return u, gradient, current <= tol, iteration


def _line_search(problem: _Problem, u, gradient, du, d_gradient) -> float:
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


def _picard_step(problem: _Problem, u, gradient, target_rate, coefficient=None):
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


def _picard(problem, u, gradient, target_rate, tol, max_iterations, history, start_iteration):
    iteration = start_iteration
    for _ in range(max_iterations):
        residual = problem.relative_residual(u, gradient)
        constraint = 0.0 if target_rate is None else abs(
            problem.flow_rate(u) - target_rate) / abs(target_rate)
        if max(residual, constraint) <= tol:
            return u, gradient, True, iteration
        iteration += 1
        u, gradient = _picard_step(problem, u, gradient, target_rate)
        history.append(Iteration(iteration, "picard", problem.relative_residual(u, gradient),
                                 1.0, gradient))
    residual = problem.relative_residual(u, gradient)
    return u, gradient, residual <= tol, iteration


def _initial_state(problem: _Problem, case: Case, model: rheology.Model, rate: float):
    """A Newtonian solution with the model's viscosity at the characteristic rate."""
    reference = rheology.Newtonian(float(model.viscosity(np.array([rate]))[0]))
    newtonian = problem.sibling(reference)
    gradient = case.drive.pressure_gradient or 0.0
    u, gradient = _picard_step(newtonian, newtonian.boundary_values(), gradient,
                               case.drive.flow_rate)
    if problem.domain.kind != "axial" or model.name == "newtonian":
        return u, gradient
    # The Newtonian stress field is the exact one wherever statics fixes the stress (slit
    # and pipe without moving walls) and close to it elsewhere; the viscosity the model
    # has at that stress, point by point, gives a start far closer than any constant.
    rate_n = newtonian.shear_rate(u)
    stress = reference.viscosity_value * rate_n
    viscosity = model.viscosity(_rates_at_stress(model, stress, np.maximum(rate_n, 1e-300)))
    if not np.all(np.isfinite(viscosity)) or not np.all(viscosity > 0):
        return u, gradient
    coefficient = problem.area_weight * problem.rate_factor ** 2 * viscosity
    return _picard_step(problem, u, gradient, case.drive.flow_rate, coefficient)


def _rates_at_stress(model: rheology.Model, stress, start) -> np.ndarray:
    """Shear rates at which the model's stress equals ``stress`` (array), by a
    safeguarded Newton iteration on log(rate), vectorised; a few digits suffice here."""
    target = np.log(np.maximum(stress, 1e-300))
    log_rate = np.log(start)
    with np.errstate(all="ignore"):
        for _ in range(30):
            rate = np.exp(log_rate)
            tau = model.stress(rate)
            slope = model.stress_derivative(rate) * rate / np.maximum(tau, 1e-300)
            step = (np.log(np.maximum(tau, 1e-300)) - target) / np.maximum(slope, 1e-3)
            log_rate = log_rate - np.clip(step, -5.0, 5.0)
            if np.max(np.abs(step)) < 1e-6:
                break
    return np.exp(np.clip(log_rate, -690, 690))


#: 2-D structured sections with more unknowns than this are solved first on a mesh half
#: as fine (recursively), and the result interpolated as the fine mesh's initial state
SEQUENCING_LIMIT = 20_000


def _interpolated(coarse: "Solution", domain: Domain) -> np.ndarray:
    """The coarse solution evaluated at the fine mesh's dofs.

    The coarse field is evaluated on a straight-sided copy of its mesh (same dofs); each
    fine dof is located in the coarse triangle, among its nearest ones, whose
    barycentric coordinates are least negative, so that points in the thin slivers
    between a curved wall and its chords are extrapolated from the adjacent triangle.
    """
    from scipy.spatial import cKDTree
    from skfem import Basis, MeshTri

    coarse_mesh = coarse.domain.basis.mesh
    linear = MeshTri(coarse_mesh.p, coarse_mesh.t)
    basis = Basis(linear, coarse.domain.basis.elem)
    x = domain.basis.doflocs
    centroids = linear.p[:, linear.t].mean(axis=1)
    k = min(8, linear.t.shape[1])
    _, candidates = cKDTree(centroids.T).query(x.T, k=k)
    candidates = candidates.reshape(x.shape[1], k)
    best = np.full(x.shape[1], -np.inf)
    cells = candidates[:, 0].copy()
    for column in range(k):
        tind = candidates[:, column]
        ref = basis.mapping.invF(x[:, :, np.newaxis], tind=tind)[:, :, 0]
        inside = np.minimum(np.minimum(ref[0], ref[1]), 1 - ref[0] - ref[1])
        better = inside > best
        best[better], cells[better] = inside[better], tind[better]
    ref = basis.mapping.invF(x[:, :, np.newaxis], tind=cells)
    values = np.zeros(x.shape[1])
    for local in range(basis.Nbfun):
        phi = np.asarray(basis.elem.gbasis(basis.mapping, ref, local, tind=cells)[0])[:, 0]
        values += phi * coarse.u[basis.element_dofs[local, cells]]
    return values


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
        # The stress-consistent start (see _initial_state) is close enough for Newton at
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
    problem = _Problem(domain, model)
    problem.rate_floor = RATE_FLOOR * rate
    problem.linear = LinearSolver(spec.linear_solver, problem.free.size,
                                  dimension=domain.dimension)
    if coarse is not None:
        u = _interpolated(coarse, domain)
        for wall in domain.walls.values():
            u[wall.dofs] = wall.value
        gradient = coarse.pressure_gradient
    else:
        u, gradient = _initial_state(problem, case, model, rate)
    target = case.drive.flow_rate
    iterate = _newton if spec.method == "newton" else _picard
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
                u, gradient = _initial_state(problem, case, model, rate)
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


def _regularisation_error(problem: _Problem, u, gradient, target, spec) -> float | None:
    """Relative change of the flow rate (or torque) with the regularisation half as sharp."""
    model = problem.model
    factor = 0.5 if model.regularisation == "papanastasiou" else 2.0
    softer = problem.sibling(model.with_regularisation(model.regularisation_parameter * factor))
    # an estimate of a 1e-4-sized effect to two digits: a residual of 1e-7 is enough
    u2, g2, ok, _ = _newton(softer, u.copy(), gradient, target, max(spec.tolerance, 1e-7), 50,
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
