"""Sections drawn in the case file: ellipses, triangles, polygons with rounded corners and
circular arcs (and holes), circular sectors, and rectangles with rounded corners.

A drawing is one outer boundary loop and any number of hole loops. Each loop is a ring of
pieces (straight segments, circular arcs, or one full ellipse); every piece belongs to
one named wall. :func:`parse` validates a ``[geometry]`` table into a :class:`Drawing`;
:func:`mesh` meshes it with the gmsh Python package (the optional extra
``pip install "gnflow[mesh]"``) into the ``(mesh, wall facets)`` pair of
:func:`gnflow.meshfile.read_section`; :func:`draw_png` draws the section, its named walls,
the edge numbers and the mesh.

Keys (lengths are numbers in m or strings with units; coordinates may be negative):

* ``shape = "ellipse"``: ``semi_axis_x``, ``semi_axis_y``; centred at the origin; one
  edge, number 0.
* ``shape = "triangle"``: ``side`` (equilateral, base from (0, 0) to (side, 0)) or
  ``vertices`` (three points); optional ``fillet_radius`` and ``walls`` as for a polygon.
* ``shape = "polygon"``: ``vertices = [["0 mm", "0 mm"], ["30 mm", "0 mm"], ...]`` (at
  least two; edge ``k`` runs from vertex ``k`` to vertex ``k + 1``, the last back to
  vertex 0); ``fillet_radius``: one length for every corner or a list with one length per
  vertex (0 keeps a corner sharp), each a circular arc tangent to both straight edges;
  ``arcs = [{edge = 2, radius = "5 mm", bulge = "outward"}]``: edge 2 is a circular arc of
  at most a half circle (``radius`` >= half the edge's length) bulging ``"outward"``
  (default: away from the polygon's inside; for a polygon whose vertices enclose no area,
  such as the two vertices of a circle drawn as two half circles, to the right of the
  direction from vertex ``k`` to ``k + 1``) or ``"inward"``; ``holes``: a list of tables
  with the same keys ``vertices``, ``fillet_radius``, ``arcs``, ``walls`` (an annulus is a
  circle with a circular hole).
* ``shape = "circular-sector"``: ``radius``, ``angle`` (degrees, 0 < angle < 360; 180 is
  the semicircle); apex at the origin, edge 0 along +x, edge 1 the arc, edge 2 back.
* ``shape = "rectangle"`` with ``corner_radius`` (<= half the shorter side): the rectangle
  from (0, 0) to (width, height) with rounded corners; walls ``bottom``, ``right``,
  ``top``, ``left`` as for the plain rectangle.
* ``walls = {lid = [2], base = [0, 1]}``: wall names (letters, digits, ``_``, ``-``) and
  the edge numbers of each; unnamed edges are the wall ``"wall"``. A fillet between
  edges of two walls is split at its middle between them.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from .errors import CaseError, check_non_negative, check_positive, shorten, shown_key
from .meshfile import DEFAULT_WALL
from .units import quantity

SHAPES = ("ellipse", "triangle", "polygon", "circular-sector")
#: the keys of each drawn shape besides ``shape`` (the rectangle's are its own plus
#: ``corner_radius``)
KEYS = {
    "ellipse": ("semi_axis_x", "semi_axis_y", "walls"),
    "triangle": ("side", "vertices", "fillet_radius", "walls"),
    "polygon": ("vertices", "fillet_radius", "arcs", "walls", "holes"),
    "circular-sector": ("radius", "angle", "walls"),
    "rectangle": ("width", "height", "corner_radius"),
}
HOLE_KEYS = ("vertices", "fillet_radius", "arcs", "walls")
ARC_KEYS = ("edge", "radius", "bulge")
BULGES = ("outward", "inward")
RECTANGLE_WALLS = ("bottom", "right", "top", "left")
MAX_VERTICES = 100
MAX_HOLES = 20
_WALL_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_-]{0,39}$")
#: chords per half circle in the polylines that check a drawing for crossings
_CHECK_CHORDS = 24
#: re-entrant corners get cells this many times smaller than the rest (the stress there
#: grows as r^(pi/angle - 1), so the mesh error concentrates there)
CORNER_REFINEMENT = 4.0
#: at least this many cells along a full circle, so that small fillets are resolved
CELLS_PER_CIRCLE = 24


# --------------------------------------------------------------------------- pieces

@dataclass(frozen=True)
class Segment:
    """A straight edge from ``start`` to ``end``."""

    start: tuple[float, float]
    end: tuple[float, float]
    wall: str
    label: str

    def curve(self, t) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        a, b = np.asarray(self.start), np.asarray(self.end)
        return a[:, None] + (b - a)[:, None] * t[None]

    def chords(self) -> int:
        return 1

    def area_term(self) -> float:
        """``1/2 int (x dy - y dx)`` along the piece (Green's theorem)."""
        (x0, y0), (x1, y1) = self.start, self.end
        return 0.5 * (x0 * y1 - x1 * y0)


@dataclass(frozen=True)
class Arc:
    """A circular arc from ``start`` to ``end`` about ``centre``; ``sweep`` is the signed
    angle (counter-clockwise positive, radians)."""

    start: tuple[float, float]
    end: tuple[float, float]
    centre: tuple[float, float]
    radius: float
    sweep: float
    wall: str
    label: str

    def curve(self, t) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        c = np.asarray(self.centre)
        phi = math.atan2(self.start[1] - c[1], self.start[0] - c[0]) + self.sweep * t
        return c[:, None] + self.radius * np.array([np.cos(phi), np.sin(phi)])

    def chords(self) -> int:
        return max(int(math.ceil(_CHECK_CHORDS * abs(self.sweep) / math.pi)), 2)

    def area_term(self) -> float:
        # x dy - y dx on C + r u(phi): r C x u' + r^2; integrated: C x (end - start) + r^2 sweep
        (cx, cy), (x0, y0), (x1, y1) = self.centre, self.start, self.end
        return 0.5 * (cx * (y1 - y0) - cy * (x1 - x0) + self.radius ** 2 * self.sweep)


@dataclass(frozen=True)
class Ellipse:
    """The full ellipse about ``centre``, counter-clockwise from the +x semi-axis."""

    centre: tuple[float, float]
    semi_axis_x: float
    semi_axis_y: float
    wall: str
    label: str

    @property
    def start(self) -> tuple[float, float]:
        return (self.centre[0] + self.semi_axis_x, self.centre[1])

    end = start

    def curve(self, t) -> np.ndarray:
        phi = 2 * math.pi * np.asarray(t, dtype=float)
        return np.array([self.centre[0] + self.semi_axis_x * np.cos(phi),
                         self.centre[1] + self.semi_axis_y * np.sin(phi)])

    def chords(self) -> int:
        return 4 * _CHECK_CHORDS

    def area_term(self) -> float:
        return math.pi * self.semi_axis_x * self.semi_axis_y


@dataclass(frozen=True)
class Loop:
    """A closed ring of pieces; ``where`` is the case-file key it was drawn from."""

    pieces: tuple
    where: str

    @property
    def signed_area(self) -> float:
        return float(sum(p.area_term() for p in self.pieces))

    def polyline(self, density: int = 1) -> tuple[np.ndarray, list[str]]:
        """Points (2, n) around the loop (closed: the first point is not repeated) and the
        label of the piece each chord belongs to."""
        points, labels = [], []
        for piece in self.pieces:
            n = piece.chords() * density
            points.append(piece.curve(np.arange(n) / n))
            labels += [piece.label] * n
        return np.hstack(points), labels


@dataclass(frozen=True)
class Drawing:
    """A drawn section: ``loops[0]`` the outer boundary, the others holes."""

    shape: str
    loops: tuple[Loop, ...]
    #: diameter of the largest circle inside the section (its smallest dimension)
    inscribed_diameter: float
    #: re-entrant corners (interior angle > 180 degrees), where cells are made finer
    reentrant_corners: tuple[tuple[float, float], ...] = ()

    @property
    def walls(self) -> tuple[str, ...]:
        return tuple(sorted({p.wall for loop in self.loops for p in loop.pieces}))

    @property
    def area(self) -> float:
        return abs(self.loops[0].signed_area) - sum(abs(h.signed_area) for h in self.loops[1:])


# --------------------------------------------------------------------------- parsing

def parse(shape: str, table: dict, where: str = "geometry") -> Drawing:
    """Validate the ``[geometry]`` table of a drawn shape (``shape`` in :data:`SHAPES`,
    or ``"rectangle"`` with ``corner_radius``) into a :class:`Drawing`; raise a
    :class:`CaseError` naming the key for anything wrong with it.

    >>> d = parse("polygon", {"vertices": [["0 mm", "0 mm"], ["20 mm", "0 mm"],
    ...     ["20 mm", "10 mm"], ["0 mm", "10 mm"]], "walls": {"lid": [2]}})
    >>> round(d.area * 1e6, 9), d.walls, round(d.inscribed_diameter * 1e3, 3)
    (200.0, ('lid', 'wall'), 10.0)
    """
    from .case import _check_keys  # case.py imports this module: import at call time

    if shape not in KEYS:
        raise CaseError(f"{where}.shape", shape, "one of " + ", ".join(f'"{s}"' for s in KEYS))
    _check_keys(table, ("shape", *KEYS[shape]), where)
    builders = {"ellipse": _ellipse, "triangle": _triangle, "polygon": _polygon,
                "circular-sector": _sector, "rectangle": _rounded_rectangle}
    loops = builders[shape](table, where)
    return _finished(shape, loops)


def check_wall_speeds(drawing: Drawing, wall_speed: dict, where: str = "drive.wall_speed"):
    """Raise a :class:`CaseError` for a wall speed given to a wall the drawing lacks."""
    from .case import _suggest

    for name in wall_speed:
        if name not in drawing.walls:
            raise CaseError(f"{where}.{name}", message=(
                f"{where}.{shown_key(name)}: the {drawing.shape} has no wall named "
                f"{shorten(name)}{_suggest(name, drawing.walls)}; its walls are: "
                f"{', '.join(drawing.walls)}"))


#: lengths and coordinates of a drawing, as for the built-in shapes (gnflow.case): areas
#: and moments of larger or smaller sections would leave the float range
LENGTH_RANGE = (1e-9, 1e5)


def _length(value, key: str) -> float:
    length = check_positive(key, quantity(value, "length", key))
    if not LENGTH_RANGE[0] <= length <= LENGTH_RANGE[1]:
        raise CaseError(key, value, "a length from 1 nm to 100 km")
    return length


def _point(value, key: str) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        raise CaseError(key, value, 'a point [x, y], e.g. ["0 mm", "12 mm"]')
    point = (quantity(value[0], "length", key), quantity(value[1], "length", key))
    if max(abs(point[0]), abs(point[1])) > LENGTH_RANGE[1]:
        raise CaseError(key, value, "coordinates within 100 km of the origin")
    return point


def _points(table: dict, where: str, low: int, high: int = MAX_VERTICES) -> list:
    key = f"{where}.vertices"
    if "vertices" not in table:
        raise CaseError(key, message=f'missing key {key}: a list of points, e.g. '
                        '[["0 mm", "0 mm"], ["30 mm", "0 mm"], ["0 mm", "20 mm"]]')
    value = table["vertices"]
    count = f"{low}" if low == high else f"{low} to {high}"
    if not isinstance(value, list) or not low <= len(value) <= high:
        raise CaseError(key, value, f"a list of {count} points [x, y]")
    return [_point(v, f"{key}[{k}]") for k, v in enumerate(value)]


def _fillets(table: dict, where: str, count: int, key: str = "fillet_radius") -> list[float]:
    full = f"{where}.{key}"
    value = table.get(key, 0.0)
    if isinstance(value, list):
        if len(value) != count:
            raise CaseError(full, value, f"one length, or a list of {count} lengths (one "
                            "per vertex, 0 for a sharp corner)")
        return [check_non_negative(f"{full}[{k}]", quantity(v, "length", f"{full}[{k}]"))
                for k, v in enumerate(value)]
    return [check_non_negative(full, quantity(value, "length", full))] * count


def _edge_index(value, key: str, count: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value < count:
        raise CaseError(key, value, f"an edge number from 0 to {count - 1}")
    return value


def _walls(table: dict, where: str, count: int, default: str = DEFAULT_WALL) -> list[str]:
    """The wall name of each of ``count`` edges."""
    key = f"{where}.walls"
    value = table.get("walls", {})
    if not isinstance(value, dict):
        raise CaseError(key, value, "a table of wall names and edge numbers, e.g. "
                        "{ lid = [2], base = [0, 1] }")
    names: list[str | None] = [None] * count
    for name, edges in value.items():
        entry = f"{key}.{shown_key(name)}"
        if not _WALL_NAME.match(name):
            raise CaseError(entry, message=f"{entry}: a wall name is a letter followed by at "
                            "most 39 letters, digits, '_' or '-'")
        edges = [edges] if isinstance(edges, int) and not isinstance(edges, bool) else edges
        if not isinstance(edges, list) or not edges:
            raise CaseError(entry, edges, "a list of edge numbers, e.g. [0, 1]")
        for k, edge in enumerate(edges):
            edge = _edge_index(edge, f"{entry}[{k}]", count)
            if names[edge] is not None:
                raise CaseError(entry, message=(
                    f"{entry}: edge {edge} is already in the wall {names[edge]}; "
                    "each edge belongs to one wall"))
            names[edge] = name
    return [n or default for n in names]


def _arcs(table: dict, where: str, count: int) -> dict[int, tuple[float, str]]:
    key = f"{where}.arcs"
    value = table.get("arcs", [])
    if not isinstance(value, list):
        raise CaseError(key, value, 'a list of tables, e.g. [{edge = 2, radius = "5 mm"}]')
    arcs = {}
    from .case import _check_keys
    for k, arc in enumerate(value):
        entry = f"{key}[{k}]"
        if not isinstance(arc, dict):
            raise CaseError(entry, arc, 'a table, e.g. {edge = 2, radius = "5 mm"}')
        _check_keys(arc, ARC_KEYS, entry)
        if "edge" not in arc or "radius" not in arc:
            raise CaseError(entry, message=f"{entry}: give edge (a number) and radius")
        edge = _edge_index(arc["edge"], f"{entry}.edge", count)
        if edge in arcs:
            raise CaseError(f"{entry}.edge", edge, "an edge that no other arc curves")
        bulge = arc.get("bulge", "outward")
        if bulge not in BULGES:
            raise CaseError(f"{entry}.bulge", bulge, '"outward" or "inward"')
        arcs[edge] = (_length(arc["radius"], f"{entry}.radius"), bulge, entry)
    return arcs


def _polygon_loop(vertices, fillets, arcs, walls, where: str, fillet_key: str) -> Loop:
    """The ring of pieces of a polygon with fillets at its corners and arcs on its edges."""
    count = len(vertices)
    v = np.array(vertices, dtype=float)
    for k in range(count):
        if np.allclose(v[k], v[(k + 1) % count], rtol=0, atol=1e-12 * np.ptp(v, axis=0).max()):
            raise CaseError(f"{where}.vertices[{(k + 1) % count}]", vertices[(k + 1) % count],
                            f"a point other than vertex {k} (edge {k} has zero length)")
    straight = 0.5 * sum(v[k, 0] * v[(k + 1) % count, 1] - v[(k + 1) % count, 0] * v[k, 1]
                         for k in range(count))
    # the inside is on the left of a counter-clockwise ring; with no straight area, the
    # vertices are taken as counter-clockwise
    orientation = -1.0 if straight < 0 else 1.0
    trims = [0.0] * count            # tangent length of the fillet at each vertex
    fillet_arcs: dict[int, tuple] = {}
    for k in range(count):
        radius = fillets[k]
        if radius == 0:
            continue
        prev, nxt = (k - 1) % count, k
        key = f"{where}.{fillet_key}" + (f"[{k}]" if len(set(fillets)) > 1 else "")
        for edge in (prev, nxt):
            if edge in arcs:
                raise CaseError(key, message=(
                    f"{key}: the corner at vertex {k} touches the arc of edge {edge}; "
                    "fillets join two straight edges (give 0 there)"))
        back = v[prev] - v[k]
        ahead = v[(k + 1) % count] - v[k]
        back, ahead = back / np.linalg.norm(back), ahead / np.linalg.norm(ahead)
        theta = math.acos(float(np.clip(back @ ahead, -1.0, 1.0)))
        if theta > math.pi - 1e-9 or theta < 1e-9:
            raise CaseError(key, message=(
                f"{key}: vertex {k} is no corner (its edges are in line); give 0 there"))
        trims[k] = radius / math.tan(theta / 2)
        bisector = (back + ahead) / np.linalg.norm(back + ahead)
        centre = v[k] + bisector * radius / math.sin(theta / 2)
        t_in, t_out = v[k] + back * trims[k], v[k] + ahead * trims[k]
        fillet_arcs[k] = (t_in, t_out, centre, radius)
    for k in range(count):
        length = float(np.linalg.norm(v[(k + 1) % count] - v[k]))
        nxt = (k + 1) % count
        if trims[k] + trims[nxt] > length * (1 + 1e-12):
            key = f"{where}.{fillet_key}"
            raise CaseError(key, message=(
                f"{key}: the rounded corners at vertices {k} and {nxt} need "
                f"{(trims[k] + trims[nxt]) * 1e3:.4g} mm of edge {k}, which is "
                f"{length * 1e3:.4g} mm long; give smaller fillet radii"))
    pieces = []
    for k in range(count):
        nxt = (k + 1) % count
        start = fillet_arcs[k][1] if k in fillet_arcs else v[k]
        end = fillet_arcs[nxt][0] if nxt in fillet_arcs else v[nxt]
        length = float(np.linalg.norm(v[nxt] - v[k]))
        if k in arcs:
            pieces.append(_edge_arc(start, end, *arcs[k], orientation, walls[k], f"edge {k}"))
        elif np.linalg.norm(end - start) > 1e-12 * length:
            pieces.append(Segment(tuple(start), tuple(end), walls[k], f"edge {k}"))
        if nxt in fillet_arcs:
            pieces += _fillet_pieces(*fillet_arcs[nxt], walls[k], walls[nxt], nxt)
    return Loop(tuple(pieces), where)


def _edge_arc(start, end, radius, bulge, key, orientation, wall, label) -> Arc:
    chord = end - start
    length = float(np.linalg.norm(chord))
    if radius < 0.5 * length * (1 - 1e-12):
        raise CaseError(f"{key}.radius", message=(
            f"{key}.radius = {radius * 1e3:.4g} mm: an arc on {label} needs a radius of at "
            f"least half its length ({0.5 * length * 1e3:.4g} mm)"))
    right = np.array([chord[1], -chord[0]]) / length   # right of the direction of travel
    outward = orientation * right
    direction = outward if bulge == "outward" else -outward
    middle = 0.5 * (start + end)
    centre = middle - math.sqrt(max(radius ** 2 - 0.25 * length ** 2, 0.0)) * direction
    half = math.asin(min(0.5 * length / radius, 1.0))
    # an arc bulging to the right of the direction of travel turns about its centre
    # counter-clockwise (positive sweep)
    sweep = 2 * half if direction @ right > 0 else -2 * half
    return Arc(tuple(start), tuple(end), tuple(centre), radius, sweep, wall, label)


def _fillet_pieces(t_in, t_out, centre, radius, wall_in, wall_out, vertex) -> list[Arc]:
    a = math.atan2(t_in[1] - centre[1], t_in[0] - centre[0])
    b = math.atan2(t_out[1] - centre[1], t_out[0] - centre[0])
    sweep = (b - a + math.pi) % (2 * math.pi) - math.pi    # the short way: < 180 degrees
    label = f"the fillet at vertex {vertex}"
    whole = Arc(tuple(t_in), tuple(t_out), tuple(centre), radius, sweep, wall_in, label)
    if wall_in == wall_out:
        return [whole]
    middle = tuple(whole.curve([0.5])[:, 0])
    return [Arc(tuple(t_in), middle, tuple(centre), radius, sweep / 2, wall_in, label),
            Arc(middle, tuple(t_out), tuple(centre), radius, sweep / 2, wall_out, label)]


def _polygon_table_loop(table: dict, where: str, low: int, high: int = MAX_VERTICES) -> Loop:
    vertices = _points(table, where, low, high)
    count = len(vertices)
    return _polygon_loop(vertices, _fillets(table, where, count), _arcs(table, where, count),
                         _walls(table, where, count), where, "fillet_radius")


def _polygon(table: dict, where: str) -> tuple[Loop, ...]:
    loops = [_polygon_table_loop(table, where, 2)]
    holes = table.get("holes", [])
    if not isinstance(holes, list) or len(holes) > MAX_HOLES:
        raise CaseError(f"{where}.holes", holes, f"a list of at most {MAX_HOLES} tables "
                        "with vertices (and fillet_radius, arcs, walls)")
    from .case import _check_keys
    for k, hole in enumerate(holes):
        entry = f"{where}.holes[{k}]"
        if not isinstance(hole, dict):
            raise CaseError(entry, hole, "a table with vertices (and fillet_radius, arcs, walls)")
        _check_keys(hole, HOLE_KEYS, entry)
        loops.append(_polygon_table_loop(hole, entry, 2))
    return tuple(loops)


def _triangle(table: dict, where: str) -> tuple[Loop, ...]:
    if ("side" in table) == ("vertices" in table):
        raise CaseError(f"{where}.side", message=(
            f"{where}: give side (an equilateral triangle) or vertices (three points), "
            f"not {'both' if 'side' in table else 'neither'}"))
    if "side" in table:
        a = _length(table["side"], f"{where}.side")
        vertices = [(0.0, 0.0), (a, 0.0), (0.5 * a, 0.5 * math.sqrt(3) * a)]
    else:
        vertices = _points(table, where, 3, 3)
    return (_polygon_loop(vertices, _fillets(table, where, 3), {}, _walls(table, where, 3),
                          where, "fillet_radius"),)


def _ellipse(table: dict, where: str) -> tuple[Loop, ...]:
    axes = []
    for key in ("semi_axis_x", "semi_axis_y"):
        if key not in table:
            raise CaseError(f"{where}.{key}", message=f"missing key {where}.{key} (length, in m)")
        axes.append(_length(table[key], f"{where}.{key}"))
    wall = _walls(table, where, 1)[0]
    return (Loop((Ellipse((0.0, 0.0), *axes, wall, "edge 0"),), where),)


def _sector(table: dict, where: str) -> tuple[Loop, ...]:
    for key in ("radius", "angle"):
        if key not in table:
            raise CaseError(f"{where}.{key}", message=(
                f"missing key {where}.{key}" + (" (length, in m)" if key == "radius" else
                                                " (degrees, e.g. 180 for a semicircle)")))
    radius = _length(table["radius"], f"{where}.radius")
    angle = table["angle"]
    if isinstance(angle, bool) or not isinstance(angle, (int, float)) or not 0 < angle < 360:
        raise CaseError(f"{where}.angle", angle, "a number of degrees, 0 < angle < 360")
    sweep = math.radians(angle)
    walls = _walls(table, where, 3)
    rim = (radius * math.cos(sweep), radius * math.sin(sweep))
    return (Loop((Segment((0.0, 0.0), (radius, 0.0), walls[0], "edge 0"),
                  Arc((radius, 0.0), rim, (0.0, 0.0), radius, sweep, walls[1], "edge 1"),
                  Segment(rim, (0.0, 0.0), walls[2], "edge 2")), where),)


def _rounded_rectangle(table: dict, where: str) -> tuple[Loop, ...]:
    sizes = []
    for key in ("width", "height"):
        if key not in table:
            raise CaseError(f"{where}.{key}", message=f"missing key {where}.{key} (length, in m)")
        sizes.append(_length(table[key], f"{where}.{key}"))
    width, height = sizes
    vertices = [(0.0, 0.0), (width, 0.0), (width, height), (0.0, height)]
    return (_polygon_loop(vertices, _fillets(table, where, 4, "corner_radius"), {},
                          list(RECTANGLE_WALLS), where, "corner_radius"),)


# --------------------------------------------------------------------------- checks

def _finished(shape: str, loops: tuple[Loop, ...]) -> Drawing:
    """The drawing, once its loops are known to enclose area, not to cross themselves or
    each other, and its holes to lie inside the outer loop and outside each other."""
    for loop in loops:
        points, _ = loop.polyline()
        size = float(np.ptp(points, axis=1).max())
        if abs(loop.signed_area) <= 1e-9 * size ** 2:
            raise CaseError(f"{loop.where}.vertices", message=(
                f"{loop.where}: the drawing encloses no area (its edges lie on one line or "
                "retrace each other)"))
    _check_crossings(loops)
    outlines = [Outline(loop.polyline(4)[0].T) for loop in loops]
    for k, loop in enumerate(loops[1:], start=1):
        probe = loop.polyline()[0][:, :1].T
        if not outlines[0].contains_point(probe[0]):
            raise CaseError(loop.where, message=f"{loop.where}: the hole lies outside the "
                            "outer boundary; holes must be inside it")
        for j in range(1, len(loops)):
            if j != k and outlines[j].contains_point(probe[0]):
                raise CaseError(loop.where, message=(
                    f"{loop.where}: the hole lies inside {loops[j].where}; holes must not "
                    "overlap"))
    return Drawing(shape, loops, _inscribed_diameter(loops, outlines),
                   tuple(_reentrant_corners(loops)))


class Outline:
    """A closed polygon (vertices as rows) and the even-odd test of which points it holds."""

    def __init__(self, vertices: np.ndarray):
        self.a = np.asarray(vertices, dtype=float)
        self.b = np.roll(self.a, -1, axis=0)

    def contains_points(self, points: np.ndarray) -> np.ndarray:
        """Whether each point (rows) lies inside: a ray towards +x crosses the polygon's
        edges an odd number of times. Edges are taken in chunks to keep arrays small."""
        points = np.asarray(points, dtype=float).reshape(-1, 2)
        x, y = points[:, :1], points[:, 1:]
        inside = np.zeros(len(points), dtype=bool)
        for start in range(0, len(self.a), 128):
            a, b = self.a[start:start + 128], self.b[start:start + 128]
            straddles = (a[:, 1] > y) != (b[:, 1] > y)
            dy = np.where(b[:, 1] == a[:, 1], 1.0, b[:, 1] - a[:, 1])
            crossing = a[:, 0] + (y - a[:, 1]) * (b[:, 0] - a[:, 0]) / dy
            inside ^= (np.count_nonzero(straddles & (x < crossing), axis=1) % 2).astype(bool)
        return inside

    def contains_point(self, point) -> bool:
        return bool(self.contains_points(np.asarray(point))[0])


def _point_segment_distance(p, a, b) -> np.ndarray:
    ab = b - a
    t = np.clip(np.sum((p - a) * ab, axis=-1) / np.maximum(np.sum(ab * ab, axis=-1), 1e-300),
                0.0, 1.0)
    return np.linalg.norm(p - (a + t[..., None] * ab), axis=-1)


def _check_crossings(loops: tuple[Loop, ...]) -> None:
    """Refuse any two chords of the loops' polylines that touch, except neighbours in one
    loop at their shared point; neighbours that fold back on each other are refused too."""
    starts, ends, labels, owner, position, ring = [], [], [], [], [], []
    for k, loop in enumerate(loops):
        points, names = loop.polyline()
        n = points.shape[1]
        starts.append(points.T)
        ends.append(np.roll(points, -1, axis=1).T)
        labels += names
        owner += [k] * n
        position += list(range(n))
        ring += [n] * n
    a, b = np.vstack(starts), np.vstack(ends)
    owner, position, ring = np.array(owner), np.array(position), np.array(ring)
    tolerance = 1e-9 * float(np.ptp(np.vstack([a, b]), axis=0).max())

    def cross(u, v, w):
        return (v[..., 0] - u[..., 0]) * (w[..., 1] - u[..., 1]) - \
            (v[..., 1] - u[..., 1]) * (w[..., 0] - u[..., 0])

    pairs_i, pairs_j = np.triu_indices(len(a), 1)   # every pair once, in order i, then j
    for start in range(0, len(pairs_i), 200_000):     # chunks keep the arrays small
        i, j = pairs_i[start:start + 200_000], pairs_j[start:start + 200_000]
        same = owner[j] == owner[i]
        gap = (position[j] - position[i]) % ring[i]
        neighbour = same & ((gap == 1) | (gap == ring[i] - 1))
        ai, bi, aj, bj = a[i], b[i], a[j], b[j]
        proper = (cross(ai, bi, aj) * cross(ai, bi, bj) < 0) & \
                 (cross(aj, bj, ai) * cross(aj, bj, bi) < 0)
        touching = np.minimum.reduce([
            _point_segment_distance(aj, ai, bi), _point_segment_distance(bj, ai, bi),
            _point_segment_distance(ai, aj, bj), _point_segment_distance(bi, aj, bj)])
        # a neighbour shares one end; it only folds back if its far end lies on this chord
        # (or this chord's far end on it)
        after = (gap == 1)[:, None]
        far = np.minimum(
            _point_segment_distance(np.where(after, bj, aj), ai, bi),
            _point_segment_distance(np.where(after, ai, bi), aj, bj))
        bad = np.where(neighbour, far < tolerance, proper | (touching < tolerance))
        if bad.any():
            first = int(np.argmax(bad))
            _refuse_crossing(loops, labels, owner, int(i[first]), int(j[first]))


def _refuse_crossing(loops, labels, owner, i: int, other: int) -> None:
    loop = loops[owner[i]]
    if labels[i] == labels[other] and owner[i] == owner[other]:
        what = f"{labels[i]} crosses itself"
    elif owner[i] == owner[other]:
        what = f"{labels[i]} and {labels[other]} cross or touch"
    else:
        what = (f"{labels[i]} of {loop.where} and {labels[other]} of "
                f"{loops[owner[other]].where} cross or touch")
    raise CaseError(f"{loop.where}.vertices", message=(
        f"{loop.where}: the drawing crosses itself ({what}); a section's boundary "
        "must be simple closed curves"))


def _inscribed_diameter(loops: tuple[Loop, ...], outlines) -> float:
    """Twice the largest distance from a point inside the section to its boundary: the
    best of a 64 x 64 grid of probes, searched again five times on a 25 x 25 grid over
    six spacings of the grid before about the best probe (final spacing about 1e-6 of the
    section's extent). Distances are to the chords of the loops' polylines (at most 12 per
    quarter circle), which lie within 1e-3 of the radius of the curves: far closer than
    sizing cells needs."""
    chords = []
    for loop in loops:
        points, _ = loop.polyline(2)
        chords.append((points.T, np.roll(points, -1, axis=1).T))
    a = np.vstack([c[0] for c in chords])
    b = np.vstack([c[1] for c in chords])
    low, high = a.min(axis=0), a.max(axis=0)
    best, span, centre = 0.0, high - low, 0.5 * (low + high)
    for count in (64, 25, 25, 25, 25, 25):
        axes = [np.linspace(centre[d] - span[d] / 2, centre[d] + span[d] / 2, count)
                for d in (0, 1)]
        grid = np.array(np.meshgrid(*axes)).reshape(2, -1).T
        inside = outlines[0].contains_points(grid)
        for hole in outlines[1:]:
            inside &= ~hole.contains_points(grid)
        probes = grid[inside]
        if len(probes):
            distance = np.full(len(probes), np.inf)
            for start in range(0, len(a), 256):     # chunks keep the arrays small
                stop = start + 256
                distance = np.minimum(distance, _point_segment_distance(
                    probes[:, None], a[None, start:stop], b[None, start:stop]).min(axis=1))
            k = int(np.argmax(distance))
            if distance[k] > best:
                best, centre = float(distance[k]), probes[k]
        span = 6 * span / (count - 1)
    return 2 * best


def _reentrant_corners(loops: tuple[Loop, ...]):
    """The joints between pieces where the fluid's side turns by more than 180 + 10 degrees
    (the margin of :data:`gnflow.geometry.REENTRANT_MARGIN_DEG`)."""
    for k, loop in enumerate(loops):
        # the fluid is inside the outer loop and outside each hole
        fluid_left = math.copysign(1.0, loop.signed_area) * (1 if k == 0 else -1)
        pieces = loop.pieces
        for i, piece in enumerate(pieces):
            following = pieces[(i + 1) % len(pieces)]
            if isinstance(piece, Ellipse):
                continue
            arriving = _tangent(piece, 1.0)
            leaving = _tangent(following, 0.0)
            turn = math.atan2(arriving[0] * leaving[1] - arriving[1] * leaving[0],
                              arriving @ leaving)
            interior = 180.0 - math.degrees(turn) * fluid_left
            if interior > 190.0:
                yield tuple(float(c) for c in piece.end)


def _tangent(piece, t: float) -> np.ndarray:
    h = 1e-6
    ends = piece.curve([max(t - h, 0.0), min(t + h, 1.0)])
    return ends[:, 1] - ends[:, 0]


# --------------------------------------------------------------------------- meshing

def _gmsh():
    try:
        import gmsh
    except ImportError:
        raise CaseError("geometry.shape", message=(
            "geometry.shape: meshing a drawn section needs the gmsh package, which is not "
            'installed; install it with: pip install "gnflow[mesh]"')) from None
    return gmsh


def mesh(drawing: Drawing, cells: int, degree: int, refine_walls: float = 1.0):
    """Mesh a drawing with gmsh: ``(mesh, {wall name: boundary facet indices})``, the
    contract of :func:`gnflow.meshfile.read_section`.

    Cells are ``drawing.inscribed_diameter / cells`` across, at most
    ``2 pi r / CELLS_PER_CIRCLE`` along an arc of radius ``r``, ``refine_walls`` times
    smaller at the walls (graded back over a quarter of the inscribed diameter), and
    :data:`CORNER_REFINEMENT` times smaller at re-entrant corners. With ``degree = 2`` the
    mesh is a 6-node (isoparametric) one whose edge nodes on the walls lie on the exact
    arcs and ellipses, so P2 keeps its order on curved walls; otherwise 3-node.
    """
    gmsh = _gmsh()
    size = drawing.inscribed_diameter / cells
    gmsh.initialize(interruptible=False)    # no signal handler of gmsh's in our process
    try:
        for option, value in (("General.Terminal", 0), ("General.NumThreads", 1),
                              ("Mesh.Algorithm", 6), ("Mesh.MeshSizeMax", size),
                              ("Mesh.MeshSizeFromCurvature", CELLS_PER_CIRCLE),
                              ("Mesh.MeshSizeExtendFromBoundary", 0),
                              ("Mesh.MeshSizeFromPoints", 0),
                              ("Mesh.HighOrderOptimize", 0)):
            gmsh.option.setNumber(option, value)
        gmsh.model.add("section")
        wall_curves, corner_points = _model(gmsh, drawing)
        _size_fields(gmsh, drawing, size, refine_walls, corner_points)
        gmsh.model.mesh.generate(2)
        if degree == 2:
            gmsh.model.mesh.setOrder(2)
        return _extracted(gmsh, wall_curves, degree)
    finally:
        gmsh.finalize()


def _model(gmsh, drawing: Drawing):
    """The OpenCASCADE model of the drawing: one plane surface, its curves grouped by wall
    (returned), and the points at re-entrant corners."""
    occ = gmsh.model.occ
    wall_curves: dict[str, list[int]] = {}
    curve_loops, corner_points = [], []
    corners = set(drawing.reentrant_corners)
    for loop in drawing.loops:
        pieces = loop.pieces
        if isinstance(pieces[0], Ellipse):
            e = pieces[0]
            # OpenCASCADE wants the first radius the larger: turn the axes if needed
            if e.semi_axis_x >= e.semi_axis_y:
                tag = occ.addEllipse(*e.centre, 0.0, e.semi_axis_x, e.semi_axis_y)
            else:
                tag = occ.addEllipse(*e.centre, 0.0, e.semi_axis_y, e.semi_axis_x,
                                     zAxis=[0, 0, 1], xAxis=[0, 1, 0])
            wall_curves.setdefault(e.wall, []).append(tag)
            curve_loops.append(occ.addCurveLoop([tag]))
            continue
        points = [occ.addPoint(*p.start, 0.0) for p in pieces]
        for p, tag in zip(pieces, points):
            if p.start in corners:
                corner_points.append(tag)
        curves = []
        for k, piece in enumerate(pieces):
            start, end = points[k], points[(k + 1) % len(pieces)]
            if isinstance(piece, Arc):
                # through the arc's middle: unambiguous for a half circle too
                middle = occ.addPoint(*piece.curve([0.5])[:, 0], 0.0)
                tag = occ.addCircleArc(start, middle, end, center=False)
            else:
                tag = occ.addLine(start, end)
            curves.append(tag)
            wall_curves.setdefault(piece.wall, []).append(tag)
        curve_loops.append(occ.addCurveLoop(curves))
    surface = occ.addPlaneSurface(curve_loops)
    occ.synchronize()
    for name, curves in wall_curves.items():
        gmsh.model.addPhysicalGroup(1, curves, name=name)
    gmsh.model.addPhysicalGroup(2, [surface], name="section")
    return wall_curves, corner_points


def _size_fields(gmsh, drawing: Drawing, size: float, refine_walls: float, corner_points):
    field = gmsh.model.mesh.field
    reach = 0.25 * drawing.inscribed_diameter
    thresholds = []
    for entity, count, finest in (("CurvesList", None, size / refine_walls),
                                  ("PointsList", corner_points, size / CORNER_REFINEMENT)):
        tags = ([t for _, t in gmsh.model.getEntities(1)] if count is None else count)
        if finest >= size or not tags:
            continue
        distance = field.add("Distance")
        field.setNumbers(distance, entity, tags)
        field.setNumber(distance, "Sampling", 200)
        threshold = field.add("Threshold")
        field.setNumber(threshold, "InField", distance)
        for name, value in (("SizeMin", finest), ("SizeMax", size), ("DistMin", 0.0),
                            ("DistMax", reach)):
            field.setNumber(threshold, name, value)
        thresholds.append(threshold)
    if thresholds:
        smallest = field.add("Min")
        field.setNumbers(smallest, "FieldsList", thresholds)
        field.setAsBackgroundMesh(smallest)


def _extracted(gmsh, wall_curves: dict[str, list[int]], degree: int):
    from skfem import MeshTri

    from .meshfile import _quadratic

    tags, coordinates, _ = gmsh.model.mesh.getNodes()
    xy = coordinates.reshape(-1, 3)[:, :2]
    index = np.full(int(tags.max()) + 1, -1, dtype=np.int64)
    index[tags.astype(np.int64)] = np.arange(len(tags))
    triangle_type, line_type, per_triangle, per_line = (9, 8, 6, 3) if degree == 2 else (2, 1, 3, 2)
    _, nodes = gmsh.model.mesh.getElementsByType(triangle_type)
    connectivity = index[nodes.astype(np.int64)].reshape(-1, per_triangle)
    corners = np.unique(connectivity[:, :3])
    renumber = -np.ones(len(xy), dtype=np.int64)
    renumber[corners] = np.arange(len(corners))
    linear = MeshTri(xy[corners].T.copy(), renumber[connectivity[:, :3]].T.copy())
    mesh = _quadratic(linear, xy, connectivity, renumber) if degree == 2 else linear
    n = linear.nvertices
    ordered = np.sort(linear.facets, axis=0)
    keys = ordered[0] * n + ordered[1]
    order = np.argsort(keys)
    wall_facets = {}
    for name, curves in wall_curves.items():
        ends = []
        for curve in curves:
            _, line_nodes = gmsh.model.mesh.getElementsByType(line_type, curve)
            ends.append(renumber[index[line_nodes.astype(np.int64)].reshape(-1, per_line)[:, :2]])
        ends = np.sort(np.vstack(ends), axis=1)
        wanted = ends[:, 0] * n + ends[:, 1]
        wall_facets[name] = np.sort(order[np.searchsorted(keys[order], wanted)])
    return mesh, wall_facets


# --------------------------------------------------------------------------- picture

def draw_png(drawing: Drawing, mesh, wall_facets: dict, path) -> None:
    """Draw the section to a PNG: the mesh in grey, each named wall in its own colour
    (listed in the legend) and the number of every drawn edge beside it, so that walls
    can be named by edge number. Lengths are shown in mm."""
    import matplotlib
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection
    from skfem import MeshTri2

    scale = 1e3
    vertices = mesh.doflocs[:, :mesh.nvertices] * scale
    figure, axes = plt.subplots(figsize=(7.0, 6.0))
    axes.triplot(vertices[0], vertices[1], mesh.t[:3].T, color="0.75", linewidth=0.4)
    colours = matplotlib.colormaps["tab10"]
    t = np.linspace(0.0, 1.0, 9)
    for k, name in enumerate(sorted(wall_facets)):
        facets = np.asarray(wall_facets[name])
        a, b = vertices[:, mesh.facets[0, facets]], vertices[:, mesh.facets[1, facets]]
        if isinstance(mesh, MeshTri2):
            middle = mesh.doflocs[:, mesh.nvertices + facets] * scale
        else:
            middle = 0.5 * (a + b)
        # each wall edge as the quadratic through its ends and middle node
        shape = np.array([(1 - t) * (1 - 2 * t), 4 * t * (1 - t), t * (2 * t - 1)])
        curves = np.einsum("sq,dse->eqd", shape, np.stack([a, middle, b], axis=1))
        axes.add_collection(LineCollection(curves, colors=[colours(k % 10)], linewidths=2.5,
                                           label=name))
    for number, loop in enumerate(drawing.loops):
        for piece in loop.pieces:
            if piece.label.startswith("the fillet"):
                continue
            point = piece.curve([0.5])[:, 0] * scale
            text = piece.label.removeprefix("edge ")
            axes.annotate(text if number == 0 else f"h{number - 1}:{text}", point,
                          fontsize=8, ha="center", va="center",
                          bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "0.4",
                                "lw": 0.5}, xytext=(0.0, 0.0), textcoords="offset points")
    axes.set_aspect("equal")
    axes.margins(0.04)
    axes.set_xlabel("x (mm)")
    axes.set_ylabel("y (mm)")
    axes.set_title(f"{drawing.shape}: {mesh.t.shape[1]} triangles; largest inscribed circle "
                   f"{drawing.inscribed_diameter * scale:.4g} mm across", fontsize=10)
    axes.legend(title="walls", loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8,
                title_fontsize=9)
    axes.text(1.01, 0.0, "boxes: edge numbers\n(h0:2 = hole 0, edge 2)", fontsize=7,
              transform=axes.transAxes, va="bottom")
    figure.savefig(path, dpi=130, bbox_inches="tight")
    plt.close(figure)
