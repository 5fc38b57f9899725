"""Unit conversions against NIST SP 811 (2008), Appendix B, conversion factors, and the
fast unit reader against pint."""

import math
import random
import subprocess
import sys
from pathlib import Path

import pytest

from gnflow import units
from gnflow.errors import CaseError
from gnflow.units import quantity

EXAMPLES = Path(__file__).resolve().parents[1] / "gnflow" / "examples"


@pytest.mark.parametrize("text, dimension, expected, source", [
    ("1 lbf*s/ft^2", "viscosity", 47.88026, "NIST SP 811 B.8: pound-force second per square foot"),
    ("1 cP", "viscosity", 1.0e-3, "NIST SP 811 B.8: centipoise = 1e-3 Pa s"),
    ("1 psi", "stress", 6894.757, "NIST SP 811 B.8: pound-force per square inch"),
    ("1 psi/ft", "pressure_gradient", 6894.757 / 0.3048, "psi (NIST SP 811) per foot (exact 0.3048 m)"),
    ("1 in", "length", 0.0254, "NIST SP 811 B.8: inch = 2.54e-2 m exactly"),
    ("1 ft", "length", 0.3048, "NIST SP 811 B.8: foot = 0.3048 m exactly"),
    ("1 gal/min", "flow_rate", 6.309020e-5, "NIST SP 811 B.8: gallon (US) per minute"),
    ("1 rpm", "angular_speed", 2 * math.pi / 60, "one revolution per minute = 2 pi / 60 rad/s"),
    ("1 lbf*s^0.5/ft^2", "consistency", 47.88026, "as lbf s/ft^2, with s^0.5"),
    ("1 slug/ft^3", "density", 515.3788, "NIST SP 811 B.8: slug per cubic foot"),
])
def test_conversion_factors(text, dimension, expected, source):
    flow_index = 0.5 if dimension == "consistency" else None
    assert quantity(text, dimension, "key", flow_index) == pytest.approx(expected, rel=2e-6), source


def test_bare_numbers_are_si():
    assert quantity(0.25, "length", "geometry.gap") == 0.25
    assert quantity(7, "stress", "fluid.yield_stress") == 7.0


@pytest.mark.parametrize("value, fragment", [
    ("3 kg", "dimension [mass]"),
    ("3 parsnips", "known unit"),
    ("nan m", "finite"),
    ("1e999 m", "finite"),
    ([1, 2], "length"),
    (True, "length"),
    ("", "length"),
    ("2**99 m", "known unit"),
])
def test_bad_values_name_the_key(value, fragment):
    with pytest.raises(CaseError) as err:
        quantity(value, "length", "geometry.gap")
    assert "geometry.gap" in str(err.value) and fragment in str(err.value)


def test_consistency_unit_must_match_flow_index():
    with pytest.raises(CaseError, match="fluid.consistency"):
        quantity("2 Pa*s^0.6", "consistency", "fluid.consistency", 0.45)


@pytest.mark.parametrize("text, fragment", [
    ("3 m^99999", "an exponent above 10"),
    ("3 m**-11", "an exponent above 10"),
    ("2 ((((m))))", "parentheses more than 3 deep"),
    ("1 m" + "*m" * 40, "longer than 60 characters"),
    ("1 m-2", "a minus sign outside an exponent"),
    ("1 m\x07", "could not read '\\x07'"),
    ("1 m 123456789", "more than 8 characters"),
])
def test_unit_text_is_bounded_before_pint_reads_it(text, fragment):
    with pytest.raises(CaseError) as err:
        quantity(text, "length", "geometry.gap")
    message = str(err.value)
    assert "geometry.gap" in message and fragment in message
    assert message.isprintable() and len(message) <= 185


@pytest.mark.parametrize("text, dimension, expected", [
    ("2 Pa*m^-1", "pressure_gradient", 2.0),           # exponents within the bound
    ("4 kPa*m^(-1)", "pressure_gradient", 4000.0),
    ("3 kg*m^-1*s^-2", "stress", 3.0),
    ("5 (kg/(m*s))", "viscosity", 5.0),
])
def test_unit_text_within_the_bounds_still_converts(text, dimension, expected):
    assert quantity(text, dimension, "k") == pytest.approx(expected, rel=1e-12)


def test_integers_beyond_the_float_range_are_refused():
    with pytest.raises(CaseError, match=r"geometry.gap = <an integer of about 401 digits>"):
        quantity(10 ** 400, "length", "geometry.gap")


def test_pint_is_imported_only_for_units_the_fast_reader_does_not_know():
    """Bare numbers and common units do not pay for pint's import (start-up time); a unit
    outside the fast reader's table still works, through pint."""
    code = ("import sys; from gnflow.case import Case\n"
            "def case(viscosity):\n"
            "    return Case.from_dict({'fluid': {'model': 'newtonian', 'viscosity': viscosity},"
            " 'geometry': {'shape': 'pipe', 'radius': '20 mm'},"
            " 'drive': {'pressure_gradient': '-0.1 kPa/m'}})\n"
            "case(0.05); print('pint' in sys.modules)\n"
            "case('50 cP'); print('pint' in sys.modules)\n"
            "print(case('0.5 dyn*s/cm^2').fluid.model.viscosity_value)\n"
            "print('pint' in sys.modules)\n")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            timeout=120)
    assert result.stdout.split() == ["False", "False", "0.05", "True"], result.stderr


def test_checking_the_bundled_examples_needs_no_pint():
    """Every unit string of the bundled examples is read by the fast reader."""
    code = ("import sys, glob; from gnflow.case import load_case\n"
            "paths = sorted(glob.glob(sys.argv[1] + '/*.toml'))\n"
            "[load_case(p) for p in paths]\n"
            "print(len(paths), 'pint' in sys.modules)\n")
    result = subprocess.run([sys.executable, "-c", code, str(EXAMPLES)], capture_output=True,
                            text=True, timeout=300)
    count, imported = result.stdout.split()
    assert int(count) >= 10 and imported == "False", result.stderr


# ------------------------------------------------ the fast reader against pint itself

def _pint_only(monkeypatch):
    """quantity() with the fast reader switched off: every unit goes to pint."""
    def not_fast(*args):
        raise units._NotFast
    monkeypatch.setattr(units, "_fast_quantity", not_fast)


def _outcome(text, dimension, flow_index):
    try:
        return quantity(text, dimension, "fluid.key", flow_index)
    except CaseError as err:
        return f"CaseError: {err}"


def _pint_dims(unit_text):
    registry = units.unit_registry()
    dims = registry.Quantity(1.0, registry.parse_units(unit_text.replace("^", "**"))).dimensionality
    assert set(dims) <= set(units._BASE), dims
    return tuple(dims.get(name, 0) for name in units._BASE)


def test_every_name_of_the_fast_table_is_read_by_pint_the_same_way():
    registry = units.unit_registry()
    assert len(units._FAST_UNITS) > 80
    for name, (factor, dims) in units._FAST_UNITS.items():
        base = registry.Quantity(1.0, registry.parse_units(name)).to_base_units()
        assert base.magnitude == pytest.approx(factor, rel=1e-13), name
        assert _pint_dims(name) == dims, name


def test_the_fast_table_groups_aliases_as_pint_does():
    registry = units.unit_registry()
    by_pint, by_table = {}, {}
    for name in units._FAST_UNITS:
        by_pint.setdefault(str(registry.parse_units(name)), set()).add(name)
        by_table.setdefault(units._CANONICAL[name], set()).add(name)
    assert sorted(map(sorted, by_pint.values())) == sorted(map(sorted, by_table.values()))
    assert all(units._CANONICAL[name] in units._FAST_UNITS for name in units._FAST_UNITS)


#: (value, dimension, flow index, read by the fast reader?): common units, powers,
#: prefixes, offsets, odd spellings, wrong dimensions and text that cannot be read
CASES = [
    # as in the case files
    ("3 mm", "length", None, True), ("2.5 in", "length", None, True),
    ("4.3 in", "length", None, True), ("1 ft", "length", None, True),
    ("0.3 m/s", "velocity", None, True), ("12 kPa/m", "pressure_gradient", None, True),
    ("-8 MPa/m", "pressure_gradient", None, True), ("1 psi/ft", "pressure_gradient", None, True),
    ("30 rpm", "angular_speed", None, True), ("2 rad/s", "angular_speed", None, True),
    ("3 1/s", "angular_speed", None, True), ("5 Hz", "angular_speed", None, True),
    ("45 cP", "viscosity", None, True), ("45 mPa*s", "viscosity", None, True),
    ("45 mPa s", "viscosity", None, True), ("3.2 kPa*s", "viscosity", None, True),
    ("2 P", "viscosity", None, True), ("2 poise", "viscosity", None, True),
    ("1 lbf*s/ft^2", "viscosity", None, True), ("5 (kg/(m*s))", "viscosity", None, True),
    ("1.8 Pa*s^0.55", "consistency", 0.55, True), ("60 Pa*s^0.35", "consistency", 0.35, True),
    ("1 lbf*s^0.5/ft^2", "consistency", 0.5, True), ("2 Pa s^0.6", "consistency", 0.6, True),
    ("2 s^0.45*Pa", "consistency", 0.45, True), ("2 kg/m/s^2*s^0.45", "consistency", 0.45, True),
    ("2 Pa*s", "consistency", 1.0, True), ("2 Pa*s^1", "consistency", 1.0, True),
    ("1040 kg/m^3", "density", None, True), ("1 slug/ft^3", "density", None, True),
    ("1.2 g/cm^3", "density", None, True), ("1.2 kg/L", "density", None, True),
    ("25 gal/min", "flow_rate", None, True), ("9 L/s", "flow_rate", None, True),
    ("3 cm^3/s", "flow_rate", None, True), ("2 mL/s", "flow_rate", None, True),
    ("2 ml/min", "flow_rate", None, True), ("4 m^3/h", "flow_rate", None, True),
    ("20 L/min", "flow_rate", None, True), ("0.001 m^2/s", "flow_rate_per_width", None, True),
    ("2 L/s/m", "flow_rate_per_width", None, True), ("1 N*m/m", "torque_per_length", None, True),
    ("1 W/m", "power_per_length", None, True), ("28 kJ/mol", "molar_energy", None, True),
    ("28 J/mol", "molar_energy", None, True), ("200 degC", "temperature", None, True),
    ("-40 degF", "temperature", None, True), ("100 °F", "temperature", None, True),
    ("20 °C", "temperature", None, True), ("20 celsius", "temperature", None, True),
    ("300 K", "temperature", None, True), ("0.2 W/(m*K)", "thermal_conductivity", None, True),
    ("0.2 W/m/K", "thermal_conductivity", None, True), ("0.02 1/K", "inverse_temperature", None, True),
    ("0.2 mm/(s*Pa)", "slip_coefficient", None, True), ("3 cm^2", "area", None, True),
    ("8 Pa", "stress", None, True), ("1 psi", "stress", None, True), ("2 bar", "stress", None, True),
    ("20 mbar", "stress", None, True), ("1 atm", "stress", None, True), ("1 hPa", "stress", None, True),
    ("3 GPa", "stress", None, True), ("3 kg*m^-1*s^-2", "stress", None, True),
    ("2 N/m^2", "stress", None, True), ("2 kN/m^2", "stress", None, True),
    ("2 kgf/cm^2", "stress", None, True), ("0.2 s", "time", None, True),
    ("3 ms", "time", None, True), ("2 min", "time", None, True), ("1 h", "time", None, True),
    ("1 day", "time", None, True), ("1 hr", "time", None, True),
    # spellings, powers and groupings
    ("2 meters", "length", None, True), ("2 metre", "length", None, True),
    ("7 µm", "length", None, True), ("7 \u03bcm", "length", None, True), ("7 um", "length", None, True),
    ("7 nm", "length", None, True), ("2 km", "length", None, True), ("2 dm", "length", None, True),
    ("1 mi", "length", None, True), ("1 yd", "length", None, True), ("2 feet", "length", None, True),
    ("2 Pa*m^-1", "pressure_gradient", None, True), ("4 kPa*m^(-1)", "pressure_gradient", None, True),
    ("4 kPa*m^ -1", "pressure_gradient", None, True), ("4 kPa*m**-1", "pressure_gradient", None, True),
    ("4 kPa / m", "pressure_gradient", None, True), ("4 Pa*m/m^2", "pressure_gradient", None, True),
    ("4 m^2/m", "length", None, True), ("4 m 1", "length", None, True), ("4 1 m", "length", None, True),
    ("4 m/1", "length", None, True), ("4 (m)", "length", None, True), ("4 ((m))", "length", None, True),
    ("1 m^0.5*m^0.5", "length", None, True), ("1 L^(0.5)*cm^0.5", "area", None, True),
    ("2 kg/m s", "stress", None, False),     # pint: kg*s/m, not kg/(m*s): a wrong dimension
    ("2 kg/m s", "viscosity", None, False), ("2 kg*s/m", "stress", None, False),
    ("2 rev/min", "angular_speed", None, False), ("2 rps", "angular_speed", None, True),
    ("2 turn/min", "angular_speed", None, True), ("2 revolutions/min", "angular_speed", None, True),
    # odd ones that pint reads and the fast reader leaves to it
    ("2 Pas", "stress", None, False), ("2 mins", "time", None, False), ("2 d", "time", None, False),
    ("1 lb/ft^3", "density", None, True), ("2 dyn*s/cm^2", "viscosity", None, False),
    ("2 cSt", "viscosity", None, False), ("3 m^2^2", "area", None, False),
    ("3 m**2**0.5", "length", None, False), ("3 m^0.333333333", "length", None, False),
    ("2 degC*degC", "temperature", None, False), ("2 degC/s", "temperature", None, False),
    ("2 1/degC", "inverse_temperature", None, False), ("2 delta_degC", "temperature", None, False),
    ("2 degK", "temperature", None, False), ("2 degR", "temperature", None, False),
    ("2 Pa*Pa^0.5", "stress", None, False), ("2 Pa*h*s^0.5", "consistency", 1.5, False),
    ("2 Pa*s^0.55", "consistency", 0.45, False),       # flow index differs: pint's error
    ("1 mm^99", "length", None, False), ("2 GPa^10*GPa^10*GPa^10*GPa^10", "stress", None, False),
    ("2 m\u00a0m", "area", None, False), ("2 m\tm", "area", None, False),
    # wrong dimensions, unknown names, text that is not a unit
    ("3 kg", "length", None, False), ("3 degC", "length", None, False),
    ("3 Pa*s", "consistency", 0.5, False), ("3 m/s", "angular_speed", None, False),
    ("3 rpm", "velocity", None, False), ("3 parsnips", "length", None, False),
    ("3 furlongs_per_blarg", "velocity", None, False), ("3 m/fortnightz", "velocity", None, False),
    ("3 m^(1/0)", "length", None, False), ("3 m^", "length", None, False),
    ("3 *m", "length", None, False), ("3 m*", "length", None, False), ("3 m//s", "velocity", None, False),
    ("3 ()", "length", None, False), ("3 (m", "length", None, False), ("3 m)", "length", None, False),
    ("3 2 m", "length", None, False), ("3 m^99999", "length", None, False),
    ("3 m**-11", "length", None, False), ("3 m-2", "length", None, False), ("3 m\x07", "length", None, False),
    ("3 mm; import os", "length", None, False), ("3 __import__", "length", None, False),
    ("1e999 m", "length", None, False), ("1e300 km^10", "length", None, False),
    ("nan m", "length", None, False), ("inf Pa/m", "pressure_gradient", None, False),
    ("3 Pa*s^nan", "consistency", 0.5, False), ("3", "length", None, False), ("", "length", None, False),
]


@pytest.mark.parametrize("text, dimension, flow_index, fast", CASES)
def test_fast_reader_gives_what_pint_gives(text, dimension, flow_index, fast, monkeypatch):
    got = _outcome(text, dimension, flow_index)
    match = units._NUMBER.match(text)
    handled = False
    if match and math.isfinite(float(match.group(1))) and match.group(2) \
            and not units._unit_text_problem(match.group(2)):
        try:
            units._fast_quantity(float(match.group(1)), match.group(2), dimension, flow_index)
            handled = True
        except units._NotFast:
            pass
    _pint_only(monkeypatch)
    want = _outcome(text, dimension, flow_index)
    if isinstance(want, str) or isinstance(got, str):
        assert got == want          # the same CaseError, word for word
    else:
        assert got == pytest.approx(want, rel=1e-13, abs=0.0)
    assert handled == fast, "the fast reader should read this" if fast else "left to pint"


def test_random_unit_expressions_agree_with_pint():
    """Seeded random products and quotients of the table's names with exponents: every one
    the fast reader accepts has pint's SI factor and pint's dimension, exponent for
    exponent (exactly: the comparison with the wanted dimension must be pint's)."""
    rng = random.Random(11)
    names = sorted(units._FAST_UNITS)
    exponents = ["", "^2", "^3", "^-1", "**-2", "^0.5", "^(-1)", "^0.45", "^1.55", "^-0.3"]
    read = 0
    for _ in range(600):
        parts = [rng.choice(names) + rng.choice(exponents) for _ in range(rng.randint(1, 4))]
        text = parts[0]
        for part in parts[1:]:
            text += rng.choice(["*", "/", " ", " * ", " / "]) + part
        if rng.random() < 0.2:
            text = f"({text})" + rng.choice(exponents)
        if len(text) > units._MAX_UNIT_TEXT or units._unit_text_problem(text):
            continue
        try:
            factor, dims = units._fast_units(text)
        except units._NotFast:
            continue
        read += 1
        registry = units.unit_registry()
        base = registry.Quantity(1.0, registry.parse_units(text.replace("^", "**"))).to_base_units()
        assert factor == pytest.approx(base.magnitude, rel=1e-12), text
        assert dims == _pint_dims(text), text
    assert read > 300


def test_fractional_powers_read_fast_have_pint_dimensions_exactly():
    """The pairs the fast reader takes with a fractional exponent (a stress or force unit
    beside a power of a time unit, a power of a one-dimension unit beside another)
    against pint's dimension exponents, compared exactly."""
    times = sorted(n for n in units._SIMPLE if units._FAST_UNITS[n][1] == units._TIME)
    others = sorted(units._SIMPLE)
    flow_indices = [0.1, 0.2, 0.3, 0.35, 0.42, 0.45, 0.55, 0.6, 0.62, 0.7, 0.9, 1.3, 1.55]
    rng = random.Random(5)
    checked = 0
    for partner in sorted(units._ONE_TIME_TERM):
        for n in flow_indices:
            for text in (f"{partner}*{rng.choice(times)}^{n}", f"{rng.choice(times)}^{n}/{partner}",
                         f"{partner} {rng.choice(times)}^-{n}"):
                assert units._fast_units(text)[1] == _pint_dims(text), text
                checked += 1
    for first in others:
        n = rng.choice(flow_indices)
        for text in (f"{first}^{n}*{rng.choice(others)}", f"{first}^{n}/{rng.choice(others)}^{n}",
                     f"({first}*{rng.choice(others)})^-{n}"):
            try:
                dims = units._fast_units(text)[1]
            except units._NotFast:
                continue
            assert dims == _pint_dims(text), text
            checked += 1
    assert checked > 400


def test_every_name_beside_a_fractional_power_has_pint_dimensions_exactly():
    """Each name of the table times a fractional power of a unit of each base dimension:
    where the fast reader takes it, pint's dimension exponents, compared exactly (a name
    whose pint definition hides cancelling terms, like slug, must be left to pint)."""
    powers = ["m", "ft", "g", "lb", "s", "min", "K", "mol", "L", "Hz"]
    checked = 0
    for name in sorted(units._FAST_UNITS):
        for power in powers:
            for text in (f"{name}*{power}^0.45", f"{power}^0.3/{name}",
                         f"{name}^-0.7*{name}", f"{name}^0.55/{power}^-0.45"):
                try:
                    dims = units._fast_units(text)[1]
                except units._NotFast:
                    continue
                assert dims == _pint_dims(text), text
                checked += 1
    assert checked > 1000


def test_fast_reader_keeps_the_meaning_of_every_example(monkeypatch):
    """Every bundled example reads to the same SI values with and without the fast reader
    (to round-off: pint's own factors carry it, e.g. 1 L = 0.0010000000000000002 m^3)."""
    from gnflow.case import load_case

    def values(path):
        flat, pending = {}, [("", load_case(path).to_si())]
        while pending:
            prefix, table = pending.pop()
            for key, value in table.items():
                if isinstance(value, dict):
                    pending.append((f"{prefix}{key}.", value))
                else:
                    flat[prefix + key] = value
        return flat

    paths = sorted(EXAMPLES.glob("*.toml"))
    fast = {path: values(path) for path in paths}
    _pint_only(monkeypatch)
    for path in paths:
        slow = values(path)
        assert fast[path].keys() == slow.keys(), path
        for key, value in slow.items():
            if isinstance(value, float):
                assert fast[path][key] == pytest.approx(value, rel=1e-15, abs=0.0), (path, key)
            else:
                assert fast[path][key] == value, (path, key)
