"""The printed summary and its stated assumptions follow the physics the case solves: a
heated case is not called isothermal and prints its temperature rise; a slipping case names
its slipping walls and prints the slip speed."""

import gnflow
from gnflow.cli import format_summary

PIPE = {"shape": "pipe", "radius": "5 mm"}
POWER_LAW = {"model": "power-law", "consistency": "50 Pa*s^0.5", "flow_index": 0.5}


def _results(**extra):
    case = gnflow.Case.from_dict({"fluid": POWER_LAW, "geometry": PIPE,
                                  "drive": {"pressure_gradient": "-200 kPa/m"},
                                  "mesh": {"cells": 40}, **extra})
    return gnflow.solve(case).summary()


def test_isothermal_no_slip_case_says_so():
    summary = _results()
    assert "isothermal" in summary["assumptions"] and "non-isothermal" not in \
        summary["assumptions"]
    assert "no slip at the walls" in summary["assumptions"]
    text = format_summary(summary)
    assert "temperature rise" not in text and "slip speed" not in text


def test_heated_case_is_not_called_isothermal_and_prints_its_rise():
    summary = _results(heat={"conductivity": "0.15 W/m/K", "wall_temperature": "450 K",
                             "temperature_coefficient": "0.02 1/K",
                             "reference_temperature": "450 K"})
    assert summary["converged"]
    assert "non-isothermal" in summary["assumptions"]
    assert ", isothermal" not in summary["assumptions"]
    rise = summary["heat"]["max_temperature_rise"]
    assert rise > 0
    text = format_summary(summary)
    line = next(row for row in text.splitlines() if "temperature rise, max" in row)
    assert f"{rise:.5g}" in line and "K" in line
    assert "Nahme-Griffith number" in text


def test_slipping_case_names_its_walls_and_prints_the_slip_speed():
    drive = {"pressure_gradient": "-200 kPa/m",
             "slip": {"wall": {"coefficient": "1e-6 m/s/Pa", "exponent": 1.0}}}
    case = gnflow.Case.from_dict({"fluid": POWER_LAW, "geometry": PIPE, "drive": drive,
                                  "mesh": {"cells": 40}})
    summary = gnflow.solve(case).summary()
    assert summary["converged"]
    assert "wall slip by the given laws at: wall" in summary["assumptions"]
    speed = summary["slip"]["wall"]["slip_speed"]
    # linear slip: the slip speed is the coefficient times the wall stress, which the
    # pipe's force balance fixes at |G| R / 2 = 500 Pa whatever the fluid
    assert abs(abs(speed) - 1e-6 * 200e3 * 5e-3 / 2) < 1e-9
    text = format_summary(summary)
    assert "slip speed, wall" in text and "% of the mean velocity" in text


def test_option_hints_come_from_the_subcommand_given(capsys):
    """`run --to` must not be told about `system-curve --to`: the hint is one of run's."""
    import pytest
    from gnflow.cli import main
    with pytest.raises(SystemExit) as stop:
        main(["run", "case.toml", "--to", "somewhere"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "did you mean --out?" in err and "--to?" not in err


def test_helical_summary_prints_the_torque_on_each_cylinder():
    from pathlib import Path
    example = Path(gnflow.__file__).parent / "examples" / "helical_mud_rotating_string.toml"
    summary = gnflow.solve(gnflow.load_case(example)).summary()
    text = format_summary(summary)
    for name, value in summary["wall_torque_per_length"].items():
        line = next(row for row in text.splitlines() if f"torque per length, {name}" in row)
        assert f"{value:.5g}" in line and "N*m/m" in line
    assert "rotation power per length" in text
