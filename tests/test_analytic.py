"""Reference solutions (gnflow.analytic) against published formulas, each other and limits.

Three layers:

* closed forms against textbook formulas written out again here, with their sources,
  and against checks that use no formula at all (quadrature of the velocity for the
  flow rate, finite differences of the velocity for the shear stress);
* the semi-analytic quadrature solutions against every closed form, and for models
  with no closed form against the same formula-free checks;
* limits: thin inner rod -> pipe, narrow annulus -> slit, narrow Couette gap -> plane
  Couette, regularised -> exact yield stress.

Values marked "(recalled from memory)" were not looked up while writing the test.
"""

import doctest

import numpy as np
import pytest
from scipy.optimize import brentq

from gnflow import analytic
from gnflow.analytic import (annulus_flow, annulus_newtonian, coaxial_flow, coaxial_newtonian,
                             coaxial_power_law, pipe_bingham, pipe_flow, pipe_newtonian,
                             pipe_power_law, rate_from_stress, slit_bingham, slit_flow,
                             slit_newtonian, slit_power_law)
from gnflow.rheology import (Bingham, Carreau, CarreauYasuda, Cross, HerschelBulkley,
                             Newtonian, PowerLaw)

FLOW_INDICES = (0.3, 0.5, 0.8, 1.0, 1.2, 1.5)
SEMI_ANALYTIC_TOLERANCE = 1e-9


def relative_error(value, reference):
    return abs(value - reference) / abs(reference)


def profile_error(values, reference):
    """Largest deviation, relative to the largest reference magnitude."""
    return np.max(np.abs(values - reference)) / np.max(np.abs(reference))


_GAUSS_NODES, _GAUSS_WEIGHTS = np.polynomial.legendre.leggauss(20)


def integrate_profile(function, edges, panels=80):
    """Composite 20-point Gauss over panels between sorted ``edges``, in one call.

    Used to integrate a velocity profile for the flow rate independently of the
    integration by parts inside gnflow.analytic; profile kinks go at the edges.
    """
    edges = np.unique(np.asarray(edges, dtype=float))
    bounds = np.concatenate([np.linspace(a, b, panels + 1)[:-1] for a, b in
                             zip(edges[:-1], edges[1:])] + [edges[-1:]])
    lower, upper = bounds[:-1], bounds[1:]
    half = 0.5 * (upper - lower)
    x = (0.5 * (upper + lower))[:, None] + half[:, None] * _GAUSS_NODES
    return float(np.sum(half * (function(x) @ _GAUSS_WEIGHTS)))


def zero_stress_position(reference, lower, upper):
    return brentq(lambda x: float(reference.shear_stress(x)), lower, upper, xtol=1e-15)


def zero_stress_edges(reference, lower, upper):
    """The zero-stress position as a quadrature edge, if the stress changes sign."""
    if float(reference.shear_stress(lower)) * float(reference.shear_stress(upper)) < 0:
        return [zero_stress_position(reference, lower, upper)]
    return []


def check_axial_consistency(reference, flow_curve, lower, upper, pressure_gradient,
                            axisymmetric, wall_speeds, edges=()):
    """Formula-free checks of an axial reference.

    * wall speeds met; * flow rate = integral of the velocity over the section;
    * the momentum balance (1/r^k) d(r^k tau)/dx = G on the reported stress;
    * the flow curve, tau = flow_curve(dw/dx) with dw/dx by central differences,
      where flow_curve maps a signed rate to a signed stress (None where undefined).
    """
    span = upper - lower
    for position, speed in wall_speeds.items():
        assert abs(float(reference.velocity(position)) - speed) <= 1e-12 * (
            1 + np.max(np.abs(reference.velocity(np.linspace(lower, upper, 11)))))
    if axisymmetric:
        flow_rate = integrate_profile(lambda r: 2 * np.pi * r * reference.velocity(r),
                                      [lower, upper, *edges])
    else:
        flow_rate = integrate_profile(reference.velocity, [lower, upper, *edges])
    assert relative_error(reference.flow_rate, flow_rate) < 1e-10

    x = np.linspace(lower + 0.01 * span, upper - 0.01 * span, 301)
    step = 1e-5 * span
    weight = (lambda r: r) if axisymmetric else (lambda r: np.ones_like(r))
    divergence = (weight(x + step) * reference.shear_stress(x + step)
                  - weight(x - step) * reference.shear_stress(x - step)) / (2 * step * weight(x))
    assert np.allclose(divergence, pressure_gradient, rtol=1e-8,
                       atol=1e-8 * abs(pressure_gradient))

    step = 2e-5 * span   # small for truncation, large enough that roundoff in w stays below
    rate = (reference.velocity(x + step) - reference.velocity(x - step)) / (2 * step)
    stress = reference.shear_stress(x)
    expected = flow_curve(rate, stress)
    defined = np.isfinite(expected)
    assert defined.sum() >= 3
    assert np.max(np.abs(expected[defined] - stress[defined])) <= 1e-6 * np.max(np.abs(stress))


def generalized_newtonian_flow_curve(model):
    def flow_curve(rate, stress):
        with np.errstate(invalid="ignore"):   # a power law has no finite stress at rate 0
            expected = np.sign(rate) * model.stress(np.abs(rate))
        if getattr(model, "regularisation", None) == "bi-viscous":
            # a difference quotient straddling the critical rate sees the kink, not the law
            critical = model.regularisation_parameter
            expected[np.abs(np.abs(rate) / critical - 1) < 0.05] = np.nan
        return expected
    return flow_curve


def herschel_bulkley_flow_curve(yield_stress, consistency, flow_index):
    """The ideal law, defined only where the material yields (|tau| > tau_y, by a margin)."""
    def flow_curve(rate, stress):
        yielded = np.abs(stress) > 1.02 * yield_stress
        ideal = np.sign(rate) * (yield_stress + consistency * np.abs(rate) ** flow_index)
        return np.where(yielded, ideal, np.nan)
    return flow_curve


def test_docstring_examples_run():
    result = doctest.testmod(analytic, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 15 and result.failed == 0


# --------------------------------------------------------------------------------------
# closed forms against published formulas


def test_hagen_poiseuille_worked_value():
    """Q = pi R^4 (-G) / (8 mu): Hagen-Poiseuille (Bird, Stewart & Lightfoot, Transport
    Phenomena, 2nd ed., section 2.3). Water at 20 C, mu = 1.0016 mPa s (IAPWS viscosity
    formulation, recalled from memory), in a 2 mm bore under 1 kPa/m; the value
    3.92072e-7 m^3/s was worked by hand from the formula."""
    reference = pipe_newtonian(radius=1e-3, viscosity=1.0016e-3, pressure_gradient=-1000.0)
    assert relative_error(reference.flow_rate, 3.92072e-7) < 2e-6
    assert reference.wall_shear_stress["wall"] == pytest.approx(0.5)   # -G R / 2


def test_fanning_friction_factor_times_reynolds_number():
    """Laminar f Re = 16 for the circular tube and 24 for parallel plates, with Re on the
    hydraulic diameter (Shah & London, Laminar Flow Forced Convection in Ducts, 1978;
    recalled from memory). f = tau_w / (rho U^2 / 2), Re = rho U D_h / mu."""
    mu, G = 0.02, -350.0
    pipe = pipe_newtonian(0.015, mu, G)
    mean_velocity = pipe.flow_rate / (np.pi * 0.015**2)
    f_re = 2 * pipe.wall_shear_stress["wall"] * (2 * 0.015) / (mu * mean_velocity)
    assert f_re == pytest.approx(16.0, rel=1e-13)

    gap = 0.004
    slit = slit_newtonian(gap, mu, G)
    mean_velocity = slit.flow_rate / gap
    f_re = 2 * slit.wall_shear_stress["top"] * (2 * gap) / (mu * mean_velocity)
    assert f_re == pytest.approx(24.0, rel=1e-13)


@pytest.mark.parametrize("radius_ratio", [0.01, 0.2, 0.5, 0.9])
def test_newtonian_annulus_against_bird_stewart_lightfoot(radius_ratio):
    """Concentric annulus (Bird, Stewart & Lightfoot, Transport Phenomena, 2nd ed.,
    section 2.4): Q = (pi (-G) R^4 / 8 mu) [(1 - k^4) - (1 - k^2)^2 / ln(1/k)], maximum
    velocity (zero stress) at r = lambda R, lambda^2 = (1 - k^2) / (2 ln(1/k)); the wall
    stresses balance the pressure force, 2 pi (R_i tau_i + R_o tau_o) = -G pi (R_o^2 - R_i^2)."""
    R, mu, G = 0.04, 0.3, -1500.0
    k = radius_ratio
    reference = annulus_newtonian(k * R, R, mu, G)
    bsl = np.pi * -G * R**4 / (8 * mu) * ((1 - k**4) - (1 - k**2) ** 2 / np.log(1 / k))
    # the BSL bracket cancels as k -> 1: (1 - k^4) and the log term agree to ~3 digits at 0.9
    assert relative_error(reference.flow_rate, bsl) < 1e-11
    lam = np.sqrt((1 - k**2) / (2 * np.log(1 / k)))
    assert abs(float(reference.shear_stress(lam * R))) < 1e-12 * abs(G) * R
    walls = reference.wall_shear_stress
    assert 2 * np.pi * (k * R * walls["inner"] + R * walls["outer"]) == pytest.approx(
        -G * np.pi * R**2 * (1 - k**2), rel=1e-13)
    check_axial_consistency(reference, lambda rate, stress: mu * rate, k * R, R, G, True,
                            {k * R: 0.0, R: 0.0})


def test_plane_couette_poiseuille_profile():
    """Plane Couette-Poiseuille flow (Bird, Stewart & Lightfoot, Transport Phenomena,
    2nd ed., ch. 2, slit flow plus plane Couette flow):
    w = w_b + (w_t - w_b) y/h + (-G / 2 mu) y (h - y), q = h (w_b + w_t)/2 - G h^3/(12 mu)."""
    h, mu, G, w_b, w_t = 0.003, 0.8, -9000.0, 0.05, -0.12
    reference = slit_newtonian(h, mu, G, w_b, w_t)
    y = np.linspace(0, h, 31)
    expected = w_b + (w_t - w_b) * y / h + (-G / (2 * mu)) * y * (h - y)
    assert profile_error(reference.velocity(y), expected) < 1e-14
    assert relative_error(reference.flow_rate, h * (w_b + w_t) / 2 - G * h**3 / (12 * mu)) < 1e-14
    assert reference.wall_shear_stress["bottom"] + reference.wall_shear_stress["top"] == \
        pytest.approx(-G * h, rel=1e-13)   # force balance on the fluid slab
    check_axial_consistency(reference, lambda rate, stress: mu * rate, 0.0, h, G, False,
                            {0.0: w_b, h: w_t})
    couette = slit_newtonian(h, mu, 0.0, 0.0, 0.3)   # no pressure: linear profile
    assert profile_error(couette.velocity(y), 0.3 * y / h) < 1e-15


def test_couette_torque_formula():
    """Torque per length M = 4 pi mu W R_i^2 R_o^2 / (R_o^2 - R_i^2) for the inner cylinder
    turning at W inside a fixed outer one (Bird, Stewart & Lightfoot, Transport Phenomena,
    2nd ed., section 3.6, tangential annular flow; recalled from memory). The torque
    -2 pi r^3 mu domega/dr, by finite differences, is the same at every radius."""
    Ri, Ro, mu, W = 0.02, 0.025, 0.5, 12.0
    reference = coaxial_newtonian(Ri, Ro, mu, W)
    expected = 4 * np.pi * mu * W * Ri**2 * Ro**2 / (Ro**2 - Ri**2)
    assert relative_error(reference.torque_per_length, expected) < 1e-14
    assert float(reference.angular_speed(Ri)) == pytest.approx(W, rel=1e-14)
    assert abs(float(reference.angular_speed(Ro))) < 1e-13 * W
    r = np.linspace(Ri * 1.01, Ro * 0.99, 13)
    step = 1e-7 * Ri
    slope = (reference.angular_speed(r + step) - reference.angular_speed(r - step)) / (2 * step)
    assert np.allclose(-2 * np.pi * r**3 * mu * slope, expected, rtol=1e-7)
    assert np.allclose(reference.shear_stress(r), mu * r * slope, rtol=1e-7)


@pytest.mark.parametrize("flow_index", FLOW_INDICES)
def test_power_law_pipe_and_slit_formulas(flow_index):
    """Power-law pipe Q = (pi n R^3 / (3n+1)) (tau_w / K)^(1/n), tau_w = -G R / 2 (Bird,
    Stewart & Lightfoot, Transport Phenomena, 2nd ed., section 8.3, tube-flow example;
    recalled from memory). Slit, half-gap B: q = (2 n B^2 / (2n+1)) (tau_w / K)^(1/n),
    tau_w = -G B (the same integration over the linear stress profile)."""
    K, n, G = 2.5, flow_index, -4.0e4
    R = 0.006
    pipe = pipe_power_law(R, K, n, G)
    tau_w = -G * R / 2
    assert relative_error(pipe.flow_rate,
                          np.pi * n * R**3 / (3 * n + 1) * (tau_w / K) ** (1 / n)) < 1e-13
    check_axial_consistency(pipe, generalized_newtonian_flow_curve(PowerLaw(K, n)), 0.0, R, G,
                            True, {R: 0.0})

    h = 0.004
    slit = slit_power_law(h, K, n, G)
    tau_w = -G * h / 2
    assert relative_error(slit.flow_rate,
                          2 * n * (h / 2) ** 2 / (2 * n + 1) * (tau_w / K) ** (1 / n)) < 1e-13
    check_axial_consistency(slit, generalized_newtonian_flow_curve(PowerLaw(K, n)), 0.0, h, G,
                            False, {0.0: 0.0, h: 0.0}, edges=[h / 2])


@pytest.mark.parametrize("flow_index", FLOW_INDICES)
def test_power_law_couette_gap(flow_index):
    """Power-law Couette gap: at n = 1 it is the Newtonian torque of the Couette formula;
    for any n the torque from finite differences of omega is constant across the gap and
    the cylinders turn at their prescribed speeds."""
    Ri, Ro, K, n, W_i, W_o = 0.03, 0.04, 1.7, flow_index, 9.0, -2.0
    reference = coaxial_power_law(Ri, Ro, K, n, W_i, W_o)
    assert float(reference.angular_speed(Ri)) == pytest.approx(W_i, rel=1e-13)
    assert float(reference.angular_speed(Ro)) == pytest.approx(W_o, rel=1e-13)
    r = np.linspace(Ri * 1.01, Ro * 0.99, 11)
    step = 1e-7 * Ri
    slope = (reference.angular_speed(r + step) - reference.angular_speed(r - step)) / (2 * step)
    rate = np.abs(r * slope)
    torque = -2 * np.pi * r**2 * np.sign(slope) * K * rate**n
    assert np.allclose(torque, reference.torque_per_length, rtol=1e-6)
    if n == 1.0:
        couette = 4 * np.pi * K * (W_i - W_o) * Ri**2 * Ro**2 / (Ro**2 - Ri**2)
        assert relative_error(reference.torque_per_length, couette) < 1e-13


@pytest.mark.parametrize("phi", [0.0, 0.1, 0.5, 0.9])
def test_buckingham_reiner(phi):
    """Buckingham-Reiner: Q = (pi R^4 (-G) / 8 mu_p)(1 - 4 phi/3 + phi^4/3), phi = tau_y/tau_w
    (Buckingham 1921, Proc. ASTM 21; recalled from memory); plug radius phi R."""
    R, mu_p, G = 0.005, 0.1, -8000.0
    tau_w = -G * R / 2
    yield_stress = phi * tau_w
    reference = pipe_bingham(R, yield_stress, mu_p, G)
    expected = np.pi * R**4 * -G / (8 * mu_p) * (1 - 4 * phi / 3 + phi**4 / 3)
    assert relative_error(reference.flow_rate, expected) < 1e-13
    assert reference.plugs == (((0.0, pytest.approx(phi * R, abs=1e-15)),) if phi > 0 else ())
    check_axial_consistency(reference, herschel_bulkley_flow_curve(yield_stress, mu_p, 1.0),
                            0.0, R, G, True, {R: 0.0}, edges=[phi * R])


def test_buckingham_reiner_worked_value():
    """R = 5 mm, tau_y = 10 Pa, mu_p = 0.1 Pa s, G = -8 kPa/m: tau_w = 20 Pa, phi = 1/2,
    Q = pi 6.25e-6 (1 - 2/3 + 1/48) = 6.95405e-6 m^3/s (worked by hand from the
    Buckingham-Reiner equation, Buckingham 1921; recalled from memory)."""
    reference = pipe_bingham(0.005, 10.0, 0.1, -8000.0)
    assert relative_error(reference.flow_rate, 6.95405e-6) < 2e-6
    assert reference.plugs == ((0.0, 0.0025),)


@pytest.mark.parametrize("phi", [0.2, 0.6, 0.95])
def test_bingham_slit(phi):
    """Plane Poiseuille flow of a Bingham plastic, half-gap B:
    q = (2 (-G) B^3 / 3 mu_p)(1 - 3 phi/2 + phi^3/2), phi = tau_y / tau_w, plug |y - B| <= phi B
    (the plane counterpart of Buckingham-Reiner; e.g. Bird, Dai & Yarusso 1983, Rev. Chem.
    Eng. 1; recalled from memory)."""
    h, mu_p, G = 0.01, 0.05, -3000.0
    B = h / 2
    yield_stress = phi * -G * B
    reference = slit_bingham(h, yield_stress, mu_p, G)
    expected = 2 * -G * B**3 / (3 * mu_p) * (1 - 1.5 * phi + 0.5 * phi**3)
    assert relative_error(reference.flow_rate, expected) < 1e-13
    assert np.allclose(reference.plugs, [(B - phi * B, B + phi * B)], rtol=0, atol=1e-15)
    check_axial_consistency(reference, herschel_bulkley_flow_curve(yield_stress, mu_p, 1.0),
                            0.0, h, G, False, {0.0: 0.0, h: 0.0},
                            edges=[B - phi * B, B + phi * B])


def test_closed_forms_reverse_with_the_pressure_gradient():
    """Flow toward -z when G > 0: every axial closed form changes sign, plugs stay put."""
    for build in (lambda G: slit_newtonian(0.01, 0.2, G), lambda G: pipe_newtonian(0.01, 0.2, G),
                  lambda G: annulus_newtonian(0.005, 0.01, 0.2, G),
                  lambda G: slit_power_law(0.01, 0.2, 0.6, G),
                  lambda G: pipe_power_law(0.01, 0.2, 1.4, G),
                  lambda G: pipe_bingham(0.01, 2.0, 0.2, G), lambda G: slit_bingham(0.01, 2.0, 0.2, G)):
        forward, backward = build(-1500.0), build(1500.0)
        assert backward.flow_rate == pytest.approx(-forward.flow_rate, rel=1e-14)
        assert forward.flow_rate > 0
        for wall, stress in forward.wall_shear_stress.items():
            assert backward.wall_shear_stress[wall] == pytest.approx(-stress, rel=1e-14)
        assert backward.plugs == forward.plugs


def test_bingham_closed_forms_stop_below_the_yield_stress():
    pipe = pipe_bingham(0.01, 50.0, 0.1, -1000.0)       # tau_w = 5 Pa < 50 Pa
    slit = slit_bingham(0.01, 50.0, 0.1, -1000.0)
    assert pipe.flow_rate == 0 and slit.flow_rate == 0
    assert pipe.plugs == ((0.0, 0.01),) and slit.plugs == ((0.0, 0.01),)
    assert np.all(pipe.velocity(np.linspace(0, 0.01, 9)) == 0)


# --------------------------------------------------------------------------------------
# semi-analytic against the closed forms


@pytest.mark.parametrize("flow_index", FLOW_INDICES)
def test_semi_analytic_power_law_matches_closed_forms(flow_index):
    K, n = 2.0, flow_index
    model = PowerLaw(K, n)
    h, G = 0.01, -3.0e4
    y = np.linspace(0, h, 501)
    numeric, exact = slit_flow(model, h, G), slit_power_law(h, K, n, G)
    assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.velocity(y), exact.velocity(y)) < SEMI_ANALYTIC_TOLERANCE
    for wall in ("bottom", "top"):
        assert relative_error(numeric.wall_shear_stress[wall],
                              exact.wall_shear_stress[wall]) < SEMI_ANALYTIC_TOLERANCE

    R = 0.01
    numeric, exact = pipe_flow(model, R, G), pipe_power_law(R, K, n, G)
    assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.velocity(y), exact.velocity(y)) < SEMI_ANALYTIC_TOLERANCE

    Ri, Ro = 0.02, 0.05
    r = np.linspace(Ri, Ro, 501)
    numeric, exact = coaxial_flow(model, Ri, Ro, 3.0, -1.0), coaxial_power_law(Ri, Ro, K, n, 3.0, -1.0)
    assert relative_error(numeric.torque_per_length, exact.torque_per_length) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.angular_speed(r), exact.angular_speed(r)) < SEMI_ANALYTIC_TOLERANCE
    assert np.allclose(numeric.shear_stress(r), exact.shear_stress(r), rtol=SEMI_ANALYTIC_TOLERANCE)


@pytest.mark.parametrize("speeds", [(0.0, 0.0), (0.2, -0.3), (0.0, 1.5), (-0.4, -0.4)])
def test_semi_analytic_newtonian_slit_with_moving_walls(speeds):
    """Couette + Poiseuille, including a wall speed large enough to move the zero-stress
    plane out of the gap, and pure Couette flow (G = 0)."""
    w_b, w_t = speeds
    mu, h = 0.3, 0.01
    y = np.linspace(0, h, 401)
    for G in (-500.0, 800.0, 0.0):
        if G == 0 and w_b == w_t:
            continue
        numeric = slit_flow(Newtonian(mu), h, G, w_b, w_t)
        exact = slit_newtonian(h, mu, G, w_b, w_t)
        assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
        assert profile_error(numeric.velocity(y), exact.velocity(y)) < SEMI_ANALYTIC_TOLERANCE
        for wall in ("bottom", "top"):
            assert numeric.wall_shear_stress[wall] == pytest.approx(
                exact.wall_shear_stress[wall], rel=SEMI_ANALYTIC_TOLERANCE, abs=1e-12)


@pytest.mark.parametrize("speeds", [(0.0, 0.0), (0.3, 0.0), (0.3, -0.1), (-2.0, 0.0)])
def test_semi_analytic_newtonian_annulus(speeds):
    """Annulus with the inner wall (and the outer) moving axially, against the closed
    form; the zero-stress radius of the still-walled case is the BSL lambda R."""
    w_i, w_o = speeds
    Ri, Ro, mu, G = 0.02, 0.05, 0.3, -500.0
    r = np.linspace(Ri, Ro, 401)
    numeric = annulus_flow(Newtonian(mu), Ri, Ro, G, w_i, w_o)
    exact = annulus_newtonian(Ri, Ro, mu, G, w_i, w_o)
    assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.velocity(r), exact.velocity(r)) < SEMI_ANALYTIC_TOLERANCE
    for wall in ("inner", "outer"):
        assert relative_error(numeric.wall_shear_stress[wall],
                              exact.wall_shear_stress[wall]) < SEMI_ANALYTIC_TOLERANCE
    if speeds == (0.0, 0.0):
        k = Ri / Ro
        lam = np.sqrt((1 - k**2) / (2 * np.log(1 / k)))   # BSL, section 2.4
        assert zero_stress_position(numeric, Ri, Ro) == pytest.approx(lam * Ro, rel=1e-12)


def test_semi_analytic_newtonian_pipe_and_coaxial():
    mu = 0.045
    r = np.linspace(0, 0.01, 201)
    numeric, exact = pipe_flow(Newtonian(mu), 0.01, -800.0), pipe_newtonian(0.01, mu, -800.0)
    assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.velocity(r), exact.velocity(r)) < SEMI_ANALYTIC_TOLERANCE
    assert relative_error(numeric.wall_shear_stress["wall"], 4.0) < SEMI_ANALYTIC_TOLERANCE
    # outer cylinder driven, inner at rest: negative torque on the inner cylinder
    r = np.linspace(0.03, 0.04, 201)
    numeric, exact = coaxial_flow(Newtonian(mu), 0.03, 0.04, 0.0, 5.0), \
        coaxial_newtonian(0.03, 0.04, mu, 0.0, 5.0)
    assert numeric.torque_per_length < 0
    assert relative_error(numeric.torque_per_length, exact.torque_per_length) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.angular_speed(r), exact.angular_speed(r)) < SEMI_ANALYTIC_TOLERANCE


@pytest.mark.parametrize("phi", [0.1, 0.5, 0.9])
@pytest.mark.parametrize("sign", [-1.0, 1.0])
def test_semi_analytic_bingham_exact_matches_closed_forms(phi, sign):
    """Ideal Bingham (regularised=False) against Buckingham-Reiner and the plane Bingham
    solution, with either sign of the pressure gradient; plugs coincide."""
    mu_p, G = 0.05, sign * 3000.0
    R = 0.01
    model = Bingham(phi * 3000.0 * R / 2, mu_p, "papanastasiou", 1e3)
    r = np.linspace(0, R, 301)
    numeric, exact = pipe_flow(model, R, G), pipe_bingham(R, model.yield_stress, mu_p, G)
    assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.velocity(r), exact.velocity(r)) < SEMI_ANALYTIC_TOLERANCE
    assert np.allclose(numeric.plugs, exact.plugs, rtol=1e-12, atol=1e-15)

    h = 0.01
    model = Bingham(phi * 3000.0 * h / 2, mu_p, "papanastasiou", 1e3)
    numeric, exact = slit_flow(model, h, G), slit_bingham(h, model.yield_stress, mu_p, G)
    assert relative_error(numeric.flow_rate, exact.flow_rate) < SEMI_ANALYTIC_TOLERANCE
    assert profile_error(numeric.velocity(r), exact.velocity(r)) < SEMI_ANALYTIC_TOLERANCE
    assert np.allclose(numeric.plugs, exact.plugs, rtol=1e-12, atol=1e-15)


def test_no_flow_when_the_wall_stress_does_not_exceed_the_yield_stress():
    model = HerschelBulkley(40.0, 2.0, 0.6, "papanastasiou", 1e3)
    slit = slit_flow(model, 0.01, -6000.0)                 # tau_w = 30 Pa
    pipe = pipe_flow(model, 0.01, -6000.0)
    annulus = annulus_flow(model, 0.005, 0.01, -6000.0)
    for reference, lower, upper in ((slit, 0.0, 0.01), (pipe, 0.0, 0.01), (annulus, 0.005, 0.01)):
        assert reference.flow_rate == 0
        assert np.all(reference.velocity(np.linspace(lower, upper, 11)) == 0)
        assert reference.plugs == ((lower, upper),)
    # the stress is then indeterminate; the symmetric (Newtonian-limit) field is reported
    assert slit.wall_shear_stress == {"bottom": 30.0, "top": 30.0}
    newtonian = annulus_newtonian(0.005, 0.01, 1.0, -6000.0)
    for wall in ("inner", "outer"):
        assert annulus.wall_shear_stress[wall] == pytest.approx(newtonian.wall_shear_stress[wall])


def test_semi_analytic_herschel_bulkley_slit_against_direct_integration():
    """Herschel-Bulkley between still plates, integrated here by hand:
    dw/ds = -((|G| s - tau_y)/K)^(1/n) for s = |y - B| > s_p = tau_y/|G|, so
    w = (n/(n+1)) (|G|/K)^(1/n) [(B - s_p)^(1+1/n) - (s - s_p)^(1+1/n)], plug for s <= s_p."""
    tau_y, K, n, G, h = 8.0, 2.5, 0.45, -3000.0, 0.01
    B, s_p = h / 2, tau_y / 3000.0
    numeric = slit_flow(HerschelBulkley(tau_y, K, n, "papanastasiou", 1e3), h, G)
    y = np.linspace(0, h, 401)
    s = np.maximum(np.abs(y - B), s_p)
    by_hand = n / (n + 1) * (-G / K) ** (1 / n) * ((B - s_p) ** (1 + 1 / n) - (s - s_p) ** (1 + 1 / n))
    assert profile_error(numeric.velocity(y), by_hand) < SEMI_ANALYTIC_TOLERANCE
    assert np.allclose(numeric.plugs, [(B - s_p, B + s_p)], rtol=0, atol=1e-15)


def test_annulus_bingham_plug_straddles_the_zero_stress_radius():
    """Ideal Bingham in an annulus: one plug, bounded by tau = +tau_y and tau = -tau_y and
    containing the zero-stress radius, moving rigidly; formula-free checks elsewhere."""
    tau_y, mu_p, Ri, Ro, G = 8.0, 0.05, 0.02, 0.05, -5000.0
    reference = annulus_flow(Bingham(tau_y, mu_p, "papanastasiou", 1e3), Ri, Ro, G)
    (plug_start, plug_end), = reference.plugs
    assert float(reference.shear_stress(plug_start)) == pytest.approx(tau_y, rel=1e-12)
    assert float(reference.shear_stress(plug_end)) == pytest.approx(-tau_y, rel=1e-12)
    assert plug_start < zero_stress_position(reference, Ri, Ro) < plug_end
    plug_speed = reference.velocity(np.linspace(plug_start, plug_end, 21))
    assert np.ptp(plug_speed) <= 1e-14 * plug_speed[0] and plug_speed[0] > 0
    check_axial_consistency(reference, herschel_bulkley_flow_curve(tau_y, mu_p, 1.0), Ri, Ro, G,
                            True, {Ri: 0.0, Ro: 0.0}, edges=reference.plugs[0])


def bingham_couette_speed_difference(torque, yield_stress, plastic_viscosity, Ri, Ro):
    """W_i - W_o for an ideal Bingham plastic sheared by torque per length M, derived here
    from |r domega/dr| = (M / (2 pi r^2) - tau_y) / mu_p where that is positive. Sheared
    out to r_y = sqrt(M / (2 pi tau_y)):
    fully sheared (r_y >= R_o): (M / 4 pi mu_p)(R_i^-2 - R_o^-2) - (tau_y / mu_p) ln(R_o/R_i),
    the Reiner-Riwlin equation (Reiner & Riwlin 1927, Kolloid-Z.; recalled from memory);
    partly sheared: (tau_y / 2 mu_p) [(r_y/R_i)^2 - 1 - 2 ln(r_y/R_i)]."""
    yield_radius = np.sqrt(torque / (2 * np.pi * yield_stress))
    if yield_radius >= Ro:
        return (torque / (4 * np.pi * plastic_viscosity) * (Ri**-2 - Ro**-2)
                - yield_stress / plastic_viscosity * np.log(Ro / Ri))
    ratio = yield_radius / Ri
    return yield_stress / (2 * plastic_viscosity) * (ratio**2 - 1 - 2 * np.log(ratio))


@pytest.mark.parametrize("inner_speed", [0.5, 3.0, 40.0, 400.0])
def test_coaxial_bingham_partially_and_fully_sheared(inner_speed):
    """Torque -> angular speed consistency for an ideal Bingham plastic; where the gap is
    only partly sheared, the outer part turns rigidly with the outer cylinder."""
    tau_y, mu_p, Ri, Ro, W_o = 8.0, 0.05, 0.02, 0.05, 0.7
    model = Bingham(tau_y, mu_p, "papanastasiou", 1e3)
    reference = coaxial_flow(model, Ri, Ro, inner_speed + W_o, W_o)
    torque = reference.torque_per_length
    assert torque > 2 * np.pi * Ri**2 * tau_y      # the inner wall yields
    assert bingham_couette_speed_difference(torque, tau_y, mu_p, Ri, Ro) == pytest.approx(
        inner_speed, rel=SEMI_ANALYTIC_TOLERANCE)
    yield_radius = np.sqrt(torque / (2 * np.pi * tau_y))
    r = np.linspace(Ri, Ro, 301)
    omega = reference.angular_speed(r)
    assert omega[0] == pytest.approx(inner_speed + W_o, rel=1e-11)
    if yield_radius < Ro:
        assert np.allclose(reference.plugs, [(yield_radius, Ro)], rtol=1e-13, atol=0)
        assert np.all(omega[r >= yield_radius] == W_o)   # rigid with the outer cylinder
        sheared = r[r < yield_radius]
        ratio = yield_radius / sheared
        by_hand = W_o + tau_y / (2 * mu_p) * (ratio**2 - 1 - 2 * np.log(ratio))
        assert profile_error(omega[r < yield_radius] - W_o, by_hand - W_o) < SEMI_ANALYTIC_TOLERANCE
    else:
        assert reference.plugs == ()


def test_coaxial_yield_stress_fluid_at_rest_when_cylinders_turn_together():
    model = HerschelBulkley(5.0, 1.0, 0.5, "papanastasiou", 1e3)
    reference = coaxial_flow(model, 0.01, 0.02, 2.0, 2.0)
    assert reference.torque_per_length == 0
    assert reference.plugs == ((0.01, 0.02),)
    assert np.all(reference.angular_speed(np.linspace(0.01, 0.02, 5)) == 2.0)


GENERAL_MODELS = [
    Carreau(12.0, 0.01, 0.7, 0.35),
    CarreauYasuda(12.0, 0.0, 0.7, 0.35, 0.8),
    CarreauYasuda(3.0, 0.1, 2.0, 1.4, 3.0),
    Cross(8.0, 0.02, 0.3, 0.75),
    HerschelBulkley(3.0, 0.4, 1.3, "papanastasiou", 50.0),
    Bingham(8.0, 0.05, "bi-viscous", 1e-2),
]


@pytest.mark.parametrize("model", GENERAL_MODELS, ids=lambda m: m.name)
def test_semi_analytic_general_models_are_self_consistent(model):
    """Models with no closed form: wall speeds met, flow rate equal to the integral of the
    velocity, momentum balance and flow curve satisfied (regularised curves inverted)."""
    flow_curve = generalized_newtonian_flow_curve(model)
    h, G = 0.01, -6000.0
    slit = slit_flow(model, h, G, 0.05, -0.1, regularised=True)
    check_axial_consistency(slit, flow_curve, 0.0, h, G, False, {0.0: 0.05, h: -0.1},
                            edges=zero_stress_edges(slit, 0.0, h))
    pipe = pipe_flow(model, 0.008, G, regularised=True)
    check_axial_consistency(pipe, flow_curve, 0.0, 0.008, G, True, {0.008: 0.0})
    Ri, Ro = 0.004, 0.012
    annulus = annulus_flow(model, Ri, Ro, G, 0.02, 0.0, regularised=True)
    check_axial_consistency(annulus, flow_curve, Ri, Ro, G, True, {Ri: 0.02, Ro: 0.0},
                            edges=zero_stress_edges(annulus, Ri, Ro))
    walls = annulus.wall_shear_stress
    assert 2 * np.pi * (Ri * walls["inner"] + Ro * walls["outer"]) == pytest.approx(
        -G * np.pi * (Ro**2 - Ri**2), rel=1e-12)
    coaxial = coaxial_flow(model, Ri, Ro, 6.0, regularised=True)
    r = np.linspace(Ri * 1.01, Ro * 0.99, 21)
    step = 1e-6 * Ri
    slope = (coaxial.angular_speed(r + step) - coaxial.angular_speed(r - step)) / (2 * step)
    torque = -2 * np.pi * r**2 * np.sign(slope) * model.stress(np.abs(r * slope))
    assert np.allclose(torque, coaxial.torque_per_length, rtol=1e-6)


def test_pressure_gradient_sign_reverses_semi_analytic_flows():
    model = CarreauYasuda(12.0, 0.0, 0.7, 0.35, 0.8)
    r = np.linspace(0.004, 0.012, 41)
    forward = annulus_flow(model, 0.004, 0.012, -6000.0)
    backward = annulus_flow(model, 0.004, 0.012, 6000.0)
    assert forward.flow_rate > 0
    assert backward.flow_rate == pytest.approx(-forward.flow_rate, rel=1e-11)
    assert np.allclose(backward.velocity(r), -forward.velocity(r), rtol=1e-11, atol=1e-14)


# --------------------------------------------------------------------------------------
# inverting the flow curve


@pytest.mark.parametrize("model", [Newtonian(0.045), PowerLaw(2.5, 0.3), PowerLaw(0.8, 1.5),
                                   *GENERAL_MODELS, Bingham(8.0, 0.05, "papanastasiou", 1e5)],
                         ids=lambda m: m.name)
def test_rate_from_stress_inverts_the_flow_curve(model):
    rate = np.logspace(-6, 6, 2001)
    stress = model.stress(rate)
    recovered = rate_from_stress(model, stress, regularised=True)
    assert np.allclose(model.stress(recovered), stress, rtol=1e-13, atol=0)
    assert rate_from_stress(model, np.zeros(3), regularised=True).tolist() == [0, 0, 0]


def test_rate_from_stress_exact_yield_inverse():
    model = HerschelBulkley(5.0, 2.0, 0.5, "papanastasiou", 10.0)
    stress = np.array([0.0, 3.0, 5.0, 9.0, 25.0])
    assert rate_from_stress(model, stress).tolist() == [0.0, 0.0, 0.0, 4.0, 100.0]
    regularised = rate_from_stress(model, stress, regularised=True)
    assert np.all(regularised[1:3] > 0)   # regularised fluid creeps below the yield stress


def test_bad_input_is_refused():
    with pytest.raises(ValueError):
        rate_from_stress(Newtonian(1.0), np.array([-1.0]))
    with pytest.raises(ValueError, match="beyond its flow curve"):
        rate_from_stress(Cross(2.0, 0.0, 1.0, 1.0), np.array([3.0]))   # stress < eta_0/lambda
    with pytest.raises(ValueError):
        slit_newtonian(-0.01, 1.0, -1.0)
    with pytest.raises(ValueError):
        annulus_flow(Newtonian(1.0), 0.02, 0.01, -1.0)
    with pytest.raises(ValueError, match="positions must lie"):
        pipe_flow(Newtonian(1.0), 0.01, -1.0).velocity(np.array([0.02]))


def test_velocity_on_many_unsorted_points():
    """A profile evaluated at 2000 unsorted points (mesh nodes) equals the sorted evaluation
    (its speed is measured in bench/references.py, not here)."""
    reference = annulus_flow(CarreauYasuda(12.0, 0.0, 0.7, 0.35, 0.8), 0.02, 0.05, -5000.0,
                             0.1, 0.0)
    r = np.random.default_rng(7).uniform(0.02, 0.05, 2000)
    velocity = reference.velocity(r)
    order = np.argsort(r)
    assert np.allclose(velocity[order], reference.velocity(r[order]), rtol=0, atol=1e-15)


# --------------------------------------------------------------------------------------
# limits


def test_thin_inner_rod_annulus_tends_to_the_pipe():
    """Newtonian: the flow deficit of an annulus against the pipe is
    k^4 + (1 - k^2)^2 / ln(1/k) (from the BSL annulus formula), i.e. 1/ln(1/k) to leading
    order, a slow logarithmic approach. Shear-thinning fluids approach much faster: the
    stress C/r near the rod thins the fluid there. (For n > 1 a thin rod keeps a finite
    grip on the fluid, since a line force then gives a finite velocity: no pipe limit.)"""
    R, G = 0.05, -2000.0
    for k in (1e-2, 1e-4, 1e-8):
        deficit = 1 - annulus_flow(Newtonian(0.3), k * R, R, G).flow_rate / \
            pipe_flow(Newtonian(0.3), R, G).flow_rate
        assert deficit == pytest.approx(k**4 + (1 - k**2) ** 2 / np.log(1 / k), rel=1e-9)
    r = np.linspace(R / 2, R, 26)
    for model in (PowerLaw(2.0, 0.5), Carreau(12.0, 0.01, 0.7, 0.35)):
        pipe = pipe_flow(model, R, G)
        deficits = [1 - annulus_flow(model, k * R, R, G).flow_rate / pipe.flow_rate
                    for k in (1e-2, 1e-4, 1e-8)]
        assert deficits[0] > deficits[1] > deficits[2] > 0 and deficits[2] < 2e-3
        annulus = annulus_flow(model, 1e-8 * R, R, G)
        assert profile_error(annulus.velocity(r), pipe.velocity(r)) < 2e-3


def test_narrow_annulus_tends_to_the_slit():
    """Per unit mean circumference, the annulus flow rate tends to the slit's as the gap
    ratio e = h / R_mean -> 0, with error O(e^2) (curvature corrections cancel at first
    order about the mean radius)."""
    model = Carreau(12.0, 0.01, 0.7, 0.35)
    mean_radius = 0.05
    errors = []
    for ratio in (0.1, 0.01, 0.001):
        h = ratio * mean_radius
        G = -2e5 / ratio      # keeps the wall shear stress fixed
        annulus = annulus_flow(model, mean_radius - h / 2, mean_radius + h / 2, G)
        slit = slit_flow(model, h, G)
        errors.append(abs(annulus.flow_rate / (2 * np.pi * mean_radius) / slit.flow_rate - 1))
        assert errors[-1] < 0.05 * ratio**2
    assert 50 < errors[0] / errors[1] < 200 and 50 < errors[1] / errors[2] < 200


def test_narrow_coaxial_gap_tends_to_plane_couette():
    """Narrow Couette gap: tau -> K (W R / h)^n, so M -> 2 pi R^2 K (W R / h)^n, R the mean
    radius, with error O(h/R) at fixed inner speed."""
    model = PowerLaw(1.5, 0.6)
    R, W = 0.04, 5.0
    for ratio in (1e-2, 1e-3):
        h = ratio * R
        torque = coaxial_flow(model, R - h / 2, R + h / 2, W).torque_per_length
        plane = 2 * np.pi * R**2 * 1.5 * (W * R / h) ** 0.6
        assert relative_error(torque, plane) < 2 * ratio


def test_regularised_solutions_tend_to_the_exact_yield_stress_solution():
    """Papanastasiou (1987, J. Rheol. 31): the regularised flow approaches the ideal one as
    the exponent m grows, error roughly proportional to 1/m."""
    errors = {"pipe": [], "slit": [], "coaxial": []}
    for m in (1e1, 1e2, 1e3):
        bingham = Bingham(8.0, 0.05, "papanastasiou", m)
        herschel_bulkley = HerschelBulkley(8.0, 2.5, 0.45, "papanastasiou", m)
        errors["pipe"].append(relative_error(pipe_flow(bingham, 0.01, -3000.0, regularised=True).flow_rate,
                                             pipe_bingham(0.01, 8.0, 0.05, -3000.0).flow_rate))
        errors["slit"].append(relative_error(
            slit_flow(herschel_bulkley, 0.01, -3000.0, regularised=True).flow_rate,
            slit_flow(herschel_bulkley, 0.01, -3000.0).flow_rate))
        errors["coaxial"].append(relative_error(
            coaxial_flow(bingham, 0.02, 0.05, 3.0, regularised=True).torque_per_length,
            coaxial_flow(bingham, 0.02, 0.05, 3.0).torque_per_length))
    for kind, values in errors.items():
        assert all(5 < a / b < 20 for a, b in zip(values, values[1:])), (kind, values)
    assert errors["pipe"][-1] < 1e-5 and errors["slit"][-1] < 1e-3 and errors["coaxial"][-1] < 1e-4


@pytest.mark.parametrize("n", [0.2, 1.0, 2.0, 3.0])
def test_power_law_inverse_in_closed_form_matches_the_general_inversion(n):
    """The power law's closed-form inverse (the fast path) against the bracketed secant
    inversion every other model uses, over twenty decades of stress."""
    from gnflow.analytic import _invert_flow_curve, rate_from_stress
    from gnflow.rheology import PowerLaw
    model = PowerLaw(consistency=0.7, flow_index=n)
    stress = np.logspace(-8, 12, 81)
    assert np.allclose(rate_from_stress(model, stress), _invert_flow_curve(model, stress),
                       rtol=1e-12, atol=0)
