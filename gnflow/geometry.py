"""Domains: the mesh, the finite element basis, the walls and the weights of each shape.

A :class:`Domain` holds everything the solver needs and nothing about the fluid:

* ``kind``: ``"axial"`` (velocity ``w`` along the passage) or ``"rotational"``
  (angular speed ``omega`` between coaxial cylinders);
* ``basis``: a scikit-fem :class:`~skfem.CellBasis` (P1 or P2 Lagrange);
* ``area_weight``: the factor turning ``dx`` into a cross-section area element
  (1 for a slit per unit width, ``2 pi r`` for axisymmetric sections);
* ``rate_factor``: the factor turning ``|grad u|`` into the shear rate (1 for axial
  flow, ``r`` for rotational flow, where ``gamma_dot = |r d omega / dr|``);
* ``walls``: name -> :class:`Wall`, with the degrees of freedom, the prescribed value
  and the wetted perimeter of each.

With these, the momentum balance of every shape is one weak form,
``int eta(gamma_dot) rate_factor^2 grad u . grad v area_weight dx = -G int v area_weight dx``
(``G = 0`` for rotational flow), which is what :mod:`gnflow.solver` assembles.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from skfem import Basis, ElementLineP1, ElementLineP2, MeshLine

from .case import Case
from .errors import CaseError


@dataclass(frozen=True)
class Wall:
    """One wall: its dofs, the prescribed axial speed (or angular speed), its perimeter."""

    name: str
    dofs: np.ndarray
    value: float
    perimeter: float          # wetted perimeter per unit length (slit: 1 per unit width)
    position: float | None = None   # 1-D: the coordinate of the wall
    outward_sign: float = 1.0       # 1-D: the sign of the outward normal along the axis


@dataclass(frozen=True)
class Domain:
    shape: str
    kind: str
    basis: Basis
    walls: dict[str, Wall]
    coordinate: str                 # "y" (slit), "r" (axisymmetric), "x, y" (2-D)
    axisymmetric: bool
    area: float                     # cross-section area (slit: gap, per unit width)
    hydraulic_diameter: float
    length_scale: float             # the gap, or the radius of a pipe
    degree: int
    cells: int
    extra: dict = field(default_factory=dict)

    @property
    def dimension(self) -> int:
        return self.basis.mesh.dim()

    @property
    def dofs(self) -> int:
        return self.basis.N

    def area_weight(self, x):
        """Area element factor at points ``x`` (shape (dim, ...))."""
        if self.axisymmetric:
            return 2 * math.pi * x[0]
        return np.ones_like(x[0])

    def rate_factor(self, x):
        """Factor from ``|grad u|`` to the shear rate at points ``x``."""
        if self.kind == "rotational":
            return x[0]
        return np.ones_like(x[0])

    @property
    def wall_dofs(self) -> np.ndarray:
        return np.unique(np.concatenate([w.dofs for w in self.walls.values()]))

    @property
    def wetted_perimeter(self) -> float:
        return sum(w.perimeter for w in self.walls.values())


def graded_points(cells: int, grading: float, walls: str) -> np.ndarray:
    """Node positions on [0, 1], cells refined toward the walls by a tanh map.

    ``grading`` is the ratio of the largest cell to the cells at a wall (1 = uniform);
    ``walls`` is ``"both"`` or ``"right"`` (a pipe has its only wall at ``r = R``).

    >>> p = graded_points(4, 1.0, "both"); p.tolist()
    [0.0, 0.25, 0.5, 0.75, 1.0]
    """
    xi = np.linspace(0.0, 1.0, cells + 1)
    if grading <= 1.0:
        return xi
    beta = math.acosh(math.sqrt(grading))  # cell size ratio centre/wall = cosh(beta)^2
    if walls == "both":
        x = 0.5 * (1 + np.tanh(beta * (2 * xi - 1)) / math.tanh(beta))
    else:
        x = 1 + np.tanh(beta * (xi - 1)) / math.tanh(beta)
    x[0], x[-1] = 0.0, 1.0
    return x


def _line_basis(start: float, end: float, cells: int, degree: int, grading: float,
                walls: str) -> Basis:
    points = start + (end - start) * graded_points(cells, grading, walls)
    mesh = MeshLine(points)
    element = ElementLineP2() if degree == 2 else ElementLineP1()
    # P2 with a weight r (axisymmetric) and a nonlinear viscosity: a generous rule keeps the
    # quadrature error well below the discretisation error
    return Basis(mesh, element, intorder=2 * degree + 4)


def _end_dof(basis: Basis, at_start: bool) -> np.ndarray:
    x = basis.doflocs[0]
    return np.array([np.argmin(x) if at_start else np.argmax(x)])


def build_domain(case: Case, cells: int | None = None) -> Domain:
    """The :class:`Domain` of a case (``cells`` overrides ``case.mesh.cells``)."""
    g, mesh = case.geometry, case.mesh
    cells = cells or mesh.cells
    speeds = case.drive.wall_speed
    if g.shape == "slit":
        basis = _line_basis(0.0, g.gap, cells, mesh.degree, mesh.grading, "both")
        walls = {
            "bottom": Wall("bottom", _end_dof(basis, True), speeds.get("bottom", 0.0), 1.0, 0.0, -1.0),
            "top": Wall("top", _end_dof(basis, False), speeds.get("top", 0.0), 1.0, g.gap, 1.0),
        }
        return Domain("slit", "axial", basis, walls, "y", False, g.gap, 2 * g.gap, g.gap,
                      mesh.degree, cells)
    if g.shape == "pipe":
        basis = _line_basis(0.0, g.radius, cells, mesh.degree, mesh.grading, "right")
        walls = {"wall": Wall("wall", _end_dof(basis, False), speeds.get("wall", 0.0),
                              2 * math.pi * g.radius, g.radius, 1.0)}
        return Domain("pipe", "axial", basis, walls, "r", True, math.pi * g.radius ** 2,
                      2 * g.radius, g.radius, mesh.degree, cells)
    if g.shape == "annulus" and g.eccentricity == 0.0:
        ri, ro = g.inner_radius, g.outer_radius
        basis = _line_basis(ri, ro, cells, mesh.degree, mesh.grading, "both")
        walls = {
            "inner": Wall("inner", _end_dof(basis, True), speeds.get("inner", 0.0),
                          2 * math.pi * ri, ri, -1.0),
            "outer": Wall("outer", _end_dof(basis, False), speeds.get("outer", 0.0),
                          2 * math.pi * ro, ro, 1.0),
        }
        return Domain("annulus", "axial", basis, walls, "r", True, math.pi * (ro ** 2 - ri ** 2),
                      2 * (ro - ri), ro - ri, mesh.degree, cells)
    if g.shape == "coaxial-cylinders":
        ri, ro = g.inner_radius, g.outer_radius
        basis = _line_basis(ri, ro, cells, mesh.degree, mesh.grading, "both")
        walls = {
            "inner": Wall("inner", _end_dof(basis, True), case.drive.inner_angular_speed,
                          2 * math.pi * ri, ri, -1.0),
            "outer": Wall("outer", _end_dof(basis, False), case.drive.outer_angular_speed,
                          2 * math.pi * ro, ro, 1.0),
        }
        return Domain("coaxial-cylinders", "rotational", basis, walls, "r", True,
                      math.pi * (ro ** 2 - ri ** 2), 2 * (ro - ri), ro - ri, mesh.degree, cells)
    raise CaseError("geometry.shape", g.shape if g.shape != "annulus" else
                    f"annulus with eccentricity {g.eccentricity}",
                    "a 1-D shape (slit, pipe, concentric annulus, coaxial-cylinders); 2-D "
                    "cross-sections are not available in this version")
