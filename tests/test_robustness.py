"""Numerical robustness over the corners of the range an engineer may ask for.

Each case must converge, or end not converged with a message giving the last residual;
never NaN or infinity in the summary, never ``converged`` with a residual above the
tolerance.
"""

import json
import math

import pytest

from gnflow.case import Case
from gnflow.cli import main
from gnflow.export import clean_for_json
from gnflow import solve

PIPE = {"shape": "pipe", "radius": 0.01}
SLIT = {"shape": "slit", "gap": 0.01}
ANNULUS = {"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.02}
GAP = {"shape": "coaxial-cylinders", "inner_radius": 0.02, "outer_radius": 0.025}


def _all_numbers(value):
    if isinstance(value, dict):
        for v in value.values():
            yield from _all_numbers(v)
    elif isinstance(value, list):
        for v in value:
            yield from _all_numbers(v)
    elif isinstance(value, float):
        yield value


def _check(fluid, geometry, drive, must_converge=True, **extra):
    case = Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive, **extra})
    solution = solve(case)
    summary = solution.summary()
    assert all(math.isfinite(v) for v in _all_numbers(summary)), summary
    if solution.converged:
        assert summary["residual"] <= case.solver.tolerance
    else:
        assert "residual" in summary["message"]
    if must_converge:
        assert solution.converged, solution.message
    return summary


@pytest.mark.parametrize("n", [0.1, 2.0])
@pytest.mark.parametrize("geometry", [PIPE, SLIT, ANNULUS, GAP], ids=lambda g: g["shape"])
def test_flow_index_extremes(n, geometry):
    drive = {"inner_angular_speed": 10.0} if geometry is GAP else {"pressure_gradient": -1000.0}
    _check({"model": "power-law", "consistency": 1.0, "flow_index": n}, geometry, drive)


@pytest.mark.parametrize("plug_ratio", [0.9, 0.95, 0.99])
def test_bingham_numbers_up_to_and_past_1e3(plug_ratio):
    """Pipe: tau_w = 5 Pa; phi = tau_y / tau_w. phi = 0.95 is Bn = tau_y D/(mu_p V) ~ 1.6e3."""
    s = _check({"model": "bingham", "yield_stress": plug_ratio * 5.0, "plastic_viscosity": 0.01},
               PIPE, {"pressure_gradient": -1000.0})
    bingham = plug_ratio * 5.0 * 0.02 / (0.01 * s["mean_velocity"])
    assert bingham > 100
    _check({"model": "herschel-bulkley", "yield_stress": plug_ratio * 5.0, "consistency": 0.01,
            "flow_index": 0.4}, SLIT, {"pressure_gradient": -1000.0})


@pytest.mark.parametrize("time_constant", [1e2, 1e4, 1e6])
def test_carreau_far_into_the_power_law_range(time_constant):
    s = _check({"model": "carreau", "zero_shear_viscosity": 10.0,
                "time_constant": time_constant, "flow_index": 0.3}, PIPE,
               {"pressure_gradient": -1000.0})
    assert s["wall_shear_rate"]["max"] * time_constant > 1e3


@pytest.mark.parametrize("size", [1e-6, 10.0])
def test_gaps_from_a_micrometre_to_ten_metres(size):
    _check({"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
           {"shape": "slit", "gap": size}, {"pressure_gradient": -1000.0})
    _check({"model": "herschel-bulkley", "yield_stress": 1.0, "consistency": 1.0,
            "flow_index": 0.5}, {"shape": "pipe", "radius": size},
           {"pressure_gradient": -1e7 if size < 1e-3 else -1.0})


def test_a_material_that_does_not_yield_creeps_and_is_flagged():
    s = _check({"model": "herschel-bulkley", "yield_stress": 1.0, "consistency": 1.0,
                "flow_index": 0.5}, {"shape": "pipe", "radius": 1e-6},
               {"pressure_gradient": -1e6})
    assert any("does not flow" in w for w in s["warnings"])


@pytest.mark.parametrize("gradient", [-1e-6, -1e6])
@pytest.mark.parametrize("fluid", [
    {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
    {"model": "carreau", "zero_shear_viscosity": 10.0, "time_constant": 1.0, "flow_index": 0.4},
    {"model": "bingham", "yield_stress": 1e-3, "plastic_viscosity": 0.1},
], ids=lambda f: f["model"])
def test_pressure_gradients_over_twelve_decades(gradient, fluid):
    _check(fluid, PIPE, {"pressure_gradient": gradient})


@pytest.mark.parametrize("rate", [1e-12, 1.0])
@pytest.mark.parametrize("fluid", [
    {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
    {"model": "herschel-bulkley", "yield_stress": 1.0, "consistency": 1.0, "flow_index": 0.5},
], ids=lambda f: f["model"])
def test_flow_rates_over_twelve_decades(rate, fluid):
    s = _check(fluid, PIPE, {"flow_rate": rate})
    assert s["flow_rate"] == pytest.approx(rate, rel=1e-8)


@pytest.mark.parametrize("fluid", [
    {"model": "newtonian", "viscosity": 1.0},
    {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
], ids=lambda f: f["model"])
def test_rectangle_aspect_ratio_one_to_a_hundred(fluid):
    _check(fluid, {"shape": "rectangle", "width": 1.0, "height": 0.01},
           {"pressure_gradient": -1.0}, mesh={"cells": 4})


def test_pathological_model_ends_with_exit_3_not_a_crash(tmp_path, capsys):
    # Cross with m < 1 and no infinite-shear plateau: stress ~ rate^0.1, so the rate at
    # the wall is astronomically large and the tangent degenerates
    case = tmp_path / "cross.toml"
    case.write_text('[fluid]\nmodel = "cross"\nzero_shear_viscosity = 10\ntime_constant = 1e6\n'
                    'rate_exponent = 0.9\n[geometry]\nshape = "pipe"\nradius = 0.01\n'
                    '[drive]\npressure_gradient = -1000\n')
    code = main(["run", str(case), "--out", str(tmp_path / "res")])
    assert code == 3
    assert "residual" in capsys.readouterr().err
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())
    assert summary["converged"] is False
    assert "NaN" not in (tmp_path / "res" / "summary.json").read_text()


def test_json_never_carries_nan():
    assert clean_for_json({"a": float("nan"), "b": [float("inf"), 1.0]}) == {"a": None,
                                                                             "b": [None, 1.0]}
