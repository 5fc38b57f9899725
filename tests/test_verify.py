"""Mesh-convergence studies (gnflow.verify) and the ``gnflow verify`` command.

Sources of the check values: the formal orders of Lagrange elements of degree k on
smooth solutions, k + 1 in L2 and k in the H1 seminorm (e.g. Brenner & Scott, *The
Mathematical Theory of Finite Element Methods*, ch. 0 and 4, for the linear problem; the
1-D quasilinear problems here inherit them when the viscosity is smooth), checked to
+-0.15 on the finest pair of levels; the Celik et al. (2008) three-grid procedure for
the grid convergence index.
"""

import csv

import numpy as np
import pytest

from gnflow.case import Case
from gnflow.cli import main
from gnflow.errors import CaseError
from gnflow.verify import level_cells, run_verification, run_verify_command

SMOOTH = {
    "newtonian annulus": ({"model": "newtonian", "viscosity": 1.0},
                          {"shape": "annulus", "inner_radius": 0.5, "outer_radius": 1.0},
                          {"pressure_gradient": -8.0}),
    "carreau slit": ({"model": "carreau", "zero_shear_viscosity": 2.0, "time_constant": 0.5,
                      "flow_index": 0.5}, {"shape": "slit", "gap": 0.02},
                     {"pressure_gradient": -3000.0}),
    "carreau pipe": ({"model": "carreau", "zero_shear_viscosity": 2.0, "time_constant": 0.5,
                      "flow_index": 0.5}, {"shape": "pipe", "radius": 0.01},
                     {"pressure_gradient": -3000.0}),
    "newtonian coaxial": ({"model": "newtonian", "viscosity": 1.0},
                          {"shape": "coaxial-cylinders", "inner_radius": 0.5,
                           "outer_radius": 1.0}, {"inner_angular_speed": 2.0}),
}


def _case(fluid, geometry, drive, cells=8, degree=1):
    return Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive,
                           "mesh": {"cells": cells, "degree": degree},
                           "solver": {"tolerance": 1e-12}})


@pytest.mark.parametrize("degree", [1, 2])
@pytest.mark.parametrize("name", SMOOTH)
def test_observed_orders_on_smooth_cases(name, degree):
    result = run_verification(_case(*SMOOTH[name], degree=degree), levels=4)
    assert all(level.converged for level in result.levels)
    assert result.has_reference
    assert result.l2_orders[-1] == pytest.approx(degree + 1, abs=0.15)
    assert result.h1_orders[-1] == pytest.approx(degree, abs=0.15)
    assert np.isnan(result.l2_orders[0])


def test_power_law_order_limited_by_regularity():
    """n = 0.8 slit: w ~ |y - h/2|^(1 + 1/n) at the mid-plane, in H^(1/2 + 1 + 1/n - eps):
    P2 converges as h^2.75 in L2 and h^1.75 in H1, not h^3 and h^2."""
    case = _case({"model": "power-law", "consistency": 1.0, "flow_index": 0.8},
                 {"shape": "slit", "gap": 0.02}, {"pressure_gradient": -3000.0}, degree=2)
    result = run_verification(case, levels=4)
    assert result.l2_orders[-1] == pytest.approx(2.75, abs=0.1)
    assert result.h1_orders[-1] == pytest.approx(1.75, abs=0.1)


def test_level_checks():
    assert level_cells(8, 3, 2.0) == [8, 16, 32]
    with pytest.raises(CaseError, match="--levels"):
        level_cells(8, 1, 2.0)
    with pytest.raises(CaseError, match="--levels"):
        level_cells(8, 9, 2.0)
    with pytest.raises(CaseError, match="--ratio"):
        level_cells(8, 3, 1.0)
    with pytest.raises(CaseError, match="whole cell counts"):
        level_cells(5, 3, 1.5)


def test_without_reference_reports_grid_convergence_index():
    """A flow-rate target has no analytic counterpart: the three-grid GCI is reported."""
    case = _case({"model": "carreau", "zero_shear_viscosity": 2.0, "time_constant": 0.5,
                  "flow_index": 0.5}, {"shape": "pipe", "radius": 0.01},
                 {"flow_rate": 1e-5}, degree=1)
    result = run_verification(case, levels=4)
    assert not result.has_reference and result.quantity == "pressure_gradient"
    gci = result.finest_gci
    assert gci.converging and gci.apparent_order == pytest.approx(2.0, abs=0.15)
    # the extrapolated gradient lies within the GCI band of the finest value
    finest = result.levels[-1].value
    assert abs(gci.extrapolated_value - finest) <= gci.gci_fine * abs(finest)


VERIFY_CASE = """title = "verify end to end"
[fluid]
model = "carreau"
zero_shear_viscosity = "2 Pa*s"
time_constant = "0.5 s"
flow_index = 0.5
[geometry]
shape = "annulus"
inner_radius = "10 mm"
outer_radius = "30 mm"
[drive]
pressure_gradient = "-3 kPa/m"
[mesh]
cells = 8
degree = 2
"""


def test_verify_command_end_to_end(tmp_path, capsys):
    path = tmp_path / "study.toml"
    path.write_text(VERIFY_CASE, encoding="utf-8")
    out = tmp_path / "out"
    assert main(["verify", str(path), "--levels", "3", "--out", str(out)]) == 0
    printed = capsys.readouterr()
    assert "L2 error" in printed.out and "[3/3]" in printed.err
    assert sorted(p.name for p in out.iterdir()) == ["convergence.csv", "convergence.png",
                                                    "report.md"]
    with open(out / "convergence.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [r["cells"] for r in rows] == ["8", "16", "32"]
    for column in ("level", "dofs", "h", "flow_rate", "l2_error", "h1_error",
                   "flow_rate_error", "l2_order", "h1_order", "flow_rate_order"):
        assert column in rows[0]
    assert rows[0]["l2_order"] == "" and float(rows[2]["l2_order"]) == pytest.approx(3, abs=0.2)
    assert "Mesh convergence" in (out / "report.md").read_text()


def test_verify_command_default_folder_and_bad_options(tmp_path, monkeypatch, capsys):
    path = tmp_path / "study.toml"
    path.write_text(VERIFY_CASE.replace("cells = 8", "cells = 4"), encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    assert run_verify_command(path, levels=2, ratio=2.0, out_dir=None) == 0
    assert (tmp_path / "results" / "study-verify" / "convergence.csv").exists()
    assert main(["verify", str(path), "--levels", "12"]) == 2
    assert main(["verify", str(path), "--ratio", "0.5"]) == 2
    assert "--ratio" in capsys.readouterr().err
