"""Temperature laws: Arrhenius against water, Sutherland against a primary air correlation,
the superposition shift."""

from pathlib import Path

import numpy as np
import pytest

from gnflow.errors import CaseError
from gnflow.rheology import (Bingham, Carreau, CarreauYasuda, Cross, HerschelBulkley,
                             Newtonian, PowerLaw)
from gnflow.temperature import GAS_CONSTANT, Arrhenius, Sutherland, at_temperature

WATER = Path(__file__).parent / "data" / "water_viscosity.csv"

# Air, dilute gas: the correlation of Lemmon & Jacobsen (2004), "Viscosity and Thermal
# Conductivity Equations for Nitrogen, Oxygen, Argon, and Air", Int. J. Thermophys. 25, 21,
# eqs. (2)-(4): eta_0 = 0.0266958 sqrt(M T) / (sigma^2 Omega(T*)) micro-Pa s, with
# Omega = exp(sum b_i (ln T*)^i), T* = T / (epsilon/k). Constants for air (recalled from
# memory): M = 28.9586 g/mol, sigma = 0.360 nm, epsilon/k = 103.3 K,
# b = 0.431, -0.4623, 0.08406, 0.005341, -0.00331. The dilute-gas term is what Sutherland's
# law models; at 1 atm the density correction adds about 0.3 % at 300 K.
AIR_TEMPERATURE = np.array([150, 200, 250, 300, 350, 400, 450, 500, 600, 700, 800, 900, 1000.0])
LEMMON_JACOBSEN_AIR = {"molar_mass": 28.9586, "sigma": 0.360, "epsilon_over_k": 103.3,
                       "b": (0.431, -0.4623, 0.08406, 0.005341, -0.00331)}


def air_dilute_gas_viscosity(temperature):
    """Lemmon & Jacobsen (2004) dilute-gas viscosity of air, Pa s."""
    c = LEMMON_JACOBSEN_AIR
    log_reduced = np.log(temperature / c["epsilon_over_k"])
    collision = np.exp(sum(b * log_reduced ** i for i, b in enumerate(c["b"])))
    return 1e-6 * 0.0266958 * np.sqrt(c["molar_mass"] * temperature) / (
        c["sigma"] ** 2 * collision)


# White, Viscous Fluid Flow, sec. 1-3: Sutherland constants for air (from memory)
AIR = Sutherland(reference_viscosity=1.716e-5, reference_temperature=273.15,
                 sutherland_constant=110.4)


def water_table():
    rows = [line for line in WATER.read_text().splitlines() if not line.startswith("#")]
    table = np.array([[float(cell) for cell in row.split(",")] for row in rows[1:]])
    return table[:, 2] + 273.15, table[:, 1] * 1e-3  # K, Pa s


def arrhenius_fit(temperature, viscosity, reference):
    """Least squares in ln(mu) against 1/T: the space gnflow fit uses."""
    slope, _ = np.polyfit(1 / temperature - 1 / reference, np.log(viscosity), 1)
    law = Arrhenius(slope * GAS_CONSTANT, reference)
    mu_ref = np.exp(np.mean(np.log(viscosity) - np.log(law.shift(temperature))))
    return law, mu_ref


@pytest.mark.parametrize("low, high, tolerance", [
    (20, 80, 0.025),   # measured: 2.28 %
    (10, 90, 0.050),   # measured: 4.72 %
])
def test_water_follows_one_arrhenius_law_over_a_limited_range(low, high, tolerance):
    temperature, viscosity = water_table()
    inside = (temperature >= low + 273.15) & (temperature <= high + 273.15)
    law, mu_ref = arrhenius_fit(temperature[inside], viscosity[inside], 323.15)
    deviation = mu_ref * law.shift(temperature[inside]) / viscosity[inside] - 1
    assert np.abs(deviation).max() < tolerance
    # apparent activation energy of water's viscosity near room temperature: ~15 kJ/mol
    assert 14e3 < law.activation_energy < 16.5e3


def test_water_bends_away_from_arrhenius_over_0_to_100_degC():
    # the honest limit: one law over the whole liquid range misses by 8.7 % (measured)
    temperature, viscosity = water_table()
    law, mu_ref = arrhenius_fit(temperature, viscosity, 323.15)
    deviation = mu_ref * law.shift(temperature) / viscosity - 1
    assert 0.08 < np.abs(deviation).max() < 0.10


@pytest.mark.parametrize("low, high, tolerance", [
    (150, 450, 0.015),   # measured: 1.11 %
    (150, 1000, 0.045),  # measured: 4.05 %
])
def test_air_sutherland_matches_the_lemmon_jacobsen_correlation(low, high, tolerance):
    inside = AIR_TEMPERATURE[(AIR_TEMPERATURE >= low) & (AIR_TEMPERATURE <= high)]
    deviation = AIR.viscosity(inside) / air_dilute_gas_viscosity(inside) - 1
    assert np.abs(deviation).max() < tolerance


def test_lemmon_jacobsen_check_value_at_300_k():
    # the correlation at 300 K, worked by hand: T* = 2.904, Omega = 1.0365,
    # eta_0 = 0.0266958 * 93.21 / (0.1296 * 1.0365) = 18.52 micro-Pa s
    assert air_dilute_gas_viscosity(300.0) == pytest.approx(18.52e-6, rel=1e-3)


def test_sutherland_two_constant_form():
    # the same law as mu = beta T^1.5 / (T + S), beta = 1.458e-6 kg/(m s K^0.5)
    # (U.S. Standard Atmosphere 1976, recalled from memory)
    temperature = np.linspace(200, 1500, 14)
    assert np.allclose(AIR.viscosity(temperature),
                       1.458e-6 * temperature ** 1.5 / (temperature + 110.4), rtol=2e-4)
    assert AIR.viscosity(273.15) == pytest.approx(1.716e-5, rel=1e-15)
    assert AIR.shift(273.15) == pytest.approx(1.0)


def test_arrhenius_shift_properties():
    law = Arrhenius(40e3, 298.15)
    assert law.shift(298.15) == 1.0
    temperature = np.array([280.0, 298.15, 320.0, 350.0])
    shift = law.shift(temperature)
    assert isinstance(shift, np.ndarray) and np.all(np.diff(shift) < 0)
    # hand calculation: exp(40000 / 8.314462618 * (1/350 - 1/298.15))
    assert shift[-1] == pytest.approx(np.exp(40000 / 8.314462618 * (1 / 350 - 1 / 298.15)),
                                      rel=1e-14)
    assert law.shift(320.0) * Arrhenius(40e3, 320.0).shift(298.15) == pytest.approx(1.0)


@pytest.mark.parametrize("make", [
    lambda: Arrhenius(40e3, 0.0),
    lambda: Arrhenius(float("nan"), 300.0),
    lambda: Sutherland(-1e-5, 273.15, 110.4),
    lambda: Sutherland(1.7e-5, 273.15, 0.0),
])
def test_bad_law_parameters_raise(make):
    with pytest.raises(CaseError):
        make()


SHIFTABLE = [
    Newtonian(0.045),
    PowerLaw(2.5, 0.45),
    Carreau(12.0, 0.01, 0.7, 0.35),
    CarreauYasuda(12.0, 0.0, 0.7, 0.35, 0.8),
    Cross(8.0, 0.02, 0.3, 0.75),
    Bingham(8.0, 0.05, "papanastasiou", 0.5),
    Bingham(8.0, 0.05, "bi-viscous", 1e-2),
    HerschelBulkley(8.0, 2.5, 0.45, "papanastasiou", 0.5),
    HerschelBulkley(3.0, 0.4, 1.3, "bi-viscous", 1e-2),
]


@pytest.mark.parametrize("model", SHIFTABLE, ids=lambda m: m.name)
@pytest.mark.parametrize("factor", [0.2, 3.5])
def test_at_temperature_is_time_temperature_superposition(model, factor):
    rate = np.logspace(-3, 4, 29)
    shifted = at_temperature(model, factor)
    assert type(shifted) is type(model)
    assert np.allclose(shifted.viscosity(rate), factor * model.viscosity(factor * rate),
                       rtol=1e-12)
    if model.is_yield_stress:
        assert shifted.yield_stress == model.yield_stress


def test_at_temperature_rejects_bad_factor():
    with pytest.raises(CaseError):
        at_temperature(Newtonian(1e-3), 0.0)
