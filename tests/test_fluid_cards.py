"""Fluid definitions in cases: fit -> definition -> case -> solve, temperature laws,
extrapolation."""

import math
import tomllib

import numpy as np
import pytest

from gnflow import analytic
from gnflow.case import Case
from gnflow.errors import CaseError
from gnflow.fit import fit_models, fluid_definition, read_flow_curve
from gnflow import solve

PIPE = {"geometry": {"shape": "pipe", "radius": "12 mm"},
        "drive": {"pressure_gradient": "-6 kPa/m"}}


def test_fit_card_case_solve_round_trip(tmp_path):
    # synthetic viscometer data of a Herschel-Bulkley paste, 2 % noise (seeded)
    rng = np.random.default_rng(7)
    rate = np.logspace(-1, 3, 25)
    stress = (8.0 + 2.5 * rate ** 0.45) * (1 + 0.02 * rng.standard_normal(rate.size))
    data_file = tmp_path / "paste.csv"
    data_file.write_text("shear_rate [1/s],shear_stress [Pa]\n" + "\n".join(
        f"{g:.6g},{t:.6g}" for g, t in zip(rate, stress)))
    data = read_flow_curve(data_file)
    best = fit_models(data, ["herschel-bulkley"])[0]
    card = tomllib.loads(fluid_definition(best, data))
    assert card["fluid"]["model"] == "herschel-bulkley"
    fitted = solve(Case.from_dict({**PIPE, "fluid": card["fluid"]})).summary()
    true = solve(Case.from_dict({**PIPE, "fluid": {"model": "herschel-bulkley",
                                                    "yield_stress": 8.0, "consistency": 2.5,
                                                    "flow_index": 0.45}})).summary()
    # 2 % noise on 25 points: the fitted card predicts the flow rate within a few percent
    assert fitted["flow_rate"] == pytest.approx(true["flow_rate"], rel=0.05)
    # the card records its data range; this flow stays inside it, so no warning
    assert not [w for w in fitted["warnings"] if "extrapolated" in w]


def test_extrapolation_beyond_the_cards_rate_range_is_flagged():
    fluid = {"model": "power-law", "consistency": 2.0, "flow_index": 0.5,
             "fitted_rate_range": ["0.1 1/s", "5 1/s"]}
    summary = solve(Case.from_dict({**PIPE, "fluid": fluid})).summary()
    assert any("exceeds the highest rate" in w for w in summary["warnings"])


def test_arrhenius_card_shifts_the_consistency():
    """At 60 degC with E_a = 40 kJ/mol and T_ref = 25 degC the viscosity falls by
    a_T = exp(E_a/R (1/T - 1/T_ref)); a power law's K scales by a_T^n."""
    fluid = {"model": "power-law", "consistency": 2.0, "flow_index": 0.5,
             "temperature_law": "arrhenius", "activation_energy": "40 kJ/mol",
             "reference_temperature": "25 degC", "temperature": "60 degC"}
    summary = solve(Case.from_dict({**PIPE, "fluid": fluid})).summary()
    a_t = math.exp(40e3 / 8.314462618 * (1 / 333.15 - 1 / 298.15))  # R: CODATA 2018
    exact = analytic.pipe_power_law(0.012, 2.0 * a_t ** 0.5, 0.5, -6000.0).flow_rate
    assert summary["flow_rate"] == pytest.approx(exact, rel=1e-6)
    assert summary["temperature_law"]["shift_factor"] == pytest.approx(a_t, rel=1e-9)


def test_sutherland_card_for_air():
    """Air at 300 K: Sutherland's law with White's constants (mu_0 = 1.716e-5 Pa s at
    273.15 K, S = 110.4 K; White, Viscous Fluid Flow, Table 1-2, recalled from memory)
    evaluates to 1.716e-5 (300/273.15)^1.5 383.55/410.4 = 1.846e-5 Pa s, within 0.4 % of
    the Lemmon & Jacobsen (2004) dilute-gas correlation for air (1.852e-5 Pa s; see
    tests/test_temperature.py)."""
    fluid = {"model": "newtonian", "viscosity": "1.716e-5 Pa*s", "temperature_law": "sutherland",
             "reference_temperature": "273.15 K", "sutherland_constant": "110.4 K",
             "temperature": "300 K"}
    case = Case.from_dict({**PIPE, "fluid": fluid})
    assert case.fluid.model.viscosity_value == pytest.approx(1.846e-5, rel=1e-3)


@pytest.mark.parametrize("fluid, key", [
    ({"model": "newtonian", "viscosity": 1.0, "temperature": "40 degC"}, "fluid.temperature"),
    ({"model": "power-law", "consistency": 1.0, "flow_index": 0.5,
      "temperature_law": "sutherland", "reference_temperature": 300.0,
      "sutherland_constant": 110.0}, "fluid.temperature_law"),
    ({"model": "newtonian", "viscosity": 1.0, "temperature_law": "arrhenius",
      "reference_temperature": "25 degC"}, "fluid.activation_energy"),
    ({"model": "newtonian", "viscosity": 1.0, "temperature_law": "arrhenius",
      "activation_energy": "30 kJ/mol", "reference_temperature": "-300 degC"},
     "fluid.reference_temperature"),
    ({"model": "newtonian", "viscosity": 1.0, "temperature_law": "arrhenius",
      "activation_energy": "30 kg", "reference_temperature": "25 degC"},
     "fluid.activation_energy"),
])
def test_bad_temperature_keys(fluid, key):
    with pytest.raises(CaseError) as err:
        Case.from_dict({**PIPE, "fluid": fluid})
    assert key in str(err.value)


def test_temperature_card_round_trip(tmp_path):
    """A definition fitted on data at 20, 40 and 60 degC (Arrhenius, 35 kJ/mol) predicts the flow
    at 50 degC; the same definition at 90 degC warns that it is extrapolated in temperature."""
    rng = np.random.default_rng(11)
    rows = []
    for celsius in (20.0, 40.0, 60.0):
        shift = math.exp(35e3 / 8.314462618 * (1 / (celsius + 273.15) - 1 / 313.15))
        for rate in np.logspace(-1, 3, 12):
            stress = 3.0 * (shift * rate) ** 0.5 * (1 + 0.01 * rng.standard_normal())
            rows.append(f"{rate:.6g},{stress:.6g},{celsius}")
    data_file = tmp_path / "solution.csv"
    data_file.write_text("shear_rate [1/s],shear_stress [Pa],temperature [degC]\n"
                         + "\n".join(rows))
    data = read_flow_curve(data_file)
    card = tomllib.loads(fluid_definition(fit_models(data, ["power-law"])[0], data))["fluid"]
    assert card["temperature_law"] == "arrhenius"
    warm = solve(Case.from_dict({**PIPE, "fluid": {**card, "temperature": "50 degC"}})).summary()
    shift = math.exp(35e3 / 8.314462618 * (1 / 323.15 - 1 / 313.15))
    exact = analytic.pipe_power_law(0.012, 3.0 * shift ** 0.5, 0.5, -6000.0).flow_rate
    assert warm["flow_rate"] == pytest.approx(exact, rel=0.05)
    assert not [w for w in warm["warnings"] if "temperature" in w]
    hot = solve(Case.from_dict({**PIPE, "fluid": {**card, "temperature": "90 degC"}})).summary()
    assert any("outside the fluid definition's data" in w for w in hot["warnings"])
