"""Reference solutions for fully developed laminar flows of generalized Newtonian fluids.

These are the yardsticks the finite-element solver is checked against, so they share
nothing with it: this module imports numpy and scipy only and takes the fluid as a
duck-typed model object (``.stress(rate)``, a monotone flow curve; yield-stress models
also ``.yield_stress``, ``.consistency``, ``.flow_index``).

Two families of functions:

* **Closed forms** for the textbook cases (Newtonian slit, pipe, annulus and Couette
  gap; power-law slit, pipe and Couette gap; Bingham slit and pipe), each with its
  formula and published source in the docstring.
* **Semi-analytic** solutions for any monotone flow curve: the momentum balance gives
  the shear stress in closed form up to one constant (found by root finding so the
  wall speeds are met), the flow curve is inverted for the shear rate, and the rate is
  integrated by adaptive Gauss-Legendre quadrature with the zero-stress and yield
  points as breakpoints.

Conventions. Axial velocity ``w`` along ``z``; ``pressure_gradient`` ``G = dp/dz``
(negative drives the fluid toward +z). Slit: ``y`` from the bottom wall (0) to the top
wall (``gap``), flow rate per unit width. Pipe and annulus: radius ``r``,
``Q = int w 2 pi r dr``. ``wall_shear_stress`` is the stress the fluid exerts on each
wall in +z: ``eta dw/dx`` at the bottom/inner wall, ``-eta dw/dx`` at the top/outer/pipe
wall. Rotational flow: angular speed ``omega(r)``, ``tau_r_theta = eta r domega/dr``, and
``torque_per_length`` is what must be applied to the inner cylinder,
``M = -2 pi r^3 eta domega/dr``, the same at every radius.

>>> import numpy as np
>>> ref = pipe_newtonian(radius=0.01, viscosity=1e-3, pressure_gradient=-100.0)
>>> print(f"{ref.flow_rate:.6e}  {float(ref.velocity(0.0)):.4f}")
3.926991e-04  2.5000
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.optimize import brentq

__all__ = [
    "AxialReference", "RotationalReference", "rate_from_stress",
    "slit_newtonian", "pipe_newtonian", "annulus_newtonian", "coaxial_newtonian",
    "slit_power_law", "pipe_power_law", "coaxial_power_law",
    "pipe_bingham", "slit_bingham",
    "slit_flow", "pipe_flow", "annulus_flow", "coaxial_flow",
]


@dataclass(frozen=True)
class AxialReference:
    """A fully developed axial flow: ``w(x)`` with ``x = y`` (slit) or ``r``.

    ``plugs`` lists the unyielded intervals of ``x`` found by the exact yield-stress
    method (empty otherwise).
    """

    velocity: Callable[[np.ndarray], np.ndarray]
    shear_stress: Callable[[np.ndarray], np.ndarray]
    flow_rate: float
    wall_shear_stress: dict[str, float]
    plugs: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class RotationalReference:
    """Rotational flow between coaxial cylinders: ``omega(r)`` and the torque per length."""

    angular_speed: Callable[[np.ndarray], np.ndarray]
    shear_stress: Callable[[np.ndarray], np.ndarray]
    torque_per_length: float
    plugs: tuple[tuple[float, float], ...]


# --------------------------------------------------------------------------------------
# input checks


def _positive(name: str, value: float) -> float:
    value = float(value)
    if not (0 < value < np.inf):
        raise ValueError(f"{name} = {value!r}: expected a finite number > 0")
    return value


def _non_negative(name: str, value: float) -> float:
    value = float(value)
    if not (0 <= value < np.inf):
        raise ValueError(f"{name} = {value!r}: expected a finite number >= 0")
    return value


def _finite(name: str, value: float) -> float:
    value = float(value)
    if not np.isfinite(value):
        raise ValueError(f"{name} = {value!r}: expected a finite number")
    return value


def _radii(inner_radius: float, outer_radius: float) -> tuple[float, float]:
    inner = _positive("inner_radius", inner_radius)
    outer = _positive("outer_radius", outer_radius)
    if not inner < outer:
        raise ValueError(f"inner_radius = {inner!r}: expected less than outer_radius = {outer!r}")
    return inner, outer


def _as_array(x) -> np.ndarray:
    return np.asarray(x, dtype=float)


# --------------------------------------------------------------------------------------
# closed forms


def slit_newtonian(gap, viscosity, pressure_gradient, bottom_speed=0.0, top_speed=0.0):
    """Plane Couette-Poiseuille flow of a Newtonian fluid between parallel walls.

    ``w(y) = w_b + (w_t - w_b) y / h - (G / 2 mu) y (h - y)``,
    ``tau(y) = mu (w_t - w_b) / h + G (y - h/2)``,
    ``q = h (w_b + w_t) / 2 - G h^3 / (12 mu)`` per unit width.

    Valid for steady laminar fully developed flow between infinite parallel plates
    (wide slits, aspect ratio >> 1). Source: Bird, Stewart & Lightfoot, *Transport
    Phenomena*, 2nd ed., ch. 2 (slit flow) and plane Couette flow; the two superpose
    because the Newtonian equation is linear.

    >>> ref = slit_newtonian(gap=0.01, viscosity=1.0, pressure_gradient=-1200.0)
    >>> print(f"{ref.flow_rate:.6g} {ref.wall_shear_stress['bottom']:.6g}")
    0.0001 6
    """
    h = _positive("gap", gap)
    mu = _positive("viscosity", viscosity)
    G = _finite("pressure_gradient", pressure_gradient)
    w_b, w_t = float(bottom_speed), float(top_speed)

    def velocity(y):
        y = _as_array(y)
        return w_b + (w_t - w_b) * y / h - G / (2 * mu) * y * (h - y)

    def shear_stress(y):
        return mu * (w_t - w_b) / h + G * (_as_array(y) - h / 2)

    flow_rate = h * (w_b + w_t) / 2 - G * h**3 / (12 * mu)
    walls = {"bottom": float(shear_stress(0.0)), "top": float(-shear_stress(h))}
    return AxialReference(velocity, shear_stress, float(flow_rate), walls, ())


def pipe_newtonian(radius, viscosity, pressure_gradient):
    """Hagen-Poiseuille flow in a circular pipe.

    ``w(r) = (-G / 4 mu) (R^2 - r^2)``, ``tau = G r / 2``, ``Q = pi R^4 (-G) / (8 mu)``,
    wall shear stress ``-G R / 2``.

    Valid for steady laminar fully developed flow (Reynolds number below about 2100,
    common practice). Source: Bird, Stewart & Lightfoot, *Transport Phenomena*, 2nd ed.,
    section 2.3.

    >>> ref = pipe_newtonian(radius=0.01, viscosity=1e-3, pressure_gradient=-100.0)
    >>> print(f"{ref.flow_rate:.6e} {ref.wall_shear_stress['wall']:.3g}")
    3.926991e-04 0.5
    """
    R = _positive("radius", radius)
    mu = _positive("viscosity", viscosity)
    G = _finite("pressure_gradient", pressure_gradient)

    def velocity(r):
        r = _as_array(r)
        return -G / (4 * mu) * (R**2 - r**2)

    def shear_stress(r):
        return G * _as_array(r) / 2

    flow_rate = -np.pi * G * R**4 / (8 * mu)
    return AxialReference(velocity, shear_stress, float(flow_rate),
                          {"wall": float(-G * R / 2)}, ())


def annulus_newtonian(inner_radius, outer_radius, viscosity, pressure_gradient,
                      inner_speed=0.0, outer_speed=0.0):
    """Newtonian flow in a concentric annulus, with axially moving walls allowed.

    ``w(r) = w_i + (G / 4 mu)(r^2 - R_i^2) + A ln(r / R_i)``, with
    ``A = [w_o - w_i - G (R_o^2 - R_i^2) / (4 mu)] / ln(R_o / R_i)``;
    ``tau = G r / 2 + mu A / r``;
    ``Q = 2 pi [w_i D / 2 + G D^2 / (16 mu) + A (R_o^2 ln(R_o/R_i) / 2 - D / 4)]``,
    ``D = R_o^2 - R_i^2``.

    With both walls at rest this is the result of Bird, Stewart & Lightfoot,
    *Transport Phenomena*, 2nd ed., section 2.4:
    ``Q = (pi (-G) R_o^4 / 8 mu) [(1 - k^4) - (1 - k^2)^2 / ln(1/k)]``, ``k = R_i/R_o``,
    with the zero-stress (maximum velocity) radius
    ``lambda R_o``, ``lambda^2 = (1 - k^2) / (2 ln(1/k))``. The wall motion adds the
    axial Couette term ``A ln r``, since the equation is linear. Valid for steady
    laminar fully developed flow.

    >>> ref = annulus_newtonian(0.5, 1.0, 1.0, -8.0)
    >>> print(f"{ref.flow_rate:.6f}")
    0.395791
    """
    Ri, Ro = _radii(inner_radius, outer_radius)
    mu = _positive("viscosity", viscosity)
    G = _finite("pressure_gradient", pressure_gradient)
    w_i, w_o = float(inner_speed), float(outer_speed)
    log_ratio = np.log(Ro / Ri)
    D = Ro**2 - Ri**2
    A = (w_o - w_i - G * D / (4 * mu)) / log_ratio

    def velocity(r):
        r = _as_array(r)
        return w_i + G / (4 * mu) * (r**2 - Ri**2) + A * np.log(r / Ri)

    def shear_stress(r):
        r = _as_array(r)
        return G * r / 2 + mu * A / r

    flow_rate = 2 * np.pi * (w_i * D / 2 + G * D**2 / (16 * mu)
                             + A * (Ro**2 * log_ratio / 2 - D / 4))
    walls = {"inner": float(shear_stress(Ri)), "outer": float(-shear_stress(Ro))}
    return AxialReference(velocity, shear_stress, float(flow_rate), walls, ())


def coaxial_newtonian(inner_radius, outer_radius, viscosity, inner_angular_speed,
                      outer_angular_speed=0.0):
    """Circular Couette flow of a Newtonian fluid between coaxial cylinders.

    ``omega(r) = a + b / r^2`` with ``b = (W_i - W_o) R_i^2 R_o^2 / (R_o^2 - R_i^2)``,
    ``a = (W_o R_o^2 - W_i R_i^2) / (R_o^2 - R_i^2)``; ``tau_r_theta = -2 mu b / r^2``;
    torque per length ``M = 4 pi mu b``, i.e.
    ``M = 4 pi mu (W_i - W_o) R_i^2 R_o^2 / (R_o^2 - R_i^2)``.

    Valid below the onset of Taylor vortices. Source: Bird, Stewart & Lightfoot,
    *Transport Phenomena*, 2nd ed., section 3.6 (tangential annular flow).

    >>> ref = coaxial_newtonian(1.0, 2.0, 1.0, 3.0)
    >>> print(f"{ref.torque_per_length / np.pi:.6g}")
    16
    """
    Ri, Ro = _radii(inner_radius, outer_radius)
    mu = _positive("viscosity", viscosity)
    W_i = _finite("inner_angular_speed", inner_angular_speed)
    W_o = _finite("outer_angular_speed", outer_angular_speed)
    b = (W_i - W_o) * Ri**2 * Ro**2 / (Ro**2 - Ri**2)
    a = (W_o * Ro**2 - W_i * Ri**2) / (Ro**2 - Ri**2)

    def angular_speed(r):
        return a + b / _as_array(r) ** 2

    def shear_stress(r):
        return -2 * mu * b / _as_array(r) ** 2

    return RotationalReference(angular_speed, shear_stress, float(4 * np.pi * mu * b), ())


def slit_power_law(gap, consistency, flow_index, pressure_gradient):
    """Pressure-driven flow of a power-law fluid between stationary parallel walls.

    With half-gap ``B = h/2``, ``s = |y - B|`` and ``tau_w = |G| B``:
    ``w = sgn(-G) (n / (n+1)) (|G| / K)^(1/n) (B^(1+1/n) - s^(1+1/n))``,
    ``tau = G (y - B)``, ``q = sgn(-G) (2 n B^2 / (2n+1)) (tau_w / K)^(1/n)``.

    Valid where ``tau = K |rate|^(n-1) rate`` holds over the rates present (the power law
    has no Newtonian plateau). Derived by integrating the power law over the linear
    stress profile, as for the tube in Bird, Stewart & Lightfoot, *Transport Phenomena*,
    2nd ed., section 8.3 (recalled from memory).

    >>> ref = slit_power_law(gap=2.0, consistency=1.0, flow_index=0.5, pressure_gradient=-1.0)
    >>> print(f"{ref.flow_rate:.6g}")
    0.5
    """
    h = _positive("gap", gap)
    K = _positive("consistency", consistency)
    n = _positive("flow_index", flow_index)
    G = _finite("pressure_gradient", pressure_gradient)
    B = h / 2
    direction = -np.sign(G)
    speed_scale = (abs(G) / K) ** (1 / n)

    def velocity(y):
        s = np.abs(_as_array(y) - B)
        return direction * n / (n + 1) * speed_scale * (B ** (1 + 1 / n) - s ** (1 + 1 / n))

    def shear_stress(y):
        return G * (_as_array(y) - B)

    flow_rate = direction * 2 * n / (2 * n + 1) * speed_scale * B ** (2 + 1 / n)
    walls = {"bottom": float(-G * B), "top": float(-G * B)}
    return AxialReference(velocity, shear_stress, float(flow_rate), walls, ())


def pipe_power_law(radius, consistency, flow_index, pressure_gradient):
    """Pressure-driven flow of a power-law fluid in a circular pipe.

    With ``tau_w = |G| R / 2``:
    ``w = sgn(-G) (n / (n+1)) (|G| / 2K)^(1/n) (R^(1+1/n) - r^(1+1/n))``,
    ``tau = G r / 2``, ``Q = sgn(-G) (pi n R^3 / (3n+1)) (tau_w / K)^(1/n)``.

    Valid over the range of rates the power law was fitted on. Source: Bird, Stewart &
    Lightfoot, *Transport Phenomena*, 2nd ed., section 8.3, the power-law tube flow
    example (recalled from memory).

    >>> ref = pipe_power_law(radius=1.0, consistency=1.0, flow_index=1.0, pressure_gradient=-8.0)
    >>> print(f"{ref.flow_rate / np.pi:.6g}")
    1
    """
    R = _positive("radius", radius)
    K = _positive("consistency", consistency)
    n = _positive("flow_index", flow_index)
    G = _finite("pressure_gradient", pressure_gradient)
    direction = -np.sign(G)
    speed_scale = (abs(G) / (2 * K)) ** (1 / n)

    def velocity(r):
        r = _as_array(r)
        return direction * n / (n + 1) * speed_scale * (R ** (1 + 1 / n) - r ** (1 + 1 / n))

    def shear_stress(r):
        return G * _as_array(r) / 2

    wall_stress = abs(G) * R / 2
    flow_rate = direction * np.pi * n * R**3 / (3 * n + 1) * (wall_stress / K) ** (1 / n)
    return AxialReference(velocity, shear_stress, float(flow_rate),
                          {"wall": float(-G * R / 2)}, ())


def coaxial_power_law(inner_radius, outer_radius, consistency, flow_index,
                      inner_angular_speed, outer_angular_speed=0.0):
    """Circular Couette flow of a power-law fluid between coaxial cylinders.

    The torque balance gives ``|tau| = |M| / (2 pi r^2)``, the power law the rate
    ``|r domega/dr| = (|tau| / K)^(1/n)``; integrating from the outer cylinder:
    ``omega(r) = W_o + sgn(dW) (n/2) (|M| / 2 pi K)^(1/n) (r^(-2/n) - R_o^(-2/n))``, so
    ``M = sgn(dW) 2 pi K [2 |dW| / (n (R_i^(-2/n) - R_o^(-2/n)))]^n``, ``dW = W_i - W_o``.
    ``n = 1`` gives the Newtonian ``M = 4 pi mu dW R_i^2 R_o^2 / (R_o^2 - R_i^2)``.

    Valid below the onset of secondary flow, over the rates the power law was fitted
    on. Derived here from the torque balance; the same result is in the rheometry
    literature, e.g. Macosko, *Rheology: Principles, Measurements and Applications*
    (1994), the Couette-geometry chapter (recalled from memory).

    >>> ref = coaxial_power_law(1.0, 2.0, 1.0, 1.0, 3.0)
    >>> print(f"{ref.torque_per_length / np.pi:.6g}")
    16
    """
    Ri, Ro = _radii(inner_radius, outer_radius)
    K = _positive("consistency", consistency)
    n = _positive("flow_index", flow_index)
    W_i = _finite("inner_angular_speed", inner_angular_speed)
    W_o = _finite("outer_angular_speed", outer_angular_speed)
    difference = W_i - W_o
    direction = np.sign(difference)
    span = Ri ** (-2 / n) - Ro ** (-2 / n)
    torque = direction * 2 * np.pi * K * (2 * abs(difference) / (n * span)) ** n
    rate_scale = (abs(torque) / (2 * np.pi * K)) ** (1 / n)

    def angular_speed(r):
        r = _as_array(r)
        return W_o + direction * n / 2 * rate_scale * (r ** (-2 / n) - Ro ** (-2 / n))

    def shear_stress(r):
        return -torque / (2 * np.pi * _as_array(r) ** 2)

    return RotationalReference(angular_speed, shear_stress, float(torque), ())


def pipe_bingham(radius, yield_stress, plastic_viscosity, pressure_gradient):
    """Bingham plastic in a circular pipe: the Buckingham-Reiner solution.

    With ``tau_w = |G| R / 2``, ``phi = tau_y / tau_w`` and plug radius
    ``r_p = phi R = 2 tau_y / |G|``:
    ``w = sgn(-G) [(|G| / 4 mu_p)(R^2 - r^2) - (tau_y / mu_p)(R - r)]`` for ``r >= r_p``,
    ``w = w(r_p)`` in the plug;
    ``Q = sgn(-G) (pi R^4 |G| / 8 mu_p) (1 - 4 phi / 3 + phi^4 / 3)`` for ``phi < 1``,
    and no flow for ``phi >= 1``.

    Valid for an ideal (unregularised) Bingham plastic in steady laminar flow.
    Source: Buckingham (1921), Proc. ASTM 21; Reiner; also Bird, Stewart & Lightfoot,
    *Transport Phenomena*, 2nd ed., ch. 8 (recalled from memory).

    >>> ref = pipe_bingham(radius=1.0, yield_stress=1.0, plastic_viscosity=1.0,
    ...                    pressure_gradient=-4.0)
    >>> print(f"{ref.flow_rate / np.pi:.6g} {ref.plugs}")
    0.177083 ((0.0, 0.5),)
    """
    R = _positive("radius", radius)
    tau_y = _non_negative("yield_stress", yield_stress)
    mu_p = _positive("plastic_viscosity", plastic_viscosity)
    G = _finite("pressure_gradient", pressure_gradient)
    direction = -np.sign(G)
    plug_radius = min(2 * tau_y / abs(G), R) if G != 0 else R
    phi = plug_radius / R

    def velocity(r):
        rho = np.clip(_as_array(r), plug_radius, R)
        return direction * (abs(G) / (4 * mu_p) * (R**2 - rho**2) - tau_y / mu_p * (R - rho))

    def shear_stress(r):
        return G * _as_array(r) / 2

    # 1 - 4 phi/3 + phi^4/3 in factored form: exact zero at phi = 1, no cancellation near it
    flow_rate = (direction * np.pi * R**4 * abs(G) / (8 * mu_p)
                 * (1 - phi) ** 2 * (3 + 2 * phi + phi**2) / 3)
    plugs = ((0.0, float(plug_radius)),) if tau_y > 0 else ()
    return AxialReference(velocity, shear_stress, float(flow_rate),
                          {"wall": float(-G * R / 2)}, plugs)


def slit_bingham(gap, yield_stress, plastic_viscosity, pressure_gradient):
    """Bingham plastic between stationary parallel walls (plane Poiseuille flow).

    With half-gap ``B = h/2``, ``s = |y - B|``, ``tau_w = |G| B``, ``phi = tau_y / tau_w``
    and plug half-width ``s_p = phi B = tau_y / |G|``:
    ``w = sgn(-G) [(|G| / 2 mu_p)(B^2 - s^2) - (tau_y / mu_p)(B - s)]`` for ``s >= s_p``,
    ``w = w(s_p)`` in the plug;
    ``q = sgn(-G) (2 |G| B^3 / 3 mu_p) (1 - 3 phi / 2 + phi^3 / 2)`` for ``phi < 1``,
    no flow for ``phi >= 1``.

    Valid for an ideal Bingham plastic in steady laminar flow between infinite plates.
    Source: the plane counterpart of Buckingham-Reiner, e.g. Bird, Dai & Yarusso (1983),
    Rev. Chem. Eng. 1, 1 (recalled from memory); derived here by integrating the linear
    stress profile.

    >>> ref = slit_bingham(gap=2.0, yield_stress=0.5, plastic_viscosity=1.0,
    ...                    pressure_gradient=-1.0)
    >>> print(f"{ref.flow_rate:.6g} {ref.plugs}")
    0.208333 ((0.5, 1.5),)
    """
    h = _positive("gap", gap)
    tau_y = _non_negative("yield_stress", yield_stress)
    mu_p = _positive("plastic_viscosity", plastic_viscosity)
    G = _finite("pressure_gradient", pressure_gradient)
    B = h / 2
    direction = -np.sign(G)
    plug_half_width = min(tau_y / abs(G), B) if G != 0 else B
    phi = plug_half_width / B

    def velocity(y):
        s = np.clip(np.abs(_as_array(y) - B), plug_half_width, B)
        return direction * (abs(G) / (2 * mu_p) * (B**2 - s**2) - tau_y / mu_p * (B - s))

    def shear_stress(y):
        return G * (_as_array(y) - B)

    # 1 - 3 phi/2 + phi^3/2 = (1 - phi)^2 (2 + phi) / 2, exact zero at phi = 1
    flow_rate = direction * 2 * abs(G) * B**3 / (3 * mu_p) * (1 - phi) ** 2 * (2 + phi) / 2
    walls = {"bottom": float(-G * B), "top": float(-G * B)}
    plugs = ((float(B - plug_half_width), float(B + plug_half_width)),) if tau_y > 0 else ()
    return AxialReference(velocity, shear_stress, float(flow_rate), walls, plugs)


# --------------------------------------------------------------------------------------
# inverting the flow curve

# The root finding runs on ln(tau) against ln(rate): for power-law-like curves that
# relation is nearly straight, so a secant step or two suffices; a bracket kept
# alongside catches the flat stretches of regularised yield-stress curves.
_LOG_RATE_TOLERANCE = 1e-14
_BRACKET_STEP = 8.0      # widen the log-rate bracket by e^8 (about 3000x) per try
_TABLE_RATES = np.logspace(-12, 12, 24 * 16 + 1)   # 16 per decade, 1e-12 to 1e12 1/s
_LOG_RATE_FLOOR = -700.0  # below exp(-700) the rate is zero in double precision


def _yield_stress(model) -> float:
    return float(getattr(model, "yield_stress", 0.0) or 0.0)


def _exact_yield_stress(model, regularised: bool) -> float:
    """The yield stress the exact inverse uses; 0 when the flow curve is inverted."""
    return 0.0 if regularised else _yield_stress(model)


def _log_stress_gap(model, log_rate, log_target):
    """ln tau(rate) - ln target; overflow to inf is fine, it only says 'too high'."""
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        return np.log(_as_array(model.stress(np.exp(log_rate)))) - log_target


def _flow_curve_table(model):
    """(ln tau, ln rate) along the flow curve at log-spaced rates, strictly increasing.

    Evaluating the curve forwards is exact and cheap; the table then brackets every
    stress in its range between two neighbouring rates, and it is dense in stress just
    where a regularised yield-stress curve is flat, since many rates share those stresses.
    """
    log_rate = np.log(_TABLE_RATES)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        log_stress = np.log(_as_array(model.stress(_TABLE_RATES)))
    usable = np.isfinite(log_stress)
    log_rate, log_stress = log_rate[usable], log_stress[usable]
    increasing = np.concatenate([[True], np.diff(log_stress) > 0])
    while not increasing.all():   # drop entries where the curve is flat to roundoff
        log_rate, log_stress = log_rate[increasing], log_stress[increasing]
        increasing = np.concatenate([[True], np.diff(log_stress) > 0])
    return log_stress, log_rate


def _invert_flow_curve(model, stress):
    """Rate magnitudes with ``model.stress(rate) = stress`` (stress >= 0), elementwise."""
    stress = _as_array(stress)
    flat_stress = stress.ravel()
    rate = np.zeros(flat_stress.size)
    todo = np.flatnonzero(flat_stress > 0)
    log_target = np.log(flat_stress[todo])

    # bracket each root in ln(rate), stress(e^lower) < target <= stress(e^upper):
    # from the table where it reaches, else by widening outwards from its ends
    table_stress, table_rate = _flow_curve_table(model)
    above = np.searchsorted(table_stress, log_target)
    inside = (above > 0) & (above < table_stress.size)
    lower = np.empty(todo.size)
    upper = np.empty(todo.size)
    gap_lower = np.empty(todo.size)
    gap_upper = np.empty(todo.size)
    k = above[inside]
    lower[inside], upper[inside] = table_rate[k - 1], table_rate[k]
    gap_lower[inside] = table_stress[k - 1] - log_target[inside]
    gap_upper[inside] = table_stress[k] - log_target[inside]

    pending = np.flatnonzero(above >= table_stress.size)
    lower[pending], gap_lower[pending] = table_rate[-1], table_stress[-1] - log_target[pending]
    upper[pending] = table_rate[-1] + _BRACKET_STEP
    while pending.size:
        gap = _log_stress_gap(model, upper[pending], log_target[pending])
        gap_upper[pending] = gap
        short = gap < 0
        pending, gap = pending[short], gap[short]
        if np.any(upper[pending] > -_LOG_RATE_FLOOR):
            raise ValueError(f"{getattr(model, 'name', 'model')}: a shear stress of "
                             f"{flat_stress[todo[pending[0]]]:g} Pa lies beyond its flow curve")
        lower[pending], gap_lower[pending] = upper[pending], gap
        upper[pending] += _BRACKET_STEP
    pending = np.flatnonzero(above == 0)
    upper[pending], gap_upper[pending] = table_rate[0], table_stress[0] - log_target[pending]
    lower[pending] = table_rate[0] - _BRACKET_STEP
    while pending.size:
        gap = _log_stress_gap(model, lower[pending], log_target[pending])
        gap_lower[pending] = gap
        high = (gap >= 0) & (lower[pending] >= _LOG_RATE_FLOOR)
        pending, gap = pending[high], gap[high]
        upper[pending], gap_upper[pending] = lower[pending], gap
        lower[pending] -= _BRACKET_STEP
    # a root below e^-700 is a zero rate in double precision
    underflow = lower < _LOG_RATE_FLOOR
    # start from false position on the bracket: nearly exact on a fine table
    with np.errstate(divide="ignore", invalid="ignore"):
        start = lower - gap_lower * (upper - lower) / (gap_upper - gap_lower)
    start = np.where(np.isfinite(start) & (start > lower) & (start < upper), start,
                     0.5 * (lower + upper))
    start = np.where(gap_upper == 0, upper, start)   # the stress of a table entry
    log_rate = np.where(underflow, -np.inf, start)

    # Secant steps through the last two iterates where they stay inside the bracket;
    # elsewhere (flat stretches of regularised yield-stress curves, kinks of bi-viscous
    # ones) false position on the bracket with the Illinois halving, which converges
    # superlinearly on any monotone bracket. One flow-curve evaluation per iteration,
    # and only model.stress is needed.
    kept_side = np.zeros(todo.size)
    previous, gap_previous = lower.copy(), gap_lower.copy()
    active = np.flatnonzero(~underflow)
    for _ in range(300):
        if active.size == 0:
            break
        u, lo, hi = log_rate[active], lower[active], upper[active]
        gap_lo, gap_hi, last = gap_lower[active], gap_upper[active], kept_side[active]
        gap = _log_stress_gap(model, u, log_target[active])
        below = gap < 0
        side = np.where(below, -1.0, 1.0)     # which end the new point replaces
        repeated = side == last
        gap_hi = np.where(repeated & below, 0.5 * gap_hi, gap_hi)
        gap_lo = np.where(repeated & ~below, 0.5 * gap_lo, gap_lo)
        lo, gap_lo = np.where(below, u, lo), np.where(below, gap, gap_lo)
        hi, gap_hi = np.where(below, hi, u), np.where(below, gap_hi, gap)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            secant = u - gap * (u - previous[active]) / (gap - gap_previous[active])
            false_position = lo - gap_lo * (hi - lo) / (gap_hi - gap_lo)
        false_position = np.where(np.isfinite(false_position) & (false_position > lo)
                                  & (false_position < hi), false_position, 0.5 * (lo + hi))
        resolution = _LOG_RATE_TOLERANCE * np.maximum(1.0, np.abs(u))
        # a secant step below the resolution has converged, even if roundoff puts it on
        # the bracket end that u itself has just become
        converged = (gap == 0) | (np.abs(secant - u) <= resolution)
        inside = np.isfinite(secant) & (secant > lo) & (secant < hi)
        candidate = np.where(gap == 0, u, np.where(inside | converged, secant, false_position))
        done = converged | (np.abs(candidate - u) <= resolution) | (hi - lo <= resolution)
        previous[active], gap_previous[active] = u, gap
        log_rate[active], lower[active], upper[active] = candidate, lo, hi
        gap_lower[active], gap_upper[active], kept_side[active] = gap_lo, gap_hi, side
        active = active[~done]
    rate[todo] = np.exp(log_rate)
    return rate.reshape(stress.shape)


def rate_from_stress(model, stress, regularised=False):
    """Shear-rate magnitude at the given shear-stress magnitude(s).

    For a yield-stress model (``yield_stress > 0``) with ``regularised=False``, the exact
    Herschel-Bulkley inverse ``rate = ((|tau| - tau_y) / K)^(1/n)`` for ``|tau| > tau_y``,
    zero otherwise (Bingham: ``n = 1``, ``K`` the plastic viscosity). Otherwise
    ``model.stress`` itself is inverted by a bracketed secant iteration on
    ``ln tau(ln rate)``, to about 1e-14 relative.

    >>> class Linear:
    ...     name = "newtonian"
    ...     def stress(self, rate):
    ...         return 2.0 * np.asarray(rate, dtype=float)
    >>> rate_from_stress(Linear(), np.array([0.0, 1.0, 8.0]))
    array([0. , 0.5, 4. ])
    """
    stress = _as_array(stress)
    if np.any(stress < 0) or not np.all(np.isfinite(stress)):
        raise ValueError("rate_from_stress takes finite stress magnitudes (>= 0)")
    tau_y = _exact_yield_stress(model, regularised)
    if tau_y > 0:
        excess = np.maximum(stress - tau_y, 0.0)
        return (excess / model.consistency) ** (1 / model.flow_index)
    if getattr(model, "name", None) == "power-law":
        # the flow curve K rate^n inverted in closed form: the iterative inverse costs
        # 0.15 s per call on the adaptive quadrature's millions of points (annulus,
        # n = 2: 131 s for one reference flow, against well under a second this way)
        with np.errstate(over="ignore"):
            return (stress / model.consistency) ** (1.0 / model.flow_index)
    return _invert_flow_curve(model, stress)


def _signed_rate(model, stress, regularised):
    """The velocity gradient with the sign of the shear stress (eta > 0)."""
    stress = _as_array(stress)
    return np.sign(stress) * rate_from_stress(model, np.abs(stress), regularised)


def _stress_at_rate(model, rate: float) -> float:
    if rate == 0:
        return 0.0
    return float(_as_array(model.stress(np.array([rate])))[0])


# --------------------------------------------------------------------------------------
# quadrature and root finding

def _clustered_gauss_rule(points: int):
    """Gauss-Legendre on [0, 1] seen through ``x = t^3 (10 - 15 t + 6 t^2)``.

    The map has ``dx/dt = 30 t^2 (1 - t)^2``, so nodes crowd both ends of a piece: an
    endpoint kink ``s^a`` of the integrand becomes ``t^(3a + 2)``, smooth enough for
    Gauss. Kinks of the shear rate (``|tau|^(1/n)`` at zero stress, ``(|tau| - tau_y)^(1/n)``
    at a yield point) sit at piece ends by construction, so this cuts the bisection
    depth they need severalfold.
    """
    nodes, weights = np.polynomial.legendre.leggauss(points)
    t = 0.5 * (nodes + 1)
    return (t**3 * (10 - 15 * t + 6 * t**2),
            0.5 * weights * 30 * t**2 * (1 - t) ** 2)


_RULE_NODES, _RULE_WEIGHTS = _clustered_gauss_rule(12)
_QUADRATURE_TOLERANCE = 1e-13   # relative to the integral of |integrand|
_MAX_BISECTIONS = 60            # pieces shorter than 2^-60 of the span add nothing visible
_MAX_PIECES = 2_000_000


def _piece_integrals(integrand, lower, upper):
    length = upper - lower
    x = lower[:, None] + length[:, None] * _RULE_NODES
    return length * (integrand(x) @ _RULE_WEIGHTS)


def _integrate_pieces(integrand, lower, upper):
    """Integrals of ``integrand`` over each ``[lower_k, upper_k]``, all pieces at once.

    Adaptive bisection: a piece is accepted when its value by the clustered Gauss rule and
    the sum over its two halves agree, either to a share of the absolute tolerance
    proportional to its length or to the relative tolerance of the piece itself (the
    second keeps roundoff from stalling pieces where the integrand is far above its
    mean); otherwise both halves go on, and the refined sum is what is kept. Kinks of
    the rate (zero stress, yield points) are expected at piece ends, where bisection
    resolves them geometrically.
    """
    lower = _as_array(lower).copy()
    upper = _as_array(upper).copy()
    total = np.zeros(lower.size)
    owner = np.arange(lower.size)
    whole = _piece_integrals(integrand, lower, upper)
    span = np.sum(upper - lower)
    error_per_length = _QUADRATURE_TOLERANCE * np.sum(np.abs(whole)) / span
    for depth in range(_MAX_BISECTIONS):
        middle = 0.5 * (lower + upper)
        halves = _piece_integrals(integrand, np.concatenate([lower, middle]),
                                  np.concatenate([middle, upper]))
        left, right = halves[:lower.size], halves[lower.size:]
        refined = left + right
        allowed = np.maximum(error_per_length * (upper - lower),
                             _QUADRATURE_TOLERANCE * np.abs(refined))
        # the last two tests stop pieces that can no longer be split, and guard memory
        # should a pathological integrand keep every piece going
        accepted = ((np.abs(refined - whole) <= allowed) | (middle <= lower) | (middle >= upper)
                    | (depth == _MAX_BISECTIONS - 1) | (lower.size > _MAX_PIECES))
        np.add.at(total, owner[accepted], refined[accepted])
        going_on = ~accepted
        if not going_on.any():
            break
        lower, middle, upper = lower[going_on], middle[going_on], upper[going_on]
        lower, upper = np.concatenate([lower, middle]), np.concatenate([middle, upper])
        whole = np.concatenate([left[going_on], right[going_on]])
        owner = np.concatenate([owner[going_on], owner[going_on]])
    return total


def _integral(integrand, breakpoints):
    """Integral over ``[breakpoints[0], breakpoints[-1]]``, split at the breakpoints."""
    return float(np.sum(_integrate_pieces(integrand, breakpoints[:-1], breakpoints[1:])))


def _cumulative_integral(integrand, breakpoints, points, from_upper):
    """``int_{x0}^{x} integrand`` (or ``int_x^{x1}`` if ``from_upper``) at each point.

    The evaluation points are merged with the breakpoints, each gap between neighbours
    is integrated once, and the pieces are summed cumulatively; so the cost is linear
    in the number of points and the accuracy that of a single adaptive quadrature.
    """
    points = _as_array(points)
    start, end = breakpoints[0], breakpoints[-1]
    slack = 1e-12 * (end - start)
    flat = points.ravel()
    if np.any(flat < start - slack) or np.any(flat > end + slack):
        raise ValueError(f"positions must lie in [{start:g}, {end:g}]")
    flat = np.clip(flat, start, end)
    nodes = np.unique(np.concatenate([flat, breakpoints]))
    pieces = _integrate_pieces(integrand, nodes[:-1], nodes[1:])
    if from_upper:
        cumulative = np.concatenate([np.cumsum(pieces[::-1])[::-1], [0.0]])
    else:
        cumulative = np.concatenate([[0.0], np.cumsum(pieces)])
    return cumulative[np.searchsorted(nodes, flat)].reshape(points.shape)


def _breakpoints(lower, upper, positions):
    """Sorted ``[lower, interior positions..., upper]``."""
    positions = np.asarray([p for p in positions if lower < p < upper], dtype=float)
    return np.unique(np.concatenate([[lower], positions, [upper]]))


def _stress_levels(model, regularised):
    """Signed stresses where the rate has a kink or a sharp bend, to split quadrature at.

    Zero; +-yield stress (a true kink when exact, the sharp bend of a Papanastasiou
    curve when regularised); and for a regularised bi-viscous curve the stress at its
    critical rate, where the slope jumps.
    """
    tau_y = _yield_stress(model)
    levels = [0.0]
    if tau_y > 0:
        levels += [tau_y, -tau_y]
        if regularised and getattr(model, "regularisation", None) == "bi-viscous":
            kink = _stress_at_rate(model, model.regularisation_parameter)
            levels += [kink, -kink]
    return levels


def _decade_points(lower, upper):
    """One breakpoint per decade of radius: when the stress C/r spans many decades (a
    thin inner rod) the quadrature then works on all scales at once, not level by level."""
    decades = int(np.floor(np.log10(upper / lower)))
    return list(lower * 10.0 ** np.arange(1, decades + 1)) if decades > 0 else []


def _plug_intervals(stress_field, breakpoints, tau_y):
    """Intervals between breakpoints where ``|tau| <= tau_y``, neighbours merged."""
    if tau_y <= 0:
        return ()
    plugs = []
    for a, b in zip(breakpoints[:-1], breakpoints[1:]):
        if abs(float(stress_field(0.5 * (a + b)))) <= tau_y:
            if plugs and plugs[-1][1] == a:
                plugs[-1] = (plugs[-1][0], float(b))
            else:
                plugs.append((float(a), float(b)))
    return tuple(plugs)


def _increasing_root(residual, scale):
    """Root of a non-decreasing ``residual``, bracketed by widening ``[-scale, scale]``."""
    lower, upper = -scale, scale
    for _ in range(200):
        if residual(lower) <= 0:
            break
        lower *= 2
    for _ in range(200):
        if residual(upper) >= 0:
            break
        upper *= 2
    return brentq(residual, lower, upper, xtol=1e-15 * scale, rtol=4 * np.finfo(float).eps,
                  maxiter=500)


# --------------------------------------------------------------------------------------
# semi-analytic axial flows


def _axial_reference(model, regularised, stress_field, breakpoints, lower_speed, upper_speed,
                     axisymmetric, wall_names, anchor_at_upper):
    """Assemble an :class:`AxialReference` once the shear stress field is known."""
    lower, upper = breakpoints[0], breakpoints[-1]

    def shear_rate(x):
        return _signed_rate(model, stress_field(x), regularised)

    def velocity(x):
        if anchor_at_upper:
            return upper_speed - _cumulative_integral(shear_rate, breakpoints, x, True)
        return lower_speed + _cumulative_integral(shear_rate, breakpoints, x, False)

    # Q = int w dm with m = x (slit) or pi r^2; by parts, Q = [m w] - int m dw/dx dx,
    # a single quadrature of the rate instead of a quadrature of a quadrature.
    def moment_weight(x):
        return np.pi * x**2 if axisymmetric else x

    moment = _integral(lambda x: moment_weight(x) * shear_rate(x), breakpoints)
    flow_rate = (moment_weight(upper) * upper_speed - moment_weight(lower) * lower_speed
                 - moment)
    lower_wall, upper_wall = wall_names
    walls = {}
    if lower_wall:
        walls[lower_wall] = float(stress_field(lower))
    walls[upper_wall] = float(-stress_field(upper))
    plugs = _plug_intervals(stress_field, breakpoints, _exact_yield_stress(model, regularised))

    def shear_stress(x):
        return stress_field(_as_array(x))

    return AxialReference(velocity, shear_stress, float(flow_rate), walls, plugs)


def slit_flow(model, gap, pressure_gradient, bottom_speed=0.0, top_speed=0.0,
              regularised=False):
    """Flow of any GN fluid between parallel walls, driven by pressure and wall motion.

    The momentum balance ``dtau/dy = G`` gives ``tau(y) = tau_b + G y`` with ``tau_b`` the
    stress on the bottom wall; ``dw/dy = sgn(tau) rate(|tau|)`` and ``tau_b`` is found by
    root finding so that ``int_0^h dw/dy dy = w_t - w_b``. The velocity is the cumulative
    integral of the rate, ``q = h w_t - int_0^h y dw/dy dy``.

    With ``regularised=False`` a yield-stress fluid is treated as ideal (true plugs).
    If the walls move together and ``|G| h / 2 <= tau_y`` the whole gap is rigid; the
    stress is then indeterminate and the symmetric field ``tau_b = -G h / 2`` (the limit
    of any regularisation) is reported. Valid for steady laminar fully developed flow.
    Source: the construction is the standard one for GN slit flow, e.g. Bird, Stewart &
    Lightfoot, *Transport Phenomena*, 2nd ed., section 8.3 (recalled from memory).

    >>> class Linear:
    ...     name = "newtonian"
    ...     def stress(self, rate):
    ...         return np.asarray(rate, dtype=float)
    >>> ref = slit_flow(Linear(), gap=0.01, pressure_gradient=-1200.0)
    >>> print(f"{ref.flow_rate:.10f}")
    0.0001000000
    """
    h = _positive("gap", gap)
    G = _finite("pressure_gradient", pressure_gradient)
    w_b = _finite("bottom_speed", bottom_speed)
    w_t = _finite("top_speed", top_speed)
    speed_difference = w_t - w_b
    tau_y = _exact_yield_stress(model, regularised)

    def stress_field_for(bottom_stress):
        return lambda y: bottom_stress + G * _as_array(y)

    def breakpoints_for(bottom_stress):
        if G == 0:
            return _breakpoints(0.0, h, [])
        return _breakpoints(0.0, h, [(level - bottom_stress) / G
                                     for level in _stress_levels(model, regularised)])

    def residual(bottom_stress):
        field = stress_field_for(bottom_stress)
        rate = _integral(lambda y: _signed_rate(model, field(y), regularised),
                         breakpoints_for(bottom_stress))
        return rate - speed_difference

    scale = abs(G) * h + _stress_at_rate(model, abs(speed_difference) / h) + tau_y
    rigid = speed_difference == 0 and abs(G) * h / 2 <= tau_y
    if scale == 0 or rigid:
        bottom_stress = -G * h / 2
    else:
        bottom_stress = _increasing_root(residual, scale)
    return _axial_reference(model, regularised, stress_field_for(bottom_stress),
                            breakpoints_for(bottom_stress), w_b, w_t, False,
                            ("bottom", "top"), anchor_at_upper=False)


def pipe_flow(model, radius, pressure_gradient, regularised=False):
    """Pressure-driven flow of any GN fluid in a circular pipe.

    ``tau(r) = G r / 2`` (regularity on the axis), ``dw/dr = sgn(tau) rate(|tau|)``,
    ``w(r) = -int_r^R dw/dr``, ``Q = -pi int_0^R r^2 dw/dr dr``. With
    ``regularised=False`` a yield-stress fluid has its exact plug ``r <= 2 tau_y / |G|``.
    Integrating the flow curve over the linear stress profile is the standard
    construction for GN tube flow (e.g. Bird, Stewart & Lightfoot, *Transport
    Phenomena*, 2nd ed., section 8.3; recalled from memory).

    >>> class Linear:
    ...     name = "newtonian"
    ...     def stress(self, rate):
    ...         return 1e-3 * np.asarray(rate, dtype=float)
    >>> print(f"{pipe_flow(Linear(), 0.01, -100.0).flow_rate:.6e}")
    3.926991e-04
    """
    R = _positive("radius", radius)
    G = _finite("pressure_gradient", pressure_gradient)

    def stress_field(r):
        return G * _as_array(r) / 2

    positions = ([2 * level / G for level in _stress_levels(model, regularised)]
                 if G != 0 else [])
    return _axial_reference(model, regularised, stress_field, _breakpoints(0.0, R, positions),
                            0.0, 0.0, True, (None, "wall"), anchor_at_upper=True)


def _annulus_stress_roots(G, C, level):
    """Radii where ``G r / 2 + C / r = level``: roots of ``G r^2/2 - level r + C = 0``."""
    if G == 0:
        return [C / level] if level != 0 else []
    discriminant = level**2 - 2 * G * C
    if discriminant < 0:
        return []
    # the cancellation-free form of the quadratic formula
    q = 0.5 * (level + np.copysign(np.sqrt(discriminant), level))
    roots = [q / (G / 2)] if q != 0 else []
    if q != 0:
        roots.append(C / q)
    return roots


def annulus_flow(model, inner_radius, outer_radius, pressure_gradient, inner_speed=0.0,
                 outer_speed=0.0, regularised=False):
    """Flow of any GN fluid in a concentric annulus, by pressure and axial wall motion.

    ``(1/r) d(r tau)/dr = G`` gives ``tau(r) = G r / 2 + C / r``; ``C`` is found by root
    finding so that ``int dw/dr dr = w_o - w_i``. The stress vanishes at the zero-stress
    radius ``r_0 = sqrt(-2 C / G)`` where that lies in the gap (the velocity maximum
    for pressure-driven flow). ``Q = pi (R_o^2 w_o - R_i^2 w_i) - pi int r^2 dw/dr dr``.

    With ``regularised=False`` a yield-stress fluid has exact plugs where
    ``|tau| <= tau_y``. If the walls move together and some ``C`` leaves the whole gap
    unyielded, nothing flows and the stress is indeterminate; the Newtonian field
    ``C = -G (R_o^2 - R_i^2) / (4 ln(R_o/R_i))`` (the limit of any regularisation),
    clipped to the admissible range, is reported. Valid for steady laminar fully
    developed flow. The Newtonian case reduces to Bird, Stewart & Lightfoot,
    *Transport Phenomena*, 2nd ed., section 2.4; the construction for GN fluids
    follows e.g. Fredrickson & Bird (1958), Ind. Eng. Chem. 50 (recalled from memory).

    >>> class Linear:
    ...     name = "newtonian"
    ...     def stress(self, rate):
    ...         return np.asarray(rate, dtype=float)
    >>> print(f"{annulus_flow(Linear(), 0.5, 1.0, -8.0).flow_rate:.6f}")
    0.395791
    """
    Ri, Ro = _radii(inner_radius, outer_radius)
    G = _finite("pressure_gradient", pressure_gradient)
    w_i = _finite("inner_speed", inner_speed)
    w_o = _finite("outer_speed", outer_speed)
    speed_difference = w_o - w_i
    tau_y = _exact_yield_stress(model, regularised)

    def stress_field_for(C):
        return lambda r: G * _as_array(r) / 2 + C / _as_array(r)

    def breakpoints_for(C):
        roots = [r for level in _stress_levels(model, regularised)
                 for r in _annulus_stress_roots(G, C, level)]
        return _breakpoints(Ri, Ro, roots + _decade_points(Ri, Ro))

    def residual(C):
        field = stress_field_for(C)
        rate = _integral(lambda r: _signed_rate(model, field(r), regularised),
                         breakpoints_for(C))
        return rate - speed_difference

    # C values with |tau| <= tau_y everywhere: -tau_y r - G r^2/2 <= C <= tau_y r - G r^2/2;
    # each bound is a quadratic in r, extreme at an end or at its vertex.
    rigid_range = None
    if tau_y > 0 and speed_difference == 0:
        candidates = [Ri, Ro] + ([float(np.clip(-tau_y / G, Ri, Ro)),
                                  float(np.clip(tau_y / G, Ri, Ro))] if G != 0 else [])
        r = np.array(candidates)
        least, most = np.max(-tau_y * r - G * r**2 / 2), np.min(tau_y * r - G * r**2 / 2)
        if least <= most:
            rigid_range = (least, most)
    scale = Ro * (abs(G) * Ro / 2 + _stress_at_rate(model, abs(speed_difference) / (Ro - Ri))
                  + tau_y)
    newtonian_C = -G * (Ro**2 - Ri**2) / (4 * np.log(Ro / Ri))
    if rigid_range is not None:
        C = float(np.clip(newtonian_C, *rigid_range))
    elif scale == 0:
        C = 0.0
    else:
        C = _increasing_root(residual, scale)
    return _axial_reference(model, regularised, stress_field_for(C), breakpoints_for(C),
                            w_i, w_o, True, ("inner", "outer"), anchor_at_upper=False)


def coaxial_flow(model, inner_radius, outer_radius, inner_angular_speed,
                 outer_angular_speed=0.0, regularised=False):
    """Rotational (circular Couette) flow of any GN fluid between coaxial cylinders.

    A constant torque per length ``M`` gives ``tau_r_theta = -M / (2 pi r^2)``, the flow
    curve ``r domega/dr = sgn(tau) rate(|tau|)``, and ``M`` is found by root finding so
    that ``int_{R_i}^{R_o} domega/dr dr = W_o - W_i``;
    ``omega(r) = W_o - int_r^{R_o} domega/dr``. This is the Krieger-Maron construction
    of Couette rheometry (recalled from memory).

    A yield-stress fluid (``regularised=False``) is sheared only where
    ``|M| / (2 pi r^2) > tau_y``, i.e. inside ``r_y = sqrt(|M| / (2 pi tau_y))``; beyond
    ``r_y`` it turns rigidly with the outer cylinder, and that region is reported as a
    plug. If the cylinders turn together the torque is zero (the limit of any
    regularisation). Valid below the onset of secondary flow.

    >>> class Linear:
    ...     name = "newtonian"
    ...     def stress(self, rate):
    ...         return np.asarray(rate, dtype=float)
    >>> print(f"{coaxial_flow(Linear(), 1.0, 2.0, 3.0).torque_per_length / np.pi:.8f}")
    16.00000000
    """
    Ri, Ro = _radii(inner_radius, outer_radius)
    W_i = _finite("inner_angular_speed", inner_angular_speed)
    W_o = _finite("outer_angular_speed", outer_angular_speed)
    speed_difference = W_i - W_o
    tau_y = _exact_yield_stress(model, regularised)

    def stress_field_for(torque):
        return lambda r: -torque / (2 * np.pi * _as_array(r) ** 2)

    def breakpoints_for(torque):
        # |tau| = |M| / (2 pi r^2) reaches each (positive) kink level at one radius
        radii = [np.sqrt(abs(torque) / (2 * np.pi * level))
                 for level in _stress_levels(model, regularised) if level > 0]
        return _breakpoints(Ri, Ro, radii + _decade_points(Ri, Ro))

    def angular_gradient_for(torque):
        field = stress_field_for(torque)
        return lambda r: _signed_rate(model, field(r), regularised) / r

    def residual(torque):
        return -_integral(angular_gradient_for(torque), breakpoints_for(torque)) - speed_difference

    if speed_difference == 0:
        torque = 0.0
    else:
        rate_needed = abs(speed_difference) / np.log(Ro / Ri)
        scale = 2 * np.pi * Ro**2 * (_stress_at_rate(model, rate_needed) + tau_y)
        torque = _increasing_root(residual, scale)
    stress_field = stress_field_for(torque)
    breakpoints = breakpoints_for(torque)
    angular_gradient = angular_gradient_for(torque)

    def angular_speed(r):
        return W_o - _cumulative_integral(angular_gradient, breakpoints, r, from_upper=True)

    def shear_stress(r):
        return stress_field(_as_array(r))

    plugs = _plug_intervals(stress_field, breakpoints, tau_y)
    return RotationalReference(angular_speed, shear_stress, float(torque), plugs)


# --------------------------------------------------------------------------- 2-D sections

def rectangle_newtonian_flow_rate(width, height, viscosity, pressure_gradient, terms=200):
    """Newtonian flow rate through a rectangular duct, by the classical Fourier series.

    ``Q = (-G) b h^3 / (12 mu) [1 - (192 h / (pi^5 b)) sum_{n odd} tanh(n pi b / (2 h)) / n^5]``
    with ``h <= b`` the shorter and ``b`` the longer side (White, *Viscous Fluid Flow*,
    2nd ed., eq. 3-48; Shah & London 1978, ch. VII; recalled from memory). Valid for any
    aspect ratio; ``h / b -> 0`` gives the slit, ``(-G) b h^3 / (12 mu)``.

    >>> q = rectangle_newtonian_flow_rate(1.0, 1.0, 1.0, -1.0)
    >>> round(q, 6)    # square duct: 0.0351 (-G) a^4 / mu, a the side
    0.035144
    """
    b, h = max(width, height), min(width, height)
    n = np.arange(1, 2 * terms, 2, dtype=float)
    series = np.sum(np.tanh(n * np.pi * b / (2 * h)) / n ** 5)
    return float(-pressure_gradient * b * h ** 3 / (12 * viscosity)
                 * (1 - 192 * h / (np.pi ** 5 * b) * series))


def eccentric_annulus_newtonian_flow_rate(inner_radius, outer_radius, offset, viscosity,
                                          pressure_gradient, terms=400):
    """Newtonian flow rate through an eccentric annulus, by the bipolar-coordinate series.

    With ``c`` the offset of the centres, ``F = (ro^2 - ri^2 + c^2) / (2c)``,
    ``M = sqrt(F^2 - ro^2)``, ``alpha = ln((F + M)/(F - M)) / 2`` and
    ``beta = ln((F - c + M)/(F - c - M)) / 2``:

    ``Q = pi (-G) / (8 mu) [ro^4 - ri^4 - 4 c^2 M^2 / (beta - alpha)
    - 8 c^2 M^2 sum_n n exp(-n (beta + alpha)) / sinh(n (beta - alpha))]``

    (Piercy, Hooper & Winny 1933; Snyder & Goldstein 1965; in White, *Viscous Fluid
    Flow*, 2nd ed., section 3-3; recalled from memory, and confirmed here by the finite
    element solution converging to it at fourth order). ``c -> 0`` recovers the
    concentric annulus.

    >>> q = eccentric_annulus_newtonian_flow_rate(0.01, 0.03, 0.01, 1.0, -1000.0)
    >>> round(q * 1e4, 6)
    1.122529
    """
    ri, ro, c = float(inner_radius), float(outer_radius), float(offset)
    if not 0 < c < ro - ri:
        raise ValueError("offset must be in (0, outer_radius - inner_radius)")
    F = (ro ** 2 - ri ** 2 + c ** 2) / (2 * c)
    M = np.sqrt(F ** 2 - ro ** 2)
    alpha = 0.5 * np.log((F + M) / (F - M))
    beta = 0.5 * np.log((F - c + M) / (F - c - M))
    n = np.arange(1, terms + 1, dtype=float)
    series = np.sum(n * np.exp(-n * (beta + alpha)) / np.sinh(n * (beta - alpha)))
    return float(np.pi * (-pressure_gradient) / (8 * viscosity) * (
        ro ** 4 - ri ** 4 - 4 * c ** 2 * M ** 2 / (beta - alpha) - 8 * c ** 2 * M ** 2 * series))


# --------------------------------------------------------------------------- helical flow

@dataclass(frozen=True)
class HelicalReference:
    """Helical flow in a concentric annulus: axial speed ``w(r)``, angular speed
    ``omega(r)``, the two stress components and the integral quantities.

    ``torque_per_length`` is what must be applied to the inner cylinder (as in
    :class:`RotationalReference`); ``axial_constant`` and ``azimuthal_constant`` are the
    ``A`` and ``B`` of ``tau_rz = G r / 2 + A / r`` and ``tau_r_theta = B / r^2``.
    """

    velocity: Callable[[np.ndarray], np.ndarray]
    angular_speed: Callable[[np.ndarray], np.ndarray]
    axial_stress: Callable[[np.ndarray], np.ndarray]
    azimuthal_stress: Callable[[np.ndarray], np.ndarray]
    flow_rate: float
    pressure_gradient: float
    torque_per_length: float
    axial_constant: float
    azimuthal_constant: float


def _panel_rule(lower, upper, panels=48, points=16):
    """Composite Gauss-Legendre nodes and weights on [lower, upper]."""
    x, w = np.polynomial.legendre.leggauss(points)
    edges = np.linspace(lower, upper, panels + 1)
    half = 0.5 * np.diff(edges)[:, None]
    nodes = (0.5 * (edges[:-1] + edges[1:]))[:, None] + half * x
    return nodes.ravel(), (half * w).ravel()


def helical_annulus_flow(model, inner_radius, outer_radius, pressure_gradient=None,
                         inner_angular_speed=0.0, outer_angular_speed=0.0, inner_speed=0.0,
                         outer_speed=0.0, flow_rate=None, regularised=True):
    """Helical flow of a generalized Newtonian fluid in a concentric annulus (semi-analytic).

    Steady, laminar, fully developed flow with axial speed ``w(r)`` and angular speed
    ``omega(r)``; the shear rate is the magnitude of the whole motion,
    ``gamma = sqrt(w'^2 + (r omega')^2)``, and the stress is ``eta(gamma)`` times the rate
    of strain. The axial and torque balances, ``(r tau_rz)' = G r`` and
    ``(r^2 tau_r_theta)' = 0``, give the two stress components up to two constants,

        tau_rz = G r / 2 + A / r,     tau_r_theta = B / r^2,

    and the flow curve at the stress magnitude ``|tau| = sqrt(tau_rz^2 + tau_r_theta^2)``
    gives ``gamma``; then ``w' = gamma tau_rz / |tau|`` and
    ``r omega' = gamma tau_r_theta / |tau|``. ``A`` and ``B`` (and ``G``, when a
    ``flow_rate`` is given instead) are the roots of the wall conditions
    ``int w' dr = w_o - w_i``, ``int omega' dr = Omega_o - Omega_i`` (and
    ``Q = pi (R_o^2 w_o - R_i^2 w_i) - pi int r^2 w' dr``), found by Powell's hybrid method
    with the integrals by 768-point composite Gauss-Legendre quadrature. The torque applied
    to the inner cylinder per length is ``M = -2 pi B``.

    Derived here from the momentum balances of the helical flow (the same reasoning as
    Bird, Stewart & Lightfoot, *Transport Phenomena*, sections 2.4 and 3.6, for the two
    motions alone). A Newtonian fluid decouples exactly into those two textbook flows.
    Valid for monotone flow curves; ``regularised`` as in :func:`rate_from_stress` (the
    exact yield-stress inverse has kinks at plug edges, where this quadrature is less
    accurate). Relative accuracy about 1e-10 for smooth fluids.

    >>> class Linear:
    ...     def stress(self, rate):
    ...         return 2.0 * np.asarray(rate, dtype=float)
    >>> ref = helical_annulus_flow(Linear(), 1.0, 2.0, -8.0, inner_angular_speed=3.0)
    >>> print(f"{ref.torque_per_length / np.pi:.6f}")   # 4 pi mu W R_i^2 R_o^2 / (R_o^2 - R_i^2)
    32.000000
    """
    Ri, Ro = _radii(inner_radius, outer_radius)
    if (pressure_gradient is None) == (flow_rate is None):
        raise ValueError("give exactly one of pressure_gradient and flow_rate")
    w_i, w_o = _finite("inner_speed", inner_speed), _finite("outer_speed", outer_speed)
    W_i = _finite("inner_angular_speed", inner_angular_speed)
    W_o = _finite("outer_angular_speed", outer_angular_speed)
    r, weight = _panel_rule(Ri, Ro)
    gap, mean = Ro - Ri, 0.5 * (Ri + Ro)
    rotation_rate = abs(W_o - W_i) * mean / gap

    def rates(A, B, G, radii):
        axial, azimuthal = G * radii / 2 + A / radii, B / radii ** 2
        magnitude = np.hypot(axial, azimuthal)
        gamma = rate_from_stress(model, magnitude, regularised)
        ratio = np.divide(gamma, magnitude, out=np.zeros_like(gamma), where=magnitude > 0)
        return ratio * axial, ratio * azimuthal / radii       # w', omega'

    # scales: a stress from the rotation and the drive, and the rate it gives
    drive_stress = abs(pressure_gradient) * gap / 2 if pressure_gradient else 0.0
    if flow_rate is not None:
        drive_stress = _stress_at_rate(model, 6 * abs(flow_rate) / (np.pi * (Ro**2 - Ri**2)) / gap)
    stress = max(drive_stress, _stress_at_rate(model, rotation_rate),
                 _stress_at_rate(model, abs(w_o - w_i) / gap), 1e-300)
    rate = max(float(rate_from_stress(model, np.array([stress]), True)[0]), 1e-300)
    mu = stress / rate
    area = np.pi * (Ro**2 - Ri**2)

    def equations(unknowns):
        A, B = unknowns[0] * stress * mean, unknowns[1] * stress * mean**2
        G = pressure_gradient if flow_rate is None else unknowns[2] * stress / gap
        dw, domega = rates(A, B, G, r)
        out = [(weight @ dw - (w_o - w_i)) / (rate * gap),
               (weight @ domega - (W_o - W_i)) / (rate * gap / mean)]
        if flow_rate is not None:
            q = np.pi * (Ro**2 * w_o - Ri**2 * w_i) - np.pi * weight @ (r**2 * dw)
            out.append((q - flow_rate) / (rate * gap * area))
        return np.array(out)

    # start from the Newtonian solution with the viscosity at the rate scale
    if flow_rate is None:
        G0 = pressure_gradient
    else:
        unit = annulus_newtonian(Ri, Ro, mu, -1.0, w_i, w_o).flow_rate
        walls = annulus_newtonian(Ri, Ro, mu, 0.0, w_i, w_o).flow_rate
        G0 = -(flow_rate - walls) / (unit - walls)
    A0 = mu * (w_o - w_i - G0 * (Ro**2 - Ri**2) / (4 * mu)) / np.log(Ro / Ri)
    B0 = -2 * mu * (W_i - W_o) * Ri**2 * Ro**2 / (Ro**2 - Ri**2)
    guess = [A0 / (stress * mean), B0 / (stress * mean**2)]
    if flow_rate is not None:
        guess.append(G0 * gap / stress)
    from scipy.optimize import root
    found = root(equations, guess, method="hybr", options={"xtol": 1e-14})
    if not (found.success or np.max(np.abs(equations(found.x))) < 1e-11):
        raise RuntimeError(f"helical_annulus_flow: the wall conditions were not met ({found.message})")
    A, B = found.x[0] * stress * mean, found.x[1] * stress * mean**2
    G = pressure_gradient if flow_rate is None else found.x[2] * stress / gap
    nodes, unit_weights = np.polynomial.legendre.leggauss(200)

    def integrated(radii, which, start):
        radii = _as_array(radii)
        half = 0.5 * (radii - Ri)[..., None]
        points = Ri + half * (nodes + 1)
        derivative = rates(A, B, G, points.ravel())[which].reshape(points.shape)
        return start + np.sum(derivative * unit_weights * half, axis=-1)

    dw, _ = rates(A, B, G, r)
    q = np.pi * (Ro**2 * w_o - Ri**2 * w_i) - np.pi * weight @ (r**2 * dw)
    return HelicalReference(
        velocity=lambda radii: integrated(radii, 0, w_i),
        angular_speed=lambda radii: integrated(radii, 1, W_i),
        axial_stress=lambda radii: G * _as_array(radii) / 2 + A / _as_array(radii),
        azimuthal_stress=lambda radii: B / _as_array(radii) ** 2,
        flow_rate=float(q), pressure_gradient=float(G), torque_per_length=float(-2 * np.pi * B),
        axial_constant=float(A), azimuthal_constant=float(B))


# --------------------------------------------------------------------------- eccentric rotation

@dataclass(frozen=True)
class EccentricRotationReference:
    """Newtonian creeping flow between eccentric cylinders, the inner one turning.

    ``inner_torque_per_length``: N m/m applied to the inner cylinder, about its own centre,
    to keep it turning (the sign of the angular speed); ``outer_torque_per_length``: applied
    to the outer cylinder, about its own centre, to hold it still (opposite sign).
    ``inner_force_per_length``: N/m the fluid exerts on the inner cylinder, perpendicular to
    the line of centres, positive along ``z x (inner centre - outer centre)`` for a positive
    angular speed; it follows from the moment balance of the fluid,
    ``M_inner + M_outer = offset * F``. ``circulating_flow_rate``: m^2/s (per length), the
    in-plane volume flux through the gap between the walls (the stream-function jump).
    ``alpha``, ``beta``, ``focus``: the bipolar coordinates of the inner and outer circle and
    the focal distance ``a`` (m).
    """

    inner_torque_per_length: float
    outer_torque_per_length: float
    inner_force_per_length: float
    circulating_flow_rate: float
    alpha: float
    beta: float
    focus: float


def eccentric_rotation_newtonian(inner_radius, outer_radius, offset, viscosity,
                                 inner_angular_speed) -> EccentricRotationReference:
    """Torques of the Newtonian creeping flow between eccentric cylinders, in closed form.

    The inner cylinder (radius ``R1``) turns at ``Omega`` about its own centre, the outer
    (``R2``) is at rest, their centres ``offset`` (``e``) apart; plane Stokes flow. Jeffery
    (1922, Proc. R. Soc. A 101) solved it in bipolar coordinates and Wannier (1950, Q.
    Appl. Math. 8) gave the flow; the derivation below is our own, along Jeffery's lines,
    and every step was checked by computer algebra and numerically (see the checks).

    **Coordinates.** ``x + i y = i a cot((eta + i xi) / 2)``, i.e.
    ``x = a sinh xi / H``, ``y = a sin eta / H``, ``H = cosh xi - cos eta``, metric
    ``ds = (a / H) sqrt(dxi^2 + deta^2)``. The circle ``xi = const > 0`` has radius
    ``a / sinh xi`` and centre ``(a coth xi, 0)``; with ``d1 = (R2^2 - R1^2 - e^2) / (2 e)``
    (distance of the inner centre from the origin), ``d2 = d1 + e`` and
    ``a = sqrt(d1^2 - R1^2)``, the inner wall is ``xi = alpha = asinh(a / R1)`` and the
    outer ``xi = beta = asinh(a / R2)``, ``alpha > beta``. Lengths below are in units of
    ``a`` and speeds of ``Omega a``; the torques scale with ``mu Omega a^2``.

    **Stream function.** With ``u = dpsi/dy``, ``v = -dpsi/dx``, ``psi`` is biharmonic and
    ``chi = H psi`` satisfies an equation whose solutions even in ``eta`` are Fourier modes
    in ``eta``; only modes 0 and 1 are needed (the wall data contain no others):
    ``chi = (A0 + B0 xi) cosh xi + (C0 + D0 xi) sinh xi
    + (A1 cosh 2xi + B1 + C1 sinh 2xi + D1 xi) cos eta``.
    (Biharmonicity of ``chi / H`` checked symbolically.)

    **Walls.** A wall turning at ``Omega_k`` about its centre has ``psi = psi_k`` and
    outward (from its centre) normal derivative ``-Omega_k R_k``; since ``xi`` grows toward
    the focus, that is ``H dpsi/dxi = dchi/dxi - psi_k sinh xi_k = Omega_k R_k`` on
    ``xi = xi_k``. Take ``psi = 0`` on the outer wall and ``psi = q`` on the inner. Mode by
    mode: ``chi_0(alpha) = q cosh alpha``, ``chi_0'(alpha) = 1/sinh alpha + q sinh alpha``,
    ``chi_0(beta) = chi_0'(beta) = 0``; ``chi_1(alpha) = -q``, ``chi_1(beta) = 0``,
    ``chi_1'(alpha) = chi_1'(beta) = 0``.

    **Single-valued pressure.** ``dp/ds = mu d omega/dn`` along a wall (``omega`` the
    vorticity, harmonic), so ``p`` returns to its value round the inner cylinder only if
    ``int d omega/dxi deta = 0``. The mean of the vorticity over ``eta`` is
    ``-2 (A0 + B1 + D0 + (B0 + D1) xi)``, so the condition is ``B0 + D1 = 0``; it fixes
    ``q``.

    **Solution.** With ``d = alpha - beta``, ``s = alpha + beta``,
    ``g = d cosh d - sinh d`` and ``Delta = d^2 - sinh^2 d``: mode 1 gives
    ``k = q / (2 g)``, ``A1 = -k sinh s``, ``C1 = k cosh s``, ``D1 = -2 k cosh d``,
    ``B1 = k sinh d + 2 k beta cosh d``; mode 0, written about the outer wall with
    ``t = xi - beta``, is ``chi_0 = P (t cosh t - sinh t) + Q t sinh t`` (zero with its slope
    at ``t = 0``), so that ``B0 = P cosh beta - Q sinh beta``, ``D0 = Q cosh beta -
    P sinh beta``, ``A0 = P (sinh beta - beta cosh beta) + Q beta sinh beta``. The inner
    wall conditions give ``P = [q cosh alpha (sinh d + d cosh d) - d sinh d (q sinh alpha
    + 1/sinh alpha)] / Delta``, ``Q = [g (q sinh alpha + 1/sinh alpha) - q d sinh d
    cosh alpha] / Delta``, and ``B0 = -D1`` then

        q = g (d sinh alpha - sinh d sinh beta)
            / (sinh alpha sinh d (g cosh s + sinh d cosh d - d)).

    **Torques.** On a no-slip wall turning rigidly at ``Omega_k`` the traction is
    ``-p n + mu (omega - 2 Omega_k) t`` (``n`` into the fluid, ``t = z x n``): the
    velocity less the wall's rigid motion vanishes on the wall and is divergence-free, so
    its gradient is ``(omega - 2 Omega_k) t n^T``. The pressure has no moment about a
    circle's centre, so the torque per length applied to the inner wall is
    ``M1 = mu R1 (4 pi Omega R1 - Gamma(alpha))`` and to the outer ``M2 = mu R2
    Gamma(beta)``, with ``Gamma(xi)`` the vorticity integrated round the circle. The
    ``eta`` integrals reduce to ``int_0^2pi H^-k deta`` (elementary), and with
    ``B0 + D1 = 0``:

        Gamma(xi) = -(4 pi / sinh xi) [A0 + B1 + D0 (1 - exp(-2 xi)) / 2
                    + (k / 2) (exp(-s) - 2 exp(s - 2 xi) + exp(s - 4 xi))].

    **Checks** (``tests/test_helical.py``, and measured when this was written): the
    concentric limit ``4 pi mu Omega R1^2 R2^2 / (R2^2 - R1^2)`` (Couette) with a relative
    difference falling as ``e^2`` (2.71e-4 at ``e = 0.01``, 2.71e-6 at ``e = 0.001`` for
    ``R1/R2 = 0.5``); the narrow-gap limit, Sommerfeld's full-film journal torque
    ``4 pi mu Omega R^3 / c (1 + 2 eps^2) / ((2 + eps^2) sqrt(1 - eps^2))`` on the inner
    wall, and on the outer that less the load times the offset, with Sommerfeld's load
    ``12 pi mu Omega R^3 eps / (c^2 (2 + eps^2) sqrt(1 - eps^2))`` (Sommerfeld 1904, both
    recalled from memory), the relative differences falling as ``c / R``; the same
    constants found by solving the nine wall and pressure conditions numerically; and the
    finite-element solution converging to it at fourth order under refinement.

    Rounding: the hyperbolic functions grow like ``1 / e`` as the cylinders become
    concentric and the bracket cancels; the result keeps about 1e-8 relative accuracy
    down to ``e = 1e-3 (R2 - R1)`` (measured), below which this raises ``ValueError``
    (use :func:`coaxial_newtonian`).

    >>> ref = eccentric_rotation_newtonian(0.5, 1.0, 0.15, 1.0, 1.0)
    >>> print(f"{ref.inner_torque_per_length:.6f} {ref.outer_torque_per_length:.6f}")
    4.455513 -3.846596
    """
    r1, r2 = _radii(inner_radius, outer_radius)
    e = _positive("offset", offset)
    mu = _positive("viscosity", viscosity)
    omega = _finite("inner_angular_speed", inner_angular_speed)
    if not e >= 1e-3 * (r2 - r1) or not e < r2 - r1:
        raise ValueError(f"offset must be in [1e-3, 1) times the gap {r2 - r1:g}, got {e:g}")
    d1 = (r2 ** 2 - r1 ** 2 - e ** 2) / (2 * e)
    d2 = d1 + e
    a = np.sqrt((d1 - r1) * (d1 + r1))
    sa, ca, sb, cb = a / r1, d1 / r1, a / r2, d2 / r2          # sinh, cosh of alpha, beta
    beta = np.log((a + d2) / r2)
    d = np.log((a + d1) * r2 / ((a + d2) * r1))                 # alpha - beta
    alpha = beta + d
    s = alpha + beta
    shd, chd, chs = sa * cb - ca * sb, ca * cb - sa * sb, ca * cb + sa * sb
    g = d * chd - shd
    q = g * (d * sa - shd * sb) / (sa * shd * (g * chs + shd * chd - d))
    delta = d * d - shd * shd
    p_ = (q * ca * (shd + d * chd) - d * shd * (q * sa + 1 / sa)) / delta
    q_ = (g * (q * sa + 1 / sa) - d * shd * q * ca) / delta
    k = q / (2 * g)
    a0 = p_ * (sb - beta * cb) + q_ * beta * sb
    d0 = q_ * cb - p_ * sb
    b1 = k * shd + 2 * k * beta * chd

    def circulation(xi, sinh_xi):
        return -(4 * np.pi / sinh_xi) * (a0 + b1 + d0 * (1 - np.exp(-2 * xi)) / 2 + k / 2 * (
            np.exp(-s) - 2 * np.exp(s - 2 * xi) + np.exp(s - 4 * xi)))

    scale = mu * omega * a * a
    inner = scale * (4 * np.pi / sa ** 2 - circulation(alpha, sa) / sa)
    outer = scale * circulation(beta, sb) / sb
    return EccentricRotationReference(
        inner_torque_per_length=float(inner), outer_torque_per_length=float(outer),
        inner_force_per_length=float((inner + outer) / e),
        circulating_flow_rate=float(q * omega * a * a), alpha=float(alpha), beta=float(beta),
        focus=float(a))
