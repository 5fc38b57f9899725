"""The discrete axial/rotational momentum balance: weak forms, the vectorised assembly
plan and the :class:`Problem` that assembles residual and tangent on one domain.

R(u)[v] = int a s^2 eta(g) grad u . grad v dx + G int a v dx, with g = s |grad u|,
``a`` the area weight and ``s`` the rate factor (see :mod:`gnflow.geometry`).
"""

from __future__ import annotations

import copy
import math

import numpy as np
import scipy.sparse as sp
from skfem import BilinearForm, LinearForm
from skfem.helpers import dot, grad

from .. import rheology
from ..geometry import Domain
from .linear import LinearSolver, inner


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

#: The relative residual at or below which its round-off share is taken out (see
#: Problem._beyond_round_off); above it the round-off share is far too small to matter
#: and the extra pass over the elements is skipped.
ROUND_OFF_CHECK = 1e-7
#: Multiple of the componentwise round-off bound treated as round-off: the residual of
#: converged solves sits at 0.01-1.1 times the bound (measured on 400-800 P2 cells:
#: power law n = 0.1 and 2, Newtonian), so 4 leaves a margin and is still far below any
#: residual that carries information.
ROUND_OFF_FACTOR = 4.0
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


def _norm(x: np.ndarray) -> float:
    """Euclidean norm without underflow or overflow of the squares (entries down to the
    smallest subnormal, up to the largest float)."""
    largest = float(np.max(np.abs(x), initial=0.0))
    if not (largest > 0.0 and math.isfinite(largest)):
        return largest
    scaled = x / largest
    return largest * math.sqrt(inner(scaled, scaled))


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
        # |grad phi|^2 at each point, for the diagonal: summed over the dimensions here, it
        # takes half the memory of the squared gradients
        self.gradient_norms = np.einsum("bdeq,bdeq->ebq", grads, grads)
        self.dx = basis.dx
        self.dofs = basis.element_dofs.T.copy()                     # (elements, nb)
        index = -np.ones(basis.N, dtype=np.int64)
        index[free] = np.arange(free.size)
        local = index[self.dofs]
        rows = np.broadcast_to(local[:, :, None], (ne, nb, nb))
        cols = np.broadcast_to(local[:, None, :], (ne, nb, nb))
        self.keep = (rows >= 0) & (cols >= 0)
        keys = rows[self.keep] * free.size + cols[self.keep]
        unique, position = np.unique(keys, return_inverse=True)
        # int32 halves the largest index array of the plan (36 entries per P2 triangle)
        self.position = position.astype(np.int32 if unique.size < 2 ** 31 else np.int64)
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

    def magnitude(self, stiffness, u) -> np.ndarray:
        """``sum_j int stiffness |grad phi_i| |grad phi_j| |u_j|`` for every dof ``i``: the
        componentwise size ``|A| |u|`` of the operator with that stiffness applied to ``u``
        (the residual that rounding ``u`` to floating point leaves, up to a factor eps)."""
        size = np.abs(self.grads)
        along = np.matmul(np.abs(u[self.dofs])[:, None, :], size)[:, 0, :]   # (elements, dim * nq)
        weighted = along * np.tile(stiffness * self.dx, (1, self.dim))
        return self._scatter(np.matmul(size, weighted[:, :, None])[:, :, 0])

    def diagonal(self, coefficient) -> np.ndarray:
        """``int coefficient |grad v|^2`` for every dof."""
        return self._scatter(np.einsum("ebq,eq->eb", self.gradient_norms, coefficient * self.dx))

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


class Problem:
    """The discrete problem on one domain with one model; assembles residual and tangent."""

    def __init__(self, domain: Domain, model: rheology.Model):
        self.domain = domain
        self.model = model
        basis = domain.basis
        x = np.asarray(basis.global_coordinates())
        self.area_weight = domain.area_weight(x)
        self.rate_factor = domain.rate_factor(x)
        # int a v, as asm(area_integral, ...) gives it, without the form machinery
        # (a 1-D case is solved in milliseconds; the general assembly costs several)
        values = np.array([basis.basis[i][0].value for i in range(basis.Nbfun)])
        self.load = np.bincount(basis.element_dofs.ravel(),
                                weights=np.sum(values * (self.area_weight * basis.dx), axis=2).ravel(),
                                minlength=basis.N)
        self.fixed = domain.wall_dofs
        self.free = np.setdiff1d(np.arange(basis.N), self.fixed)
        self.rate_floor = 0.0
        self.linear = LinearSolver("direct", self.free.size, dimension=domain.dimension)
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
            # floor * floor: a Python float ** 2 raises OverflowError where numpy gives inf
            rate = np.sqrt(s2 * np.sum(gradient ** 2, axis=0) + self.rate_floor * self.rate_floor)
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

    def relative_residual(self, u, pressure_gradient, beyond_round_off: bool = True) -> float:
        """Residual on the free dofs over the size of the forces in balance; with
        ``beyond_round_off`` (the convergence test) less its round-off share
        (:meth:`_beyond_round_off`), else the raw value.

        Both are measured in the norm scaled by the operator's diagonal,
        ``|r|_D = |D^-1/2 r|``, an inexpensive stand-in for the energy dual norm. In the
        plug of a sharply regularised yield-stress fluid the viscosity is 1e3-1e4 times
        the yielded one and the velocity differences there sit at round-off level; the
        scaling weights each equation by its own stiffness so that those round-off
        residuals do not mask convergence elsewhere (nor fake it).
        """
        gradient, coefficient, _ = self._coefficients(u, False)
        internal = self.plan.force(coefficient * gradient)
        diagonal = self.plan.diagonal(coefficient)
        # The ratio does not change if the weights are scaled by one constant; scaling
        # them so that the stiffest dof has weight 1 keeps the weighted forces in range
        # where |D^-1/2 r| itself would underflow (a viscosity of 1e267 with a load of
        # 1e-205 gives 1e-338): an underflowed residual and scale must not read as 0/0
        # made "converged".
        weight = np.sqrt(np.max(diagonal[self.free], initial=0.0) / diagonal)
        residual = (internal + pressure_gradient * self.load)[self.free] * weight[self.free]
        scale = max(_norm(internal * weight), _norm(pressure_gradient * self.load * weight))
        if scale == 0.0:
            return 0.0 if _norm(residual) == 0.0 else math.inf
        relative = float(_norm(residual) / scale)
        if beyond_round_off and relative <= ROUND_OFF_CHECK:
            residual = self._beyond_round_off(u, pressure_gradient, residual, weight)
            relative = float(_norm(residual) / scale)
        return relative

    def _beyond_round_off(self, u, pressure_gradient, residual, weight) -> np.ndarray:
        """The (weighted, free-dof) residual less the part that rounding the state to
        floating point leaves on each equation.

        Rounding every dof of the exact discrete solution to the nearest float leaves
        ``|r_i| <= eps (sum_j |J_ij| |u_j| + |G load_i|)`` (the componentwise backward
        error of Oettli & Prager, 1964, Numer. Math. 6), with ``J`` the tangent. No
        iteration can go below that, and it is not small: on 400 cells a power law with
        n = 0.1 has a floor of 2e-10 to 4e-10 in the relative residual (the viscosity
        spans many decades), above the default tolerance of 1e-10, so the solve stalled.
        Each entry is reduced by ``ROUND_OFF_FACTOR`` times its bound, and an equation
        within it counts as satisfied: what is left is the residual that more iterations
        could still remove.
        """
        gradient, coefficient, derivative = self._coefficients(u, True)
        # the tangent's stiffness along grad u: eta + eta' g (in the weighted form)
        stiffness = coefficient + np.abs(derivative) * np.sum(gradient ** 2, axis=0)
        bound = np.finfo(float).eps * ROUND_OFF_FACTOR * (
            self.plan.magnitude(stiffness, u) + np.abs(pressure_gradient * self.load))
        bound = bound[self.free] * weight[self.free]
        return np.sign(residual) * np.maximum(np.abs(residual) - bound, 0.0)

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
        return inner(self.load, u)

    def sibling(self, model: rheology.Model) -> "Problem":
        """The same discrete problem with another model (sharing the assembly plan)."""
        _ = self.plan   # built here, so that neither copy builds its own
        other = copy.copy(self)
        other.model = model
        other._memo = None
        return other
