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

import functools
import math
from dataclasses import dataclass, field

import numpy as np
from skfem import (Basis, ElementLineP1, ElementLineP2, ElementTriP1, ElementTriP2, FacetBasis,
                   MeshLine, MeshTri, MeshTri2)
from skfem.mapping import MappingIsoparametric

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
                walls: str, nodes: np.ndarray | None = None) -> Basis:
    """The 1-D basis on ``[start, end]``: ``cells`` graded cells, or the given ``nodes``
    (an adapted mesh, see :mod:`gnflow.solver.adapt`; sorted, ends included).

    The bases of the last few line meshes are kept (a study solves the same geometry and
    mesh many times; building a basis costs more than a 1-D Newton step). A basis is never
    changed after it is built, so sharing one between domains is safe."""
    given = None if nodes is None else np.asarray(nodes, dtype=float).tobytes()
    return _line_basis_cached(float(start), float(end), int(cells), int(degree),
                              float(grading), walls, given)


@functools.lru_cache(maxsize=16)
def _line_basis_cached(start: float, end: float, cells: int, degree: int, grading: float,
                       walls: str, given: bytes | None) -> Basis:
    nodes = None if given is None else np.frombuffer(given, dtype=float)
    if nodes is not None:
        points = np.asarray(nodes, dtype=float)
        if not (points[0] == start and points[-1] == end and np.all(np.diff(points) > 0)):
            raise ValueError("line mesh nodes must rise from one wall to the other")
    else:
        points = start + (end - start) * graded_points(cells, grading, walls)
    mesh = MeshLine(points)
    element = ElementLineP2() if degree == 2 else ElementLineP1()
    # P2 with a weight r (axisymmetric) and a nonlinear viscosity: a generous rule keeps the
    # quadrature error well below the discretisation error
    return Basis(mesh, element, intorder=2 * degree + 4)


def _end_dof(basis: Basis, at_start: bool) -> np.ndarray:
    x = basis.doflocs[0]
    return np.array([np.argmin(x) if at_start else np.argmax(x)])


def build_domain(case: Case, cells: int | None = None, nodes: np.ndarray | None = None) -> Domain:
    """The :class:`Domain` of a case (``cells`` overrides ``case.mesh.cells``; for a 1-D
    shape, ``nodes`` gives the mesh's node positions instead); a mesh that folds (too
    few cells for a strongly curved or eccentric section) is a bad input."""
    try:
        return _build_domain(case, cells, nodes)
    except MeshMappingError as err:
        shown = cells or case.mesh.cells
        raise CaseError("mesh.cells", shown, message=(
            f"mesh.cells = {shown}: the mesh of this {case.geometry.shape} folds ({err}); "
            "give more cells")) from None


def _build_domain(case: Case, cells: int | None = None, nodes=None) -> Domain:
    g, mesh = case.geometry, case.mesh
    cells = len(nodes) - 1 if nodes is not None else cells or mesh.cells
    speeds = case.drive.wall_speed
    if g.shape == "slit":
        basis = _line_basis(0.0, g.gap, cells, mesh.degree, mesh.wall_refinement, "both", nodes)
        walls = {
            "bottom": Wall("bottom", _end_dof(basis, True), speeds.get("bottom", 0.0), 1.0, 0.0, -1.0),
            "top": Wall("top", _end_dof(basis, False), speeds.get("top", 0.0), 1.0, g.gap, 1.0),
        }
        return Domain("slit", "axial", basis, walls, "y", False, g.gap, 2 * g.gap, g.gap,
                      mesh.degree, cells)
    if g.shape == "pipe":
        basis = _line_basis(0.0, g.radius, cells, mesh.degree, mesh.wall_refinement, "right",
                             nodes)
        walls = {"wall": Wall("wall", _end_dof(basis, False), speeds.get("wall", 0.0),
                              2 * math.pi * g.radius, g.radius, 1.0)}
        return Domain("pipe", "axial", basis, walls, "r", True, math.pi * g.radius ** 2,
                      2 * g.radius, g.radius, mesh.degree, cells)
    if g.shape == "annulus" and g.eccentricity == 0.0:
        ri, ro = g.inner_radius, g.outer_radius
        basis = _line_basis(ri, ro, cells, mesh.degree, mesh.wall_refinement, "both", nodes)
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
        basis = _line_basis(ri, ro, cells, mesh.degree, mesh.wall_refinement, "both", nodes)
        walls = {
            "inner": Wall("inner", _end_dof(basis, True), case.drive.inner_angular_speed,
                          2 * math.pi * ri, ri, -1.0),
            "outer": Wall("outer", _end_dof(basis, False), case.drive.outer_angular_speed,
                          2 * math.pi * ro, ro, 1.0),
        }
        return Domain("coaxial-cylinders", "rotational", basis, walls, "r", True,
                      math.pi * (ro ** 2 - ri ** 2), 2 * (ro - ri), ro - ri, mesh.degree, cells)
    if getattr(g, "drawing", None) is not None:
        from . import drawing
        return _section_domain(case, *drawing.mesh(g.drawing, cells, mesh.degree,
                                                   mesh.wall_refinement), cells=cells)
    if g.shape == "rectangle":
        return _rectangle(case, cells)
    if g.shape == "annulus":
        return _eccentric_annulus(case, cells)
    from .meshfile import read_section
    return _section_domain(case, *read_section(g.file, g.length_unit), cells=cells)


# --------------------------------------------------------------------------- 2-D sections

class MeshMappingError(RuntimeError):
    """A fault of a mesh gnflow built or re-oriented (never of user input): an element whose
    map from the reference triangle folds, or a point the inverse map cannot place."""


def reference_coordinates(mesh, x: np.ndarray, tind: np.ndarray, iterations: int = 50,
                          tolerance: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """Reference coordinates ``X`` (2, len(tind), points) of the global points ``x`` in the
    elements ``tind`` of a P1 or P2 triangle mesh, and a mask of the points that converged.

    Newton's method on ``x = sum_i x_i phi_i(X)`` written relative to each element's first
    vertex, so that round-off scales with the element and not with the distance from the
    origin: scikit-fem's own iteration works in global coordinates and cannot reach its
    1e-12 tolerance once elements are smaller than about 1e-4 of their distance from the
    origin (narrow gaps), whatever their shape. It starts from the straight triangle's
    barycentric coordinates and is not clipped to the triangle near the answer, so points
    on or just outside an edge (facet quadrature points, sliver regions) converge too.
    """
    elem = mesh.elem()
    dofs = mesh.dofs.element_dofs[:, tind] if hasattr(mesh, "dofs") else mesh.t[:, tind]
    nodes = mesh.doflocs[:, dofs]                         # (2, nodes per element, elements)
    origin = nodes[:, 0]
    nodes = nodes - origin[:, None]
    local = x - origin[:, :, None]
    e1, e2 = nodes[:, 1][:, :, None], nodes[:, 2][:, :, None]
    det = e1[0] * e2[1] - e1[1] * e2[0]
    X = np.array([(e2[1] * local[0] - e2[0] * local[1]) / det,
                  (e1[0] * local[1] - e1[1] * local[0]) / det])
    size = np.max(np.abs(nodes), axis=(0, 1))[:, None]
    converged = np.zeros(x.shape[1:], dtype=bool)
    for _ in range(iterations):
        F = np.zeros_like(local)
        J = np.zeros((2, 2) + local.shape[1:])
        for i in range(dofs.shape[0]):
            phi, dphi = elem.lbasis(X, i)
            F += nodes[:, i][:, :, None] * phi
            J += nodes[:, i][:, None, :, None] * dphi[None]
        r = local - F
        det = J[0, 0] * J[1, 1] - J[0, 1] * J[1, 0]
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.array([(J[1, 1] * r[0] - J[0, 1] * r[1]) / det,
                             (J[0, 0] * r[1] - J[1, 0] * r[0]) / det])
        step = np.where(np.isfinite(step), step, 0.0)
        residual = np.hypot(r[0], r[1]) / size
        converged = (np.max(np.abs(step), axis=0) <= tolerance) | (residual <= 1e-13)
        if converged.all():
            break
        # a far step stays in a neighbourhood of the triangle, where the map is meaningful
        X = np.clip(X + step, -1.0, 2.0)
    return X, converged & np.all(np.isfinite(X), axis=0)


class _StableIsoparametricMapping(MappingIsoparametric):
    """scikit-fem's isoparametric map with the inverse of :func:`reference_coordinates`."""

    def invF(self, x, tind=None, newton_max_iters=50, newton_tol=1e-12):
        tind = np.arange(self.mesh.t.shape[1]) if tind is None else tind
        X, converged = reference_coordinates(self.mesh, x, tind, newton_max_iters, newton_tol)
        if not converged.all():
            raise MeshMappingError(
                f"the inverse element map did not converge for {int((~converged).sum())} "
                f"points in {int(np.any(~converged, axis=1).sum())} curved elements")
        return X


class CurvedMeshTri2(MeshTri2):
    """A quadratic (isoparametric) triangle mesh whose inverse element map stays accurate
    for elements far smaller than their distance from the origin: every FacetBasis and
    probe built on it (wall stresses, slip walls, interpolation) uses that map."""

    def _mapping(self):
        if not hasattr(self, "_cached_mapping"):
            self._cached_mapping = _StableIsoparametricMapping(self, self.elem(), self.bndelem)
        return self._cached_mapping


def _signed_areas(p: np.ndarray, t: np.ndarray) -> np.ndarray:
    a, b, c = p[:, t[0]], p[:, t[1]], p[:, t[2]]
    return 0.5 * ((b[0] - a[0]) * (c[1] - a[1]) - (c[0] - a[0]) * (b[1] - a[1]))


def _counter_clockwise(p: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``t`` with every triangle wound counter-clockwise (positive orientation)."""
    t = np.array(t, copy=True)
    clockwise = _signed_areas(p, t) < 0
    t[1, clockwise], t[2, clockwise] = t[2, clockwise], t[1, clockwise].copy()
    return t


def _linear_mesh(p: np.ndarray, t: np.ndarray) -> MeshTri:
    # sort_t=False: scikit-fem's default sorts the vertices of each triangle, which
    # undoes the counter-clockwise winding
    return MeshTri(np.ascontiguousarray(p, dtype=float), _counter_clockwise(p, t), sort_t=False)


def _curved_mesh(linear: MeshTri, edge_nodes: np.ndarray) -> CurvedMeshTri2:
    """The quadratic mesh of ``linear`` with edge ``k``'s middle node at ``edge_nodes[:, k]``
    (``linear.facets`` order)."""
    quadratic = MeshTri2.from_mesh(linear)
    doflocs = quadratic.doflocs.copy()
    doflocs[:, linear.nvertices:] = edge_nodes
    return CurvedMeshTri2(doflocs, quadratic.t)


def _check_jacobians(basis: Basis, shape: str) -> None:
    """Every element's Jacobian determinant is positive at its quadrature points and
    vertices: a folded curved element would be integrated with |det| and give a wrong
    answer silently."""
    mapping = basis.mapping
    points = np.hstack([basis.X, np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])])
    try:
        det = np.asarray(mapping.detDF(points))
    except Exception:  # scikit-fem raises a bare Exception for an exactly zero determinant
        det = np.zeros(1)
    if not np.all(det > 0):
        bad = int(np.sum(np.any(np.atleast_2d(det) <= 0, axis=-1)))
        raise MeshMappingError(f"the {shape} mesh has {bad} inverted or degenerate elements "
                               "(Jacobian determinant <= 0)")


def _triangle_element(degree: int):
    return ElementTriP2() if degree == 2 else ElementTriP1()


def _tri_basis(mesh, degree: int, shape: str = "section") -> Basis:
    # order 4 (6 points) integrates P2 gradient products exactly on straight triangles and
    # leaves the nonlinear viscosity's quadrature error well below the discretisation's
    basis = Basis(mesh, _triangle_element(degree), intorder=2 * degree)
    _check_jacobians(basis, shape)
    return basis


def _wall_perimeter(mesh, degree: int, facets: np.ndarray) -> float:
    if mesh.elem is ElementTriP1:
        # straight facets: their lengths (a facet basis of the four walls of a 1M-unknown
        # duct took 0.63 s, its quadrature the same sum)
        ends = mesh.p[:, mesh.facets[:, facets]]
        return float(np.sum(np.hypot(*(ends[:, 1] - ends[:, 0]))))
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


# ---- structured triangulations with mirrored diagonals

def _quad_triangles(lower_left, lower_right, upper_right, upper_left, rising: np.ndarray):
    """Two triangles per quad; ``rising`` quads are cut lower-left to upper-right, the
    others lower-right to upper-left."""
    a, b, c, d = (np.asarray(v).ravel() for v in (lower_left, lower_right, upper_right,
                                                   upper_left))
    rising = np.asarray(rising).ravel()
    first = np.where(rising, [a, b, c], [a, b, d])
    second = np.where(rising, [a, c, d], [b, c, d])
    return np.hstack([first, second])


def _mirrored_rising(count_x: int, count_y: int) -> np.ndarray:
    """Diagonal choice of quad (i, j) in a count_x x count_y grid, mirror symmetric about
    both centre lines: each diagonal passes through the quad corner nearest the grid's
    nearest corner, so no triangle has all its nodes on two walls."""
    left = (np.arange(count_x) + 0.5 < count_x / 2)[:, None]
    bottom = (np.arange(count_y) + 0.5 < count_y / 2)[None, :]
    return left == bottom


def _rectangle_mesh(x: np.ndarray, y: np.ndarray) -> MeshTri:
    """A structured triangle mesh on the tensor grid ``x`` by ``y``, mirror symmetric
    about both centre lines when the grid is: mirrored diagonals, and the quads of an odd
    middle column or row cut criss-cross (four triangles around a centre node)."""
    nx, ny = len(x) - 1, len(y) - 1
    xx, yy = np.meshgrid(x, y, indexing="ij")
    points = [np.array([xx.ravel(), yy.ravel()])]
    index = np.arange(xx.size).reshape(nx + 1, ny + 1)
    ll, lr, ur, ul = index[:-1, :-1], index[1:, :-1], index[1:, 1:], index[:-1, 1:]
    middle = np.zeros((nx, ny), dtype=bool)
    if nx % 2:
        middle[nx // 2, :] = True
    if ny % 2:
        middle[:, ny // 2] = True
    plain = ~middle
    triangles = [_quad_triangles(ll[plain], lr[plain], ur[plain], ul[plain],
                                 _mirrored_rising(nx, ny)[plain])]
    if middle.any():
        corners = [v[middle] for v in (ll, lr, ur, ul)]
        centre = np.arange(middle.sum()) + xx.size
        points.append(np.mean([points[0][:, c] for c in corners], axis=0))
        for k in range(4):
            triangles.append(np.array([corners[k], corners[(k + 1) % 4], centre]))
    return _linear_mesh(np.hstack(points), np.hstack(triangles))


def _rectangle(case: Case, cells: int) -> Domain:
    g, spec = case.geometry, case.mesh
    width, height = g.width, g.height
    small = min(width, height)
    nx = max(int(round(cells * width / small)), 1)
    ny = max(int(round(cells * height / small)), 1)
    x = width * graded_points(nx, spec.wall_refinement, "both")
    y = height * graded_points(ny, spec.wall_refinement, "both")
    mesh = _rectangle_mesh(x, y)
    facets = mesh.boundary_facets()
    mid = mesh.p[:, mesh.facets[:, facets]].mean(axis=1)
    tol = 1e-9 * small
    wall_facets = {"bottom": facets[mid[1] < tol], "top": facets[mid[1] > height - tol],
                   "left": facets[mid[0] < tol], "right": facets[mid[0] > width - tol]}
    speeds = case.drive.wall_speed
    basis = _tri_basis(mesh, spec.degree, "rectangle")
    walls = _section_walls(basis, wall_facets, speeds, _moving_last(wall_facets, speeds))
    area = width * height
    return Domain("rectangle", "axial", basis, walls, "x, y", False, area,
                  4 * area / (2 * (width + height)), small, spec.degree, cells,
                  {"width": width, "height": height, "nx": nx, "ny": ny,
                   "wall_facets": wall_facets,
                   "singular_points": singular_points(mesh, wall_facets, speeds)})


# ---- eccentric annulus

# The angular cells of an annulus are at most this many times the cells across the gap:
# conformal (square) cells would need 2 pi / ln(1/rho) times as many, over 400 for a
# radius ratio of 0.9 at e = 0.99; across a narrow gap the flow varies far more slowly
# along the wall than across it, so long cells there cost little accuracy (measured
# against the bipolar series in tests/test_meshes.py).
MAX_ANGULAR_PER_GAP_CELL = 16


@dataclass(frozen=True)
class AnnulusMap:
    """The conformal map of the concentric annulus ``rho <= |z| <= 1`` onto the eccentric
    annulus (outer circle of radius ``outer_radius`` at the origin, inner circle of radius
    ``inner_radius`` centred at ``(offset, 0)``): ``w = R_o (z + lam) / (1 + lam z)``.

    A Moebius map of the unit disc onto itself sends circles to circles; with
    ``delta = offset / R_o``, ``kappa = R_i / R_o``,
    ``B = (1 + delta^2 - kappa^2) / (2 delta)``, ``lam = 1 / (B + sqrt(B^2 - 1))`` and
    ``rho = (w_1 - lam) / (1 - lam w_1)``, ``w_1 = delta + kappa``, the circle
    ``|z| = rho`` lands on the inner wall. ``ln(1/rho)`` is the conformal modulus (the
    bipolar coordinate difference ``beta - alpha`` of the Piercy, Hooper & Winny series).
    Conformal maps keep angles, so a polar grid in ``z`` maps to cells with right angles
    whose angular spacing shrinks with the local gap: fine where the gap is narrow. Valid for ``0 <= offset < R_o - R_i``; ``lam -> 0`` (the
    identity) as the offset vanishes, with no cancellation.

    >>> m = AnnulusMap(0.5, 1.0, 0.25)
    >>> w = m.point(m.rho, 0.0)
    >>> bool(abs(abs(complex(*w) - 0.25) - 0.5) < 1e-12)
    True
    """

    inner_radius: float
    outer_radius: float
    offset: float

    @property
    def lam(self) -> float:
        delta, kappa = self.offset / self.outer_radius, self.inner_radius / self.outer_radius
        if delta == 0.0:
            return 0.0
        b = (1 + delta ** 2 - kappa ** 2) / (2 * delta)
        # B^2 - 1 = (B - 1)(B + 1), with B - 1 = (1 - delta - kappa)(1 - delta + kappa)/(2 delta)
        b_minus_1 = (1 - delta - kappa) * (1 - delta + kappa) / (2 * delta)
        return 1.0 / (b + math.sqrt(b_minus_1 * (b + 1)))

    @property
    def rho(self) -> float:
        w1 = (self.offset + self.inner_radius) / self.outer_radius
        lam = self.lam
        return (w1 - lam) / (1 - lam * w1)

    def point(self, radius, angle) -> np.ndarray:
        """The eccentric-annulus point (2, ...) of the polar point (radius, angle) in z."""
        z = np.asarray(radius) * np.exp(1j * np.asarray(angle))
        w = self.outer_radius * (z + self.lam) / (1 + self.lam * z)
        return np.array([w.real, w.imag])


def _annulus_mesh(annulus: AnnulusMap, gap_cells: int, angular_cells: int, refinement: float,
                  degree: int):
    """Mesh of the eccentric annulus from a polar grid in the concentric plane: radius
    ``rho + (1 - rho) s`` (s graded from the inner wall, s = 0, to the outer, s = 1; even
    spacing in radius gave 2 to 5 times smaller flow-rate errors than the conformal
    squares of ``rho^(1 - s)``, which crowd the inner wall) and angles
    ``zeta + lam sin(zeta)`` for uniform ``zeta``; diagonals mirrored about the angles 0
    and pi so the mesh is mirror symmetric about the line of centres. Returns (mesh,
    parameters (s, angle) of the vertices, the linear mesh).

    Why the angle stretch: uniform angles give cells in proportion to the local gap, which
    at e -> 1 leaves the wide side with few, long cells; uniform arc length would starve
    the narrow gap. The map ``|dw/dz|`` changes by ``((1 + lam)/(1 - lam))^2`` from the
    narrow side to the wide one, and the stretch factor ``1 + lam cos(zeta)`` takes back the
    square root of that: the geometric mean of the two spacings. Against the bipolar
    series this cut the flow-rate error at e = 0.99 by 15 to 50 times and left e <= 0.5
    unchanged (measured at 8 and 16 gap cells, radius ratios 0.5 and 0.9)."""
    s = graded_points(gap_cells, refinement, "both")
    zeta = 2 * math.pi * np.arange(angular_cells) / angular_cells
    angle = zeta + annulus.lam * np.sin(zeta)

    def mapped(s_values, angles):
        return annulus.point(annulus.rho + (1 - annulus.rho) * s_values, angles)

    tt, ss = np.meshgrid(angle, s, indexing="ij")
    param = np.array([ss.ravel(), tt.ravel()])             # node k = i * (gap_cells + 1) + j
    index = np.arange(angle.size * (gap_cells + 1)).reshape(angle.size, gap_cells + 1)
    following = np.roll(index, -1, axis=0)                   # next angle, wrapping around
    rising = np.broadcast_to((np.arange(angular_cells) < angular_cells // 2)[:, None],
                             (angular_cells, gap_cells))
    t = _quad_triangles(index[:, :-1], following[:, :-1], following[:, 1:], index[:, 1:],
                        rising)
    linear = _linear_mesh(mapped(*param), t)
    if degree == 1:
        return linear, param, linear
    ends = param[:, linear.facets]                           # (2, 2, facets)
    step = ends[1, 1] - ends[1, 0]
    # an edge across the seam angle = 0 = 2 pi: take the short way round
    step = np.where(step > math.pi, step - 2 * math.pi,
                    np.where(step < -math.pi, step + 2 * math.pi, step))
    edge_nodes = mapped(ends[0].mean(axis=0), ends[1, 0] + 0.5 * step)
    return _curved_mesh(linear, edge_nodes), param, linear


def annulus_angular_cells(annulus: AnnulusMap, gap_cells: int) -> int:
    """Angular cells: conformal squares (2 pi / ln(1/rho) per gap cell), at most
    :data:`MAX_ANGULAR_PER_GAP_CELL` per gap cell, at least 12; even, for the mirror
    symmetry."""
    square = 2 * math.pi / math.log(1 / annulus.rho) * gap_cells
    count = min(square, MAX_ANGULAR_PER_GAP_CELL * gap_cells)
    return max(2 * int(math.ceil(count / 2)), 12)


def _eccentric_annulus(case: Case, cells: int) -> Domain:
    """Eccentric annulus: outer circle centred at the origin, inner circle at (d, 0) with
    d = e (outer - inner), meshed through the conformal :class:`AnnulusMap`. P2 uses an
    isoparametric quadratic mesh whose every node (edge midpoints included) lies on the
    exact map, so the walls are the exact circles up to O(h^3), which keeps P2's order."""
    g, spec = case.geometry, case.mesh
    ri, ro = g.inner_radius, g.outer_radius
    offset = g.eccentricity * (ro - ri)
    annulus = AnnulusMap(ri, ro, offset)
    n_theta = annulus_angular_cells(annulus, cells)
    mesh, param, linear = _annulus_mesh(annulus, cells, n_theta, spec.wall_refinement,
                                        spec.degree)
    facets = linear.boundary_facets()
    s_mid = param[0, linear.facets[:, facets]].mean(axis=0)
    wall_facets = {"inner": facets[s_mid < 0.5], "outer": facets[s_mid > 0.5]}
    speeds = case.drive.wall_speed
    basis = _tri_basis(mesh, spec.degree, "annulus")
    walls = _section_walls(basis, wall_facets, speeds, _moving_last(wall_facets, speeds))
    area = math.pi * (ro ** 2 - ri ** 2)
    return Domain("annulus", "axial", basis, walls, "x, y", False, area, 2 * (ro - ri),
                  ro - ri, spec.degree, cells, {"eccentricity": g.eccentricity,
                                               "offset": offset, "n_theta": n_theta,
                                               "wall_facets": wall_facets,
                                               "singular_points": []})


# ---- sections read from mesh files

def _reoriented(mesh):
    """The same mesh with every triangle counter-clockwise; a quadratic mesh keeps each
    edge's middle node (matched by the edge's end vertices)."""
    # a 6-node mesh's ``p`` holds every node in scikit-fem 12: take the vertices
    vertices = np.ascontiguousarray(mesh.doflocs[:, :mesh.nvertices])
    linear = _linear_mesh(vertices, mesh.t[:3])
    if not isinstance(mesh, MeshTri2):
        return linear
    source = MeshTri(vertices, mesh.t[:3], sort_t=False)
    n = mesh.nvertices
    old = np.sort(source.facets, axis=0)
    new = np.sort(linear.facets, axis=0)
    old_keys, new_keys = old[0] * n + old[1], new[0] * n + new[1]
    order = np.argsort(old_keys)
    match = order[np.searchsorted(old_keys[order], new_keys)]
    edge_nodes = mesh.doflocs[:, n:][:, match]
    return _curved_mesh(linear, edge_nodes)


def _section_domain(case: Case, mesh, wall_facets: dict[str, np.ndarray], cells=None) -> Domain:
    """A section read from a mesh file (see :mod:`gnflow.meshfile`) or drawn in the case
    file (:mod:`gnflow.drawing`; then the shape keeps its name and ``cells`` its meaning)."""
    spec = case.mesh
    speeds = case.drive.wall_speed
    drawn = getattr(case.geometry, "drawing", None) is not None
    file = case.geometry.file
    source = (f"the drawn {case.geometry.shape} has no wall" if drawn or file is None else
              f"the mesh {file.name} has no boundary group")
    for name in speeds:
        if name not in wall_facets:
            raise CaseError(f"drive.wall_speed.{name}", message=(
                f"drive.wall_speed.{name}: {source} named {name!r}; its walls "
                f"are: {', '.join(sorted(wall_facets))}"))
    degree = spec.degree
    if isinstance(mesh, MeshTri2) and degree == 1:
        mesh = MeshTri(np.ascontiguousarray(mesh.doflocs[:, :mesh.nvertices]), mesh.t,
                       sort_t=False)
    oriented = _reoriented(mesh)
    wall_facets = _renumbered_facets(mesh, oriented, wall_facets)
    mesh = oriented
    basis = _tri_basis(mesh, degree, "mesh-file")
    walls = _section_walls(basis, wall_facets, speeds, _moving_last(wall_facets, speeds))
    area = float(np.sum(basis.dx))
    perimeter = sum(w.perimeter for w in walls.values())
    extent = mesh.p.max(axis=1) - mesh.p.min(axis=1)
    return Domain(case.geometry.shape if drawn else "mesh", "axial", basis, walls, "x, y",
                  False, area, 4 * area / perimeter, float(min(extent)), degree,
                  int(cells or spec.cells) if drawn else mesh.t.shape[1],
                  {"file": None if drawn or file is None else str(file), "wall_facets": wall_facets,
                   "singular_points": singular_points(mesh, wall_facets, speeds)})


def _renumbered_facets(old_mesh, new_mesh, wall_facets: dict[str, np.ndarray]):
    """The wall facets of ``old_mesh`` as facet indices of ``new_mesh`` (same vertices)."""
    n = old_mesh.p.shape[1]
    new = np.sort(new_mesh.facets, axis=0)
    new_keys = new[0] * n + new[1]
    order = np.argsort(new_keys)
    out = {}
    for name, facets in wall_facets.items():
        old = np.sort(old_mesh.facets[:, facets], axis=0)
        keys = old[0] * n + old[1]
        out[name] = np.sort(order[np.searchsorted(new_keys[order], keys)])
    return out


# ---- singular corners

# A boundary vertex whose interior angle exceeds 180 degrees by more than this is a
# re-entrant corner. Chords of a concave curved wall turn by 360/N degrees per vertex (N
# chords round a full circle); 10 degrees keeps such walls (N >= 36) from being flagged,
# and curved (P2) walls are measured along their quadratic edges, which turn by far less.
REENTRANT_MARGIN_DEG = 10.0


def _edge_tangents(mesh, facet: int, start: int) -> np.ndarray:
    """The tangent of boundary edge ``facet`` at its vertex ``start``, pointing into the
    edge; along the quadratic edge for a curved mesh (d/ds of the P2 edge map)."""
    a, b = mesh.facets[:, facet]
    if start != a:
        a, b = b, a
    pa, pb = mesh.p[:, a], mesh.p[:, b]
    if isinstance(mesh, MeshTri2):
        middle = mesh.doflocs[:, mesh.nvertices + facet]
        return -3 * pa + 4 * middle - pb
    return pb - pa


def wall_force_shares(domain) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per wall, the dofs whose reactions make up the force on it and each one's share.

    A dof where two walls at the same speed meet (a corner node of a 2-D section) carries
    the reaction of the facets of both; it is split between them in proportion to the
    lengths of their facets at the node (the integral of a vertex basis function over a
    straight facet is proportional to its length). Giving the whole corner to one wall,
    as the walls' own dofs do (they fix the boundary values), made the top and bottom of
    a Bingham square duct differ by 2 % with a symmetric solution. Where walls at
    different speeds meet the node moves with the wall that owns it, which keeps its
    reaction, so that the walls' work is the speeds times the forces. 1-D sections: each
    wall its own dofs.
    """
    wall_facets = domain.extra.get("wall_facets") if domain.dimension == 2 else None
    if not wall_facets:
        return {name: (wall.dofs, np.ones(wall.dofs.size)) for name, wall in domain.walls.items()}
    basis, mesh = domain.basis, domain.basis.mesh
    lengths = np.linalg.norm(mesh.p[:, mesh.facets[0]] - mesh.p[:, mesh.facets[1]], axis=0)
    at_node, dofs = {}, {}
    for name in domain.walls:
        facets = np.asarray(wall_facets[name])
        at_node[name] = np.bincount(mesh.facets[:, facets].ravel(),
                                    weights=np.repeat(lengths[facets], 2),
                                    minlength=mesh.nvertices)
        dofs[name] = np.unique(basis.get_dofs(facets).all())
    total = sum(at_node.values())
    vertex_dofs = basis.nodal_dofs[0]            # the dof of each mesh vertex
    shares = {}
    for name, wall in domain.walls.items():
        weights = np.ones(dofs[name].size)
        vertices = np.flatnonzero(at_node[name] > 0)
        for vertex in vertices[at_node[name][vertices] < total[vertices]]:
            others = [o for o in domain.walls if o != name and at_node[o][vertex] > 0]
            where = int(np.searchsorted(dofs[name], vertex_dofs[vertex]))
            if all(domain.walls[o].value == wall.value for o in others):
                weights[where] = at_node[name][vertex] / total[vertex]
            else:
                weights[where] = float(np.isin(vertex_dofs[vertex], wall.dofs))
        shares[name] = (dofs[name], weights)
    return shares


def singular_points(mesh, wall_facets: dict[str, np.ndarray], speeds: dict) -> list[dict]:
    """Boundary points where the flow is singular: two walls with different prescribed
    speeds meet (``"wall-speed jump"``: the velocity is discontinuous there and the wall
    stress grows without bound under refinement), or the interior angle exceeds 180
    degrees (``"re-entrant corner"``: the stress grows as r^(pi/angle - 1), Moffatt-type
    corner behaviour of Laplace-like problems). Each is a dict ``{"x", "y", "walls":
    [name_a, name_b], "kind", "angle_deg"}`` with the interior angle in degrees."""
    owner = {}
    for name, facets in wall_facets.items():
        for f in np.asarray(facets).tolist():
            owner[f] = name
    boundary = mesh.boundary_facets()
    # orient each boundary edge with the fluid on its left: along its CCW triangle
    t = mesh.t[:3]
    element = mesh.f2t[0, boundary]
    a, b = mesh.facets[:, boundary]
    tri = t[:, element]
    position_a = np.argmax(tri == a, axis=0)
    forward = tri[(position_a + 1) % 3, np.arange(tri.shape[1])] == b
    start = np.where(forward, a, b)
    end = np.where(forward, b, a)
    leaving = dict(zip(start.tolist(), boundary.tolist()))
    arriving = dict(zip(end.tolist(), boundary.tolist()))
    found = []
    for vertex in sorted(leaving):
        if vertex not in arriving:
            continue
        out_facet, in_facet = leaving[vertex], arriving[vertex]
        ahead = _edge_tangents(mesh, out_facet, vertex)
        back = _edge_tangents(mesh, in_facet, vertex)
        angle = math.degrees(math.atan2(ahead[0] * back[1] - ahead[1] * back[0],
                                        ahead @ back)) % 360.0
        names = sorted([owner.get(in_facet, "wall"), owner.get(out_facet, "wall")])
        kind = None
        if speeds.get(names[0], 0.0) != speeds.get(names[1], 0.0):
            kind = "wall-speed jump"
        elif angle > 180.0 + REENTRANT_MARGIN_DEG:
            kind = "re-entrant corner"
        if kind:
            found.append({"x": float(mesh.p[0, vertex]), "y": float(mesh.p[1, vertex]),
                          "walls": names, "kind": kind, "angle_deg": round(angle, 6)})
    return found
