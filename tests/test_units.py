"""Unit conversions against NIST SP 811 (2008), Appendix B, conversion factors."""

import math
import subprocess
import sys

import pytest

from gnflow.errors import CaseError
from gnflow.units import quantity


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


def test_pint_is_imported_only_for_unit_strings():
    """A case of bare numbers does not pay for pint's import (start-up time)."""
    code = ("import sys; from gnflow.case import Case\n"
            "Case.from_dict({'fluid': {'model': 'newtonian', 'viscosity': 0.05},"
            " 'geometry': {'shape': 'pipe', 'radius': 0.02},"
            " 'drive': {'pressure_gradient': -100.0}})\n"
            "print('pint' in sys.modules)\n"
            "Case.from_dict({'fluid': {'model': 'newtonian', 'viscosity': '50 cP'},"
            " 'geometry': {'shape': 'pipe', 'radius': 0.02},"
            " 'drive': {'pressure_gradient': -100.0}})\n"
            "print('pint' in sys.modules)\n")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            timeout=120)
    assert result.stdout.split() == ["False", "True"], result.stderr
