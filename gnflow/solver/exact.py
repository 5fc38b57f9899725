"""Exact yield-stress flow, without regularisation, as a conic program.

A steady fully developed flow of a Bingham or Herschel-Bulkley fluid minimises the
dissipation functional (the principle of minimum dissipation of viscoplastic flow,
e.g. Duvaut & Lions 1976; Glowinski 1984)

    J(u) = int a [ K (s |grad u|)^(n+1) / (n + 1) + tau_y s |grad u| ] dx + G int a u dx

over the fields ``u`` with the wall values prescribed (``a`` the area weight, ``s`` the
rate factor, ``G`` = dp/dz, 0 for rotational flow; see :mod:`gnflow.geometry`). The yield
term is not differentiable where the rate vanishes, which is what makes true plugs; the
regularised solver smooths it away, this module keeps it.

Discretised with the domain's finite elements, ``J`` becomes a conic program solved by
an interior-point method (clarabel):

* one second-order cone ``t_p >= |grad u(x_p)|`` per quadrature point ``x_p`` of the
  yield term, with ``tau_y w_p t_p`` in the objective (``w_p`` = quadrature weight times
  ``a s`` there);
* Bingham (``n = 1``): the viscous part is the quadratic form ``u^T A u / 2`` of the
  stiffness matrix with coefficient ``K a s^2``, handed to the solver as its quadratic
  objective, so it costs no cone at all;
* Herschel-Bulkley: one power cone ``r_p^(1/(n+1)) >= t_p`` per point and
  ``K s^(n+1) w_p r_p / (n + 1)`` in the objective;
* flow-rate drive: the linear constraint ``int a u = Q``; its multiplier is dp/dz.

The dual of the cone ``t_p >= |grad u|`` is the yield part of the stress at ``x_p``
divided by ``tau_y``, a vector of length <= 1. Complementarity at the optimum says: where
that length is below 1 (the stress is below the yield stress) the rate is zero. At the
interior-point solution both the rate and ``1 - |stress| / tau_y`` are small where they
should be zero, to the solver tolerance; a point is reported unyielded where the rate
(relative to the largest) is the smaller of the two, with no threshold chosen by hand.

The limit load (the drive at which a section stops flowing) is the dual problem
``G_c = tau_y min { int a |grad v| : v = 0 on the walls, int a v = 1 }``
(Mosolov & Miasnikov 1965, J. Appl. Math. Mech. 29), one more conic program.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import clarabel
import numpy as np
import scipy.sparse as sp
from skfem import Basis

from ..case import Case
from ..geometry import Domain, build_domain
from .assembly import AssemblyPlan
from .solution import Iteration, Solution, _History


#: Points per element of the yield-term quadrature, by element degree. P1 has a constant
#: gradient per element, so its centroid is exact (for the axisymmetric weight r too,
#: which is linear). P2 has a linear gradient whose length has a kink at the yield
#: surface, so no rule is exact there. Measured on the square duct (tau_y/tau_c = 0.5,
#: 63 cells): the centroid alone is 2.7e-4 off the converged flow rate, the three-point
#: rule 5e-6, for 3x the cones; the six-point rule changes it by 3e-6 more at 2x the cost.
YIELD_POINTS = {1: 1, 2: 3}


def yield_quadrature(dim: int, points: int):
    """A quadrature rule ``(X, W)`` on the reference element with ``points`` points.

    Lines: Gauss-Legendre on [0, 1]. Triangles: the centroid (1 point, order 1) or the
    three interior points of Strang & Fix (order 2), as scikit-fem provides them.
    """
    if dim == 1:
        x, w = np.polynomial.legendre.leggauss(points)
        return np.array([(x + 1) / 2]), w / 2
    if points == 1:
        return np.array([[1 / 3], [1 / 3]]), np.array([0.5])
    from skfem.quadrature import get_quadrature
    from skfem.refdom import RefTri
    if points != 3:
        raise ValueError(f"triangles take 1 or 3 yield-term points, not {points}")
    return get_quadrature(RefTri, 2)


@dataclass(frozen=True)
class ConicSection:
    """The discrete operators of the conic programs on one domain.

    ``gradient`` maps all dofs to ``grad u`` at the yield-term points, stacked point by
    point (``dim`` rows each); ``weight`` is the quadrature weight times ``a s`` at each
    point, so that ``sum weight * |grad u|`` is ``int a s |grad u|``.
    """

    domain: Domain
    free: np.ndarray
    gradient: sp.csr_matrix        # (points * dim, dofs)
    weight: np.ndarray             # (points,)
    rate_factor: np.ndarray        # (points,) s at each point
    load: np.ndarray               # (dofs,) int a v
    coordinates: np.ndarray        # (dim, elements, points per element) of the points
    points: int
    dim: int
    elements: int
    per_element: int


def conic_section(domain: Domain, points: int | None = None) -> ConicSection:
    """The operators of the conic programs on ``domain`` (``points`` per element)."""
    basis = domain.basis
    dim = basis.mesh.dim()
    points = YIELD_POINTS[domain.degree] if points is None else points
    points_basis = Basis(basis.mesh, basis.elem, quadrature=yield_quadrature(dim, points))
    grads = np.array([points_basis.basis[i][0].grad for i in range(points_basis.Nbfun)])
    nb, _, ne, nq = grads.shape
    # row of (element e, point q, component d) = (e nq + q) dim + d
    rows = ((np.arange(ne)[:, None, None] * nq + np.arange(nq)[None, :, None]) * dim
            + np.arange(dim)[None, None, :])                                  # (ne, nq, dim)
    rows = np.broadcast_to(rows[None], (nb, ne, nq, dim))
    cols = np.broadcast_to(points_basis.element_dofs[:, :, None, None], (nb, ne, nq, dim))
    data = grads.transpose(0, 2, 3, 1)                                        # (nb, ne, nq, dim)
    gradient = sp.csr_matrix((data.ravel(), (rows.ravel(), cols.ravel())),
                             shape=(ne * nq * dim, basis.N))
    x = np.asarray(points_basis.global_coordinates())
    rate_factor = domain.rate_factor(x).ravel()
    weight = (points_basis.dx * domain.area_weight(x)).ravel() * rate_factor
    load = np.asarray(_area_load(domain))
    free = np.setdiff1d(np.arange(basis.N), domain.wall_dofs)
    return ConicSection(domain, free, gradient, weight, rate_factor, load, x, ne * nq, dim,
                        ne, nq)


def _area_load(domain: Domain) -> np.ndarray:
    from skfem import asm
    from .assembly import area_integral
    x = np.asarray(domain.basis.global_coordinates())
    return asm(area_integral, domain.basis, area_weight=domain.area_weight(x))


# --------------------------------------------------------------------------- the programs

@dataclass(frozen=True)
class ConicResult:
    """What clarabel returned, in the program's own (scaled) variables."""

    x: np.ndarray
    z: np.ndarray
    status: str
    iterations: int
    residual: float
    seconds: float
    tolerance: float = 1e-9   # the interior-point tolerance asked for


def _settings(tolerance: float) -> clarabel.DefaultSettings:
    settings = clarabel.DefaultSettings()
    settings.verbose = False
    # the interior-point tolerances are relative to the scaled problem; below about 1e-10
    # round-off in the KKT solves stops further progress, so ask for no less than that
    for name in ("tol_gap_abs", "tol_gap_rel", "tol_feas"):
        setattr(settings, name, tolerance)
    settings.tol_ktratio = max(tolerance, 1e-8)
    settings.max_iter = 200
    # the KKT factorisation dominates (bench/exact.py). Measured CPU seconds on the square
    # duct, P2, 58k unknowns, 17 iterations each: 27.6 with clarabel's defaults, 16.9
    # without iterative refinement (the same iterations, flow rate equal to 10 digits;
    # refinement repeats solves of an already accurate factor, more of them as the mesh
    # grows), 14.9 with faer's supernodal factorisation in place of qdldl on top
    settings.iterative_refinement_enable = False
    settings.direct_solve_method = "faer"
    # one thread: faer's second thread did not shorten the factorisations of these 2-D
    # programs (small supernodes), and on a shared 2-core machine it only competes; at
    # 58k unknowns 14.1 CPU s against 16.6-18.1 with two (bench/exact.py --settings)
    settings.max_threads = 1
    return settings


def _run(P, q, A, b, cones, tolerance: float, progress=None) -> ConicResult:
    """Solve ``min x'Px/2 + q'x`` s.t. ``Ax + s = b``, ``s`` in ``cones``."""
    started = time.perf_counter()
    solver = clarabel.DefaultSolver(sp.triu(P).tocsc(), q, A.tocsc(), b, cones,
                                    _settings(tolerance))
    if progress is not None:
        solver.set_termination_callback(lambda info: bool(progress(info)) and False)
    solution = solver.solve()
    info = solver.get_info()
    residual = max(info.res_primal, info.res_dual, info.gap_rel)
    return ConicResult(np.asarray(solution.x), np.asarray(solution.z), str(solution.status),
                       int(solution.iterations), float(residual),
                       time.perf_counter() - started, tolerance)


def _cone_rows(section: ConicSection, columns: int, t_offset: int, u_scale_rows: float,
               offset_rows: np.ndarray):
    """The second-order cones ``(t_p, grad u(x_p))``: ``A`` rows and ``b``.

    ``s = b - A x`` must equal ``(t_p, (grad u)_p)`` in the scaled variables; the gradient
    of the free dofs enters with ``u_scale_rows`` and the walls' share as ``offset_rows``.
    """
    n, dim = section.points, section.dim
    width = dim + 1
    t_rows = np.arange(n) * width
    g_rows = (np.arange(n)[:, None] * width + 1 + np.arange(dim)[None, :]).ravel()
    free_gradient = section.gradient[:, section.free].tocoo()
    rows = np.concatenate([t_rows, g_rows[free_gradient.row]])
    cols = np.concatenate([t_offset + np.arange(n), free_gradient.col])
    data = np.concatenate([-np.ones(n), -u_scale_rows * free_gradient.data])
    A = sp.csc_matrix((data, (rows, cols)), shape=(n * width, columns))
    b = np.zeros(n * width)
    b[g_rows] = offset_rows
    cones = [clarabel.SecondOrderConeT(width)] * n
    return A, b, cones


def flow_stop_pressure_gradient(domain: Domain, yield_stress: float,
                                tolerance: float = 1e-8) -> float:
    """The magnitude of dp/dz below which a Bingham or Herschel-Bulkley fluid at rest in
    this section does not flow (walls at rest), in Pa/m.

    The limit load ``G_c = tau_y min int a |grad v| / int a v`` over ``v >= 0`` vanishing
    on the walls (Mosolov & Miasnikov 1965, J. Appl. Math. Mech. 29): for a convex
    section ``tau_y`` times the Cheeger constant. Discretely ``int a v = 1`` is a linear
    constraint and ``int a |grad v|`` one cone per quadrature point, over the domain's
    own elements, so the value converges from above as the mesh is refined (the
    minimiser is an indicator function, so at about first order in the cell size).
    Closed forms: slit of gap h ``2 tau_y / h``, pipe of radius R ``2 tau_y / R``,
    square duct of side L ``(2 + sqrt(pi)) tau_y / L`` (Mosolov & Miasnikov 1965).
    The flow index and consistency do not enter. Axial domains only.
    """
    if domain.kind != "axial":
        raise ValueError("the stopping pressure gradient applies to axial flows")
    if yield_stress == 0:
        return 0.0
    section = conic_section(domain)
    nf, n = section.free.size, section.points
    columns = nf + n
    # v is scaled so that int a v = area, t by 1/length: the costs are then O(1) each
    length = domain.length_scale
    area = float(section.load.sum())
    flow = sp.csc_matrix((section.load[section.free] / area, (np.zeros(nf, int), np.arange(nf))),
                         shape=(1, columns))
    A_cones, b_cones, cones = _cone_rows(section, columns, nf, length, np.zeros(n * section.dim))
    A = sp.vstack([flow, A_cones]).tocsc()
    b = np.concatenate([[1.0], b_cones])
    mean_weight = float(section.weight.mean())
    q = np.concatenate([np.zeros(nf), section.weight / mean_weight])
    result = _run(sp.csc_matrix((columns, columns)), q, A, b,
                  [clarabel.ZeroConeT(1)] + cones, tolerance)
    if result.status != "Solved":
        raise RuntimeError(f"the limit-load program ended with status {result.status}")
    # objective = sum w |grad v| / mean_w with v scaled by area and grad v by length
    ratio = float(q @ result.x) * mean_weight / length / area
    return abs(yield_stress) * ratio


# --------------------------------------------------------------------------- the flow

@dataclass(frozen=True)
class Scales:
    """Scales that make the program's numbers O(1): velocity (or angular speed) ``speed``,
    length, the stress ``stress`` and the objective's ``energy``."""

    speed: float
    length: float
    stress: float
    energy: float


def _scales(case: Case, section: ConicSection, model) -> Scales:
    domain, drive = section.domain, case.drive
    length = domain.length_scale
    K, n = model.consistency, model.flow_index
    speeds = [abs(w.value) for w in domain.walls.values()]
    if domain.kind == "axial":
        if drive.pressure_gradient:
            speeds.append(length * (abs(drive.pressure_gradient) * length / K) ** (1 / n))
        if drive.flow_rate:
            speeds.append(abs(drive.flow_rate) / domain.area)
    speed = max(speeds + [0.0]) or 1.0
    rate = speed / length * float(np.max(section.rate_factor))
    stress = model.yield_stress + K * rate ** n
    energy = stress * speed / length * float(section.weight.mean())
    return Scales(speed, length, stress, energy)


def _wall_values(domain: Domain) -> np.ndarray:
    u = np.zeros(domain.basis.N)
    for wall in domain.walls.values():
        u[wall.dofs] = wall.value
    return u


def _viscous_quadratic(section: ConicSection, model, u_walls: np.ndarray):
    """Bingham's viscous energy ``u'Au/2`` on the free dofs: ``A_ff`` and ``A_fb u_b``."""
    domain = section.domain
    x = np.asarray(domain.basis.global_coordinates())
    coefficient = domain.area_weight(x) * domain.rate_factor(x) ** 2 * model.consistency
    plan = AssemblyPlan(domain.basis, section.free)
    walls_force = plan.force(coefficient * plan.gradient(u_walls))[section.free]
    return plan.matrix(coefficient), walls_force


@dataclass(frozen=True)
class FlowProgram:
    """The conic program of one exact flow and how to read its solution."""

    P: sp.csc_matrix
    q: np.ndarray
    A: sp.csc_matrix
    b: np.ndarray
    cones: list
    flow_rate_row: bool
    scales: Scales


def flow_program(case: Case, section: ConicSection) -> FlowProgram:
    """Minimum dissipation as a conic program in the variables ``(u_free, t[, r])``."""
    model = case.fluid.model
    domain = section.domain
    sc = _scales(case, section, model)
    nf, n = section.free.size, section.points
    bingham = model.flow_index == 1.0
    columns = nf + n * (1 if bingham else 2)
    u_walls = _wall_values(domain)
    rate_unit = sc.speed / sc.length
    G = (case.drive.pressure_gradient or 0.0) if domain.kind == "axial" else 0.0
    q_u = G * section.load[section.free] * sc.speed
    if bingham:
        stiffness, walls_force = _viscous_quadratic(section, model, u_walls)
        P = sp.block_diag([stiffness * sc.speed ** 2, sp.csc_matrix((n, n))]).tocsc()
        q_u = q_u + walls_force * sc.speed
    else:
        P = sp.csc_matrix((columns, columns))
    q = [q_u, model.yield_stress * section.weight * rate_unit]
    if not bingham:
        index = model.flow_index
        q.append(model.consistency * section.rate_factor ** index * section.weight
                 * rate_unit ** (index + 1) / (index + 1))
    q = np.concatenate(q) / sc.energy
    if bingham:
        P = P / sc.energy
    walls_gradient = section.gradient @ u_walls / rate_unit
    A_cones, b_cones, cones = _cone_rows(section, columns, nf, sc.length, walls_gradient)
    blocks, rhs, all_cones = [A_cones], [b_cones], list(cones)
    flow_rate_row = domain.kind == "axial" and case.drive.flow_rate is not None
    if flow_rate_row:
        area = domain.area
        row = sp.csc_matrix((section.load[section.free] / area,
                             (np.zeros(nf, int), np.arange(nf))), shape=(1, columns))
        target = (case.drive.flow_rate - section.load @ u_walls) / (sc.speed * area)
        blocks.insert(0, row)
        rhs.insert(0, [target])
        all_cones.insert(0, clarabel.ZeroConeT(1))
    if not bingham:
        # r_p^alpha * 1^(1 - alpha) >= t_p, alpha = 1 / (n + 1): r_p >= t_p^(n + 1)
        rows = np.arange(n) * 3
        A_power = sp.csc_matrix(
            (-np.ones(2 * n), (np.concatenate([rows, rows + 2]),
                               np.concatenate([nf + n + np.arange(n), nf + np.arange(n)]))),
            shape=(3 * n, columns))
        b_power = np.zeros(3 * n)
        b_power[rows + 1] = 1.0
        blocks.append(A_power)
        rhs.append(b_power)
        all_cones += [clarabel.PowerConeT(1.0 / (model.flow_index + 1))] * n
    return FlowProgram(P, q, sp.vstack(blocks).tocsc(), np.concatenate(rhs), all_cones,
                       flow_rate_row, sc)


@dataclass(frozen=True)
class ExactFlow:
    """An exact flow read back from the program's solution."""

    u: np.ndarray
    pressure_gradient: float
    rate: np.ndarray              # shear rate at the yield-term points
    stress_ratio: np.ndarray      # |yield part of the stress| / tau_y at those points (<= 1)
    unyielded: np.ndarray         # bool per point
    flux: np.ndarray              # (points, dim): weight_p times the stress vector at x_p
    undecided: np.ndarray | None = None   # bool per point: neither side clearly zero


def read_flow(case: Case, section: ConicSection, program: FlowProgram,
              result: ConicResult) -> ExactFlow:
    sc = program.scales
    domain = section.domain
    u = _wall_values(domain)
    u[section.free] = sc.speed * result.x[:section.free.size]
    if program.flow_rate_row:
        # the multiplier of int a u = Q is dp/dz (KKT: P x + q + A'z = 0), in scaled units
        gradient = float(result.z[0]) * sc.energy / (sc.speed * domain.area)
    elif domain.kind == "axial":
        gradient = float(case.drive.pressure_gradient or 0.0)
    else:
        gradient = 0.0
    grad = (section.gradient @ u).reshape(section.points, section.dim)
    rate = section.rate_factor * np.sqrt(np.sum(grad ** 2, axis=1))
    start = 1 if program.flow_rate_row else 0
    width = section.dim + 1
    z = result.z[start:start + section.points * width].reshape(section.points, width)
    with np.errstate(invalid="ignore", divide="ignore"):
        stress_ratio = np.where(z[:, 0] > 0,
                                np.linalg.norm(z[:, 1:], axis=1) / z[:, 0], 0.0)
    stress_ratio = np.clip(stress_ratio, 0.0, 1.0)
    # complementarity: at the optimum either the rate is zero or the stress is at the yield
    # stress; at the interior-point solution the one that should be zero is the smaller,
    # each measured on its own scale (the drive's rate scale, the yield stress)
    rate_scale = sc.speed / sc.length * float(np.max(section.rate_factor))
    unyielded = rate / rate_scale < 1.0 - stress_ratio
    # on the interior-point path the two sides' product is of the order of the tolerance,
    # so where both are below about its square root the pair does not decide the point.
    # The discrete rates fall smoothly to zero toward the plugs and dead zones (no gap),
    # so the fraction drifts with the tolerance: square duct, tau_y/tau_c = 0.5, 63 cells,
    # 0.198, 0.190, 0.185, 0.180, 0.174 at 1e-7 ... 1e-11. The band below ten times the
    # square root, counted both ways, held every later figure at each tolerance (the
    # square root alone did not: 0.186-0.212 at 1e-7)
    band = 10.0 * math.sqrt(result.tolerance)
    undecided = (rate / rate_scale < band) & (1.0 - stress_ratio < band)
    # KKT of the u block: P x + q + A'z = 0 with the gradient rows of A equal to
    # -length B: the cones' duals are the flux the program's own stress exerts,
    # weight_p sigma_p = -z_g length energy / speed (Bingham: the yield part only, the
    # viscous part is in P and added by consistent_reaction)
    flux = -z[:, 1:] * (sc.length * sc.energy / sc.speed)
    return ExactFlow(u, gradient, rate, stress_ratio, unyielded, flux, undecided)


def consistent_reaction(case: Case, section: ConicSection, flow: ExactFlow) -> np.ndarray:
    """The weak-form residual of the exact solution tested with every basis function,
    walls included: ``R_i = int a s^2 K grad u . grad phi_i`` (Bingham; Herschel-Bulkley:
    in the cones) ``+ sum_p weight_p sigma_p . grad phi_i(x_p) + G int a phi_i``, the stress
    ``sigma_p`` taken from the cones' duals (:func:`read_flow`).

    At the optimum it vanishes at the free dofs (to the solver tolerance); at the wall
    dofs it is the force of the wall on the fluid, the consistent boundary flux. Since
    the basis functions sum to one, the wall values add up to ``G int a dx`` less the free
    residual: the force balance holds to the solver tolerance by construction of the
    optimum, not of this sum.
    """
    model, domain = case.fluid.model, section.domain
    reaction = section.gradient.T @ flow.flux.ravel() + flow.pressure_gradient * section.load
    if model.flow_index == 1.0:
        x = np.asarray(domain.basis.global_coordinates())
        coefficient = domain.area_weight(x) * domain.rate_factor(x) ** 2 * model.consistency
        plan = AssemblyPlan(domain.basis, section.free)
        reaction = reaction + plan.force(coefficient * plan.gradient(flow.u))
    return np.asarray(reaction)


def stress_field(case: Case, section: ConicSection, flow: ExactFlow) -> np.ndarray:
    """The magnitude of the exact solution's shear stress at the dofs (Pa): at each
    yield-term point ``|tau_y lambda + K gamma^(n-1) s grad u|`` from the cones' duals
    (in a plug the dual stress, below the yield stress; in the yielded region
    ``tau_y + K gamma^n``), projected onto the basis in L2. Its level set at the yield
    stress is the yield surface drawn on section maps."""
    from skfem import BilinearForm, LinearForm, asm
    model, domain = case.fluid.model, section.domain
    basis = domain.basis
    stress = flow.flux / section.weight[:, None]
    if model.flow_index == 1.0:
        grad = (section.gradient @ flow.u).reshape(section.points, section.dim)
        stress = stress + model.consistency * section.rate_factor[:, None] * grad
    magnitude = np.linalg.norm(stress, axis=1).reshape(section.elements, section.per_element)
    points_basis = Basis(basis.mesh, basis.elem,
                         quadrature=yield_quadrature(section.dim, section.per_element))
    mass = asm(BilinearForm(lambda u, v, w: u * v), basis).tocsr()
    load = asm(LinearForm(lambda v, w: w.value * v), points_basis, value=magnitude)
    from scipy.sparse.linalg import cg
    values, _ = cg(mass, load, rtol=1e-12, maxiter=500, M=sp.diags(1.0 / mass.diagonal()))
    return values


def _check_model(case: Case) -> None:
    from ..errors import CaseError
    model = case.fluid.model
    if not model.is_yield_stress:
        raise CaseError("fluid.regularisation.method", "none", (
            "a yield-stress model (bingham or herschel-bulkley) for the exact method; "
            f"{model.name} needs no regularisation"))


def solve_exact(case: Case, domain: Domain | None = None, cells: int | None = None,
                progress=None) -> Solution:
    """Exact Bingham / Herschel-Bulkley flow on the case's domain (module docstring).

    Returns a :class:`Solution` whose ``regularisation`` dict holds the exact method's
    results: ``method`` ("none"), ``unyielded_fraction`` (area share of the points where
    the rate is zero to the solver tolerance), ``stopping_ratio`` (|dp/dz| over the
    section's stopping gradient, axial flows), ``flows`` and the solver's statistics. The
    solution also carries ``yield_points`` (``coordinates`` of the yield-term quadrature
    points, ``(dim, elements, points)``, and ``unyielded``, bool per point), ``reaction`` (:func:`consistent_reaction`, from which the wall stresses
    and torques are taken) and, on 2-D sections, ``stress_magnitude``
    (:func:`stress_field`, the shear stress at the dofs).
    """
    started = time.perf_counter()
    _check_model(case)
    domain = domain or build_domain(case, cells)
    section = conic_section(domain)
    program = flow_program(case, section)
    history = _History(progress)
    tolerance = max(case.solver.tolerance, 1e-9)

    def report(info):
        history.append(Iteration(int(info.iterations), "interior-point",
                                 float(max(info.res_primal, info.res_dual, info.gap_rel)),
                                 float(info.step_length),
                                 float(case.drive.pressure_gradient or 0.0)))
    result = _run(program.P, program.q, program.A, program.b, program.cones, tolerance, report)
    flow = read_flow(case, section, program, result)
    converged = result.status == "Solved"
    message = (f"interior-point solve {'converged' if converged else 'ended'} "
               f"({result.status}) in {result.iterations} iterations, residual "
               f"{result.residual:.2e}")
    solution = Solution(case, domain, apparent_model(case, program.scales), flow.u,
                        flow.pressure_gradient, converged, result.iterations, result.residual,
                        history, message, 0.0, None, [])
    solution.regularisation = _exact_report(case, section, flow, result)
    solution.yield_points = {
        "coordinates": section.coordinates,
        "unyielded": flow.unyielded.reshape(section.elements, section.per_element)}
    # the exact solution's own stresses, which post-processing takes when present: the
    # solution's model is a regularised stand-in whose residual is not this flow's
    solution.reaction = consistent_reaction(case, section, flow)
    if section.dim == 2:
        solution.stress_magnitude = stress_field(case, section, flow)
    solution.warnings.extend(_exact_warnings(solution.regularisation))
    solution.seconds = time.perf_counter() - started
    return solution


def apparent_model(case: Case, scales: Scales):
    """The model a solution reports its apparent viscosity with (post-processing reads
    ``viscosity(rate)`` for maps, 1-D wall rates by inverting the flow curve, and the
    Reynolds number): the case's yield-stress model regularised so sharply that
    ``1 - exp(-m rate)`` is 1 to round-off at every rate above 1e-10 of the flow's rate
    scale, i.e. at every rate the interior-point solution tells from zero. The case
    carries a stand-in exponent of 1 s, whose apparent viscosity would be off wherever
    the rate is of the order of 1/s."""
    rate_scale = scales.speed / scales.length
    return case.fluid.model.with_regularisation(1e12 / rate_scale)


def _exact_report(case: Case, section: ConicSection, flow: ExactFlow,
                  result: ConicResult) -> dict:
    domain = section.domain
    # the weight includes the rate factor (r on a rotational gap); the area share uses a alone
    area = section.weight / section.rate_factor if domain.kind == "rotational" \
        else section.weight
    total = float(area.sum())

    def share(points) -> float:
        return float(area[points].sum() / total) if total > 0 else 0.0
    fraction = share(flow.unyielded)
    undecided = flow.undecided if flow.undecided is not None else np.zeros_like(flow.unyielded)
    uncertainty = max(fraction - share(flow.unyielded & ~undecided),
                      share(flow.unyielded | undecided) - fraction)
    # plain numbers only (the report goes into summary.json as it is); the point-wise
    # unyielded set is on the solution as ``yield_points``
    report = {"method": "none",
              "parameter": None, "unit": None,
              "chosen": "exact yield-stress flow, no regularisation parameter",
              "unyielded_fraction": fraction,
              "unyielded_fraction_uncertainty": uncertainty,
              "unyielded_definition": (
                  "yield-term quadrature points (element by element) where the shear rate, "
                  "relative to the largest, is below 1 - |stress| / yield stress: the side "
                  "of the complementarity pair that is zero at the optimum"),
              "flows": bool(not flow.unyielded.all()),
              "stopping_ratio": None,
              "solver": "clarabel interior point",
              "cones": section.points,
              "iterations": result.iterations,
              "status": result.status,
              "largest_shear_rate": float(flow.rate.max()),
              "dissipation": _dissipation(case.fluid.model, section, flow)}
    if domain.kind == "rotational":
        relative = domain.walls["inner"].value - domain.walls["outer"].value
        # the power the inner cylinder delivers is dissipated in the gap: M (W_i - W_o) = D
        report["torque_per_length"] = report["dissipation"] / relative if relative else 0.0
    moving = any(w.value != 0 for w in domain.walls.values())
    if domain.kind == "axial" and not moving:
        critical = stopping_pressure_gradient(case, domain)
        report["stopping_pressure_gradient"] = critical
        if critical:
            report["stopping_ratio"] = abs(flow.pressure_gradient) / critical
    return report


def _dissipation(model, section: ConicSection, flow: ExactFlow) -> float:
    """``int a (tau_y g + K g^(n+1)) dx``: the power dissipated per unit length (W/m;
    slit: per unit width too). Equal to the pumping power ``-G Q`` plus the power of the
    moving walls, and for rotational flow to ``M (W_i - W_o)``."""
    area_weight = section.weight / section.rate_factor
    rate = flow.rate
    return float(np.sum(area_weight * (model.yield_stress * rate
                                       + model.consistency * rate ** (model.flow_index + 1))))


def _exact_warnings(report: dict) -> list[str]:
    if report["status"] != "Solved":
        return [f"the interior-point solver ended with status {report['status']}"]
    if not report["flows"]:
        ratio = report["stopping_ratio"]
        shown = f" ({ratio:.3g} of the stopping pressure gradient)" if ratio else ""
        return ["the material does not yield: the drive is below the stopping limit"
                + shown + "; it stays at rest"]
    return []


def stopping_pressure_gradient(case: Case, domain: Domain) -> float:
    """The section's stopping |dp/dz| (Pa/m): the closed form where the section has one
    (slit ``2 tau_y / h``, pipe ``2 tau_y / R``, rectangle: tau_y times its Cheeger
    constant, see :func:`gnflow.solver.scales.rectangle_stopping_gradient`), the
    limit-load program on the domain's mesh otherwise."""
    tau_y = case.fluid.model.yield_stress
    if domain.shape == "slit":
        return 2 * tau_y / case.geometry.gap
    if domain.shape == "pipe":
        return 2 * tau_y / case.geometry.radius
    if domain.shape == "rectangle":
        from .scales import rectangle_stopping_gradient
        return rectangle_stopping_gradient(case.geometry.width, case.geometry.height, tau_y)
    return flow_stop_pressure_gradient(domain, tau_y)


# --------------------------------------------------------------------------- second method

@dataclass(frozen=True)
class AugmentedLagrangianResult:
    u: np.ndarray
    iterations: int
    residual: float
    converged: bool


def augmented_lagrangian_bingham(case: Case, section: ConicSection, penalty: float | None = None,
                                 tolerance: float = 1e-8, max_iterations: int = 20000
                                 ) -> AugmentedLagrangianResult:
    """Exact pressure-driven Bingham flow by the augmented Lagrangian method ALG2
    (Fortin & Glowinski 1983, *Augmented Lagrangian Methods*, ch. III; Glowinski 1984).

    The same discrete functional as :func:`flow_program` (viscous part by the stiffness
    matrix, yield part at the same quadrature points) with ``q = grad u`` at those
    points as a second variable and the multiplier ``lam``; with penalty ``r``:

    * ``u``: ``(K A + r B'WB) u = B'W (r q - lam) - G l`` (one prefactored matrix);
    * ``q``: ``q = max(0, |xi| - tau_y / r) xi / |xi|``, ``xi = B u + lam / r``;
    * ``lam += r (B u - q)``.

    It converges for any ``r > 0``, linearly and slowly (hundreds to thousands of
    iterations), but needs only one factorisation: the fallback for meshes too large
    for the interior-point method, and an independent check of it. Stops when
    ``|Bu - q|`` and the change of ``q`` are below ``tolerance`` times ``|Bu|``.
    """
    from scipy.sparse.linalg import splu
    model = case.fluid.model
    if model.flow_index != 1.0 or section.domain.kind != "axial" or case.drive.flow_rate is not None:
        raise ValueError("the augmented Lagrangian method here is for pressure-driven Bingham flow")
    domain = section.domain
    free, dim = section.free, section.dim
    u_walls = _wall_values(domain)
    stiffness, walls_force = _viscous_quadratic(section, model, u_walls)
    mu, tau_y = model.consistency, model.yield_stress
    # r = 10 K converged fastest of 0.1 K ... 10 K on square ducts near their stopping limit
    r = penalty if penalty is not None else 10 * mu
    B = section.gradient
    weight = np.repeat(section.weight, dim)
    BtW = (B.T.multiply(weight)).tocsr()
    B_free = B[:, free]
    matrix = (stiffness + r * (BtW[free] @ B_free)).tocsc()
    factor = splu(matrix)
    G = float(case.drive.pressure_gradient or 0.0)
    load = G * section.load[free] + walls_force
    walls_gradient = B @ u_walls
    q = np.zeros(B.shape[0])
    lam = np.zeros(B.shape[0])
    u = u_walls.copy()
    residual = math.inf
    for iteration in range(1, max_iterations + 1):
        rhs = BtW[free] @ (r * q - lam) - load - r * (BtW[free] @ walls_gradient)
        u[free] = factor.solve(rhs)
        gradient = B_free @ u[free] + walls_gradient
        xi = (gradient + lam / r).reshape(-1, dim)
        size = np.linalg.norm(xi, axis=1)
        shrink = np.maximum(size - tau_y / r, 0.0) / np.where(size > 0, size, 1.0)
        q_new = (xi * shrink[:, None]).ravel()
        lam += r * (gradient - q_new)
        scale = max(np.linalg.norm(gradient), 1e-300)
        residual = max(np.linalg.norm(gradient - q_new), np.linalg.norm(q_new - q)) / scale
        q = q_new
        if residual < tolerance:
            return AugmentedLagrangianResult(u, iteration, residual, True)
    return AugmentedLagrangianResult(u, max_iterations, residual, False)
