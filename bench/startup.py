"""Start-up time of the command line: ``gnflow --help``, each subcommand's ``--help``, and
``gnflow check`` on every bundled example.

Each command runs in a fresh interpreter several times; the table gives the median and
the fastest wall-clock time, the median CPU time of the child process (user + system:
less sensitive than wall time to other work on the machine), beside a bare
``python -c pass`` for the interpreter's own share. The aim is 0.4 s wall time; a ``*``
marks a command whose fastest run missed it. The load average is printed before and
after: on a busy machine every figure grows, the interpreter's own included. A benchmark,
not a test: the figures depend on the machine and its load.

    python bench/startup.py [--runs 5] [--only check]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
AIM = 0.4   # seconds
GNFLOW = [sys.executable, "-m", "gnflow"]
SUBCOMMANDS = ("run", "check", "section", "demo", "verify", "sweep", "system-curve", "fit")


def commands() -> dict[str, list[str]]:
    table = {"python -c pass": [sys.executable, "-c", "pass"],
             "gnflow --help": GNFLOW + ["--help"]}
    for name in SUBCOMMANDS:
        table[f"gnflow {name} --help"] = GNFLOW + [name, "--help"]
    for path in sorted((ROOT / "gnflow" / "examples").glob("*.toml")):
        table[f"gnflow check {path.stem}"] = GNFLOW + ["check", str(path)]
    return table


def timings(command: list[str], runs: int) -> tuple[list[float], list[float]]:
    """Wall-clock and CPU (user + system) seconds of each run."""
    walls, cpus = [], []
    for _ in range(runs):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        started = time.perf_counter()
        subprocess.run(command, check=True, capture_output=True, cwd=ROOT)
        walls.append(time.perf_counter() - started)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpus.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    return walls, cpus


def load() -> str:
    return ", ".join(f"{x:.2f}" for x in os.getloadavg())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="runs per command (default 5)")
    parser.add_argument("--only", metavar="TEXT",
                        help="only the commands whose name contains TEXT (python -c pass always)")
    args = parser.parse_args()
    table = {name: command for name, command in commands().items()
             if args.only is None or args.only in name or name == "python -c pass"}
    print(f"load average (1, 5, 15 min) before: {load()}; {os.cpu_count()} cores; "
          f"{args.runs} runs per command")
    width = max(map(len, table))
    print(f"{'command':<{width}}  {'median [s]':>10} {'fastest [s]':>11} {'CPU [s]':>8}")
    missed = []
    for name, command in table.items():
        walls, cpus = timings(command, args.runs)
        flag = "*" if min(walls) >= AIM and name != "python -c pass" else " "
        if flag == "*":
            missed.append(name)
        print(f"{name:<{width}}  {statistics.median(walls):>10.3f} {min(walls):>11.3f} "
              f"{statistics.median(cpus):>8.3f} {flag}")
    print(f"load average after: {load()}")
    print(f"{len(table) - 1 - len(missed)} of {len(table) - 1} commands within {AIM} s "
          f"(fastest run)" + (f"; missed: {', '.join(missed)}" if missed else ""))


if __name__ == "__main__":
    main()
