"""Helical flow in an annulus: axial flow and rotation coupled through the viscosity.

An annulus with an axial drive (pressure gradient or flow rate, axial wall speeds) and a
rotating wall (``drive.inner_angular_speed`` / ``outer_angular_speed``) carries two motions
at once. For a generalized Newtonian fluid they share one viscosity ``eta(gamma)`` with the
shear rate of the whole motion, so each changes the other: rotation thins a shear-thinning
fluid and lowers the pressure gradient a given flow rate needs.

Both problems below are the minimum of one convex dissipation functional,

    Phi = int a Psi(gamma) dx + G int a w dx,   Psi'(gamma) = tau(gamma) = eta gamma,

over the velocities with the wall values prescribed (and, in 2-D, ``div u = 0``), with the
shear rate written as the length of a vector of strain components, ``gamma = |c|``:

* **Concentric annulus (1-D in r):** axial speed ``w(r)`` and angular speed ``omega(r)``,
  ``c = (w', r omega')``, area weight ``a = 2 pi r``. The Euler-Lagrange equations are the
  axial balance ``(r eta w')' = G r`` and the torque balance ``(r^3 eta omega')' = 0``.
* **Eccentric annulus (2-D section):** in-plane velocity ``u = (u_x, u_y)``, in-plane
  pressure ``p`` and axial speed ``w(x, y)``, with the full 3-D rate of strain of
  ``(u_x, u_y, w)``, ``gamma = sqrt(D:D / 2)`` with ``D = grad U + grad U^T``:
  ``c = (sqrt2 du_x/dx, sqrt2 du_y/dy, du_x/dy + du_y/dx, dw/dx, dw/dy)``. Taylor-Hood
  P2/P1 for ``(u, p)``, the domain's own basis for ``w``.

The residual is ``R[v] = int a eta c(x) . c(v) dx + G int a v_w dx`` (+ the pressure
term ``-int p div v`` in 2-D), and Newton's method uses its consistent tangent

    J[dx, v] = int a (eta c(dx) . c(v) + (eta'(gamma)/gamma) (c . c(dx)) (c . c(v))) dx,

the Hessian of ``Phi``: symmetric, and positive definite for every monotone flow curve
(its coefficient along ``c`` is ``a d tau / d gamma > 0``). With a flow rate instead of
``G`` the system is bordered as in :mod:`gnflow.solver.newton`.

Linear systems: in 1-D the unknowns are numbered by position, so the operator is banded
and is summed straight into LAPACK's band storage and factored by banded Cholesky. In 2-D
the saddle system (velocities and in-plane pressure) is factored by SuperLU in a
nested-dissection order (:func:`nested_dissection`), and after the first Newton step each
system is solved by GMRES preconditioned with the last factorisation, refactoring only
when that does not reach the inexact-Newton accuracy (:class:`_ReusingSolver`).

Assumptions (also returned with every solution): steady, laminar, isothermal, fully
developed flow with no inertia: the in-plane flow is creeping, the axial momentum is not
convected by the in-plane flow, and there are no Taylor vortices. A Taylor number is
computed when the fluid has a density, and a warning is given when it passes the
narrow-gap critical value 1708 (Taylor 1923; used here as a limit, common practice).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.linalg import cho_solve_banded, cholesky_banded
from skfem import BilinearForm, ElementTriP1, ElementTriP2, ElementVector, asm
from skfem.helpers import div

from ..case import Case
from ..geometry import Domain, build_domain
from .assembly import RATE_FLOOR
from .scales import characteristic_rate, default_regularisation
from .continuation import RegularisationSchedule
from .newton import _rates_at_stress
from .solution import Iteration, Solution, _History

#: Narrow-gap critical Taylor number for the onset of Taylor vortices (Taylor 1923;
#: recalled from memory), applied as a warning limit (common practice).
CRITICAL_TAYLOR_NUMBER = 1708.0

ASSUMPTIONS = (
    "steady, laminar, isothermal, fully developed flow",
    "no inertia: creeping flow in the cross-section, no convection of axial momentum by "
    "the in-plane flow, no centrifugal pressure effect on the viscosity",
    "no Taylor vortices or other secondary flow (checked by the Taylor number when a "
    "density is given)",
)


@dataclass
class HelicalSolution(Solution):
    """A :class:`Solution` of helical flow; ``u`` is the axial speed at the dofs of
    ``domain.basis``. The extra fields:

    * ``angular_speed``: rad/s at the dofs; 1-D the solved ``omega(r)``, 2-D the azimuthal
      velocity about the outer wall's centre divided by the distance from it;
    * ``azimuthal_velocity``: m/s at the dofs (1-D ``r omega``; 2-D about the outer centre);
    * ``in_plane_velocity``: 2-D only, (2, N) Cartesian ``(u_x, u_y)`` at the dofs;
    * ``in_plane_pressure``: 2-D only, the in-plane pressure (Pa, mean zero) at the dofs of
      ``pressure_basis`` (P1), to which ``G z`` adds;
    * ``torque_per_length``: N m/m applied to each wall to turn it, about its own centre
      (``inner + outer = 0`` in the concentric annulus);
    * ``in_plane_wall_force``: 2-D only, ``(F_x, F_y)`` N/m each wall applies on the fluid
      in the plane (with the torques, the in-plane balance: their sum vanishes);
    * ``axial_wall_force``: N/m the fluid exerts on each wall in +z, and
      ``axial_wall_shear_stress`` that force over the wall's perimeter (Pa);
    * ``power_per_length``: W/m, ``axial`` (pressure work ``-G Q`` plus axial wall drag),
      ``rotational`` (``sum Omega M``) and ``dissipation`` (``int eta gamma^2 dA``, their
      sum to the solver's tolerance);
    * ``flow_rate`` (m^3/s), ``shear_rate`` and ``viscosity`` at the dofs (projected),
      ``unyielded_fraction`` and (1-D) ``plug_intervals`` for yield-stress fluids,
      ``taylor_number`` (None without a density) and ``assumptions``.
    """

    angular_speed: np.ndarray | None = None
    azimuthal_velocity: np.ndarray | None = None
    in_plane_velocity: np.ndarray | None = None
    in_plane_pressure: np.ndarray | None = None
    pressure_basis: object = None
    velocity_basis: object = None
    torque_per_length: dict = field(default_factory=dict)
    axial_wall_force: dict = field(default_factory=dict)
    axial_wall_shear_stress: dict = field(default_factory=dict)
    in_plane_wall_force: dict = field(default_factory=dict)
    power_per_length: dict = field(default_factory=dict)
    flow_rate: float = 0.0
    shear_rate: np.ndarray | None = None
    viscosity: np.ndarray | None = None
    unyielded_fraction: float | None = None
    plug_intervals: list = field(default_factory=list)
    taylor_number: float | None = None
    assumptions: tuple = ASSUMPTIONS


# --------------------------------------------------------------------------- assembly

class StrainPlan:
    """Vectorised assembly of ``int weight eta c(x) . c(v)`` and its Newton tangent.

    ``operators[e, l, k, q]`` is the contribution of local unknown ``l`` of element ``e``
    to strain component ``k`` at quadrature point ``q``; ``dofs[e, l]`` its global index
    among the velocity unknowns; ``weight[e, q]`` the area weight times ``dx``. The map
    from element-matrix entries to the CSR matrix of the free unknowns is found once, as
    in :class:`gnflow.solver.assembly.AssemblyPlan`.
    """

    def __init__(self, operators, dofs, weight, size: int, free: np.ndarray):
        ne, nl, nk, nq = operators.shape
        self.operators = operators
        self.flat = np.ascontiguousarray(operators.reshape(ne, nl, nk * nq))
        self.dofs, self.weight, self.size, self.nk, self.nq = dofs, weight, size, nk, nq
        index = -np.ones(size, dtype=np.int64)
        index[free] = np.arange(free.size)
        local = index[dofs]
        rows = np.broadcast_to(local[:, :, None], (ne, nl, nl))
        cols = np.broadcast_to(local[:, None, :], (ne, nl, nl))
        self.keep = (rows >= 0) & (cols >= 0)
        keys = rows[self.keep] * free.size + cols[self.keep]
        unique, self.position = np.unique(keys, return_inverse=True)
        self.indices = (unique % free.size).astype(np.int32)
        counts = np.bincount(unique // free.size, minlength=free.size)
        self.indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
        self.free_size = free.size
        self.squares = np.einsum("elkq,elkq->elq", operators, operators)

    def components(self, x) -> np.ndarray:
        """The strain components ``c`` at the quadrature points, (elements, k, q)."""
        return np.einsum("el,elkq->ekq", x[self.dofs], self.operators)

    def _scatter(self, local) -> np.ndarray:
        return np.bincount(self.dofs.ravel(), weights=local.ravel(), minlength=self.size)

    def force(self, coefficient, components) -> np.ndarray:
        """``int weight coefficient c . c(v)`` for every unknown ``v``."""
        flux = components * (coefficient * self.weight)[:, None, :]
        return self._scatter(np.einsum("elkq,ekq->el", self.operators, flux))

    def diagonal(self, coefficient) -> np.ndarray:
        """``int weight coefficient |c(v)|^2`` for every unknown."""
        return self._scatter(np.einsum("elq,eq->el", self.squares, coefficient * self.weight))

    def _element_matrices(self, coefficient, tangent_coefficient, components) -> np.ndarray:
        weighted = self.flat * np.tile(coefficient * self.weight, (1, self.nk))[:, None, :]
        local = np.matmul(weighted, self.flat.transpose(0, 2, 1))
        if tangent_coefficient is not None:
            along = np.einsum("elkq,ekq->elq", self.operators, components)
            local += np.matmul(along * (tangent_coefficient * self.weight)[:, None, :],
                               along.transpose(0, 2, 1))
        return local

    def matrix(self, coefficient, tangent_coefficient=None, components=None) -> sp.csr_matrix:
        """The operator on the free unknowns (frozen viscosity, or the Newton tangent)."""
        local = self._element_matrices(coefficient, tangent_coefficient, components)
        data = np.bincount(self.position, weights=local[self.keep], minlength=self.indices.size)
        return sp.csr_matrix((data, self.indices, self.indptr),
                             shape=(self.free_size, self.free_size))

    def upper_band(self, order, coefficient, tangent_coefficient=None,
                   components=None) -> np.ndarray:
        """The same operator with the free unknowns renumbered by ``order``, as its upper
        band in LAPACK's storage (``band[u + i - j, j] = A[i, j]``, ``i <= j``), summed
        straight from the element matrices (measured: a third of the 1-D solve went into
        building the CSR matrix, permuting it and cutting out its band)."""
        layout = getattr(self, "_band_layout", None)
        if layout is None or layout[0] is not order:
            rank = np.empty(order.size, dtype=np.int64)
            rank[order] = np.arange(order.size)
            unique = self.indptr.size - 1
            rows = np.repeat(np.arange(unique), np.diff(self.indptr))[self.position]
            i, j = rank[rows], rank[self.indices[self.position]]
            upper = i <= j
            width = int(np.max(j[upper] - i[upper], initial=0))
            flat = (width + i[upper] - j[upper]) * order.size + j[upper]
            layout = self._band_layout = (order, upper, flat, width)
        _, upper, flat, width = layout
        local = self._element_matrices(coefficient, tangent_coefficient, components)
        band = np.bincount(flat, weights=local[self.keep][upper],
                           minlength=(width + 1) * order.size)
        return band.reshape(width + 1, order.size)


@dataclass
class CoupledProblem:
    """The discrete helical problem: velocity unknowns ``x`` (fixed at the walls by
    ``boundary``), the load of a unit pressure gradient, and in 2-D the divergence
    operator ``divergence`` (pressure dofs x velocity unknowns, one pressure dof pinned)."""

    plan: StrainPlan
    model: object
    boundary: np.ndarray
    free: np.ndarray
    load: np.ndarray
    rate_floor: float
    divergence: sp.csr_matrix | None = None
    #: 1-D: the free unknowns in the order of their position (w and omega of a node side
    #: by side), so that the tangent is banded and factors in linear time without fill-in
    banded_order: np.ndarray | None = None
    #: 2-D: the position of each free velocity unknown and each unpinned pressure dof
    #: (the saddle system's unknowns), for its nested-dissection order, found once
    points: np.ndarray | None = None
    saddle_order: np.ndarray | None = None
    #: 2-D: the last factorisation made, which preconditions the next systems
    saddle_factor: object = None

    @property
    def pressure_size(self) -> int:
        return 0 if self.divergence is None else self.divergence.shape[0]

    def state(self, x):
        """Strain components, shear rate and viscosity at the quadrature points. The last
        state is kept: an iterate is evaluated for its merit and again for its tangent, and
        iterates are never changed in place, so the identity of ``x`` identifies it."""
        memo = getattr(self, "_memo", None)
        if memo is not None and memo[0] is x and memo[1] is self.model:
            return memo[2]
        components = self.plan.components(x)
        # a smooth floor keeps eta and the tangent finite where the fluid is at rest
        rate = np.sqrt(np.sum(components ** 2, axis=1) + self.rate_floor ** 2)
        state = (components, rate, self.model.viscosity(rate))
        self._memo = (x, self.model, state)
        return state

    def momentum(self, x, pressure, gradient, state=None) -> np.ndarray:
        """The momentum residual on every velocity unknown (walls included)."""
        components, _, viscosity = state or self.state(x)
        residual = self.plan.force(viscosity, components) + gradient * self.load
        if self.divergence is not None:
            residual += self.divergence.T @ pressure
        return residual

    def relative_residual(self, x, pressure, gradient) -> float:
        """Free-unknown residual over the size of the forces in balance, both in the
        norm scaled by the operator's diagonal (as :meth:`Problem.relative_residual`),
        and in 2-D the continuity residual relative to the size of its terms."""
        state = self.state(x)
        components, _, viscosity = state
        internal = self.plan.force(viscosity, components)
        weight = 1.0 / np.sqrt(np.maximum(self.plan.diagonal(viscosity), 1e-300))
        residual = self.momentum(x, pressure, gradient, state)[self.free] * weight[self.free]
        scales = [np.linalg.norm(internal * weight), np.linalg.norm(gradient * self.load * weight)]
        continuity = 0.0
        if self.divergence is not None:
            scales.append(np.linalg.norm((self.divergence.T @ pressure) * weight))
            size = np.linalg.norm(abs(self.divergence) @ np.abs(x))
            continuity = np.linalg.norm(self.divergence @ x) / max(size, 1e-300)
        return float(max(np.linalg.norm(residual) / max(max(scales), 1e-300), continuity))

    def linear_solver(self, x, consistent: bool, viscosity_override=None, accuracy=0.0):
        """A solver for the linear system on the free unknowns (bordered by the divergence
        in 2-D): the Newton tangent, the frozen-viscosity operator, or the operator with a
        given viscosity. In 2-D a relative ``accuracy`` > 0 lets it reuse the last
        factorisation (:class:`_ReusingSolver`); 1-D solves are always exact."""
        components, rate, viscosity = self.state(x)
        tangent = None
        if viscosity_override is not None:
            viscosity = np.broadcast_to(viscosity_override, rate.shape)
        elif consistent:
            tangent = self.model.viscosity_derivative(rate) / rate
        if self.banded_order is not None:
            try:
                return _BandFactor(self.plan.upper_band(self.banded_order, viscosity, tangent,
                                                        components), self.banded_order)
            except np.linalg.LinAlgError:       # a non-positive pivot: LU below
                pass
        matrix = self.plan.matrix(viscosity, tangent, components)
        if self.divergence is None:
            return _LU(matrix)
        constraint = self.divergence[:, self.free]
        saddle = sp.bmat([[matrix, constraint.T], [constraint, None]], format="csr")
        if self.saddle_order is None:
            self.saddle_order = nested_dissection(saddle, self.points)
        return _ReusingSolver(saddle, self, accuracy)

    def flow_rate(self, x) -> float:
        return float(self.load @ x)

    def dissipation(self, x) -> float:
        """``int a eta gamma^2 dx`` (W/m)."""
        _, rate, viscosity = self.state(x)
        return float(np.sum(viscosity * rate ** 2 * self.plan.weight))


# --------------------------------------------------------------------------- iteration

@dataclass
class Iterate:
    x: np.ndarray
    pressure: np.ndarray
    gradient: float


def _step(problem: CoupledProblem, it: Iterate, target_rate, consistent=True,
          viscosity_override=None, accuracy=0.0):
    """One Newton (or frozen-viscosity) correction: (dx, dp, dG), its linear systems
    solved to the relative ``accuracy`` (0: exactly)."""
    free, n = problem.free, problem.free.size
    factor = problem.linear_solver(it.x, consistent, viscosity_override, accuracy)
    if viscosity_override is not None:
        # a linear solve from the wall values: the correction takes x to the solution
        start = Iterate(problem.boundary, np.zeros(problem.pressure_size), it.gradient)
        residual = _linear_residual(problem, start, viscosity_override)
        base = start
    else:
        residual = _full_residual(problem, it)
        base = it
    correction = factor.solve(-residual)
    dx = np.zeros_like(it.x)
    dx[free] = correction[:n]
    dp = correction[n:]
    d_gradient = 0.0
    if target_rate is not None:
        unit = factor.solve(-np.concatenate([problem.load[free], np.zeros(problem.pressure_size)]))
        du = np.zeros_like(it.x)
        du[free] = unit[:n]
        d_gradient = (target_rate - problem.flow_rate(base.x) - problem.flow_rate(dx)) / \
            problem.flow_rate(du)
        dx += d_gradient * du
        dp = dp + d_gradient * unit[n:]
    if viscosity_override is not None:
        return Iterate(base.x + dx, base.pressure + dp, base.gradient + d_gradient)
    return dx, dp, d_gradient


def nested_dissection(pattern: sp.spmatrix, points: np.ndarray, leaf: int = 64) -> np.ndarray:
    """A fill-reducing elimination order for a sparse system on a 2-D section.

    Geometric nested dissection (George 1973): the unknowns, each at ``points[:, i]``, are
    cut at the median of the longer extent; the unknowns of the first half coupled to the
    second (``pattern`` nonzero) form the separator, numbered after both halves, which are
    ordered the same way down to ``leaf`` unknowns. Within a leaf the original order is
    kept (in the saddle system: velocities before the pressures they constrain, so that
    no zero pivot is met). Measured on the eccentric section with 20k unknowns: 6.4M
    factor entries against COLAMD's 7.9M, and at 100k unknowns 45M, factored in 6.5 s.

    >>> import scipy.sparse as sp
    >>> chain = sp.eye(5) + sp.eye(5, k=1)          # five unknowns in a row
    >>> nested_dissection(chain, np.array([[0, 1, 2, 3, 4], [0, 0, 0, 0, 0]]), leaf=1)
    array([0, 4, 3, 2, 1])
    """
    pattern = sp.csr_matrix(abs(pattern) + abs(pattern).T)
    other_side = np.zeros(pattern.shape[0], dtype=bool)
    ordered, pending = [], [(np.arange(pattern.shape[0]), False)]
    while pending:                      # depth first, separators after their halves
        nodes, is_separator = pending.pop()
        if is_separator or nodes.size <= leaf:
            ordered.append(nodes)
            continue
        xy = points[:, nodes]
        axis = int(np.argmax(np.ptp(xy, axis=1)))
        first = xy[axis] < np.median(xy[axis])
        if first.all() or not first.any():
            ordered.append(nodes)
            continue
        left, right = nodes[first], nodes[~first]
        other_side[right] = True
        rows = pattern[left]
        crossing = np.zeros(left.size, dtype=bool)
        filled = np.diff(rows.indptr) > 0
        crossing[filled] = np.add.reduceat(other_side[rows.indices].astype(np.int32),
                                           rows.indptr[:-1][filled]) > 0
        other_side[right] = False
        pending += [(left[crossing], True), (right, False), (left[~crossing], False)]
    return np.concatenate(ordered)


class _SaddleFactor:
    """Sparse LU of the 2-D saddle system in a nested-dissection order, with diagonal
    pivots (the order puts each pressure after the velocities it constrains); should a
    zero pivot appear all the same, threshold pivoting in SuperLU's own column order."""

    def __init__(self, matrix: sp.csr_matrix, order: np.ndarray):
        self.order = order
        try:
            self.lu = spla.splu(matrix[order][:, order].tocsc(), permc_spec="NATURAL",
                                diag_pivot_thresh=0.0, options={"SymmetricMode": True})
        except RuntimeError:          # an exactly singular diagonal pivot
            self.order = None
            self.lu = spla.splu(matrix.tocsc())

    def solve(self, rhs):
        if self.order is None:
            return self.lu.solve(rhs)
        solution = np.empty_like(rhs)
        solution[self.order] = self.lu.solve(rhs[self.order])
        return solution


class _ReusingSolver:
    """Solves a 2-D saddle system with GMRES preconditioned by the problem's last
    factorisation, and factors this system afresh (keeping that factor for the next ones)
    when GMRES has not reached the relative ``accuracy`` in ``REUSE_ITERATIONS``.

    Why: one factorisation at 100k unknowns costs about 35 of its back-substitutions
    (measured: 5.1 s against 0.14 s), and a factor of the tangent a few steps back still
    preconditions well (measured: the residual falls 5 to 10 times per GMRES iteration;
    at 100k unknowns a reused solve took about 2 s against 5.5 s for a factorisation).
    A solve to relative ``accuracy`` is an inexact Newton step (Dembo, Eisenstat &
    Steihaug 1982): with ``accuracy`` shrinking like the nonlinear residual the iteration
    keeps its superlinear convergence. ``accuracy = 0`` factors afresh.
    """

    REUSE_ITERATIONS = 12

    def __init__(self, matrix: sp.csr_matrix, problem: "CoupledProblem", accuracy: float):
        self.matrix, self.problem, self.accuracy, self.fresh = matrix, problem, accuracy, False

    def solve(self, rhs):
        stale = self.problem.saddle_factor
        if stale is not None and not self.fresh and self.accuracy > 0:
            found = self._preconditioned(stale, rhs)
            if found is not None:
                return found
        if not self.fresh:
            self.problem.saddle_factor = _SaddleFactor(self.matrix, self.problem.saddle_order)
            self.fresh = True
        return self.problem.saddle_factor.solve(rhs)

    def _preconditioned(self, factor, rhs):
        size = np.linalg.norm(rhs)
        if size == 0:
            return np.zeros_like(rhs)
        preconditioner = spla.LinearOperator(self.matrix.shape, factor.solve)
        found, _ = spla.gmres(self.matrix, rhs, M=preconditioner, rtol=0.1 * self.accuracy,
                              restart=self.REUSE_ITERATIONS, maxiter=1)
        # judged by the true residual, whatever norm GMRES used
        if np.linalg.norm(rhs - self.matrix @ found) <= self.accuracy * size:
            return found
        return None


class _BandFactor:
    """Banded Cholesky (LAPACK) of the 1-D operator in its banded order: symmetric
    positive definite (see the module docstring), factored in linear time, no fill-in.
    Raises ``LinAlgError`` on a non-positive pivot."""

    def __init__(self, upper_band: np.ndarray, order: np.ndarray):
        self.order, self.band = order, cholesky_banded(upper_band)

    def solve(self, rhs):
        solution = np.empty_like(rhs)
        solution[self.order] = cho_solve_banded((self.band, False), rhs[self.order])
        return solution


class _LU:
    """Sparse LU of a 1-D operator that Cholesky refused."""

    def __init__(self, matrix: sp.csr_matrix):
        self.lu = spla.splu(matrix.tocsc())

    def solve(self, rhs):
        return self.lu.solve(rhs)


def _full_residual(problem: CoupledProblem, it: Iterate) -> np.ndarray:
    momentum = problem.momentum(it.x, it.pressure, it.gradient)[problem.free]
    if problem.divergence is None:
        return momentum
    return np.concatenate([momentum, problem.divergence @ it.x])


def _linear_residual(problem: CoupledProblem, it: Iterate, viscosity) -> np.ndarray:
    components = problem.plan.components(it.x)
    coefficient = np.broadcast_to(viscosity, components[:, 0].shape)
    momentum = (problem.plan.force(coefficient, components) + it.gradient * problem.load)
    if problem.divergence is not None:
        momentum += problem.divergence.T @ it.pressure
        return np.concatenate([momentum[problem.free], problem.divergence @ it.x])
    return momentum[problem.free]


def _line_search(problem: CoupledProblem, it: Iterate, dx, dp, d_gradient) -> float:
    """Step length: the minimum of the dissipation functional along the direction, i.e.
    the root of its slope ``R(x + t dx) . dx`` (the pressure term vanishes on the
    divergence-free directions, and a flow-rate target is kept along the step)."""
    free = problem.free

    def slope(t):
        trial = problem.momentum(it.x + t * dx, it.pressure + t * dp, it.gradient + t * d_gradient)
        value = float(trial[free] @ dx[free])
        return value if math.isfinite(value) else math.inf

    s0 = slope(0.0)
    if not s0 < 0:
        return 1.0
    low, high, s_low, s_high = 0.0, 1.0, s0, slope(1.0)
    if s_high <= 0.25 * abs(s0):
        return 1.0
    t = 1.0
    for _ in range(12):
        t = 0.5 * (low + high) if math.isinf(s_high) else min(max(
            low - s_low * (high - low) / (s_high - s_low), low + 0.02 * (high - low)),
            high - 0.02 * (high - low))
        st = slope(t)
        if abs(st) <= 0.25 * abs(s0):
            break
        low, s_low, high, s_high = (t, st, high, s_high) if st < 0 else (low, s_low, t, st)
    return t


def iterate(problem: CoupledProblem, it: Iterate, target_rate, method: str, tolerance: float,
            max_iterations: int, history, counted: int):
    """Newton (consistent tangent, line search on the dissipation) or Picard (frozen
    viscosity) from ``it``; returns (iterate, converged, iterations, residual)."""
    residual = _merit(problem, it, target_rate)
    first = counted
    for _ in range(max_iterations):
        if residual <= tolerance:
            return it, True, counted, residual
        counted += 1
        # forcing term of the inexact Newton method: loose far from the solution, tight
        # near it, but no tighter than 1e-4, which still takes the residual down 1e4 times
        # a step (1-D solves are exact whatever it says); the first step factors afresh,
        # since a frozen-viscosity factor preconditions the tangent poorly (measured)
        accuracy = min(1e-2, max(0.1 * residual, 1e-4)) if counted > first + 1 else 0.0
        dx, dp, dg = _step(problem, it, target_rate, consistent=method == "newton",
                           accuracy=accuracy)
        step = 1.0
        trial = Iterate(it.x + dx, it.pressure + dp, it.gradient + dg)
        trial_residual = _merit(problem, trial, target_rate)
        if method == "newton" and not trial_residual < 0.9 * residual:
            step = _line_search(problem, it, dx, dp, dg)
            trial = Iterate(it.x + step * dx, it.pressure + step * dp, it.gradient + step * dg)
            trial_residual = _merit(problem, trial, target_rate)
        if not math.isfinite(trial_residual):
            history.append(Iteration(counted, method, math.inf, 0.0, it.gradient))
            return it, False, counted, residual
        it, residual = trial, trial_residual
        history.append(Iteration(counted, method, residual, step, it.gradient,
                                 getattr(problem.model, "regularisation_parameter", None)))
    return it, residual <= tolerance, counted, residual


def _merit(problem: CoupledProblem, it: Iterate, target_rate) -> float:
    try:
        residual = problem.relative_residual(it.x, it.pressure, it.gradient)
    except (ArithmeticError, ValueError):
        return math.inf
    if target_rate is None:
        return residual
    return max(residual, abs(problem.flow_rate(it.x) - target_rate) / abs(target_rate))


# --------------------------------------------------------------------------- problems

def _wall_centre(case: Case, name: str) -> tuple[float, float]:
    """The centre of a wall's circle: the outer at the origin, the inner at (offset, 0)
    (see :func:`gnflow.geometry.build_domain`)."""
    g = case.geometry
    return (g.eccentricity * (g.outer_radius - g.inner_radius), 0.0) if name == "inner" else (0.0, 0.0)


def _angular_speeds(case: Case) -> dict[str, float]:
    return {"inner": case.drive.inner_angular_speed, "outer": case.drive.outer_angular_speed}


def _load(basis, weight, dofs, size) -> np.ndarray:
    """``int a phi`` for each basis function of ``basis`` placed at ``dofs``."""
    values = np.array([np.asarray(basis.basis[i][0]) for i in range(basis.Nbfun)])   # (nb, ne, nq)
    local = np.einsum("ieq,eq->ei", values, weight)
    return np.bincount(dofs.ravel(), weights=local.ravel(), minlength=size)


def concentric_problem(case: Case, domain: Domain, model, rate_floor: float) -> CoupledProblem:
    """Unknowns ``[w (N); omega (N)]`` on the domain's line basis in ``r``."""
    basis = domain.basis
    n, nb = basis.N, basis.Nbfun
    r = np.asarray(basis.global_coordinates())[0]                       # (ne, nq)
    grads = np.array([basis.basis[i][0].grad[0] for i in range(nb)])    # (nb, ne, nq)
    operators = np.zeros((r.shape[0], 2 * nb, 2, r.shape[1]))
    operators[:, :nb, 0] = grads.transpose(1, 0, 2)                     # c_1 = w'
    operators[:, nb:, 1] = (r * grads).transpose(1, 0, 2)               # c_2 = r omega'
    element_dofs = basis.element_dofs.T
    dofs = np.hstack([element_dofs, element_dofs + n])
    weight = 2 * math.pi * r * basis.dx
    boundary = np.zeros(2 * n)
    speeds = _angular_speeds(case)
    for name, wall in domain.walls.items():
        boundary[wall.dofs] = wall.value
        boundary[n + wall.dofs] = speeds[name]
    fixed = np.concatenate([domain.wall_dofs, n + domain.wall_dofs])
    free = np.setdiff1d(np.arange(2 * n), fixed)
    load = _load(basis, weight, element_dofs, 2 * n)
    position = np.concatenate([basis.doflocs[0], basis.doflocs[0]])[free]
    return CoupledProblem(StrainPlan(operators, dofs, weight, 2 * n, free), model, boundary,
                          free, load, rate_floor, banded_order=np.argsort(position, kind="stable"))


@BilinearForm
def _divergence_form(u, q, w):
    """``-int q div u``: the pressure's work on the in-plane velocity."""
    return -q * div(u)


def _boundary_facets(mesh, case: Case) -> dict[str, np.ndarray]:
    """The boundary facets of each wall, told apart by their distance from the inner
    circle's centre."""
    facets = mesh.boundary_facets()
    middle = mesh.p[:, mesh.facets[:, facets]].mean(axis=1)
    xc, yc = _wall_centre(case, "inner")
    distance = np.hypot(middle[0] - xc, middle[1] - yc)
    g = case.geometry
    inner = np.abs(distance - g.inner_radius) < 0.5 * (g.outer_radius - g.inner_radius) * \
        (1 - g.eccentricity) + 1e-12 * g.outer_radius
    return {"inner": facets[inner], "outer": facets[~inner]}


def eccentric_problem(case: Case, domain: Domain, model, rate_floor: float):
    """Unknowns ``[u (vector P2); w (domain basis)]``, pressure P1 with dof 0 pinned.
    Returns the problem and the velocity and pressure bases."""
    scalar = domain.basis
    mesh, quadrature = scalar.mesh, (scalar.X, scalar.W)
    velocity = type(scalar)(mesh, ElementVector(ElementTriP2()), quadrature=quadrature)
    pressure = type(scalar)(mesh, ElementTriP1(), quadrature=quadrature)
    nu, nw, ne, nq = velocity.N, scalar.N, scalar.nelems, scalar.X.shape[1]
    nbu, nbw = velocity.Nbfun, scalar.Nbfun
    operators = np.zeros((ne, nbu + nbw, 5, nq))
    root2 = math.sqrt(2.0)
    for i in range(nbu):
        g = velocity.basis[i][0].grad                                   # (2, 2, ne, nq)
        operators[:, i, 0] = root2 * g[0, 0]
        operators[:, i, 1] = root2 * g[1, 1]
        operators[:, i, 2] = g[0, 1] + g[1, 0]
    for j in range(nbw):
        g = scalar.basis[j][0].grad                                     # (2, ne, nq)
        operators[:, nbu + j, 3] = g[0]
        operators[:, nbu + j, 4] = g[1]
    dofs = np.hstack([velocity.element_dofs.T, nu + scalar.element_dofs.T])
    weight = scalar.dx
    size = nu + nw
    boundary = np.zeros(size)
    ix, iy = velocity.split_indices()
    locations = velocity.doflocs
    fixed = [nu + domain.wall_dofs]
    speeds = _angular_speeds(case)
    for name, facets in _boundary_facets(mesh, case).items():
        wall_dofs = velocity.get_dofs(facets).all()
        xc, yc = _wall_centre(case, name)
        # rigid rotation of the wall about its own centre
        on_x, on_y = np.intersect1d(wall_dofs, ix), np.intersect1d(wall_dofs, iy)
        boundary[on_x] = -speeds[name] * (locations[1, on_x] - yc)
        boundary[on_y] = speeds[name] * (locations[0, on_y] - xc)
        fixed.append(wall_dofs)
    for wall in domain.walls.values():
        boundary[nu + wall.dofs] = wall.value
    free = np.setdiff1d(np.arange(size), np.concatenate(fixed))
    divergence = asm(_divergence_form, velocity, pressure).tocsr()      # (Np, Nu)
    divergence = sp.hstack([divergence[1:], sp.csr_matrix((pressure.N - 1, nw))]).tocsr()
    load = _load(scalar, weight, nu + scalar.element_dofs.T, size)
    points = np.hstack([velocity.doflocs, scalar.doflocs])[:, free]
    problem = CoupledProblem(StrainPlan(operators, dofs, weight, size, free), model, boundary,
                             free, load, rate_floor, divergence,
                             points=np.hstack([points, pressure.doflocs[:, 1:]]))
    return problem, velocity, pressure


# --------------------------------------------------------------------------- the solve

def helical_rate(case: Case, domain: Domain, model) -> float:
    """A shear rate typical of helical flow: the larger of the axial drive's
    (:func:`characteristic_rate`) and the rotation's ``|Omega_i - Omega_o| r_mean / gap``."""
    g, d = case.geometry, case.drive
    rotation = abs(d.inner_angular_speed - d.outer_angular_speed) * 0.5 * (
        g.inner_radius + g.outer_radius) / (g.outer_radius - g.inner_radius)
    axial = characteristic_rate(case, domain, model) if (
        d.pressure_gradient or d.flow_rate is not None or any(d.wall_speed.values())) else 0.0
    return max(axial, rotation, 1e-300)


def wanted_regularisation(case: Case, rate: float) -> float:
    """The regularisation parameter to solve at: the user's, else the default for the
    flow's rate scale (:func:`gnflow.solver.scales.default_regularisation`)."""
    return case.fluid.regularisation_parameter or default_regularisation(case.fluid.model, rate)


def solve_helical(case: Case, domain: Domain | None = None, cells: int | None = None,
                  progress=None) -> HelicalSolution:
    """Solve helical flow in a concentric (1-D) or eccentric (2-D) annulus.

    Newtonian fluids decouple exactly: the axial flow is the annulus's and the torque the
    Couette one (``tests/test_helical.py`` checks both against closed forms). A
    yield-stress fluid is solved at its regularisation from a stress-consistent start and,
    should that fail, again from 1000 times softer, sharpened stage by stage
    (:class:`~gnflow.solver.continuation.RegularisationSchedule`). Returns a
    :class:`HelicalSolution`, converged or not; never raises for non-convergence.
    """
    started = time.perf_counter()
    domain = domain or build_domain(case, cells)
    rate = helical_rate(case, domain, case.fluid.model)
    history = _History(progress)
    model = case.fluid.model
    if model.is_yield_stress:
        model = model.with_regularisation(wanted_regularisation(case, rate))
    problem, bases = _problem(case, domain, model, RATE_FLOOR * rate)
    try:
        outcome = _solve(problem, case, rate, history)
        failure = None
    except (ArithmeticError, RuntimeError, ValueError, np.linalg.LinAlgError) as error:
        outcome, failure = None, " ".join(str(error).split())[:120]
    return _finish(case, domain, problem, bases, outcome, failure, history, started)


def _solve(problem: CoupledProblem, case: Case, rate: float, history):
    """(iterate, converged, iterations, residual) at ``problem.model``."""
    spec, target = case.solver, case.drive.flow_rate
    wanted = problem.model
    start = _start(problem, case, wanted, rate)
    history.append(Iteration(1, "picard", _merit(problem, start, target), 1.0, start.gradient))
    # a sharp regularisation that Newton has not nearly solved in 15 iterations is solved
    # faster by continuation (measured: 40 direct iterations cost more than the whole
    # continuation from 1000 times softer)
    allowance = spec.max_iterations if not wanted.is_yield_stress else min(spec.max_iterations, 15)
    it, converged, used, residual = iterate(problem, start, target, spec.method, spec.tolerance,
                                            allowance, history, 1)
    if converged or not wanted.is_yield_stress:
        return it, converged, used, residual
    schedule = RegularisationSchedule(wanted.regularisation)
    target_parameter = wanted.regularisation_parameter
    parameter = schedule.softened(target_parameter, 1e3)
    problem.model = wanted.with_regularisation(parameter)
    good, last = _start(problem, case, problem.model, rate), parameter
    while used < spec.max_iterations:
        final = schedule.reached(parameter, target_parameter)
        tolerance = spec.tolerance if final else max(spec.tolerance, 1e-6)
        it, converged, used, residual = iterate(problem, good, target, spec.method, tolerance,
                                                min(spec.max_iterations - used, 40), history, used)
        if converged and final:
            return it, True, used, residual
        if converged:
            good, last = it, parameter
            parameter = schedule.sharper(parameter, target_parameter)
        elif parameter == schedule.softened(target_parameter, 1e3) or not schedule.back_off():
            break
        else:
            parameter = schedule.sharper(last, target_parameter)
        problem.model = wanted.with_regularisation(parameter)
    return it, False, used, residual


def _problem(case: Case, domain: Domain, model, rate_floor: float):
    if domain.dimension == 1:
        return concentric_problem(case, domain, model, rate_floor), (None, None)
    problem, velocity, pressure = eccentric_problem(case, domain, model, rate_floor)
    return problem, (velocity, pressure)


def _start(problem: CoupledProblem, case: Case, model, rate: float) -> Iterate:
    """A stress-consistent start: the Newtonian solution with the model's viscosity at the
    characteristic rate, then one solve with the viscosity the model has, point by point,
    at that solution's stress (close to the answer where statics fixes the stress)."""
    viscosity = float(model.viscosity(np.array([rate]))[0])
    gradient = case.drive.pressure_gradient or 0.0
    it = Iterate(problem.boundary.copy(), np.zeros(problem.pressure_size), gradient)
    newtonian = _step(problem, it, case.drive.flow_rate, viscosity_override=viscosity)
    if model.name == "newtonian":
        return newtonian
    _, rate_n, _ = problem.state(newtonian.x)
    rates = _rates_at_stress(model, viscosity * rate_n, np.maximum(rate_n, problem.rate_floor))
    field = model.viscosity(np.maximum(rates, problem.rate_floor))
    if not np.all(np.isfinite(field)) or not np.all(field > 0):
        return newtonian
    return _step(problem, newtonian, case.drive.flow_rate, viscosity_override=field)


def _finish(case, domain, problem, bases, outcome, failure, history,
            started) -> HelicalSolution:
    spec = case.solver
    if outcome is None:
        model = case.fluid.model
        return HelicalSolution(case, domain, model, np.zeros(domain.basis.N),
                               case.drive.pressure_gradient or 0.0, False, len(history),
                               math.inf, history, f"not converged: {failure}",
                               time.perf_counter() - started)
    (velocity, pressure), (it, converged, used, residual) = bases, outcome
    finite = bool(np.all(np.isfinite(it.x)) and math.isfinite(residual))
    converged = bool(converged and finite and residual <= spec.tolerance)
    shown = f"{residual:.2e}" if math.isfinite(residual) else "not finite"
    message = (f"converged in {used} iterations (relative residual {shown})" if converged else
               f"not converged: {spec.method} reached {used} iterations with relative "
               f"residual {shown} (tolerance {spec.tolerance:.1e})")
    if not finite:
        it = Iterate(problem.boundary.copy(), np.zeros(problem.pressure_size), 0.0)
    n = domain.basis.N
    nu = problem.plan.size - n
    axial = it.x[nu:] if domain.dimension == 2 else it.x[:n]
    solution = HelicalSolution(case, domain, problem.model, axial, float(it.gradient), converged,
                               used, float(residual), history, message,
                               rate_floor=problem.rate_floor)
    solution.warnings.extend(_helical_warnings(case, problem.model))
    _derived(solution, problem, it, velocity, pressure)
    solution.seconds = time.perf_counter() - started
    return solution


def _derived(solution: HelicalSolution, problem: CoupledProblem, it: Iterate, velocity, pressure):
    """Wall forces and torques (from the residual at the wall unknowns), powers, the
    fields at the dofs, unyielded zones and the Taylor number."""
    case, domain = solution.case, solution.domain
    basis, n = domain.basis, domain.basis.N
    residual = problem.momentum(it.x, it.pressure, it.gradient)
    speeds = _angular_speeds(case)
    axial_offset = 0 if domain.dimension == 1 else problem.plan.size - n
    if domain.dimension == 1:
        omega = it.x[n:]
        solution.angular_speed = omega
        solution.azimuthal_velocity = basis.doflocs[0] * omega
        for name, wall in domain.walls.items():
            solution.torque_per_length[name] = float(residual[n + wall.dofs].sum())
    else:
        ix, iy = velocity.split_indices()
        ux, uy = it.x[ix], it.x[iy]
        x, y = basis.doflocs
        distance = np.maximum(np.hypot(x, y), 1e-300)
        solution.in_plane_velocity = np.array([ux, uy])
        solution.azimuthal_velocity = (x * uy - y * ux) / distance
        solution.angular_speed = solution.azimuthal_velocity / distance
        pinned = np.concatenate([[0.0], it.pressure])
        solution.in_plane_pressure = pinned - pinned.mean()
        solution.velocity_basis, solution.pressure_basis = velocity, pressure
        for name, facets in _boundary_facets(basis.mesh, case).items():
            dofs = velocity.get_dofs(facets).all()
            xc, yc = _wall_centre(case, name)
            lever = np.where(np.isin(dofs, ix), -(velocity.doflocs[1, dofs] - yc),
                             velocity.doflocs[0, dofs] - xc)
            solution.torque_per_length[name] = float(residual[dofs] @ lever)
            solution.in_plane_wall_force[name] = (float(residual[np.intersect1d(dofs, ix)].sum()),
                                                  float(residual[np.intersect1d(dofs, iy)].sum()))
    axial_power = -it.gradient * problem.flow_rate(it.x)
    for name, wall in domain.walls.items():
        force = float(residual[axial_offset + wall.dofs].sum())    # what the wall applies on the fluid
        solution.axial_wall_force[name] = -force
        solution.axial_wall_shear_stress[name] = -force / wall.perimeter
        axial_power += wall.value * force
    solution.flow_rate = problem.flow_rate(it.x)
    solution.power_per_length = {
        "axial": float(axial_power),
        "rotational": float(sum(speeds[k] * m for k, m in solution.torque_per_length.items())),
        "dissipation": problem.dissipation(it.x)}
    _fields(solution, problem, it)


def _fields(solution: HelicalSolution, problem: CoupledProblem, it: Iterate):
    """Shear rate and viscosity at the dofs, unyielded zones, Taylor number."""
    basis, model = solution.domain.basis, problem.model
    _, rate, viscosity = problem.state(it.x)
    true_rate = np.sqrt(np.maximum(rate ** 2 - problem.rate_floor ** 2, 0.0))
    solution.shear_rate = np.maximum(basis.project(true_rate), 0.0)
    solution.viscosity = np.maximum(basis.project(viscosity), 0.0)
    if model.is_yield_stress:
        unyielded = viscosity * rate < model.yield_stress
        weight = problem.plan.weight
        solution.unyielded_fraction = float(np.sum(weight * unyielded) / np.sum(weight))
        if solution.domain.dimension == 1:
            solution.plug_intervals = _intervals(np.asarray(basis.global_coordinates())[0],
                                                 unyielded)
    solution.taylor_number = taylor_number(solution.case, solution.viscosity)
    if solution.taylor_number is not None and solution.taylor_number > CRITICAL_TAYLOR_NUMBER:
        solution.warnings.append(
            f"Taylor number {solution.taylor_number:.3g} exceeds {CRITICAL_TAYLOR_NUMBER:.0f} "
            "(narrow-gap onset of Taylor vortices, Taylor 1923): the flow is likely to carry "
            "vortices, which this laminar helical solution does not contain")


def _intervals(r: np.ndarray, mask: np.ndarray) -> list[tuple[float, float]]:
    """Contiguous runs of masked quadrature points, as (r_start, r_end) pairs."""
    order = np.argsort(r.ravel())
    radii, flags = r.ravel()[order], mask.ravel()[order]
    runs, start = [], None
    for k, flag in enumerate(flags):
        if flag and start is None:
            start = k
        if start is not None and (not flag or k == flags.size - 1):
            end = k if flag else k - 1
            runs.append((float(radii[start]), float(radii[end])))
            start = None
    return runs


#: the quantities of a helical solution a mesh-convergence study follows (key -> label
#: with its unit; all per length of the annulus)
CONVERGENCE_QUANTITIES = {
    "inner_torque_per_length": "torque on inner wall [N m/m]",
    "outer_torque_per_length": "torque on outer wall [N m/m]",
    "rotational_power_per_length": "rotation power [W/m]",
    "dissipation_per_length": "dissipation [W/m]",
}


def helical_convergence_quantities(solution: HelicalSolution) -> dict[str, float]:
    """The scalars of a helical solution a mesh-convergence study follows beside its
    headline flow rate or pressure gradient: the torque per length (N m/m) applied to
    each wall, the rotational power ``sum Omega M`` and the dissipation ``int eta gamma^2
    dA`` (W/m). Each converges as the mesh is refined, the torques (wall reactions of the
    coupled residual) at the order of the energy, twice the velocity's gradient order."""
    torque, power = solution.torque_per_length, solution.power_per_length
    return {"inner_torque_per_length": float(torque.get("inner", math.nan)),
            "outer_torque_per_length": float(torque.get("outer", math.nan)),
            "rotational_power_per_length": float(power.get("rotational", math.nan)),
            "dissipation_per_length": float(power.get("dissipation", math.nan))}


def taylor_number(case: Case, viscosity_at_dofs) -> float | None:
    """``Ta = (Omega_i - Omega_o)^2 R_i d^3 / nu^2`` (narrow-gap form, recalled from
    memory), with ``nu = eta_mean / rho`` and ``eta_mean`` the mean apparent viscosity at
    the dofs; None without a density. Rotation of the outer wall alone, or any rotation
    with ``|Omega_o| R_o^2 >= |Omega_i| R_i^2`` in the same sense, satisfies Rayleigh's
    criterion (stable, inviscid argument; recalled from memory): then 0."""
    density = getattr(case.fluid, "density", None)
    if not density:
        return None
    g, d = case.geometry, case.drive
    wi, wo = d.inner_angular_speed, d.outer_angular_speed
    if wi * wo >= 0 and abs(wo) * g.outer_radius ** 2 >= abs(wi) * g.inner_radius ** 2:
        return 0.0
    nu = float(np.mean(viscosity_at_dofs)) / density
    gap = g.outer_radius - g.inner_radius
    return float((wi - wo) ** 2 * g.inner_radius * gap ** 3 / nu ** 2)


def _helical_warnings(case: Case, model) -> list[str]:
    if getattr(case.fluid, "regularisation", None) == "none":
        return ["exact yield-stress flow is not available for helical flow: solved with the "
                f"{model.regularisation} regularisation (parameter {model.regularisation_parameter:.3g} "
                f"{model.regularisation_unit})"]
    return []
