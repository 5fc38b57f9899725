"""The shortcuts of the 1-D solve give what the long ways give: the discrete solution found
cell by cell (gnflow.solver.line_flow.discrete_line_solution) is the state Newton on the
whole mesh converges to; line_solution keeps the exact state for the error estimate; the
adapted re-solve started from the discrete solution ends where Newton from the exact
start ends; and an estimate from the exact start that stands for the default mesh's (no
second estimate, gnflow.solver.adapt.refined) makes the same decision. Speed itself is
measured in bench/one_solve.py and bench/sweep.py."""

import sys

import numpy as np
import pytest

from gnflow import Case, solve
from gnflow.geometry import build_domain
from gnflow.solver import adapt
from gnflow.solver.assembly import Problem
from gnflow.solver.continuation import iterate_once
from gnflow.solver.line_flow import discrete_line_solution, line_solution, line_start

FLUIDS = {
    "power-law n=0.3": {"model": "power-law", "consistency": 3.0, "flow_index": 0.3},
    "power-law n=0.5": {"model": "power-law", "consistency": 3.0, "flow_index": 0.5},
    "power-law n=1.5": {"model": "power-law", "consistency": 0.2, "flow_index": 1.5},
    "carreau": {"model": "carreau", "zero_shear_viscosity": 12.0, "time_constant": 0.5,
                "flow_index": 0.4},
    "cross": {"model": "cross", "zero_shear_viscosity": 8.0, "time_constant": 0.3,
              "rate_exponent": 0.75},
    "bingham": {"model": "bingham", "yield_stress": 15.0, "plastic_viscosity": 0.6},
    "herschel-bulkley": {"model": "herschel-bulkley", "yield_stress": 15.0,
                         "consistency": 2.0, "flow_index": 0.5},
}
SHAPES = {
    "slit, moving wall": ({"shape": "slit", "gap": 0.02},
                          {"pressure_gradient": -6000.0, "wall_speed": {"top": 0.3}}),
    "pipe": ({"shape": "pipe", "radius": 0.015}, {"pressure_gradient": -6000.0}),
    "annulus": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03},
                {"pressure_gradient": -3000.0}),
    "annulus, moving wall": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03},
                             {"pressure_gradient": -3000.0, "wall_speed": {"inner": 0.2}}),
    "coaxial cylinders": ({"shape": "coaxial-cylinders", "inner_radius": 0.04,
                           "outer_radius": 0.05}, {"inner_angular_speed": "120 rpm"}),
}


def _case(fluid, shape, mesh=None):
    geometry, drive = SHAPES[shape]
    return Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive,
                           "mesh": mesh if mesh is not None else {"cells": 200}})


@pytest.mark.parametrize("shape", list(SHAPES))
@pytest.mark.parametrize("fluid", list(FLUIDS))
def test_discrete_solution_is_where_newton_converges(fluid, shape):
    """The long way: Newton on the whole mesh, to its tolerance, from the solver's own
    start. The cell-by-cell solution from the exact start meets the same convergence
    test without a step and lies within the tolerance's reach of Newton's state (Newton
    stops within 1e-10 of the residual; the cell-by-cell solution is at round-off)."""
    solved = solve(_case(FLUIDS[fluid], shape)).solution
    assert solved.converged
    problem, gradient = solved.problem(), solved.pressure_gradient
    start = line_start(problem, problem.model, gradient)
    assert start is not None
    u = discrete_line_solution(problem, start, gradient)
    assert u is not None
    assert problem.relative_residual(u, gradient) <= 1e-12
    assert np.max(np.abs(u - solved.u)) <= 1e-9 * np.max(np.abs(solved.u))
    for wall in problem.domain.walls.values():
        assert np.all(u[wall.dofs] == wall.value)
    # Newton from it: converged at once, not a step taken
    outcome = iterate_once(problem, u, gradient, None, "newton", 1e-10, 100, [], 0)
    assert outcome.converged and outcome.iterations == 0


def test_discrete_solution_on_a_graded_mesh_matches_newton():
    """Cells of different sizes (a graded mesh) and a pipe axis: the in-fluxes of the
    cells add up the loads of cells of any size."""
    case = _case(FLUIDS["carreau"], "pipe", {"cells": 37, "wall_refinement": 4.0})
    solved = solve(case).solution
    problem, gradient = solved.problem(), solved.pressure_gradient
    u = discrete_line_solution(problem, line_start(problem, problem.model, gradient), gradient)
    assert np.max(np.abs(u - solved.u)) <= 1e-9 * np.max(np.abs(solved.u))
    assert problem.relative_residual(u, gradient) <= 1e-12


def test_discrete_solution_from_a_poor_start_converges_or_declines():
    """From a start 10 % off everywhere the cells' damped Newton steps still reach the
    discrete solution (or decline, never a wrong state)."""
    solved = solve(_case(FLUIDS["power-law n=0.3"], "annulus, moving wall")).solution
    problem, gradient = solved.problem(), solved.pressure_gradient
    start = solved.u * 1.1
    for wall in problem.domain.walls.values():
        start[wall.dofs] = wall.value
    u = discrete_line_solution(problem, start, gradient)
    if u is not None:
        assert np.max(np.abs(u - solved.u)) <= 1e-9 * np.max(np.abs(solved.u))


def test_discrete_solution_declines_what_it_does_not_cover():
    """P1 elements and a problem with slipping walls keep Newton on the whole mesh."""
    case = Case.from_dict({"fluid": FLUIDS["carreau"], "geometry": SHAPES["pipe"][0],
                           "drive": SHAPES["pipe"][1], "mesh": {"cells": 50, "degree": 1}})
    problem = Problem(build_domain(case), case.fluid.model)
    problem.rate_floor = 1e-9
    u = problem.boundary_values()
    assert discrete_line_solution(problem, u, -6000.0) is None

    class Slipping(Problem):
        pass
    slipping = Slipping(build_domain(_case(FLUIDS["carreau"], "pipe")), case.fluid.model)
    assert discrete_line_solution(slipping, slipping.boundary_values(), -6000.0) is None


@pytest.mark.parametrize("fluid", ["power-law n=0.5", "carreau", "bingham"])
def test_line_solution_keeps_the_exact_state_and_its_flux(fluid):
    """line_solution: the discrete solution from the start with its first flux constant
    (refine_flux=False) is the one from the fully refined start (the long way); the start
    and its flux stay on the problem, a power law's exactly what line_start gives (its
    flux to round-off, for the error estimate of the default mesh)."""
    case = _case(FLUIDS[fluid], "annulus, moving wall")
    solved = solve(case).solution
    problem, gradient = solved.problem(), solved.pressure_gradient
    exact = line_start(problem, problem.model, gradient)
    flux = problem.line_start_flux[1]
    long_way = discrete_line_solution(problem, exact, gradient)
    first = line_start(problem, problem.model, gradient, refine_flux=False)
    first_flux = problem.line_start_flux[1]
    u = line_solution(problem, problem.model, gradient)
    held, held_flux, held_start = problem.line_start_flux
    assert held is u
    assert np.max(np.abs(u - long_way)) <= 1e-12 * np.max(np.abs(u))
    assert held_flux == first_flux and np.array_equal(held_start, first)
    if fluid.startswith("power-law"):
        assert held_flux == flux and np.array_equal(held_start, exact)
    else:   # the first constant is a start, not the root
        assert held_flux != flux and held_flux == pytest.approx(flux, rel=0.05)


def test_line_solution_falls_back_to_the_exact_start(monkeypatch):
    """Where the discrete solution cannot be formed, line_solution gives line_start's
    exact state with its refined flux constant, as before."""
    import gnflow.solver.line_flow as line_flow
    case = _case(FLUIDS["carreau"], "annulus, moving wall")
    solved = solve(case).solution
    problem, gradient = solved.problem(), solved.pressure_gradient
    exact = line_start(problem, problem.model, gradient)
    monkeypatch.setattr(line_flow, "discrete_line_solution", lambda *args: None)
    u = line_solution(problem, problem.model, gradient)
    assert np.array_equal(u, exact) and len(problem.line_start_flux) == 2


def test_adapted_resolve_from_the_discrete_solution_ends_where_newton_does(monkeypatch):
    """The annulus power law n = 0.3 adapts its default mesh before any solve on it; the
    re-solve starts from the discrete solution on the adapted mesh (no Newton step).
    The long way (discrete solution declined: Newton from the exact start) gives the
    same mesh and the same flow within the solver tolerance's reach."""
    case = Case.from_dict({"fluid": FLUIDS["power-law n=0.3"],
                           "geometry": SHAPES["annulus"][0], "drive": SHAPES["annulus"][1]})
    short = solve(case)
    monkeypatch.setattr(adapt, "discrete_line_solution", lambda *args: None)
    long = solve(case)
    assert short.converged and long.converged
    assert short.solution.domain.cells == long.solution.domain.cells > 200
    assert short.iterations == 0 < long.iterations
    s, t = short.summary(), long.summary()
    for key in ("flow_rate", "max_velocity"):
        assert s[key] == pytest.approx(t[key], rel=1e-11)
    assert s["mesh_adapted"] == t["mesh_adapted"]
    assert np.max(np.abs(short.solution.u - long.solution.u)) <= \
        1e-9 * np.max(np.abs(long.solution.u))


@pytest.mark.parametrize("shape, n, speed", [
    ("pipe", 0.3, None), ("pipe", 0.5, {"wall": 0.2}), ("pipe", 2.0, None),
    ("annulus", 0.5, {"inner": 0.2}), ("annulus", 1.5, {"outer": -0.2}),
    ("annulus", 0.2, {"inner": 0.2})])
def test_standing_estimate_makes_the_decision_of_the_second_one(shape, n, speed):
    """Where the estimate from the exact start is far below TRIGGER and the gap has no
    zero-stress point, refined forms no second estimate. The long way, the estimate of
    the solve on the default mesh, is below TRIGGER too (so the mesh is the same) and
    within 1 % of the one that stood for it."""
    geometry = SHAPES["pipe" if shape == "pipe" else "annulus"][0]
    drive = {"pressure_gradient": -300.0, **({"wall_speed": speed} if speed else {})}
    case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 3.0 if n < 1 else 0.2,
                                     "flow_index": n}, "geometry": geometry, "drive": drive})
    result = solve(case).solution
    standing = getattr(result.problem(), "standing_estimate", None)
    assert standing is not None and standing <= adapt.STANDING_ESTIMATE * adapt.TRIGGER
    assert "adapted" not in result.domain.extra
    second = adapt.estimate(result)[0]
    assert second <= adapt.TRIGGER
    assert second == pytest.approx(standing, rel=1e-2)


def test_a_zero_stress_point_keeps_the_second_estimate():
    """An annulus with both walls at rest has a zero-stress radius inside the gap: there
    the estimate of the solve on the default mesh is formed as before."""
    case = Case.from_dict({"fluid": FLUIDS["power-law n=0.5"], "geometry": SHAPES["annulus"][0],
                           "drive": SHAPES["annulus"][1]})
    calls = []
    original = adapt.estimate

    def counted(*args):
        calls.append(len(args))
        return original(*args)
    module = sys.modules["gnflow.solver.adapt"]
    module.estimate = counted
    try:
        solve(case)
    finally:
        module.estimate = original
    assert calls == [2, 1]   # from the exact start (with its flux), then from the solve


def test_rate_floor_of_the_problem_is_the_one_used():
    """The discrete solution is that of the problem's own rate floor: with another floor
    it meets that problem's balance, and not the first one's."""
    solved = solve(_case(FLUIDS["power-law n=0.3"], "pipe")).solution
    problem, gradient = solved.problem(), solved.pressure_gradient
    start = line_start(problem, problem.model, gradient)
    other = problem.sibling(problem.model)
    other.rate_floor = problem.rate_floor * 1e6
    u = discrete_line_solution(other, start, gradient)
    assert other.relative_residual(u, gradient) <= 1e-12
    assert problem.relative_residual(u, gradient) > 1e-10
