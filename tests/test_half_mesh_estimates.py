"""The error estimates of a large regularised section reuse the half-fine mesh.

Above ``HALF_MESH_ESTIMATE_LIMIT`` unknowns a 2-D yield-stress solve estimates its
regularisation error on the half-fine mesh of its mesh-error estimate, and that
mesh-error solve starts from the grid-sequencing solution (same regularisation) instead
of a mesh built again. Both are shortcuts for speed (issue 16): these tests check that
they give the estimates the full computations give.
"""

import pytest

import gnflow.solver as solver
from gnflow import Case

#: 72 cells per side: (2 * 72 + 1)^2 = 21 025 unknowns, above the sequencing limit
CELLS = 72


def _case(**drive):
    return Case.from_dict({
        "fluid": {"model": "herschel-bulkley", "yield_stress": 2.0, "consistency": 1.0,
                  "flow_index": 0.5},
        "geometry": {"shape": "rectangle", "width": 0.1, "height": 0.1},
        "drive": drive or {"pressure_gradient": -1000.0},
        "mesh": {"cells": CELLS, "degree": 2},
        "solver": {"method": "newton", "tolerance": 1e-10}})


@pytest.fixture(scope="module")
def solved():
    solution = solver.solve(_case())
    assert solution.converged, solution.message
    assert solution.domain.dofs > solver.HALF_MESH_ESTIMATE_LIMIT
    return solution


def test_regularisation_error_on_the_half_mesh_matches_the_fine_estimate(solved, monkeypatch):
    half = solved.regularisation
    assert "mesh half as fine" in half["error_estimate_definition"]
    monkeypatch.setattr(solver, "HALF_MESH_ESTIMATE_LIMIT", 10 ** 12)
    fine = solver.solve(_case()).regularisation
    assert "mesh half as fine" not in fine["error_estimate_definition"]
    assert fine["error_estimate"] > 0
    assert half["error_estimate"] == pytest.approx(fine["error_estimate"], rel=0.05)
    assert half["error_estimate_reliable"] == fine["error_estimate_reliable"]


def test_mesh_error_from_the_sequenced_solution_matches_a_fresh_half_mesh_solve(solved):
    assert solved.coarse is not None
    assert solved.coarse.model.regularisation_parameter == \
        solved.model.regularisation_parameter
    reused, _ = solver._mesh_error(solved.case, solved)
    coarse, solved.coarse = solved.coarse, None     # the path that builds the mesh again
    try:
        fresh, _ = solver._mesh_error(solved.case, solved)
    finally:
        solved.coarse = coarse
    assert reused["mesh_error_estimate"] > 0
    assert reused["mesh_error_estimate"] == pytest.approx(fresh["mesh_error_estimate"],
                                                          rel=1e-4)
