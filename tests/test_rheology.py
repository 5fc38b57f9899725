"""Rheology models: analytic derivatives against finite differences, limits, validation."""

import numpy as np
import pytest

from gnflow.errors import CaseError
from gnflow.rheology import (Bingham, Carreau, CarreauYasuda, Cross, HerschelBulkley,
                             Newtonian, PowerLaw)

MODELS = [
    Newtonian(0.045),
    PowerLaw(2.5, 0.45),
    PowerLaw(0.8, 1.6),
    Carreau(12.0, 0.01, 0.7, 0.35),
    CarreauYasuda(12.0, 0.0, 0.7, 0.35, 0.8),
    CarreauYasuda(3.0, 0.1, 2.0, 1.4, 3.0),
    Cross(8.0, 0.02, 0.3, 0.75),
    Bingham(8.0, 0.05, "papanastasiou", 0.02),
    Bingham(8.0, 0.05, "bi-viscous", 1e-2),
    HerschelBulkley(8.0, 2.5, 0.45, "papanastasiou", 0.5),
    HerschelBulkley(3.0, 0.4, 1.3, "papanastasiou", 0.5),
]


@pytest.mark.parametrize("model", MODELS, ids=lambda m: f"{m.name}")
def test_derivative_matches_central_difference(model):
    rate = np.logspace(-3, 4, 57)
    step = 1e-6 * rate
    numeric = (model.viscosity(rate + step) - model.viscosity(rate - step)) / (2 * step)
    analytic = model.viscosity_derivative(rate)
    scale = np.abs(model.viscosity(rate)) / rate
    # bi-viscous has a kink at its critical rate; skip the two samples that straddle it
    mask = np.ones_like(rate, bool)
    if model.regularisation_parameter if hasattr(model, "regularisation_parameter") else False:
        if model.regularisation == "bi-viscous":
            mask = np.abs(rate - model.regularisation_parameter) > 2 * step
    assert np.allclose(analytic[mask], numeric[mask], rtol=1e-5, atol=1e-7 * scale[mask].max())


def test_papanastasiou_tends_to_bingham_for_large_exponent():
    # Papanastasiou (1987): tau -> tau_y + mu_p * rate as m * rate -> infinity
    rate = np.array([0.5, 5.0, 50.0])
    b = Bingham(8.0, 0.05, "papanastasiou", 1e4)
    assert np.allclose(b.stress(rate), 8.0 + 0.05 * rate, rtol=1e-12)


def test_papanastasiou_small_rate_series_is_continuous():
    b = Bingham(8.0, 0.05, "papanastasiou", 1.0)
    # the series branch (x < 1e-4) agrees with the closed form, which expm1 keeps exact
    x = np.array([0.5e-4, 0.999e-4])
    assert np.allclose(b.viscosity(x), 0.05 + 8.0 * -np.expm1(-x) / x, rtol=1e-14)
    step = 1e-7
    numeric = (b.viscosity(x + step) - b.viscosity(x - step)) / (2 * step)
    assert np.allclose(b.viscosity_derivative(x), numeric, rtol=1e-6)
    assert b.viscosity(np.array([0.0]))[0] == pytest.approx(0.05 + 8.0)


def test_carreau_limits():
    c = Carreau(12.0, 0.01, 0.7, 0.35)
    assert c.viscosity(np.array([0.0]))[0] == pytest.approx(12.0)
    high = c.viscosity(np.array([1e9]))[0]
    assert high == pytest.approx(0.01, rel=1e-2)


def test_power_law_stress_is_k_rate_to_n():
    p = PowerLaw(2.5, 0.45)
    assert p.stress(np.array([10.0]))[0] == pytest.approx(2.5 * 10 ** 0.45)


@pytest.mark.parametrize("factory, key", [
    (lambda: Newtonian(0.0), "viscosity"),
    (lambda: Newtonian(float("nan")), "viscosity"),
    (lambda: PowerLaw(1.0, 0.0), "flow_index"),
    (lambda: PowerLaw(-1.0, 0.5), "consistency"),
    (lambda: Carreau(1.0, 2.0, 1.0, 0.5), "infinite_shear_viscosity"),
    (lambda: Carreau(1.0, 0.0, 0.0, 0.5), "time_constant"),
    (lambda: Cross(1.0, 0.0, 1.0, -0.5), "rate_exponent"),
    (lambda: Bingham(-1.0, 0.1), "yield_stress"),
    (lambda: Bingham(1.0, 0.0), "plastic_viscosity"),
    (lambda: HerschelBulkley(1.0, 1.0, 0.5, "smooth"), "regularisation.method"),
    (lambda: CarreauYasuda(1.0, 0.0, 1.0, 0.5, 0.0), "transition_exponent"),
    (lambda: PowerLaw(1.0, float("inf")), "flow_index"),
])
def test_bad_parameters_are_refused_with_their_name(factory, key):
    with pytest.raises(CaseError) as err:
        factory()
    assert err.value.key == key
