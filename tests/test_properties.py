"""Property tests: whatever a case file holds, bad input only ever raises CaseError.

Random TOML documents (nested tables, every TOML value type) and random mutations of
valid cases go to ``Case.from_dict`` and, written to a file, to ``gnflow check``: the
result is a valid case, or a CaseError (exit code 2 with one line on stderr); no other
exception escapes. ``check`` is used rather than ``run`` so nothing is solved.
"""

import copy
import datetime as dt
import math
import tomllib

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from gnflow.case import Case
from gnflow.cli import main
from gnflow.errors import CaseError

SETTINGS = settings(max_examples=200, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.function_scoped_fixture])

VALID_CASES = [
    {"fluid": {"model": "power-law", "consistency": "2.5 Pa*s^0.45", "flow_index": 0.45},
     "geometry": {"shape": "pipe", "radius": "25 mm"},
     "drive": {"pressure_gradient": "-3 kPa/m"}},
    {"title": "mud", "fluid": {"model": "bingham", "yield_stress": "7 Pa",
                               "plastic_viscosity": "28 cP", "density": "1250 kg/m^3",
                               "regularisation": {"method": "papanastasiou"}},
     "geometry": {"shape": "annulus", "inner_radius": "2.5 in", "outer_radius": "4.3 in"},
     "drive": {"pressure_gradient": "-0.02 psi/ft", "wall_speed": {"inner": "0.3 m/s"}},
     "mesh": {"cells": 50, "degree": 1}, "solver": {"method": "picard", "tolerance": 1e-9}},
    {"fluid": {"model": "carreau", "zero_shear_viscosity": "10 Pa*s",
               "infinite_shear_viscosity": 0.01, "time_constant": "0.5 s", "flow_index": 0.4},
     "geometry": {"shape": "coaxial-cylinders", "inner_radius": "40 mm",
                  "outer_radius": "45 mm"},
     "drive": {"inner_angular_speed": "60 rpm"}, "output": {"plots": False}},
    {"fluid": {"model": "cross", "zero_shear_viscosity": 2.0, "time_constant": 0.1,
               "rate_exponent": 0.7},
     "geometry": {"shape": "slit", "gap": "2 mm"},
     "drive": {"flow_rate": "0.5 L/s/m", "wall_speed": {"top": "0.1 m/s"}}},
    {"fluid": {"model": "herschel-bulkley", "yield_stress": "8 Pa",
               "consistency": "2.5 Pa*s^0.45", "flow_index": 0.45,
               "regularisation": {"method": "bi-viscous", "critical_rate": "1e-3 1/s"}},
     "geometry": {"shape": "annulus", "inner_radius": "40 mm", "outer_radius": "90 mm",
                  "eccentricity": 0.3},
     "drive": {"flow_rate": "2 L/s"}, "mesh": {"cells": 16}},
]

# --------------------------------------------------------------------------- strategies

KNOWN_WORDS = ["fluid", "geometry", "drive", "mesh", "solver", "output", "title", "model",
               "shape", "viscosity", "flow_index", "radius", "gap", "cells", "degree",
               "pressure_gradient", "flow_rate", "wall_speed", "inner", "top", "method",
               "regularisation", "density", "eccentricity", "tolerance", "plots"]
keys = st.one_of(st.sampled_from(KNOWN_WORDS), st.text(max_size=12))
unit_strings = st.builds(lambda n, u: f"{n} {u}", st.floats(allow_nan=True),
                         st.sampled_from(["mm", "Pa", "cP", "Pa*s^0.5", "kPa/m", "L/s", "rpm",
                                          "m/s", "s", "kg/m^3", "1/s", "m^2/s", "degC",
                                          "Pa**2", "blarg", "^", "*", "/", "", "m^1e400",
                                          "Pa*s^nan", "(m", "1/0"]))
strings = st.one_of(st.text(max_size=30), unit_strings,
                    st.sampled_from(["newtonian", "power-law", "carreau", "carreau-yasuda",
                                     "cross", "bingham", "herschel-bulkley", "slit", "pipe",
                                     "annulus", "coaxial-cylinders", "rectangle", "mesh",
                                     "newton", "picard", "bi-viscous", "papanastasiou",
                                     "nan Pa", "inf", "-inf m", "1e999 m", ""]))
scalars = st.one_of(
    strings,
    st.integers(min_value=-2 ** 63, max_value=2 ** 63 - 1),
    st.floats(),
    st.booleans(),
    st.datetimes(min_value=dt.datetime(1000, 1, 1)),
    st.dates(min_value=dt.date(1000, 1, 1)),
    st.times(),
)
values = st.recursive(scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(keys, inner, max_size=4)), max_leaves=12)
documents = st.dictionaries(keys, values, max_size=8)


def _toml_string(text: str) -> str:
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        elif 0xD800 <= ord(ch) <= 0xDFFF:  # lone surrogates cannot be written as UTF-8
            out.append("\\ufffd")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, str)) and not isinstance(value, str):
        return str(value)
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, (dt.datetime, dt.date, dt.time)):
        return value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_string(k)} = {_toml_value(v)}"
                               for k, v in value.items()) + "}"
    raise TypeError(type(value))


def to_toml(document: dict) -> str:
    """A TOML text for ``document`` (inline tables only, every key quoted)."""
    return "".join(f"{_toml_string(k)} = {_toml_value(v)}\n" for k, v in document.items())


def _paths(table: dict, prefix=()):
    for key, value in table.items():
        yield prefix + (key,)
        if isinstance(value, dict):
            yield from _paths(value, prefix + (key,))


def _tables(table: dict, prefix=()):
    yield prefix
    for key, value in table.items():
        if isinstance(value, dict):
            yield from _tables(value, prefix + (key,))


def _get(document: dict, path):
    for key in path:
        document = document[key]
    return document


@st.composite
def mutated_cases(draw):
    """A valid case with a few random edits: values replaced, keys deleted or added."""
    document = copy.deepcopy(draw(st.sampled_from(VALID_CASES)))
    for _ in range(draw(st.integers(min_value=1, max_value=3))):
        action = draw(st.sampled_from(["replace", "replace", "delete", "add"]))
        paths = list(_paths(document))
        if action in ("replace", "delete") and paths:
            path = draw(st.sampled_from(paths))
            parent = _get(document, path[:-1])
            if action == "delete":
                del parent[path[-1]]
            else:
                parent[path[-1]] = draw(values)
        else:
            parent = _get(document, draw(st.sampled_from(list(_tables(document)))))
            parent[draw(keys)] = draw(values)
    return document


# --------------------------------------------------------------------------- properties

def _from_dict_only_raises_case_error(document):
    try:
        case = Case.from_dict(document)
    except CaseError as err:
        assert str(err).strip()
        return
    case.to_si()  # a case that validates can also be shown


def _check_command(document, tmp_path, capsys):
    path = tmp_path / "case.toml"
    path.write_text(to_toml(document), encoding="utf-8")
    tomllib.loads(path.read_text(encoding="utf-8"))  # the writer above makes valid TOML
    code = main(["check", str(path)])
    captured = capsys.readouterr()
    assert code in (0, 2)
    if code == 2:
        assert len(captured.err.splitlines()) == 1, captured.err
        assert captured.err.startswith("gnflow: error: ")
    else:
        assert captured.err == ""
    assert "Traceback" not in captured.err


@SETTINGS
@given(documents)
def test_random_documents_from_dict(document):
    _from_dict_only_raises_case_error(document)


@SETTINGS
@given(mutated_cases())
def test_mutated_cases_from_dict(document):
    _from_dict_only_raises_case_error(document)


@SETTINGS
@given(document=documents)
def test_random_documents_check_command(document, tmp_path, capsys):
    _check_command(document, tmp_path, capsys)


@SETTINGS
@given(document=mutated_cases())
def test_mutated_cases_check_command(document, tmp_path, capsys):
    _check_command(document, tmp_path, capsys)


@SETTINGS
@given(data=st.one_of(st.binary(max_size=200),
                      st.text(max_size=200).map(lambda t: t.encode("utf-8", "surrogatepass"))))
def test_random_bytes_check_command(data, tmp_path, capsys):
    path = tmp_path / "case.toml"
    path.write_bytes(data)
    code = main(["check", str(path)])
    captured = capsys.readouterr()
    assert code == 2
    assert len(captured.err.splitlines()) == 1, captured.err


def test_valid_cases_are_valid():
    for document in VALID_CASES:
        Case.from_dict(document)
