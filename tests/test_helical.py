"""Helical flow (axial flow with rotation) in concentric and eccentric annuli.

Sources beside each check: Bird, Stewart & Lightfoot, *Transport Phenomena* (annulus and
Couette closed forms, through ``gnflow.analytic``); Piercy, Hooper & Winny 1933 (eccentric
annulus series); Sommerfeld 1904 (narrow-gap journal torque and load, recalled from
memory); the closed-form eccentric rotation ``analytic.eccentric_rotation_newtonian``
(bipolar stream function after Jeffery 1922, Proc. R. Soc. A 101, derived there); and the
semi-analytic helical solution ``analytic.helical_annulus_flow`` derived here.
"""

import dataclasses
import math

import numpy as np
import pytest

from gnflow import analytic
from gnflow.case import Case
from gnflow.solver.coupled import HelicalSolution, solve_helical

RI, RO = 0.05, 0.1

FLUIDS = {
    "power-law": {"model": "power-law", "consistency": 0.8, "flow_index": 0.5},
    "thickening": {"model": "power-law", "consistency": 0.8, "flow_index": 1.5},
    "carreau": {"model": "carreau", "zero_shear_viscosity": 2.0, "time_constant": 0.5,
                "flow_index": 0.4, "infinite_shear_viscosity": 0.001},
}


def annulus_case(fluid, drive, eccentricity=0.0, cells=None):
    mapping = {"fluid": fluid, "drive": drive,
               "geometry": {"shape": "annulus", "inner_radius": RI, "outer_radius": RO,
                            "eccentricity": eccentricity}}
    if cells:
        mapping["mesh"] = {"cells": cells}
    return Case.from_dict(mapping)


def test_newtonian_concentric_decouples_into_the_closed_forms():
    mu = 0.05
    case = annulus_case({"model": "newtonian", "viscosity": mu},
                        {"pressure_gradient": -1000.0, "inner_angular_speed": 10.0,
                         "wall_speed": {"inner": 0.2}})
    solution = solve_helical(case)
    assert isinstance(solution, HelicalSolution) and solution.converged
    r = solution.domain.basis.doflocs[0]
    axial = analytic.annulus_newtonian(RI, RO, mu, -1000.0, inner_speed=0.2)   # BSL 2.4
    couette = analytic.coaxial_newtonian(RI, RO, mu, 10.0)                     # BSL 3.6
    assert solution.flow_rate == pytest.approx(axial.flow_rate, rel=1e-9)
    assert np.max(np.abs(solution.u - axial.velocity(r))) < 1e-9 * np.max(np.abs(solution.u))
    assert solution.torque_per_length["inner"] == pytest.approx(couette.torque_per_length,
                                                                rel=1e-9)
    assert solution.torque_per_length["outer"] == pytest.approx(-couette.torque_per_length,
                                                                rel=1e-9)
    assert np.max(np.abs(solution.angular_speed - couette.angular_speed(r))) < 1e-8
    # wall stress the fluid exerts in +z: BSL closed form
    for wall in ("inner", "outer"):
        assert solution.axial_wall_shear_stress[wall] == pytest.approx(
            axial.wall_shear_stress[wall], rel=1e-8)


@pytest.mark.parametrize("name", sorted(FLUIDS))
@pytest.mark.parametrize("drive", [
    {"pressure_gradient": -2000.0, "inner_angular_speed": 20.0},
    {"flow_rate": 0.004, "inner_angular_speed": 20.0, "outer_angular_speed": -3.0,
     "wall_speed": {"inner": 0.1}},
], ids=["gradient", "flow-rate"])
def test_concentric_matches_the_semi_analytic_helical_solution(name, drive):
    case = annulus_case(FLUIDS[name], drive)
    solution = solve_helical(case)
    assert solution.converged
    reference = analytic.helical_annulus_flow(   # derived in gnflow.analytic
        solution.model, RI, RO, drive.get("pressure_gradient"), drive["inner_angular_speed"],
        drive.get("outer_angular_speed", 0.0), drive.get("wall_speed", {}).get("inner", 0.0),
        0.0, drive.get("flow_rate"))
    r = solution.domain.basis.doflocs[0]
    assert solution.flow_rate == pytest.approx(reference.flow_rate, rel=1e-6)
    assert solution.pressure_gradient == pytest.approx(reference.pressure_gradient, rel=1e-6)
    assert solution.torque_per_length["inner"] == pytest.approx(reference.torque_per_length,
                                                                rel=1e-6)
    assert np.max(np.abs(solution.u - reference.velocity(r))) < 1e-6 * np.max(np.abs(solution.u))
    spread = np.ptp(solution.angular_speed)
    assert np.max(np.abs(solution.angular_speed - reference.angular_speed(r))) < 1e-6 * spread
    # energy: pressure work + wall drag + rotation = dissipation (identity of the weak form)
    power = solution.power_per_length
    assert power["axial"] + power["rotational"] == pytest.approx(power["dissipation"], rel=1e-8)


def test_rotation_lowers_the_pressure_gradient_of_a_shear_thinning_fluid():
    """Property: at a fixed flow rate |dp/dz| falls as the inner cylinder turns faster."""
    base = annulus_case(FLUIDS["power-law"], {"flow_rate": 0.004, "inner_angular_speed": 1.0})
    gradients = []
    for speed in (1.0, 5.0, 20.0, 60.0):
        case = dataclasses.replace(base, drive=dataclasses.replace(base.drive,
                                                                   inner_angular_speed=speed))
        solution = solve_helical(case)
        assert solution.converged
        gradients.append(abs(solution.pressure_gradient))
    assert all(later < earlier for earlier, later in zip(gradients, gradients[1:]))


def test_bingham_concentric_converges_and_reports_plugs():
    case = annulus_case({"model": "bingham", "yield_stress": 5.0, "plastic_viscosity": 0.03},
                        {"pressure_gradient": -2000.0, "inner_angular_speed": 20.0})
    solution = solve_helical(case)
    assert solution.converged
    assert 0 < solution.unyielded_fraction < 1 and solution.plug_intervals
    reference = analytic.helical_annulus_flow(solution.model, RI, RO, -2000.0, 20.0)
    assert solution.flow_rate == pytest.approx(reference.flow_rate, rel=1e-5)


def test_newtonian_eccentric_axial_flow_is_the_bipolar_series_whatever_the_rotation():
    mu, e = 0.05, 0.5
    expected = analytic.eccentric_annulus_newtonian_flow_rate(   # Piercy, Hooper & Winny 1933
        RI, RO, e * (RO - RI), mu, -1000.0)
    rates = []
    for speed in (0.0, 10.0):
        case = annulus_case({"model": "newtonian", "viscosity": mu},
                            {"pressure_gradient": -1000.0, "inner_angular_speed": speed,
                             "outer_angular_speed": 0.0 if speed else 1.0}, e, cells=6)
        solution = solve_helical(case)
        assert solution.converged
        rates.append(solution.flow_rate)
    assert rates[0] == pytest.approx(expected, rel=2e-5)
    assert rates[1] == pytest.approx(rates[0], rel=1e-12)


def test_eccentric_torque_tends_to_the_narrow_gap_journal_result():
    """Sommerfeld's full-film journal torque (Sommerfeld 1904, recalled from memory),
    ``M = 4 pi mu Omega R^3 / c (1 + 2 e^2) / ((2 + e^2) sqrt(1 - e^2))``, is the
    narrow-gap limit of the creeping flow: the relative difference falls as ``c / R``."""
    e, gaps, differences = 0.5, (0.04, 0.02), []
    for c in gaps:
        case = Case.from_dict({
            "fluid": {"model": "newtonian", "viscosity": 1.0},
            "geometry": {"shape": "annulus", "inner_radius": 1.0, "outer_radius": 1.0 + c,
                         "eccentricity": e},
            "drive": {"pressure_gradient": -1.0, "inner_angular_speed": 1.0},
            "mesh": {"cells": 4}})
        solution = solve_helical(case)
        radius = 1.0 + c / 2
        journal = 4 * math.pi * radius ** 3 / c * (1 + 2 * e * e) / ((2 + e * e) * math.sqrt(1 - e * e))
        differences.append(solution.torque_per_length["inner"] / journal - 1)
        # the torques on the two walls balance only with the net force's moment; the
        # inner one is what the journal formula gives
    assert abs(differences[1]) < 0.6 * gaps[1]
    assert differences[0] / differences[1] == pytest.approx(2.0, rel=0.1)


def test_eccentricity_to_zero_approaches_the_concentric_solver():
    drive = {"flow_rate": 0.004, "inner_angular_speed": 20.0}
    concentric = solve_helical(annulus_case(FLUIDS["power-law"], drive))
    eccentric = solve_helical(annulus_case(FLUIDS["power-law"], drive, 1e-3, cells=6))
    assert eccentric.converged
    assert eccentric.pressure_gradient == pytest.approx(concentric.pressure_gradient, rel=2e-3)
    assert eccentric.torque_per_length["inner"] == pytest.approx(
        concentric.torque_per_length["inner"], rel=2e-3)


def _eccentric_power_law(cells):
    return annulus_case(FLUIDS["power-law"], {"flow_rate": 0.004, "inner_angular_speed": 20.0},
                        0.5, cells=cells)


def test_eccentric_coupled_problem_converges_at_the_energy_order():
    """Mesh convergence of the 2-D coupled problem: the pressure gradient at a fixed flow
    rate and the wall torques are energy-type functionals, so with P2 velocities on
    isoparametric walls their error falls as h^4, twice the H1 order of the fields
    (standard finite-element theory, e.g. Strang & Fix 1973; recalled from memory). The
    three-grid observed order must exceed 3."""
    from gnflow.solver.coupled import helical_convergence_quantities
    values = {}
    for cells in (2, 4, 8):
        solution = solve_helical(_eccentric_power_law(cells))
        assert solution.converged
        quantities = helical_convergence_quantities(solution)
        quantities["pressure_gradient"] = solution.pressure_gradient
        for key, value in quantities.items():
            values.setdefault(key, []).append(value)
    for key in ("pressure_gradient", "inner_torque_per_length", "outer_torque_per_length"):
        coarse, medium, fine = values[key]
        order = math.log2(abs(coarse - medium) / abs(medium - fine))
        assert order > 3.0, (key, order)


def test_reused_factorisations_give_the_solution_of_fresh_ones(monkeypatch):
    """Preconditioning later Newton systems with an earlier factorisation (an inexact
    Newton method) must converge to the same discrete solution as factoring every one."""
    from gnflow.solver import coupled
    reused = solve_helical(_eccentric_power_law(6))
    monkeypatch.setattr(coupled._ReusingSolver, "_preconditioned", lambda *args: None)
    fresh = solve_helical(_eccentric_power_law(6))
    assert reused.converged and fresh.converged
    assert reused.pressure_gradient == pytest.approx(fresh.pressure_gradient, rel=1e-9)
    for wall in ("inner", "outer"):
        assert reused.torque_per_length[wall] == pytest.approx(fresh.torque_per_length[wall],
                                                               rel=1e-9)


def _journal(radius, clearance, eps):
    """Sommerfeld's full-film journal torque and load per length for unit viscosity and
    angular speed (Sommerfeld 1904, recalled from memory)."""
    root = (2 + eps * eps) * math.sqrt(1 - eps * eps)
    return (4 * math.pi * radius ** 3 / clearance * (1 + 2 * eps * eps) / root,
            12 * math.pi * radius ** 3 * eps / (clearance ** 2 * root))


def test_eccentric_rotation_closed_form_has_the_concentric_and_narrow_gap_limits():
    """The bipolar closed form (``analytic.eccentric_rotation_newtonian``, derived after
    Jeffery 1922) against two limits it was not built from: the Couette torque as the
    offset vanishes, the difference falling as offset^2, and Sommerfeld's journal torque on
    the inner wall, his load on it, and on the outer wall the torque less load x offset, as
    the gap narrows, the differences falling at least as clearance / radius."""
    couette = analytic.coaxial_newtonian(0.5, 1.0, 1.0, 1.0).torque_per_length
    differences = []
    for offset in (0.02, 0.002):
        ref = analytic.eccentric_rotation_newtonian(0.5, 1.0, offset, 1.0, 1.0)
        differences.append(np.array([ref.inner_torque_per_length / couette - 1,
                                     -ref.outer_torque_per_length / couette - 1]))
    assert np.all(np.abs(differences[0]) < 0.01)
    assert differences[0] / differences[1] == pytest.approx([100.0, 100.0], rel=0.01)
    for eps in (0.3, 0.8):
        gaps = []
        for clearance in (0.02, 0.01):
            ref = analytic.eccentric_rotation_newtonian(1.0, 1.0 + clearance, eps * clearance,
                                                        1.0, 1.0)
            torque, load = _journal(1.0 + clearance / 2, clearance, eps)
            gaps.append((ref.inner_torque_per_length / torque - 1,
                         -ref.outer_torque_per_length / (torque - load * eps * clearance) - 1,
                         ref.inner_force_per_length / load - 1))
        # measured: torque and load differ by about -0.23 c and -c (first order), the
        # outer torque by 0.5 c^2 (second order)
        for coarse, fine in zip(*gaps):
            assert abs(fine) < 0.02 and coarse / fine > 1.8, (eps, coarse, fine)


@pytest.mark.parametrize("eccentricity", [0.3, 0.7])
def test_eccentric_torques_converge_to_the_closed_form(eccentricity):
    """FE torque on both walls against the closed form (R1/R2 = 0.5). Measured errors
    (relative) at cells 2, 4, 8: inner 7.0e-4, 5.4e-5, 3.6e-6 and outer 1.0e-3, 8.3e-5,
    5.6e-6 at e = 0.3; inner 1.2e-3, 8.1e-5, 5.3e-6 and outer 7.0e-3, 4.8e-4, 3.1e-5 at
    e = 0.7: fourth order. So at 4 cells the error must be below 1e-3 (twice the largest
    measured) and have fallen at least 8 times (order 3) from 2 cells."""
    reference = analytic.eccentric_rotation_newtonian(0.5, 1.0, eccentricity * 0.5, 1.0, 1.0)
    expected = {"inner": reference.inner_torque_per_length,
                "outer": reference.outer_torque_per_length}
    errors = {}
    for cells in (2, 4):
        case = Case.from_dict({
            "fluid": {"model": "newtonian", "viscosity": 1.0},
            "geometry": {"shape": "annulus", "inner_radius": 0.5, "outer_radius": 1.0,
                         "eccentricity": eccentricity},
            "drive": {"pressure_gradient": -1.0, "inner_angular_speed": 1.0},
            "mesh": {"cells": cells}})
        solution = solve_helical(case)
        assert solution.converged
        for wall, value in expected.items():
            errors.setdefault(wall, []).append(
                abs(solution.torque_per_length[wall] / value - 1))
    for wall, (coarse, fine) in errors.items():
        assert fine < 1e-3, (wall, fine)
        assert coarse / fine > 8.0, (wall, coarse, fine)
