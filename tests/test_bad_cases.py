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
