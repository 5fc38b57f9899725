"""Generalized Newtonian viscosity models.

Each model is a small frozen dataclass with

* ``viscosity(rate)``: apparent viscosity eta(gamma_dot) in Pa s, over numpy arrays;
* ``viscosity_derivative(rate)``: d eta / d gamma_dot in Pa s^2, analytic;
* ``stress(rate)``: the flow curve tau = eta(gamma_dot) * gamma_dot in Pa.

Parameters are SI floats, validated on creation (a bad one raises
:class:`gnflow.errors.CaseError` naming the parameter as the case file does).
Rates are magnitudes, ``rate >= 0``. Models whose viscosity is unbounded as the rate
goes to zero (power-law and Herschel-Bulkley with ``n < 1``) return ``inf`` there;
the solver evaluates them above a small rate floor.

Yield-stress models (Bingham, Herschel-Bulkley) are regularised so that the viscosity
stays finite in unyielded regions:

* Papanastasiou (1987), J. Rheol. 31, 385:
  ``tau = tau_y * (1 - exp(-m * rate)) + (viscous part)``, ``m`` in seconds;
* bi-viscous: ``eta = viscous part + tau_y / max(rate, rate_c)``, i.e. a Newtonian
  response with the large viscosity ``tau_y / rate_c`` below the critical rate.

>>> import numpy as np
>>> PowerLaw(consistency=2.0, flow_index=0.5).viscosity(np.array([4.0]))
array([1.])
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .errors import CaseError, check_non_negative, check_positive

REGULARISATIONS = ("papanastasiou", "bi-viscous")


def _check_viscosity_pair(zero_shear: float, infinite_shear: float) -> None:
    check_positive("zero_shear_viscosity", zero_shear)
    check_non_negative("infinite_shear_viscosity", infinite_shear)
    if infinite_shear > zero_shear:
        raise CaseError("infinite_shear_viscosity", infinite_shear,
                        f"a value <= zero_shear_viscosity ({zero_shear:g} Pa s)")


def _relaxed_exponential(x):
    """``(1 - exp(-x)) / x`` and its derivative, accurate down to ``x = 0``."""
    x = np.asarray(x, dtype=float)
    small = x < 1e-4
    xs = np.where(small, 1.0, x)
    value = np.where(small, 1 - x / 2 + x * x / 6, -np.expm1(-xs) / xs)
    derivative = np.where(small, -0.5 + x / 3 - x * x / 8,
                          (xs * np.exp(-xs) + np.expm1(-xs)) / (xs * xs))
    return value, derivative


class Model:
    """Behaviour shared by every model; subclasses define the two viscosity methods."""

    name = "model"

    def stress(self, rate):
        """Shear stress tau = eta(rate) * rate, in Pa."""
        rate = np.asarray(rate, dtype=float)
        return self.viscosity(rate) * rate

    def stress_derivative(self, rate):
        """d tau / d rate = eta + rate * eta', the tangent viscosity, in Pa s."""
        rate = np.asarray(rate, dtype=float)
        return self.viscosity(rate) + rate * self.viscosity_derivative(rate)

    @property
    def is_yield_stress(self) -> bool:
        return getattr(self, "yield_stress", 0.0) > 0

    def parameters(self) -> dict:
        """The model's parameters in SI, keyed as in the case file."""
        return {k: v for k, v in self.__dict__.items()}


@dataclass(frozen=True)
class Newtonian(Model):
    """Newtonian fluid: ``eta = mu``.

    >>> Newtonian(viscosity=1e-3).viscosity([1.0, 100.0])
    array([0.001, 0.001])
    """

    viscosity_value: float
    name = "newtonian"

    def __init__(self, viscosity: float):
        object.__setattr__(self, "viscosity_value", check_positive("viscosity", float(viscosity)))

    def viscosity(self, rate):
        return np.full(np.shape(rate), self.viscosity_value)

    def viscosity_derivative(self, rate):
        return np.zeros(np.shape(rate))

    def parameters(self) -> dict:
        return {"viscosity": self.viscosity_value}


@dataclass(frozen=True)
class PowerLaw(Model):
    """Ostwald-de Waele power law: ``eta = K * rate**(n - 1)``.

    ``n < 1`` shear-thinning, ``n > 1`` shear-thickening. Valid only over the range of
    rates it was fitted on; it has no Newtonian plateau.

    >>> PowerLaw(consistency=0.5, flow_index=0.5).stress(np.array([16.0]))
    array([2.])
    """

    consistency: float
    flow_index: float
    name = "power-law"

    def __post_init__(self):
        check_positive("consistency", self.consistency)
        check_positive("flow_index", self.flow_index)

    def viscosity(self, rate):
        rate = np.asarray(rate, dtype=float)
        with np.errstate(divide="ignore"):
            return self.consistency * rate ** (self.flow_index - 1)

    def viscosity_derivative(self, rate):
        rate = np.asarray(rate, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.flow_index - 1) * self.consistency * rate ** (self.flow_index - 2)


@dataclass(frozen=True)
class CarreauYasuda(Model):
    """Carreau-Yasuda: ``eta = eta_inf + (eta_0 - eta_inf) (1 + (lambda rate)^a)^((n-1)/a)``.

    ``a = 2`` is the Carreau model (Bird, Armstrong & Hassager, *Dynamics of Polymeric
    Liquids*, vol. 1). Newtonian plateau ``eta_0`` below ``rate ~ 1/lambda``,
    power-law slope ``n - 1`` above it.

    >>> CarreauYasuda(1.0, 0.0, 1.0, 0.5, 2.0).viscosity(np.array([0.0]))
    array([1.])
    """

    zero_shear_viscosity: float
    infinite_shear_viscosity: float
    time_constant: float
    flow_index: float
    transition_exponent: float
    name = "carreau-yasuda"

    def __post_init__(self):
        _check_viscosity_pair(self.zero_shear_viscosity, self.infinite_shear_viscosity)
        check_positive("time_constant", self.time_constant)
        check_positive("flow_index", self.flow_index)
        check_positive("transition_exponent", self.transition_exponent)

    def viscosity(self, rate):
        a, n = self.transition_exponent, self.flow_index
        x = (self.time_constant * np.asarray(rate, dtype=float)) ** a
        return self.infinite_shear_viscosity + (
            self.zero_shear_viscosity - self.infinite_shear_viscosity) * (1 + x) ** ((n - 1) / a)

    def viscosity_derivative(self, rate):
        a, n, lam = self.transition_exponent, self.flow_index, self.time_constant
        rate = np.asarray(rate, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            lam_rate_a1 = lam * (lam * rate) ** (a - 1)  # d/d rate of (lambda rate)^a, over a
        lam_rate_a1 = np.where(rate > 0, lam_rate_a1, lam if a == 1 else 0.0)
        x = (lam * rate) ** a
        return ((self.zero_shear_viscosity - self.infinite_shear_viscosity) * (n - 1)
                * lam_rate_a1 * (1 + x) ** ((n - 1 - a) / a))


@dataclass(frozen=True)
class Carreau(CarreauYasuda):
    """Carreau: Carreau-Yasuda with ``a = 2``."""

    name = "carreau"

    def __init__(self, zero_shear_viscosity, infinite_shear_viscosity, time_constant, flow_index):
        super().__init__(zero_shear_viscosity, infinite_shear_viscosity, time_constant,
                         flow_index, 2.0)

    def parameters(self) -> dict:
        p = dict(self.__dict__)
        p.pop("transition_exponent")
        return p


@dataclass(frozen=True)
class Cross(Model):
    """Cross (1965): ``eta = eta_inf + (eta_0 - eta_inf) / (1 + (lambda rate)^m)``.

    >>> Cross(2.0, 0.0, 1.0, 1.0).viscosity(np.array([1.0]))
    array([1.])
    """

    zero_shear_viscosity: float
    infinite_shear_viscosity: float
    time_constant: float
    rate_exponent: float
    name = "cross"

    def __post_init__(self):
        _check_viscosity_pair(self.zero_shear_viscosity, self.infinite_shear_viscosity)
        check_positive("time_constant", self.time_constant)
        check_positive("rate_exponent", self.rate_exponent)

    def viscosity(self, rate):
        x = (self.time_constant * np.asarray(rate, dtype=float)) ** self.rate_exponent
        return self.infinite_shear_viscosity + (
            self.zero_shear_viscosity - self.infinite_shear_viscosity) / (1 + x)

    def viscosity_derivative(self, rate):
        m, lam = self.rate_exponent, self.time_constant
        rate = np.asarray(rate, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            dx = m * lam * (lam * rate) ** (m - 1)
        dx = np.where(rate > 0, dx, lam if m == 1 else 0.0)
        x = (lam * rate) ** m
        return -(self.zero_shear_viscosity - self.infinite_shear_viscosity) * dx / (1 + x) ** 2


@dataclass(frozen=True)
class HerschelBulkley(Model):
    """Herschel-Bulkley: ``tau = tau_y + K rate^n`` where ``tau > tau_y``, rigid elsewhere.

    Regularised for computation (``regularisation`` = "papanastasiou" or "bi-viscous",
    ``regularisation_parameter`` = the exponent ``m`` in s, or the critical rate in 1/s).
    ``n = 1`` is the Bingham plastic with plastic viscosity ``K``.

    >>> hb = HerschelBulkley(5.0, 2.0, 0.5, "papanastasiou", 1e6)
    >>> float(hb.stress(np.array([4.0]))[0])
    9.0
    """

    yield_stress: float
    consistency: float
    flow_index: float
    regularisation: str = "papanastasiou"
    regularisation_parameter: float = 1e3
    name = "herschel-bulkley"

    def __post_init__(self):
        check_non_negative("yield_stress", self.yield_stress)
        check_positive("consistency", self.consistency)
        check_positive("flow_index", self.flow_index)
        if self.regularisation not in REGULARISATIONS:
            raise CaseError("regularisation.method", self.regularisation,
                            " or ".join(f'"{r}"' for r in REGULARISATIONS))
        check_positive("regularisation.parameter", self.regularisation_parameter)

    def with_regularisation(self, parameter: float) -> "HerschelBulkley":
        """The same fluid with another regularisation parameter."""
        return replace(self, regularisation_parameter=float(parameter))

    @property
    def regularisation_unit(self) -> str:
        return "s" if self.regularisation == "papanastasiou" else "1/s"

    def _viscous(self, rate):
        with np.errstate(divide="ignore"):
            return self.consistency * rate ** (self.flow_index - 1)

    def _viscous_derivative(self, rate):
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.flow_index - 1) * self.consistency * rate ** (self.flow_index - 2)

    def viscosity(self, rate):
        rate = np.asarray(rate, dtype=float)
        m = self.regularisation_parameter
        if self.regularisation == "papanastasiou":
            plastic = self.yield_stress * m * _relaxed_exponential(m * rate)[0]
        else:
            plastic = self.yield_stress / np.maximum(rate, m)
        return self._viscous(rate) + plastic

    def viscosity_derivative(self, rate):
        rate = np.asarray(rate, dtype=float)
        m = self.regularisation_parameter
        if self.regularisation == "papanastasiou":
            plastic = self.yield_stress * m * m * _relaxed_exponential(m * rate)[1]
        else:
            safe = np.maximum(rate, m)
            plastic = np.where(rate > m, -self.yield_stress / (safe * safe), 0.0)
        return self._viscous_derivative(rate) + plastic

    def parameters(self) -> dict:
        return {"yield_stress": self.yield_stress, "consistency": self.consistency,
                "flow_index": self.flow_index}


@dataclass(frozen=True)
class Bingham(HerschelBulkley):
    """Bingham plastic: ``tau = tau_y + mu_p rate`` where ``tau > tau_y``; regularised.

    >>> b = Bingham(10.0, 0.1, "bi-viscous", 1e-3)
    >>> float(b.stress(np.array([100.0]))[0])
    20.0
    """

    name = "bingham"

    def __init__(self, yield_stress, plastic_viscosity, regularisation="papanastasiou",
                 regularisation_parameter=1e3):
        check_positive("plastic_viscosity", plastic_viscosity)
        super().__init__(yield_stress, plastic_viscosity, 1.0, regularisation,
                         regularisation_parameter)

    def with_regularisation(self, parameter: float) -> "Bingham":
        return Bingham(self.yield_stress, self.consistency, self.regularisation, float(parameter))

    @property
    def plastic_viscosity(self) -> float:
        return self.consistency

    def _viscous(self, rate):
        return np.full(np.shape(rate), self.consistency)

    def _viscous_derivative(self, rate):
        return np.zeros(np.shape(rate))

    def parameters(self) -> dict:
        return {"yield_stress": self.yield_stress, "plastic_viscosity": self.consistency}


MODELS = {
    "newtonian": Newtonian,
    "power-law": PowerLaw,
    "carreau": Carreau,
    "carreau-yasuda": CarreauYasuda,
    "cross": Cross,
    "bingham": Bingham,
    "herschel-bulkley": HerschelBulkley,
}
