"""Units: one pint registry, and the conversion of case-file values to SI floats.

A dimensional value in a case file is either a bare number, taken as SI, or a string
``"<number> <unit expression>"`` such as ``"3 mm"``, ``"12 kPa/m"``, ``"30 rpm"``,
``"45 cP"``, ``"2.5 Pa*s^0.45"`` or ``"1.2 lbf*s/ft^2"``. The number is read by a plain
regular expression and only the unit part goes to pint, so a case file can never make
gnflow evaluate an arithmetic expression.

>>> quantity("3 mm", "length", "geometry.gap")
0.003
>>> round(quantity("30 rpm", "angular_speed", "drive.inner_angular_speed"), 6)
3.141593
"""

from __future__ import annotations

import functools
import math
import re

from .errors import CaseError


@functools.lru_cache(maxsize=1)
def unit_registry():
    """The one pint registry, built on first use: importing pint and building its registry
    takes about a second, which a case made of bare numbers (or ``gnflow --help``) should
    not pay."""
    import sys

    # pint probes for dask at import (a third of its import time where dask is
    # installed); gnflow never hands pint dask arrays, so the probe is skipped
    probing = "dask" not in sys.modules
    if probing:
        sys.modules["dask"] = None   # makes "import dask" fail fast inside pint
    try:
        import pint
    finally:
        if probing and sys.modules.get("dask", 0) is None:
            del sys.modules["dask"]
    try:
        # pint's cache of its parsed definitions (in the user's cache folder) cuts the
        # registry's construction from about 2 s to 0.15 s (measured, bench/startup.py)
        return pint.UnitRegistry(cache_folder=":auto:")
    except OSError:   # no writable cache folder: build it from the definitions
        return pint.UnitRegistry()


def __getattr__(name: str):
    if name == "registry":  # ``from gnflow.units import registry`` keeps working, lazily
        return unit_registry()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


#: name -> (SI unit used in messages and printed summaries, pint dimensionality)
DIMENSIONS = {
    "length": "m",
    "area": "m^2",
    "velocity": "m/s",
    "time": "s",
    "rate": "1/s",
    "angular_speed": "rad/s",
    "stress": "Pa",
    "pressure_gradient": "Pa/m",
    "viscosity": "Pa*s",
    "density": "kg/m^3",
    "flow_rate": "m^3/s",
    "flow_rate_per_width": "m^2/s",
    "torque_per_length": "N*m/m",
    "power_per_length": "W/m",
    "molar_energy": "J/mol",
    "temperature": "K",
    "thermal_conductivity": "W/(m*K)",
    "inverse_temperature": "1/K",
    "slip_coefficient": "m/(s*Pa)",
    "dimensionless": "",
}

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?(?:nan|inf|infinity))"
                     r"\s*(.*?)\s*$", re.IGNORECASE)
_MAX_TEXT = 200
# The unit part goes to pint only if it is short and made of unit names, small numbers,
# "*", "/", "^" or "**" and parentheses: that bounds what pint can be asked to do (no
# exponent of 1e400, no nesting a thousand deep, no text pint might spend long on).
_MAX_UNIT_TEXT = 60
_MAX_EXPONENT = 10.0
_MAX_PARENTHESES = 3
_UNIT_TOKEN = re.compile(r"\s+|\*\*|[*/^()\-]|(?:[^\W\d]|\u00b0)\w*|\d+(?:\.\d+)?")
_UNIT_SYNTAX = 'unit names, numbers, "*", "/", "^" and parentheses, e.g. "Pa*s^0.45"'


def si_unit(dimension: str, flow_index: float | None = None) -> str:
    """The SI unit string of a named dimension (``consistency`` needs the flow index)."""
    if dimension == "consistency":
        return f"Pa*s^{flow_index:g}"
    return DIMENSIONS[dimension]


def _target_units(dimension: str, flow_index: float | None):
    registry = unit_registry()
    if dimension == "consistency":
        return registry.pascal * registry.second ** flow_index
    return registry.parse_units(DIMENSIONS[dimension] or "dimensionless")


def _unit_text_problem(text: str) -> str | None:
    """Why ``text`` is not offered to pint, or None if it may be."""
    if len(text) > _MAX_UNIT_TEXT:
        return f"the unit part is longer than {_MAX_UNIT_TEXT} characters"
    tokens, position = [], 0
    while position < len(text):
        match = _UNIT_TOKEN.match(text, position)
        if not match:
            return f"could not read {text[position]!r} (a unit is made of {_UNIT_SYNTAX})"
        position = match.end()
        if not match.group().isspace():
            tokens.append(match.group())
    depth = 0
    for index, token in enumerate(tokens):
        depth += (token == "(") - (token == ")")
        if depth > _MAX_PARENTHESES:
            return f"parentheses more than {_MAX_PARENTHESES} deep"
        if token == "-" and (index == 0 or tokens[index - 1] not in ("^", "**", "(")):
            return "a minus sign outside an exponent"
        if token[0].isdigit():
            if len(token) > 8:
                return "a number of more than 8 characters in the unit"
            before = index - 1
            while before >= 0 and tokens[before] in ("(", "-"):
                before -= 1
            is_exponent = before >= 0 and tokens[before] in ("^", "**")
            if is_exponent and float(token) > _MAX_EXPONENT:
                return f"an exponent above {_MAX_EXPONENT:g} in size"
    return None


def _expected(dimension: str, flow_index: float | None) -> str:
    unit = si_unit(dimension, flow_index)
    what = dimension.replace("_", " ")
    article = "an" if what[0] in "aeiou" else "a"
    return f"{article} {what} (a number in {unit}, or a string with units such as \"{_example(dimension)}\")" \
        if unit else "a plain number"


def _example(dimension: str) -> str:
    return {
        "length": "25 mm", "area": "3 cm^2", "velocity": "0.5 m/s", "time": "0.2 s",
        "rate": "100 1/s", "angular_speed": "60 rpm", "stress": "8 Pa",
        "pressure_gradient": "-3 kPa/m", "viscosity": "45 cP", "density": "1050 kg/m^3",
        "flow_rate": "2 L/s", "flow_rate_per_width": "0.001 m^2/s",
        "consistency": "2.5 Pa*s^0.45", "molar_energy": "40 kJ/mol",
        "temperature": "40 degC", "torque_per_length": "1 N*m/m",
        "power_per_length": "1 W/m", "thermal_conductivity": "0.2 W/(m*K)",
        "inverse_temperature": "0.02 1/K", "slip_coefficient": "0.2 mm/(s*Pa)",
    }.get(dimension, "1")


def quantity(value, dimension: str, key: str, flow_index: float | None = None) -> float:
    """Convert a case-file value to an SI float of the named ``dimension``.

    ``dimension`` is a key of :data:`DIMENSIONS` or ``"consistency"`` (Pa s^n, which
    needs ``flow_index``). Raises :class:`CaseError` naming ``key`` when the value is not
    a finite number or a string with units of the right dimension.

    >>> quantity("1 lbf*s/ft^2", "viscosity", "fluid.viscosity")  # NIST SP 811: 47.880 26
    47.88025898033586
    >>> quantity(12.0, "stress", "fluid.yield_stress")
    12.0
    """
    expected = _expected(dimension, flow_index)
    if isinstance(value, bool):
        raise CaseError(key, value, expected)
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:  # an integer of more than 308 digits
            raise CaseError(key, value, "a number below 1e308 in size") from None
        if not math.isfinite(number):
            raise CaseError(key, value, "a finite number")
        return number
    if not isinstance(value, str):
        raise CaseError(key, value, expected)
    if len(value) > _MAX_TEXT:
        raise CaseError(key, value, f"a value of at most {_MAX_TEXT} characters")
    match = _NUMBER.match(value)
    if not match:
        raise CaseError(key, value, expected)
    number = float(match.group(1))
    if not math.isfinite(number):
        raise CaseError(key, value, "a finite number")
    unit_text = match.group(2)
    if not unit_text:
        return number
    problem = _unit_text_problem(unit_text)
    if problem:
        raise CaseError(key, value, f"a known unit; {problem}")
    import pint

    registry = unit_registry()
    try:
        units = registry.parse_units(unit_text.replace("^", "**"))
    except Exception:  # pint raises several types for text it cannot read
        raise CaseError(key, value, f"a known unit; could not read {unit_text!r}") from None
    target = _target_units(dimension, flow_index)
    try:
        converted = registry.Quantity(number, units).to(target).magnitude
    except pint.DimensionalityError:
        got = str(registry.Quantity(1, units).dimensionality)
        raise CaseError(key, value, f"{expected}; {unit_text!r} has dimension {got}") from None
    except Exception:
        raise CaseError(key, value, expected) from None
    converted = float(converted)
    if not math.isfinite(converted):
        raise CaseError(key, value, "a finite value")
    return converted
