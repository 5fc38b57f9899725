"""Correctness of the faster 1-D starts (issue 16): the rate bounds of a regularised
yield-stress flow curve hold, and the exact start of a yield-stress annulus converges to
the same flow as the general (Newtonian-stress) start. Timing is in bench/one_solve.py."""

import numpy as np
import pytest

from gnflow import Case, solve
from gnflow.rheology import Bingham, HerschelBulkley
from gnflow.solver import line_flow

MODELS = [Bingham(15.0, 0.6, "papanastasiou", 80.0),
          HerschelBulkley(15.0, 2.0, 0.5, "papanastasiou", 35.0),
          HerschelBulkley(4.0, 0.3, 1.4, "papanastasiou", 200.0),
          HerschelBulkley(15.0, 2.0, 0.5, "bi-viscous", 1e-3),
          Bingham(2.0, 0.05, "bi-viscous", 10.0)]


@pytest.mark.parametrize("model", MODELS, ids=lambda m: f"{m.name}-{m.regularisation}")
def test_yield_stress_bounds_bracket_the_rate(model):
    stress = np.geomspace(1e-6, 1e3, 3001) * model.yield_stress
    lower, upper = line_flow.yield_stress_bounds(model, stress)
    rate = line_flow.flow_curve_rates(model, 0.0, stress, np.sqrt(lower * upper))
    assert rate is not None
    # the root itself, independently: the model's own stress at it
    assert np.allclose(model.stress(rate), stress, rtol=1e-9, atol=0)
    assert np.all(lower <= rate * (1 + 1e-9)) and np.all(rate <= upper * (1 + 1e-9))
    # away from the knee the bounds are tight (the point of them)
    away = np.abs(stress / model.yield_stress - 1) > 0.05
    assert np.median(upper[away] / lower[away]) < 1.5


@pytest.mark.parametrize("fluid", [
    {"model": "bingham", "yield_stress": 15.0, "plastic_viscosity": 0.6},
    {"model": "herschel-bulkley", "yield_stress": 15.0, "consistency": 2.0, "flow_index": 0.5},
    {"model": "herschel-bulkley", "yield_stress": 5.0, "consistency": 0.5, "flow_index": 1.4,
     "regularisation": {"method": "bi-viscous"}}])
def test_annulus_exact_start_meets_general_start(fluid, monkeypatch):
    case = Case.from_dict({
        "fluid": fluid,
        "geometry": {"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03},
        "drive": {"pressure_gradient": -3000.0, "wall_speed": {"inner": 0.2}},
        "mesh": {"cells": 60}})
    exact = solve(case)
    import sys
    newton = sys.modules["gnflow.solver.newton"]
    monkeypatch.setattr(newton, "line_solution", lambda *args: None)   # the general start
    general = solve(case)
    assert exact.converged and general.converged
    assert exact.solution.model == general.solution.model
    q_exact = exact.solution.problem().flow_rate(exact.solution.u)
    q_general = general.solution.problem().flow_rate(general.solution.u)
    assert q_exact == pytest.approx(q_general, rel=1e-9)
