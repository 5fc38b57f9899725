"""The vectorised assembly plan against scikit-fem's asm of the weak forms it implements."""

import numpy as np
import pytest
from skfem import asm

from gnflow.case import Case
from gnflow.geometry import build_domain
from gnflow.solver import (Problem, area_integral, axial_momentum, axial_residual,
                           axial_tangent, stiffness_diagonal)

GEOMETRIES = {
    "pipe P2": ({"shape": "pipe", "radius": 0.01}, {"cells": 7, "degree": 2}),
    "slit P1": ({"shape": "slit", "gap": 0.01}, {"cells": 9, "degree": 1}),
    "eccentric annulus P2": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.02,
                              "eccentricity": 0.4}, {"cells": 3, "degree": 2}),
    "rectangle P1": ({"shape": "rectangle", "width": 0.02, "height": 0.01},
                     {"cells": 3, "degree": 1}),
}


@pytest.mark.parametrize("name", GEOMETRIES)
def test_plan_equals_asm_of_the_forms(name):
    geometry, mesh = GEOMETRIES[name]
    case = Case.from_dict({"fluid": {"model": "carreau", "zero_shear_viscosity": 3.0,
                                     "time_constant": 0.7, "flow_index": 0.4},
                           "geometry": geometry, "drive": {"pressure_gradient": -10.0},
                           "mesh": mesh})
    domain = build_domain(case)
    problem = Problem(domain, case.fluid.model)
    problem.rate_floor = 1e-9
    rng = np.random.default_rng(3)
    u = rng.standard_normal(domain.dofs)
    gradient, coefficient, derivative = problem._coefficients(u, True)
    basis = domain.basis
    free = problem.free
    expected = asm(axial_tangent, basis, coefficient=coefficient, grad_state=gradient,
                   tangent_coefficient=derivative).tocsr()[free][:, free]
    assert abs(problem.tangent(u) - expected).max() <= 1e-12 * abs(expected).max()
    frozen = asm(axial_momentum, basis, coefficient=coefficient).tocsr()[free][:, free]
    assert abs(problem.frozen(coefficient) - frozen).max() <= 1e-12 * abs(frozen).max()
    residual = asm(axial_residual, basis, coefficient=coefficient, grad_state=gradient,
                   pressure_gradient=-10.0, area_weight=problem.area_weight)
    assert np.allclose(problem.residual(u, -10.0), residual, rtol=1e-12,
                       atol=1e-12 * np.abs(residual).max())
    diagonal = asm(stiffness_diagonal, basis, coefficient=coefficient)
    assert np.allclose(problem.plan.diagonal(coefficient), diagonal, rtol=1e-12)
    load = asm(area_integral, basis, area_weight=problem.area_weight)
    assert np.allclose(problem.load, load, rtol=1e-12, atol=1e-14 * np.abs(load).max())
