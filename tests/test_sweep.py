"""Design studies: --vary parsing, sweep rows against single runs, failing cases,
the dask path against the local one, and flow curves."""

import csv
import io

import numpy as np
import pytest

from gnflow import Case, CaseError, solve
from gnflow.sweep import (ProgressBar, flow_curve, parse_vary, run_flow_curve_command, run_sweep,
                          run_sweep_command)

BASE = {
    "title": "sweep test pipe",
    "fluid": {"model": "power-law", "consistency": "0.8 Pa*s^0.5", "flow_index": 0.5,
              "density": "1000 kg/m^3"},
    "geometry": {"shape": "annulus", "inner_radius": "10 mm", "outer_radius": "30 mm"},
    "drive": {"flow_rate": "1 L/s"},
    "mesh": {"cells": 40},
}
CASE_TEXT = """
title = "sweep test annulus"
[fluid]
model = "power-law"
consistency = "0.8 Pa*s^0.5"
flow_index = 0.5
density = "1000 kg/m^3"
[geometry]
shape = "annulus"
inner_radius = "10 mm"
outer_radius = "30 mm"
[drive]
flow_rate = "1 L/s"
[mesh]
cells = 40
"""


@pytest.fixture
def case():
    return Case.from_dict(BASE)


@pytest.fixture
def case_file(tmp_path):
    path = tmp_path / "annulus.toml"
    path.write_text(CASE_TEXT)
    return path


def _read_csv(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.reader(handle))


# --------------------------------------------------------------------------- --vary

def test_vary_with_units_and_spaces(case):
    spec = parse_vary("drive.pressure_gradient = -1 kPa/m : -10 kPa/m : 10", case)
    assert spec.key == "drive.pressure_gradient" and spec.unit == "Pa/m"
    assert spec.values[0] == -1000.0 and spec.values[-1] == -10000.0 and len(spec.values) == 10
    assert np.allclose(np.diff(spec.values), -1000.0)
    assert parse_vary("geometry.inner_radius=5mm:2cm:4", case).values == pytest.approx(
        (0.005, 0.010, 0.015, 0.020))
    assert parse_vary("fluid.consistency=0.5:2 Pa*s^0.5:2", case).values == (0.5, 2.0)


def test_vary_log_spacing(case):
    spec = parse_vary("drive.flow_rate=0.1 L/s:10 L/s:3", case, log=True)
    assert spec.values == pytest.approx((1e-4, 1e-3, 1e-2), rel=1e-12)
    negative = parse_vary("drive.pressure_gradient=-10:-1000:3", case, log=True)
    assert negative.values == pytest.approx((-10.0, -100.0, -1000.0))
    with pytest.raises(CaseError, match="same sign"):
        parse_vary("drive.pressure_gradient=-10:10:3", case, log=True)


def test_vary_whole_numbers_and_plain(case):
    assert parse_vary("mesh.cells=10:40:4", case).values == (10, 20, 30, 40)
    assert parse_vary("geometry.eccentricity=0:0.5:3", case).values == (0.0, 0.25, 0.5)


@pytest.mark.parametrize("spec, message", [
    ("drive.pressure_gradient", "KEY=START:STOP:COUNT"),
    ("drive.pressure_gradient=-1:-2", "three fields"),
    ("drive.pressure_gradient=-1:-2:zero", "COUNT"),
    ("drive.pressure_gradient=-1:-2:0", "COUNT"),
    ("drive.pressure_gradient=-1 kPa:-2 kPa:3", "dimension"),
    ("fluid.flow_indx=0.3:0.9:3", 'did you mean "fluid.flow_index"'),
    ("fluid.viscosity=1:2:3", "can vary"),
])
def test_vary_bad_specs_name_the_problem(case, spec, message):
    with pytest.raises(CaseError, match=message):
        parse_vary(spec, case)


# --------------------------------------------------------------------------- rows

def test_sweep_rows_equal_single_runs(case):
    varies = [parse_vary("drive.pressure_gradient=-2kPa/m:-6kPa/m:3", case),
              parse_vary("fluid.flow_index=0.4:0.8:2", case)]
    table = run_sweep(case, varies, workers=2, show_progress=False)
    assert len(table.rows) == 6 and table.failed == 0
    assert [(r["drive.pressure_gradient"], r["fluid.flow_index"]) for r in table.rows] == [
        (g, n) for g in (-2000.0, -4000.0, -6000.0) for n in (0.4, 0.8)]
    for row in table.rows:
        # the case file drives by flow rate: giving a gradient replaces that drive; K is
        # held at its SI value while n varies
        raw = {**BASE, "drive": {"pressure_gradient": row["drive.pressure_gradient"]},
               "fluid": {**BASE["fluid"], "flow_index": row["fluid.flow_index"],
                         "consistency": 0.8}}
        summary = solve(Case.from_dict(raw)).summary()
        assert row["converged"] is True and row["error"] == ""
        assert row["flow_rate"] == pytest.approx(summary["flow_rate"], rel=1e-12)
        assert row["pressure_gradient"] == summary["pressure_gradient"]
        assert row["wall_shear_stress_mean"] == pytest.approx(
            summary["wall_shear_stress"]["mean"], rel=1e-12)
        assert row["reynolds_number"] == pytest.approx(summary["reynolds_number"], rel=1e-12)


def test_with_value_agrees_with_the_sweep_for_one_key(case):
    spec = parse_vary("geometry.inner_radius=8mm:12mm:2", case)
    table = run_sweep(case, [spec], workers=1, show_progress=False)
    for row in table.rows:
        summary = solve(case.with_value("geometry.inner_radius", row["geometry.inner_radius"])
                        ).summary()
        assert row["flow_rate"] == summary["flow_rate"]
        assert row["pressure_gradient"] == summary["pressure_gradient"]


@pytest.mark.parametrize("workers", [1, 2])
def test_impossible_case_is_marked_and_the_sweep_finishes(case, workers):
    # the last inner radius is past the outer radius (30 mm): no such annulus
    spec = parse_vary("geometry.inner_radius=10mm:40mm:4", case)
    table = run_sweep(case, [spec], workers=workers, show_progress=False)
    converged = [row["converged"] for row in table.rows]
    assert converged == [True, True, False, False]
    for row in table.rows[2:]:
        assert "inner_radius" in row["error"] and row["flow_rate"] is None


def test_flow_index_zero_is_a_failed_row(case):
    table = run_sweep(case, [parse_vary("fluid.flow_index=0:1:3", case)], workers=1,
                      show_progress=False)
    assert [row["converged"] for row in table.rows] == [False, True, True]
    assert "flow_index" in table.rows[0]["error"]


def test_unconverged_case_is_marked(case):
    spec = parse_vary("solver.max_iterations=1:40:2", case)
    table = run_sweep(case, [spec], workers=1, show_progress=False)
    assert [row["converged"] for row in table.rows] == [False, True]
    assert "not converged" in table.rows[0]["error"]


def test_progress_bar_text():
    stream = io.StringIO()
    bar = ProgressBar(4, stream)
    bar.advance(2)
    bar.advance(2, failed=1)
    text = stream.getvalue()
    assert "2/4 cases" in text and "4/4 cases" in text and "1 failed" in text


# --------------------------------------------------------------------------- command

def test_sweep_command_writes_csv_with_units_and_plot(case_file, tmp_path, capsys):
    out = tmp_path / "study"
    code = run_sweep_command(str(case_file), ["drive.pressure_gradient=-1kPa/m:-4kPa/m:4",
                                              "geometry.inner_radius=10mm:35mm:2"],
                             workers=2, out_dir=str(out))
    assert code == 3  # the 35 mm inner radius cannot be built
    rows = _read_csv(out / "sweep.csv")
    assert rows[0][:6] == ["drive.pressure_gradient [Pa/m]", "geometry.inner_radius [m]",
                           "flow_rate [m^3/s]", "pressure_gradient [Pa/m]",
                           "wall_shear_stress_mean [Pa]", "reynolds_number [-]"]
    assert rows[0][6:] == ["converged", "error", "warnings"]
    assert len(rows) == 1 + 8
    assert [r[6] for r in rows[1:]] == ["true", "false"] * 4
    assert float(rows[1][0]) == -1000.0 and float(rows[1][1]) == 0.01
    assert (out / "sweep.png").stat().st_size > 0
    captured = capsys.readouterr()
    assert "8 cases" in captured.out and "4 failed" in captured.out
    assert "8/8 cases" in captured.err
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]


def test_sweep_command_bad_plot_key_and_missing_dask(case_file, monkeypatch):
    with pytest.raises(CaseError, match="--plot"):
        run_sweep_command(str(case_file), ["fluid.flow_index=0.4:0.6:2"], plot_key="nothing")
    import builtins
    real_import = builtins.__import__

    def no_dask(name, *args, **kwargs):
        if name.startswith("dask"):
            raise ImportError(name)
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(CaseError, match=r"pip install 'gnflow\[cluster\]'"):
        run_sweep_command(str(case_file), ["fluid.flow_index=0.4:0.6:2"],
                          scheduler="tcp://127.0.0.1:1")


# --------------------------------------------------------------------------- dask

def test_dask_cluster_gives_the_local_table(case):
    distributed = pytest.importorskip("dask.distributed")
    varies = [parse_vary("drive.pressure_gradient=-2kPa/m:-6kPa/m:3", case),
              parse_vary("geometry.inner_radius=10mm:40mm:2", case)]
    local = run_sweep(case, varies, workers=2, show_progress=False)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  protocol="tcp", host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = run_sweep(case, varies, scheduler=cluster.scheduler_address,
                           show_progress=False)
    assert remote.where == cluster.scheduler_address
    assert remote.columns() == local.columns()
    assert remote.records() == local.records()
    assert remote.failed == local.failed == 3


# --------------------------------------------------------------------------- flow curves

def test_flow_curve_is_monotone_and_its_inverse_agrees(case):
    forward = flow_curve(case, gradient_range=("-500 Pa/m", "-20 kPa/m"), count=6, log=True)
    assert forward.failed == 0
    gradient = np.array([row["pressure_gradient"] for row in forward.rows])
    drop = np.array([row["pressure_drop_per_length"] for row in forward.rows])
    rate = np.array([row["flow_rate"] for row in forward.rows])
    assert np.allclose(drop, -gradient)
    assert np.all(np.diff(drop) > 0) and np.all(np.diff(rate) > 0)
    # power law: Q ~ (-G)^(1/n), n = 0.5
    slope = np.diff(np.log(rate)) / np.diff(np.log(drop))
    assert slope == pytest.approx(2.0, rel=1e-6)
    inverse = flow_curve(case, flow_rate_range=(rate[1], rate[-2]), count=4, log=True)
    back = np.array([row["pressure_gradient"] for row in inverse.rows])
    assert back == pytest.approx(gradient[1:-1], rel=1e-7)


def test_flow_curve_command_writes_csv_and_plot(case_file, tmp_path):
    out = tmp_path / "curve"
    assert run_flow_curve_command(str(case_file), "0.1 L/s", "2 L/s", 4, by="flow_rate",
                                  out_dir=str(out)) == 0
    rows = _read_csv(out / "flow_curve.csv")
    assert rows[0] == ["pressure_gradient [Pa/m]", "pressure_drop_per_length [Pa/m]",
                       "flow_rate [m^3/s]", "mean_velocity [m/s]",
                       "wall_shear_stress_mean [Pa]", "reynolds_number [-]", "converged",
                       "error", "warnings"]
    assert [float(r[2]) for r in rows[1:]] == pytest.approx([1e-4, 7.333333333e-4,
                                                             1.366666667e-3, 2e-3], rel=1e-8)
    assert all(float(r[1]) > 0 for r in rows[1:])
    assert (out / "flow_curve.png").stat().st_size > 0


def test_flow_curve_needs_an_axial_passage_and_one_range(case):
    rotary = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 1.0},
                             "geometry": {"shape": "coaxial-cylinders", "inner_radius": 0.04,
                                          "outer_radius": 0.05},
                             "drive": {"inner_angular_speed": "60 rpm"}})
    with pytest.raises(CaseError, match="axial"):
        flow_curve(rotary, gradient_range=(-1, -2))
    with pytest.raises(CaseError, match="exactly one"):
        flow_curve(case)
