"""The vectorised assembly plan against scikit-fem's asm of the weak forms it implements."""

import numpy as np
import pytest
from skfem import Basis, BilinearForm, ElementTriMorley, ElementTriP2, MeshTri, asm

from gnflow.case import Case
from gnflow.geometry import build_domain
from gnflow.solver import (AssemblyPlan, Problem, area_integral, axial_momentum,
                           axial_residual, axial_tangent, stiffness_diagonal)

# 1-D (pipe, slit) and 2-D, P1 and P2, straight (affine map) and curved (isoparametric
# P2 annulus) elements
GEOMETRIES = {
    "pipe P2": ({"shape": "pipe", "radius": 0.01}, {"cells": 7, "degree": 2}),
    "slit P1": ({"shape": "slit", "gap": 0.01}, {"cells": 9, "degree": 1}),
    "eccentric annulus P2": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.02,
                              "eccentricity": 0.4}, {"cells": 3, "degree": 2}),
    "eccentric annulus P1": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.02,
                              "eccentricity": 0.4}, {"cells": 2, "degree": 1}),
    "rectangle P1": ({"shape": "rectangle", "width": 0.02, "height": 0.01},
                     {"cells": 3, "degree": 1}),
    "rectangle P2": ({"shape": "rectangle", "width": 0.02, "height": 0.01},
                     {"cells": 3, "degree": 2}),
}


@BilinearForm
def _componentwise_size(u, v, w):
    """``stiffness |grad u| . |grad v|`` (componentwise absolute values): the form of
    AssemblyPlan.magnitude."""
    return w.stiffness * sum(abs(u.grad[d]) * abs(v.grad[d]) for d in range(u.grad.shape[0]))


def _problem(name):
    geometry, mesh = GEOMETRIES[name]
    case = Case.from_dict({"fluid": {"model": "carreau", "zero_shear_viscosity": 3.0,
                                     "time_constant": 0.7, "flow_index": 0.4},
                           "geometry": geometry, "drive": {"pressure_gradient": -10.0},
                           "mesh": mesh})
    domain = build_domain(case)
    problem = Problem(domain, case.fluid.model)
    problem.rate_floor = 1e-9
    u = np.random.default_rng(3).standard_normal(domain.dofs)
    return domain, problem, u


def _close_matrices(actual, expected):
    assert actual.shape == expected.shape
    assert abs(actual - expected).max() <= 1e-12 * abs(expected).max()


@pytest.mark.parametrize("name", GEOMETRIES)
def test_plan_equals_asm_of_the_forms(name):
    domain, problem, u = _problem(name)
    gradient, coefficient, derivative = problem._coefficients(u, True)
    basis = domain.basis
    free = problem.free
    expected = asm(axial_tangent, basis, coefficient=coefficient, grad_state=gradient,
                   tangent_coefficient=derivative).tocsr()[free][:, free]
    _close_matrices(problem.tangent(u), expected)
    frozen = asm(axial_momentum, basis, coefficient=coefficient).tocsr()[free][:, free]
    _close_matrices(problem.frozen(coefficient), frozen)
    residual = asm(axial_residual, basis, coefficient=coefficient, grad_state=gradient,
                   pressure_gradient=-10.0, area_weight=problem.area_weight)
    assert np.allclose(problem.residual(u, -10.0), residual, rtol=1e-12,
                       atol=1e-12 * np.abs(residual).max())
    diagonal = asm(stiffness_diagonal, basis, coefficient=coefficient)
    assert np.allclose(problem.plan.diagonal(coefficient), diagonal, rtol=1e-12)
    load = asm(area_integral, basis, area_weight=problem.area_weight)
    assert np.allclose(problem.load, load, rtol=1e-12, atol=1e-14 * np.abs(load).max())


@pytest.mark.parametrize("name", GEOMETRIES)
def test_plan_gradient_magnitude_and_structure(name):
    domain, problem, u = _problem(name)
    plan, basis = problem.plan, domain.basis
    expected = np.asarray(basis.interpolate(u).grad)
    assert np.allclose(plan.gradient(u), expected, rtol=1e-12, atol=1e-12 * np.abs(expected).max())
    stiffness = 1.0 + np.random.default_rng(5).random(basis.dx.shape)
    size = asm(_componentwise_size, basis, stiffness=stiffness) @ np.abs(u)
    assert np.allclose(plan.magnitude(stiffness, u), size, rtol=1e-12)
    # the symmetric assembly gives a symmetric matrix in canonical CSR form (sorted
    # columns, no duplicates), with exactly the entries of the free dofs' couplings
    coefficient = problem.frozen_coefficient(u)
    matrix = problem.frozen(coefficient)
    assert matrix.has_canonical_format
    assert abs(matrix - matrix.T).max() == 0.0
    pattern = asm(axial_momentum, basis, coefficient=np.ones_like(coefficient)).tocsr()
    pattern = pattern[problem.free][:, problem.free]
    pattern.data[:] = 1.0
    pattern.eliminate_zeros()
    assert matrix.nnz == pattern.nnz


def test_plan_with_every_dof_fixed_but_one_and_none_fixed():
    """No free dof couplings dropped or invented at the extremes of the free set."""
    basis = Basis(MeshTri().refined(2), ElementTriP2())
    rng = np.random.default_rng(7)
    coefficient = 1.0 + rng.random(basis.dx.shape)
    full = asm(axial_momentum, basis, coefficient=coefficient).tocsr()
    for free in (np.arange(basis.N), np.array([basis.N // 2])):
        plan = AssemblyPlan(basis, free)
        _close_matrices(plan.matrix(coefficient), full[free][:, free])


def test_plan_refuses_a_non_lagrange_element():
    basis = Basis(MeshTri(), ElementTriMorley())
    with pytest.raises(TypeError, match="ElementTriMorley"):
        AssemblyPlan(basis, np.arange(basis.N))


def test_a_plan_with_no_free_dofs_builds_and_solves():
    """One P1 cell of a slit has only wall dofs: an empty sparsity pattern."""
    from gnflow import Case, solve
    case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
                           "geometry": {"shape": "slit", "gap": 1.0},
                           "drive": {"pressure_gradient": -1.0},
                           "mesh": {"cells": 1, "degree": 1}})
    solution = solve(case)
    assert solution.converged and solution.domain.dofs == 2
