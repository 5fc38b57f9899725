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
from skfem import (Basis, ElementLineP1, ElementLineP2, ElementTriP1, ElementTriP2, FacetBasis,
                   MeshLine, MeshTri, MeshTri2)

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
    if g.shape == "rectangle":
        return _rectangle(case, cells)
    if g.shape == "annulus":
        return _eccentric_annulus(case, cells)
    from .meshfile import read_section
    return _section_domain(case, *read_section(g.file, g.length_unit), cells=cells)


# --------------------------------------------------------------------------- 2-D sections

def _triangle_element(degree: int):
    return ElementTriP2() if degree == 2 else ElementTriP1()


def _tri_basis(mesh, degree: int) -> Basis:
    # order 4 (6 points) integrates P2 gradient products exactly on straight triangles and
    # leaves the nonlinear viscosity's quadrature error well below the discretisation's
    return Basis(mesh, _triangle_element(degree), intorder=2 * degree)


def _wall_perimeter(mesh, degree: int, facets: np.ndarray) -> float:
    facet_basis = FacetBasis(mesh, _triangle_element(degree), facets=facets)
    return float(np.sum(facet_basis.dx))


def _section_walls(basis: Basis, wall_facets: dict[str, np.ndarray], speeds: dict,
                   order: list[str]) -> dict[str, Wall]:
    """Walls from named boundary facets; where walls meet, the one later in ``order`` (a
    moving wall is put last) owns the shared dofs."""
    walls, taken = {}, set()
    for name in reversed(order):
        facets = wall_facets[name]
        dofs = np.setdiff1d(basis.get_dofs(facets).all(), np.fromiter(taken, int, len(taken)))
        taken.update(dofs.tolist())
        perimeter = _wall_perimeter(basis.mesh, basis.elem.maxdeg, facets)
        walls[name] = Wall(name, dofs, speeds.get(name, 0.0), perimeter)
    return {name: walls[name] for name in order}


def _moving_last(names, speeds) -> list[str]:
    """Wall order for corner ownership: moving walls last (they own their corners, so a
    lid keeps its speed up to the corner), otherwise by name, so that the same section
    gives the same walls however it was built."""
    return sorted(names, key=lambda n: (speeds.get(n, 0.0) != 0.0, n))


def _rectangle(case: Case, cells: int) -> Domain:
    g, spec = case.geometry, case.mesh
    width, height = g.width, g.height
    small = min(width, height)
    nx = max(int(round(cells * width / small)), 1)
    ny = max(int(round(cells * height / small)), 1)
    x = width * graded_points(nx, spec.grading, "both")
    y = height * graded_points(ny, spec.grading, "both")
    mesh = MeshTri.init_tensor(x, y)
    facets = mesh.boundary_facets()
    mid = mesh.p[:, mesh.facets[:, facets]].mean(axis=1)
    tol = 1e-9 * small
    wall_facets = {"bottom": facets[mid[1] < tol], "top": facets[mid[1] > height - tol],
                   "left": facets[mid[0] < tol], "right": facets[mid[0] > width - tol]}
    speeds = case.drive.wall_speed
    basis = _tri_basis(mesh, spec.degree)
    walls = _section_walls(basis, wall_facets, speeds, _moving_last(wall_facets, speeds))
    area = width * height
    return Domain("rectangle", "axial", basis, walls, "x, y", False, area,
                  4 * area / (2 * (width + height)), small, spec.degree, cells,
                  {"width": width, "height": height, "nx": nx, "ny": ny,
                   "wall_facets": wall_facets})


def _eccentric_annulus(case: Case, cells: int) -> Domain:
    """Eccentric annulus: outer circle centred at the origin, inner circle at (d, 0) with
    d = e (outer - inner). A structured mesh in (theta, s), s in [0, 1] across the gap,
    mapped by x = (1 - s) * inner(theta) + s * outer(theta). P2 uses an isoparametric
    quadratic mesh whose every node (edge midpoints included) lies on the exact map, so
    the walls are the exact circles up to O(h^3), which keeps P2's order."""
    g, spec = case.geometry, case.mesh
    ri, ro = g.inner_radius, g.outer_radius
    offset = g.eccentricity * (ro - ri)
    n_gap = cells
    mean_radius = 0.5 * (ri + ro)
    n_theta = max(int(round(2 * math.pi * mean_radius / (ro - ri) * cells)), 12)
    theta = np.linspace(0.0, 2 * math.pi, n_theta + 1)[:-1]
    s = graded_points(n_gap, spec.grading, "both")

    def mapped(t, r):
        return np.array([(1 - r) * (offset + ri * np.cos(t)) + r * ro * np.cos(t),
                         (1 - r) * ri * np.sin(t) + r * ro * np.sin(t)])

    tt, ss = np.meshgrid(theta, s, indexing="ij")
    param = np.array([tt.ravel(), ss.ravel()])           # node k = i * (n_gap + 1) + j
    index = np.arange(n_theta * (n_gap + 1)).reshape(n_theta, n_gap + 1)
    i0 = index[:, :-1]
    i1 = np.roll(index, -1, axis=0)[:, :-1]            # next angle, wrapping around
    j0 = index[:, 1:]
    j1 = np.roll(index, -1, axis=0)[:, 1:]
    t = np.hstack([np.array([i0.ravel(), i1.ravel(), j1.ravel()]),
                   np.array([i0.ravel(), j1.ravel(), j0.ravel()])])
    linear = MeshTri(mapped(*param), t)
    if spec.degree == 2:
        quadratic = MeshTri2.from_mesh(linear)
        ends = param[:, linear.facets]                   # (2, 2, facets)
        dtheta = ends[0, 1] - ends[0, 0]
        # an edge across the seam theta = 0 = 2 pi: take the short way round
        dtheta = np.where(dtheta > math.pi, dtheta - 2 * math.pi,
                          np.where(dtheta < -math.pi, dtheta + 2 * math.pi, dtheta))
        mid_theta = ends[0, 0] + 0.5 * dtheta
        mid_s = ends[1].mean(axis=0)
        doflocs = quadratic.doflocs.copy()
        doflocs[:, linear.nvertices:] = mapped(mid_theta, mid_s)
        mesh = MeshTri2(doflocs, quadratic.t)
    else:
        mesh = linear
    facets = linear.boundary_facets()
    s_mid = param[1, linear.facets[:, facets]].mean(axis=0)
    wall_facets = {"inner": facets[s_mid < 0.5], "outer": facets[s_mid > 0.5]}
    speeds = case.drive.wall_speed
    basis = _tri_basis(mesh, spec.degree)
    walls = _section_walls(basis, wall_facets, speeds, _moving_last(wall_facets, speeds))
    area = math.pi * (ro ** 2 - ri ** 2)
    return Domain("annulus", "axial", basis, walls, "x, y", False, area, 2 * (ro - ri),
                  ro - ri, spec.degree, cells, {"eccentricity": g.eccentricity,
                                               "offset": offset, "n_theta": n_theta,
                                               "wall_facets": wall_facets})


def _section_domain(case: Case, mesh, wall_facets: dict[str, np.ndarray], cells=None) -> Domain:
    """A section read from a mesh file (see :mod:`gnflow.meshfile`)."""
    spec = case.mesh
    speeds = case.drive.wall_speed
    for name in speeds:
        if name not in wall_facets:
            raise CaseError(f"drive.wall_speed.{name}", message=(
                f"drive.wall_speed.{name}: the mesh {case.geometry.file.name} has no boundary "
                f"group named {name!r}; its walls are: {', '.join(sorted(wall_facets))}"))
    degree = spec.degree
    if isinstance(mesh, MeshTri2) and degree == 1:
        mesh = MeshTri(mesh.p, mesh.t)
    basis = _tri_basis(mesh, degree)
    walls = _section_walls(basis, wall_facets, speeds, _moving_last(wall_facets, speeds))
    area = float(np.sum(basis.dx))
    perimeter = sum(w.perimeter for w in walls.values())
    extent = mesh.p.max(axis=1) - mesh.p.min(axis=1)
    return Domain("mesh", "axial", basis, walls, "x, y", False, area, 4 * area / perimeter,
                  float(min(extent)), degree, mesh.t.shape[1],
                  {"file": str(case.geometry.file), "wall_facets": wall_facets})
