"""Derived quantities of a solved flow: flow rate, wall stresses, torque, plugs, Re.

Wall shear stresses and the torque come from the discrete reaction at the wall dofs (the
residual of the momentum balance with the walls left free), which is the consistent,
superconvergent flux of the finite element solution, and not from a differentiated field.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from skfem import BilinearForm, FacetBasis, LinearForm, asm

from .laminar import bingham_plastic_reynolds, laminar_limit, laminar_warning
from .solver import Solution, invert_flow_curve

#: Critical Taylor number of the narrow-gap Taylor-Couette flow with the inner cylinder
#: turning (Taylor 1923; 1708 is the classical narrow-gap value, common practice as a limit)
CRITICAL_TAYLOR = 1708.0

ASSUMPTIONS = ("laminar, isothermal, steady, fully developed flow of an incompressible "
               "generalized Newtonian fluid; no slip at the walls unless a wall speed is given; "
               "the viscosity model is only as good as its fit to the user's measurements")
CAUTION = ("gnflow results support, and do not replace, engineering judgement: check every "
           "design against the applicable codes and have it reviewed by a qualified engineer")


@LinearForm
def _unyielded_area(v, w):
    return w.indicator * w.area_weight * v


@BilinearForm
def _mass(u, v, w):
    return u * v


@LinearForm
def _load_of(v, w):
    return w.value_at_points * v


def project(basis, values_at_points) -> np.ndarray:
    """L2 projection of a quadrature-point field onto the basis, by conjugate gradients
    on the mass matrix (well conditioned; no factorisation at any size)."""
    mass = asm(_mass, basis).tocsr()
    load = asm(_load_of, basis, value_at_points=values_at_points)
    diagonal = mass.diagonal()
    result, _ = spla.cg(mass, load, rtol=1e-12, maxiter=500,
                        M=sp.diags(1.0 / diagonal))
    return result


def _once(function):
    """Compute a derived quantity of a solution once; the summary and every output file
    then share it (the projections behind ``fields`` are the dearest part of a run)."""
    def cached(solution: Solution):
        if function.__name__ not in solution.derived:
            solution.derived[function.__name__] = function(solution)
        return solution.derived[function.__name__]
    cached.__name__, cached.__doc__ = function.__name__, function.__doc__
    return cached


@_once
def fields(solution: Solution) -> dict[str, np.ndarray]:
    """Point fields at the dofs: velocity (axial) or angular speed, shear rate,
    apparent viscosity, shear stress magnitude; plus the coordinate ``x``."""
    basis = solution.domain.basis
    problem = solution.problem()
    x = basis.doflocs
    gradient = np.array([project(basis, g) for g in basis.interpolate(solution.u).grad])
    rate = np.sqrt(np.sum(gradient ** 2, axis=0)) * solution.domain.rate_factor(x)
    rate = np.maximum(rate, problem.rate_floor)
    viscosity = solution.model.viscosity(np.maximum(rate, 1e-300))
    out = {"x": x, "shear_rate": rate, "viscosity": viscosity, "shear_stress": viscosity * rate}
    if solution.model.is_yield_stress:
        out["unyielded"] = (out["shear_stress"] < solution.model.yield_stress).astype(float)
    if solution.domain.kind == "axial":
        out["velocity"] = solution.u
    else:
        out["angular_speed"] = solution.u
        out["velocity"] = solution.u * x[0]  # azimuthal speed r * omega
    return out


def wall_stresses(solution: Solution) -> dict[str, float]:
    """Shear stress the fluid exerts on each wall (Pa), in +z for axial flows, and the
    wall-tangential stress magnitude for rotational flow."""
    problem = solution.problem()
    reaction = problem.residual(solution.u, solution.pressure_gradient)
    out = {}
    for name, wall in solution.domain.walls.items():
        force = float(np.sum(reaction[wall.dofs]))  # per unit length, on the fluid
        # the reaction is a s^2 (eta du/dn) at the wall: divide by the wall's weight
        out[name] = -force / wall.perimeter
        if solution.domain.kind == "rotational":
            out[name] = abs(force) / (wall.perimeter * wall.position)
    return out


@_once
def wall_distributions(solution: Solution) -> dict[str, dict[str, np.ndarray]]:
    """Along each wall of a 2-D section: arc length ``s`` (m, along the chained wall
    facets), points ``x``, ``y``, and the wall shear stress (Pa, on the wall in +z) and
    shear rate (1/s) at the facet quadrature points."""
    domain = solution.domain
    mesh = domain.basis.mesh
    out = {}
    for name, wall in domain.walls.items():
        facets = _chained(mesh, wall_facets_of(solution, name))
        facet_basis = FacetBasis(mesh, domain.basis.elem, facets=facets)
        gradient = facet_basis.interpolate(solution.u).grad
        normal_derivative = np.sum(gradient * facet_basis.normals, axis=0)
        rate = np.abs(normal_derivative)
        viscosity = solution.model.viscosity(np.sqrt(np.sum(gradient ** 2, axis=0)
                                                     + solution.rate_floor ** 2))
        stress = -viscosity * normal_derivative
        points = np.asarray(facet_basis.global_coordinates())
        lengths = facet_basis.dx.sum(axis=1)
        start = np.concatenate([[0.0], np.cumsum(lengths)[:-1]])
        # positions of the quadrature points along each facet, in proportion to weights
        fraction = np.cumsum(facet_basis.dx, axis=1) - 0.5 * facet_basis.dx
        s = start[:, None] + fraction
        order = np.argsort(s.ravel(), kind="stable")
        out[name] = {"s": s.ravel()[order], "x": points[0].ravel()[order],
                     "y": points[1].ravel()[order], "shear_stress": stress.ravel()[order],
                     "shear_rate": rate.ravel()[order], "weight": facet_basis.dx.ravel()[order]}
    return out


def wall_facets_of(solution: Solution, name: str) -> np.ndarray:
    return solution.domain.extra["wall_facets"][name]


def _chained(mesh, facets: np.ndarray) -> np.ndarray:
    """The facets of a wall ordered head to tail (each open or closed chain in turn)."""
    ends = mesh.facets[:, facets]
    by_vertex: dict[int, list[int]] = {}
    for k in range(facets.size):
        for v in ends[:, k]:
            by_vertex.setdefault(int(v), []).append(k)
    unused = set(range(facets.size))
    order = []
    # start chains at vertices used once (open ends) before closed loops
    starts = [v for v, ks in by_vertex.items() if len(ks) == 1] + list(by_vertex)
    for v in starts:
        ks = [k for k in by_vertex[v] if k in unused]
        if not ks:
            continue
        k, vertex = ks[0], v
        while k is not None:
            unused.discard(k)
            order.append(k)
            a, b = ends[:, k]
            vertex = int(b if a == vertex else a)
            nxt = [j for j in by_vertex[vertex] if j in unused]
            k = nxt[0] if nxt else None
    return facets[np.array(order, dtype=np.int64)]


def torque_per_length(solution: Solution) -> tuple[float, float]:
    """Torque per length on the inner cylinder (N m/m) and the relative imbalance
    against the outer cylinder's, which must vanish in steady flow."""
    problem = solution.problem()
    reaction = problem.internal_force(solution.u)
    inner = float(np.sum(reaction[solution.domain.walls["inner"].dofs]))
    outer = float(np.sum(reaction[solution.domain.walls["outer"].dofs]))
    return inner, abs(inner + outer) / max(abs(inner), 1e-300)


def unyielded_fraction(solution: Solution) -> float:
    """Area fraction of the section where the stress is below the yield stress."""
    model = solution.model
    problem = solution.problem()
    rate = np.maximum(problem.shear_rate(solution.u), problem.rate_floor)
    indicator = (model.stress(rate) < model.yield_stress).astype(float)
    area = asm(_unyielded_area, solution.domain.basis, indicator=indicator,
               area_weight=problem.area_weight).sum()
    total = problem.load.sum()
    return float(area / total)


def plug_intervals(x: np.ndarray, stress: np.ndarray, yield_stress: float) -> list[list[float]]:
    """Intervals of a 1-D profile where the stress is below the yield stress."""
    order = np.argsort(x)
    x, below = x[order], stress[order] < yield_stress
    intervals, start = [], None
    for xi, b in zip(x, below):
        if b and start is None:
            start = xi
        if not b and start is not None:
            intervals.append([float(start), float(xi)])
            start = None
    if start is not None:
        intervals.append([float(start), float(x[-1])])
    return intervals


def reynolds_number(solution: Solution, mean_velocity: float, wall_rate: float,
                    hydraulic_diameter: float) -> tuple[float, str]:
    """Reynolds number of an axial flow and the definition used.

    * Newtonian: ``Re = rho V D_h / mu``;
    * power law: Metzner & Reed (1955), AIChE J. 1, 434,
      ``Re_MR = rho V^(2-n) D^n / (K 8^(n-1) ((3n+1)/(4n))^n)`` with ``D = D_h``;
    * other models: ``rho V D_h / eta(gamma_w)``, the apparent viscosity at the mean
      wall shear rate.
    """
    rho, V, D = solution.case.fluid.density, abs(mean_velocity), hydraulic_diameter
    model = solution.model
    if model.name == "newtonian":
        return rho * V * D / model.viscosity_value, "rho V D_h / mu"
    if model.name == "power-law":
        n, K = model.flow_index, model.consistency
        return (rho * V ** (2 - n) * D ** n / (K * 8 ** (n - 1) * ((3 * n + 1) / (4 * n)) ** n),
                "Metzner-Reed: rho V^(2-n) D_h^n / (K 8^(n-1) ((3n+1)/(4n))^n)")
    eta = float(model.viscosity(np.array([max(wall_rate, 1e-300)]))[0])
    return rho * V * D / eta, "rho V D_h / eta(mean wall shear rate)"


def summarise(solution: Solution) -> dict:
    """The summary dict (SI units) written to ``summary.json``."""
    case, domain = solution.case, solution.domain
    warnings = list(solution.warnings)
    out = {
        "title": case.title,
        "shape": domain.shape,
        "model": solution.model.name,
        "converged": solution.converged,
        "iterations": solution.iterations,
        "residual": solution.residual,
        "message": solution.message,
        "dofs": int(domain.dofs),
        "cells": int(domain.cells),
        "degree": domain.degree,
        "solve_seconds": solution.seconds,
    }
    stresses = wall_stresses(solution)
    perimeters = {n: w.perimeter for n, w in domain.walls.items()}
    total_perimeter = sum(perimeters.values())
    mean_stress = sum(abs(stresses[n]) * perimeters[n] for n in stresses) / total_perimeter
    if domain.dimension == 1:
        rates = {n: invert_flow_curve(solution.model, abs(t)) if t else 0.0
                 for n, t in stresses.items()}
        largest_stress, largest_rate = max(abs(t) for t in stresses.values()), max(rates.values())
    else:
        # along the walls of a section: the mean per wall is the perimeter-weighted mean
        # of the local rate; maxima come from the distribution
        distributions = wall_distributions(solution)
        rates = {n: float(np.sum(d["shear_rate"] * d["weight"]) / np.sum(d["weight"]))
                 for n, d in distributions.items()}
        largest_stress = max(float(np.max(np.abs(d["shear_stress"])))
                             for d in distributions.values())
        largest_rate = max(float(np.max(d["shear_rate"])) for d in distributions.values())
    mean_rate = sum(rates[n] * perimeters[n] for n in rates) / total_perimeter
    out["wall_shear_stress"] = {"mean": mean_stress, "max": largest_stress,
                                "per_wall": stresses}
    out["wall_shear_rate"] = {"mean": mean_rate, "max": largest_rate, "per_wall": rates}
    problem = solution.problem()
    if domain.kind == "axial":
        flow_rate = problem.flow_rate(solution.u)
        mean_velocity = flow_rate / domain.area
        out.update({
            "pressure_gradient": solution.pressure_gradient,
            "pressure_drop_per_length": -solution.pressure_gradient,
            "flow_rate": flow_rate,
            "mean_velocity": mean_velocity,
            "max_velocity": float(np.max(solution.u)),
            "min_velocity": float(np.min(solution.u)),
            "hydraulic_diameter": domain.hydraulic_diameter,
            "cross_section_area": domain.area,
            # pressure work per unit length; walls moving against the flow add their own
            "pumping_power_per_length": -solution.pressure_gradient * flow_rate,
        })
        # steady axial momentum: the pressure force on the section balances the wall drag
        drag = sum(stresses[n] * perimeters[n] for n in stresses)
        discrete_area = float(problem.load.sum())
        out["force_balance_error"] = abs(drag + solution.pressure_gradient * discrete_area) / max(
            abs(drag), abs(solution.pressure_gradient * discrete_area), 1e-300)
        if case.fluid.density is not None and mean_velocity != 0:
            re, definition = reynolds_number(solution, mean_velocity, mean_rate,
                                             domain.hydraulic_diameter)
            out["reynolds_number"] = re
            out["reynolds_definition"] = definition
            out["fanning_friction_factor"] = mean_stress / (
                0.5 * case.fluid.density * mean_velocity ** 2)
            critical, criterion = laminar_limit(solution.model, case.fluid.density,
                                                domain.hydraulic_diameter)
            compared = re
            if solution.model.name == "bingham":
                # Hanks' criterion is stated on the plastic Reynolds number rho V D / mu_p
                compared = bingham_plastic_reynolds(case.fluid.density, mean_velocity,
                                                    domain.hydraulic_diameter,
                                                    solution.model.plastic_viscosity)
                out["plastic_reynolds_number"] = compared
            out["laminar_limit"] = {"reynolds_number": critical, "criterion": criterion}
            warning = laminar_warning(compared, critical, criterion)
            if warning:
                warnings.append(warning)
    else:
        torque, imbalance = torque_per_length(solution)
        out["torque_per_length"] = torque
        out["torque_imbalance"] = imbalance
        out["inner_angular_speed"] = case.drive.inner_angular_speed
        out["outer_angular_speed"] = case.drive.outer_angular_speed
        out["power_per_length"] = torque * (case.drive.inner_angular_speed
                                            - case.drive.outer_angular_speed)
        g = case.geometry
        if case.fluid.density is not None and case.drive.inner_angular_speed != 0:
            gap = g.outer_radius - g.inner_radius
            eta = float(solution.model.viscosity(np.array([max(rates["inner"], 1e-300)]))[0])
            nu = eta / case.fluid.density
            taylor = (case.drive.inner_angular_speed * g.inner_radius * gap / nu) ** 2 * (
                gap / g.inner_radius)
            out["taylor_number"] = taylor
            if taylor > CRITICAL_TAYLOR:
                warnings.append(
                    f"Taylor number {taylor:.4g} exceeds {CRITICAL_TAYLOR:.0f} (narrow-gap "
                    "critical value, common practice): Taylor vortices are likely and the "
                    "purely azimuthal flow computed here does not hold")
    if solution.model.is_yield_stress:
        out["unyielded_fraction"] = unyielded_fraction(solution)
        out["yield_stress"] = solution.model.yield_stress
        if out["wall_shear_stress"]["max"] <= solution.model.yield_stress:
            warnings.append("the wall shear stress does not exceed the yield stress: the "
                            "material does not flow; the small flow computed is creep of the "
                            "regularised model, not a real flow")
        if domain.dimension == 1:
            f = fields(solution)
            out["plugs"] = plug_intervals(f["x"][0], f["shear_stress"],
                                          solution.model.yield_stress)
    if solution.regularisation:
        out["regularisation"] = solution.regularisation
    rate_range = case.fluid.fitted_rate_range
    if rate_range:
        largest = out["wall_shear_rate"]["max"]
        if largest > rate_range[1]:
            warnings.append(f"the wall shear rate {largest:.4g} 1/s exceeds the highest rate of "
                            f"the fluid card's data ({rate_range[1]:.4g} 1/s): the model is "
                            "extrapolated")
        if out["wall_shear_rate"]["mean"] < rate_range[0]:
            warnings.append(f"the mean wall shear rate {out['wall_shear_rate']['mean']:.4g} 1/s "
                            f"is below the lowest rate of the fluid card's data "
                            f"({rate_range[0]:.4g} 1/s): the model is extrapolated")
    temperature_range = case.fluid.fitted_temperature_range
    if temperature_range and case.fluid.temperature is not None and not (
            temperature_range[0] <= case.fluid.temperature <= temperature_range[1]):
        warnings.append(f"the case temperature {case.fluid.temperature - 273.15:.4g} degC lies "
                        f"outside the fluid card's data ({temperature_range[0] - 273.15:.4g} to "
                        f"{temperature_range[1] - 273.15:.4g} degC): the temperature law is "
                        "extrapolated")
    if case.fluid.temperature_law:
        out["temperature"] = case.fluid.temperature
        out["temperature_law"] = case.fluid.temperature_law
    if not solution.converged:
        warnings.append(solution.message)
    out["warnings"] = warnings
    out["assumptions"] = ASSUMPTIONS
    out["caution"] = CAUTION
    return out

