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
* bi-viscous (O'Donovan & Tanner 1984, J. Non-Newtonian Fluid Mech. 15):
  ``eta = viscous part + tau_y / max(rate, rate_c)``, i.e. a Newtonian response with the
  large viscosity ``tau_y / rate_c`` below the critical rate.

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


def _log(x):
    """Natural log of a non-negative array, ``-inf`` at 0 without a warning."""
    with np.errstate(divide="ignore"):
        return np.log(np.asarray(x, dtype=float))


def _exp(x):
    """``exp`` that returns ``inf`` (without a warning) where the true value is beyond
    the float range: the model evaluations below form their results in log space, so an
    overflow here is a value that really is that large, not an intermediate one."""
    with np.errstate(over="ignore"):
        return np.exp(x)


def _power(rate, exponent: float):
    """``rate ** exponent`` for ``rate >= 0``: ``inf`` (no warning, no exception) where the
    true value is beyond the float range or the rate is 0 and the exponent negative."""
    with np.errstate(over="ignore", divide="ignore"):
        return np.power(np.asarray(rate, dtype=float), exponent)


def _softplus(t):
    """``log(1 + exp(t))`` without overflow for large ``t`` (``t`` may be -inf)."""
    t = np.asarray(t, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.maximum(t, 0.0) + np.log1p(np.exp(-np.abs(t)))


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
    """Ostwald-de Waele power law: ``eta = K * rate**(n - 1)`` (Ostwald 1925, Kolloid-Z.
    36; de Waele 1923, J. Oil Colour Chem. Assoc. 6; both recalled from memory).

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
        return self.consistency * _power(rate, self.flow_index - 1)

    def viscosity_derivative(self, rate):
        return (self.flow_index - 1) * self.consistency * _power(rate, self.flow_index - 2)

    def stress(self, rate):
        return self.consistency * _power(rate, self.flow_index)


@dataclass(frozen=True)
class CarreauYasuda(Model):
    """Carreau-Yasuda: ``eta = eta_inf + (eta_0 - eta_inf) (1 + (lambda rate)^a)^((n-1)/a)``.

    ``a = 2`` is the Carreau model (Carreau 1972, Trans. Soc. Rheol. 16; Bird, Armstrong &
    Hassager, *Dynamics of Polymeric Liquids*, vol. 1); the exponent ``a`` is Yasuda's
    (Yasuda, Armstrong & Cohen 1981, Rheol. Acta 20; recalled from memory). Valid for
    ``rate >= 0``; evaluated in log space so that large ``lambda rate`` cannot overflow. Newtonian plateau ``eta_0`` below ``rate ~ 1/lambda``,
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
        # (1 + x)^((n-1)/a) with x = (lambda rate)^a, formed in log space: x alone
        # overflows long before the viscosity leaves the float range
        a, n = self.transition_exponent, self.flow_index
        log_x = a * (np.log(self.time_constant) + _log(rate))
        return self.infinite_shear_viscosity + (
            self.zero_shear_viscosity - self.infinite_shear_viscosity) * _exp(
                (n - 1) / a * _softplus(log_x))

    def viscosity_derivative(self, rate):
        # (eta_0 - eta_inf) (n - 1) lambda (lambda rate)^(a-1) (1 + x)^((n-1-a)/a)
        a, n, lam = self.transition_exponent, self.flow_index, self.time_constant
        rate = np.asarray(rate, dtype=float)
        log_lr = np.log(lam) + _log(rate)
        with np.errstate(invalid="ignore"):
            magnitude = lam * _exp((a - 1) * log_lr + (n - 1 - a) / a * _softplus(a * log_lr))
        magnitude = np.where(rate > 0, magnitude, lam if a == 1 else 0.0)
        return (self.zero_shear_viscosity - self.infinite_shear_viscosity) * (n - 1) * magnitude


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
    """Cross (1965, J. Colloid Sci. 20): ``eta = eta_inf + (eta_0 - eta_inf) / (1 + (lambda rate)^m)``.

    Valid for ``rate >= 0``; evaluated in log space (large ``lambda rate`` cannot overflow).

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
        # 1 / (1 + x) = exp(-log(1 + x)), x = (lambda rate)^m, in log space
        log_x = self.rate_exponent * (np.log(self.time_constant) + _log(rate))
        return self.infinite_shear_viscosity + (
            self.zero_shear_viscosity - self.infinite_shear_viscosity) * _exp(-_softplus(log_x))

    def viscosity_derivative(self, rate):
        # -(eta_0 - eta_inf) m lambda (lambda rate)^(m-1) / (1 + x)^2, in log space
        m, lam = self.rate_exponent, self.time_constant
        rate = np.asarray(rate, dtype=float)
        log_lr = np.log(lam) + _log(rate)
        with np.errstate(invalid="ignore"):
            magnitude = m * lam * _exp((m - 1) * log_lr - 2 * _softplus(m * log_lr))
        magnitude = np.where(rate > 0, magnitude, lam if m == 1 else 0.0)
        return -(self.zero_shear_viscosity - self.infinite_shear_viscosity) * magnitude


@dataclass(frozen=True)
class HerschelBulkley(Model):
    """Herschel-Bulkley: ``tau = tau_y + K rate^n`` where ``tau > tau_y``, rigid elsewhere
    (Herschel & Bulkley 1926, Kolloid-Z. 39).

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
        return self.consistency * _power(rate, self.flow_index - 1)

    def _viscous_derivative(self, rate):
        return (self.flow_index - 1) * self.consistency * _power(rate, self.flow_index - 2)

    def viscosity(self, rate):
        rate = np.asarray(rate, dtype=float)
        m = self.regularisation_parameter
        if self.regularisation == "papanastasiou":
            # tau_y m (1 - exp(-x)) / x with x = m rate: taken as tau_y (1 - exp(-x)) / rate
            # where x is not small, so that no power of m can overflow for a very sharp
            # regularisation; the series 1 - x/2 + x^2/6 below x = 1e-4
            # (the series only where it is used, and the rest in place: 3M points of a
            # 1M-unknown section took 46 ms, most of it in temporaries)
            x = m * rate
            small = x < 1e-4
            plastic = np.expm1(-x)
            np.multiply(plastic, -self.yield_stress, out=plastic)
            with np.errstate(divide="ignore", invalid="ignore"):
                np.divide(plastic, rate, out=plastic)
            if np.any(small):
                xs = x[small]
                with np.errstate(over="ignore"):
                    plastic[small] = self.yield_stress * m * (1 - xs / 2 + xs * xs / 6)
        else:
            plastic = self.yield_stress / np.maximum(rate, m)
        return self._viscous(rate) + plastic

    def viscosity_derivative(self, rate):
        rate = np.asarray(rate, dtype=float)
        m = self.regularisation_parameter
        if self.regularisation == "papanastasiou":
            # tau_y m^2 f'(x) = tau_y (x e^-x - (1 - e^-x)) / rate^2 where x is not small;
            # the series tau_y m^2 (-1/2 + x/3 - x^2/8) below x = 1e-4
            x = m * rate
            small = x < 1e-4
            negative = -x
            with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
                plastic = np.exp(negative)
                plastic *= x
                plastic += np.expm1(negative, out=negative)
                plastic *= self.yield_stress
                plastic /= rate * rate
            if np.any(small):
                xs = x[small]
                with np.errstate(over="ignore", under="ignore"):
                    plastic[small] = self.yield_stress * m * m * (-0.5 + xs / 3 - xs * xs / 8)
        else:
            safe = np.maximum(rate, m)
            plastic = np.where(rate > m, -self.yield_stress / (safe * safe), 0.0)
        return self._viscous_derivative(rate) + plastic

    def stress(self, rate):
        """tau = K rate^n + the regularised yield term; finite at rate = 0."""
        rate = np.asarray(rate, dtype=float)
        m = self.regularisation_parameter
        if self.regularisation == "papanastasiou":
            plastic = -self.yield_stress * np.expm1(-m * rate)
        else:
            plastic = self.yield_stress * rate / np.maximum(rate, m)
        return self.consistency * _power(rate, self.flow_index) + plastic

    def parameters(self) -> dict:
        return {"yield_stress": self.yield_stress, "consistency": self.consistency,
                "flow_index": self.flow_index}


@dataclass(frozen=True)
class Bingham(HerschelBulkley):
    """Bingham plastic: ``tau = tau_y + mu_p rate`` where ``tau > tau_y``; regularised
    (Bingham 1916, US Bur. Stand. Bull. 13; Bingham 1922, *Fluidity and Plasticity*).

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
