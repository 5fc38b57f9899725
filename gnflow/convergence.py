"""Mesh-convergence numerics: observed order, Richardson extrapolation, grid convergence index.

Pure functions of numbers: no mesh, no solver. A convergence study solves the same case on
a sequence of meshes, reduces each solution to a scalar (a flow rate, a wall shear stress, a
torque) and hands the representative cell sizes ``h`` and the scalars to this module.

Conventions, as in Celik et al. (2008):

* index 1 is the finest mesh, 3 the coarsest; ``r21 = h2 / h1 > 1``, ``r32 = h3 / h2 > 1``;
* ``eps21 = phi2 - phi1`` and ``eps32 = phi3 - phi2``;
* relative errors and the GCI are fractions of the fine-mesh value (0.015 means 1.5 %).

Functions that take three or more levels accept them in any order and sort them by ``h``.

Sources:

* L. F. Richardson (1911), Phil. Trans. R. Soc. A 210, 307: extrapolation of
  finite-difference solutions to zero step size.
* L. F. Richardson & J. A. Gaunt (1927), "The deferred approach to the limit", Phil. Trans.
  R. Soc. A 226, 299 (first page recalled from memory): the extrapolation in its general
  form, the basis of :func:`richardson_extrapolate`.
* P. J. Roache (1998), *Verification and Validation in Computational Science and
  Engineering*, Hermosa: the grid convergence index with safety factor 1.25 for three or
  more meshes (3.0 for two).
* I. B. Celik, U. Ghia, P. J. Roache, C. J. Freitas, H. Coleman, P. E. Raad (2008),
  "Procedure for Estimation and Reporting of Uncertainty Due to Discretization in CFD
  Applications", J. Fluids Eng. 130(7), 078001: the five-step three-grid procedure with
  non-constant refinement ratios, implemented by :func:`grid_convergence_index`.

>>> h = representative_cell_size([18000, 8000, 4500], dimension=2)
>>> study = grid_convergence_index(h, [6.063, 5.972, 5.863])
>>> round(study.apparent_order, 2), round(study.extrapolated_value, 4)
(1.53, 6.1685)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

ROACHE_SAFETY_FACTOR = 1.25
"""Roache's safety factor for a study of three or more meshes (3.0 is his value for two)."""

#: Differences this small, relative to the values, are round-off: the apparent order is
#: then undefined rather than huge. A study of solutions that are themselves only as exact
#: as a solver tolerance passes a larger floor (``noise``) to the functions below.
ROUND_OFF = 4 * np.finfo(float).eps

_FIXED_POINT_ITERATIONS = 200
_FIXED_POINT_TOLERANCE = 1e-13


def representative_cell_size(cells, dimension: int, measure: float = 1.0):
    """Representative cell size ``h = (measure / cells) ** (1 / dimension)``.

    Celik et al. (2008), eqs. (1)-(2): for a mesh of N cells covering a region of area
    (2-D) or volume (3-D) ``measure``, ``h = (measure / N)^(1/d)``; in 1-D it is the mean
    cell length. Only ratios of ``h`` enter the convergence numerics, so ``measure`` may be
    left at 1 when all meshes cover the same region.

    >>> representative_cell_size([400, 100], dimension=2)
    array([0.05, 0.1 ])
    """
    if dimension not in (1, 2, 3):
        raise ValueError(f"dimension = {dimension!r}: expected 1, 2 or 3")
    cells = np.asarray(cells, dtype=float)
    if np.any(~(cells > 0)) or not measure > 0:
        raise ValueError("cell counts and the measure must be > 0")
    return (measure / cells) ** (1.0 / dimension)


def observed_orders(h, errors, floor: float = 0.0):
    """Observed order of convergence between consecutive levels.

    ``p_i = ln(|e_{i-1}| / |e_i|) / ln(h_{i-1} / h_i)`` for ``i >= 1``; ``p_0`` is NaN.
    The levels are taken in the order given (coarse to fine or fine to coarse gives the
    same orders). ``errors`` are errors against a known exact value (their magnitudes are
    used); an error at or below ``floor`` (round-off: no order can be read from it), a
    non-finite error, or two equal sizes give NaN for the orders that involve it.
    Without an exact value, use :func:`grid_convergence_index` instead.

    Valid where the error behaves like ``C h^p``, i.e. in the asymptotic range; the orders
    approach the formal order of the discretisation there.

    >>> observed_orders([0.4, 0.2, 0.1], [1.6e-3, 4e-4, 1e-4])
    array([nan,  2.,  2.])
    """
    h = np.asarray(h, dtype=float)
    errors = np.abs(np.asarray(errors, dtype=float))
    if h.ndim != 1 or h.shape != errors.shape:
        raise ValueError(f"h and errors must be 1-D of equal length, got shapes "
                         f"{h.shape} and {errors.shape}")
    if np.any(~(h > 0)):
        raise ValueError("cell sizes h must be > 0")
    orders = np.full(h.shape, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio_e = errors[:-1] / errors[1:]
        ratio_h = h[:-1] / h[1:]
        usable = ((errors[:-1] > floor) & (errors[1:] > floor) & np.isfinite(ratio_e)
                  & (ratio_h != 1))
        orders[1:][usable] = np.log(ratio_e[usable]) / np.log(ratio_h[usable])
    return orders


def richardson_extrapolate(h_fine, value_fine, h_coarse, value_coarse, order):
    """Richardson extrapolation of two solutions to ``h -> 0`` (Richardson & Gaunt 1927,
    "The deferred approach to the limit", Phil. Trans. R. Soc. A 226).

    ``phi_ext = phi_f + (phi_f - phi_c) / (r^p - 1)`` with ``r = h_coarse / h_fine``,
    which is Celik et al. (2008), eq. (6): ``(r^p phi_f - phi_c) / (r^p - 1)``.
    Exact when ``phi = phi_exact + C h^p``; otherwise valid in the asymptotic range, with
    ``p`` the formal order or an observed one. Values may be numpy arrays of one shape
    (fields on shared nodes).

    >>> richardson_extrapolate(0.1, 1.01, 0.2, 1.04, order=2)
    1.0
    """
    ratio = h_coarse / h_fine
    if not (ratio > 0 and ratio != 1 and math.isfinite(ratio)):
        raise ValueError(f"h_coarse / h_fine = {ratio!r}: expected a finite ratio > 0, not 1")
    gain = ratio ** order - 1.0
    if gain == 0:
        raise ValueError(f"order = {order!r}: expected a non-zero order")
    value_fine = np.asarray(value_fine, dtype=float)
    extrapolated = value_fine + (value_fine - np.asarray(value_coarse, dtype=float)) / gain
    return float(extrapolated) if extrapolated.ndim == 0 else extrapolated


@dataclass(frozen=True)
class ThreeGridEstimate:
    """Result of the three-grid procedure of Celik et al. (2008); index 1 is the finest.

    Attributes, with the paper's symbols:

    * ``h``, ``values``: ``(h1, h2, h3)`` and ``(phi1, phi2, phi3)``, fine to coarse;
    * ``refinement_ratio_21``, ``refinement_ratio_32``: ``r21 = h2/h1``, ``r32 = h3/h2``;
    * ``difference_21``, ``difference_32``: ``eps21 = phi2 - phi1``, ``eps32 = phi3 - phi2``;
    * ``apparent_order``: ``p`` (negative when the sequence does not converge, NaN when a
      difference is zero);
    * ``extrapolated_value``: ``phi_ext^21``;
    * ``approximate_relative_error``: ``e_a^21 = |(phi1 - phi2) / phi1|``;
    * ``extrapolated_relative_error``: ``e_ext^21 = |(phi_ext^21 - phi1) / phi_ext^21|``;
    * ``gci_fine``: ``GCI_fine^21 = Fs e_a^21 / (r21^p - 1)``, the relative uncertainty
      band of ``phi1``; ``gci_fine * |phi1|`` is the band in the units of ``phi``;
    * ``safety_factor``: ``Fs``;
    * ``converging``: the apparent order is positive;
    * ``oscillatory``: ``eps32 / eps21 < 0``;
    * ``note``: one line saying what kind of sequence this is and what that means;
    * ``round_off``: the differences are at round-off level ("converged to round-off"):
      there is no order and no GCI to read, and none is needed.

    Quantities that are meaningless for a non-converging sequence are NaN.
    """

    h: tuple[float, float, float]
    values: tuple[float, float, float]
    refinement_ratio_21: float
    refinement_ratio_32: float
    difference_21: float
    difference_32: float
    apparent_order: float
    extrapolated_value: float
    approximate_relative_error: float
    extrapolated_relative_error: float
    gci_fine: float
    safety_factor: float
    converging: bool
    oscillatory: bool
    note: str
    round_off: bool = False


def _log_abs_power_minus_sign(log_ratio: float, order: float, sign: float) -> float:
    """``ln|r^p - s|`` for ``s = +-1``, written so that neither large ``p`` nor small ``p``
    loses the answer to overflow or cancellation."""
    x = order * log_ratio
    if sign < 0:
        return float(np.logaddexp(x, 0.0))
    if x >= 1.0:
        return x + math.log1p(-math.exp(-x))
    return math.log(abs(math.expm1(x)))


def _q(order: float, log_r21: float, log_r32: float, sign: float) -> float:
    """Celik et al. (2008), eq. (5b): ``q(p) = ln((r21^p - s) / (r32^p - s))``."""
    if order == 0 and sign > 0:
        return math.log(log_r21 / log_r32)   # the limit p -> 0: both terms vanish like p ln r
    return (_log_abs_power_minus_sign(log_r21, order, sign)
            - _log_abs_power_minus_sign(log_r32, order, sign))


def _apparent_order(log_r21: float, log_r32: float, log_ratio_eps: float,
                    sign: float) -> tuple[float, bool]:
    """Solve ``p ln r21 = ln|eps32/eps21| + q(p)``; return ``p`` and whether the
    fixed-point iteration found it.

    Celik et al. (2008), eq. (5a), writes ``p = |ln|eps32/eps21| + q(p)| / ln r21``. The
    absolute value is dropped here: for a converging sequence it changes nothing, and for
    a diverging one it would invent a positive order. Without it the left side minus the
    right side is strictly increasing in ``p`` (its slope is at least ``min(ln r21, ln
    r32)``), so the root is unique and bracketed by ``|residual(0)| / min(ln r) + 1``.
    The paper's fixed-point iteration, started from ``q = 0``, is tried first; it can fail
    when ``r21`` and ``r32`` differ much (its contraction factor ``1 - slope / ln r21``
    then exceeds 1 in size), and Brent's method on the bracket takes over.
    """
    order = log_ratio_eps / log_r21
    for _ in range(_FIXED_POINT_ITERATIONS):
        updated = (log_ratio_eps + _q(order, log_r21, log_r32, sign)) / log_r21
        if not math.isfinite(updated):
            break
        if abs(updated - order) <= _FIXED_POINT_TOLERANCE * max(1.0, abs(updated)):
            return updated, True
        order = updated

    def residual(p):
        return p * log_r21 - log_ratio_eps - _q(p, log_r21, log_r32, sign)

    bound = abs(residual(0.0)) / min(log_r21, log_r32) + 1.0
    return brentq(residual, -bound, bound, xtol=1e-14, rtol=4 * np.finfo(float).eps), False


def _sorted_levels(h, values, minimum: int) -> tuple[np.ndarray, np.ndarray]:
    h = np.asarray(h, dtype=float)
    values = np.asarray(values, dtype=float)
    if h.ndim != 1 or h.shape != values.shape or h.size < minimum:
        raise ValueError(f"h and values must be 1-D of equal length >= {minimum}, got shapes "
                         f"{h.shape} and {values.shape}")
    if np.any(~(h > 0)) or np.any(~np.isfinite(h)):
        raise ValueError(f"cell sizes h = {h.tolist()}: expected finite numbers > 0")
    if np.any(~np.isfinite(values)):
        raise ValueError(f"values = {values.tolist()}: expected finite numbers")
    order = np.argsort(h, kind="stable")
    h, values = h[order], values[order]
    if np.any(np.diff(h) <= 0):
        raise ValueError(f"cell sizes h = {h.tolist()}: expected distinct sizes")
    return h, values


def grid_convergence_index(h, values, safety_factor: float = ROACHE_SAFETY_FACTOR,
                           noise: float = ROUND_OFF) -> ThreeGridEstimate:
    """Discretisation uncertainty of the finest of three solutions (Celik et al. 2008).

    ``h`` and ``values`` hold three representative cell sizes (see
    :func:`representative_cell_size`) and the matching values of one scalar, in any order;
    they are sorted fine to coarse (``h1 < h2 < h3``). The procedure:

    1. ``r21 = h2/h1``, ``r32 = h3/h2`` (need not be equal; the paper recommends > 1.3);
    2. ``eps21 = phi2 - phi1``, ``eps32 = phi3 - phi2``, ``s = sign(eps32/eps21)``;
    3. apparent order ``p`` from ``p ln r21 = ln|eps32/eps21| + q(p)``,
       ``q(p) = ln((r21^p - s)/(r32^p - s))``, by fixed-point iteration from ``q = 0``
       (for ``r21 = r32``, ``q = 0`` and ``p = ln|eps32/eps21| / ln r``);
    4. ``phi_ext21 = (r21^p phi1 - phi2) / (r21^p - 1)``;
    5. ``e_a21 = |(phi1 - phi2)/phi1|``, ``e_ext21 = |(phi_ext21 - phi1)/phi_ext21|``,
       ``GCI_fine21 = Fs e_a21 / (r21^p - 1)``, ``Fs = 1.25`` (Roache 1998).

    Oscillatory convergence (``eps32/eps21 < 0``) is flagged; the paper still evaluates
    the GCI with ``s = -1``, but the error is then not bounded in the way the procedure
    assumes, so read it with caution. A sequence whose apparent order comes out negative
    (the differences do not shrink fast enough with ``h``; for a constant ratio,
    ``|eps21| >= |eps32|``) is flagged as not converging, and ``phi_ext21``, ``e_ext21``
    and the GCI are NaN. A zero difference leaves ``p`` undefined (NaN): it means either
    an exact solution or an oscillation that happens to cross, and the paper advises
    against applying the procedure then. Differences at or below ``noise`` times the
    largest value (default :data:`ROUND_OFF`; a study passes its solver's noise level)
    count as zero: such a sequence has "converged to round-off" (``round_off`` true).

    Valid in the asymptotic range, where the error behaves like ``C h^p``; an apparent
    order far from the formal order of the method says the meshes are not there yet.

    >>> study = grid_convergence_index([0.1, 0.2, 0.4], [1.01, 1.04, 1.16])
    >>> round(study.apparent_order, 12), round(study.extrapolated_value, 12)
    (2.0, 1.0)
    >>> round(study.gci_fine, 6), study.converging, study.oscillatory
    (0.012376, True, False)
    """
    if not (safety_factor > 0 and math.isfinite(safety_factor)):
        raise ValueError(f"safety_factor = {safety_factor!r}: expected a finite number > 0")
    h, phi = _sorted_levels(h, values, minimum=3)
    if h.size != 3:
        raise ValueError(f"expected three levels, got {h.size}; use gci_of_finest for more")
    h1, h2, h3 = (float(x) for x in h)
    phi1, phi2, phi3 = (float(x) for x in phi)
    r21, r32 = h2 / h1, h3 / h2
    eps21, eps32 = phi2 - phi1, phi3 - phi2
    nan = float("nan")
    approximate_relative_error = abs(eps21 / phi1) if phi1 != 0 else nan

    def estimate(order, extrapolated, extrapolated_error, gci, converging, oscillatory, note,
                 round_off=False):
        return ThreeGridEstimate(
            h=(h1, h2, h3), values=(phi1, phi2, phi3),
            refinement_ratio_21=r21, refinement_ratio_32=r32,
            difference_21=eps21, difference_32=eps32,
            apparent_order=order, extrapolated_value=extrapolated,
            approximate_relative_error=approximate_relative_error,
            extrapolated_relative_error=extrapolated_error, gci_fine=gci,
            safety_factor=float(safety_factor),
            converging=converging, oscillatory=oscillatory, note=note, round_off=round_off)

    if not (noise >= 0 and math.isfinite(noise)):
        raise ValueError(f"noise = {noise!r}: expected a finite number >= 0")
    floor = max(noise, ROUND_OFF) * max(abs(phi1), abs(phi2), abs(phi3))
    if abs(eps21) <= floor or abs(eps32) <= floor:
        which = ("all three values agree" if abs(eps21) <= floor and abs(eps32) <= floor
                 else "the two finest values agree" if abs(eps21) <= floor
                 else "the two coarsest values agree")
        if abs(eps21) <= floor:
            return estimate(nan, nan, nan, nan, False, False,
                            f"converged to round-off ({which} to {max(noise, ROUND_OFF):.0e} "
                            "relative): no order or GCI to read", round_off=True)
        return estimate(nan, nan, nan, nan, False, False,
                        f"{which}: apparent order undefined, no estimate")

    oscillatory = eps32 / eps21 < 0
    sign = -1.0 if oscillatory else 1.0
    order, by_fixed_point = _apparent_order(math.log(r21), math.log(r32),
                                            math.log(abs(eps32 / eps21)), sign)
    kind = "oscillatory" if oscillatory else "monotone"
    if not order > 0:
        return estimate(order, nan, nan, nan, False, oscillatory,
                        f"{kind} divergence (apparent order {order:.3g}): no estimate")

    gain = r21 ** order - 1.0
    extrapolated = (r21 ** order * phi1 - phi2) / gain
    extrapolated_error = abs((extrapolated - phi1) / extrapolated) if extrapolated != 0 else nan
    gci = safety_factor * approximate_relative_error / gain
    note = f"{kind} convergence, apparent order {order:.3g}"
    if oscillatory:
        note += "; oscillation makes the estimate less reliable"
    if not by_fixed_point:
        note += "; order found by bracketing (fixed-point iteration did not settle)"
    return estimate(order, extrapolated, extrapolated_error, gci, True, oscillatory, note)


def gci_of_finest(h, values, safety_factor: float = ROACHE_SAFETY_FACTOR) -> ThreeGridEstimate:
    """Grid convergence index of the finest level of a study of three or more levels.

    Sorts the levels by ``h`` and applies :func:`grid_convergence_index` to the three
    smallest, as Celik et al. (2008) recommend for reporting the uncertainty of the finest
    solution. Coarser levels do not enter; compare :func:`observed_orders` of the
    successive differences to judge whether they are in the asymptotic range.

    >>> h = [0.8, 0.4, 0.2, 0.1]
    >>> study = gci_of_finest(h, [1.0 + 0.5 * x ** 2 for x in h])
    >>> study.h, round(study.apparent_order, 12)
    ((0.1, 0.2, 0.4), 2.0)
    """
    h, phi = _sorted_levels(h, values, minimum=3)
    return grid_convergence_index(h[:3], phi[:3], safety_factor)
