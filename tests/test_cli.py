"""The command line end to end: every example case, demo, check, bad input, exit codes."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from gnflow.cli import main
from gnflow.post import CAUTION

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((ROOT / "gnflow" / "examples").glob("*.toml"))


def test_there_are_at_least_four_examples():
    assert len(EXAMPLES) >= 4
    assert (ROOT / "cases").resolve() == (ROOT / "gnflow" / "examples").resolve()


@pytest.mark.parametrize("case", EXAMPLES, ids=lambda p: p.stem)
def test_run_every_example(case, tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(case), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "assumes" in printed
    # the printout ends with the cautions, the general one last, and stores them
    assert printed.rstrip().splitlines()[-1] == f"  caution: {CAUTION}"
    summary = json.loads((out / "summary.json").read_text())
    assert summary["cautions"][-1] == CAUTION
    assert summary["converged"] is True
    assert summary["residual"] <= 1e-10
    section = summary["section_dimension"] == 2
    per_shape = ("wall_stress.csv", "wall_stress.png", "fields.png") if section else (
        "profile.csv", "profile.png")
    for name in ("summary.json", "convergence.png", "fields.vtu", "fields.xdmf") + per_shape:
        assert (out / name).stat().st_size > 0, name
    table = "wall_stress.csv" if section else "profile.csv"
    header = (out / table).read_text().splitlines()[0]
    assert "[m]" in header and "shear_rate [1/s]" in header
    import meshio
    mesh = meshio.read(out / "fields.vtu")
    assert {"velocity", "shear_rate", "viscosity", "shear_stress"} <= set(mesh.point_data)


def test_demo_runs_bundled_example_as_installed(tmp_path):
    out = tmp_path / "demo"
    result = subprocess.run([sys.executable, "-m", "gnflow", "demo", "--out", str(out)],
                            capture_output=True, text=True, cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert (out / "summary.json").exists()


def test_check_prints_si(capsys):
    case = ROOT / "cases" / "polymer_transfer_pipe.toml"
    assert main(["check", str(case)]) == 0
    out = capsys.readouterr().out
    assert "geometry.radius = 0.0254 m" in out       # 1 in
    assert "drive.flow_rate = 0.0015772549 m^3/s" in out  # 25 gal/min


def test_rerun_replaces_results_cleanly(tmp_path):
    case = ROOT / "cases" / "carreau_rotary_gap.toml"
    out = tmp_path / "res"
    out.mkdir()
    (out / "stale.txt").write_text("old")
    assert main(["run", str(case), "--out", str(out), "--quiet"]) == 0
    assert not (out / "stale.txt").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_not_converged_exits_3(tmp_path):
    text = (ROOT / "cases" / "polymer_transfer_pipe.toml").read_text()
    case = tmp_path / "short.toml"
    case.write_text(text + "\n[solver]\nmax_iterations = 1\n")
    result = subprocess.run([sys.executable, "-m", "gnflow", "run", str(case), "--out",
                             str(tmp_path / "res")], capture_output=True, text=True)
    assert result.returncode == 3
    assert "not converged" in result.stderr and "residual" in result.stderr
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())
    assert summary["converged"] is False


BAD = {
    "unknown key": ('[fluid]\nmodel = "newtonian"\nviscosty = 1\n[geometry]\nshape = "pipe"\n'
                    'radius = 1\n[drive]\npressure_gradient = -1\n', 'did you mean "viscosity"'),
    "wrong dimension": ('[fluid]\nmodel = "newtonian"\nviscosity = "3 m"\n[geometry]\n'
                        'shape = "pipe"\nradius = 1\n[drive]\npressure_gradient = -1\n',
                        "fluid.viscosity"),
    "syntax": ('[fluid\nmodel = "newtonian"\n', "TOML syntax error"),
    "slit flow rate in m^3/s": ('[fluid]\nmodel = "newtonian"\nviscosity = 1\n[geometry]\n'
                                'shape = "slit"\ngap = "1 mm"\n[drive]\nflow_rate = "1 L/s"\n',
                                "per unit width"),
    "both drives": ('[fluid]\nmodel = "newtonian"\nviscosity = 1\n[geometry]\nshape = "pipe"\n'
                    'radius = 1\n[drive]\npressure_gradient = -1\nflow_rate = 1\n', "exactly one"),
    "radii": ('[fluid]\nmodel = "newtonian"\nviscosity = 1\n[geometry]\nshape = "annulus"\n'
              'inner_radius = "5 cm"\nouter_radius = "4 cm"\n[drive]\npressure_gradient = -1\n',
              "geometry.inner_radius"),
    "empty": ("", "empty"),
}


@pytest.mark.parametrize("name", BAD)
def test_bad_case_exit_2_one_message_no_output(name, tmp_path):
    text, fragment = BAD[name]
    case = tmp_path / "bad.toml"
    case.write_text(text)
    out = tmp_path / "res"
    result = subprocess.run([sys.executable, "-m", "gnflow", "run", str(case), "--out", str(out)],
                            capture_output=True, text=True)
    assert result.returncode == 2
    assert fragment in result.stderr
    assert "Traceback" not in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1
    assert not out.exists()


def test_missing_case_file(tmp_path, capsys):
    assert main(["run", str(tmp_path / "nope.toml")]) == 2
    assert "no such case file" in capsys.readouterr().err


# --------------------------------------------------------------------------- the parser

def _subparsers():
    import argparse

    from gnflow.cli import _build_parser
    parser = _build_parser()
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return parser, action.choices


def test_every_positional_argument_has_help():
    _, commands = _subparsers()
    for name, sub in commands.items():
        for action in sub._actions:
            if not action.option_strings:
                assert action.help, f"{name} {action.dest}"


def test_negative_values_with_units_are_values_after_an_option():
    parser, commands = _subparsers()
    name = next(n for n, sub in commands.items() if "--from" in sub._option_string_actions)
    for value in ("-1kPa/m", "-1 kPa/m", "-.5", "-2e3"):
        args = parser.parse_args([name, "case.toml", "--from", value, "--to", "-20 kPa/m"])
        assert args.start == value


def test_a_misspelt_option_gets_a_suggestion(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["run", "case.toml", "--otu", "res"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "did you mean --out?" in err and len(err.strip().splitlines()) == 1


def test_demo_takes_a_name_without_toml_and_quiet(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--example", "polymer_transfer_pipe", "--out", str(out),
                 "--quiet"]) == 0
    assert capsys.readouterr().out == ""
    assert json.loads((out / "summary.json").read_text())["converged"] is True
    assert main(["demo", "--example", "polymer_transfer_pip"]) == 2
    assert "did you mean polymer_transfer_pipe" in capsys.readouterr().err


def test_check_is_quiet_on_request(capsys):
    assert main(["check", str(ROOT / "cases" / "paste_slit_die.toml"), "--quiet"]) == 0
    assert capsys.readouterr().out == ""

