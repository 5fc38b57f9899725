"""Outputs of the coupled physics: helical flow, viscous heating, wall slip, and plug
edges located by interpolation.

Each check value names its source:

* Bird, Stewart & Lightfoot (BSL), *Transport Phenomena*, 2nd ed.: Couette flow between
  coaxial cylinders (sec. 3.6, via :func:`gnflow.analytic.coaxial_newtonian`), axial flow
  in an annulus (sec. 2.4, :func:`gnflow.analytic.annulus_newtonian`), the Brinkman
  problem of a heated slit (sec. 10.4, re-derived in tests/test_heat.py);
* Buckingham-Reiner pipe and slit Bingham flow (:func:`gnflow.analytic.pipe_bingham`,
  :func:`gnflow.analytic.slit_bingham`): plug radius ``2 tau_y / |G|``, half-width
  ``tau_y / |G|``;
* statics of a pipe with slip: ``tau_w = -G R / 2`` and ``u_s = beta tau_w^p`` (the law
  itself; Mooney 1931, J. Rheol. 2, 210).
"""

from __future__ import annotations

import csv
import math

import meshio
import numpy as np
import pytest

import gnflow
from gnflow import analytic
from gnflow.case import Case
from gnflow.export import write_outputs

RI, RO = 0.02, 0.04
MU = 0.05


def _helical(eccentricity=0.0, density=None, cells=None):
    fluid = {"model": "newtonian", "viscosity": MU}
    if density:
        fluid["density"] = density
    mapping = {"fluid": fluid,
               "geometry": {"shape": "annulus", "inner_radius": RI, "outer_radius": RO,
                            "eccentricity": eccentricity},
               "drive": {"pressure_gradient": -1000.0, "inner_angular_speed": 10.0,
                         "outer_angular_speed": -2.0},
               "output": {"plots": False}}
    if cells:
        mapping["mesh"] = {"cells": cells}
    return Case.from_dict(mapping)


def _csv(path):
    with path.open(encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    return rows[0], np.array(rows[1:], dtype=object)


def test_helical_summary_gives_both_torques_the_power_split_and_the_taylor_number(tmp_path):
    results = gnflow.solve(_helical(density=1000.0))
    s = results.summary()
    assert s["converged"], s["message"]
    couette = analytic.coaxial_newtonian(RI, RO, MU, 10.0, -2.0)          # BSL 3.6
    axial = analytic.annulus_newtonian(RI, RO, MU, -1000.0)               # BSL 2.4
    assert s["wall_torque_per_length"]["inner"] == pytest.approx(couette.torque_per_length, rel=1e-9)
    assert s["wall_torque_per_length"]["outer"] == pytest.approx(-couette.torque_per_length, rel=1e-9)
    assert s["torque_imbalance"] < 1e-10
    assert s["flow_rate"] == pytest.approx(axial.flow_rate, rel=1e-9)
    for wall in ("inner", "outer"):
        assert s["wall_shear_stress"]["per_wall"][wall] == pytest.approx(
            abs(axial.wall_shear_stress[wall]), rel=1e-8)
        # the azimuthal stress on each cylinder, M / (2 pi R^2): BSL 3.6
        radius = RI if wall == "inner" else RO
        assert s["azimuthal_wall_shear_stress"][wall] == pytest.approx(
            couette.torque_per_length / (2 * math.pi * radius ** 2), rel=1e-9)
        # the wall rate is that of the whole motion: |tau| / mu with both components
        total = math.hypot(axial.wall_shear_stress[wall],
                           couette.torque_per_length / (2 * math.pi * radius ** 2))
        assert s["wall_shear_rate"]["per_wall"][wall] == pytest.approx(total / MU, rel=1e-7)
    power = s["power_per_length"]
    assert power["rotation"] == pytest.approx(12.0 * couette.torque_per_length, rel=1e-9)
    assert power["pressure"] == pytest.approx(1000.0 * axial.flow_rate, rel=1e-9)
    assert power["dissipated"] == pytest.approx(power["pressure"] + power["rotation"], rel=1e-12)
    assert s["power_balance_error"] < 1e-9
    # Ta = (Omega_i - Omega_o)^2 R_i d^3 / nu^2 (narrow-gap form, recalled from memory)
    taylor = 12.0 ** 2 * RI * (RO - RI) ** 3 / (MU / 1000.0) ** 2
    assert s["taylor_number"] == pytest.approx(taylor, rel=1e-9)
    assert s["taylor_check"] == "failed"
    assert any("Taylor number" in w for w in s["warnings"])

    written = write_outputs(results, s, tmp_path / "out")
    assert "profile.csv" in written
    header, rows = _csv(tmp_path / "out" / "profile.csv")
    assert header[:4] == ["r [m]", "velocity [m/s]", "angular_speed [rad/s]",
                          "azimuthal_velocity [m/s]"]
    r, omega, v_theta = (rows[:, k].astype(float) for k in (0, 2, 3))
    assert np.allclose(omega, couette.angular_speed(r), rtol=0, atol=1e-8)
    assert np.allclose(v_theta, r * couette.angular_speed(r), rtol=0, atol=1e-9)
    mesh = meshio.read(tmp_path / "out" / "fields.vtu")
    velocity = mesh.point_data["velocity"]
    assert velocity.shape[1] == 3
    x = mesh.points[:, 0]
    # 1-D along x at y = 0: (0, v_theta, w)
    assert np.allclose(velocity[:, 0], 0.0)
    assert np.allclose(velocity[:, 1], x * couette.angular_speed(x), atol=1e-9)
    assert np.allclose(velocity[:, 2], axial.velocity(x), atol=1e-9 * np.max(np.abs(velocity)))
    assert {"axial_velocity", "angular_speed", "azimuthal_velocity"} <= set(mesh.point_data)


def test_eccentric_helical_balances_torques_about_the_outer_centre_and_writes_3d_velocity(
        tmp_path):
    results = gnflow.solve(_helical(eccentricity=0.4, cells=6))
    s = results.summary()
    assert s["converged"], s["message"]
    # the torques about the walls' own centres differ; the balance about the outer centre
    # needs the side force's moment (what the check adds)
    assert abs(s["wall_torque_per_length"]["inner"] + s["wall_torque_per_length"]["outer"]) > 1e-3 * abs(
        s["wall_torque_per_length"]["inner"])
    assert s["torque_imbalance"] < 1e-8
    assert s["power_balance_error"] < 1e-8
    assert len(s["side_force_per_length"]) == 2
    write_outputs(results, s, tmp_path / "out")
    mesh = meshio.read(tmp_path / "out" / "fields.vtu")
    velocity = mesh.point_data["velocity"]
    assert velocity.shape == (mesh.points.shape[0], 3)
    assert np.allclose(velocity[:, :2], results.in_plane_velocity.T)
    assert np.allclose(velocity[:, 2], results.u)
    # the in-plane motion turns the inner wall: |u| = Omega_i R_i on it (a rigid rotation)
    inner = np.isclose(np.hypot(mesh.points[:, 0] - 0.4 * (RO - RI), mesh.points[:, 1]), RI)
    assert np.allclose(np.hypot(velocity[inner, 0], velocity[inner, 1]), 10.0 * RI, rtol=1e-9)
    header, rows = _csv(tmp_path / "out" / "wall_stress.csv")
    assert "slip_speed [m/s]" not in header
    # wall rates of the whole motion exceed the axial |dw/dn| alone
    rates = rows[:, header.index("shear_rate [1/s]")].astype(float)
    axial = np.abs(rows[:, header.index("shear_stress [Pa]")].astype(float)) / MU
    assert np.all(rates > axial)


K, T0 = 0.2, 400.0


def test_heated_summary_gives_the_brinkman_rise_and_the_temperature_outputs(tmp_path):
    """Constant viscosity, both walls at T0: T - T0 = G^2 / (12 k mu) ((h/2)^4 - s^4), s the
    distance from the mid-plane (Brinkman; BSL 10.4, re-derived in tests/test_heat.py):
    peak rise G^2 (h/2)^4 / (12 k mu), mean rise 4/5 of it."""
    h, G, mu = 0.004, -2e5, 2.0
    case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": mu},
                           "geometry": {"shape": "slit", "gap": h},
                           "drive": {"pressure_gradient": G},
                           "heat": {"conductivity": K, "wall_temperature": T0},
                           "output": {"plots": False}})
    results = gnflow.solve(case)
    s = results.summary()
    assert s["converged"], s["message"]
    rise = G ** 2 * (h / 2) ** 4 / (12 * K * mu)
    assert s["heat"]["max_temperature_rise"] == pytest.approx(rise, rel=1e-8)
    assert s["heat"]["mean_temperature_rise"] == pytest.approx(0.8 * rise, rel=1e-8)
    assert s["heat"]["units"]["max_temperature"] == "K"
    assert s["wall_shear_stress"]["per_wall"]["bottom"] == pytest.approx(-G * h / 2, rel=1e-9)
    assert s["force_balance_error"] < 1e-10
    write_outputs(results, s, tmp_path / "out")
    header, rows = _csv(tmp_path / "out" / "profile.csv")
    assert header[-1] == "temperature [K]"
    y, T = rows[:, 0].astype(float), rows[:, -1].astype(float)
    # written to 10 significant digits: 1e-7 K at 400 K
    assert np.allclose(T, T0 + G ** 2 / (12 * K * mu) * ((h / 2) ** 4 - (y - h / 2) ** 4),
                       rtol=0, atol=1e-7)
    mesh = meshio.read(tmp_path / "out" / "fields.vtu")
    assert np.allclose(mesh.point_data["temperature"], results.temperature)


def test_heated_couette_summary_takes_wall_stress_and_viscosity_from_the_coupled_balance():
    """Plane Couette flow with the exponential law: sinh(c/4) = sqrt(Na/8), tau =
    sqrt(delta k mu / b) / h, delta = c^2 / (2 cosh^2(c/4)) (Gavis & Laurence 1968, derived
    in tests/test_heat.py); the wall is at T0, so the wall rate is tau / mu. An isothermal
    reaction at T0 would give mu V / h instead."""
    h, b, mu, nahme = 0.004, 0.05, 2.0, 2.0
    speed = math.sqrt(nahme * K / (b * mu))
    case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": mu},
                           "geometry": {"shape": "slit", "gap": h},
                           "drive": {"pressure_gradient": 0.0, "wall_speed": {"top": speed}},
                           "heat": {"conductivity": K, "wall_temperature": T0,
                                    "temperature_coefficient": b,
                                    "reference_temperature": T0},
                           "mesh": {"cells": 100}})
    results = gnflow.solve(case)
    s = results.summary()
    assert s["converged"], s["message"]
    c = 4 * math.asinh(math.sqrt(nahme / 8))
    delta = c ** 2 / (2 * math.cosh(c / 4) ** 2)
    stress = math.sqrt(delta * K * mu / b) / h
    assert stress < 0.9 * mu * speed / h          # the heating matters here
    for wall in ("bottom", "top"):
        assert s["wall_shear_stress"]["per_wall"][wall] == pytest.approx(stress, rel=1e-7)
        assert s["wall_shear_rate"]["per_wall"][wall] == pytest.approx(stress / mu, rel=1e-7)
    # the equilibrated stress of plane Couette flow is uniform; the local viscosity falls
    # toward the hot mid-plane as exp(-b (T - T0))
    f = results.fields
    assert np.allclose(f["shear_stress"], stress, rtol=1e-7)
    assert np.allclose(f["viscosity"], mu * np.exp(-b * (f["temperature"] - T0)), rtol=1e-12)
    assert s["force_balance_error"] < 1e-8
    assert s["heat"]["nahme_griffith_number"] == pytest.approx(nahme, rel=1e-9)


@pytest.mark.parametrize("exponent", [1.0, 1.6])
def test_slip_summary_gives_slip_speed_beta_tau_w(exponent):
    """Pipe with slip: statics fixes tau_w = -G R / 2 and the law gives u_s = beta tau_w^p."""
    G, R, beta = -1e4, 0.01, 1e-4 if exponent == 1.0 else 2e-6
    case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 2.0},
                           "geometry": {"shape": "pipe", "radius": R},
                           "drive": {"pressure_gradient": G,
                                     "slip": {"wall": {"coefficient": beta,
                                                       "exponent": exponent}}}})
    s = gnflow.solve(case).summary()
    assert s["converged"], s["message"]
    tau_w = -G * R / 2
    assert s["wall_shear_stress"]["per_wall"]["wall"] == pytest.approx(tau_w, rel=1e-9)
    assert s["slip"]["wall"]["slip_speed"] == pytest.approx(beta * tau_w ** exponent, rel=1e-8)
    assert s["slip"]["wall"]["wall_shear_stress"] == pytest.approx(tau_w, rel=1e-8)
    assert s["slip"]["wall"]["law"]["exponent"] == exponent
    assert s["force_balance_error"] < 1e-10


def test_slipping_wall_of_a_rectangle_reports_its_slip_speed_along_the_wall(tmp_path):
    case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 2.0},
                           "geometry": {"shape": "rectangle", "width": 0.02, "height": 0.01},
                           "drive": {"pressure_gradient": -1e4,
                                     "slip": {"bottom": {"coefficient": 1e-4}}},
                           "mesh": {"cells": 8}, "output": {"plots": False}})
    results = gnflow.solve(case)
    s = results.summary()
    assert s["converged"], s["message"]
    assert s["force_balance_error"] < 1e-10
    law_stress = s["slip"]["bottom"]["wall_shear_stress"]
    # u_s = beta tau_w for the linear law, in the mean along the wall
    assert s["slip"]["bottom"]["slip_speed"] == pytest.approx(1e-4 * law_stress, rel=1e-9)
    # the reaction's mean and the law's mean differ only by the share of the corner dofs
    assert s["wall_shear_stress"]["per_wall"]["bottom"] == pytest.approx(law_stress, rel=2e-3)
    write_outputs(results, s, tmp_path / "out")
    header, rows = _csv(tmp_path / "out" / "wall_stress.csv")
    assert header[-1] == "slip_speed [m/s]"
    speeds = rows[:, -1].astype(float)
    on_bottom = rows[:, 0] == "bottom"
    assert np.all(speeds[~on_bottom] == 0.0)
    assert np.all(speeds[on_bottom] > 0.0)
    weights = results.wall_distributions["bottom"]["weight"]
    assert np.sum(speeds[on_bottom] * weights) / np.sum(weights) == pytest.approx(
        s["slip"]["bottom"]["slip_speed"], rel=1e-6)


def _bingham(shape, geometry, cells, drive=None):
    return Case.from_dict({"fluid": {"model": "bingham", "yield_stress": 20.0,
                                     "plastic_viscosity": 0.5},
                           "geometry": {"shape": shape, **geometry},
                           "drive": drive or {"pressure_gradient": -1e4},
                           "mesh": {"cells": cells}})


@pytest.mark.parametrize("shape, geometry, reference", [
    ("slit", {"gap": 0.01}, lambda: analytic.slit_bingham(0.01, 20.0, 0.5, -1e4)),
    ("pipe", {"radius": 0.01}, lambda: analytic.pipe_bingham(0.01, 20.0, 0.5, -1e4)),
])
def test_plug_edges_beat_node_resolution(shape, geometry, reference):
    """Buckingham-Reiner plugs: slit |y - h/2| < tau_y/|G| = 2 mm, pipe r < 2 tau_y/|G| = 4 mm,
    on a mesh whose dofs do not fall on the edges."""
    results = gnflow.solve(_bingham(shape, geometry, 17))
    s = results.summary()
    assert s["converged"], s["message"]
    spacing = np.max(np.diff(np.sort(results.fields["x"][0])))
    (start, end), = s["plugs"]
    (exact_start, exact_end), = reference().plugs
    assert abs(start - exact_start) < 0.01 * spacing
    assert abs(end - exact_end) < 0.01 * spacing
    # the node-resolution answer is what the uncertainty measures: here a sizeable part
    # of a node spacing, as the edges fall between nodes
    assert 0.05 * spacing < s["plug_edge_uncertainty"] <= spacing
    exact_fraction = ((exact_end - exact_start) / 0.01 if shape == "slit"
                      else (exact_end / 0.01) ** 2)
    assert s["unyielded_fraction"] == pytest.approx(exact_fraction, rel=1e-6)
    assert s["unyielded_fraction_uncertainty"] > 0


def test_annulus_plug_edges_match_the_semi_analytic_regularised_flow():
    """A concentric annulus: the plug lies where |G r / 2 + C / r| < tau_y with C set by
    the flow; the reference is :func:`gnflow.analytic.annulus_flow` for the model as solved
    (same regularisation), computed by quadrature and root finding."""
    case = _bingham("annulus", {"inner_radius": 0.01, "outer_radius": 0.03}, 23)
    results = gnflow.solve(case)
    s = results.summary()
    assert s["converged"], s["message"]
    G, tau_y = -1e4, 20.0
    reference = analytic.annulus_flow(results.model, 0.01, 0.03, G, regularised=True)
    # its stress is G r / 2 + C / r: the plug edges solve G r^2 / 2 -+ tau_y r + C = 0
    C = 0.01 * float(reference.shear_stress(0.01)) - G * 0.01 ** 2 / 2
    roots = np.concatenate([np.roots([G / 2, -level, C]) for level in (tau_y, -tau_y)])
    exact_start, exact_end = np.sort(roots[(roots > 0.01) & (roots < 0.03)].real)
    spacing = np.max(np.diff(np.sort(results.fields["x"][0])))
    (start, end), = s["plugs"]
    assert abs(start - exact_start) < 0.05 * spacing
    assert abs(end - exact_end) < 0.05 * spacing


def test_2d_unyielded_fraction_comes_with_its_uncertainty_and_no_1d_warning():
    """A square duct below its stopping gradient: the whole section is unyielded (the
    limit load; Mosolov & Miasnikov 1965, see tests/test_solver_robust.py). The 2-D
    section carries the solver's warning, not the 1-D wall-stress one."""
    side = 1.0
    tau_y = 1.05 * side / (2 + math.sqrt(math.pi))
    case = Case.from_dict({"fluid": {"model": "bingham", "yield_stress": tau_y,
                                     "plastic_viscosity": 1.0},
                           "geometry": {"shape": "rectangle", "width": side, "height": side},
                           "drive": {"pressure_gradient": -1.0}, "mesh": {"cells": 8}})
    s = gnflow.solve(case).summary()
    assert s["unyielded_fraction"] > 0.99
    assert 0.0 <= s["unyielded_fraction_uncertainty"] < 0.05
    assert not any(w.startswith("the material does not yield") for w in s["warnings"])
    assert any("does not flow" in w for w in s["warnings"])



def test_helical_plug_edges_match_the_semi_analytic_helical_flow():
    """Bingham fluid in a concentric annulus with the inner wall turning: the plug lies
    where the stress of the whole motion, sqrt(tau_rz^2 + tau_rtheta^2), is below the yield
    stress; reference :func:`gnflow.analytic.helical_annulus_flow` for the model as solved
    (quadrature and root finding, independent of the FE code)."""
    from scipy.optimize import brentq
    ri, ro, tau_y = 0.05, 0.1, 5.0
    case = Case.from_dict({"fluid": {"model": "bingham", "yield_stress": tau_y,
                                     "plastic_viscosity": 0.03},
                           "geometry": {"shape": "annulus", "inner_radius": ri,
                                        "outer_radius": ro},
                           "drive": {"pressure_gradient": -2000.0, "inner_angular_speed": 20.0},
                           "mesh": {"cells": 50}})
    results = gnflow.solve(case)
    s = results.summary()
    assert s["converged"], s["message"]
    assert s["yields"]          # the turning wall shears the material at any gradient
    reference = analytic.helical_annulus_flow(results.model, ri, ro, -2000.0, 20.0)

    def excess(r):
        return float(np.hypot(reference.axial_stress(r), reference.azimuthal_stress(r))) - tau_y
    grid = np.linspace(ri, ro, 401)
    values = np.array([excess(r) for r in grid])
    crossings = np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    exact = [brentq(excess, grid[i], grid[i + 1], xtol=1e-14) for i in crossings]
    spacing = np.max(np.diff(np.sort(results.fields["x"][0])))
    (start, end), = s["plugs"]
    assert len(exact) == 2
    assert abs(start - exact[0]) < 0.01 * spacing
    assert abs(end - exact[1]) < 0.01 * spacing
    assert s["unyielded_fraction"] == pytest.approx((end ** 2 - start ** 2) / (ro ** 2 - ri ** 2),
                                                    rel=1e-12)
