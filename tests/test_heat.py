"""Viscous heating: the coupled momentum and energy balances against closed forms.

References (each derived in its test's docstring; the classical results are in Bird,
Stewart & Lightfoot, *Transport Phenomena*, 2nd ed., sec. 10.4 and problems 10B — recalled
from memory, and re-derived here so that the check does not rest on the recall):

* Brinkman problem, constant viscosity, walls at T0:
  slit  T - T0 = G^2 / (12 k mu) ((h/2)^4 - (y - h/2)^4),
  pipe  T - T0 = G^2 (R^4 - r^4) / (64 k mu);
* plane Couette flow with the exponential (Nahme) law eta = mu exp(-b (T - T0)), both walls
  at T0, top speed V: the Bratu problem theta'' + delta e^theta = 0, whose solution gives
  sinh(c/4) = sqrt(Na / 8), Na = b mu V^2 / k, delta = c^2 / (2 cosh^2(c/4)),
  tau = sqrt(delta k mu / b) / h and T_max - T0 = (2 / b) ln cosh(c/4)
  (the plane-Couette case of Gavis & Laurence 1968, Ind. Eng. Chem. Fundam. 7);
* pressure-driven slit with the exponential law: no steady state above a critical
  gradient (thermal runaway), computed independently here by shooting.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import minimize_scalar
from skfem import asm

from gnflow import rheology
from gnflow.case import Case
from gnflow.errors import CaseError
from gnflow.solver.heat import (DriveContinuation, HeatSpec, TemperatureShift, solve_heated,
                                weighted_integral)

MU, K = 2.0, 0.2          # Pa s, W/(m K): a melt-like viscosity and conductivity
T0 = 400.0


def _case(geometry, drive, mesh=None, fluid=None):
    raw = {"fluid": fluid or {"model": "newtonian", "viscosity": MU},
           "geometry": geometry, "drive": drive}
    if mesh:
        raw["mesh"] = mesh
    return Case.from_dict(raw)


def test_brinkman_slit_matches_closed_form():
    """Constant viscosity: k T'' = -mu u'^2 = -(G^2/mu) (y - h/2)^2, T(0) = T(h) = T0."""
    h, G = 0.004, -2e5
    solution = solve_heated(_case({"shape": "slit", "gap": h}, {"pressure_gradient": G}),
                            HeatSpec(K, {"bottom": T0, "top": T0}, (), None,
                                     rheology.Newtonian(MU)))
    assert solution.converged
    y = solution.domain.basis.doflocs[0]
    exact = T0 + G ** 2 / (12 * K * MU) * ((h / 2) ** 4 - (y - h / 2) ** 4)
    rise = exact.max() - T0
    assert np.max(np.abs(solution.temperature - exact)) < 1e-8 * rise
    assert solution.heat["max_temperature_rise"] == pytest.approx(rise, rel=1e-8)


def test_brinkman_pipe_matches_closed_form():
    """Constant viscosity: (k/r)(r T')' = -G^2 r^2 / (4 mu), T(R) = T0, T'(0) = 0."""
    R, G = 0.004, -2e5
    solution = solve_heated(_case({"shape": "pipe", "radius": R}, {"pressure_gradient": G}),
                            HeatSpec(K, {"wall": T0}, (), None, rheology.Newtonian(MU)))
    assert solution.converged
    r = solution.domain.basis.doflocs[0]
    exact = T0 + G ** 2 * (R ** 4 - r ** 4) / (64 * K * MU)
    assert np.max(np.abs(solution.temperature - exact)) < 1e-8 * (exact.max() - T0)
    # the wall stress from the coupled reaction: statics gives -G R / 2 whatever the heating
    assert solution.heat["wall_shear_stress"]["wall"] == pytest.approx(-G * R / 2, rel=1e-9)


@pytest.mark.parametrize("nahme", [0.125, 2.0, 20.0])
def test_couette_with_exponential_law_matches_closed_form(nahme):
    """Speed-controlled plane Couette flow heats itself at any speed without runaway;
    the stress and peak temperature follow from sinh(c/4) = sqrt(Na/8)."""
    h, b = 0.004, 0.05
    speed = math.sqrt(nahme * K / (b * MU))
    case = _case({"shape": "slit", "gap": h},
                 {"pressure_gradient": 0.0, "wall_speed": {"top": speed}}, {"cells": 200})
    solution = solve_heated(case, HeatSpec(K, {"bottom": T0, "top": T0}, (),
                                           TemperatureShift("exponential", b, T0),
                                           rheology.Newtonian(MU)))
    assert solution.converged
    c = 4 * math.asinh(math.sqrt(nahme / 8))
    delta = c ** 2 / (2 * math.cosh(c / 4) ** 2)
    stress = math.sqrt(delta * K * MU / b) / h
    peak = T0 + 2 / b * math.log(math.cosh(c / 4))
    assert solution.heat["max_temperature"] == pytest.approx(peak, rel=1e-9, abs=1e-7)
    assert abs(solution.heat["wall_shear_stress"]["bottom"]) == pytest.approx(stress, rel=1e-7)
    assert solution.heat["nahme_griffith_number"] == pytest.approx(nahme, rel=1e-9)


def _critical_slit_parameter() -> float:
    """delta_c of theta'' = -delta xi^2 e^theta on [-1, 1], theta(+-1) = 0 (the heated
    Poiseuille slit with the exponential law, xi = 2y/h - 1, delta = b G^2 (h/2)^4/(k mu)),
    by shooting from the mid-plane: theta = theta0 + phi with phi'' = -m xi^2 e^phi,
    phi(0) = phi'(0) = 0, m = delta e^theta0, so delta = m exp(phi(1; m)); its largest
    value over m is the turning point."""
    def phi_at_wall(m):
        run = solve_ivp(lambda x, y: [y[1], -m * x * x * np.exp(y[0])], (0.0, 1.0), [0.0, 0.0],
                        rtol=1e-12, atol=1e-14)
        return run.y[0, -1]
    best = minimize_scalar(lambda m: -m * math.exp(phi_at_wall(m)), bounds=(0.1, 60.0),
                           method="bounded", options={"xatol": 1e-10})
    return -best.fun


def test_thermal_runaway_is_reported_at_the_critical_gradient():
    h, b = 0.004, 0.05
    critical = math.sqrt(_critical_slit_parameter() * K * MU / (b * (h / 2) ** 4))
    heat = HeatSpec(K, {"bottom": T0, "top": T0}, (), TemperatureShift("exponential", b, T0),
                    rheology.Newtonian(MU))
    below = solve_heated(_case({"shape": "slit", "gap": h},
                               {"pressure_gradient": -0.97 * critical}, {"cells": 100}), heat)
    assert below.converged
    above = solve_heated(_case({"shape": "slit", "gap": h},
                               {"pressure_gradient": -1.05 * critical}, {"cells": 100}), heat)
    assert not above.converged
    assert "thermal runaway" in above.message
    low, high = above.heat["critical_load_factor"]
    # the bracket of the turning point, in units of the critical gradient
    assert 1.05 * low <= 1.0 + 2e-3 and 1.05 * high >= 1.0 - 2e-3
    assert 1.05 * (high - low) < 5e-3


def test_heated_duct_flow_rate_target_and_mesh_convergence():
    """A shear-thinning melt in a rectangular die land, Arrhenius law, heated top and
    bottom, insulated sides, at a target flow rate: the target is met and the peak
    temperature rise converges under refinement (observed order well above 1)."""
    fluid = {"model": "power-law", "consistency": 2000.0, "flow_index": 0.4}
    heat = HeatSpec(0.2, {"bottom": 450.0, "top": 450.0}, ("left", "right"),
                    TemperatureShift("arrhenius", 40e3, 450.0), rheology.PowerLaw(2000.0, 0.4))
    rises = []
    for cells in (4, 8, 16):
        case = _case({"shape": "rectangle", "width": 0.01, "height": 0.004},
                     {"flow_rate": 2e-5}, {"cells": cells}, fluid)
        solution = solve_heated(case, heat)
        assert solution.converged
        rises.append(solution.heat["max_temperature_rise"])
        load = asm(weighted_integral, solution.domain.basis, area=1.0)   # planar section
        assert float(load @ solution.u) == pytest.approx(2e-5, rel=1e-9)
    order = math.log(abs(rises[1] - rises[0]) / abs(rises[2] - rises[1])) / math.log(2)
    assert rises[-1] > 1.0          # kelvin: the heating matters in this die
    assert order > 1.5


def test_every_wall_insulated_is_refused():
    case = _case({"shape": "slit", "gap": 0.004}, {"pressure_gradient": -1e5})
    with pytest.raises(CaseError, match="at least one wall"):
        solve_heated(case, HeatSpec(K, {}, ("bottom", "top"), None, rheology.Newtonian(MU)))


def test_drive_continuation_brackets_a_turning_point():
    schedule = DriveContinuation()
    fails_above = 0.6
    while (lam := schedule.next()) is not None:
        if lam <= fails_above:
            schedule.accept(lam)
        else:
            schedule.reject(lam)
    low, high = schedule.critical
    assert low <= fails_above < high and high - low < 2e-3   # twice the smallest step


def test_heat_section_from_the_case_file_runs_through_solve():
    """The [heat] section end to end: the Brinkman pipe through gnflow.solve, with the
    summary's heat block, and a rotating gap that heats itself (it must converge and its
    torque balance hold)."""
    import gnflow
    R, G = 0.004, -2e5
    results = gnflow.solve(Case.from_dict({
        "fluid": {"model": "newtonian", "viscosity": MU},
        "geometry": {"shape": "pipe", "radius": R}, "drive": {"pressure_gradient": G},
        "heat": {"conductivity": K, "wall_temperature": f"{T0} K"}}))
    summary = results.summary()
    assert summary["converged"]
    assert summary["heat"]["max_temperature_rise"] == pytest.approx(
        G ** 2 * R ** 4 / (64 * K * MU), rel=1e-8)
    gap = gnflow.solve(Case.from_dict({
        "fluid": {"model": "carreau", "zero_shear_viscosity": 100.0, "time_constant": 0.5,
                  "flow_index": 0.5},
        "geometry": {"shape": "coaxial-cylinders", "inner_radius": 0.02, "outer_radius": 0.022},
        "drive": {"inner_angular_speed": "300 rpm"},
        "heat": {"conductivity": K, "wall_temperature": "300 K",
                 "temperature_coefficient": "0.03 1/K", "reference_temperature": "300 K"}}))
    assert gap.summary()["converged"] and gap.summary()["heat"]["max_temperature_rise"] > 0


@pytest.mark.parametrize("extra, fragment", [
    ({"drive": {"pressure_gradient": -1e5, "slip": {"wall": {"coefficient": 1e-4}}}}, "wall slip"),
    ({"heat": {"conductivity": K}}, "missing key heat.wall_temperature"),
    ({"heat": {"conductivity": K, "wall_temperature": "300 K", "insulated": ["wall"]}},
     "at least one wall"),
    ({"heat": {"conductivity": K, "wall_temperature": "300 K", "insulated": ["wal"]}},
     "one of the walls"),
    ({"heat": {"conductivity": "0.2 W/m", "wall_temperature": "300 K"}}, "conductivity"),
])
def test_bad_heat_sections_are_refused(extra, fragment):
    raw = {"fluid": {"model": "newtonian", "viscosity": MU},
           "geometry": {"shape": "pipe", "radius": 0.004}, "drive": {"pressure_gradient": -1e5},
           "heat": {"conductivity": K, "wall_temperature": "300 K"}}
    raw.update(extra)
    with pytest.raises(CaseError, match=fragment):
        Case.from_dict(raw)
