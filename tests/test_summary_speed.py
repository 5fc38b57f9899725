"""The shortcuts of the summary and field post-processing give what the long ways give.

* The mass matrix of the projections (:func:`gnflow.post._mass_matrix`): its element
  matrices are those of ``asm(post._mass, basis)`` bit for bit; the assembled matrix is
  ``asm``'s bit for bit in 1-D and, in 2-D, has ``asm``'s entries to the rounding of their
  sums (they are added in another order).
* The projections' loads (:func:`gnflow.post._load`) and the values and gradients at the
  quadrature points (:func:`gnflow.post._at_points`) are scikit-fem's ``asm`` and
  ``interpolate`` bit for bit, on cell and facet bases; the facet bases that share the
  section's dofs (:func:`gnflow.post._wall_basis`) are the default ones.
* :func:`gnflow.post.project_all` (several fields at once, conjugate gradients without
  BLAS) gives what scipy's ``cg`` gives each field (:func:`gnflow.post.project`) to the
  rounding of the iteration.
* The summary, point fields and wall distributions of solved cases (2-D and 1-D, yield
  stress, moving walls, slip, curved and drawn walls) with every shortcut equal those
  computed the long way (each shortcut replaced by the library call it replaces).

Speed is measured in bench/summary.py.
"""

import math

import numpy as np
import pytest
import scipy.sparse.linalg as spla
from skfem import BilinearForm, FacetBasis, asm

from gnflow import Case, post
from gnflow.geometry import build_domain
from gnflow.results import Results
from gnflow.solver import solve as solve_flow

EPS = np.finfo(float).eps

NEWTONIAN = {"model": "newtonian", "viscosity": 1.0}
HERSCHEL_BULKLEY = {"model": "herschel-bulkley", "yield_stress": 2.0, "consistency": 1.0,
                    "flow_index": 0.5}
RECTANGLE = {"shape": "rectangle", "width": 0.1, "height": 0.05}
ECCENTRIC = {"shape": "annulus", "inner_radius": 0.03, "outer_radius": 0.08,
             "eccentricity": 0.4}
POLYGON = {"shape": "polygon", "vertices": [[0.0, 0.0], [0.06, 0.0], [0.06, 0.02],
                                            [0.03, 0.02], [0.03, 0.04], [0.0, 0.04]]}

SECTIONS = {
    "pipe P2": ({"shape": "pipe", "radius": 0.05}, None),
    "slit P1": ({"shape": "slit", "gap": 0.05}, {"cells": 30, "degree": 1}),
    "rectangle P2": (RECTANGLE, {"cells": 12}),
    "rectangle P1": (RECTANGLE, {"cells": 12, "degree": 1}),
    "eccentric annulus (curved P2)": (ECCENTRIC, {"cells": 8}),
}


def _basis(name):
    geometry, mesh = SECTIONS[name]
    mapping = {"fluid": NEWTONIAN, "geometry": geometry, "drive": {"pressure_gradient": -1.0}}
    if mesh:
        mapping["mesh"] = mesh
    return build_domain(Case.from_dict(mapping)).basis


@pytest.mark.parametrize("name", list(SECTIONS))
def test_element_masses_are_those_of_asm(name):
    basis = _basis(name)
    # asm's element entries, ordered (trial j, test i, element)
    reference = post._mass.coo_data(basis).data.reshape(basis.Nbfun, basis.Nbfun, -1)
    element = post._element_masses(basis)
    assert element.shape == (basis.nelems, basis.Nbfun, basis.Nbfun)
    assert np.array_equal(element.transpose(2, 1, 0), reference)


@pytest.mark.parametrize("name", list(SECTIONS))
def test_mass_matrix_is_that_of_asm(name):
    basis = _basis(name)
    reference = asm(post._mass, basis).tocsr()
    reference.sort_indices()
    mass = post._mass_matrix(basis)
    assert mass.has_sorted_indices
    assert np.array_equal(mass.indptr, reference.indptr)
    assert np.array_equal(mass.indices, reference.indices)
    if basis.mesh.dim() == 1:
        # at most two elements share an entry: a sum of two is the same in either order
        assert np.array_equal(mass.data, reference.data)
    else:
        # the rounding of a sum of the element entries, bounded by their absolute sum
        absolute = asm(BilinearForm(lambda u, v, w: abs(u * v)), basis).tocsr()
        absolute.sort_indices()
        assert np.all(np.abs(mass.data - reference.data) <= 8 * EPS * absolute.data)


@pytest.mark.parametrize("name", list(SECTIONS))
def test_loads_and_point_values_are_those_of_asm_and_interpolate(name):
    basis = _basis(name)
    rng = np.random.default_rng(7)
    values = rng.standard_normal((basis.nelems, basis.X.shape[1]))
    assert np.array_equal(post._load(basis, values),
                          asm(post._load_of, basis, value_at_points=values))
    u = rng.standard_normal(basis.N)
    found = basis.interpolate(u)
    assert np.array_equal(post._at_points(basis, u), np.asarray(found))
    assert np.array_equal(post._at_points(basis, u, 1), found.grad)


@pytest.mark.parametrize("name", ["rectangle P2", "rectangle P1", "eccentric annulus (curved P2)"])
def test_wall_bases_share_the_dofs_and_give_the_default_basis(name):
    basis = _basis(name)
    facets = basis.mesh.boundary_facets()[::3]
    default = FacetBasis(basis.mesh, basis.elem, facets=facets)
    shared = post._wall_basis(basis, facets)
    assert shared.dofs is basis.dofs
    assert np.array_equal(shared.element_dofs, default.element_dofs)
    assert np.array_equal(shared.dx, default.dx)
    assert np.array_equal(np.asarray(shared.normals), np.asarray(default.normals))
    assert np.array_equal(np.asarray(shared.global_coordinates()),
                          np.asarray(default.global_coordinates()))
    u = np.random.default_rng(3).standard_normal(basis.N)
    found = default.interpolate(u)
    assert np.array_equal(post._at_points(shared, u), np.asarray(found))
    assert np.array_equal(post._at_points(shared, u, 1), found.grad)


@pytest.mark.parametrize("name", list(SECTIONS))
def test_project_all_gives_what_scipy_cg_gives_each_field(name):
    basis = _basis(name)
    x = basis.doflocs
    fields = np.array([np.sin(40 * x[0]) + x[-1] ** 2, np.exp(10 * x[0]) * np.cos(30 * x[-1])])
    at_points = np.concatenate([post._at_points(basis, f, 1) for f in fields])
    # and a field that vanishes: zero, as cg gives it
    at_points = np.concatenate([at_points, np.zeros_like(at_points[:1])])
    together = post.project_all(basis, at_points)
    assert together.shape == (at_points.shape[0], basis.N)
    mass = asm(post._mass, basis).tocsr()
    for values, projected in zip(at_points, together):
        load = asm(post._load_of, basis, value_at_points=values)
        alone, info = spla.cg(mass, load, rtol=1e-12, maxiter=500,
                              M=post._mass_system(basis)[1])
        assert info == 0
        scale = max(np.max(np.abs(alone)), 1e-300)
        assert np.max(np.abs(projected - alone)) <= 1e-10 * scale
        # both meet the stopping rule on the assembled matrix of asm
        assert np.linalg.norm(mass @ projected - load) <= 1.01e-12 * np.linalg.norm(load) \
            or not load.any()
    assert not together[-1].any()


# --------------------------------------------------------------------------- whole cases

def _long_way(monkeypatch):
    """Replace every shortcut by the library call it stands for."""
    def interpolated(basis, u, derivative=0):
        found = basis.interpolate(u)
        return np.asarray(found.grad if derivative else found)

    monkeypatch.setattr(post, "_mass_matrix", lambda basis: asm(post._mass, basis).tocsr())
    monkeypatch.setattr(post, "_load", lambda basis, values: asm(post._load_of, basis,
                                                                 value_at_points=values))
    monkeypatch.setattr(post, "_at_points", interpolated)
    monkeypatch.setattr(post, "project_all", lambda basis, values: np.array(
        [post.project(basis, v) for v in values]))
    monkeypatch.setattr(post, "_wall_basis", lambda basis, facets: FacetBasis(
        basis.mesh, basis.elem, facets=facets))
    monkeypatch.setattr(post, "_MASS_SYSTEMS", type(post._MASS_SYSTEMS)())


CASES = {
    "rectangle, Herschel-Bulkley": {"fluid": HERSCHEL_BULKLEY, "geometry": RECTANGLE,
                                    "drive": {"pressure_gradient": -1000.0},
                                    "mesh": {"cells": 16}},
    "rectangle, moving wall, P1": {"fluid": {"model": "power-law", "consistency": 1.0,
                                             "flow_index": 0.6},
                                   "geometry": RECTANGLE,
                                   "drive": {"pressure_gradient": -500.0,
                                             "wall_speed": {"top": 0.05}},
                                   "mesh": {"cells": 14, "degree": 1}},
    "rectangle, slip": {"fluid": HERSCHEL_BULKLEY, "geometry": RECTANGLE,
                        "drive": {"pressure_gradient": -1000.0,
                                  "slip": {"bottom": {"coefficient": 1e-4, "exponent": 1.0}}},
                        "mesh": {"cells": 12}},
    "eccentric annulus, Bingham": {"fluid": {"model": "bingham", "yield_stress": 2.0,
                                             "plastic_viscosity": 1.0},
                                   "geometry": ECCENTRIC,
                                   "drive": {"pressure_gradient": -1000.0},
                                   "mesh": {"cells": 8}},
    "drawn polygon, Carreau": {"fluid": {"model": "carreau", "zero_shear_viscosity": 10.0,
                                         "time_constant": 1.0, "flow_index": 0.4},
                               "geometry": POLYGON,
                               "drive": {"pressure_gradient": -2000.0}, "mesh": {"cells": 8}},
    "pipe, Herschel-Bulkley": {"fluid": HERSCHEL_BULKLEY,
                               "geometry": {"shape": "pipe", "radius": 0.05},
                               "drive": {"pressure_gradient": -1000.0}},
}


def _compare(short, long, path=""):
    """Differences beyond rounding between two summaries, field or distribution dicts."""
    if isinstance(long, dict):
        assert list(short) == list(long), path
        return [d for k in long for d in _compare(short[k], long[k], f"{path}.{k}")]
    if isinstance(long, (list, tuple)):
        assert type(short) is type(long) and len(short) == len(long), path
        return [d for i, (a, b) in enumerate(zip(short, long))
                for d in _compare(a, b, f"{path}[{i}]")]
    if isinstance(long, np.ndarray):
        assert short.shape == long.shape and short.dtype == long.dtype, path
        if long.dtype.kind != "f":
            return [] if np.array_equal(short, long) else [path]
        scale = max(float(np.max(np.abs(long), initial=0.0)), 1e-300)
        return [] if np.max(np.abs(short - long), initial=0.0) <= 1e-12 * scale else [path]
    if isinstance(long, float):
        if path.endswith("solve_seconds") or short == long or (
                math.isnan(short) and math.isnan(long)):
            return []
        # the summary prints 4 significant digits; the JSON file all of them
        close = abs(short - long) <= 1e-11 * abs(long) and f"{short:.6g}" == f"{long:.6g}"
        return [] if close else [f"{path}: {short!r} != {long!r}"]
    return [] if short == long else [f"{path}: {short!r} != {long!r}"]


@pytest.mark.parametrize("name", list(CASES))
def test_summary_fields_and_walls_are_those_of_the_long_way(name, monkeypatch):
    solution = solve_flow(Case.from_dict(CASES[name]))
    short = Results(solution)
    summary, fields = short.summary(), short.fields
    walls = short.wall_distributions
    with monkeypatch.context() as patched:
        _long_way(patched)
        long = Results(solution)
        long_summary, long_fields, long_walls = long.summary(), long.fields, long.wall_distributions
    assert _compare(summary, long_summary, "summary") == []
    assert _compare(fields, long_fields, "fields") == []
    assert _compare(walls, long_walls, "walls") == []
    if solution.domain.dimension == 2:
        assert walls and all(d["shear_stress"].size for d in walls.values())
    if "slip" in CASES[name]["drive"]:
        assert np.any(walls["bottom"]["slip_speed"] != 0)
