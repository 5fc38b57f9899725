"""Mesh-convergence studies: one case solved on a sequence of refined meshes.

Where :mod:`gnflow.analytic` has a reference for the case (every 1-D shape driven by a
pressure gradient or by cylinder rotation), each level is compared with it: the L2 norm
and H1 seminorm of the velocity error, weighted by the area element, and the relative
error of the flow rate (or torque), with the observed order between each level and the
one before it. Yield-stress fluids are compared with the *regularised* model as solved,
so that the orders measure discretisation error alone; the regularisation error is a
separate study (``verification/run_suite.py``).

2-D sections (``rectangle``, eccentric ``annulus``, ``mesh``) have no velocity-field
reference here, so their L2 and H1 columns stay blank. A Newtonian rectangle or
eccentric annulus driven by a pressure gradient (walls at rest) is compared on its flow
rate with the series of :func:`gnflow.analytic.rectangle_newtonian_flow_rate` (Fourier) and
:func:`gnflow.analytic.eccentric_annulus_newtonian_flow_rate` (bipolar coordinates); every
other 2-D case gets the grid convergence index below. The cell size ``h`` of a 2-D level
is the representative size ``(area / triangles)^(1/2)`` of Celik et al. (2008), eq. (1)
(:func:`gnflow.convergence.representative_cell_size`), from the triangles actually
meshed, so that an annulus whose angular cell count is rounded still gets its true
refinement ratio; in 1-D ``h`` is the mean cell length across the gap. A section read
from a mesh file is refined by splitting every triangle into four (ratio 2 in ``h``),
its walls kept by the parent edges; a file of 6-node (curved) triangles cannot be
refined that way and is refused.

Where there is no reference (a flow-rate target, or a shape without one), the finest
level gets the Richardson-extrapolated value (Richardson & Gaunt 1927, "The deferred
approach to the limit", Phil. Trans. R. Soc. A 226), the apparent order and the grid
convergence index of the three-grid procedure of Celik et al. (2008), with the safety
factor 1.25 of Roache (1998); every level from the third on gets the same estimate
with itself as the finest of three.

Besides the headline quantity, every study follows the maximum wall shear stress and,
for yield-stress fluids, the unyielded (plug) area fraction on each level, each with its
own apparent order and GCI by the same three-grid procedure (no analytic reference is
used for them). Helical flow (an annulus with a rotating wall, concentric or eccentric)
follows also the torque per length on each wall, the rotation power and the dissipation
(:data:`gnflow.solver.coupled.CONVERGENCE_QUANTITIES`); the headline stays the flow rate
or, with a flow-rate target, the pressure gradient. A concentric helical case of a
non-Newtonian fluid has no reference here (the axial profile depends on the rotation),
so it gets the grid convergence index; a Newtonian one decouples and keeps the annulus
reference. A Newtonian helical case with only the inner wall turning also compares the
two wall torques with their closed form on every level (:func:`torque_reference`: the
Couette torque, or between eccentric cylinders
:func:`gnflow.analytic.eccentric_rotation_newtonian`, after Jeffery 1922).

Round-off. An error or a difference between levels at or below the study's noise floor
(:func:`noise_floor`: the solver tolerance, and never less than 1000 machine epsilons,
relative to the quantity) carries no order: the level is reported as "converged to
round-off" instead of an order or a GCI, which would be numbers read from noise.

Error norms. The velocity error ``e = u_h - u`` is integrated on a quadrature basis of
a much higher order than the solver's (the reference is not a polynomial), at the
quadrature points of the same mesh:
``|e|_L2 = (int e^2 a dx)^(1/2)``, ``|e|_H1 = (int (de/dx)^2 a dx)^(1/2)``, ``a`` the area
weight (1 per unit width, ``2 pi r`` axisymmetric). The exact gradient comes from the
momentum balance, not from differencing: the reference gives the shear stress ``tau(x)``,
and ``du/dx = sign(tau) rate(|tau|)`` with the flow curve inverted by
:func:`gnflow.analytic.rate_from_stress` (rotational flow: ``domega/dr`` is that over ``r``).
"""

from __future__ import annotations

import csv
import math
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, NamedTuple

import numpy as np
from skfem import Basis

from . import analytic
from .case import Case, load_case
from .convergence import ROACHE_SAFETY_FACTOR, grid_convergence_index, observed_orders
from .sweep import cautions, print_cautions, progress_bar
from .errors import CaseError
from .export import atomic_directory
from .results import Results
from .solver import Solution, solve
from .solver.coupled import CONVERGENCE_QUANTITIES, HelicalSolution, \
    helical_convergence_quantities

MIN_LEVELS, MAX_LEVELS = 2, 8
#: the finest mesh a 1-D study may ask for (cells across the gap)
MAX_CELLS_1D = 200_000
#: the finest rectangle or eccentric annulus a study may ask for (cells across the
#: smaller side or the gap; P2 at 256 across an annulus is about 1.7 million unknowns)
MAX_CELLS_2D = 256
#: the most triangles the finest level of a refined mesh-file section may have
MAX_TRIANGLES_FILE = 1_000_000
#: Gauss order of the error quadrature; the references are smooth away from at most a
#: few points, and a rule this high keeps the quadrature error under the finest
#: discretisation error of the suite
ERROR_QUADRATURE_ORDER = 16
#: the least noise floor of a study, relative: differences of solutions that agree to
#: about this are round-off, whatever the solver tolerance
ROUND_OFF_FLOOR = 1000 * np.finfo(float).eps
ROUND_OFF_TEXT = "converged to round-off"
#: the quantities every study follows besides its headline one (summary key -> label)
SECONDARY = {"max_wall_shear_stress": "max wall shear stress",
             "unyielded_fraction": "unyielded fraction"}

Progress = Callable[[int, int, int, str], None]


@dataclass(frozen=True)
class Level:
    """One mesh of a study and what was measured on it."""

    level: int
    cells: int
    dofs: int
    h: float
    value: float                      # flow rate (m^3/s or m^2/s) or torque per length
    pressure_gradient: float
    converged: bool
    iterations: int
    seconds: float
    unyielded_fraction: float | None = None
    max_wall_shear_stress: float | None = None
    l2_error: float | None = None
    h1_error: float | None = None
    value_error: float | None = None  # relative error of ``value`` against the reference
    l2_norm: float | None = None      # |u|_L2 and |u|_H1 of the reference, for relative
    h1_norm: float | None = None      # round-off floors of the field errors
    #: further quantities of this kind of flow (helical: the torques and powers), key ->
    #: value, followed like :data:`SECONDARY`
    secondary: dict = field(default_factory=dict)

    def followed(self, key: str):
        """The value of a followed (secondary) quantity, or None if not measured."""
        return self.secondary[key] if key in self.secondary else getattr(self, key, None)


@dataclass
class VerificationResult:
    """A convergence study: the levels, the orders and (without a reference) the GCI."""

    case: Case
    degree: int
    ratio: float
    quantity: str                     # "flow_rate", "torque_per_length" or "pressure_gradient"
    levels: list[Level]
    has_reference: bool
    reference_value: float | None = None
    reference_note: str = ""
    l2_orders: np.ndarray | None = None
    h1_orders: np.ndarray | None = None
    value_orders: np.ndarray | None = None
    gci: list = field(default_factory=list)   # ThreeGridEstimate or None per level
    #: the same per level for each of :data:`SECONDARY` (and, in helical flow, of
    #: :data:`~gnflow.solver.coupled.CONVERGENCE_QUANTITIES`) that was measured
    secondary_gci: dict = field(default_factory=dict)
    noise: float = ROUND_OFF_FLOOR
    #: closed-form wall torques (key of CONVERGENCE_QUANTITIES -> N m/m) and their source
    torque_reference: dict = field(default_factory=dict)
    torque_reference_note: str = ""

    def torque_errors(self) -> dict[str, tuple[list, np.ndarray]]:
        """Per wall torque with a closed form: the relative error of each level and the
        observed orders between levels."""
        h = [lv.h for lv in self.levels]
        out = {}
        for key, exact in self.torque_reference.items():
            errors = [abs(lv.followed(key) - exact) / abs(exact) for lv in self.levels]
            out[key] = (errors, observed_orders(h, errors, self.noise))
        return out

    def round_off(self, error, scale=1.0) -> bool:
        """Whether an error (relative to ``scale``) is at the study's noise floor."""
        return error is not None and abs(error) <= self.noise * abs(scale)

    @property
    def expected_orders(self) -> dict[str, float]:
        """The formal orders of Lagrange elements of this degree on smooth solutions."""
        return {"l2": self.degree + 1.0, "h1": float(self.degree),
                "flow_rate": 2.0 * self.degree}

    @property
    def finest_gci(self):
        return self.gci[-1] if self.gci else None

    @property
    def quantity_label(self) -> str:
        return {"flow_rate": "flow rate", "torque_per_length": "torque per length",
                "pressure_gradient": "pressure gradient"}[self.quantity]


# --------------------------------------------------------------------------- checks

def level_cells(base_cells: int, levels: int, ratio: float,
                max_cells: int = MAX_CELLS_1D) -> list[int]:
    """Cells of each level, coarse to fine: ``base * ratio^k``, which must be whole.

    >>> level_cells(8, 4, 2.0)
    [8, 16, 32, 64]
    >>> level_cells(4, 3, 1.5)
    [4, 6, 9]
    """
    if not isinstance(levels, (int, np.integer)) or not MIN_LEVELS <= levels <= MAX_LEVELS:
        raise CaseError("--levels", levels, f"a whole number from {MIN_LEVELS} to {MAX_LEVELS}")
    if not (isinstance(ratio, (int, float)) and math.isfinite(ratio) and ratio > 1):
        raise CaseError("--ratio", ratio, "a refinement ratio > 1")
    cells = []
    for k in range(levels):
        exact = base_cells * ratio ** k
        whole = round(exact)
        if abs(exact - whole) > 1e-9 * max(1.0, exact):
            raise CaseError("--ratio", ratio, (
                f"a ratio giving whole cell counts from mesh.cells = {base_cells}; level {k + 1} "
                f"would have {exact:g} cells (try ratio 2, or mesh.cells divisible by the "
                f"ratio's denominator)"))
        cells.append(int(whole))
    if cells[-1] > max_cells:
        raise CaseError("--levels", levels, (
            f"at most {max_cells} cells on the finest level; {levels} levels from "
            f"mesh.cells = {base_cells} at ratio {ratio:g} reach {cells[-1]}"))
    return cells


def plan_levels(case: Case, levels: int, ratio: float) -> list[int]:
    """Cells of each level for any shape; raises :class:`CaseError` for a study that
    cannot be run. 1-D and generated 2-D shapes: :func:`level_cells` from ``mesh.cells``
    (cells across the gap or the smaller side). A mesh-file section: the triangle count of
    each level, the file's own mesh first, each next level splitting every triangle into
    four (so only ``ratio`` 2 is possible)."""
    g = case.geometry
    if g.shape != "mesh":
        limit = MAX_CELLS_1D if g.is_one_dimensional else MAX_CELLS_2D
        return level_cells(case.mesh.cells, levels, ratio, limit)
    level_cells(1, levels, 2.0)                      # the --levels range check
    if ratio != 2.0:
        raise CaseError("--ratio", ratio, (
            "2 for geometry.shape = \"mesh\": the file fixes the mesh, and a study refines "
            "it by splitting every triangle into four, which halves the cell size"))
    mesh, _ = _read_file_section(case)
    cells = [mesh.t.shape[1] * 4 ** k for k in range(levels)]
    if cells[-1] > MAX_TRIANGLES_FILE:
        raise CaseError("--levels", levels, (
            f"at most {MAX_TRIANGLES_FILE} triangles on the finest level; {levels} levels "
            f"from the {cells[0]} triangles of {g.file.name} reach {cells[-1]}"))
    return cells


def _read_file_section(case: Case):
    """The mesh and walls of a mesh-file case; refuses curved (6-node) triangles."""
    from skfem import MeshTri2

    from .meshfile import read_section
    g = case.geometry
    mesh, walls = read_section(g.file, g.length_unit)
    if isinstance(mesh, MeshTri2):
        raise CaseError("geometry.shape", "mesh", (
            f"a section gnflow verify can refine: with geometry.shape = \"mesh\" the file "
            f"{g.file.name} fixes the mesh, and its 6-node (curved) triangles cannot be "
            f"split without knowing the curved walls between their nodes. Run a study on "
            f"meshes of several sizes made by the mesh generator, or give linear (3-node) "
            f"triangles, which gnflow verify refines itself"))
    return mesh, walls


def refined_section(mesh, wall_facets: dict[str, np.ndarray]):
    """Split every triangle of a linear mesh into four; walls follow their parent edges.

    scikit-fem numbers the vertex added at the middle of parent edge ``f`` as
    ``nvertices + f``, so each boundary edge of the refined mesh names its parent by the
    larger of its two vertices (checked against the coordinates)."""
    fine = mesh.refined()
    boundary = fine.boundary_facets()
    ends = fine.facets[:, boundary]
    parent = ends.max(axis=0) - mesh.nvertices
    midpoint = mesh.p[:, mesh.facets[:, parent]].mean(axis=1)
    if not np.allclose(fine.p[:, ends.max(axis=0)], midpoint,
                       atol=1e-12 * float(np.ptp(mesh.p))):
        raise RuntimeError("refined mesh: unexpected vertex numbering")
    walls = {name: boundary[np.isin(parent, facets)] for name, facets in wall_facets.items()}
    return fine, walls


def _file_domains(case: Case, levels: int):
    """The domains of a mesh-file study, coarse to fine."""
    from .geometry import _section_domain
    mesh, walls = _read_file_section(case)
    for k in range(levels):
        if k:
            mesh, walls = refined_section(mesh, walls)
        yield _section_domain(case, mesh, walls)


# --------------------------------------------------------------------------- references

def reference_for(case: Case, model):
    """The analytic reference of a case for ``model`` (the model as solved), or ``None``.

    Yield-stress models are taken with their regularisation (``regularised=True``).
    """
    g, d = case.geometry, case.drive
    regularised = bool(getattr(model, "is_yield_stress", False))
    if g.shape == "coaxial-cylinders":
        return analytic.coaxial_flow(model, g.inner_radius, g.outer_radius,
                                     d.inner_angular_speed, d.outer_angular_speed,
                                     regularised=regularised)
    if d.flow_rate is not None or not d.pressure_gradient and not d.wall_speed:
        return None
    if _rotating_annulus(case) and model.name != "newtonian":
        return None     # helical: the axial profile depends on the rotation
    speeds = d.wall_speed
    G = d.pressure_gradient or 0.0
    if g.shape == "slit":
        return analytic.slit_flow(model, g.gap, G, speeds.get("bottom", 0.0),
                                  speeds.get("top", 0.0), regularised=regularised)
    if g.shape == "pipe":
        return analytic.pipe_flow(model, g.radius, G, regularised=regularised)
    if g.shape == "annulus" and g.eccentricity == 0.0:
        return analytic.annulus_flow(model, g.inner_radius, g.outer_radius, G,
                                     speeds.get("inner", 0.0), speeds.get("outer", 0.0),
                                     regularised=regularised)
    return None


def torque_reference(case: Case) -> tuple[dict, str] | None:
    """Closed-form wall torques of a Newtonian helical case whose outer wall is at rest
    (the motions decouple, so any axial drive may come with it), or ``None``."""
    g, d, model = case.geometry, case.drive, case.fluid.model
    if (g.shape != "annulus" or model.name != "newtonian" or not d.inner_angular_speed
            or d.outer_angular_speed):
        return None
    mu = model.viscosity_value
    if g.eccentricity == 0.0:
        torque = analytic.coaxial_newtonian(g.inner_radius, g.outer_radius, mu,
                                            d.inner_angular_speed).torque_per_length
        return ({"inner_torque_per_length": torque, "outer_torque_per_length": -torque},
                "Couette torque, gnflow.analytic.coaxial_newtonian")
    if g.eccentricity < 1e-3:
        return None         # below the closed form's rounding limit
    ref = analytic.eccentric_rotation_newtonian(
        g.inner_radius, g.outer_radius, g.eccentricity * (g.outer_radius - g.inner_radius),
        mu, d.inner_angular_speed)
    return ({"inner_torque_per_length": ref.inner_torque_per_length,
             "outer_torque_per_length": ref.outer_torque_per_length},
            "closed form between eccentric cylinders, gnflow.analytic."
            "eccentric_rotation_newtonian (bipolar stream function after Jeffery 1922)")


def _rotating_annulus(case: Case) -> bool:
    return case.geometry.shape == "annulus" and bool(
        case.drive.inner_angular_speed or case.drive.outer_angular_speed)


def flow_rate_reference(case: Case) -> tuple[float, str] | None:
    """The exact flow rate of a 2-D case and its source, or ``None``: Newtonian fluid,
    rectangle or eccentric annulus, set pressure gradient, walls at rest."""
    g, d, model = case.geometry, case.drive, case.fluid.model
    if (g.is_one_dimensional or model.name != "newtonian" or d.flow_rate is not None
            or not d.pressure_gradient or any(v != 0.0 for v in d.wall_speed.values())):
        return None
    mu, G = model.viscosity_value, d.pressure_gradient
    if g.shape == "rectangle":
        return (analytic.rectangle_newtonian_flow_rate(g.width, g.height, mu, G),
                "gnflow.analytic.rectangle_newtonian_flow_rate (Fourier series), flow rate "
                "only: no velocity-field reference in 2-D")
    if g.shape == "annulus":
        offset = g.eccentricity * (g.outer_radius - g.inner_radius)
        return (analytic.eccentric_annulus_newtonian_flow_rate(
                    g.inner_radius, g.outer_radius, offset, mu, G),
                "gnflow.analytic.eccentric_annulus_newtonian_flow_rate (bipolar-coordinate "
                "series), flow rate only: no velocity-field reference in 2-D")
    return None


def _exact_gradient(reference, model, x, rotational: bool):
    """``du/dx`` of the reference at points ``x`` from its stress and the flow curve."""
    regularised = bool(getattr(model, "is_yield_stress", False))
    stress = np.asarray(reference.shear_stress(x), dtype=float)
    rate = analytic.rate_from_stress(model, np.abs(stress).ravel(),
                                     regularised=regularised).reshape(stress.shape)
    signed = np.sign(stress) * rate
    return signed / x if rotational else signed


class ErrorNorms(NamedTuple):
    """Velocity error norms and the reference's own norms (all area-weighted)."""

    l2: float
    h1: float
    l2_reference: float
    h1_reference: float


def noise_floor(case: Case) -> float:
    """The relative size below which a study's errors and differences are round-off:
    the solver tolerance (a solution is no more exact than that), at least
    :data:`ROUND_OFF_FLOOR`."""
    return max(float(case.solver.tolerance), ROUND_OFF_FLOOR)


def error_norms(solution: Solution, reference) -> ErrorNorms:
    """``|u_h - u|_L2``, ``|u_h - u|_H1`` and ``|u|_L2``, ``|u|_H1`` with the area weight,
    on a high-order rule."""
    domain = solution.domain
    basis = Basis(domain.basis.mesh, domain.basis.elem, intorder=ERROR_QUADRATURE_ORDER)
    x = np.asarray(basis.global_coordinates())
    weight = domain.area_weight(x) * basis.dx
    field_h = basis.interpolate(solution.u)
    rotational = domain.kind == "rotational"
    exact = reference.angular_speed(x[0]) if rotational else reference.velocity(x[0])
    exact_gradient = _exact_gradient(reference, solution.model, x[0], rotational)
    l2 = math.sqrt(float(np.sum((np.asarray(field_h) - exact) ** 2 * weight)))
    h1 = math.sqrt(float(np.sum((field_h.grad[0] - exact_gradient) ** 2 * weight)))
    return ErrorNorms(l2, h1, math.sqrt(float(np.sum(exact ** 2 * weight))),
                      math.sqrt(float(np.sum(exact_gradient ** 2 * weight))))


# --------------------------------------------------------------------------- the study

def _quantity(case: Case) -> str:
    if case.geometry.shape == "coaxial-cylinders":
        return "torque_per_length"
    return "pressure_gradient" if case.drive.flow_rate is not None else "flow_rate"


def _cell_size(solution: Solution, cells: int) -> float:
    domain = solution.domain
    if domain.dimension == 1:
        return domain.length_scale / cells  # the mean cell length across the gap
    from .convergence import representative_cell_size
    return float(representative_cell_size([domain.basis.mesh.nelements], domain.dimension,
                                          domain.area)[0])


def run_verification(case: Case, levels: int = 4, ratio: float = 2.0,
                     progress: Progress | None = None,
                     use_reference: bool = True) -> VerificationResult:
    """Solve ``case`` on ``levels`` meshes, from ``case.mesh.cells`` refined by ``ratio``.

    ``progress(index, levels, cells, stage)`` is called with ``stage`` ``"start"`` and
    ``"done"`` around each level (``index`` from 1). ``use_reference=False`` skips the
    analytic comparison and reports the grid convergence index only.

    >>> from gnflow.case import Case
    >>> case = Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 1.0},
    ...     "geometry": {"shape": "annulus", "inner_radius": 0.5, "outer_radius": 1.0},
    ...     "drive": {"pressure_gradient": -8.0}, "mesh": {"cells": 8, "degree": 1}})
    >>> result = run_verification(case, levels=3)
    >>> [round(float(p), 1) for p in result.l2_orders[1:]]
    [2.0, 2.0]
    """
    cells_per_level = plan_levels(case, levels, ratio)
    quantity = _quantity(case)
    measured: list[Level] = []
    reference = None
    section_reference = flow_rate_reference(case) if use_reference else None
    domains = _file_domains(case, levels) if case.geometry.shape == "mesh" else None
    for index, cells in enumerate(cells_per_level, start=1):
        if progress:
            progress(index, levels, cells, "start")
        solution = solve(case, domain=next(domains)) if domains else solve(case, cells=cells)
        summary = Results(solution).summary()
        value = solution.pressure_gradient if quantity == "pressure_gradient" \
            else summary[quantity]
        norms = None
        value_error = None
        if section_reference is not None:
            exact = section_reference[0]
            value_error = abs(value - exact) / max(abs(exact), 1e-300)
        elif use_reference and case.geometry.is_one_dimensional:
            # the model as solved: its regularisation can depend on the mesh
            reference = reference_for(case, solution.model)
            if reference is not None:
                norms = error_norms(solution, reference)
                exact = reference.torque_per_length if quantity == "torque_per_length" \
                    else reference.flow_rate
                value_error = abs(value - exact) / max(abs(exact), 1e-300)
        measured.append(Level(index, cells, solution.domain.dofs,
                              _cell_size(solution, cells), float(value),
                              float(solution.pressure_gradient), solution.converged,
                              solution.iterations, solution.seconds,
                              summary.get("unyielded_fraction"),
                              summary["wall_shear_stress"]["max"],
                              norms.l2 if norms else None, norms.h1 if norms else None,
                              value_error, norms.l2_reference if norms else None,
                              norms.h1_reference if norms else None,
                              helical_convergence_quantities(solution)
                              if isinstance(solution, HelicalSolution) else {}))
        if progress:
            progress(index, levels, cells, "done")
    result = VerificationResult(case, case.mesh.degree, float(ratio), quantity, measured,
                                reference is not None or section_reference is not None,
                                noise=noise_floor(case))
    h = [lv.h for lv in measured]
    noise = result.noise
    if section_reference is not None:
        result.reference_value, result.reference_note = section_reference
        result.l2_orders = np.full(len(measured), np.nan)
        result.h1_orders = np.full(len(measured), np.nan)
        result.value_orders = observed_orders(h, [lv.value_error for lv in measured], noise)
    elif result.has_reference:
        result.reference_value = (reference.torque_per_length if quantity ==
                                  "torque_per_length" else reference.flow_rate)
        result.reference_note = ("gnflow.analytic, model as solved"
                                 + (" (regularised)" if case.fluid.model.is_yield_stress
                                    else ""))
        # field errors are made relative to the reference's norms before the floor applies
        result.l2_orders = observed_orders(
            h, [lv.l2_error / max(lv.l2_norm, 1e-300) for lv in measured], noise)
        result.h1_orders = observed_orders(
            h, [lv.h1_error / max(lv.h1_norm, 1e-300) for lv in measured], noise)
        result.value_orders = observed_orders(h, [lv.value_error for lv in measured], noise)
    result.gci = three_grid_estimates(h, [lv.value for lv in measured], noise)
    torques = torque_reference(case) if use_reference else None
    if torques is not None and all(key in lv.secondary for lv in measured
                                   for key in torques[0]):
        result.torque_reference, result.torque_reference_note = torques
    for key in list(SECONDARY) + list(CONVERGENCE_QUANTITIES):
        values = [lv.followed(key) for lv in measured]
        if all(v is not None and math.isfinite(v) for v in values):
            result.secondary_gci[key] = three_grid_estimates(h, values, noise)
    return result


def three_grid_estimates(h, values, noise: float) -> list:
    """The three-grid estimate of each level from the third on (``None`` before), each
    level the finest of its three; differences at ``noise`` are round-off."""
    estimates = [None, None] + [grid_convergence_index(h[i - 2:i + 1], values[i - 2:i + 1],
                                                       ROACHE_SAFETY_FACTOR, noise)
                                for i in range(2, len(values))]
    return estimates[:len(values)]


# --------------------------------------------------------------------------- files

def _cell(value, digits: int = 10) -> str:
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    value = float(value)
    return f"{value:.{digits}g}" if math.isfinite(value) else ""


ROUND_OFF_CELL = "round-off"


def _relative_errors(result: VerificationResult, lv: Level) -> dict:
    """A level's errors relative to the reference (what the noise floor applies to)."""
    return {"l2": None if lv.l2_error is None else lv.l2_error / max(lv.l2_norm, 1e-300),
            "h1": None if lv.h1_error is None else lv.h1_error / max(lv.h1_norm, 1e-300),
            "value": lv.value_error}


def _order_cell(result: VerificationResult, order, error, digits: int = 4,
                text: bool = False) -> str:
    """An observed order, or "round-off" where the error is at the noise floor."""
    if result.round_off(error):
        return ROUND_OFF_CELL
    if order is None or not np.isfinite(order):
        return "-" if text else ""
    return f"{order:.2f}" if text else _cell(order, digits)


def _estimate_cells(estimate, text: bool = False) -> list[str]:
    """Extrapolated value, apparent order and GCI of a three-grid estimate, as cells."""
    if estimate is None:
        return ["-"] * 3 if text else [""] * 3
    if estimate.round_off:
        return ["-" if text else "", ROUND_OFF_CELL, ROUND_OFF_CELL]
    if not estimate.converging:
        return (["n/a", _order_text(estimate.apparent_order), "n/a"] if text else
                ["", _cell(estimate.apparent_order, 4), ""])
    if text:
        return [f"{estimate.extrapolated_value:.8g}", _order_text(estimate.apparent_order),
                f"{100 * estimate.gci_fine:.3g} %"]
    return [_cell(estimate.extrapolated_value), _cell(estimate.apparent_order, 4),
            _cell(estimate.gci_fine, 4)]


def csv_rows(result: VerificationResult) -> tuple[list[str], list[list[str]]]:
    """Header and rows of ``convergence.csv``.

    Order and GCI cells hold ``round-off`` where the error or the difference between
    levels is at the study's noise floor (no order can be read there). The secondary
    quantities (:data:`SECONDARY`) follow, each with its three-grid apparent order and GCI.
    """
    q = result.quantity
    value_name = "flow_rate" if q == "pressure_gradient" else q
    header = ["level", "cells", "dofs", "h", value_name]
    if q != "torque_per_length":
        header.append("pressure_gradient")
    header += ["converged", "iterations"]
    if result.has_reference:
        error_name = f"{value_name}_error"
        header += ["l2_error", "h1_error", error_name, "l2_order", "h1_order",
                   f"{value_name}_order"]
    else:
        # the quantity studied is named: with a flow-rate target it is the pressure gradient
        header += [f"extrapolated_{q}", "apparent_order", "gci_fine"]
    for key in result.secondary_gci:
        header += [key, f"{key}_order", f"{key}_gci"]
    rows = []
    for i, lv in enumerate(result.levels):
        flow = result.case.drive.flow_rate if q == "pressure_gradient" else lv.value
        row = [_cell(lv.level), _cell(lv.cells), _cell(lv.dofs), _cell(lv.h), _cell(flow)]
        if q != "torque_per_length":
            row.append(_cell(lv.pressure_gradient))
        row += [_cell(lv.converged), _cell(lv.iterations)]
        if result.has_reference:
            relative = _relative_errors(result, lv)
            row += [_cell(lv.l2_error), _cell(lv.h1_error), _cell(lv.value_error),
                    _order_cell(result, result.l2_orders[i], relative["l2"]),
                    _order_cell(result, result.h1_orders[i], relative["h1"]),
                    _order_cell(result, result.value_orders[i], relative["value"])]
        else:
            row += _estimate_cells(result.gci[i])
        for key, estimates in result.secondary_gci.items():
            row += [_cell(lv.followed(key))] + _estimate_cells(estimates[i])[1:]
        rows.append(row)
    return header, rows


def _aligned(head: list[str], lines: list[list[str]]) -> str:
    widths = [max(len(h), *(len(c[k]) for c in lines)) for k, h in enumerate(head)]
    out = ["  ".join(h.rjust(w) for h, w in zip(head, widths))]
    out += ["  ".join(c.rjust(w) for c, w in zip(cols, widths)) for cols in lines]
    return "\n".join(out)


def format_table(result: VerificationResult) -> str:
    """The terminal tables: the headline quantity per level, then the secondary ones."""
    q = result.quantity
    label = {"flow_rate": "flow rate", "torque_per_length": "torque/len",
             "pressure_gradient": "dp/dz"}[q]
    if result.has_reference:
        head = ["level", "cells", "dofs", label, "L2 error", "order", "H1 error", "order",
                f"{label} err", "order"]
    else:
        head = ["level", "cells", "dofs", label, "extrapolated", "app. order", "GCI"]
    lines = []
    for i, lv in enumerate(result.levels):
        cols = [str(lv.level), str(lv.cells), str(lv.dofs), f"{lv.value:.8g}"]
        if result.has_reference:
            relative = _relative_errors(result, lv)
            cols += [_error_text(lv.l2_error),
                     _order_cell(result, result.l2_orders[i], relative["l2"], text=True),
                     _error_text(lv.h1_error),
                     _order_cell(result, result.h1_orders[i], relative["h1"], text=True),
                     f"{lv.value_error:.3e}",
                     _order_cell(result, result.value_orders[i], relative["value"],
                                 text=True)]
        else:
            cols += _estimate_cells(result.gci[i], text=True)
        lines.append(cols)
    out = _aligned(head, lines)
    keys = list(result.secondary_gci)
    if keys:
        out += ("\nalso followed on every level (three-grid apparent order and GCI, "
                "Celik et al. 2008):")
    for start in range(0, len(keys), SECONDARY_PER_TABLE):   # tables that fit a terminal
        head = ["level"]
        for key in keys[start:start + SECONDARY_PER_TABLE]:
            head += [followed_label(key), "app. order", "GCI"]
        lines = []
        for i, lv in enumerate(result.levels):
            cols = [str(lv.level)]
            for key in keys[start:start + SECONDARY_PER_TABLE]:
                cols += [f"{lv.followed(key):.6g}"] + _estimate_cells(
                    result.secondary_gci[key][i], True)[1:]
            lines.append(cols)
        out += "\n" + _aligned(head, lines)
    if result.torque_reference:
        out += "\n" + _torque_table(result)
    return out


def _torque_table(result: VerificationResult) -> str:
    """The wall torques' relative errors against their closed form, per level."""
    errors = result.torque_errors()
    head = ["level"]
    for key in errors:
        head += [key.split("_")[0] + " torque error", "order"]
    lines = []
    for i, lv in enumerate(result.levels):
        cols = [str(lv.level)]
        for values, orders in errors.values():
            cols += [f"{values[i]:.3e}", _order_cell(result, orders[i], values[i], text=True)]
        lines.append(cols)
    return (f"wall torques against the {result.torque_reference_note}:\n"
            + _aligned(head, lines))


#: followed quantities per terminal table (each takes three columns)
SECONDARY_PER_TABLE = 3


def followed_label(key: str) -> str:
    """The label, with its unit, of a followed (secondary) quantity."""
    if key in CONVERGENCE_QUANTITIES:
        return CONVERGENCE_QUANTITIES[key]
    return SECONDARY[key] + (" [Pa]" if key == "max_wall_shear_stress" else "")


def _error_text(error) -> str:
    return "-" if error is None else f"{error:.3e}"


def _order_text(order) -> str:
    return "-" if order is None or not np.isfinite(order) else f"{order:.2f}"


def convergence_plot(result: VerificationResult, path: Path) -> None:
    """Log-log errors against cell size, with reference slopes of the formal orders."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    h = np.array([lv.h for lv in result.levels])
    fig, ax = plt.subplots(figsize=(5.8, 4.2))
    if result.has_reference:
        series = [("L2 error", [lv.l2_error for lv in result.levels], "o-", "l2"),
                  ("H1 error", [lv.h1_error for lv in result.levels], "s-", "h1"),
                  (f"{result.quantity_label} rel. error",
                   [lv.value_error for lv in result.levels], "^-", "flow_rate")]
        for label, values, style, key in series:
            values = np.array(values, dtype=float)
            positive = values > 0
            if not positive.any():
                continue
            line, = ax.loglog(h[positive], values[positive], style, ms=4, label=label)
            p = result.expected_orders[key]
            anchor = np.flatnonzero(positive)[0]
            ax.loglog(h, values[anchor] * (h / h[anchor]) ** p, ":", color=line.get_color(),
                      lw=0.9, label=f"slope {p:g}")
        ax.set_ylabel("error")
    else:
        g = result.finest_gci
        values = np.array([lv.value for lv in result.levels])
        if g is not None and g.converging:
            distance = np.abs(values - g.extrapolated_value) / abs(g.extrapolated_value)
            keep = distance > 0
            ax.loglog(h[keep], distance[keep], "o-", ms=4,
                      label=f"|{result.quantity_label} - extrapolated| (rel.)")
        diffs = np.abs(np.diff(values)) / np.abs(values[1:])
        ax.loglog(h[1:], diffs, "s--", ms=4, label="change from previous level (rel.)")
        ax.set_ylabel("relative difference")
    from matplotlib.ticker import NullFormatter
    ax.xaxis.set_minor_formatter(NullFormatter())   # a narrow h range crowds minor labels
    ax.set_xlabel("cell size h [m]")
    ax.set_title(f"{result.case.title}: P{result.degree}", fontsize=9)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def interpretation(result: VerificationResult) -> str:
    """One sentence on what the finest orders say."""
    finest = _relative_errors(result, result.levels[-1])
    if result.has_reference and result.round_off(finest["value"]) and (
            finest["l2"] is None or result.round_off(finest["l2"])):
        return (f"The finest level agrees with the reference to round-off (relative error "
                f"{finest['value']:.1e}, noise floor {result.noise:.0e}): converged to "
                "round-off, so there is no order or GCI to read; the discretisation "
                "reproduces this case (as P2 does a quadratic profile).")
    if result.has_reference and result.levels[-1].l2_error is None:
        p, expected = result.value_orders[-1], result.expected_orders["flow_rate"]
        close = abs(p - expected) <= 0.3
        return (f"On the finest pair the flow-rate error falls at order {p:.2f} against "
                f"{expected:g} (twice the degree) for P{result.degree}, "
                + ("in line with it" if close else "away from it: the meshes are not yet "
                   "asymptotic, or the walls or corners limit the order")
                + f"; finest relative error {result.levels[-1].value_error:.2e}.")
    if result.has_reference:
        e = result.expected_orders
        p2, p1 = result.l2_orders[-1], result.h1_orders[-1]
        close = abs(p2 - e["l2"]) <= 0.15 and abs(p1 - e["h1"]) <= 0.15
        verdict = ("in line with the formal orders, so the discretisation behaves as "
                   "designed on this case" if close else
                   "away from the formal orders: either the profile is not smooth enough "
                   "for them (see its regularity) or the meshes are not yet asymptotic")
        return (f"On the finest pair the observed orders are {p2:.2f} (L2) and {p1:.2f} (H1) "
                f"against formal orders {e['l2']:g} and {e['h1']:g} for P{result.degree}, "
                f"{verdict}.")
    g = result.finest_gci
    if g is None:
        return "Two levels give no apparent order; use three or more for a GCI."
    if g.round_off:
        return (f"The finest levels give the same {result.quantity_label} to within the "
                f"noise floor {result.noise:.0e}: converged to round-off, no order or GCI "
                "to read.")
    if not g.converging:
        return f"The three finest levels do not show convergence ({g.note})."
    return (f"The three finest levels show {g.note}, a Richardson-extrapolated "
            f"{result.quantity_label} of "
            f"{g.extrapolated_value:.8g} and a grid convergence index of "
            f"{100 * g.gci_fine:.3g} % on the finest mesh (Celik et al. 2008, Fs = "
            f"{g.safety_factor:g}).")


def markdown_report(result: VerificationResult, plot_name: str = "convergence.png") -> str:
    case = result.case
    header, rows = csv_rows(result)
    lines = [f"# Mesh convergence: {case.title}", "",
             f"* fluid: {case.fluid.model.name}; shape: {case.geometry.shape}; "
             f"P{result.degree} elements",
             f"* {len(result.levels)} levels from {result.levels[0].cells} to "
             f"{result.levels[-1].cells} cells (refinement ratio {result.ratio:g})",
             "* reference: " + (result.reference_note if result.has_reference else
                                "none; discretisation uncertainty by the three-grid "
                                "procedure of Celik et al. (2008), safety factor 1.25"),
             "* also followed: " + ", ".join(followed_label(k) for k in result.secondary_gci)
             + ", each with its three-grid apparent order and GCI",
             f"* noise floor {result.noise:.0e} (relative): errors and differences below it "
             f"read \"{ROUND_OFF_CELL}\", converged to round-off, with no order",
             "", "| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    if result.torque_reference:
        lines += ["", "```", _torque_table(result), "```"]
    lines += ["", interpretation(result), "", f"![convergence plot]({plot_name})", ""]
    lines += [f"Caution: {text}" for text in cautions(case)] + [""]
    if not all(lv.converged for lv in result.levels):
        lines.insert(6, "* WARNING: the solver did not converge on every level; the orders "
                        "are not reliable")
    return "\n".join(lines)


def write_verification(result: VerificationResult, out_dir: Path) -> list[str]:
    """Write ``convergence.csv``, ``convergence.png`` and ``report.md`` atomically."""
    out_dir = Path(out_dir)
    with atomic_directory(out_dir) as staging:
        header, rows = csv_rows(result)
        with open(staging / "convergence.csv", "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            writer.writerow(header)
            writer.writerows(rows)
        convergence_plot(result, staging / "convergence.png")
        (staging / "report.md").write_text(markdown_report(result), encoding="utf-8")
        written = sorted(p.name for p in staging.iterdir())
    return written


# --------------------------------------------------------------------------- command

def run_verify_command(case_path, levels: int = 4, ratio: float = 2.0,
                       out_dir=None, quiet: bool = False) -> int:
    """``gnflow verify``: run the study, print the tables, write the files; returns 0."""
    case = load_case(case_path)
    plan_levels(case, levels, ratio)   # bad options fail before any solve
    out = Path(out_dir) if out_dir else Path("results") / f"{Path(case_path).stem}-verify"
    if not quiet:
        print(f"gnflow verify: {case.title} ({case.fluid.model.name}, {case.geometry.shape}, "
              f"P{case.mesh.degree}), {levels} levels at ratio {ratio:g}", flush=True)
    bar = progress_bar(levels, f"verify: {levels} meshes of {case.geometry.shape}", "level",
                       enabled=not quiet)

    def progress(index, total, cells, stage):
        if stage == "start":
            bar.set_postfix_str(f"level {index}: {cells} cells", refresh=False)
        else:
            bar.update(1)

    with bar:
        result = run_verification(case, levels, ratio, progress=progress)
    written = write_verification(result, out)
    if not all(lv.converged for lv in result.levels):
        print("gnflow: WARNING: the solver did not converge on every level", file=sys.stderr)
    if quiet:
        return 0
    print(format_table(result))
    print(interpretation(result))
    print(f"  wrote {out}/: {', '.join(written)}")
    print_cautions(cautions(case))
    return 0
