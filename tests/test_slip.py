"""Wall slip: per-wall slip laws against closed forms, and the Mooney analysis.

With slip the wall shear stress of a slit or pipe is still fixed by statics
(``tau_w = -G R / 2``, ``-G h / 2``), so the flow rate is the no-slip one plus the wall's
slip speed times the area (Mooney 1931, J. Rheol. 2, 210; derived here):

* pipe: ``Q = Q_0(G) + pi R^2 u_s(tau_w)``; slit (per unit width): ``q = q_0(G) + h u_s``;
* Newtonian ``Q_0 = pi R^4 (-G) / (8 mu)`` (Hagen-Poiseuille), ``q_0 = -G h^3 / (12 mu)``;
  power law ``Q_0`` from :func:`gnflow.analytic.pipe_power_law` (itself checked against
  Bird, Stewart & Lightfoot in tests/test_analytic.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from gnflow import analytic
from gnflow.case import Case
from gnflow.errors import CaseError
from gnflow.mooney import fit_slip_law, slip_at_stress
from gnflow.solver import solve


def _pipe(fluid, G, slip, radius=0.01, **mesh):
    raw = {"fluid": fluid, "geometry": {"shape": "pipe", "radius": radius},
           "drive": {"pressure_gradient": G, "slip": {"wall": slip}}}
    if mesh:
        raw["mesh"] = mesh
    return Case.from_dict(raw)


NEWTONIAN = {"model": "newtonian", "viscosity": 2.0}


def _flow_rate(solution):
    return solution.problem().flow_rate(solution.u)


def test_newtonian_pipe_with_linear_slip():
    G, R, beta = -1e4, 0.01, 1e-4
    solution = solve(_pipe(NEWTONIAN, G, {"coefficient": beta}))
    assert solution.converged
    wall_stress = -G * R / 2
    exact = math.pi * R ** 4 * (-G) / (8 * 2.0) + math.pi * R ** 2 * beta * wall_stress
    assert _flow_rate(solution) == pytest.approx(exact, rel=1e-9)


def test_newtonian_slit_with_navier_slip_length_on_one_wall():
    """Slip length b on the bottom only: u(0) = b u'(0); u = (G/2mu)(y^2 - h y) + c1 y + c0
    with u(h) = 0 gives q in closed form (derived here)."""
    G, h, mu, b = -1e4, 0.002, 2.0, 1e-4
    case = Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "slit", "gap": h},
                           "drive": {"pressure_gradient": G, "slip": {"bottom": {"length": b}}}})
    solution = solve(case)
    assert solution.converged
    # u = A y^2 + B y + C, A = G/(2 mu); u(h) = 0; C = b B (u(0) = b u'(0))
    A = G / (2 * mu)
    B = -A * h ** 2 / (h + b)
    C = b * B
    exact = A * h ** 3 / 3 + B * h ** 2 / 2 + C * h
    assert _flow_rate(solution) == pytest.approx(exact, rel=1e-9)


@pytest.mark.parametrize("exponent", [0.6, 1.0, 1.8])
def test_power_law_pipe_with_power_law_slip(exponent):
    G, R, K, n, beta = -1e4, 0.01, 10.0, 0.4, 2e-6
    fluid = {"model": "power-law", "consistency": K, "flow_index": n}
    solution = solve(_pipe(fluid, G, {"coefficient": beta, "exponent": exponent}))
    assert solution.converged
    wall_stress = -G * R / 2
    exact = (analytic.pipe_power_law(R, K, n, G).flow_rate
             + math.pi * R ** 2 * beta * wall_stress ** exponent)
    assert _flow_rate(solution) == pytest.approx(exact, rel=1e-7)


def test_slip_yield_stress_holds_the_wall_below_it():
    G, R, beta = -1e4, 0.01, 1e-4          # wall stress 50 Pa
    no_slip = solve(Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "pipe", "radius": R},
                                    "drive": {"pressure_gradient": G}}))
    held = solve(_pipe(NEWTONIAN, G, {"coefficient": beta, "yield_stress": "80 Pa"}))
    assert _flow_rate(held) == pytest.approx(_flow_rate(no_slip), rel=1e-6)
    slipping = solve(_pipe(NEWTONIAN, G, {"coefficient": beta, "yield_stress": "20 Pa"}))
    exact = _flow_rate(no_slip) + math.pi * R ** 2 * beta * (50.0 - 20.0)
    assert _flow_rate(slipping) == pytest.approx(exact, rel=1e-6)


def test_mooney_analysis_recovers_the_slip_law_put_in():
    """Flow rates in pipes of three radii at three wall stresses: Mooney's lines give the
    slip speeds, and the fit gives back coefficient and exponent."""
    K, n, beta, p = 10.0, 0.5, 3e-6, 1.3
    fluid = {"model": "power-law", "consistency": K, "flow_index": n}
    radii = [0.002, 0.004, 0.008]
    stresses, speeds = [], []
    for wall_stress in (20.0, 50.0, 120.0):
        rates = [_flow_rate(solve(_pipe(fluid, -2 * wall_stress / R,
                                        {"coefficient": beta, "exponent": p}, radius=R)))
                 for R in radii]
        point = slip_at_stress("pipe", radii, rates)
        assert point.slip_speed == pytest.approx(beta * wall_stress ** p, rel=1e-5)
        stresses.append(wall_stress)
        speeds.append(point.slip_speed)
    fitted = fit_slip_law(stresses, speeds)
    assert fitted.coefficient == pytest.approx(beta, rel=1e-4)
    assert fitted.exponent == pytest.approx(p, rel=1e-5)


def test_rectangle_with_slip_balances_forces_and_converges():
    """2-D: the wall drag of slipping walls balances the pressure force, and the flow rate
    converges under refinement toward a value above the no-slip one."""
    rates = []
    for cells in (8, 16, 32):
        case = Case.from_dict({
            "fluid": {"model": "power-law", "consistency": 5.0, "flow_index": 0.5},
            "geometry": {"shape": "rectangle", "width": 0.02, "height": 0.01},
            "drive": {"pressure_gradient": -1e4,
                      "slip": {w: {"coefficient": 2e-5} for w in ("bottom", "top", "left",
                                                                  "right")}},
            "mesh": {"cells": cells}})
        solution = solve(case)
        assert solution.converged
        summary = solution.summary()
        assert summary["force_balance_error"] < 1e-8
        rates.append(_flow_rate(solution))
    order = math.log(abs(rates[1] - rates[0]) / abs(rates[2] - rates[1])) / math.log(2)
    assert order > 1.5
    no_slip = solve(Case.from_dict({
        "fluid": {"model": "power-law", "consistency": 5.0, "flow_index": 0.5},
        "geometry": {"shape": "rectangle", "width": 0.02, "height": 0.01},
        "drive": {"pressure_gradient": -1e4}, "mesh": {"cells": 16}}))
    assert rates[-1] > 1.05 * _flow_rate(no_slip)


@pytest.mark.parametrize("slip, fragment", [
    ({"wal": {"coefficient": 1e-4}}, "no wall named wal"),
    ({"wall": {"coefficient": 1e-4, "length": "1 mm"}}, "exactly one of length"),
    ({"wall": {"length": "1 mm", "exponent": 2}}, "exponent belongs to coefficient"),
    ({"wall": {"coefficient": -1e-4}}, "coefficient"),
    ({"wall": {"coefficient": 1e-4, "exponent": 50}}, "0.05 to 10"),
    ({"wall": {"coeficient": 1e-4}}, "did you mean"),
])
def test_bad_slip_tables_are_refused(slip, fragment):
    with pytest.raises(CaseError, match=fragment):
        Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "pipe", "radius": 0.01},
                        "drive": {"pressure_gradient": -1e4, "slip": slip}})
