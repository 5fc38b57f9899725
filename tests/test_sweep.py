"""Design studies: --vary parsing, sweep rows against single runs, failing cases,
the dask path against the local one, and system curves."""

import csv
import io
import json

import numpy as np
import pytest

import gnflow
from gnflow import Case, CaseError, solve
from gnflow.cli import main
from gnflow.sweep import (column_unit, flatten_summary, is_legacy_vary, parse_vary, progress_bar,
                          run_sweep, run_sweep_command, run_system_curve_command, system_curve)

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
    spec = parse_vary("drive.pressure_gradient = -1 kPa/m .. -10 kPa/m", case, points=10)
    assert spec.key == "drive.pressure_gradient" and spec.unit == "Pa/m"
    assert spec.values[0] == -1000.0 and spec.values[-1] == -10000.0 and len(spec.values) == 10
    assert np.allclose(np.diff(spec.values), -1000.0)
    assert parse_vary("geometry.inner_radius=5mm..2cm", case, points=4).values == \
        pytest.approx((0.005, 0.010, 0.015, 0.020))
    assert parse_vary("fluid.consistency=0.5..2 Pa*s^0.5", case, points=2).values == (0.5, 2.0)
    assert len(parse_vary("fluid.flow_index=0.2..0.8", case).values) == 5   # the default


def test_old_colon_form_is_still_read(case):
    old = parse_vary("drive.pressure_gradient=-1kPa/m:-10kPa/m:10", case)
    new = parse_vary("drive.pressure_gradient=-1kPa/m..-10kPa/m", case, points=10)
    assert old == new
    assert is_legacy_vary("fluid.flow_index=0.3:0.9:3")
    assert not is_legacy_vary("fluid.flow_index=0.3..0.9")


def test_vary_log_spacing(case):
    spec = parse_vary("drive.flow_rate=0.1 L/s..10 L/s", case, log=True, points=3)
    assert spec.values == pytest.approx((1e-4, 1e-3, 1e-2), rel=1e-12)
    negative = parse_vary("drive.pressure_gradient=-10..-1000", case, log=True, points=3)
    assert negative.values == pytest.approx((-10.0, -100.0, -1000.0))
    with pytest.raises(CaseError, match="same sign"):
        parse_vary("drive.pressure_gradient=-10..10", case, log=True, points=3)


def test_vary_whole_numbers_and_plain(case):
    assert parse_vary("mesh.cells=10..40", case, points=4).values == (10, 20, 30, 40)
    assert parse_vary("geometry.eccentricity=0..0.5", case, points=3).values == (0.0, 0.25, 0.5)


@pytest.mark.parametrize("spec, points, message", [
    ("drive.pressure_gradient", None, "KEY=FROM..TO"),
    ("drive.pressure_gradient=-1...-2", None, "two dots"),
    ("drive.pressure_gradient=-1..-2", 0, "--points"),
    ("drive.pressure_gradient=-1:-2:zero", None, "COUNT"),
    ("drive.pressure_gradient=-1 kPa..-2 kPa", 3, "dimension"),
    ("fluid.flow_indx=0.3..0.9", 3, 'did you mean "fluid.flow_index"'),
    ("fluid.viscosity=1..2", 3, "can vary"),
])
def test_vary_bad_specs_name_the_problem(case, spec, points, message):
    with pytest.raises(CaseError, match=message):
        parse_vary(spec, case, points=points)


# --------------------------------------------------------------------------- rows

def test_sweep_rows_equal_single_runs(case):
    varies = [parse_vary("drive.pressure_gradient=-2kPa/m..-6kPa/m", case, points=3),
              parse_vary("fluid.flow_index=0.4..0.8", case, points=2)]
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
    spec = parse_vary("geometry.inner_radius=8mm..12mm", case, points=2)
    table = run_sweep(case, [spec], workers=1, show_progress=False)
    for row in table.rows:
        summary = solve(case.with_value("geometry.inner_radius", row["geometry.inner_radius"])
                        ).summary()
        assert row["flow_rate"] == summary["flow_rate"]
        assert row["pressure_gradient"] == summary["pressure_gradient"]


@pytest.mark.parametrize("workers", [1, 2])
def test_impossible_case_is_marked_and_the_sweep_finishes(case, workers):
    # the last inner radius is past the outer radius (30 mm): no such annulus
    spec = parse_vary("geometry.inner_radius=10mm..40mm", case, points=4)
    table = run_sweep(case, [spec], workers=workers, show_progress=False)
    converged = [row["converged"] for row in table.rows]
    assert converged == [True, True, False, False]
    for row in table.rows[2:]:
        assert "inner_radius" in row["error"] and row["flow_rate"] is None


def test_flow_index_zero_is_a_failed_row(case):
    table = run_sweep(case, [parse_vary("fluid.flow_index=0..1", case, points=3)], workers=1,
                      show_progress=False)
    assert [row["converged"] for row in table.rows] == [False, True, True]
    assert "flow_index" in table.rows[0]["error"]


def test_unconverged_case_is_marked(case):
    spec = parse_vary("solver.max_iterations=1..40", case, points=2)
    table = run_sweep(case, [spec], workers=1, show_progress=False)
    assert [row["converged"] for row in table.rows] == [False, True]
    assert "not converged" in table.rows[0]["error"]


def test_progress_off_a_terminal_is_plain_lines():
    stream = io.StringIO()
    with progress_bar(4, "sweep: 4 cases over fluid.flow_index", stream=stream) as bar:
        bar.update(2)
        bar.set_postfix_str("1 failed", refresh=False)
        bar.update(2)
    lines = stream.getvalue().splitlines()
    assert "\r" not in stream.getvalue()
    assert lines[0].startswith("sweep: 4 cases over fluid.flow_index: 0/4 cases")
    assert "2/4 cases" in lines[1] and "4/4 cases" in lines[-1] and "1 failed" in lines[-1]
    assert len(lines) == len(set(lines)) == 3


def test_every_summary_number_is_a_column(case):
    table = run_sweep(case, [parse_vary("fluid.flow_index=0.4..0.8", case, points=2)],
                      workers=1, show_progress=False)
    # the sweep holds K at its SI value while n varies
    summary = gnflow.solve(case.with_value("fluid.consistency", 0.8).with_value(
        "fluid.flow_index", 0.8)).summary()
    flat = flatten_summary(summary)
    for name in ("flow_rate", "pressure_drop_per_length", "mean_velocity",
                 "wall_shear_stress_mean", "wall_shear_stress_max", "wall_shear_stress_inner",
                 "wall_shear_stress_outer", "wall_shear_rate_mean", "reynolds_number",
                 "fanning_friction_factor", "beyond_laminar_limit"):
        assert name in table.outputs
        assert table.rows[1][name] == pytest.approx(flat[name], rel=1e-12)
    assert table.rows[1]["wall_shear_rate_outer"] == pytest.approx(
        summary["wall_shear_rate"]["per_wall"]["outer"], rel=1e-12)
    # the summary's numbers without a unit (the mesh size and the run's other
    # bookkeeping) are not design outputs: flatten_summary gives them no column
    unitless = {key for key, value in summary.items() if isinstance(value, (int, float))
                and not isinstance(value, bool) and column_unit(key) is None}
    assert "dofs" in unitless and not unitless & set(table.outputs)
    assert table.unit("wall_shear_stress_inner") == "Pa"


def test_yield_stress_sweep_has_a_plug_fraction_column():
    bingham = Case.from_dict({"fluid": {"model": "bingham", "yield_stress": 5.0,
                                        "plastic_viscosity": 0.05},
                              "geometry": {"shape": "pipe", "radius": "20 mm"},
                              "drive": {"pressure_gradient": "-2 kPa/m"}})
    table = run_sweep(bingham, [parse_vary("drive.pressure_gradient=-1kPa/m..-4kPa/m", bingham,
                                           points=2)], workers=1, show_progress=False)
    # Buckingham-Reiner: the plug radius is 2 tau_y / |G|, its area fraction the square of
    # that over R (Buckingham 1921): 0.25 at 1 kPa/m and 1/64 at 4 kPa/m
    assert [row["unyielded_fraction"] for row in table.rows] == pytest.approx(
        [0.25, 1 / 64], abs=0.01)


# --------------------------------------------------------------------------- command

def test_sweep_command_writes_csv_with_units_and_plot(case_file, tmp_path, capsys):
    out = tmp_path / "study"
    code = run_sweep_command(str(case_file), ["drive.pressure_gradient=-1kPa/m..-4kPa/m",
                                              "geometry.inner_radius=10mm..35mm"],
                             workers=2, out_dir=str(out), points=[4, 2],
                             plot_key=["flow_rate", "wall_shear_rate_inner"])
    assert code == 3  # the 35 mm inner radius cannot be built
    rows = _read_csv(out / "sweep.csv")
    assert rows[0][:2] == ["drive.pressure_gradient [Pa/m]", "geometry.inner_radius [m]"]
    for column in ("flow_rate [m^3/s]", "pressure_gradient [Pa/m]", "max_velocity [m/s]",
                   "wall_shear_stress_mean [Pa]", "wall_shear_rate_inner [1/s]",
                   "reynolds_number [-]"):
        assert column in rows[0]
    assert rows[0][-3:] == ["converged", "error", "warnings"]
    assert len(rows) == 1 + 8
    converged = rows[0].index("converged")
    assert [r[converged] for r in rows[1:]] == ["true", "false"] * 4
    assert float(rows[1][0]) == -1000.0 and float(rows[1][1]) == 0.01
    assert (out / "sweep.png").stat().st_size > 0
    assert (out / "sweep_wall_shear_rate_inner.png").stat().st_size > 0
    meta = json.loads((out / "sweep.json").read_text())
    assert meta["cases"] == 8 and meta["failed"] == 4 and meta["cautions"]
    captured = capsys.readouterr()
    assert "8 cases" in captured.out and "4 failed" in captured.out
    assert captured.out.rstrip().splitlines()[-1].startswith("  caution: ")
    assert "8/8 cases" in captured.err and "sweep: 8 cases over" in captured.err
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]


def test_sweep_command_line_old_form_gives_a_deprecation_note(case_file, tmp_path, capsys):
    out = tmp_path / "old"
    assert main(["sweep", str(case_file), "--vary", "fluid.flow_index=0.4:0.6:2",
                 "--workers", "1", "--out", str(out), "--quiet"]) == 0
    captured = capsys.readouterr()
    assert "deprecated" in captured.err and "KEY=START..STOP --points COUNT" in captured.err
    assert captured.out == ""                                  # --quiet
    assert len(_read_csv(out / "sweep.csv")) == 3


def test_sweep_command_bad_plot_key_and_missing_dask(case_file, monkeypatch):
    with pytest.raises(CaseError, match="--plot"):
        run_sweep_command(str(case_file), ["fluid.flow_index=0.4..0.6"], plot_key="nothing")
    import builtins
    real_import = builtins.__import__

    def no_dask(name, *args, **kwargs):
        if name.startswith("dask"):
            raise ImportError(name)
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(CaseError, match=r"pip install 'gnflow\[cluster\]'"):
        run_sweep_command(str(case_file), ["fluid.flow_index=0.4..0.6"],
                          scheduler="tcp://127.0.0.1:1")


# --------------------------------------------------------------------------- dask

def test_dask_cluster_gives_the_local_table(case):
    distributed = pytest.importorskip("dask.distributed")
    varies = [parse_vary("drive.pressure_gradient=-2kPa/m..-6kPa/m", case, points=3),
              parse_vary("geometry.inner_radius=10mm..40mm", case, points=2)]
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


# --------------------------------------------------------------------------- system curves

def test_system_curve_is_monotone_and_its_inverse_agrees(case):
    forward = system_curve(case, gradient_range=("-500 Pa/m", "-20 kPa/m"), count=6, log=True)
    assert forward.failed == 0
    gradient = np.array([row["pressure_gradient"] for row in forward.rows])
    drop = np.array([row["pressure_drop_per_length"] for row in forward.rows])
    rate = np.array([row["flow_rate"] for row in forward.rows])
    assert np.allclose(drop, -gradient)
    assert np.all(np.diff(drop) > 0) and np.all(np.diff(rate) > 0)
    # power law: Q ~ (-G)^(1/n), n = 0.5
    slope = np.diff(np.log(rate)) / np.diff(np.log(drop))
    assert slope == pytest.approx(2.0, rel=1e-6)
    inverse = system_curve(case, flow_rate_range=(rate[1], rate[-2]), count=4, log=True)
    back = np.array([row["pressure_gradient"] for row in inverse.rows])
    assert back == pytest.approx(gradient[1:-1], rel=1e-7)


def test_system_curve_command_writes_csv_and_plot(case_file, tmp_path, capsys):
    out = tmp_path / "curve"
    assert run_system_curve_command(str(case_file), "0.1 L/s", "2 L/s", 4, by="flow_rate",
                                    out_dir=str(out)) == 0
    rows = _read_csv(out / "system_curve.csv")
    assert rows[0] == ["pressure_gradient [Pa/m]", "pressure_drop_per_length [Pa/m]",
                       "flow_rate [m^3/s]", "flow_direction", "mean_velocity [m/s]",
                       "wall_shear_stress_mean [Pa]", "reynolds_number [-]",
                       "laminar_limit_reynolds_number [-]", "beyond_laminar_limit",
                       "converged", "error", "warnings"]
    assert [float(r[2]) for r in rows[1:]] == pytest.approx([1e-4, 7.333333333e-4,
                                                             1.366666667e-3, 2e-3], rel=1e-8)
    assert all(float(r[1]) > 0 and r[3] == "+z" for r in rows[1:])
    assert [r[8] for r in rows[1:]] == ["false"] * 4
    assert (out / "system_curve.png").stat().st_size > 0
    assert json.loads((out / "system_curve.json").read_text())["cautions"]
    printed = capsys.readouterr()
    assert printed.out.rstrip().splitlines()[-1].startswith("  caution: ")
    assert "system curve: 4 cases over drive.flow_rate" in printed.err


def test_system_curve_marks_points_past_the_laminar_limit(case_file, tmp_path, capsys):
    """Water-like fluid in the annulus: at 1 m/s mean speed and D_h = 40 mm, Re = 40 000,
    far past 2100 (common practice for pipes); at 1 mm/s it is 40, laminar."""
    path = tmp_path / "water.toml"
    path.write_text(CASE_TEXT.replace('model = "power-law"\nconsistency = "0.8 Pa*s^0.5"\n'
                                      'flow_index = 0.5', 'model = "newtonian"\n'
                                      'viscosity = "1 mPa*s"'))
    out = tmp_path / "water-curve"
    area = np.pi * (0.03 ** 2 - 0.01 ** 2)
    assert main(["system-curve", str(path), "--by", "flow_rate", "--from",
                 f"{-0.001 * area}", "--to", f"{-1.0 * area}", "--points", "2",
                 "--out", str(out)]) == 0
    rows = _read_csv(out / "system_curve.csv")
    assert [r[8] for r in rows[1:]] == ["false", "true"]
    assert [r[3] for r in rows[1:]] == ["-z", "-z"]
    printed = capsys.readouterr()
    assert "past the laminar limit" in printed.out and "toward -z" in printed.out


def test_flow_curve_is_a_deprecated_alias(case_file, tmp_path, capsys):
    out = tmp_path / "alias"
    assert main(["flow-curve", str(case_file), "--from", "-1 kPa/m", "--to", "-2 kPa/m",
                 "--points", "2", "--out", str(out), "--quiet"]) == 0
    assert "deprecated" in capsys.readouterr().err
    assert len(_read_csv(out / "system_curve.csv")) == 3


def test_system_curve_needs_an_axial_passage_and_one_range(case):
    rotary = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 1.0},
                             "geometry": {"shape": "coaxial-cylinders", "inner_radius": 0.04,
                                          "outer_radius": 0.05},
                             "drive": {"inner_angular_speed": "60 rpm"}})
    with pytest.raises(CaseError, match="axial"):
        system_curve(rotary, gradient_range=(-1, -2))
    with pytest.raises(CaseError, match="exactly one"):
        system_curve(case)
