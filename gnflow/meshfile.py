"""Reading a 2-D cross-section from a mesh file (any format meshio reads).

Triangles (3-node, or 6-node for curved, isoparametric sections) make the section; line
elements in named boundary groups (the named line groups of a gmsh ``.msh`` file) name
the walls. Every boundary edge that no group names belongs to the wall ``"wall"``.
Coordinates are multiplied by the case's ``geometry.length_unit``.

Every problem with the file (missing, unreadable, too large, empty, 3-D, degenerate or
malformed) is a :class:`CaseError` naming ``geometry.file``; ``gnflow check`` and
``gnflow run`` read the file through :func:`read_case_section` and so refuse it with the
same message. numpy, scikit-fem and meshio are imported only when a file is read.
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import numpy as np

from .errors import CaseError, one_line, shorten, shown_key

DEFAULT_WALL = "wall"
#: larger files are refused before meshio reads them (a cross-section is rarely > 10 MB)
MAX_MESH_BYTES = 200_000_000


def _fail(path: Path, what: str) -> CaseError:
    return CaseError("geometry.file", message=f"geometry.file = {shorten(str(path), 80)}: {what}")


def read_case_section(geometry, wall_speed: dict):
    """Read the mesh file of a ``shape = "mesh"`` case and check that every wall named in
    ``[drive] wall_speed`` is one of its walls; return ``(mesh, walls)`` as
    :func:`read_section` does."""
    mesh, walls = read_section(geometry.file, geometry.length_unit)
    check_wall_names(walls, wall_speed, geometry.file)
    return mesh, walls


def check_wall_names(walls: dict, wall_speed: dict, path: Path) -> None:
    """Raise a :class:`CaseError` for a wall speed given to a wall the mesh does not have."""
    for name in wall_speed:
        if name not in walls:
            raise CaseError(f"drive.wall_speed.{name}", message=(
                f"drive.wall_speed.{shown_key(name)}: the mesh {shown_key(Path(path).name, 40)} "
                f"has no boundary group named {shorten(name)}; its walls are: "
                f"{', '.join(sorted(walls))}"))


def read_section(path: Path, length_unit: float = 1.0):
    """Return ``(mesh, {wall name: boundary facet indices})`` for a mesh file."""
    try:
        size = Path(path).stat().st_size
    except OSError as err:
        raise _fail(path, f"cannot read the file ({err.strerror})") from None
    if size > MAX_MESH_BYTES:
        raise _fail(path, f"larger than {MAX_MESH_BYTES} bytes; expected a 2-D cross-section")
    try:
        return _read_section(path, length_unit)
    except CaseError:
        raise
    except (ValueError, IndexError, KeyError, TypeError) as err:
        # a file meshio reads but whose cells do not form a mesh (indices out of range,
        # edges shared by more than two triangles, ...) fails inside numpy or scikit-fem
        raise _fail(path, f"malformed mesh ({type(err).__name__}: "
                    f"{shorten(str(err), 50)})") from None


def _read_section(path: Path, length_unit: float):
    import meshio
    from skfem import MeshTri

    noise = io.StringIO()
    try:
        # meshio prints its own complaints and, for some files, exits: keep both contained
        with contextlib.redirect_stdout(noise), contextlib.redirect_stderr(noise):
            data = meshio.read(path)
    except (Exception, SystemExit) as err:  # meshio raises many types for unreadable files
        text = str(err) if str(err) and not isinstance(err, SystemExit) else noise.getvalue()
        reason = one_line(text.strip().splitlines()[0], 60) if text.strip() \
            else type(err).__name__
        raise _fail(path, "cannot read the mesh, expected a 2-D triangle mesh that meshio "
                    f"reads (.msh, .vtu, .xdmf): {reason}") from None
    points = np.asarray(data.points, dtype=float)
    if points.ndim != 2 or points.shape[1] not in (2, 3):
        raise _fail(path, "the points are not 2-D or 3-D coordinates")
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
    if connectivity.min() < 0 or connectivity.max() >= len(points):
        raise _fail(path, "triangles refer to points the file does not have")
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


def _signed_areas(mesh) -> np.ndarray:
    p = mesh.p[:, mesh.t]
    return 0.5 * ((p[0, 1] - p[0, 0]) * (p[1, 2] - p[1, 0]) - (p[0, 2] - p[0, 0]) * (p[1, 1] - p[1, 0]))


def _edge_key(a, b):
    return (min(a, b), max(a, b))


def _quadratic(linear, xy, connectivity, renumber):
    from skfem import MeshTri2

    midpoint_of = {}
    for local_a, local_b, local_m in ((0, 1, 3), (1, 2, 4), (2, 0, 5)):
        for row in connectivity:
            midpoint_of[_edge_key(renumber[row[local_a]], renumber[row[local_b]])] = row[local_m]
    quadratic = MeshTri2.from_mesh(linear)
    doflocs = quadratic.doflocs.copy()
    for k, (a, b) in enumerate(linear.facets.T):
        doflocs[:, linear.nvertices + k] = xy[midpoint_of[_edge_key(a, b)]]
    return MeshTri2(doflocs, quadratic.t)


def _named_walls(linear, boundary, data, renumber, path) -> dict[str, np.ndarray]:
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
