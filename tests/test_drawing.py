"""Sections drawn in the case file (gnflow.drawing): closed-form flow rates, curved P2
edges, pipe and annulus drawn with arcs against the 1-D references, and the errors of bad
drawings."""

import math
import sys

import numpy as np
import pytest

from gnflow import analytic, drawing
from gnflow.case import Case
from gnflow.convergence import observed_orders
from gnflow.errors import CaseError

try:
    import gmsh  # noqa: F401
    HAVE_GMSH = True
except ImportError:
    HAVE_GMSH = False

needs_gmsh = pytest.mark.skipif(not HAVE_GMSH, reason='gmsh is not installed '
                                '(pip install "gnflow[mesh]")')

MU, G = 0.2, -100.0
NEWTONIAN = {"model": "newtonian", "viscosity": MU}


def _solve(table, cells, degree=2, fluid=NEWTONIAN, gradient=G, refine=1.0):
    """Solve on a drawn section through geometry._section_domain, with a stand-in case
    (a rectangle) that supplies the fluid, the drive and the solver settings."""
    from gnflow.geometry import _section_domain
    from gnflow import solve

    case = Case.from_dict({"fluid": fluid, "geometry": {"shape": "rectangle", "width": 1,
                                                        "height": 1},
                           "drive": {"pressure_gradient": gradient},
                           "mesh": {"cells": cells, "degree": degree}})
    shape = table["shape"]
    section = drawing.parse(shape, table)
    domain = _section_domain(case, *drawing.mesh(section, cells, degree, refine))
    solution = solve(case, domain=domain)
    assert solution.converged
    return solution


def _sector_flow_rate(radius, angle, terms=20000):
    """Newtonian flow rate of a circular-sector duct (apex angle ``angle`` in radians).

    Derived here by separation of variables: with ``mu lap w = G``, ``w = 0`` on the walls,
    expand ``1 = sum_{n odd} 4/(n pi) sin(l_n theta)``, ``l_n = n pi / angle``; the bounded
    radial parts are ``a_n = c_n (r^2 - R^(2 - l_n) r^l_n) / (4 - l_n^2)``, and integrating,
    ``Q = (-G / mu) (2 R^4 / pi) sum_{n odd} 1 / (n l_n (l_n + 2)^2)`` (finite also at
    ``l_n = 2``). The same series form is in Shah & London (1978), Laminar Flow Forced
    Convection in Ducts, circular-sector ducts (recalled from memory)."""
    n = np.arange(1, 2 * terms, 2, dtype=float)
    lam = n * np.pi / angle
    return float((-G / MU) * (2 * radius ** 4 / np.pi) * np.sum(1 / (n * lam * (lam + 2) ** 2)))


def _circle(radius, walls=None):
    """A circle drawn as a polygon: two vertices, both edges half circles."""
    table = {"vertices": [[radius, 0.0], [-radius, 0.0]],
             "arcs": [{"edge": 0, "radius": radius}, {"edge": 1, "radius": radius}]}
    if walls:
        table["walls"] = {walls: [0, 1]}
    return table


# --------------------------------------------------------------------------- series


def test_sector_series_reduces_to_the_semicircle_closed_form():
    """Summing the series for angle = pi gives Q = (pi/8 - 1/pi) (-G) R^4 / mu, and with it
    the semicircular duct's f Re = 15.767 (Shah & London 1978; recalled from memory)."""
    R = 0.02
    closed = (math.pi / 8 - 1 / math.pi) * (-G) * R ** 4 / MU
    assert _sector_flow_rate(R, math.pi) == pytest.approx(closed, rel=1e-12)
    area, perimeter = math.pi * R ** 2 / 2, (math.pi + 2) * R
    diameter = 4 * area / perimeter
    mean = closed / area
    assert (-G) * diameter ** 2 / (2 * MU * mean) == pytest.approx(15.767, abs=1e-3)


# --------------------------------------------------------------------------- flow rates


@needs_gmsh
def test_ellipse_against_the_closed_form_and_p2_order_on_curved_edges():
    """Q = pi a^3 b^3 (-G) / (4 mu (a^2 + b^2)) (White, Viscous Fluid Flow, elliptical
    duct; recalled from memory). The exact velocity is quadratic, so P2's error comes from
    the boundary alone: with edge nodes on the exact ellipse, L2 falls as h^3 (chords
    would give h^2) and the flow rate at about h^4."""
    from skfem import Functional

    a, b = 0.02, 0.01
    exact = math.pi * a ** 3 * b ** 3 * (-G) / (4 * MU * (a ** 2 + b ** 2))
    peak = (-G) * a ** 2 * b ** 2 / (2 * MU * (a ** 2 + b ** 2))

    @Functional
    def squared_error(w):
        x, y = w.x
        return (w["u"] - peak * (1 - x ** 2 / a ** 2 - y ** 2 / b ** 2)) ** 2

    flow_errors, l2_errors, sizes = [], [], []
    for cells in (4, 8, 16):
        solution = _solve({"shape": "ellipse", "semi_axis_x": a, "semi_axis_y": b}, cells)
        flow_errors.append(abs(solution.summary()["flow_rate"] / exact - 1))
        basis = solution.domain.basis
        l2_errors.append(math.sqrt(squared_error.assemble(basis, u=basis.interpolate(
            solution.u))) / peak)
        sizes.append(1 / cells)
    assert flow_errors[-1] < 2e-7                       # measured 8.6e-8
    assert observed_orders(sizes, flow_errors)[-1] > 3.5
    assert 2.6 < observed_orders(sizes, l2_errors)[-1] < 3.6


@needs_gmsh
def test_curved_edge_nodes_lie_on_the_exact_curve():
    from skfem import MeshTri2

    section = drawing.parse("ellipse", {"semi_axis_x": "20 mm", "semi_axis_y": "10 mm"})
    mesh, walls = drawing.mesh(section, 4, 2)
    middle = mesh.doflocs[:, mesh.nvertices + walls["wall"]]
    assert np.allclose((middle[0] / 0.02) ** 2 + (middle[1] / 0.01) ** 2, 1.0, atol=1e-12)
    linear, _ = drawing.mesh(section, 4, 1)
    assert not isinstance(linear, MeshTri2) and linear.t.shape[0] == 3


@needs_gmsh
def test_equilateral_triangle_against_the_closed_form():
    """Q = sqrt(3) a^4 (-G) / (320 mu), side a (White, Viscous Fluid Flow, equilateral
    triangular duct; recalled from memory)."""
    side = 0.03
    exact = math.sqrt(3) * side ** 4 * (-G) / (320 * MU)
    q = _solve({"shape": "triangle", "side": "30 mm"}, 8).summary()["flow_rate"]
    assert q == pytest.approx(exact, rel=6e-5)           # measured 2.6e-5


@pytest.mark.parametrize("angle, tolerance", [
    (180, 5e-5),     # measured 2.1e-5 at 8 cells
    (60, 1.2e-4),    # measured 5.7e-5
    (270, 1e-3),     # re-entrant apex (w ~ r^(2/3)): measured 5.0e-4
])
@needs_gmsh
def test_circular_sector_against_its_series(angle, tolerance):
    R = 0.02
    solution = _solve({"shape": "circular-sector", "radius": "20 mm", "angle": angle}, 8)
    exact = _sector_flow_rate(R, math.radians(angle))
    assert solution.summary()["flow_rate"] == pytest.approx(exact, rel=tolerance)
    singular = solution.domain.extra["singular_points"]
    assert [p["kind"] for p in singular] == (["re-entrant corner"] if angle > 180 else [])


@needs_gmsh
def test_rounded_rectangle_tends_to_the_rectangle_series():
    """As the corner radius r goes to 0 the flow rate tends to the Fourier series of the
    sharp rectangle (White, Viscous Fluid Flow; analytic.rectangle_newtonian_flow_rate);
    the deficit falls roughly as r^3 (measured ratios about 10 per halving)."""
    width, height = 0.02, 0.01
    series = analytic.rectangle_newtonian_flow_rate(width, height, MU, G)
    deficits = []
    for fraction in (0.1, 0.05, 0.02):
        solution = _solve({"shape": "rectangle", "width": width, "height": height,
                           "corner_radius": fraction * height}, 12)
        deficits.append(1 - solution.summary()["flow_rate"] / series)
        assert sorted(solution.domain.walls) == ["bottom", "left", "right", "top"]
    assert deficits[0] > 6 * deficits[1] > 0
    assert 0 < deficits[2] < 2e-5                         # measured 7.7e-6


# --------------------------------------------------------------------------- 1-D references


POWER_LAW = {"model": "power-law", "consistency": 0.8, "flow_index": 0.5}
BINGHAM = {"model": "bingham", "yield_stress": 4.0, "plastic_viscosity": 0.5}


@pytest.mark.parametrize("fluid, tolerance", [(POWER_LAW, 6e-5), (BINGHAM, 4e-5)])
@needs_gmsh
def test_pipe_drawn_with_arcs_against_the_one_dimensional_reference(fluid, tolerance):
    """analytic.pipe_flow integrates the flow curve over the linear stress profile (Bird,
    Stewart & Lightfoot, section 8.3); the same regularised model the solver used, so the
    difference is mesh error alone: measured 2.3e-5 (power law) and 8e-6 (Bingham) at 12
    cells, ten times less than at 6."""
    R, gradient = 0.015, -3000.0
    solution = _solve({"shape": "polygon", **_circle(R)}, 12, fluid=fluid, gradient=gradient)
    reference = analytic.pipe_flow(solution.model, R, gradient, regularised=True).flow_rate
    assert solution.summary()["flow_rate"] == pytest.approx(reference, rel=tolerance)


@pytest.mark.parametrize("fluid, tolerance", [(POWER_LAW, 1.2e-3), (BINGHAM, 1.5e-3)])
@needs_gmsh
def test_annulus_drawn_with_a_hole_against_the_one_dimensional_reference(fluid, tolerance):
    """analytic.annulus_flow (Fredrickson & Bird 1958 construction; recalled from memory).
    At 6 cells across the gap: measured 5.7e-4 (power law) and 7.5e-4 (Bingham); at 12
    cells 4.6e-5 and 1.0e-4 (too slow for the suite)."""
    Ri, Ro, gradient = 0.01, 0.025, -3000.0
    table = {"shape": "polygon", **_circle(Ro, "outer"), "holes": [_circle(Ri, "inner")]}
    solution = _solve(table, 6, fluid=fluid, gradient=gradient)
    assert sorted(solution.domain.walls) == ["inner", "outer"]
    reference = analytic.annulus_flow(solution.model, Ri, Ro, gradient,
                                      regularised=True).flow_rate
    assert solution.summary()["flow_rate"] == pytest.approx(reference, rel=tolerance)


# --------------------------------------------------------------------------- drawing


L_SECTION = {"vertices": [["0 mm", "0 mm"], ["40 mm", "0 mm"], ["40 mm", "12 mm"],
                          ["20 mm", "12 mm"], ["20 mm", "30 mm"], ["0 mm", "30 mm"]],
             "fillet_radius": ["0 mm", "0 mm", "3 mm", "2 mm", "0 mm", "0 mm"],
             "arcs": [{"edge": 4, "radius": "12 mm"}],
             "walls": {"lid": [2], "base": [0, 1]}}


def test_polygon_with_fillets_and_an_arc_has_the_exact_area():
    """Area by hand: the L (40 x 12 + 20 x 18), minus (1 - pi/4) r^2 at the convex 3 mm
    fillet, plus it at the concave 2 mm one, plus the circular segment over the 20 mm edge
    (r = 12 mm: r^2 (t - sin t) / 2 with sin(t/2) = 10/12)."""
    section = drawing.parse("polygon", L_SECTION)
    theta = 2 * math.asin(10 / 12)
    expected = (40 * 12 + 20 * 18 - (1 - math.pi / 4) * (3 ** 2 - 2 ** 2)
                + 12 ** 2 * (theta - math.sin(theta)) / 2) * 1e-6
    assert section.area == pytest.approx(expected, rel=1e-12)
    assert section.walls == ("base", "lid", "wall")
    assert section.reentrant_corners == ()                 # the 270 degree corner is rounded
    sharp = drawing.parse("polygon", {**L_SECTION, "fillet_radius": 0})
    assert sharp.reentrant_corners == ((0.02, 0.012),)


@needs_gmsh
def test_fillet_between_two_walls_is_split_and_the_picture_is_drawn(tmp_path):
    section = drawing.parse("polygon", L_SECTION)
    mesh, walls = drawing.mesh(section, 6, 2, refine_walls=2.0)
    assert set(walls) == {"base", "lid", "wall"}
    boundary = set(mesh.boundary_facets().tolist())
    named = np.concatenate(list(walls.values()))
    assert sorted(named.tolist()) == sorted(boundary)      # every boundary edge, once
    # the 3 mm fillet at vertex 2 joins base (edge 1) and lid (edge 2): its upper half is lid
    middle = mesh.p[:, mesh.facets[:, walls["lid"]]].mean(axis=1)
    assert middle[0].max() > 0.0385 and middle[1].min() > 0.0105
    drawing.draw_png(section, mesh, walls, tmp_path / "section.png")
    assert (tmp_path / "section.png").stat().st_size > 10_000


# --------------------------------------------------------------------------- bad drawings


@pytest.mark.parametrize("shape, table, message", [
    ("polygon", {"vertices": [[0, 0], [0.01, 0.01], [0.01, 0], [0, 0.02]]},
     "geometry: the drawing crosses itself (edge 0 and edge 2 cross or touch)"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0.02, 0]]},
     "geometry: the drawing encloses no area"),
    ("rectangle", {"width": "20 mm", "height": "10 mm", "corner_radius": "6 mm"},
     "geometry.corner_radius: the rounded corners at vertices 1 and 2 need 12 mm of edge 1, "
     "which is 10 mm long"),
    ("triangle", {"side": 0.01, "fillet_radius": "3 mm"},   # tangent length r / tan 30
     "geometry.fillet_radius: the rounded corners at vertices 0 and 1 need 10.39 mm of edge 0"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]],
                 "arcs": [{"edge": 0, "radius": "4 mm"}]},
     "geometry.arcs[0].radius = 4 mm: an arc on edge 0 needs a radius of at least half its "
     "length (5 mm)"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]], "walls": {"lid": [0, 3]}},
     "geometry.walls.lid[1] = 3: expected an edge number from 0 to 2"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]],
                 "walls": {"lid": [0], "base": [0, 1]}},
     "geometry.walls.base: edge 0 is already in the wall lid"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]], "walls": {"2nd": [0]}},
     "geometry.walls.2nd: a wall name is a letter"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]], "fillet_radus": 0.001},
     'unknown key geometry.fillet_radus (did you mean "fillet_radius"?)'),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]],
                 "holes": [{"vertices": [[0.02, 0.02], [0.03, 0.02], [0.02, 0.03]]}]},
     "geometry.holes[0]: the hole lies outside the outer boundary"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0.01, 0.01], [0, 0.01]],
                 "holes": [{"vertices": [[0.005, 0.005], [0.015, 0.005], [0.005, 0.008]]}]},
     "geometry: the drawing crosses itself (edge 1 of geometry and edge 0 of "
     "geometry.holes[0] cross or touch)"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0.01, 0]]},
     "geometry.vertices[2] = [0.01, 0.0]: expected a point other than vertex 1"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]],
                 "fillet_radius": [0.001, 0.001]},
     "geometry.fillet_radius = [0.001, 0.001]: expected one length, or a list of 3 lengths"),
    ("circular-sector", {"radius": "1 cm", "angle": 360},
     "geometry.angle = 360: expected a number of degrees, 0 < angle < 360"),
    ("ellipse", {"semi_axis_x": "1 cm", "semi_axis_y": "0 cm"},
     "geometry.semi_axis_y = 0.0: expected a finite number > 0"),
    ("triangle", {"side": 0.01, "vertices": [[0, 0], [1, 0], [0, 1]]},
     "geometry: give side (an equilateral triangle) or vertices (three points), not both"),
    ("polygon", {"vertices": [[0, 0], [0.01, 0], [0, 0.01]],
                 "arcs": [{"edge": 0, "radius": 0.01}], "fillet_radius": 0.001},
     "geometry.fillet_radius: the corner at vertex 0 touches the arc of edge 0"),
])
def test_bad_drawings_get_one_line_errors(shape, table, message):
    with pytest.raises(CaseError) as caught:
        drawing.parse(shape, table)
    assert message in str(caught.value)
    assert "\n" not in str(caught.value)


def test_unknown_wall_speed_names_the_walls_of_the_drawing():
    section = drawing.parse("polygon", L_SECTION)
    with pytest.raises(CaseError, match=r'drive.wall_speed.lids: the polygon has no wall named '
                       r"'lids' \(did you mean \"lid\"\?\); its walls are: base, lid, wall"):
        drawing.check_wall_speeds(section, {"lids": 0.1})
    drawing.check_wall_speeds(section, {"lid": 0.1})


def test_missing_gmsh_says_how_to_install_it(monkeypatch):
    monkeypatch.setitem(sys.modules, "gmsh", None)        # import gmsh raises ImportError
    section = drawing.parse("triangle", {"side": 0.01})
    with pytest.raises(CaseError, match=r'needs the gmsh package.*pip install "gnflow\[mesh\]"'):
        drawing.mesh(section, 4, 2)


def test_section_command_verify_and_sweep_on_a_drawn_shape(tmp_path):
    """`gnflow section` draws the drawn example to a PNG; `verify` and `sweep` run on it."""
    pytest.importorskip("gmsh")
    from pathlib import Path

    from gnflow.cli import main
    example = Path(__file__).resolve().parents[1] / "gnflow" / "examples" / \
        "drawn_ellipse_squeezed_hose.toml"
    png = tmp_path / "section.png"
    assert main(["section", str(example), "--out", str(png), "--quiet"]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert main(["verify", str(example), "--levels", "3", "--out", str(tmp_path / "v"),
                 "--quiet"]) == 0
    assert (tmp_path / "v" / "convergence.csv").exists()
    assert main(["sweep", str(example), "--vary", "drive.pressure_gradient=-100Pa/m..-400Pa/m",
                 "--points", "2", "--workers", "1", "--out", str(tmp_path / "s"),
                 "--quiet"]) == 0
    rows = (tmp_path / "s" / "sweep.csv").read_text().splitlines()
    assert len(rows) == 3
    # a shape that is not drawn is refused with one line and exit code 2
    plain = Path(__file__).resolve().parents[1] / "gnflow" / "examples" / "paste_slit_die.toml"
    assert main(["section", str(plain), "--out", str(tmp_path / "x.png")]) == 2
