"""The result object and what the summary says: directions, magnitudes, drive, density,
yield, cautions, self-checks, permissions, singular corners.

Reference values: Hagen-Poiseuille and plane Couette flow (Bird, Stewart & Lightfoot,
Transport Phenomena, 2nd ed., sections 2.3 and 2.2 (recalled from memory), re-derived in
each test); the Bingham flow-start gradients follow from the force balance on a rigid
plug (derived in :func:`gnflow.post.flow_start_pressure_gradient`) and are checked against
the independent exact solutions of :mod:`gnflow.analytic`.
"""

import csv
import dataclasses
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import gnflow
from gnflow import analytic, rheology
from gnflow.export import atomic_directory, write_outputs
from gnflow.geometry import build_domain
from gnflow.post import CAUTION, CAUTION_DRILLING_ANNULUS, CAUTION_YIELD_RESTART
from gnflow.results import Results

NEWTONIAN = {"model": "newtonian", "viscosity": 0.5}


def _summary(fluid, geometry, drive, cells=40, **extra):
    case = gnflow.Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive,
                                  "mesh": {"cells": cells}, **extra})
    return gnflow.solve(case).summary()


# --------------------------------------------------------------------------- the object

def test_solve_returns_one_result_object_that_acts_as_the_solution():
    case = gnflow.Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "pipe",
                                  "radius": 0.01}, "drive": {"pressure_gradient": -100.0},
                                  "mesh": {"cells": 20}})
    results = gnflow.solve(case)
    assert isinstance(results, Results)
    assert results.u is results.solution.u and results.case is case
    assert results.fields is results.fields           # computed once, then kept
    first = results.summary()
    first["flow_rate"] = 0.0                          # a copy: the object is unchanged
    assert results.summary()["flow_rate"] > 0


# --------------------------------------------------------------------------- directions

def test_flow_toward_minus_z_reports_speeds_as_magnitudes():
    # Hagen-Poiseuille: w(r) = -G (R^2 - r^2) / (4 mu), so for G = +2 kPa/m the flow runs
    # toward -z with peak speed G R^2 / (4 mu) and mean speed half of it
    G, R, mu = 2000.0, 0.02, 0.5
    s = _summary(NEWTONIAN, {"shape": "pipe", "radius": R}, {"pressure_gradient": G})
    peak = G * R ** 2 / (4 * mu)
    assert s["flow_direction"] == "-z"
    assert s["flow_rate"] == pytest.approx(-math.pi * R ** 2 * peak / 2, rel=1e-9)
    assert s["max_velocity"] == pytest.approx(peak, rel=1e-9)
    assert s["mean_velocity"] == pytest.approx(peak / 2, rel=1e-9)
    assert s["min_velocity"] == pytest.approx(-peak, rel=1e-9)
    assert s["max_velocity_signed"] == pytest.approx(0.0, abs=1e-12 * peak)
    assert s["pressure_drop_per_length"] == pytest.approx(G)   # pressure falls along the flow
    # wall shear stress G R / 2 as a magnitude; the fluid pulls the wall toward -z
    assert s["wall_shear_stress"]["per_wall"]["wall"] == pytest.approx(G * R / 2, rel=1e-9)
    assert s["wall_shear_stress"]["force_direction"] == {"wall": "-z"}


def test_one_wall_stress_convention_for_per_wall_mean_and_max():
    # plane Couette-Poiseuille, Newtonian: tau(y) = tau_b + G y with the bottom stress
    # tau_b = mu U / h - G h / 2; the stress on the wall along +z is +tau_b on the bottom
    # wall and -tau(h) on the top wall
    G, h, U, mu = -4000.0, 0.01, 2.0, 0.5
    s = _summary(NEWTONIAN, {"shape": "slit", "gap": h},
                 {"pressure_gradient": G, "wall_speed": {"top": U}})
    bottom = mu * U / h - G * h / 2
    top = -(bottom + G * h)
    stress = s["wall_shear_stress"]
    assert stress["per_wall"]["bottom"] == pytest.approx(abs(bottom), rel=1e-9)
    assert stress["per_wall"]["top"] == pytest.approx(abs(top), rel=1e-9)
    assert stress["mean"] == pytest.approx((abs(bottom) + abs(top)) / 2, rel=1e-9)
    assert stress["max"] == pytest.approx(max(abs(bottom), abs(top)), rel=1e-9)
    assert stress["force_direction"] == {"bottom": "+z" if bottom > 0 else "-z",
                                         "top": "+z" if top > 0 else "-z"}


# --------------------------------------------------------------------------- drive

def test_wall_driven_flow_gives_no_friction_factor_or_pumping_power():
    # plane Couette: tau = mu U / h, and the wall's work rate per unit width U tau is
    # all dissipated; no pressure work at G = 0
    h, U, mu = 0.002, 0.4, 0.5
    s = _summary({**NEWTONIAN, "density": 1000.0}, {"shape": "slit", "gap": h},
                 {"pressure_gradient": 0.0, "wall_speed": {"top": U}})
    assert s["driven_by"] == "moving walls"
    assert "fanning_friction_factor" not in s and "pumping_power_per_length" not in s
    assert s["power_per_length"]["walls"] == pytest.approx(mu * U ** 2 / h, rel=1e-9)
    assert s["power_per_length"]["pressure"] == pytest.approx(0.0, abs=1e-12)
    assert any("moving walls" in note for note in s["notes"])
    assert "reynolds_number" in s


def test_pressure_driven_flow_keeps_fanning_factor_16_over_re():
    # Newtonian pipe: f = 16 / Re (Hagen-Poiseuille in Fanning form)
    s = _summary({**NEWTONIAN, "density": 900.0}, {"shape": "pipe", "radius": 0.01},
                 {"pressure_gradient": -500.0})
    assert s["driven_by"] == "pressure gradient"
    assert s["fanning_friction_factor"] * s["reynolds_number"] == pytest.approx(16, rel=1e-8)
    assert s["pumping_power_per_length"] == pytest.approx(500.0 * s["flow_rate"], rel=1e-12)


# --------------------------------------------------------------------------- density, Bingham

def test_without_density_the_summary_says_no_reynolds_number_and_no_laminar_check():
    s = _summary({"model": "newtonian", "viscosity": 1e-3}, {"shape": "pipe", "radius": 0.05},
                 {"pressure_gradient": -5000.0}, cells=20)
    assert "reynolds_number" not in s and "fanning_friction_factor" not in s
    assert s["laminar_check"].startswith("not made")
    assert any("no density" in w and "no laminar check" in w for w in s["warnings"])


BINGHAM = {"model": "bingham", "yield_stress": 5.0, "plastic_viscosity": 0.02,
           "density": 1200.0}


def test_bingham_summary_gives_plastic_reynolds_and_hedstrom_numbers():
    R = 0.05
    s = _summary(BINGHAM, {"shape": "pipe", "radius": R}, {"flow_rate": 2e-3}, cells=60)
    D, V = 2 * R, 2e-3 / (math.pi * R ** 2)
    # Hedstrom (1952): He = rho tau_y D^2 / mu_p^2; plastic Re = rho V D / mu_p
    assert s["hedstrom_number"] == pytest.approx(1200 * 5 * D ** 2 / 0.02 ** 2, rel=1e-12)
    assert s["plastic_reynolds_number"] == pytest.approx(1200 * V * D / 0.02, rel=1e-6)
    assert s["laminar_limit"]["compared"] == "plastic_reynolds_number"
    assert "Hanks" in s["laminar_limit"]["criterion"]
    assert "approximate" not in s["laminar_limit"]["criterion"]     # a pipe: no proxy


def test_pipe_criteria_on_other_shapes_are_labelled_approximate():
    s = _summary({**NEWTONIAN, "density": 1000.0}, {"shape": "slit", "gap": 0.01},
                 {"pressure_gradient": -100.0}, cells=20)
    assert s["laminar_limit"]["criterion"].endswith(
        "approximate (pipe criterion applied through the hydraulic diameter)")


START = {
    # shape: geometry, flow-start gradient from the plug force balance
    "pipe": ({"shape": "pipe", "radius": 0.02}, 2 * 5.0 / 0.02),
    "slit": ({"shape": "slit", "gap": 0.01}, 5.0 / 0.005),
    "annulus": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03},
                2 * 5.0 / 0.02),
}


def _exact_flow_rate(geometry, gradient):
    model = rheology.Bingham(5.0, 0.02)
    if geometry["shape"] == "pipe":
        return analytic.pipe_flow(model, geometry["radius"], gradient).flow_rate
    if geometry["shape"] == "slit":
        return analytic.slit_flow(model, geometry["gap"], gradient).flow_rate
    return analytic.annulus_flow(model, geometry["inner_radius"], geometry["outer_radius"],
                                 gradient).flow_rate


@pytest.mark.parametrize("shape", START)
def test_flow_start_gradient_matches_the_exact_bingham_solution(shape):
    geometry, start = START[shape]
    # the independent exact solution flows just above the start gradient, not below it
    assert abs(_exact_flow_rate(geometry, -1.02 * start)) > 0
    assert _exact_flow_rate(geometry, -0.98 * start) == pytest.approx(0.0, abs=1e-15)
    s = _summary(BINGHAM, geometry, {"pressure_gradient": -0.9 * start}, cells=30)
    assert s["flow_start_pressure_gradient"]["value"] == pytest.approx(start, rel=1e-12)
    assert s["yields"] is False
    assert "reynolds_number" not in s and "fanning_friction_factor" not in s
    assert any("does not yield" in w and f"{start:.4g} Pa/m" in w for w in s["warnings"])


def test_case_notices_join_the_warnings():
    case = gnflow.Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "pipe",
                                  "radius": 0.01}, "drive": {"pressure_gradient": -100.0},
                                  "mesh": {"cells": 10}})
    case = dataclasses.replace(case, notices=("a notice of our own",))
    assert "a notice of our own" in gnflow.solve(case).summary()["warnings"]


def test_cautions_fit_the_case():
    s = _summary(BINGHAM, {"shape": "annulus", "inner_radius": 0.05, "outer_radius": 0.1},
                 {"pressure_gradient": -2000.0}, cells=20)
    assert s["cautions"][-1] == CAUTION == s["caution"]
    assert CAUTION_YIELD_RESTART in s["cautions"] and CAUTION_DRILLING_ANNULUS in s["cautions"]
    assert "licensed or registered engineer" in CAUTION and "local codes" in CAUTION


# --------------------------------------------------------------------------- self-checks

def _pipe_solution():
    case = gnflow.Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "pipe",
                                  "radius": 0.01}, "drive": {"pressure_gradient": -100.0},
                                  "mesh": {"cells": 20}})
    return gnflow.solve(case).solution


def test_a_result_that_breaks_its_force_balance_is_not_converged():
    solution = _pipe_solution()
    assert Results(solution).summary()["force_balance_error"] < 1e-12
    # the sum of all residuals is G A whatever u is (the basis sums to one), so the wall
    # drag balances the pressure force exactly when the interior residuals vanish: spoil
    # the dof next to the wall, whose residual then shifts force from wall to interior
    spoiled = solution.u.copy()
    spoiled[np.argsort(solution.domain.basis.doflocs[0])[-2]] *= 1.01
    s = Results(dataclasses.replace(solution, u=spoiled)).summary()
    assert s["converged"] is False and "force balance" in s["message"]
    assert s["message"] in s["warnings"]


def test_a_result_with_a_non_finite_number_is_not_converged():
    solution = _pipe_solution()
    spoiled = solution.u.copy()
    spoiled[3] = np.nan
    results = Results(dataclasses.replace(solution, u=spoiled))
    assert results.converged is False and "non-finite" in results.message


def test_cli_exits_3_when_the_checks_fail(tmp_path, monkeypatch, capsys):
    import gnflow.solver
    from gnflow.cli import main

    original = gnflow.solver.solve

    def spoiled_solve(case, **options):
        solution = original(case, **options)
        u = solution.u.copy()
        u[np.argsort(solution.domain.basis.doflocs[0])[-2]] *= 1.01   # next to the wall
        return dataclasses.replace(solution, u=u)

    monkeypatch.setattr(gnflow.solver, "solve", spoiled_solve)
    case = tmp_path / "pipe.toml"
    case.write_text('[fluid]\nmodel = "newtonian"\nviscosity = 1\n[geometry]\nshape = "pipe"\n'
                    'radius = 0.01\n[drive]\npressure_gradient = -10\n[mesh]\ncells = 10\n'
                    '[output]\nplots = false\n')
    assert main(["run", str(case), "--out", str(tmp_path / "res"), "--quiet"]) == 3
    assert "force balance" in capsys.readouterr().err
    assert json.loads((tmp_path / "res" / "summary.json").read_text())["converged"] is False


# --------------------------------------------------------------------------- files

@pytest.mark.parametrize("mask, folder_mode, file_mode", [(0o022, 0o755, 0o644),
                                                          (0o027, 0o750, 0o640)])
def test_result_folders_get_the_umask_permissions(tmp_path, mask, folder_mode, file_mode):
    previous = os.umask(mask)
    try:
        with atomic_directory(tmp_path / "res") as staging:
            (staging / "summary.json").write_text("{}")
    finally:
        os.umask(previous)
    assert (tmp_path / "res").stat().st_mode & 0o777 == folder_mode
    assert (tmp_path / "res" / "summary.json").stat().st_mode & 0o777 == file_mode


def test_singular_corners_are_left_out_of_the_wall_maxima_and_marked(tmp_path):
    case = gnflow.Case.from_dict({
        "fluid": NEWTONIAN, "geometry": {"shape": "rectangle", "width": 0.02, "height": 0.01},
        "drive": {"pressure_gradient": 0.0, "wall_speed": {"top": 0.1}},
        "mesh": {"cells": 8, "degree": 1}, "output": {"plots": False, "fields": False}})
    domain = build_domain(case)
    # the lid meets the fixed side walls at its two ends: a jump of wall speed, where
    # the exact stress is unbounded (recorded by the geometry, or here by hand)
    corners = [{"x": x, "y": 0.01, "walls": ["top", side], "kind": "wall-speed jump",
                "angle_deg": 90.0} for x, side in ((0.0, "left"), (0.02, "right"))]
    domain.extra["singular_points"] = corners
    results = gnflow.solve(case, domain=domain)
    s = results.summary()
    everywhere = max(float(np.max(np.abs(d["shear_stress"])))
                     for d in results.wall_distributions.values())
    near = results.wall_distributions["top"]["near_singular_corner"]
    assert near.any() and not near.all()
    excluded = s["wall_shear_stress"]["excluded_near_singular_corners"]
    assert excluded["radius"] >= 0.02 * 0.01
    assert s["wall_shear_stress"]["max"] < everywhere
    assert any("singular corner" in n for n in s["notes"])
    write_outputs(results, s, tmp_path / "res")
    with (tmp_path / "res" / "wall_stress.csv").open() as handle:
        rows = list(csv.DictReader(handle))
    flagged = [r for r in rows if r["near_singular_corner"] == "1"]
    assert flagged and len(flagged) < len(rows)
    for row in flagged:
        distance = min(math.hypot(float(row["x [m]"]) - c["x"], float(row["y [m]"]) - c["y"])
                       for c in corners)
        assert distance <= excluded["radius"]


# --------------------------------------------------------------------------- start-up

def test_the_command_line_module_imports_no_heavy_library():
    code = ("import sys, gnflow.cli; print(sorted(m for m in ('skfem', 'scipy', 'matplotlib',"
            " 'meshio', 'pint') if m in sys.modules))")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            cwd=Path(__file__).parent)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "[]"


EXAMPLES = Path(gnflow.__file__).parent / "examples"


@pytest.mark.parametrize("name", sorted(p.name for p in EXAMPLES.glob("*.toml")
                                        if 'shape = "mesh"' not in p.read_text()))
def test_checking_an_example_imports_no_heavy_library(name):
    """``gnflow check`` reads and checks a case (drawn sections, heating and slip included)
    without the finite-element stack or the plotting library: that is what keeps it quick."""
    code = ("import sys; from gnflow.cli import main; main(['check', '--quiet', sys.argv[1]]);"
            " print(sorted(m for m in ('skfem', 'scipy', 'matplotlib', 'meshio', 'pint')"
            " if m in sys.modules))")
    result = subprocess.run([sys.executable, "-c", code, str(EXAMPLES / name)],
                            capture_output=True, text=True, cwd=Path(__file__).parent)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip().splitlines()[-1] == "[]"


def test_corner_nodes_are_shared_between_walls_so_a_symmetric_duct_has_equal_walls():
    """A Bingham square duct's solution is symmetric under the mesh's mirror symmetries,
    so its four walls carry the same force (statics: each a quarter of G L^2). The corner
    nodes' reactions used to go whole to one wall: top and bottom then differed by 2 %."""
    tau_c = 1 / (2 + math.sqrt(math.pi))          # Mosolov & Miasnikov (1965) stopping value
    results = gnflow.solve(gnflow.case.Case.from_dict({
        "fluid": {"model": "bingham", "yield_stress": 0.5 * tau_c, "plastic_viscosity": 1.0},
        "geometry": {"shape": "rectangle", "width": 1.0, "height": 1.0},
        "drive": {"pressure_gradient": -1.0}, "mesh": {"cells": 16}}))
    per_wall = results.summary()["wall_shear_stress"]["per_wall"]
    assert set(per_wall) == {"bottom", "left", "right", "top"}
    for value in per_wall.values():
        assert value == pytest.approx(0.25, rel=1e-9)
