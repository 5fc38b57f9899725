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
from skfem.element import ElementH1
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
    so this plan keeps what does not change, found once.

    The gradients of Lagrange basis functions are ``grad phi_i = M^T grad^ phi_i`` at
    every point, with ``grad^ phi_i`` the gradient on the reference element (the same for
    all elements) and ``M`` the inverse Jacobian of the element map at the point. So the
    element matrix of a coefficient tensor ``C`` (``c I`` frozen, ``c I + t g g^T`` for
    the tangent) is ``sum_q grad^ phi_i . (M C M^T) grad^ phi_j dx``: its upper triangle
    (it is symmetric: 21 of 36 entries for P2 triangles) on a block of elements is one
    matrix product of the symmetric tensor ``M C M^T dx`` (3 components in 2-D) at the
    points with a small constant table. Gradients and forces are matrix products with
    the reference gradients in the same way. One ``bincount`` sums the upper-triangle
    entries into the upper triangle of the CSR matrix of the free dofs, and a stored
    index copies it to both halves. The loops run over blocks of elements whose work
    arrays stay in cache. Nothing the size of all basis gradients is stored (the
    inverse Jacobians are a third of it for P2 triangles). ``tests/test_assembly.py``
    checks the plan against ``asm`` of the forms.
    """

    def __init__(self, basis, free: np.ndarray):
        nb, (dim, nq) = basis.Nbfun, basis.X.shape
        self.dim, self.nq, self.nb, self.size = dim, nq, nb, basis.N
        self.dx = basis.dx
        self.dofs = basis.element_dofs.T.copy()                     # (elements, nb)
        if not isinstance(basis.elem, ElementH1):
            raise TypeError(f"AssemblyPlan: {type(basis.elem).__name__} is not a Lagrange "
                            "(H1) element")
        # reference gradients (nb, dim, nq); the inverse Jacobian (dim, dim, elements, nq)
        reference = np.array([basis.elem.lbasis(basis.X, i)[1] for i in range(nb)])
        self.inverse = np.ascontiguousarray(basis.mapping.invDF(basis.X, basis.tind))
        # (dim, nb, nq), and transposed (dim, nq, nb): one matrix per dimension
        self.reference = np.ascontiguousarray(reference.transpose(1, 0, 2))
        self.reference_t = np.ascontiguousarray(reference.transpose(1, 2, 0))
        self._check_gradients(basis)
        # the symmetric pairs (m, n), m <= n, of a dim x dim tensor, and M M^T on them
        self.pairs = [(m, n) for m in range(dim) for n in range(m, dim)]
        self.metric = np.array([np.sum(self.inverse[m] * self.inverse[n], axis=0)
                                for m, n in self.pairs])            # (pairs, elements, nq)
        # table[s][q, k]: the part of element-matrix entry k = (i, j), i <= j, that the
        # tensor component s = (m, n) at point q multiplies
        upper_i, upper_j = np.triu_indices(nb)
        table = np.empty((len(self.pairs), nq, upper_i.size))
        for s, (m, n) in enumerate(self.pairs):
            table[s] = (reference[upper_i, m] * reference[upper_j, n]).T
            if m != n:
                table[s] += (reference[upper_i, n] * reference[upper_j, m]).T
        # as matrices with rows ordered (pair, point): (pairs * nq, 21) and (pairs * nq, nb)
        self.table = table.reshape(-1, upper_i.size)
        self.diagonal_table = np.ascontiguousarray(self.table[:, upper_i == upper_j])
        self._structure(free, upper_i, upper_j)

    def _check_gradients(self, basis) -> None:
        """The gradients rebuilt from the reference ones equal the basis's own (on the
        first, a middle and the last element): the plan holds for elements that map
        gradients by the inverse Jacobian (Lagrange elements) only."""
        chosen = np.array([0, basis.nelems // 2, basis.nelems - 1])
        given = np.array([basis.basis[i][0].grad[:, chosen] for i in range(basis.Nbfun)])
        error = np.max(np.abs(self._gradients(chosen) - given))
        if not error <= 1e-10 * np.max(np.abs(given)):
            raise TypeError(f"AssemblyPlan: the element {type(basis.elem).__name__} does not "
                            "map gradients by the inverse Jacobian")

    def _gradients(self, chosen) -> np.ndarray:
        """The basis gradients on the elements ``chosen``, (nb, dim, elements, nq)."""
        return np.einsum("mdeq,mjq->jdeq", self.inverse[:, :, chosen], self.reference)

    def _structure(self, free, upper_i, upper_j) -> None:
        """The CSR structure of the free dofs' matrix, the place of every element
        upper-triangle entry in its upper triangle, and the copy to both halves.

        scipy's compiled sparse kernels do the sorting: the upper pattern is a COO to CSR
        conversion (a counting sort by row, duplicates summed); each element entry finds
        its place by a lookup in that pattern, whose values are the entries' own
        numbers; and the symmetric matrix ``U + strict_upper(U)^T``, formed from those
        numbers, lists for each of its entries the upper entry it copies (1M unknowns:
        3.3 s with numpy's stable argsorts, 1.3 s; the same arrays).
        """
        n = free.size
        small = np.int32 if n < 2 ** 31 - 1 else np.int64
        index = np.full(self.size, -1, dtype=small)
        index[free] = np.arange(n, dtype=small)
        local = index[self.dofs]
        rows, cols = local[:, upper_i], local[:, upper_j]            # (elements, 21)
        low, high = np.minimum(rows, cols), np.maximum(rows, cols)
        kept = low >= 0
        low, high = low[kept], high[kept]
        upper = sp.csr_matrix((np.ones(low.size), (low, high)), shape=(n, n))
        upper.sum_duplicates()
        # the numbers 1..nnz are exact in float64 (below 2^53)
        upper.data = np.arange(1, upper.nnz + 1, dtype=float)
        # entries outside the free block go to one extra slot, dropped; int64 (intp):
        # bincount would convert a narrower index on every call
        position = np.full(rows.shape, upper.nnz, dtype=np.int64)
        if low.size:   # (an empty lookup gives a matrix, not an array)
            position[kept] = np.asarray(upper[low, high]).ravel().astype(np.int64) - 1
        self.position = position.ravel()
        self.upper_size = upper.nnz
        both = (upper + sp.triu(upper, k=1).T).tocsr()
        both.sort_indices()
        self.mirror = both.data.astype(np.int64) - 1
        self.indices = both.indices.astype(np.int32)
        self.indptr = both.indptr.astype(np.int32)
        self.free_size = n

    def _blocks(self):
        """Slices of BLOCK elements."""
        ne = self.dofs.shape[0]
        return [slice(start, min(start + BLOCK, ne)) for start in range(0, ne, BLOCK)]

    def gradient(self, u) -> np.ndarray:
        """grad u at the quadrature points, shape (dim, elements, points)."""
        out = np.empty((self.dim,) + self.dx.shape)
        values = u[self.dofs]
        for chosen in self._blocks():
            # the gradient on the reference element, then M^T of it
            ref = [values[chosen] @ self.reference[m] for m in range(self.dim)]
            inverse = self.inverse[:, :, chosen]
            for d in range(self.dim):
                part = out[d, chosen]
                np.multiply(inverse[0, d], ref[0], out=part)
                for m in range(1, self.dim):
                    part += inverse[m, d] * ref[m]
        return out

    def _scatter(self, local) -> np.ndarray:
        return np.bincount(self.dofs.ravel(), weights=local.ravel(), minlength=self.size)

    def force(self, flux) -> np.ndarray:
        """``int flux . grad v`` for every dof; ``flux`` shape (dim, elements, points)."""
        local = np.empty((self.dofs.shape[0], self.nb))
        for chosen in self._blocks():
            inverse, dx = self.inverse[:, :, chosen], self.dx[chosen]
            for m in range(self.dim):
                # M (flux dx): the flux on the reference element
                mapped = inverse[m, 0] * flux[0, chosen]
                for d in range(1, self.dim):
                    mapped += inverse[m, d] * flux[d, chosen]
                mapped *= dx
                if m == 0:
                    np.matmul(mapped, self.reference_t[m], out=local[chosen])
                else:
                    local[chosen] += mapped @ self.reference_t[m]
        return self._scatter(local)

    def magnitude(self, stiffness, u) -> np.ndarray:
        """``sum_j int stiffness |grad phi_i| |grad phi_j| |u_j|`` for every dof ``i``: the
        componentwise size ``|A| |u|`` of the operator with that stiffness applied to ``u``
        (the residual that rounding ``u`` to floating point leaves, up to a factor eps)."""
        size_u = np.abs(u[self.dofs])
        local = np.empty((self.dofs.shape[0], self.nb))
        for chosen in self._blocks():
            # the work arrays with the elements last: every product runs along them
            inverse = np.ascontiguousarray(self.inverse[:, :, chosen].transpose(0, 1, 3, 2))
            size = np.empty((self.nb, self.dim, self.nq, inverse.shape[-1]))
            for d in range(self.dim):       # the basis gradients, (nb, dim, nq, elements)
                np.multiply(self.reference[0][:, :, None], inverse[0, d], out=size[:, d])
                for m in range(1, self.dim):
                    size[:, d] += self.reference[m][:, :, None] * inverse[m, d]
            np.abs(size, out=size)
            along = np.einsum("je,jdqe->dqe", np.ascontiguousarray(size_u[chosen].T), size)
            along *= (stiffness[chosen] * self.dx[chosen]).T
            local[chosen] = np.einsum("jdqe,dqe->ej", size, along)
        return self._scatter(local)

    def _products(self, table, out, chosen, coefficient, tangent_coefficient=None,
                  gradient=None) -> None:
        """``out = (M C M^T dx) @ table`` on the elements ``chosen``, the tensor on its
        symmetric pairs and points (pairs * nq columns): one matrix product (three with
        6 columns each cost three times as much)."""
        dx = self.dx[chosen]
        weight = coefficient[chosen] * dx
        if tangent_coefficient is not None:
            along = tangent_coefficient[chosen] * dx
            inverse = self.inverse[:, :, chosen]
            # M g: the state's gradient on the reference element
            mapped = []
            for m in range(self.dim):
                part = inverse[m, 0] * gradient[0, chosen]
                for d in range(1, self.dim):
                    part += inverse[m, d] * gradient[d, chosen]
                mapped.append(part)
        work = np.empty((len(self.pairs),) + dx.shape)          # contiguous components
        for s, (m, n) in enumerate(self.pairs):
            np.multiply(weight, self.metric[s, chosen], out=work[s])
            if tangent_coefficient is not None:
                part = along * mapped[m]
                part *= mapped[n]
                work[s] += part
        tensor = work[0] if len(self.pairs) == 1 else \
            np.ascontiguousarray(work.transpose(1, 0, 2)).reshape(dx.shape[0], -1)
        np.matmul(tensor, table, out=out)

    def diagonal(self, coefficient) -> np.ndarray:
        """``int coefficient |grad v|^2`` for every dof."""
        local = np.empty((self.dofs.shape[0], self.nb))
        for chosen in self._blocks():
            self._products(self.diagonal_table, local[chosen], chosen, coefficient)
        return self._scatter(local)

    def matrix(self, coefficient, tangent_coefficient=None, gradient=None) -> sp.csr_matrix:
        """The operator on the free dofs: ``int c grad du . grad v (+ t (g . grad du)(g . grad v))``."""
        upper = np.empty((self.dofs.shape[0], self.table.shape[1]))
        for chosen in self._blocks():
            self._products(self.table, upper[chosen], chosen, coefficient, tangent_coefficient,
                           gradient)
        data = np.bincount(self.position, weights=upper.ravel(), minlength=self.upper_size + 1)
        return sp.csr_matrix((data[self.mirror], self.indices, self.indptr),
                             shape=(self.free_size, self.free_size))


#: Elements per block of the plan's loops: the work arrays of a block stay in cache, and
#: its matrix products ((1024 x 18) @ (18 x 21) at most) are small enough that OpenBLAS
#: runs them on one thread; on the loaded 2-core machine its threads mostly wait
#: (measured: (80 000 x 18) @ (18 x 21) in 24 ms as one call, 6-7 ms in blocks of 512 or
#: 1024 rows, 34 ms in blocks of 2048).
BLOCK = 1024


def _complement(fixed: np.ndarray, size: int) -> np.ndarray:
    """The dofs ``0 .. size-1`` not in ``fixed``, ascending (``setdiff1d`` sorts both: 0.5 s
    at 1M unknowns, this a few milliseconds)."""
    keep = np.ones(size, dtype=bool)
    keep[fixed] = False
    return np.flatnonzero(keep)


class Problem:
    """The discrete problem on one domain with one model; assembles residual and tangent."""

    def __init__(self, domain: Domain, model: rheology.Model):
        self.domain = domain
        self.model = model
        basis = domain.basis
        # the weights, load and dof split depend only on the basis and the walls: kept on
        # the basis (shared by the domains of a repeated 1-D mesh, see geometry._line_basis)
        # and read-only, so that no problem can change another's
        fixed = domain.wall_dofs
        store = basis.__dict__.setdefault("_gnflow_problem_parts", {})
        key = (domain.axisymmetric, domain.kind, fixed.tobytes())
        if key not in store:
            if domain.axisymmetric or domain.kind == "rotational":
                x = np.asarray(basis.global_coordinates())
                area_weight, rate_factor = domain.area_weight(x), domain.rate_factor(x)
            else:   # both are 1: no mapped quadrature points (0.8 s at 1M unknowns)
                area_weight, rate_factor = np.ones(basis.dx.shape), np.ones(basis.dx.shape)
            # int a v, as asm(area_integral, ...) gives it, without the form machinery
            # (a 1-D case is solved in milliseconds; the general assembly costs several)
            # element by element, one basis function at a time: stacking the basis values
            # first copied them all (1M unknowns: 0.99 s for the whole set-up)
            weight = area_weight * basis.dx
            local = np.array([np.einsum("eq,eq->e", basis.basis[i][0].value, weight)
                              for i in range(basis.Nbfun)])
            load = np.bincount(basis.element_dofs.ravel(), weights=local.ravel(),
                               minlength=basis.N)
            parts = (area_weight, rate_factor, load, fixed,
                     _complement(fixed, basis.N))
            for array in parts:
                array.setflags(write=False)
            store[key] = parts
        self.area_weight, self.rate_factor, self.load, self.fixed, self.free = store[key]
        self.rate_floor = 0.0
        #: the size of the round-off share of the residual (relative, as the residual)
        #: at the last state where it was taken out; None before (see newton.merit)
        self.round_off_level = None
        self.linear = LinearSolver("direct", self.free.size, dimension=domain.dimension)
        self._plan = None
        self._memo = self._residual_memo = None

    @property
    def plan(self) -> AssemblyPlan:
        if self._plan is None:
            # one plan per basis and free-dof set, kept on the basis (see __init__)
            plans = self.domain.basis.__dict__.setdefault("_gnflow_plans", {})
            key = self.free.tobytes()
            if key not in plans:
                plans[key] = AssemblyPlan(self.domain.basis, self.free)
            self._plan = plans[key]
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

    def state_gradient(self, u) -> np.ndarray:
        """grad u at the quadrature points, (dim, elements, points), shared with the last
        state's viscosity evaluation (see _coefficients): do not change it in place."""
        return self._coefficients(u, False)[0]

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
        # the last state's values are kept (see _coefficients): a solve tests the final
        # iterate for convergence, and again for its message, with and without round-off
        key = (self.model, self.rate_floor, float(pressure_gradient))
        memo = getattr(self, "_residual_memo", None)
        if memo is None or memo[0] is not u or memo[1] != key:
            memo = self._residual_memo = [u, key, *self._relative_parts(u, pressure_gradient),
                                          None]
        _, _, relative, residual, weight, scale, beyond = memo
        if beyond_round_off and relative <= ROUND_OFF_CHECK and scale != 0.0:
            if beyond is None:
                beyond = memo[6] = self._beyond_round_off(u, pressure_gradient, residual,
                                                          weight, scale)
            return beyond
        return relative

    def _relative_parts(self, u, pressure_gradient):
        """(raw relative residual, weighted free residual, weights, scale) of a state."""
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
            return (0.0 if _norm(residual) == 0.0 else math.inf), residual, weight, scale
        return float(_norm(residual) / scale), residual, weight, scale

    def _beyond_round_off(self, u, pressure_gradient, residual, weight, scale) -> float:
        """The relative size (over ``scale``) of the (weighted, free-dof) residual less
        the part that rounding the state to floating point leaves on each equation; the
        size of that part, relative in the same way, is kept as ``round_off_level``.

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
        self.round_off_level = float(_norm(bound) / scale)
        return float(_norm(np.maximum(np.abs(residual) - bound, 0.0)) / scale)

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
        other._memo = other._residual_memo = other.round_off_level = None
        return other
