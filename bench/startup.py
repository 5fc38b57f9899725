"""Start-up time of the command line: ``gnflow --help`` and ``gnflow check CASE``.

Each command runs in a fresh interpreter several times; the table gives the median and
the fastest wall-clock time, beside a bare ``python -c pass`` for the interpreter's own
share. A benchmark, not a test: the figures depend on the machine and its load.

    python bench/startup.py [--runs 7]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
COMMANDS = {
    "python -c pass": [sys.executable, "-c", "pass"],
    "gnflow --help": [sys.executable, "-m", "gnflow", "--help"],
    "gnflow check (pipe case)": [sys.executable, "-m", "gnflow", "check",
                                 str(ROOT / "cases" / "polymer_transfer_pipe.toml")],
    "gnflow check (rectangle case)": [sys.executable, "-m", "gnflow", "check",
                                      str(ROOT / "cases" / "screw_channel_lid.toml")],
}


def wall_times(command: list[str], runs: int) -> list[float]:
    times = []
    for _ in range(runs):
        started = time.perf_counter()
        subprocess.run(command, check=True, capture_output=True, cwd=ROOT)
        times.append(time.perf_counter() - started)
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7, help="runs per command (default 7)")
    runs = parser.parse_args().runs
    print(f"{'command':<32} {'median [s]':>10} {'fastest [s]':>11}")
    for name, command in COMMANDS.items():
        times = wall_times(command, runs)
        print(f"{name:<32} {statistics.median(times):>10.3f} {min(times):>11.3f}")


if __name__ == "__main__":
    main()
