"""Separating wall slip from bulk flow: the Mooney (1931) analysis of several gaps or radii.

A fluid that slips at the wall makes a passage look wider than it is. Measured at the
same wall shear stress in passages of different size, the part of the flow rate that the
bulk carries scales with the size in a known way, and the slip part does not:

* pipes of radius ``R``: ``4 Q / (pi R^3) = 4 u_s / R + phi(tau_w)``, so at fixed ``tau_w``
  the apparent shear rate ``4Q/(pi R^3)`` is linear in ``1/R`` with slope ``4 u_s``;
* slits of gap ``h`` (per unit width): ``6 q / h^2 = 6 u_s / h + psi(tau_w)``, slope
  ``6 u_s`` against ``1/h``;

(Mooney 1931, J. Rheol. 2, 210; the slit form follows in the same way from the stress
distribution ``tau = tau_w (2y/h - 1)``.) Repeating at several wall stresses gives the
slip law ``u_s(tau_w)``; :func:`fit_slip_law` fits ``u_s = beta (tau_w - tau_s)^p``
(``tau_s`` optional) to those points, and ``phi(tau_w)`` (the intercepts) is the flow
curve of the bulk, free of slip.

>>> radii = [0.002, 0.004, 0.008]; u_s = 0.01; phi = 50.0
>>> rates = [4 * u_s / R + phi for R in radii]   # 4Q/(pi R^3) at one wall stress
>>> point = slip_at_stress("pipe", radii, [r * 3.141592653589793 * R ** 3 / 4
...                                        for r, R in zip(rates, radii)])
>>> round(point.slip_speed, 6), round(point.bulk_rate, 3)
(0.01, 50.0)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .errors import CaseError


@dataclass(frozen=True)
class MooneyPoint:
    """The slip speed and bulk apparent shear rate at one wall stress."""

    slip_speed: float        # m/s
    bulk_rate: float         # 1/s: 4Q/(pi R^3) or 6q/h^2 with the slip removed
    residual: float          # RMS misfit of the straight line, relative to the mean rate


def _apparent_rates(shape: str, sizes, flow_rates) -> tuple[np.ndarray, float]:
    sizes = np.asarray(sizes, dtype=float)
    flow_rates = np.asarray(flow_rates, dtype=float)
    if shape == "pipe":
        return 4 * flow_rates / (math.pi * sizes ** 3), 4.0
    if shape == "slit":
        return 6 * flow_rates / sizes ** 2, 6.0
    raise CaseError("mooney.shape", shape, '"pipe" or "slit"')


def slip_at_stress(shape: str, sizes, flow_rates) -> MooneyPoint:
    """Mooney's straight line at one wall stress: ``sizes`` (radii or gaps, m) and the
    flow rates measured (or computed) there at the same wall shear stress."""
    if len(sizes) < 2 or len(set(float(s) for s in sizes)) < 2:
        raise CaseError("mooney", sizes, "at least two different radii or gaps")
    rates, factor = _apparent_rates(shape, sizes, flow_rates)
    inverse = 1.0 / np.asarray(sizes, dtype=float)
    slope, intercept = np.polyfit(inverse, rates, 1)
    misfit = rates - (slope * inverse + intercept)
    scale = max(float(np.mean(np.abs(rates))), 1e-300)
    return MooneyPoint(float(slope / factor), float(intercept),
                       float(np.sqrt(np.mean(misfit ** 2)) / scale))


@dataclass(frozen=True)
class SlipFit:
    """``u_s = coefficient (tau_w - yield_stress)^exponent`` fitted to Mooney points."""

    coefficient: float       # m/s per Pa^exponent
    exponent: float
    yield_stress: float      # Pa
    rms_relative_error: float

    def as_table(self) -> dict:
        """The slip law as a case-file table for a wall (SI numbers)."""
        table = {"slip_coefficient": self.coefficient, "slip_exponent": self.exponent}
        if self.yield_stress > 0:
            table["slip_yield_stress"] = self.yield_stress
        return table


def fit_slip_law(wall_stresses, slip_speeds, with_yield_stress: bool = False) -> SlipFit:
    """Fit a power-law slip law (optionally with a slip yield stress) in log space."""
    stress = np.asarray(wall_stresses, dtype=float)
    speed = np.asarray(slip_speeds, dtype=float)
    keep = (stress > 0) & (speed > 0)
    needed = 3 if with_yield_stress else 2
    if keep.sum() < needed:
        raise CaseError("mooney", int(keep.sum()),
                        f"at least {needed} wall stresses with a positive slip speed")
    stress, speed = stress[keep], speed[keep]

    def misfit(p):
        log_beta, exponent = p[0], p[1]
        tau_s = p[2] if with_yield_stress else 0.0
        excess = np.maximum(stress - tau_s, 1e-300)
        return log_beta + exponent * np.log(excess) - np.log(speed)

    slope, intercept = np.polyfit(np.log(stress), np.log(speed), 1)
    start = [intercept, slope] + ([0.5 * stress.min()] if with_yield_stress else [])
    bounds = ([-np.inf, 0.05] + ([0.0] if with_yield_stress else []),
              [np.inf, 10.0] + ([0.999 * stress.min()] if with_yield_stress else []))
    result = least_squares(misfit, start, bounds=bounds, x_scale="jac")
    beta, exponent = math.exp(result.x[0]), float(result.x[1])
    tau_s = float(result.x[2]) if with_yield_stress else 0.0
    rms = float(np.sqrt(np.mean(np.expm1(result.fun) ** 2)))
    return SlipFit(beta, exponent, tau_s, rms)
