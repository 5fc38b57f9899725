"""Fuzz corpus: seeded random mutations of the bundled examples through ``check`` and ``run``.

Each mutated case goes through :func:`gnflow.cli.main`, the function the command line
calls, in this process. Whatever the mutation (huge integers, nan and inf, arrays and
tables nested thousands deep, megabyte strings, control characters, wrong types, odd unit
strings, swapped, renamed and deleted keys, bad paths, truncated TOML, garbage bytes), it
must end with exit code 0 or 2 for ``check`` (0, 2 or 3 for ``run``), and a refusal prints
exactly one printable line of at most 200 characters, with no traceback. A converged
``run`` writes a summary whose every number is finite. A case that takes longer than
:data:`HANG_GUARD` seconds counts as a hang (a guard against never-ending input, not a
timing requirement).

The normal suite runs 2,000 ``check`` cases and 100 ``run`` cases on tiny meshes. A longer
run: ``GNFLOW_FUZZ_CASES=10000 python -m pytest -s tests/test_fuzz.py`` (``run`` cases:
``GNFLOW_FUZZ_RUN_CASES``, default a 25th of that); it prints the counts. With
``GNFLOW_FUZZ_SAVE=DIR`` every failing case is saved under DIR for a bug report.
"""

from __future__ import annotations

import collections
import contextlib
import copy
import functools
import io
import json
import math
import os
import random
import re
import shutil
import signal
import time
import tomllib
from dataclasses import dataclass
from pathlib import Path

import pytest

from gnflow import cli
from gnflow.cli import main

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((ROOT / "gnflow" / "examples").glob("*.toml"))
MESHES = ROOT / "tests" / "bad_cases" / "meshes"
CHECK_CASES = int(os.environ.get("GNFLOW_FUZZ_CASES", "2000"))
RUN_CASES = int(os.environ.get("GNFLOW_FUZZ_RUN_CASES", str(max(100, CHECK_CASES // 25))))
SAVE_FAILURES = os.environ.get("GNFLOW_FUZZ_SAVE")
HANG_GUARD = 20.0  # seconds: only a case that never ends should get near this
MAX_LINE = 200


# --------------------------------------------------------------------------- TOML writing

@dataclass(frozen=True)
class Raw:
    """A value written into the TOML text as it is (deep nesting, 5000-digit integers,
    dates): built as text, so neither the writer nor the test recurses or overflows."""

    text: str


def _toml_string(text: str) -> str:
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        elif 0xD800 <= ord(ch) <= 0xDFFF:
            out.append("\\ufffd")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _toml_value(value) -> str:
    if isinstance(value, Raw):
        return value.text
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_string(k)} = {_toml_value(v)}"
                               for k, v in value.items()) + "}"
    raise TypeError(type(value))


def to_toml(document: dict) -> str:
    """TOML text with the top-level tables as [sections] and deeper tables inline."""
    lines = [f"{_toml_string(k)} = {_toml_value(v)}" for k, v in document.items()
             if not isinstance(v, dict)]
    for name, table in document.items():
        if isinstance(table, dict):
            lines.append(f"[{_toml_string(name)}]")
            lines += [f"{_toml_string(k)} = {_toml_value(v)}" for k, v in table.items()]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- values

KNOWN_KEYS = ["title", "fluid", "geometry", "drive", "mesh", "solver", "output", "model",
              "shape", "viscosity", "consistency", "flow_index", "yield_stress",
              "plastic_viscosity", "zero_shear_viscosity", "infinite_shear_viscosity",
              "time_constant", "rate_exponent", "transition_exponent", "density",
              "regularisation", "method", "exponent", "critical_rate", "radius", "gap",
              "inner_radius", "outer_radius", "eccentricity", "width", "height", "file",
              "length_unit", "pressure_gradient", "flow_rate", "wall_speed",
              "inner_angular_speed", "outer_angular_speed", "inner", "outer", "top", "bottom",
              "wall", "cells", "degree", "wall_refinement", "grading", "tolerance",
              "max_iterations", "linear_solver", "plots", "fields", "temperature",
              "temperature_law", "activation_energy", "reference_temperature",
              "sutherland_constant", "fitted_rate_range", "fitted_temperature_range"]
WORDS = ["newtonian", "power-law", "carreau", "carreau-yasuda", "cross", "bingham",
         "herschel-bulkley", "slit", "pipe", "annulus", "coaxial-cylinders", "rectangle",
         "mesh", "newton", "picard", "papanastasiou", "bi-viscous", "none", "auto", "direct",
         "amg", "arrhenius", "sutherland"]
ODD_UNITS = ["3 m^99999", "3 m**-9999", "2 ((((((m))))))", "1 m/0", "1 degC*degC",
             "5 Pa*s^nan", "4 degF", "1 µm", "1 kPa/m/m/m", "1 1/1/1/1", "1 m^0.333333333",
             "1 lbf*s/ft^2", "1e5 1e5", "1 __class__", "1 m m", "1 %", "1 Pa**Pa", "7 E",
             "1 dimensionless", "1 m^(1/0)", "2 m^-", "1 ^", "1 *", "nan Pa", "inf",
             "-inf m", "1e999 m", "NaN mm", "1e308 km", "1e-320 m", "1e308 MPa/m",
             "0x10 m", "1_000 m", "1,5 mm", "+-3 m", "3 Pa*s^0.42", "25 gal/min",
             "0.4 L/s/m", "300 rpm", "20 degC", "-40 degC", "0 K", "1e-9 Pa", "1e9 Pa*s",
             "1 m" + "*m" * 30, "2 " + "(" * 50 + "m" + ")" * 50, "3" + " " * 500 + "mm",
             "1 " + "k" * 300 + "m", "5 m\u202e", "5 m\u00a0", "5 mm\ufeff"]
CONTROL = ["3 m\x07m", "\x1b[31m red", "line\nbreak", "\x00", "tab\there", "\r\n", "\x7f",
           "bell\x07" * 40, "\u2028sep"]
DATES = ["1979-05-27T07:32:00Z", "1979-05-27", "07:32:00", "1979-05-27T00:32:00.999999-07:00"]
BAD_PATHS = ["", " ", "/", ".", "..", "/dev/zero", "/dev/null", "nowhere.msh", "a" * 5000,
             "a/" * 3000 + "x.msh", "x\x00y.msh", "../../../../../../etc/passwd",
             "/etc/passwd", "meshes", "~/x.vtu", "con.msh", "x.unknown-extension",
             "\u0000", "\n.msh", "mesh.vtu" * 100]


def _deep_array(depth: int) -> Raw:
    return Raw("[" * depth + "1" + "]" * depth)


def _deep_table(depth: int) -> Raw:
    return Raw("{a = " * depth + "1" + "}" * depth)


def hostile_value(rng: random.Random):
    """One hostile or odd value for a key."""
    kind = rng.choice(["huge_int", "float", "unit", "unit", "control", "long", "deep_array",
                       "deep_table", "wrong_type", "word", "date", "small_int", "number_str"])
    if kind == "huge_int":
        digits = rng.choice([19, 20, 300, 309, 400, 4000, 4301, 5000, 20000])
        sign = rng.choice(["", "-", "+"])
        return Raw(sign + "9" * digits) if digits > 300 else int(sign + "9" * digits)
    if kind == "float":
        return rng.choice([1e308, -1e308, 5e-324, 0.0, -0.0, math.nan, math.inf, -math.inf,
                           1e-300, 1.7976931348623157e308, 1e-12, 1e12, -1.0, 0.5])
    if kind == "unit":
        return rng.choice(ODD_UNITS)
    if kind == "control":
        return rng.choice(CONTROL)
    if kind == "long":
        size = rng.choice([201, 1000, 100_000, 1_000_000])
        unit = rng.choice(["x", "3 mm ", "\x07", "é", "9"])
        return (unit * size)[:size]
    if kind == "deep_array":
        return _deep_array(rng.choice([3, 7, 50, 500, 3000]))
    if kind == "deep_table":
        return _deep_table(rng.choice([3, 7, 50, 500, 3000]))
    if kind == "wrong_type":
        return rng.choice([True, False, [], {}, [1, 2], ["3 mm", "4 mm"], {"a": 1},
                           {"method": "none"}, [[1], [2, [3]]], ""])
    if kind == "word":
        return rng.choice(WORDS + KNOWN_KEYS)
    if kind == "date":
        return Raw(rng.choice(DATES))
    if kind == "small_int":
        return rng.choice([0, 1, -1, 2, 3, 4, 100, 4001, 200_001, 2 ** 63 - 1, -2 ** 63])
    return rng.choice(["1", "-1", "0", "1e3", "  2  ", ".5", "5.", "1e", "e5", "--1"])


# --------------------------------------------------------------------------- mutations

def _leaves(document: dict, prefix=()):
    for key, value in document.items():
        yield prefix + (key,)
        if isinstance(value, dict):
            yield from _leaves(value, prefix + (key,))


def _tables(document: dict, prefix=()):
    yield prefix
    for key, value in document.items():
        if isinstance(value, dict):
            yield from _tables(value, prefix + (key,))


def _at(document: dict, path):
    for key in path:
        document = document[key]
    return document


def mutate_document(document: dict, rng: random.Random, action: str | None = None
                    ) -> tuple[dict, str]:
    """One structural mutation of a parsed case; returns the case and what was done."""
    action = action or rng.choice(["replace", "replace", "replace", "delete", "add",
                                   "swap_values", "rename", "change_choice", "bad_path",
                                   "scale"])
    paths = list(_leaves(document))
    if action == "replace" and paths:
        path = rng.choice(paths)
        _at(document, path[:-1])[path[-1]] = hostile_value(rng)
    elif action == "delete" and paths:
        path = rng.choice(paths)
        del _at(document, path[:-1])[path[-1]]
    elif action == "swap_values" and len(paths) > 1:
        a, b = rng.sample(paths, 2)
        if a[:len(b)] != b and b[:len(a)] != a:  # neither inside the other
            table_a, table_b = _at(document, a[:-1]), _at(document, b[:-1])
            table_a[a[-1]], table_b[b[-1]] = table_b[b[-1]], table_a[a[-1]]
    elif action == "rename" and paths:
        path = rng.choice(paths)
        table = _at(document, path[:-1])
        new = rng.choice(KNOWN_KEYS + ["", " ", "Fluid", "flow index", "\x07", "k" * 500])
        table[new] = table.pop(path[-1])
    elif action == "change_choice":
        table = rng.choice([document.get("fluid"), document.get("geometry"),
                            document.get("solver")])
        if isinstance(table, dict):
            key = rng.choice(["model", "shape", "method", "linear_solver"])
            table[key] = rng.choice(WORDS)
    elif action == "bad_path":
        geometry = document.setdefault("geometry", {})
        if isinstance(geometry, dict):
            geometry.clear()
            geometry.update(shape="mesh", file=rng.choice(
                BAD_PATHS + [str(p) for p in sorted(MESHES.iterdir())]))
    elif action == "scale" and paths:
        path = rng.choice(paths)
        table, key = _at(document, path[:-1]), path[-1]
        value = table[key]
        factor = 10.0 ** rng.choice([-12, -6, -3, 3, 6, 12, 300])
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            table[key] = value * factor
        elif isinstance(value, str):
            match = re.match(r"^\s*([-+]?\d+\.?\d*(?:[eE][-+]?\d+)?)(.*)$", value)
            if match:
                table[key] = f"{float(match.group(1)) * factor!r}{match.group(2)}"
    else:  # add a key, known or not
        table = _at(document, rng.choice(list(_tables(document))))
        table[rng.choice(KNOWN_KEYS + ["zzz", "Viscosity", "é"])] = hostile_value(rng)
    return document, action


def mutate_text(text: str, rng: random.Random) -> tuple[bytes, str]:
    """One mutation of the TOML text itself: cut, garbage, control characters, lines."""
    action = rng.choice(["truncate", "garbage", "control", "drop_line", "repeat_line",
                         "binary"])
    data = text.encode("utf-8")
    where = rng.randrange(len(data) + 1)
    if action == "truncate":
        return data[:where], action
    if action == "garbage":
        noise = bytes(rng.randrange(256) for _ in range(rng.choice([1, 5, 50, 5000])))
        return data[:where] + noise + data[where:], action
    if action == "control":
        noise = bytes(rng.choice([0, 7, 8, 11, 12, 13, 27, 127]) for _ in range(rng.randint(1, 8)))
        return data[:where] + noise + data[where:], action
    lines = text.splitlines()
    index = rng.randrange(len(lines))
    if action == "drop_line":
        del lines[index]
    elif action == "repeat_line":
        lines.insert(index, lines[index])
    else:
        return bytes(rng.randrange(256) for _ in range(rng.randint(0, 3000))), action
    return ("\n".join(lines) + "\n").encode("utf-8"), action


def base_documents() -> list[tuple[str, dict]]:
    """The bundled examples, and a case on a mesh file (the examples have none)."""
    documents = [(p.stem, tomllib.loads(p.read_text(encoding="utf-8"))) for p in EXAMPLES]
    documents.append(("mesh_file", {
        "fluid": {"model": "power-law", "consistency": "0.8 Pa*s^0.6", "flow_index": 0.6},
        "geometry": {"shape": "mesh", "file": str(MESHES / "square.vtu"), "length_unit": "mm"},
        "drive": {"pressure_gradient": "-2 kPa/m"}}))
    return documents


def _one_dimensional(document: dict) -> bool:
    geometry = document.get("geometry")
    if not isinstance(geometry, dict):
        return True
    shape = geometry.get("shape")
    return shape in ("slit", "pipe", "coaxial-cylinders") or (
        shape == "annulus" and geometry.get("eccentricity", 0) in (0, 0.0))


def tiny(document: dict) -> dict:
    """The case on the smallest meshes that still mean something, without plots."""
    mesh = document.get("mesh")
    if mesh is None:
        mesh = document["mesh"] = {}
    if isinstance(mesh, dict):
        mesh["cells"] = 8 if _one_dimensional(document) else 4
    output = document.get("output")
    if output is None:
        output = document["output"] = {}
    if isinstance(output, dict):
        output["plots"] = False
    return document


@dataclass
class Mutant:
    label: str
    data: bytes | None          # the case file's bytes; None: ``path`` is given as it is
    path: str | None = None


def mutants(count: int, seed: int, for_run: bool) -> list[Mutant]:
    """``count`` mutated cases, the same for the same seed."""
    rng = random.Random(seed)
    bases = base_documents()
    out = []
    for index in range(count):
        name, base = rng.choice(bases)
        document = copy.deepcopy(base)
        if for_run:
            document = tiny(document)
        roll = rng.random()
        if roll < 0.02 and not for_run:
            out.append(Mutant(f"{index}:case_path", None, rng.choice(BAD_PATHS)))
            continue
        actions = []
        for _ in range(rng.choice([1, 1, 1, 2, 3])):
            # run cases: mostly valid values scaled to extremes, so that most reach the solver
            chosen = "scale" if for_run and rng.random() < 0.7 else None
            document, action = mutate_document(document, rng, chosen)
            actions.append(action)
        if for_run:
            document = tiny(document)
        text = to_toml(document)
        if roll > 0.85 and not for_run:
            data, action = mutate_text(text, rng)
            actions.append(action)
        else:
            data = text.encode("utf-8")
        out.append(Mutant(f"{index}:{name}:{'+'.join(actions)}", data))
    return out


# --------------------------------------------------------------------------- running

class Hang(BaseException):
    """Raised by the alarm: a BaseException, so that no ``except Exception`` inside
    gnflow swallows it."""


@dataclass
class Outcome:
    code: object
    err: str
    out: str
    traceback: str | None
    hang: bool
    seconds: float


def _alarm(signum, frame):
    raise Hang()


def call_cli(argv: list[str]) -> Outcome:
    out, err = io.StringIO(), io.StringIO()
    traceback = None
    hang = False
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, HANG_GUARD)
    start = time.perf_counter()
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main(argv)
    except Hang:
        code, hang = None, True
    except SystemExit as stop:  # argparse refusing an argument
        code = stop.code
    except BaseException as escaped:  # noqa: BLE001 - that is what the fuzzer looks for
        code, traceback = None, f"{type(escaped).__name__}: {str(escaped)[:300]}"
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
    return Outcome(code, err.getvalue(), out.getvalue(), traceback, hang,
                   time.perf_counter() - start)


def _numbers(value, where=""):
    """Every number in a JSON document, with where it is, walked without recursion."""
    stack = [(where, value)]
    while stack:
        where, value = stack.pop()
        if isinstance(value, dict):
            stack.extend((f"{where}.{k}", v) for k, v in value.items())
        elif isinstance(value, list):
            stack.extend((f"{where}[{i}]", v) for i, v in enumerate(value))
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            yield where, value


def problems_of(outcome: Outcome, allowed_codes, summary_path: Path | None) -> list[str]:
    """What is wrong with an outcome (empty: nothing)."""
    found = []
    if outcome.hang:
        return [f"hang (> {HANG_GUARD:g} s)"]
    if outcome.traceback:
        return [f"exception escaped: {outcome.traceback}"]
    if "Traceback" in outcome.err + outcome.out:
        found.append("traceback printed")
    if outcome.code not in allowed_codes:
        found.append(f"exit code {outcome.code!r}")
    if outcome.code != 0:
        lines = outcome.err.splitlines()
        if len(lines) != 1:
            found.append(f"{len(lines)} lines on stderr: {outcome.err[:300]!r}")
        for line in lines:
            if len(line) > MAX_LINE:
                found.append(f"stderr line of {len(line)} characters: {line[:120]!r}")
            if not line.isprintable():
                found.append(f"non-printable stderr line: {line[:120]!r}")
    if outcome.code == 0 and summary_path is not None:
        summary = json.loads(summary_path.read_text(encoding="utf-8"))
        bad = [f"{w} = {v}" for w, v in _numbers(summary) if not math.isfinite(v)]
        if bad:
            found.append("non-finite numbers in summary.json: " + ", ".join(bad[:5]))
    return found


def _save(mutant: Mutant, kind: str, problems: list[str]) -> None:
    if not SAVE_FAILURES:
        return
    folder = Path(SAVE_FAILURES)
    folder.mkdir(parents=True, exist_ok=True)
    stem = f"{kind}-{re.sub(r'[^A-Za-z0-9_+-]', '_', mutant.label)[:80]}"
    (folder / f"{stem}.toml").write_bytes(mutant.data if mutant.data is not None
                                          else f"# case path: {mutant.path!r}\n".encode())
    (folder / f"{stem}.txt").write_text("\n".join(problems) + "\n", encoding="utf-8")


def _report(kind: str, tally: collections.Counter, codes: collections.Counter,
            failures: list[str]) -> str:
    return (f"fuzz {kind}: {tally['cases']} cases; exit codes "
            f"{dict(sorted(codes.items(), key=str))}; tracebacks {tally['tracebacks']}, "
            f"hangs {tally['hangs']}, non-finite {tally['non_finite']}, "
            f"bad messages {tally['messages']}, failing cases {len(failures)}")


def _run_corpus(kind: str, corpus: list[Mutant], tmp_path: Path, allowed) -> tuple[str, list]:
    tally, codes, failures = collections.Counter(), collections.Counter(), []
    for number, mutant in enumerate(corpus):
        if mutant.data is None:
            target = mutant.path
        else:
            target = str(tmp_path / "case.toml")
            Path(target).write_bytes(mutant.data)
        out_dir = tmp_path / f"out{number}"
        argv = ["check", target] if kind == "check" else ["run", target, "--out", str(out_dir)]
        outcome = call_cli(argv)
        problems = problems_of(outcome, allowed, out_dir / "summary.json"
                               if kind == "run" else None)
        tally["cases"] += 1
        codes[outcome.code] += 1
        tally["tracebacks"] += bool(outcome.traceback) or "Traceback" in outcome.err
        tally["hangs"] += outcome.hang
        tally["non_finite"] += any(p.startswith("non-finite") for p in problems)
        tally["messages"] += any("stderr" in p for p in problems)
        if problems:
            failures.append(f"{mutant.label}: {'; '.join(problems)}")
            _save(mutant, kind, problems)
        shutil.rmtree(out_dir, ignore_errors=True)
    report = _report(kind, tally, codes, failures)
    print(report)
    return report, failures


# --------------------------------------------------------------------------- tests

@pytest.fixture
def one_parser(monkeypatch):
    """Build the command line's argument parser once for the whole corpus: building it
    takes longer than checking a case, and it is not what is fuzzed here."""
    if hasattr(cli, "_build_parser"):
        monkeypatch.setattr(cli, "_build_parser", functools.lru_cache(None)(cli._build_parser))


def test_mutants_are_reproducible():
    first = mutants(30, seed=7, for_run=False)
    again = mutants(30, seed=7, for_run=False)
    assert [m.data for m in first] == [m.data for m in again]
    assert len({m.data for m in first}) > 20  # and they differ from one another


def test_the_checker_sees_a_bad_outcome():
    """The judge itself can fail: a two-line message, a long one, a control character,
    an escaped exception and a non-finite summary are all caught."""
    cases = [Outcome(2, "a\nb\n", "", None, False, 0.0),
             Outcome(2, "x" * 201 + "\n", "", None, False, 0.0),
             Outcome(2, "bell\x07\n", "", None, False, 0.0),
             Outcome(None, "", "", "OverflowError: int too large", False, 0.0),
             Outcome(None, "", "", None, True, 0.0),
             Outcome(1, "gnflow: error: x\n", "", None, False, 0.0)]
    for outcome in cases:
        assert problems_of(outcome, {0, 2}, None), outcome


def test_non_finite_summary_is_caught(tmp_path):
    summary = tmp_path / "summary.json"
    summary.write_text(json.dumps({"flow_rate": float("nan"), "wall": {"top": 1.0}}))
    assert problems_of(Outcome(0, "", "", None, False, 0.0), {0}, summary)
    summary.write_text(json.dumps({"flow_rate": 1.0, "warnings": [], "converged": True}))
    assert not problems_of(Outcome(0, "", "", None, False, 0.0), {0}, summary)


def test_fuzz_check(tmp_path, one_parser):
    """Mutated cases through ``gnflow check``: exit 0 or 2, one short printable line."""
    report, failures = _run_corpus("check", mutants(CHECK_CASES, seed=2026, for_run=False),
                                   tmp_path, {0, 2})
    assert not failures, report + "\n" + "\n".join(failures[:20])


def test_fuzz_run(tmp_path, one_parser):
    """Mutated cases through ``gnflow run`` on tiny meshes: exit 0, 2 or 3; a converged
    summary holds only finite numbers."""
    report, failures = _run_corpus("run", mutants(RUN_CASES, seed=1202, for_run=True),
                                   tmp_path, {0, 2, 3})
    assert not failures, report + "\n" + "\n".join(failures[:20])
