"""2-D cross-sections: rectangular ducts, eccentric annuli, sections read from mesh files."""

import math

import meshio
import numpy as np
import pytest

from gnflow import analytic
from gnflow.case import Case
from gnflow.convergence import observed_orders
from gnflow.errors import CaseError
from gnflow import solve


def _case(fluid, geometry, drive, **extra):
    return Case.from_dict({"fluid": fluid, "geometry": geometry, "drive": drive, **extra})


NEWTONIAN = {"model": "newtonian", "viscosity": 0.2, "density": 1000.0}


@pytest.mark.parametrize("aspect, published", [
    # Shah & London (1978), Laminar Flow Forced Convection in Ducts, rectangular ducts,
    # fully developed f Re (Re on the hydraulic diameter); values recalled from memory
    (1.0, 14.22708),
    (0.5, 15.54806),
    (0.25, 18.23278),
    (0.125, 20.58464),
])
def test_rectangular_duct_friction_factor_against_shah_and_london(aspect, published):
    height, width = 0.01 * aspect, 0.01
    case = _case(NEWTONIAN, {"shape": "rectangle", "width": width, "height": height},
                 {"pressure_gradient": -50.0}, mesh={"cells": 12})
    s = solve(case).summary()
    f_re = s["fanning_friction_factor"] * s["reynolds_number"]
    assert f_re == pytest.approx(published, rel=2e-4)
    # and the Fourier series solution, to the discretisation error of this mesh
    series = analytic.rectangle_newtonian_flow_rate(width, height, 0.2, -50.0)
    assert s["flow_rate"] == pytest.approx(series, rel=2e-4)


def test_rectangle_converges_to_the_series_at_high_order():
    errors, sizes = [], []
    series = analytic.rectangle_newtonian_flow_rate(0.02, 0.01, 0.2, -50.0)
    for cells in (4, 8, 16):
        case = _case(NEWTONIAN, {"shape": "rectangle", "width": 0.02, "height": 0.01},
                     {"pressure_gradient": -50.0}, mesh={"cells": cells})
        errors.append(abs(solve(case).summary()["flow_rate"] / series - 1))
        sizes.append(1 / cells)
    # the corners limit the regularity (w ~ r^2 log r type terms): still better than 3rd
    assert observed_orders(sizes, errors)[-1] > 3.0


@pytest.mark.parametrize("eccentricity", [0.2, 0.5, 0.8])
def test_eccentric_annulus_against_bipolar_series(eccentricity):
    ri, ro = 0.01, 0.03
    case = _case(NEWTONIAN, {"shape": "annulus", "inner_radius": ri, "outer_radius": ro,
                             "eccentricity": eccentricity}, {"pressure_gradient": -100.0},
                 mesh={"cells": 12, "grading": 1.0})
    exact = analytic.eccentric_annulus_newtonian_flow_rate(ri, ro, eccentricity * (ro - ri),
                                                           0.2, -100.0)
    assert solve(case).summary()["flow_rate"] == pytest.approx(exact, rel=2e-5)


def test_eccentric_annulus_p2_keeps_its_order_on_curved_walls():
    """Isoparametric P2: the flow-rate error falls at about h^4 (a functional of a
    P2 solution); straight chords would cap it at h^2."""
    ri, ro, e = 0.01, 0.03, 0.5
    exact = analytic.eccentric_annulus_newtonian_flow_rate(ri, ro, e * (ro - ri), 0.2, -100.0)
    errors, sizes = [], []
    for cells in (4, 8, 16):
        case = _case(NEWTONIAN, {"shape": "annulus", "inner_radius": ri, "outer_radius": ro,
                                 "eccentricity": e}, {"pressure_gradient": -100.0},
                     mesh={"cells": cells})
        errors.append(abs(solve(case).summary()["flow_rate"] / exact - 1))
        sizes.append(1 / cells)
    assert observed_orders(sizes, errors)[-1] > 3.5


def test_eccentric_annulus_at_vanishing_eccentricity_matches_the_1d_annulus():
    geometry = {"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03}
    fluid = {"model": "power-law", "consistency": 0.5, "flow_index": 0.6}
    drive = {"pressure_gradient": -800.0, "wall_speed": {"inner": 0.05}}
    one_d = solve(_case(fluid, geometry, drive)).summary()
    two_d = solve(_case(fluid, {**geometry, "eccentricity": 1e-7}, drive,
                        mesh={"cells": 12})).summary()
    assert two_d["flow_rate"] == pytest.approx(one_d["flow_rate"], rel=2e-4)
    for wall in ("inner", "outer"):
        assert two_d["wall_shear_stress"]["per_wall"][wall] == pytest.approx(
            one_d["wall_shear_stress"]["per_wall"][wall], rel=2e-3)


@pytest.mark.parametrize("fluid", [
    {"model": "power-law", "consistency": 1.0, "flow_index": 0.5},
    {"model": "herschel-bulkley", "yield_stress": 4.0, "consistency": 1.0, "flow_index": 0.5},
    {"model": "bingham", "yield_stress": 4.0, "plastic_viscosity": 0.5},
])
def test_non_newtonian_sections_converge_under_refinement(fluid):
    values = []
    for cells in (6, 12, 24):
        case = _case(fluid, {"shape": "rectangle", "width": 0.02, "height": 0.01},
                     {"pressure_gradient": -4000.0}, mesh={"cells": cells})
        solution = solve(case)
        assert solution.converged, solution.message
        values.append(solution.summary()["flow_rate"])
    first, second = abs(values[1] - values[0]), abs(values[2] - values[1])
    assert second < first / 2.5   # the differences shrink at better than second order


def test_yield_stress_section_reports_unyielded_region():
    case = _case({"model": "bingham", "yield_stress": 8.0, "plastic_viscosity": 0.5},
                 {"shape": "rectangle", "width": 0.02, "height": 0.02},
                 {"pressure_gradient": -4000.0}, mesh={"cells": 12})
    s = solve(case).summary()
    # the central plug, and the stagnant corners where the wall stress is below yield
    assert 0.05 < s["unyielded_fraction"] < 0.9
    assert s["force_balance_error"] < 1e-8


def _write_rectangle_mesh(path, width, height, cells_x, cells_y):
    """The triangles gnflow builds for a rectangle, written in gmsh 2.2 format with the
    four sides as named physical groups."""
    from gnflow.geometry import _rectangle_mesh
    mesh = _rectangle_mesh(np.linspace(0, width, cells_x + 1), np.linspace(0, height, cells_y + 1))
    points = np.column_stack([mesh.p.T, np.zeros(mesh.nvertices)])
    boundary = mesh.boundary_facets()
    ends = mesh.facets[:, boundary]
    mid = mesh.p[:, ends].mean(axis=1)
    sides = {"bottom": mid[1] < 1e-12 * height, "top": mid[1] > height * (1 - 1e-12),
             "left": mid[0] < 1e-12 * width, "right": mid[0] > width * (1 - 1e-12)}
    lines = np.vstack([ends[:, chosen].T for chosen in sides.values()])
    tags = np.concatenate([np.full(chosen.sum(), tag)
                           for tag, chosen in enumerate(sides.values(), start=1)])
    triangles = mesh.t.T
    out = meshio.Mesh(points, [("triangle", triangles), ("line", lines)],
                      cell_data={"gmsh:physical": [np.full(len(triangles), 10), tags],
                                 "gmsh:geometrical": [np.full(len(triangles), 10), tags]},
                      field_data={"bottom": np.array([1, 1]), "top": np.array([2, 1]),
                                  "left": np.array([3, 1]), "right": np.array([4, 1]),
                                  "fluid": np.array([10, 2])})
    meshio.write(path, out, file_format="gmsh22", binary=False)


def test_mesh_file_reproduces_the_rectangle(tmp_path):
    width, height = 0.03, 0.01
    _write_rectangle_mesh(tmp_path / "channel.msh", width, height, 24, 8)
    fluid = {"model": "carreau", "zero_shear_viscosity": 2.0, "time_constant": 0.5,
             "flow_index": 0.5}
    drive = {"pressure_gradient": -3000.0, "wall_speed": {"top": 0.02}}
    built = solve(_case(fluid, {"shape": "rectangle", "width": width, "height": height},
                        drive, mesh={"cells": 8})).summary()
    (tmp_path / "case.toml").write_text("")
    read = solve(Case.from_dict({"fluid": fluid, "geometry": {"shape": "mesh",
                                                            "file": "channel.msh"},
                                 "drive": drive, "mesh": {"cells": 8}},
                                source=tmp_path / "case.toml")).summary()
    assert read["flow_rate"] == pytest.approx(built["flow_rate"], rel=1e-6)
    for wall in ("bottom", "top", "left", "right"):
        assert read["wall_shear_stress"]["per_wall"][wall] == pytest.approx(
            built["wall_shear_stress"]["per_wall"][wall], rel=1e-5)


def test_mesh_file_in_millimetres_and_unknown_wall(tmp_path):
    _write_rectangle_mesh(tmp_path / "mm.msh", 30.0, 10.0, 12, 4)
    base = {"fluid": NEWTONIAN, "geometry": {"shape": "mesh", "file": str(tmp_path / "mm.msh"),
                                             "length_unit": "mm"},
            "drive": {"pressure_gradient": -50.0}}
    s = solve(Case.from_dict(base)).summary()
    series = analytic.rectangle_newtonian_flow_rate(0.03, 0.01, 0.2, -50.0)
    assert s["flow_rate"] == pytest.approx(series, rel=5e-3)
    bad = {**base, "drive": {"pressure_gradient": -50.0, "wall_speed": {"lid": 1.0}}}
    with pytest.raises(CaseError, match="no boundary group named 'lid'"):
        solve(Case.from_dict(bad))


def test_section_outputs(tmp_path):
    from gnflow.export import write_outputs
    case = _case({"model": "herschel-bulkley", "yield_stress": 4.0, "consistency": 1.0,
                  "flow_index": 0.5}, {"shape": "annulus", "inner_radius": 0.01,
                                       "outer_radius": 0.03, "eccentricity": 0.4},
                 {"flow_rate": "0.2 L/s"}, mesh={"cells": 6})
    solution = solve(case)
    names = write_outputs(solution, solution.summary(), tmp_path / "out")
    for name in ("summary.json", "fields.vtu", "fields.xdmf", "fields.png", "wall_stress.png",
                 "wall_stress.csv", "convergence.png"):
        assert name in names
    mesh = meshio.read(tmp_path / "out" / "fields.vtu")
    assert {"velocity", "shear_rate", "viscosity", "shear_stress", "unyielded"} <= set(
        mesh.point_data)
    assert "triangle6" in mesh.cells_dict
    assert math.isclose(solution.summary()["flow_rate"], 2e-4, rel_tol=1e-9)


@pytest.mark.parametrize("suffix", [".vtu", ".xdmf"])
def test_mesh_file_without_groups_is_all_one_wall(tmp_path, suffix):
    from skfem import MeshTri
    mesh = MeshTri.init_tensor(np.linspace(0, 0.02, 25), np.linspace(0, 0.01, 13))
    points = np.column_stack([mesh.p.T, np.zeros(mesh.nvertices)])
    meshio.write(tmp_path / f"duct{suffix}", meshio.Mesh(points, [("triangle", mesh.t.T)]))
    case = Case.from_dict({"fluid": NEWTONIAN, "geometry": {"shape": "mesh",
                                                            "file": str(tmp_path / f"duct{suffix}")},
                           "drive": {"pressure_gradient": -50.0}})
    s = solve(case).summary()
    assert list(s["wall_shear_stress"]["per_wall"]) == ["wall"]
    series = analytic.rectangle_newtonian_flow_rate(0.02, 0.01, 0.2, -50.0)
    assert s["flow_rate"] == pytest.approx(series, rel=1e-4)
