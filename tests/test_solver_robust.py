"""Every solve ends converged or not-converged-with-a-reason; the continuation schedule on
its own; extreme model parameters evaluated without overflow; the linear solver's
fallback on a singular factor; the regularisation-error estimate against the true error.
"""

import math

import numpy as np
import pytest
import scipy.sparse as sp

from gnflow import analytic, rheology
from gnflow.case import Case
from gnflow.solver import solve
from gnflow.solver.continuation import RegularisationSchedule
from gnflow.solver.linear import LinearSolver
from gnflow.solver.newton import FORCING_MARGIN, FORCING_MAX, forcing_term


def _summary(solution) -> dict:
    """The summary as the outputs write it (the results object, where it exists)."""
    from gnflow.results import as_results
    return as_results(solution).summary()


def _numbers(value):
    if isinstance(value, dict):
        for v in value.values():
            yield from _numbers(v)
    elif isinstance(value, list):
        for v in value:
            yield from _numbers(v)
    elif isinstance(value, float):
        yield value


# ---------------------------------------------------------------- continuation schedule

def test_schedule_sharpens_toward_the_wanted_parameter_and_stops_there():
    s = RegularisationSchedule("papanastasiou", step=10.0)
    p, seen = 1.0, []
    while not s.reached(p, 3e3):
        p = s.sharper(p, 3e3)
        seen.append(p)
    assert seen == [10.0, 100.0, 1000.0, 3000.0]


def test_bi_viscous_schedule_sharpens_downward():
    s = RegularisationSchedule("bi-viscous", step=10.0)
    assert s.sharper(1.0, 0.05) == pytest.approx(0.1)
    assert s.sharper(0.1, 0.05) == 0.05
    assert s.reached(0.05, 0.05) and not s.reached(0.1, 0.05)
    assert s.softened(0.05, 2.0) == pytest.approx(0.1)


def test_schedule_backs_off_by_square_roots_then_gives_up():
    s = RegularisationSchedule("papanastasiou", step=10.0, smallest_step=1.2)
    steps = []
    while s.back_off():
        steps.append(s.step)
    assert steps[0] == pytest.approx(math.sqrt(10.0))
    assert all(b == pytest.approx(math.sqrt(a)) for a, b in zip(steps, steps[1:]))
    assert s.step < 1.2 and len(steps) == 4


# ------------------------------------------------------------ model evaluation overflow

@pytest.mark.parametrize("model, rate", [
    # (lambda rate)^a alone overflows; the viscosity itself is small and finite
    (rheology.CarreauYasuda(10.0, 0.0, 1e200, 0.5, 2.0), 1e200),
    (rheology.Carreau(10.0, 0.0, 1e150, 0.3), 1e100),
    (rheology.Cross(10.0, 0.0, 1e200, 2.0), 1e200),
    (rheology.Bingham(1.0, 1.0, "papanastasiou", 1e200), 1e-150),
    (rheology.HerschelBulkley(1.0, 1.0, 0.5, "papanastasiou", 1e250), 1e-100),
])
def test_models_give_finite_values_where_intermediates_overflow(model, rate):
    r = np.array([rate, 1.0])
    # no overflow, invalid operation or division by zero may occur (underflow to 0 is exact enough)
    with np.errstate(over="raise", invalid="raise", divide="raise", under="ignore"):
        values = [model.viscosity(r), model.viscosity_derivative(r), model.stress(r)]
    for v in values:
        assert np.all(np.isfinite(v)), (model, v)
    assert np.all(values[0] >= 0)   # Cross at 1e200: eta ~ 1e-797 rounds to 0, truly


def test_log_space_carreau_matches_the_direct_formula_where_both_are_finite():
    c = rheology.CarreauYasuda(12.0, 0.01, 0.7, 0.35, 0.8)
    rate = np.logspace(-6, 8, 50)
    direct = 0.01 + (12.0 - 0.01) * (1 + (0.7 * rate) ** 0.8) ** ((0.35 - 1) / 0.8)
    assert np.allclose(c.viscosity(rate), direct, rtol=1e-13)


# ------------------------------------------------------------ linear solver fallback

def test_singular_factor_is_retried_with_cg_then_reported_as_linear_algebra_error():
    n = 40
    a = sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]).tolil()
    a[5, :] = 0
    a[:, 5] = 0      # an exactly zero pivot: SuperLU refuses it
    solver = LinearSolver("direct", n)
    with pytest.raises(np.linalg.LinAlgError):
        solver.prepare(a.tocsr())
        solver.solve(np.ones(n))
    assert solver.fallbacks == 1


def test_cg_fallback_solves_a_regular_system():
    n = 200
    a = sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]).tocsr()
    solver = LinearSolver("amg", n)
    solver.prepare(a)
    x = solver.solve(np.ones(n), 1e-12)
    assert np.allclose(a @ x, 1.0, atol=1e-9)


def test_cg_stops_on_an_operator_that_is_not_positive_definite():
    n = 200
    a = sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]).tocsr()
    solver = LinearSolver("amg", n)
    solver.prepare(-a)
    with pytest.raises(np.linalg.LinAlgError, match="not positive definite"):
        solver.solve(np.ones(n), 1e-12)


def test_forcing_term_follows_the_residual_within_its_bounds():
    assert forcing_term(1e-3, 1e-3, 1e-10, first=True) == FORCING_MAX
    # Eisenstat-Walker choice 2: 0.9 (r_k / r_k-1)^2
    assert forcing_term(1e-4, 1e-2, 1e-10, first=False) == pytest.approx(0.9e-4)
    assert forcing_term(1e-5, 1.1e-5, 1e-10, first=False) == FORCING_MAX   # slow progress
    # near the tolerance: no tighter than taking the residual to tol / FORCING_MARGIN
    assert forcing_term(1e-7, 1e-5, 1e-10, first=False) == pytest.approx(
        1e-3 / FORCING_MARGIN)
    assert forcing_term(1e-8, 1e-5, 1e-10, first=False) == pytest.approx(
        1e-2 / FORCING_MARGIN)


def test_banded_factor_of_a_1d_system_matches_sparse_lu_and_declines_an_indefinite_one():
    case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 3.0, "flow_index": 0.5},
                           "geometry": {"shape": "pipe", "radius": 0.015},
                           "drive": {"pressure_gradient": -6000.0}, "mesh": {"cells": 50}})
    solution = solve(case)
    tangent = solution.problem().tangent(solution.u)
    rhs = np.random.default_rng(5).standard_normal(tangent.shape[0])
    banded = LinearSolver("direct", tangent.shape[0], dimension=1)
    banded.prepare(tangent)
    assert banded.band[3] == 2            # P2 in reverse Cuthill-McKee order
    general = LinearSolver("direct", tangent.shape[0], dimension=2)
    general.prepare(tangent)
    assert np.allclose(banded.solve(rhs), general.solve(rhs), rtol=1e-10, atol=0)
    banded.prepare(-tangent)              # not positive definite: sparse LU instead
    assert np.allclose(banded.solve(rhs), -general.solve(rhs), rtol=1e-10, atol=0)


# -------------------------------------------------- extreme cases end cleanly

PIPE = {"shape": "pipe", "radius": 0.01}
EXTREME = [
    ({"model": "power-law", "consistency": 1e250, "flow_index": 3.0}, {"pressure_gradient": -1e-200}),
    ({"model": "power-law", "consistency": 1e-250, "flow_index": 0.05}, {"pressure_gradient": -1e250}),
    ({"model": "carreau", "zero_shear_viscosity": 1e10, "time_constant": 1e200,
      "flow_index": 0.1}, {"pressure_gradient": -1e6}),
    ({"model": "cross", "zero_shear_viscosity": 1e-3, "time_constant": 1e250,
      "rate_exponent": 3.0}, {"pressure_gradient": -1e3}),
    ({"model": "bingham", "yield_stress": 1e200, "plastic_viscosity": 1e-200},
     {"pressure_gradient": -1e3}),
    ({"model": "herschel-bulkley", "yield_stress": 1e-250, "consistency": 1e250,
      "flow_index": 0.05}, {"flow_rate": 1e-200}),
    ({"model": "bingham", "yield_stress": 1.0, "plastic_viscosity": 1.0,
      "regularisation": {"method": "papanastasiou", "exponent": 1e250}},
     {"pressure_gradient": -1e3}),
]


@pytest.mark.parametrize("fluid, drive", EXTREME, ids=lambda v: str(v)[:40])
def test_extreme_parameters_end_converged_or_with_a_reason(fluid, drive):
    solution = solve(Case.from_dict({"fluid": fluid, "geometry": PIPE, "drive": drive,
                                     "mesh": {"cells": 40}}))
    summary = _summary(solution)
    if solution.converged:
        assert all(math.isfinite(v) for v in _numbers(summary)), summary
        assert solution.residual <= solution.case.solver.tolerance
    else:
        assert solution.message.startswith("not converged:") and "residual" in solution.message
    assert np.all(np.isfinite(solution.u))


@pytest.mark.parametrize("flow_index", [0.5, 3.0])
def test_a_residual_below_the_float_range_does_not_read_as_converged(flow_index):
    """K = 1e250 Pa s^n at dp/dz = -1e-200 Pa/m: the wall stress 5e-203 Pa asks for shear
    rates (tau/K)^(1/n) far below the smallest float, so no representable velocity
    balances the load. The weighted forces (about 1e-338) once underflowed to 0 and the
    solve read 0/0 as "converged in 0 iterations"."""
    case = Case.from_dict({"fluid": {"model": "power-law", "consistency": 1e250,
                                     "flow_index": flow_index},
                           "geometry": PIPE, "drive": {"pressure_gradient": -1e-200},
                           "mesh": {"cells": 40}})
    problem = solve(case).problem()
    # at rest every bit of the load is unbalanced: relative residual 1, not 0
    assert problem.relative_residual(problem.boundary_values(), -1e-200) == pytest.approx(1.0, rel=0.01)
    solution = solve(case)
    assert not solution.converged
    assert solution.message.startswith("not converged:") and solution.residual > 0.5


# ------------------------------------------------------- regularisation error estimate

def _bingham_pipe(phi):
    radius, gradient, mu = 0.01, -1000.0, 0.01
    tau_y = phi * abs(gradient) * radius / 2
    case = Case.from_dict({"fluid": {"model": "bingham", "yield_stress": tau_y,
                                     "plastic_viscosity": mu},
                           "geometry": {"shape": "pipe", "radius": radius},
                           "drive": {"pressure_gradient": gradient}})
    # Buckingham-Reiner (Buckingham 1921), via gnflow.analytic
    return case, analytic.pipe_bingham(radius, tau_y, mu, gradient).flow_rate


def _bingham_slit(phi):
    gap, gradient, mu = 0.02, -6000.0, 0.6
    tau_y = phi * abs(gradient) * gap / 2
    case = Case.from_dict({"fluid": {"model": "bingham", "yield_stress": tau_y,
                                     "plastic_viscosity": mu},
                           "geometry": {"shape": "slit", "gap": gap},
                           "drive": {"pressure_gradient": gradient}})
    # the exact plug solution of the plane slit (Bird, Stewart & Lightfoot), gnflow.analytic
    return case, analytic.slit_bingham(gap, tau_y, mu, gradient).flow_rate


@pytest.mark.parametrize("phi", [0.3, 0.9, 0.98])
@pytest.mark.parametrize("section", [_bingham_pipe, _bingham_slit], ids=["pipe", "slit"])
def test_regularisation_error_estimate_within_3x_of_the_true_error_1d(section, phi):
    """phi = tau_y / tau_w up to 0.98 (Bn ~ 1e4): the 1-D mesh error is far below the
    regularisation error there, so the error against the exact solution is the
    regularisation's."""
    case, exact = section(phi)
    solution = solve(case)
    assert solution.converged, solution.message
    true = abs(solution.problem().flow_rate(solution.u) / exact - 1)
    estimate = solution.regularisation["error_estimate"]
    assert solution.regularisation["error_estimate_reliable"]
    assert 1 / 3 <= estimate / true <= 3, (estimate, true)


def test_regularisation_error_estimate_within_3x_on_a_square_duct_near_the_stop():
    """Square duct at 0.95 of the stopping yield stress tau_c = G L / (2 + sqrt(pi))
    (Mosolov & Miasnikov 1965). The true regularisation error on this mesh is measured
    against the same mesh's solution at 64 times the sharpness (whose own regularisation
    error is 1/64 of the default's when it falls as 1/m, as the estimate checks)."""
    side, gradient = 1.0, -1.0
    tau_c = abs(gradient) * side / (2 + math.sqrt(math.pi))

    def case(exponent=None):
        regularisation = {"method": "papanastasiou"}
        if exponent:
            regularisation["exponent"] = exponent
        return Case.from_dict({"fluid": {"model": "bingham", "yield_stress": 0.95 * tau_c,
                                         "plastic_viscosity": 1.0,
                                         "regularisation": regularisation},
                               "geometry": {"shape": "rectangle", "width": side,
                                            "height": side},
                               "drive": {"pressure_gradient": gradient}, "mesh": {"cells": 16}})
    solution = solve(case())
    assert solution.converged, solution.message
    sharp = solve(case(64 * solution.model.regularisation_parameter),
                  estimate_regularisation=False)
    assert sharp.converged, sharp.message
    q, q_sharp = (s.problem().flow_rate(s.u) for s in (solution, sharp))
    true = abs(q / q_sharp - 1) * 64 / 63   # the sharp solve's own share, at 1/m
    estimate = solution.regularisation["error_estimate"]
    assert 1 / 3 <= estimate / true <= 3, (estimate, true)
    assert solution.regularisation["mesh_error_estimate"] is not None


# ---------------------------------------------------- partly yielded coaxial gaps

@pytest.mark.parametrize("speed", [1e-3, 1e-2, 0.1, 0.6, 1.0, 100.0])
def test_partly_yielded_coaxial_bingham_gap_converges_at_default_settings(speed):
    """Radii 0.5 and 1 m, mu_p = tau_y = 1. Reference: gnflow.analytic.coaxial_flow,
    mu_p Omega / tau_y = (x - 1)/2 - ln(x)/2 with x = tau_i / tau_y while partly
    yielded, Reiner-Riwlin when fully yielded; the yielded radius r_y = sqrt(M / (2 pi
    tau_y)) from the constant torque M."""
    from gnflow.post import fields
    from gnflow.yielded import plug_edges_1d
    model = rheology.Bingham(1.0, 1.0)
    case = Case.from_dict({"fluid": {"model": "bingham", "yield_stress": 1.0,
                                     "plastic_viscosity": 1.0},
                           "geometry": {"shape": "coaxial-cylinders", "inner_radius": 0.5,
                                        "outer_radius": 1.0},
                           "drive": {"inner_angular_speed": speed}})
    solution = solve(case)
    assert solution.converged, solution.message
    reference = analytic.coaxial_flow(model, 0.5, 1.0, speed, 0.0, regularised=False)
    from gnflow.post import torque_per_length
    torque = torque_per_length(solution)[0]
    assert torque == pytest.approx(reference.torque_per_length, rel=1e-3)
    yielded_radius = math.sqrt(torque / (2 * math.pi * 1.0))
    f = fields(solution)
    plugs = plug_edges_1d(f["x"][0], f["shear_stress"], 1.0).intervals
    if yielded_radius < 1.0:
        assert plugs and plugs[-1][1] == 1.0
        # within three cells (200 across 0.5 m): the regularised stress crosses tau_y
        # inside the yielded layer, most at the slowest speed (layer 3 % of the gap)
        assert plugs[-1][0] == pytest.approx(yielded_radius, abs=3 * 0.5 / 200)
    else:
        assert not plugs


# ------------------------------------------------------------ yielded regions

def test_plug_edges_1d_are_exact_for_a_linear_stress_between_nodes():
    """Slit, Bingham: the stress is |G| |y - h/2| by statics and the plug is
    |y - h/2| <= tau_y / |G| (exact, Bird, Stewart & Lightfoot); the nodes miss the edge."""
    from gnflow.yielded import plug_edges_1d
    gap, gradient, tau_y = 0.02, -6000.0, 31.0
    y = np.linspace(0.0, gap, 101)
    edges = plug_edges_1d(y, abs(gradient) * np.abs(y - gap / 2), tau_y)
    half = tau_y / abs(gradient)
    (start, end), = edges.intervals
    assert start == pytest.approx(gap / 2 - half, abs=1e-15)
    assert end == pytest.approx(gap / 2 + half, abs=1e-15)
    assert 0 < edges.uncertainty <= gap / 100


def test_plug_edges_1d_of_a_solved_slit_within_the_regularisation_smearing():
    """The solved, regularised slit: its plug edge lies within half a cell of the exact
    one (the regularised stress crosses tau_y slightly inside the yielded layer)."""
    from gnflow.post import fields
    from gnflow.yielded import plug_edges_1d
    gap, gradient, tau_y, cells = 0.02, -6000.0, 31.0, 50
    solution = solve(Case.from_dict({
        "fluid": {"model": "bingham", "yield_stress": tau_y, "plastic_viscosity": 0.6},
        "geometry": {"shape": "slit", "gap": gap}, "drive": {"pressure_gradient": gradient},
        "mesh": {"cells": cells}}))
    f = fields(solution)
    (start, end), = plug_edges_1d(f["x"][0], f["shear_stress"], tau_y).intervals
    half = tau_y / abs(gradient)
    assert abs(start - (gap / 2 - half)) <= 0.5 * gap / cells
    assert abs(end - (gap / 2 + half)) <= 0.5 * gap / cells


def test_unyielded_fraction_2d_of_a_disc_plug_converges_and_its_uncertainty_bounds_it():
    """A pipe section meshed in 2-D with the Buckingham-Reiner stress tau = |G| r / 2:
    the plug r < r_p = 2 tau_y / |G| has area fraction (r_p / R)^2."""
    from skfem import Basis, ElementTriP2, MeshTri
    from gnflow.yielded import p2_sub_triangles, unyielded_fraction_2d
    r_p = 0.43
    errors = []
    for refine in (3, 4):
        mesh = MeshTri.init_circle(refine)
        basis = Basis(mesh, ElementTriP2())
        points, triangles = p2_sub_triangles(basis)
        radius = np.hypot(*points)
        result = unyielded_fraction_2d(points, triangles, radius - r_p)
        exact_on_mesh = r_p ** 2 * math.pi / _polygon_area(mesh)
        errors.append(abs(result.fraction - exact_on_mesh))
        assert errors[-1] <= result.uncertainty
    assert errors[1] < errors[0] / 3     # second order for a smooth level set


def _polygon_area(mesh):
    p, t = mesh.p, mesh.t
    a, b, c = p[:, t[0]], p[:, t[1]], p[:, t[2]]
    return float(np.sum(0.5 * np.abs((b[0] - a[0]) * (c[1] - a[1]) - (c[0] - a[0]) * (b[1] - a[1]))))


def test_p2_sub_triangles_tile_the_mesh():
    from skfem import Basis, ElementTriP2, MeshTri
    from gnflow.yielded import p2_sub_triangles, unyielded_fraction_2d
    mesh = MeshTri.init_circle(2)
    points, triangles = p2_sub_triangles(Basis(mesh, ElementTriP2()))
    whole = unyielded_fraction_2d(points, triangles, -np.ones(points.shape[1]))
    assert whole.fraction == 1.0
    a, b, c = (points[:, triangles[k]] for k in range(3))
    areas = 0.5 * np.abs((b[0] - a[0]) * (c[1] - a[1]) - (c[0] - a[0]) * (b[1] - a[1]))
    assert areas.min() > 0 and areas.sum() == pytest.approx(_polygon_area(mesh), rel=1e-12)


# ------------------------------------------------------- 2-D stopping warning

@pytest.mark.parametrize("share, flows", [(0.95, True), (1.05, False)])
def test_square_duct_warns_from_its_own_stopping_gradient(share, flows):
    """tau_y = share * tau_c with tau_c = |G| L / (2 + sqrt(pi)) (Mosolov & Miasnikov
    1965): below it the duct flows (near-stop warning), above it the material stays at
    rest. The largest wall stress, |G| L / 2 * 0.68 or so, is not the criterion."""
    side, gradient = 1.0, -1.0
    tau_y = share * abs(gradient) * side / (2 + math.sqrt(math.pi))
    solution = solve(Case.from_dict({
        "fluid": {"model": "bingham", "yield_stress": tau_y, "plastic_viscosity": 1.0},
        "geometry": {"shape": "rectangle", "width": side, "height": side},
        "drive": {"pressure_gradient": gradient}, "mesh": {"cells": 8}}))
    text = " ".join(solution.warnings)
    assert ("does not flow" in text) is not flows
    if flows:
        assert "stopping" in text and "exact method" in text
