"""Units: one pint registry, and the conversion of case-file values to SI floats.

A dimensional value in a case file is either a bare number, taken as SI, or a string
``"<number> <unit expression>"`` such as ``"3 mm"``, ``"12 kPa/m"``, ``"30 rpm"``,
``"45 cP"``, ``"2.5 Pa*s^0.45"`` or ``"1.2 lbf*s/ft^2"``. The number is read by a plain
regular expression and only the unit part is interpreted, so a case file can never make
gnflow evaluate an arithmetic expression.

The unit part is read first by a small table-driven reader (:func:`_fast_units`) that
knows the common units of the case files (SI units with their usual prefixes, inch,
foot, psi, bar, gallon, minute, hour, rpm, poise, degC, ...): importing pint and building
its registry takes most of a second, which ``gnflow check`` should not pay. Whatever
that reader does not recognise, or where the dimension does not match, goes to pint as
before, so pint stays the authority for every error message and every odd unit;
tests/test_units.py compares the two over a long list of unit strings. A study, which
builds one case per grid point from the same texts, reads each text once
(:func:`remembering_texts`).

>>> quantity("3 mm", "length", "geometry.gap")
0.003
>>> round(quantity("30 rpm", "angular_speed", "drive.inner_angular_speed"), 6)
3.141593
"""

from __future__ import annotations

import contextlib
import contextvars
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


# ----------------------------------------------------------------- the pint-free reader

#: base dimensions of the fast reader, in the order of its dimension tuples
_BASE = ("[length]", "[mass]", "[time]", "[temperature]", "[substance]")


def _dims(length=0, mass=0, time=0, temperature=0, substance=0) -> tuple[int, ...]:
    return (length, mass, time, temperature, substance)


_PREFIXES = {"G": 1e9, "M": 1e6, "k": 1e3, "h": 1e2, "d": 1e-1, "c": 1e-2, "m": 1e-3,
             "u": 1e-6, "\u00b5": 1e-6, "\u03bc": 1e-6, "n": 1e-9}
_INCH = 0.0254                      # exact (NIST SP 811)
_POUND = 0.45359237                 # kg, exact
_STANDARD_GRAVITY = 9.80665         # m/s^2, exact
_POUND_FORCE = _POUND * _STANDARD_GRAVITY
_LENGTH, _MASS, _TIME = _dims(length=1), _dims(mass=1), _dims(time=1)
_FORCE = _dims(length=1, mass=1, time=-2)
_STRESS = _dims(length=-1, mass=1, time=-2)
_ENERGY = _dims(length=2, mass=1, time=-2)
_POWER = _dims(length=2, mass=1, time=-3)
_VISCOSITY = _dims(length=-1, mass=1, time=-1)
_VOLUME = _dims(length=3)
_FREQUENCY = _dims(time=-1)
_NONE = _dims()


def _unit_table() -> tuple[dict[str, tuple[float, tuple[int, ...]]], dict[str, str]]:
    """name -> (factor to SI, dimension tuple), and alias -> the one name of its unit:
    the names pint reads the same way (each one is compared with pint in
    tests/test_units.py). Names with a choice of readings in pint (plurals like "Pas",
    "mil", "d", "t", "deg") are left to pint. Aliases matter: pint adds the exponents of
    "l*L^0.3" as one unit's before it multiplies them out, and so does this reader."""
    table, canonical = {}, {}

    def add(names, factor, dims, prefixes="", same_as=None):
        symbol = names.split()[0]
        for name in names.split():
            table[name] = (factor, dims)
            canonical[name] = same_as or symbol
        for prefix in prefixes:
            table[prefix + symbol] = (_PREFIXES[prefix] * factor, dims)
            canonical[prefix + symbol] = ("u" if _PREFIXES[prefix] == 1e-6 else prefix) + symbol

    add("m meter metre meters metres", 1.0, _LENGTH, "kcdmu\u00b5\u03bcn")
    add("in inch inches", _INCH, _LENGTH)
    add("ft foot feet", 12 * _INCH, _LENGTH)
    add("yd yard", 36 * _INCH, _LENGTH)
    add("mi mile", 63360 * _INCH, _LENGTH)
    add("g gram", 1e-3, _MASS, "km")
    add("tonne", 1e3, _MASS)
    add("lb pound", _POUND, _MASS)
    add("slug", _POUND_FORCE / (12 * _INCH), _MASS)
    add("s sec second seconds", 1.0, _TIME, "mu\u00b5\u03bcn")
    add("min minute minutes", 60.0, _TIME)
    add("h hr hour hours", 3600.0, _TIME)
    add("day days", 86400.0, _TIME)
    add("K kelvin", 1.0, _dims(temperature=1))
    add("mol mole", 1.0, _dims(substance=1), "k")
    add("rad radian radians", 1.0, _NONE)
    add("turn turns revolution revolutions", 2 * math.pi, _NONE)
    add("rpm", 2 * math.pi / 60, _FREQUENCY)
    add("rps", 2 * math.pi, _FREQUENCY)
    add("Hz hertz", 1.0, _FREQUENCY, "k")
    add("N newton", 1.0, _FORCE, "kMm")
    add("lbf", _POUND_FORCE, _FORCE)
    add("kgf", _STANDARD_GRAVITY, _FORCE)
    add("Pa pascal", 1.0, _STRESS, "GMkhm")
    add("bar", 1e5, _STRESS, "m")
    add("psi", _POUND_FORCE / _INCH ** 2, _STRESS)
    add("atm", 101325.0, _STRESS)
    add("J joule", 1.0, _ENERGY, "kM")
    add("W watt", 1.0, _POWER, "kMm")
    add("P poise", 0.1, _VISCOSITY, "cm")
    add("centipoise", 1e-3, _VISCOSITY, same_as="cP")
    add("L l liter litre liters litres", 1e-3, _VOLUME, "mu\u00b5")
    table["ml"], canonical["ml"] = table["mL"], "mL"
    add("gal gallon", 231 * _INCH ** 3, _VOLUME)
    return table, canonical


_FAST_UNITS, _CANONICAL = _unit_table()
#: offset temperature units: name -> (scale, offset) with kelvin = scale * value + offset
_OFFSET_UNITS = {"degC": (1.0, 273.15), "\u00b0C": (1.0, 273.15), "celsius": (1.0, 273.15),
                 "degF": (5 / 9, 233.15 + 200 / 9), "\u00b0F": (5 / 9, 233.15 + 200 / 9)}
_FAST_TOKEN = re.compile(r" +|\*\*|[*/^()+\-]|(?:[^\W\d]|\u00b0)\w*|\d+(?:\.\d+)?")


class _NotFast(Exception):
    """The fast reader does not handle this text: pint reads it."""


def _fast_tokens(text: str) -> list[str]:
    tokens, position = [], 0
    while position < len(text):
        match = _FAST_TOKEN.match(text, position)
        if not match:
            raise _NotFast
        position = match.end()
        tokens.append(" " if match.group().isspace() else match.group())
    return tokens


class _FastReader:
    """Recursive descent over ``product := power ((* | / | juxtaposition) power)*``,
    ``power := atom [(^ | **) [(] [+|-] number [)]]``, ``atom := name | 1 | ( product )``;
    ``*``, ``/`` and juxtaposition share one precedence, left to right, as in pint.
    The result is pint's "units container": unit name -> exponent, combined by name."""

    def __init__(self, tokens: list[str]):
        self.tokens, self.index = tokens, 0

    def peek(self, skip_space: bool = True) -> str | None:
        index = self.index
        while skip_space and index < len(self.tokens) and self.tokens[index] == " ":
            index += 1
        return self.tokens[index] if index < len(self.tokens) else None

    def take(self) -> str:
        while self.index < len(self.tokens) and self.tokens[self.index] == " ":
            self.index += 1
        if self.index >= len(self.tokens):
            raise _NotFast
        self.index += 1
        return self.tokens[self.index - 1]

    def read(self) -> dict:
        units = self.product()
        if self.peek() is not None:
            raise _NotFast
        return units

    def product(self) -> dict:
        units = self.power()
        while True:
            token = self.peek()
            if token in ("*", "/"):
                self.take()
                sign = 1 if token == "*" else -1
            elif token is not None and token != ")":
                sign = 1                                   # juxtaposition: "Pa s"
            else:
                return units
            units = _combine(units, self.power(), sign)

    def power(self) -> dict:
        units = self.atom()
        if self.peek() in ("^", "**"):
            self.take()
            exponent = self.exponent()
            units = {name: value * exponent for name, value in units.items()}
            if self.peek() in ("^", "**"):                 # "m^2^2": left to pint
                raise _NotFast
        return units

    def exponent(self) -> float:
        parenthesised = self.peek() == "("
        if parenthesised:
            self.take()
        sign = 1
        if self.peek() in ("+", "-"):
            sign = -1 if self.take() == "-" else 1
        token = self.take()
        if not token[0].isdigit():
            raise _NotFast
        if parenthesised and self.take() != ")":
            raise _NotFast
        return sign * (float(token) if "." in token else int(token))

    def atom(self) -> dict:
        token = self.take()
        if token == "(":
            units = self.product()
            if self.take() != ")":
                raise _NotFast
            return units
        if token == "1":
            return {}
        if token in _FAST_UNITS:
            return {_CANONICAL[token]: 1}
        raise _NotFast


def _combine(first: dict, second: dict, sign: int) -> dict:
    combined = dict(first)
    for name, value in second.items():
        combined[name] = combined.get(name, 0) + sign * value
        if combined[name] == 0:
            del combined[name]
    return combined


#: units that pint defines through a chain of one base dimension each (a fractional power
#: of them reaches pint's dimension exponents by one multiplication, as here)
_SIMPLE = frozenset(name for name, (_, dims) in _FAST_UNITS.items()
                    if sum(map(abs, dims)) == 1 or dims in (_VOLUME, _FREQUENCY)) - {
    "slug", "rpm", "rps"}
#: units that reach [time] through one term of pint's definitions (Pa = N/m^2,
#: N = kg*m/s^2), the partners of a fractional power of a time unit in "Pa*s^n"
_ONE_TIME_TERM = frozenset(name for name, (_, dims) in _FAST_UNITS.items()
                           if dims in (_STRESS, _FORCE) and name not in ("atm",))


def _container_dims(units: dict) -> tuple:
    """The dimension exponents of a units container (name -> exponent).

    With integer exponents the sums are exact. A fractional exponent is read here only
    where pint's own sum cannot come out differently in the last bit: on a unit of one
    base dimension, and with at most one other unit in that dimension, contributing one
    term (``Pa*s^0.45``, ``lbf*s^0.5/ft^2``). Anything else goes to pint, so that the
    comparison with the wanted dimension stays pint's, bit for bit."""
    fractional = [name for name, exponent in units.items()
                  if not float(exponent).is_integer()]
    if fractional:
        for name in fractional:
            if name not in _SIMPLE:
                raise _NotFast
        if "slug" in units:   # lbf*s^2/ft in pint: terms in [length] and [time] that cancel
            raise _NotFast
        for slot in range(len(_BASE)):
            if not any(_FAST_UNITS[name][1][slot] for name in fractional):
                continue
            others = [name for name in units if _FAST_UNITS[name][1][slot]]
            if len(others) > 2:
                raise _NotFast
            for name in others:
                if name not in _SIMPLE and not (slot == 2 and name in _ONE_TIME_TERM):
                    raise _NotFast
    result = [0] * len(_BASE)
    for name, exponent in units.items():
        for slot, d in enumerate(_FAST_UNITS[name][1]):
            if d:
                result[slot] += d * exponent
    return tuple(result)


def _fast_units(text: str) -> tuple[float, tuple] | tuple[str]:
    """(SI factor, dimension tuple) of a unit text, or ``(offset unit name,)`` for a lone
    degC or degF. Raises :class:`_NotFast` for anything the table does not cover."""
    tokens = _fast_tokens(text)
    if len(tokens) == 1 and tokens[0] in _OFFSET_UNITS:
        return (tokens[0],)
    units = _FastReader(tokens).read()
    factor = 1.0
    for name, exponent in units.items():
        factor *= _FAST_UNITS[name][0] ** exponent
    return factor, _container_dims(units)


@functools.lru_cache(maxsize=64)
def _target_dims(dimension: str, flow_index: float | None) -> tuple:
    if dimension == "consistency":  # Pa*s^n, as pint builds it: pascal * second ** n
        return _container_dims({"Pa": 1, "s": flow_index})
    return _fast_units(DIMENSIONS[dimension] or "1")[1]


def _fast_quantity(number: float, unit_text: str, dimension: str,
                   flow_index: float | None) -> float:
    """The SI value of ``number`` in ``unit_text`` by the fast reader, or raises
    :class:`_NotFast` (unknown unit, another dimension, anything unusual)."""
    try:
        read = _fast_units(unit_text)
        if len(read) == 1:                                 # degC, degF
            if dimension != "temperature":
                raise _NotFast
            scale, offset = _OFFSET_UNITS[read[0]]
            return number * scale + offset
        factor, dims = read
        if dims != _target_dims(dimension, flow_index):
            raise _NotFast                                 # pint words the error
        return number * factor
    except (ArithmeticError, TypeError, ValueError):       # e.g. an overflowing power
        raise _NotFast from None


def quantity(value, dimension: str, key: str, flow_index: float | None = None) -> float:
    """Convert a case-file value to an SI float of the named ``dimension``.

    ``dimension`` is a key of :data:`DIMENSIONS` or ``"consistency"`` (Pa s^n, which
    needs ``flow_index``). Raises :class:`CaseError` naming ``key`` when the value is not
    a finite number or a string with units of the right dimension.

    >>> round(quantity("1 lbf*s/ft^2", "viscosity", "fluid.viscosity"), 6)  # NIST SP 811: 47.880 26
    47.880259
    >>> quantity(12.0, "stress", "fluid.yield_stress")
    12.0
    """
    if isinstance(value, str):
        store = _REMEMBERED.get()
        if store is None:
            return _text_quantity(value, dimension, key, flow_index)
        # the value depends on the text, the dimension and the flow index only; the key
        # only words an error, and errors are never kept (each is raised afresh)
        found = store.get((value, dimension, flow_index))
        if found is None:
            found = store[value, dimension, flow_index] = _text_quantity(
                value, dimension, key, flow_index)
        return found
    if isinstance(value, bool):
        raise CaseError(key, value, _expected(dimension, flow_index))
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:  # an integer of more than 308 digits
            raise CaseError(key, value, "a number below 1e308 in size") from None
        if not math.isfinite(number):
            raise CaseError(key, value, "a finite number")
        return number
    raise CaseError(key, value, _expected(dimension, flow_index))


#: the store of texts already read while :func:`remembering_texts` is active (None: off)
_REMEMBERED: contextvars.ContextVar[dict | None] = contextvars.ContextVar(
    "gnflow_units_remembered", default=None)


@contextlib.contextmanager
def remembering_texts():
    """Within the block, :func:`quantity` reads each text with units once and keeps its SI
    value: a study builds one case per grid point from the same texts (``"25 mm"``,
    ``"0.8 Pa*s^0.5"``), and reading one costs 10-20 us. Values are exactly those read
    without it; bad texts raise as always (errors are not kept). A context variable, so
    threads (dask workers) each keep their own store."""
    token = _REMEMBERED.set({})
    try:
        yield
    finally:
        _REMEMBERED.reset(token)


def _text_quantity(value: str, dimension: str, key: str, flow_index: float | None) -> float:
    """:func:`quantity` of a string: ``"<number> <unit expression>"`` or a bare number."""
    if len(value) > _MAX_TEXT:
        raise CaseError(key, value, f"a value of at most {_MAX_TEXT} characters")
    match = _NUMBER.match(value)
    if not match:
        raise CaseError(key, value, _expected(dimension, flow_index))
    number = float(match.group(1))
    if not math.isfinite(number):
        raise CaseError(key, value, "a finite number")
    unit_text = match.group(2)
    if not unit_text:
        return number
    problem = _unit_text_problem(unit_text)
    if problem:
        raise CaseError(key, value, f"a known unit; {problem}")
    try:
        converted = _fast_quantity(number, unit_text, dimension, flow_index)
    except _NotFast:
        return _pint_quantity(value, number, unit_text, dimension, key, flow_index)
    if not math.isfinite(converted):
        raise CaseError(key, value, "a finite value")
    return converted


def _pint_quantity(value, number: float, unit_text: str, dimension: str, key: str,
                   flow_index: float | None) -> float:
    """``number`` in ``unit_text`` converted by pint (every unit the fast reader does not
    know, and the wording of every dimension error)."""
    expected = _expected(dimension, flow_index)
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
