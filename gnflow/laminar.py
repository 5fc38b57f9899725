"""Laminar limits: the Reynolds number past which laminar results no longer hold.

Pure functions, no solver: each gives a published criterion for the end of laminar flow
in a straight passage, for the Reynolds number definition that criterion was built on.

* Newtonian and other fluids: 2100, common practice for pipes (the transition begins
  between about 2000 and 2300).
* Power-law fluids: Ryan & Johnson (1959), AIChE J. 5, 433, on the Metzner-Reed
  Reynolds number (Metzner & Reed 1955, AIChE J. 1, 434).
* Bingham plastics: Hanks (1963), AIChE J. 9, 306, on the plastic Reynolds number
  ``rho V D / mu_p``, as a function of the Hedstrom number (Hedstrom 1952, Ind. Eng.
  Chem. 44, 651; journal recalled from memory).

For passages other than round pipes the criteria are applied with the hydraulic
diameter, which is common practice and no more than a guide; results say so with
:data:`APPROXIMATE_OFF_PIPE`.

>>> round(ryan_johnson_critical_reynolds(1.0))
2099
>>> round(hanks_critical_reynolds(0.0))
2100
"""

from __future__ import annotations

import math

from scipy.optimize import brentq

#: Laminar limit for Newtonian pipe flow and for models without a criterion of their own
#: (common practice)
COMMON_PRACTICE_REYNOLDS = 2100.0
COMMON_PRACTICE = "2100, common practice for pipes"

#: the label of a pipe criterion applied to another shape
APPROXIMATE_OFF_PIPE = "approximate (pipe criterion applied through the hydraulic diameter)"

#: the constant 16800 of Hanks' plug-ratio equation (Hanks 1963)
_HANKS_CONSTANT = 16800.0


def ryan_johnson_critical_reynolds(flow_index: float) -> float:
    """Critical Metzner-Reed Reynolds number of a power-law fluid in a pipe.

    Formula (Ryan & Johnson 1959, AIChE J. 5, 433, from a stability parameter of the
    laminar velocity profile)::

        Re_MR,c = 6464 n (2 + n)^((2 + n)/(1 + n)) / (1 + 3 n)^2

    Valid for power-law fluids in round pipes, flow index ``n > 0``; it gives 2099 at
    ``n = 1`` and peaks near 2400 at ``n`` about 0.4. The Reynolds number it applies to
    is the Metzner-Reed one, ``rho V^(2-n) D^n / (K 8^(n-1) ((3n+1)/(4n))^n)``.

    Worked example: ``n = 0.5`` gives ``6464 * 0.5 * 2.5^(5/3) / 2.5^2
    = 3232 * 4.6050 / 6.25 = 2381``:

    >>> round(ryan_johnson_critical_reynolds(0.5))
    2381
    """
    n = float(flow_index)
    if not n > 0 or not math.isfinite(n):
        raise ValueError(f"flow_index must be a finite number > 0, got {flow_index!r}")
    return 6464.0 * n * (2.0 + n) ** ((2.0 + n) / (1.0 + n)) / (1.0 + 3.0 * n) ** 2


def hedstrom_number(density: float, yield_stress: float, plastic_viscosity: float,
                    diameter: float) -> float:
    """Hedstrom number of a Bingham plastic: ``He = rho tau_y D^2 / mu_p^2``.

    SI inputs (kg/m^3, Pa, Pa s, m); dimensionless. Hedstrom (1952) introduced it for
    Bingham flow in pipes; it is the product of the plastic Reynolds number and the
    Bingham number, so it does not depend on the flow rate.

    Worked example: a mud of 1200 kg/m^3, 5 Pa, 0.02 Pa s in a 0.1 m pipe:
    ``1200 * 5 * 0.01 / 4e-4 = 150000``:

    >>> round(hedstrom_number(1200.0, 5.0, 0.02, 0.1), 6)
    150000.0
    """
    for name, value in (("density", density), ("plastic_viscosity", plastic_viscosity),
                        ("diameter", diameter)):
        if not value > 0 or not math.isfinite(value):
            raise ValueError(f"{name} must be a finite number > 0, got {value!r}")
    if not yield_stress >= 0 or not math.isfinite(yield_stress):
        raise ValueError(f"yield_stress must be a finite number >= 0, got {yield_stress!r}")
    return float(density) * float(yield_stress) * float(diameter) ** 2 / float(
        plastic_viscosity) ** 2


def hanks_critical_plug_ratio(hedstrom: float) -> float:
    """Hanks' critical plug ratio ``phi_c = tau_y / tau_w`` at the end of laminar flow.

    The root in ``0 <= phi_c < 1`` of ``phi_c / (1 - phi_c)^3 = He / 16800`` (Hanks
    1963, AIChE J. 9, 306). The left side rises monotonically from 0 to infinity, so the
    root is unique.

    >>> round(hanks_critical_plug_ratio(6562.5), 12)   # 0.2 / 0.8^3 = 6562.5 / 16800
    0.2
    """
    he = float(hedstrom)
    if not he >= 0 or not math.isfinite(he):
        raise ValueError(f"the Hedstrom number must be a finite number >= 0, got {hedstrom!r}")
    target = he / _HANKS_CONSTANT
    if target == 0.0:
        return 0.0
    # phi = c (1 - phi)^3 in logarithms, so that tiny and huge He keep full relative
    # precision: g(phi) = log(phi) - 3 log(1 - phi) - log(c), increasing on (0, 1)
    log_target = math.log(target)
    if target > 1e40:
        # 1 - phi = (phi / c)^(1/3) < 1e-13 rounds phi to 1: the asymptote is exact here
        return 1.0 - target ** (-1.0 / 3.0)

    def gap(phi):
        return math.log(phi) - 3.0 * math.log1p(-phi) - log_target

    low = min(target, 0.5) * 1e-3
    high = 1.0 - min(1.0 / target, 1.0) ** (1.0 / 3.0) * 1e-3
    return brentq(gap, low, high, xtol=1e-300, rtol=1e-15, maxiter=200)


def hanks_critical_reynolds(hedstrom_number: float) -> float:
    """Critical plastic Reynolds number ``rho V D / mu_p`` of a Bingham plastic in a pipe.

    Formula (Hanks 1963, AIChE J. 9, 306)::

        Re_c = He (1 - 4/3 phi_c + 1/3 phi_c^4) / (8 phi_c),
        phi_c / (1 - phi_c)^3 = He / 16800

    with ``He`` the Hedstrom number (:func:`hedstrom_number`) and ``phi_c`` the critical
    ratio of yield stress to wall shear stress. Valid for Bingham plastics in round
    pipes, ``He >= 0``; it tends to 2100 as ``He -> 0`` (the Newtonian limit) and rises
    steadily with ``He`` (about 3300 at ``He = 1e4``, 6800 at ``1e5``, 15000 at ``1e6``).

    Worked example: ``He = 6562.5`` gives ``phi_c / (1 - phi_c)^3 = 0.390625``, so
    ``phi_c = 0.2`` and ``Re_c = 6562.5 (1 - 0.266667 + 0.000533) / 1.6 = 3010``:

    >>> round(hanks_critical_reynolds(6562.5), 6)
    3010.0
    """
    he = float(hedstrom_number)
    phi = hanks_critical_plug_ratio(he)
    if phi == 0.0:
        return COMMON_PRACTICE_REYNOLDS
    return he * (1.0 - 4.0 / 3.0 * phi + phi ** 4 / 3.0) / (8.0 * phi)


def laminar_limit(model, density: float | None, diameter: float) -> tuple[float, str]:
    """The critical Reynolds number for a fluid model and the criterion it comes from.

    ``model`` is a :mod:`gnflow.rheology` model; ``density`` (kg/m^3) and the
    (hydraulic) ``diameter`` (m) are needed for the Hedstrom number of a Bingham
    plastic only. Choice:

    * ``power-law``: :func:`ryan_johnson_critical_reynolds` (Metzner-Reed Reynolds number);
    * ``bingham``: :func:`hanks_critical_reynolds` (plastic Reynolds number
      ``rho V D / mu_p``);
    * every other model: 2100, common practice for pipes.

    >>> from gnflow import rheology
    >>> critical, name = laminar_limit(rheology.PowerLaw(2.0, 0.5), 1000.0, 0.05)
    >>> round(critical), name
    (2381, 'Ryan & Johnson (1959), n = 0.5')
    >>> laminar_limit(rheology.Newtonian(1e-3), 1000.0, 0.05)
    (2100.0, '2100, common practice for pipes')
    """
    if model.name == "power-law":
        return (ryan_johnson_critical_reynolds(model.flow_index),
                f"Ryan & Johnson (1959), n = {model.flow_index:.4g}")
    if model.name == "bingham" and density is not None:
        he = hedstrom_number(density, model.yield_stress, model.plastic_viscosity, diameter)
        return hanks_critical_reynolds(he), f"Hanks (1963), Hedstrom number {he:.4g}"
    return COMMON_PRACTICE_REYNOLDS, COMMON_PRACTICE


def bingham_plastic_reynolds(density: float, mean_velocity: float, diameter: float,
                             plastic_viscosity: float) -> float:
    """The plastic Reynolds number ``rho |V| D / mu_p`` to compare with Hanks' limit.

    >>> bingham_plastic_reynolds(1200.0, 2.0, 0.1, 0.02)
    12000.0
    """
    return float(density) * abs(float(mean_velocity)) * float(diameter) / float(
        plastic_viscosity)


def laminar_warning(reynolds: float, critical: float, criterion: str) -> str | None:
    """The warning for a Reynolds number past the laminar limit, or None below it.

    >>> laminar_warning(1500.0, 2100.0, COMMON_PRACTICE) is None
    True
    >>> print(laminar_warning(2500.0, 2100.0, COMMON_PRACTICE))
    Reynolds number 2500 exceeds the laminar limit 2100 (2100, common practice for pipes): \
the flow is likely transitional or turbulent, and these laminar results do not hold there
    """
    if not reynolds > critical:
        return None
    return (f"Reynolds number {reynolds:.4g} exceeds the laminar limit {critical:.4g} "
            f"({criterion}): the flow is likely transitional or turbulent, and these laminar "
            "results do not hold there")


__all__ = ["APPROXIMATE_OFF_PIPE", "COMMON_PRACTICE_REYNOLDS", "bingham_plastic_reynolds", "hanks_critical_plug_ratio",
           "hanks_critical_reynolds", "hedstrom_number", "laminar_limit", "laminar_warning",
           "ryan_johnson_critical_reynolds"]
