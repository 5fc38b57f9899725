"""Every file in tests/bad_cases/ is refused with exit code 2 and one clear line.

Each corpus file starts with ``# expect: <fragment>``; the single line printed on
stderr must contain that fragment (usually the dotted key and what was expected).
"""

import subprocess
import sys
from pathlib import Path

import pytest

from gnflow.cli import main

ROOT = Path(__file__).resolve().parents[1]
CORPUS = sorted((ROOT / "tests" / "bad_cases").glob("*.toml"))


def expected_fragment(path: Path) -> str:
    first = path.read_bytes().split(b"\n", 1)[0].decode("ascii")
    assert first.startswith("# expect:"), f"{path.name}: first line must be '# expect: ...'"
    fragment = first.split(":", 1)[1].strip()
    assert fragment, f"{path.name}: empty expected fragment"
    return fragment


def test_corpus_is_large_enough():
    assert len(CORPUS) >= 60


@pytest.mark.parametrize("path", CORPUS, ids=lambda p: p.stem)
def test_bad_case_is_refused(path, tmp_path, capsys):
    out = tmp_path / "res"
    code = main(["run", str(path), "--out", str(out)])
    captured = capsys.readouterr()
    lines = captured.err.splitlines()
    assert code == 2, captured.err
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("gnflow: error: ")
    assert expected_fragment(path) in lines[0]
    assert "Traceback" not in captured.err + captured.out
    assert not out.exists()


@pytest.mark.parametrize("name", ["syntax_missing_quote", "unknown_fluid_key", "not_utf8",
                                  "units_wrong_dimension_viscosity", "empty_file"])
def test_bad_case_through_a_subprocess(name, tmp_path):
    path = ROOT / "tests" / "bad_cases" / f"{name}.toml"
    out = tmp_path / "res"
    proc = subprocess.run([sys.executable, "-m", "gnflow", "run", str(path), "--out", str(out)],
                          capture_output=True, text=True, cwd=ROOT, timeout=120)
    lines = proc.stderr.splitlines()
    assert proc.returncode == 2, proc.stderr
    assert len(lines) == 1, proc.stderr
    assert expected_fragment(path) in lines[0]
    assert "Traceback" not in proc.stderr
    assert not out.exists()


MESH_FILE_CASES = sorted((ROOT / "tests" / "bad_cases").glob("mesh_file_*.toml"))


@pytest.mark.parametrize("path", MESH_FILE_CASES, ids=lambda p: p.stem)
def test_check_refuses_a_bad_mesh_file_as_run_does(path, tmp_path, capsys):
    """``check`` reads the mesh file: the same exit code and the same line as ``run``."""
    assert main(["check", str(path)]) == 2
    checked = capsys.readouterr().err
    assert main(["run", str(path), "--out", str(tmp_path / "res")]) == 2
    assert capsys.readouterr().err == checked
    assert expected_fragment(path) in checked


def test_check_accepts_a_good_mesh_file(tmp_path, capsys):
    case = tmp_path / "case.toml"
    case.write_text('[fluid]\nmodel = "newtonian"\nviscosity = 1.0\n[geometry]\nshape = "mesh"\n'
                    f'file = "{ROOT / "tests" / "bad_cases" / "meshes" / "square.vtu"}"\n'
                    '[drive]\npressure_gradient = -1.0\n')
    assert main(["check", str(case)]) == 0, capsys.readouterr().err


@pytest.mark.parametrize("path", ["/dev/zero", "x" * 5000, "nul\x00name.toml", "/"])
def test_case_paths_that_cannot_be_read(path, capsys):
    """A device that never ends, a name too long, a NUL character, a folder."""
    assert main(["check", path]) == 2
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 1 and len(lines[0]) <= 200 and lines[0].isprintable()


# --------------------------------------------------------------------------- schema additions

from gnflow.case import Case, load_case  # noqa: E402
from gnflow.errors import CaseError  # noqa: E402

PIPE = {"fluid": {"model": "newtonian", "viscosity": "45 cP"},
        "geometry": {"shape": "pipe", "radius": "25 mm"},
        "drive": {"pressure_gradient": "-3 kPa/m"}}
MUD = {"model": "bingham", "yield_stress": "7 Pa", "plastic_viscosity": "28 cP"}


def test_wall_refinement_and_its_former_name():
    new = Case.from_dict({**PIPE, "mesh": {"wall_refinement": 3.0}})
    old = Case.from_dict({**PIPE, "mesh": {"grading": 3.0}})
    assert new.mesh.wall_refinement == old.mesh.wall_refinement == 3.0
    assert new.notices == ()
    assert len(old.notices) == 1 and "deprecated" in old.notices[0]
    assert "mesh.wall_refinement" in old.notices[0]
    assert Case.from_dict(PIPE).mesh.wall_refinement == 1.0


def test_exact_yield_stress_flow_takes_no_parameter():
    case = Case.from_dict({**PIPE, "fluid": {**MUD, "regularisation": {"method": "none"}}})
    assert case.fluid.regularisation == "none"
    assert case.fluid.regularisation_parameter is None
    assert case.fluid.model.yield_stress == 7.0          # the exact method reads these
    assert case.fluid.model.consistency == pytest.approx(0.028)
    assert case.to_si()["fluid"]["regularisation"] == {"method": "none"}
    with pytest.raises(CaseError, match="not to newtonian"):
        Case.from_dict({**PIPE, "fluid": {"model": "newtonian", "viscosity": 1.0,
                                          "regularisation": {"method": "none"}}})


@pytest.mark.parametrize("eccentricity", [0.0, 0.4])
def test_annulus_takes_angular_speeds_beside_its_axial_drive(eccentricity):
    case = Case.from_dict({"fluid": MUD, "geometry": {
        "shape": "annulus", "inner_radius": "40 mm", "outer_radius": "60 mm",
        "eccentricity": eccentricity},
        "drive": {"flow_rate": "1 L/s", "inner_angular_speed": "60 rpm"}})
    assert case.drive.inner_angular_speed == pytest.approx(2 * 3.141592653589793)
    assert case.drive.outer_angular_speed == 0.0
    assert case.drive.flow_rate == pytest.approx(1e-3)
    assert case.is_helical
    assert case.to_si()["drive"]["inner_angular_speed"] == pytest.approx(6.283185307)
    plain = Case.from_dict({"fluid": MUD, "geometry": case.raw["geometry"],
                            "drive": {"flow_rate": "1 L/s"}})
    assert not plain.is_helical and "inner_angular_speed" not in plain.to_si()["drive"]


@pytest.mark.parametrize("section, key, value", [
    ("geometry", "radius", 50),                 # a 50 m pipe radius
    ("fluid", "viscosity", 1e6),                # 1e6 Pa s
    ("drive", "pressure_gradient", -5e9),
])
def test_bare_numbers_of_unusual_size_get_a_notice(section, key, value):
    document = {name: dict(table) for name, table in PIPE.items()}
    document[section][key] = value
    notices = Case.from_dict(document).notices
    assert len(notices) == 1
    assert f"{section}.{key}" in notices[0] and "bare numbers are SI" in notices[0]
    document[section][key] = f"{value} {'m' if key == 'radius' else 'Pa*s' if key == 'viscosity' else 'Pa/m'}"
    assert Case.from_dict(document).notices == ()   # with units, the user said what they meant


def test_bare_slit_gap_of_ten_metres_gets_a_notice():
    case = Case.from_dict({"fluid": PIPE["fluid"], "geometry": {"shape": "slit", "gap": 10},
                           "drive": {"pressure_gradient": -1.0}})
    assert any("geometry.gap" in n and "bare numbers are SI" in n for n in case.notices)


EXAMPLES = sorted((ROOT / "gnflow" / "examples").glob("*.toml"))


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_examples_use_current_names(path):
    assert load_case(path).notices == ()


def test_deep_nesting_through_the_api_is_refused_without_recursion():
    value: list = []
    for _ in range(100_000):
        value = [value]
    with pytest.raises(CaseError, match="nested more than"):
        Case.from_dict({**PIPE, "fluid": {"model": "newtonian", "viscosity": value}})
