"""Input safety and interruption: case text never runs code nor names output files;
Ctrl-C ends with one line and exit code 130, leaving the previous results intact."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from gnflow.cli import main
from gnflow.errors import CaseError
from gnflow.units import quantity

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("text", [
    "1 __import__('os').system('touch /tmp/gnflow-pwned')",
    "1 exec('import os')",
    "1 m; import os",
    "9**9**9 m",
])
def test_unit_strings_are_never_evaluated(text):
    marker = Path("/tmp/gnflow-pwned")
    marker.unlink(missing_ok=True)
    with pytest.raises(CaseError):
        quantity(text, "length", "geometry.gap")
    assert not marker.exists()


def test_case_text_does_not_name_output_files(tmp_path, capsys):
    case = tmp_path / "case.toml"
    case.write_text('title = "../../escape/../summary"\n[fluid]\nmodel = "newtonian"\n'
                    'viscosity = 1.0\n[geometry]\nshape = "slit"\ngap = 0.01\n'
                    '[drive]\npressure_gradient = -10.0\n[output]\nplots = false\n')
    out = tmp_path / "results" / "here"
    assert main(["run", str(case), "--out", str(out)]) == 0
    assert sorted(p.name for p in out.iterdir()) == ["fields.vtu", "fields.xdmf",
                                                     "profile.csv", "summary.json"]
    # nothing was written anywhere else under the temporary folder
    everything = {p.relative_to(tmp_path) for p in tmp_path.rglob("*") if p.is_file()}
    assert all(str(p).startswith("results") or p.name == "case.toml" for p in everything)


def test_mesh_path_resolves_against_the_case_folder(tmp_path, monkeypatch):
    folder = tmp_path / "project"
    folder.mkdir()
    (folder / "case.toml").write_text('[fluid]\nmodel = "newtonian"\nviscosity = 1.0\n'
                                      '[geometry]\nshape = "mesh"\nfile = "section.vtu"\n'
                                      '[drive]\npressure_gradient = -1.0\n')
    monkeypatch.chdir(tmp_path)
    with pytest.raises(CaseError, match=str(folder / "section.vtu")):
        from gnflow.case import load_case
        load_case(folder / "case.toml")


def _wait_until_busy(pid: int, cpu_seconds: float = 3.0, limit: float = 60.0) -> None:
    """Wait until the process has used ``cpu_seconds`` of CPU (read from /proc), so that on
    a loaded machine the interrupt still lands in the solve, not in the start-up; where
    /proc is not there, a fixed 4 s."""
    stat = f"/proc/{pid}/stat"
    if not os.path.exists(stat):
        time.sleep(4.0)
        return
    tick = os.sysconf("SC_CLK_TCK")
    started = time.monotonic()
    while time.monotonic() - started < limit:
        with open(stat) as handle:
            fields = handle.read().rsplit(")", 1)[1].split()
        if (int(fields[11]) + int(fields[12])) / tick >= cpu_seconds:
            return
        time.sleep(0.1)


def test_ctrl_c_ends_with_130_and_keeps_previous_results(tmp_path):
    case = tmp_path / "big.toml"
    case.write_text('[fluid]\nmodel = "herschel-bulkley"\nyield_stress = 2.0\n'
                    'consistency = 1.0\nflow_index = 0.5\n[geometry]\nshape = "rectangle"\n'
                    'width = 0.1\nheight = 0.1\n[drive]\npressure_gradient = -1000.0\n'
                    '[mesh]\ncells = 400\n')
    out = tmp_path / "res"
    out.mkdir()
    (out / "summary.json").write_text('{"previous": true}')
    process = subprocess.Popen([sys.executable, "-m", "gnflow", "run", str(case), "--out",
                                str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True)
    _wait_until_busy(process.pid)   # well into the solve of this large case
    process.send_signal(signal.SIGINT)
    _, err = process.communicate(timeout=120)
    assert process.returncode == 130
    assert err.strip().splitlines() == [err.strip().splitlines()[-1]]
    assert "interrupted" in err and "Traceback" not in err
    assert (out / "summary.json").read_text() == '{"previous": true}'
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]
