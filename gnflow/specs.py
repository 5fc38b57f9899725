"""The specifications a case file's ``[heat]`` and ``[drive.slip]`` sections read into.

Plain frozen dataclasses in SI, kept apart from the solvers that use them
(:mod:`gnflow.solver.heat`, :mod:`gnflow.solver.slip`) so that reading and checking a case
(``gnflow check``) does not import the finite-element stack.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import rheology


@dataclass(frozen=True)
class TemperatureShift:
    """The viscosity shift factor ``a(T)`` and its logarithmic derivative.

    ``law = "arrhenius"``: ``ln a = E / R (1/T - 1/T_ref)`` (E in J/mol);
    ``law = "exponential"``: ``ln a = -b (T - T_ref)`` (b in 1/K; Nahme's law).

    >>> law = TemperatureShift("exponential", 0.02, 473.15)
    >>> round(float(law.shift(np.array(523.15))), 6)   # 50 K hotter: exp(-1)
    0.367879
    """

    law: str
    constant: float            # E (J/mol) or b (1/K)
    reference_temperature: float

    def log_shift(self, temperature):
        if self.law == "arrhenius":
            from .temperature import GAS_CONSTANT
            return self.constant / GAS_CONSTANT * (1.0 / temperature
                                                   - 1.0 / self.reference_temperature)
        return -self.constant * (temperature - self.reference_temperature)

    def shift(self, temperature):
        return np.exp(np.clip(self.log_shift(temperature), -700.0, 700.0))

    def log_shift_derivative(self, temperature):
        """``d ln a / dT`` (1/K)."""
        if self.law == "arrhenius":
            from .temperature import GAS_CONSTANT
            return -self.constant / (GAS_CONSTANT * temperature ** 2)
        return np.full(np.shape(temperature), -self.constant)

    def sensitivity(self, temperature: float) -> float:
        """``beta = -d ln(eta)/dT`` at a temperature (1/K): the Nahme-Griffith coefficient."""
        return float(-self.log_shift_derivative(np.array(temperature)))


@dataclass(frozen=True)
class HeatSpec:
    """The ``[heat]`` section in SI: conductivity, wall temperatures, insulated walls and
    the temperature law of the viscosity."""

    conductivity: float                          # W/(m K)
    wall_temperature: dict[str, float]           # wall name -> K (walls not insulated)
    insulated: tuple[str, ...] = ()
    shift: TemperatureShift | None = None
    reference_model: rheology.Model | None = None   # the fluid at the law's reference T



@dataclass(frozen=True)
class SlipLaw:
    """One wall's slip law, in SI.

    ``length`` (m) for Navier slip, or ``coefficient`` (m/s per Pa^exponent) with
    ``exponent``; ``yield_stress`` (Pa, default 0) below which the wall does not slip.

    >>> law = SlipLaw(coefficient=1e-4, exponent=1.0)
    >>> law.slip_speed(200.0)      # 1e-4 m/(s Pa) * 200 Pa
    0.02
    """

    length: float | None = None
    coefficient: float | None = None
    exponent: float = 1.0
    yield_stress: float = 0.0

    def slip_speed(self, stress: float, model: rheology.Model | None = None) -> float:
        """Slip speed magnitude at a wall stress magnitude (for checks and reports)."""
        excess = max(abs(stress) - self.yield_stress, 0.0)
        if excess == 0.0:
            return 0.0
        if self.length is not None:
            from .solver.scales import invert_flow_curve
            return self.length * invert_flow_curve(model, excess)
        return self.coefficient * excess ** self.exponent

    def _magnitude_law(self, magnitude, model, smoothing):
        """``G(m)`` and ``dG/dm``: the stress magnitude at the slip magnitude ``m``."""
        if self.length is not None:
            rate = magnitude / self.length
            value = model.stress(rate)
            slope = model.stress_derivative(rate) / self.length
        else:
            q = 1.0 / self.exponent
            value = (magnitude / self.coefficient) ** q
            slope = q * value / magnitude
        if self.yield_stress > 0:
            decay = np.exp(-magnitude / smoothing)
            value = value + self.yield_stress * (1 - decay)
            slope = slope + self.yield_stress * decay / smoothing
        return value, slope

    def secant(self, slip, model, smoothing):
        """``F(u_s) / u_s``: with ``F = (u_s / m) G(m)`` this is ``G(m) / m`` exactly, and
        its limit at zero slip is ``G(eps) / eps``, finite and the stiffest value (a wall
        held by a slip yield stress, or by ``p > 1``, sticks)."""
        magnitude = np.sqrt(slip * slip + smoothing * smoothing)
        value, _ = self._magnitude_law(magnitude, model, smoothing)
        return value / magnitude

    def stress(self, slip, model, smoothing):
        """``F(u_s) = (u_s / m) G(m)``, ``m = sqrt(u_s^2 + eps^2)``: the stress on the fluid
        (against the slip), and ``dF/du_s``."""
        magnitude = np.sqrt(slip * slip + smoothing * smoothing)
        sign = slip / magnitude
        value, slope = self._magnitude_law(magnitude, model, smoothing)
        # dm/du_s = sign and d(sign)/du_s = eps^2 / m^3
        return sign * value, slope * sign * sign + value * smoothing * smoothing / magnitude ** 3
