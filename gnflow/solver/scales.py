"""Rate scales of a case: the characteristic shear rate, whether it yields, and the
regularisation the flow's own rates call for."""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from .. import rheology
from ..case import Case
from ..geometry import Domain


#: Papanastasiou exponent m (or the bi-viscous critical rate) is set so that
#: m * (largest shear rate of the flow) = REGULARISATION_SHARPNESS; the tests show the
#: flow-rate error against the exact Bingham solution stays below 0.1 % up to Bn = 10
#: (measured: the error falls as 1/sharpness, 4e-4 at Bn = 20 in a pipe).
REGULARISATION_SHARPNESS = 2e3

def invert_flow_curve(model: rheology.Model, stress: float) -> float:
    """The shear rate at which the model's stress equals ``stress`` (> 0)."""
    def gap(log_rate):
        return float(model.stress(np.array([math.exp(log_rate)]))[0]) - stress
    low, high = -60.0, 60.0
    if gap(low) >= 0:
        return math.exp(low)
    if gap(high) <= 0:
        return math.exp(high)
    return math.exp(brentq(gap, low, high, xtol=1e-10))


def characteristic_rate(case: Case, domain: Domain, model: rheology.Model) -> float:
    """A shear rate typical of the flow, from the drive and the fluid (1/s)."""
    L = domain.length_scale
    d = case.drive
    rates = []
    if domain.kind == "rotational":
        r_mean = 0.5 * (case.geometry.inner_radius + case.geometry.outer_radius)
        rates.append(abs(d.inner_angular_speed - d.outer_angular_speed) * r_mean / L)
    else:
        speeds = list(d.wall_speed.values()) + [0.0]
        if max(speeds) != min(speeds):
            rates.append((max(speeds) - min(speeds)) / L)
        if d.pressure_gradient:
            wall_stress = abs(d.pressure_gradient) * L / 2
            yield_stress = model.yield_stress if model.is_yield_stress else 0.0
            if wall_stress > 1.001 * yield_stress:
                # the rate the yielded fluid has at the wall
                rates.append(invert_flow_curve(_viscous_part(model), wall_stress - yield_stress))
            else:
                # it may not yield at all: a creep scale well below the viscous one
                rates.append(1e-3 * invert_flow_curve(_viscous_part(model), wall_stress))
        if d.flow_rate is not None:
            rates.append(6 * abs(d.flow_rate) / domain.area / L)
    return max(max(rates), 1e-300)


def expected_to_yield(case: Case, domain: Domain, model: rheology.Model) -> bool:
    """Whether the drive's wall-stress scale exceeds the yield stress (always true for
    flows driven by wall motion or a flow rate, which must yield somewhere)."""
    if not model.is_yield_stress or domain.kind != "axial" or not case.drive.pressure_gradient:
        return True
    if case.drive.wall_speed and any(case.drive.wall_speed.values()):
        return True
    return abs(case.drive.pressure_gradient) * domain.length_scale / 2 > model.yield_stress


def _viscous_part(model: rheology.Model) -> rheology.Model:
    """The model without its yield stress (for rate scales of yield-stress fluids)."""
    if model.is_yield_stress:
        return rheology.PowerLaw(model.consistency, model.flow_index)
    return model


def default_regularisation(model: rheology.Model, largest_rate: float) -> float:
    """The regularisation parameter for a flow whose largest shear rate is given.

    Papanastasiou exponent ``m = REGULARISATION_SHARPNESS / rate`` (s), or the
    bi-viscous critical rate ``rate / REGULARISATION_SHARPNESS`` (1/s).
    """
    if model.regularisation == "papanastasiou":
        return REGULARISATION_SHARPNESS / largest_rate
    return largest_rate / REGULARISATION_SHARPNESS
