"""Temperature laws: how a fluid definition's viscosity follows the temperature.

Two laws, each a frozen dataclass holding SI floats:

* :class:`Arrhenius`, for liquids: a shift factor ``a_T`` relative to a reference
  temperature, applied by time-temperature superposition (:func:`at_temperature`);
* :class:`Sutherland`, for Newtonian gases: the viscosity itself as a function of ``T``.

Temperatures are absolute, in kelvin.

>>> round(Arrhenius(15e3, 293.15).shift(313.15), 4)
0.675
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import CaseError, check_positive
from .rheology import (Bingham, Carreau, CarreauYasuda, Cross, HerschelBulkley, Model,
                       Newtonian, PowerLaw)

#: molar gas constant, J/(mol K); exact in the 2019 SI (CODATA 2018)
GAS_CONSTANT = 8.314462618


def _check_temperature(key: str, temperature: float) -> float:
    if not (temperature > 0 and math.isfinite(temperature)):
        raise CaseError(key, temperature, "an absolute temperature > 0 K")
    return temperature


@dataclass(frozen=True)
class Arrhenius:
    """Arrhenius shift of the viscosity of a liquid.

    ``a_T = exp(E_a / R * (1/T - 1/T_ref))``, with ``E_a`` the activation energy of flow
    (J/mol), ``R`` the molar gas constant and ``T_ref`` the reference temperature (K) at
    which the fluid definition's parameters hold; ``a_T(T_ref) = 1``. A positive ``E_a`` makes
    the liquid thinner as it warms.

    Validity: liquids well above their glass transition, over a limited span of
    temperature; the wider the span, the more ``ln(eta)`` bends away from a straight line
    in ``1/T``. For water (IAPWS 2008 values, 0.1 MPa) one law fitted in ``ln(eta)``
    stays within 2.3 % over 20-80 degC and 4.7 % over 10-90 degC, but only 8.7 % over
    0-100 degC (measured in ``tests/test_temperature.py``).
    Source: Arrhenius' rate law as applied to the viscosity of liquids (Andrade 1930;
    Bird, Stewart & Lightfoot, *Transport Phenomena*, sec. 1.5).

    Worked example: water-like ``E_a = 15 kJ/mol``, ``T_ref = 20 degC``; at 40 degC
    ``a_T = exp(15000 / 8.3145 * (1/313.15 - 1/293.15)) = 0.675``, so 1.002 mPa s at
    20 degC becomes 0.676 mPa s (the IAPWS 2008 formulation, Huber et al. 2009, gives
    0.653 mPa s).

    >>> law = Arrhenius(activation_energy=15e3, reference_temperature=293.15)
    >>> round(1.002e-3 * law.shift(313.15), 7)
    0.0006763
    >>> law.shift(293.15)
    1.0
    """

    activation_energy: float
    reference_temperature: float

    def __post_init__(self):
        if not math.isfinite(self.activation_energy):
            raise CaseError("activation_energy", self.activation_energy, "a finite number in J/mol")
        _check_temperature("reference_temperature", self.reference_temperature)

    def shift(self, temperature):
        """The viscosity factor ``a_T`` at ``temperature`` (K; a float or numpy array)."""
        temperature = np.asarray(temperature, dtype=float)
        factor = np.exp(self.activation_energy / GAS_CONSTANT
                        * (1.0 / temperature - 1.0 / self.reference_temperature))
        return float(factor) if factor.ndim == 0 else factor


@dataclass(frozen=True)
class Sutherland:
    """Sutherland's law for the viscosity of a dilute gas.

    ``mu(T) = mu_ref * (T / T_ref)^(3/2) * (T_ref + S) / (T + S)``, with ``mu_ref`` the
    viscosity at ``T_ref`` and ``S`` the Sutherland constant (K).

    Validity: dilute gases away from condensation; the viscosity does not depend on
    pressure there. For air with ``mu_ref = 1.716e-5 Pa s``, ``T_ref = 273.15 K``,
    ``S = 110.4 K`` (White, *Viscous Fluid Flow*, sec. 1-3; the same ``S`` as the U.S.
    Standard Atmosphere 1976) it agrees with the dilute-gas air correlation of Lemmon &
    Jacobsen (2004), Int. J. Thermophys. 25, 21, within 1.2 % over 150-450 K and 4.1 %
    over 150-1000 K (measured in ``tests/test_temperature.py``).
    Source: Sutherland (1893), Phil. Mag. 36, 507.

    Worked example, air at 300 K:
    ``1.716e-5 * (300/273.15)^1.5 * 383.55 / 410.4 = 1.846e-5 Pa s``.

    >>> air = Sutherland(1.716e-5, 273.15, 110.4)
    >>> round(air.viscosity(300.0), 9)
    1.8459e-05
    """

    reference_viscosity: float
    reference_temperature: float
    sutherland_constant: float

    def __post_init__(self):
        check_positive("reference_viscosity", self.reference_viscosity)
        _check_temperature("reference_temperature", self.reference_temperature)
        check_positive("sutherland_constant", self.sutherland_constant)

    def viscosity(self, temperature):
        """The viscosity in Pa s at ``temperature`` (K; a float or numpy array)."""
        temperature = np.asarray(temperature, dtype=float)
        mu = (self.reference_viscosity * (temperature / self.reference_temperature) ** 1.5
              * (self.reference_temperature + self.sutherland_constant)
              / (temperature + self.sutherland_constant))
        return float(mu) if mu.ndim == 0 else mu

    def shift(self, temperature):
        """The viscosity factor ``mu(T) / mu_ref``, as :meth:`Arrhenius.shift`."""
        return self.viscosity(temperature) / self.reference_viscosity


def at_temperature(model: Model, shift_factor: float) -> Model:
    """The fluid at another temperature, by time-temperature superposition.

    ``eta_T(rate) = a_T * eta_ref(a_T * rate)``: the viscosity scales by ``a_T`` and every
    characteristic rate by ``1 / a_T``; in stress, ``tau_T(rate) = tau_ref(a_T * rate)``,
    so a yield stress does not change with temperature. For the parameters this means
    ``mu, eta_0, eta_inf, mu_p -> a_T x``; ``lambda -> a_T lambda``;
    ``K -> a_T^n K``. The regularisation parameter of a yield-stress model is shifted too
    (Papanastasiou ``m -> a_T m``, bi-viscous critical rate ``-> rate_c / a_T``), so the
    identity above holds exactly for the regularised model. This is the shift that
    ``gnflow fit`` fits with a temperature column (Ferry, *Viscoelastic Properties of
    Polymers*, ch. 11: the method of reduced variables).

    >>> hot = at_temperature(PowerLaw(consistency=2.0, flow_index=0.5), 0.25)
    >>> hot.parameters()
    {'consistency': 1.0, 'flow_index': 0.5}
    """
    a = check_positive("temperature shift factor", float(shift_factor))
    if isinstance(model, Newtonian):
        return Newtonian(a * model.viscosity_value)
    if isinstance(model, PowerLaw):
        return PowerLaw(model.consistency * a ** model.flow_index, model.flow_index)
    if isinstance(model, HerschelBulkley):  # Bingham included
        m = model.regularisation_parameter
        m = a * m if model.regularisation == "papanastasiou" else m / a
        if isinstance(model, Bingham):
            return Bingham(model.yield_stress, a * model.consistency, model.regularisation, m)
        return HerschelBulkley(model.yield_stress, model.consistency * a ** model.flow_index,
                               model.flow_index, model.regularisation, m)
    if isinstance(model, Carreau):
        return Carreau(a * model.zero_shear_viscosity, a * model.infinite_shear_viscosity,
                       a * model.time_constant, model.flow_index)
    if isinstance(model, CarreauYasuda):
        return CarreauYasuda(a * model.zero_shear_viscosity, a * model.infinite_shear_viscosity,
                             a * model.time_constant, model.flow_index,
                             model.transition_exponent)
    if isinstance(model, Cross):
        return Cross(a * model.zero_shear_viscosity, a * model.infinite_shear_viscosity,
                     a * model.time_constant, model.rate_exponent)
    raise TypeError(f"no temperature shift defined for {type(model).__name__}")
