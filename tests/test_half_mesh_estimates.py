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


def test_regularisation_error_on_a_coarser_sequence_level_matches_the_fine_estimate(
        monkeypatch):
    # 144 cells: levels of 72, 36 and 18 cells; with ESTIMATE_UNKNOWNS = 5000 the
    # estimate moves from the half mesh (72 cells) to the 36-cell level (5329 unknowns)
    case = Case.from_dict({
        "fluid": {"model": "herschel-bulkley", "yield_stress": 2.0, "consistency": 1.0,
                  "flow_index": 0.5},
        "geometry": {"shape": "rectangle", "width": 0.1, "height": 0.1},
        "drive": {"pressure_gradient": -1000.0},
        "mesh": {"cells": 2 * CELLS, "degree": 2},
        "solver": {"method": "newton", "tolerance": 1e-10}})
    monkeypatch.setattr(solver, "ESTIMATE_UNKNOWNS", 5000)
    seen = []
    estimate = solver.regularisation_error

    def recorded(problem, *args):
        seen.append((problem.domain.cells, problem.model.regularisation_parameter))
        return estimate(problem, *args)
    monkeypatch.setattr(solver, "regularisation_error", recorded)
    coarser = solver.solve(case)
    assert coarser.converged, coarser.message
    report = coarser.regularisation
    assert "coarser mesh of the grid sequence (36 cells)" in report["error_estimate_definition"]
    monkeypatch.setattr(solver, "HALF_MESH_ESTIMATE_LIMIT", 10 ** 12)
    fine = solver.solve(case).regularisation
    assert "grid sequence" not in fine["error_estimate_definition"]
    assert fine["error_estimate"] > 0
    assert report["error_estimate"] == pytest.approx(fine["error_estimate"], rel=0.05)
    assert report["error_estimate_reliable"] == fine["error_estimate_reliable"]
    # estimated on the 36-cell level at the fine solve's regularisation, not the level's
    assert seen[0] == (36, coarser.model.regularisation_parameter)
