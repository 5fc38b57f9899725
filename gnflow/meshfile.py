"""Reading a 2-D cross-section from a mesh file (any format meshio reads).

Triangles (3-node, or 6-node for curved, isoparametric sections) make the section; line
elements in named physical groups (gmsh ``.msh``) name the walls. Every boundary edge
that no group names belongs to the wall ``"wall"``. Coordinates are multiplied by the
case's ``geometry.length_unit``.
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import numpy as np
from skfem import MeshTri, MeshTri2

from .errors import CaseError

DEFAULT_WALL = "wall"


def _fail(path: Path, what: str) -> CaseError:
    return CaseError("geometry.file", message=f"geometry.file = {str(path)!r}: {what}")


def read_section(path: Path, length_unit: float = 1.0):
    """Return ``(mesh, {wall name: boundary facet indices})`` for a mesh file."""
    import meshio

    noise = io.StringIO()
    try:
        # meshio prints its own complaints and, for some files, exits: keep both contained
        with contextlib.redirect_stdout(noise), contextlib.redirect_stderr(noise):
            data = meshio.read(path)
    except (Exception, SystemExit) as err:  # meshio raises many types for unreadable files
        text = str(err) if str(err) and not isinstance(err, SystemExit) else noise.getvalue()
        reason = text.strip().splitlines()[0][:120] if text.strip() else type(err).__name__
        raise _fail(path, f"cannot read the mesh ({reason}); expected a 2-D triangle mesh "
                    "in a format meshio reads (.msh, .vtu, .xdmf, ...)") from None
    points = np.asarray(data.points, dtype=float)
    if points.size == 0:
        raise _fail(path, "the mesh is empty (no points)")
    if not np.all(np.isfinite(points)):
        raise _fail(path, "the mesh has non-finite coordinates")
    volume_types = {"tetra", "tetra10", "hexahedron", "hexahedron27", "wedge", "pyramid"}
    present = {block.type for block in data.cells}
    if present & volume_types:
        raise _fail(path, f"a 3-D mesh ({', '.join(sorted(present & volume_types))} cells); "
                    "expected a 2-D cross-section made of triangles")
    if points.shape[1] == 3 and np.ptp(points[:, 2]) > 1e-12 * max(np.ptp(points[:, :2]), 1e-300):
        raise _fail(path, "the points do not lie in one plane z = constant; expected a 2-D "
                    "cross-section")
    triangles = [b.data for b in data.cells if b.type == "triangle"]
    curved = [b.data for b in data.cells if b.type == "triangle6"]
    if not triangles and not curved:
        raise _fail(path, f"no triangles (cells found: {', '.join(sorted(present)) or 'none'}); "
                    "expected a 2-D triangle mesh")
    if triangles and curved:
        raise _fail(path, "mixes 3-node and 6-node triangles; expected one kind")
    xy = points[:, :2] * length_unit
    connectivity = np.vstack(curved or triangles)
    corners = np.unique(connectivity[:, :3])
    renumber = -np.ones(len(points), dtype=np.int64)
    renumber[corners] = np.arange(len(corners))
    t = renumber[connectivity[:, :3]].T
    linear = MeshTri(xy[corners].T.copy(), t.copy())
    # orientation and degenerate elements
    area = _signed_areas(linear)
    if np.any(np.abs(area) <= 1e-14 * np.abs(area).max()):
        raise _fail(path, "has degenerate (zero-area) triangles")
    if curved:
        mesh = _quadratic(linear, xy, connectivity, renumber)
    else:
        mesh = linear
    boundary = linear.boundary_facets()
    if boundary.size == 0:
        raise _fail(path, "the section has no boundary edges")
    return mesh, _named_walls(linear, boundary, data, renumber, path)


def _signed_areas(mesh: MeshTri) -> np.ndarray:
    p = mesh.p[:, mesh.t]
    return 0.5 * ((p[0, 1] - p[0, 0]) * (p[1, 2] - p[1, 0]) - (p[0, 2] - p[0, 0]) * (p[1, 1] - p[1, 0]))


def _edge_key(a, b):
    return (min(a, b), max(a, b))


def _quadratic(linear: MeshTri, xy, connectivity, renumber) -> MeshTri2:
    midpoint_of = {}
    for local_a, local_b, local_m in ((0, 1, 3), (1, 2, 4), (2, 0, 5)):
        for row in connectivity:
            midpoint_of[_edge_key(renumber[row[local_a]], renumber[row[local_b]])] = row[local_m]
    quadratic = MeshTri2.from_mesh(linear)
    doflocs = quadratic.doflocs.copy()
    for k, (a, b) in enumerate(linear.facets.T):
        doflocs[:, linear.nvertices + k] = xy[midpoint_of[_edge_key(a, b)]]
    return MeshTri2(doflocs, quadratic.t)


def _named_walls(linear: MeshTri, boundary, data, renumber, path) -> dict[str, np.ndarray]:
    facet_of = {_edge_key(a, b): k for k, (a, b) in enumerate(linear.facets.T)}
    boundary_set = set(boundary.tolist())
    names = {int(tag): name for name, (tag, dim) in
             ((n, (v[0], v[1] if len(v) > 1 else 1)) for n, v in data.field_data.items())
             if int(dim) == 1}
    physical = data.cell_data.get("gmsh:physical")
    owner: dict[int, str] = {}
    if physical is not None:
        for block, tags in zip(data.cells, physical):
            if block.type not in ("line", "line3"):
                continue
            for row, tag in zip(block.data, tags):
                a, b = renumber[row[0]], renumber[row[1]]
                key = _edge_key(a, b)
                if a < 0 or b < 0 or key not in facet_of:
                    continue
                k = facet_of[key]
                if k in boundary_set:
                    owner[k] = names.get(int(tag), f"group{int(tag)}")
    walls: dict[str, list[int]] = {}
    for k in boundary.tolist():
        walls.setdefault(owner.get(k, DEFAULT_WALL), []).append(k)
    return {name: np.array(sorted(ks), dtype=np.int64) for name, ks in walls.items()}
