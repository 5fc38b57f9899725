"""The exact start of a 1-D Newton iteration (gnflow.solver.line_flow.line_start) and the
per-mesh objects a repeated 1-D solve shares."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from gnflow import Case
from gnflow.geometry import build_domain
from gnflow.solver.assembly import Problem
from gnflow.solver.line_flow import line_start


def _problem(fluid, geometry, drive):
    case = Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive,
                           "mesh": {"cells": 200}})
    problem = Problem(build_domain(case), case.fluid.model)
    problem.rate_floor = 1e-12
    return problem


@pytest.mark.parametrize("n", [0.5, 1.5])
def test_slit_start_places_the_zero_stress_plane_of_a_moving_wall_flow(n):
    """Power law, fixed wall at y = 0, wall at y = h moving at U, G < 0: tau = G (y - y0)
    and u' = sign(y0 - y) (|G| |y - y0| / K)^(1/n), so with m = 1/n and
    c = (|G| / K)^m, u(h) = c (|y0|^(m+1) - |y0 - h|^(m+1)) / (m + 1) = U fixes y0 (the
    momentum balance of Bird, Armstrong & Hassager 1987, Dynamics of Polymeric Liquids
    vol. 1, with a moving wall; recalled from memory)."""
    K, h, G, U = (3.0 if n < 1 else 0.2), 0.02, -6000.0, 0.3
    problem = _problem({"model": "power-law", "consistency": K, "flow_index": n},
                       {"shape": "slit", "gap": h},
                       {"pressure_gradient": G, "wall_speed": {"top": U}})
    u = line_start(problem, problem.model, G)
    assert u is not None
    m, c = 1.0 / n, (abs(G) / K) ** (1.0 / n)
    y0 = brentq(lambda y: c * (abs(y) ** (m + 1) - abs(y - h) ** (m + 1)) / (m + 1) - U,
                -10 * h, 11 * h, xtol=1e-16 * h, rtol=1e-15)
    held, flux = problem.line_start_flux
    assert held is u
    # the flux at the top wall is q(h) = G (h - y0)
    assert abs((h - flux / G) - y0) <= 1e-9 * h
    x = problem.domain.basis.doflocs[0]
    exact = c * (abs(y0) ** (m + 1) - np.abs(y0 - x) ** (m + 1)) / (m + 1)
    assert np.max(np.abs(u - exact)) <= 1e-8 * U


@pytest.mark.parametrize("n, tolerance", [(0.5, 1e-12), (0.7, 1e-9)])
def test_pipe_start_is_the_exact_power_law_profile(n, tolerance):
    """u(r) = n / (n + 1) (|G| / (2 K))^(1/n) (R^(1/n + 1) - r^(1/n + 1)) (Bird, Armstrong &
    Hassager 1987, vol. 1; recalled from memory). For n = 0.5 the rate is a polynomial
    the Gauss rules integrate exactly."""
    K, R, G = 2.0, 0.025, -3000.0
    problem = _problem({"model": "power-law", "consistency": K, "flow_index": n},
                       {"shape": "pipe", "radius": R}, {"pressure_gradient": G})
    u = line_start(problem, problem.model, G)
    r = problem.domain.basis.doflocs[0]
    exact = n / (n + 1) * (abs(G) / (2 * K)) ** (1 / n) * (R ** (1 / n + 1) - r ** (1 / n + 1))
    assert np.max(np.abs(u - exact)) <= tolerance * np.max(exact)


def test_start_with_rates_beyond_the_inverted_range_is_declined():
    """A Cross fluid with rate exponent 0.9 and no plateau has wall rates near 1e51 1/s
    in this pipe: beyond the e^60 1/s the summary inverts flow curves to, so the exact
    start is not offered (the general one decides how the solve ends)."""
    problem = _problem({"model": "cross", "zero_shear_viscosity": 10.0, "time_constant": 1e6,
                        "rate_exponent": 0.9},
                       {"shape": "pipe", "radius": 0.01}, {"pressure_gradient": -1000.0})
    assert line_start(problem, problem.model, -1000.0) is None


def test_repeated_line_mesh_shares_read_only_parts():
    """Two domains of one 1-D case share the basis, the assembly plan and the load, which
    no problem may change in place."""
    case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 2.0, "flow_index": 0.5},
                           "geometry": {"shape": "pipe", "radius": 0.02},
                           "drive": {"pressure_gradient": -1000.0}, "mesh": {"cells": 50}})
    first, second = Problem(build_domain(case), case.fluid.model), \
        Problem(build_domain(case), case.fluid.model)
    assert first.domain is not second.domain and first.domain.basis is second.domain.basis
    assert first.plan is second.plan and first.load is second.load
    with pytest.raises(ValueError):
        first.load[0] = 1.0
    other = Case.from_dict({**case.raw, "mesh": {"cells": 60}})
    assert Problem(build_domain(other), other.fluid.model).domain.basis is not first.domain.basis
    assert math.isclose(first.flow_rate(np.ones(first.load.size)), math.pi * 0.02 ** 2,
                        rel_tol=1e-12)
