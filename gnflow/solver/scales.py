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
    """The shear rate at which the model's stress equals ``stress`` (> 0), clipped to
    [e^-60, e^60] 1/s; NaN if the stress is not finite or the flow curve is undefined
    (NaN) at those ends (a model whose values leave the floating-point range)."""
    low, high = -60.0, 60.0
    closed = _closed_form_rate(model, stress)
    if closed is not None:
        return min(max(closed, math.exp(low)), math.exp(high))

    def gap(log_rate):
        return float(model.stress(np.array([math.exp(log_rate)]))[0]) - stress
    gap_low, gap_high = gap(low), gap(high)
    if not math.isfinite(stress) or math.isnan(gap_low) or math.isnan(gap_high):
        return math.nan
    if gap_low >= 0:
        return math.exp(low)
    if gap_high <= 0:
        return math.exp(high)
    return math.exp(brentq(gap, low, high, xtol=1e-10))


def _closed_form_rate(model: rheology.Model, stress: float) -> float | None:
    """The rate at ``stress`` of a Newtonian or power-law fluid in closed form (exact where
    the root search would stop within 1e-10 of it), or None for another model or a value
    beyond the floating-point range (the root search decides then)."""
    if not (math.isfinite(stress) and stress > 0):
        return None
    if type(model) is rheology.Newtonian:
        rate = stress / model.viscosity_value
    elif type(model) is rheology.PowerLaw:
        try:
            rate = math.exp((math.log(stress) - math.log(model.consistency)) / model.flow_index)
        except OverflowError:
            return None
    else:
        return None
    return rate if math.isfinite(rate) and rate > 0 else None


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
    # a flow curve beyond the floating-point range gives no scale: 1 1/s then stands in
    finite = [r for r in rates if math.isfinite(r)]
    return max(max(finite, default=1.0), 1e-300)


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


def rectangle_stopping_gradient(width: float, height: float, yield_stress: float) -> float:
    """|dp/dz| below which a Bingham or Herschel-Bulkley fluid does not flow in a
    ``width x height`` rectangular duct with fixed walls (Pa/m).

    The limit load is ``tau_y h(Omega)`` with ``h`` the Cheeger constant of the section
    (Mosolov & Miasnikov 1965, J. Appl. Math. Mech. 29); for a convex section the Cheeger
    set is the union of the discs of radius ``r = 1/h`` inside it, with ``r`` fixed by
    ``|Omega_{-r}| = pi r^2`` (Kawohl & Lachand-Robert 2006, Pacific J. Math. 225, recalled
    from memory). For a rectangle ``(a - 2r)(b - 2r) = pi r^2``, so

        r = ((a + b) - sqrt((a + b)^2 - (4 - pi) a b)) / (4 - pi),   G_c = tau_y / r;

    for a square of side L this is the Mosolov-Miasnikov value ``G_c = (2 + sqrt(pi)) tau_y / L``.

    >>> round(rectangle_stopping_gradient(1.0, 1.0, 1.0), 6)   # 2 + sqrt(pi)
    3.772454
    """
    a, b = width, height
    r = ((a + b) - math.sqrt((a + b) ** 2 - (4 - math.pi) * a * b)) / (4 - math.pi)
    return yield_stress / r


#: Cells of the finer of the two meshes on which an eccentric annulus's stopping
#: gradient is computed when its own mesh is finer. The limit-load program's cost grows
#: fast with the mesh (e = 0.5, 2026-12-03: 8k unknowns 0.9 s, 33k 12 s, 73k 29 s, 114k
#: 51 s, ten times the regularised solve it checked), and its value converges from above
#: at first order (8, 16, 32 cells: 65.70, 63.89, 63.01 tau_y-units), so the Richardson
#: value 2 G(16) - G(8) = 62.08 is closer to the limit than the 114k mesh's own value;
#: on the square duct 2 G(24) - G(12) is within 0.01 % of the closed form.
STOP_MESH_CELLS = 16


def stopping_gradient(domain: Domain, yield_stress: float, case: Case | None = None
                      ) -> float | None:
    """The 2-D section's own stopping pressure gradient (Pa/m), or None if unknown
    (:func:`stopping_limit`)."""
    found = stopping_limit(domain, yield_stress, case)
    return found[0] if found else None


def stopping_limit(domain: Domain, yield_stress: float, case: Case | None = None):
    """``(value in Pa/m, how it was found)`` for a 2-D section, or None if unknown.

    The closed form for rectangles, else the exact method's limit-load computation
    (:func:`gnflow.solver.exact.flow_stop_pressure_gradient`): on the domain's own mesh,
    or, for an eccentric annulus finer than STOP_MESH_CELLS (given its ``case``), the
    first-order Richardson value from meshes of STOP_MESH_CELLS and half as many cells.
    The value per unit yield stress is kept on the domain: the solve's warning and the
    summary both ask for it.
    """
    if domain.shape == "rectangle":
        x = domain.basis.mesh.p
        return (rectangle_stopping_gradient(float(np.ptp(x[0])), float(np.ptp(x[1])),
                                            yield_stress),
                "limit load of the section: tau_y times the rectangle's Cheeger constant "
                "(closed form)")
    kept = domain.__dict__.get("_gnflow_stopping")
    if kept is None:
        kept = domain.__dict__["_gnflow_stopping"] = _unit_stopping_limit(domain, case)
    if kept is False:
        return None
    return abs(yield_stress) * kept[0], kept[1]


def _unit_stopping_limit(domain: Domain, case: Case | None):
    """(stopping gradient at yield stress 1, how), or False where it cannot be found."""
    try:
        from .exact import flow_stop_pressure_gradient
    except ImportError:
        return False
    failures = (ArithmeticError, RuntimeError, ValueError, np.linalg.LinAlgError)
    if (case is not None and domain.shape == "annulus" and domain.dimension == 2
            and domain.cells > STOP_MESH_CELLS):
        from ..errors import CaseError
        from ..geometry import build_domain
        try:
            fine, coarse = (abs(float(flow_stop_pressure_gradient(
                build_domain(case, cells), 1.0)))
                for cells in (STOP_MESH_CELLS, STOP_MESH_CELLS // 2))
            return (2.0 * fine - coarse, f"limit load of the section, extrapolated (first "
                    f"order) from meshes of {STOP_MESH_CELLS} and {STOP_MESH_CELLS // 2} cells")
        except (CaseError, *failures):
            pass   # a coarse mesh that folds (high eccentricity): the domain's own mesh
    try:
        return (abs(float(flow_stop_pressure_gradient(domain, 1.0))),
                "limit load of the section")
    except failures:
        return False


#: Within this factor above the stopping drive, a regularised solve is unreliable
NEAR_STOP = 1.1


def stopping_warnings(case: Case, domain: Domain, solution) -> list[str]:
    """Warnings for a 2-D pressure-driven yield-stress flow at or near its stopping limit.

    The test compares the drive with the section's stopping pressure gradient
    (:func:`stopping_gradient`), not the largest wall stress with the yield stress: in 2-D
    the wall stress is not uniform and the fluid stops at a drive above the one at which
    the largest wall stress reaches the yield stress.
    """
    model = solution.model
    moving = any(v != 0 for v in case.drive.wall_speed.values())
    if domain.dimension != 2 or domain.kind != "axial" or moving:
        return []
    critical = stopping_gradient(domain, model.yield_stress, case)
    if not critical:
        return []
    share = abs(solution.pressure_gradient) / critical
    if share <= 1.0:
        return [f"the pressure gradient is {share:.3g} of the section's stopping pressure "
                f"gradient {critical:.4g} Pa/m: the material does not flow; the small flow "
                "computed is creep of the regularised model, not a real flow"]
    if share <= NEAR_STOP:
        return [f"the pressure gradient is only {share:.3g} times the section's stopping "
                f"pressure gradient {critical:.4g} Pa/m: near that limit the regularised flow "
                "and its plug are sensitive to the regularisation and to the mesh (see "
                "regularisation.mesh_error_estimate); the exact method "
                "([fluid.regularisation] method = \"none\") is the reliable choice"]
    return []
