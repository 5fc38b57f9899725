"""Derived quantities of a solved flow: flow rate, wall stresses, torque, plugs, Re.

Pure functions of a :class:`~gnflow.solver.Solution`; :mod:`gnflow.results` calls each
once and keeps the answers in one result object that the writers and plots read.

Wall shear stresses and the torque come from the discrete reaction at the wall dofs (the
residual of the momentum balance with the walls left free), which is the consistent,
superconvergent flux of the finite element solution, and not from a differentiated field.

Conventions of the summary (stated once here, printed with every summary):

* **Direction.** Axial flows run along ``z``; ``flow_rate`` is signed (positive toward
  +z) and ``flow_direction`` names the way the net flow goes. Speeds (``mean_velocity``,
  ``max_velocity``) are magnitudes; ``max_velocity_signed`` and ``min_velocity`` give the
  signed range of the axial velocity, positive toward +z.
* **Wall shear stress.** Magnitudes everywhere. Per wall: the magnitude of the wall's
  mean shear stress, |axial force on the wall| / its wetted perimeter. Mean: the
  perimeter-weighted mean of the per-wall values. Max: the largest local magnitude along
  the walls (2-D: outside the neighbourhoods of singular corners). The direction of the
  force on each wall is given separately (``force_direction``); a wall that drives the
  flow is dragged back by the fluid, against the flow.

Coupled physics take their wall stresses from their own balances: helical flow from the
coupled residual (with both torques and the power split), heated flow from the coupled
momentum-energy reaction (the viscosity varies with temperature), wall slip from the
reaction without the slip term (the full residual vanishes at a slipping wall). Plug edges
and unyielded fractions are located by interpolation (:mod:`gnflow.yielded`), each with
its uncertainty.
"""

from __future__ import annotations

import math
import weakref

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from skfem import BilinearForm, FacetBasis, LinearForm, asm
from skfem.element import ElementComposite, ElementVector

from .geometry import wall_force_shares
from .laminar import (
    APPROXIMATE_OFF_PIPE,
    bingham_plastic_reynolds,
    hedstrom_number,
    laminar_limit,
    laminar_warning,
)
from .solver import Solution, invert_flow_curve
from .solver.coupled import HelicalSolution
from .solver.heat import HeatedSolution
from .temperature import at_temperature
from .yielded import p2_sub_triangles, plug_edges_1d, unyielded_fraction_2d

#: Critical Taylor number of the narrow-gap Taylor-Couette flow with the inner cylinder
#: turning (Taylor 1923, Phil. Trans. R. Soc. A 223; 1708 is the classical narrow-gap
#: value, common practice as a limit)
CRITICAL_TAYLOR = 1708.0

#: A converged summary's force balance (axial) or torque balance (rotational) must hold to
#: this relative error, or to 100 times the solver tolerance if that is looser: the
#: balance error of the discrete flux is of the order of the nonlinear residual
BALANCE_TOLERANCE = 1e-8

#: Radius of the neighbourhood of a singular corner left out of the summary's wall maxima,
#: as a fraction of the section's length scale; at least two wall cells
SINGULAR_NEIGHBOURHOOD = 0.02

ASSUMPTIONS = ("laminar, isothermal, steady, fully developed flow of an incompressible "
               "generalized Newtonian fluid; no slip at the walls unless a wall speed is given; "
               "the viscosity model is only as good as its fit to the user's measurements")


def assumptions_for(case) -> str:
    """:data:`ASSUMPTIONS` as they hold for this case: a heated case is not isothermal
    and a case with slip laws does not stick to its walls."""
    heated = getattr(case, "heat", None) is not None
    slip = sorted(getattr(case.drive, "slip", None) or {})
    thermal = ("non-isothermal: viscous heating balanced by conduction to the walls (no "
               "axial convection, constant conductivity), viscosity from the temperature law"
               if heated else "isothermal")
    walls = (f"wall slip by the given laws at: {', '.join(slip)} (slip laws are material- "
             "and surface-specific: measured, not predicted), no slip at any other wall"
             if slip else "no slip at the walls unless a wall speed is given")
    return (f"laminar, {thermal}, steady, fully developed flow of an incompressible "
            f"generalized Newtonian fluid; {walls}; the viscosity model is only as good as "
            "its fit to the user's measurements")

#: the closing line of every command that prints design numbers
CAUTION = ("results must be checked against the applicable local codes and standards and "
           "by a licensed or registered engineer before they are used in a design")
CAUTION_PRESSURE_PER_LENGTH = (
    "the pressure per length is the friction of fully developed laminar flow only: entrance "
    "lengths, fittings, static head and surge are excluded; check pipe and fitting pressure "
    "ratings separately")
CAUTION_YIELD_RESTART = (
    "yield-stress pipelines: restarting a gelled line may need far more than the steady "
    "gradient computed here (thixotropy, gel strength)")
CAUTION_DRILLING_ANNULUS = (
    "drilling annuli: surge/swab and well-control decisions follow the operator's "
    "procedures and industry recommended practice, not this calculation alone")


def cautions_for(case) -> list[str]:
    """The cautions that apply to a case, the general one last."""
    shape = case.geometry.shape
    out = []
    if shape != "coaxial-cylinders":
        out.append(CAUTION_PRESSURE_PER_LENGTH)
        if case.fluid.model.is_yield_stress:
            out.append(CAUTION_YIELD_RESTART)
    if shape == "annulus":
        out.append(CAUTION_DRILLING_ANNULUS)
    return out + [CAUTION]


@BilinearForm
def _mass(u, v, w):
    return u * v


@LinearForm
def _load_of(v, w):
    return w.value_at_points * v


def project(basis, values_at_points) -> np.ndarray:
    """L2 projection of a quadrature-point field onto the basis, by scipy's conjugate
    gradients on the mass matrix (well conditioned; no factorisation at any size). The
    reference of :func:`project_all`, which the point fields use."""
    mass, preconditioner = _mass_system(basis)
    load = _load(basis, values_at_points)
    result, _ = spla.cg(mass, load, rtol=1e-12, maxiter=500, M=preconditioner)
    return result


#: relative residual and iteration limit of the projections' conjugate gradients
PROJECTION_TOLERANCE = 1e-12
PROJECTION_ITERATIONS = 500


def project_all(basis, values_at_points) -> np.ndarray:
    """L2 projections of several quadrature-point fields onto the basis at once
    (``values_at_points`` shape (fields, elements, points); returns (fields, dofs)): what
    :func:`project` gives each field, to the rounding of the iteration (the same
    Jacobi-preconditioned conjugate gradients and stopping rule, ``|r| < 1e-12 |b|``).

    The inner products are numpy's own loops over contiguous rows (:func:`_row_inner`):
    scipy's ``cg`` takes them from BLAS, whose threads wait for each other on a loaded
    machine (the two gradient components of a 29k-unknown section: 1.3 s with ``cg``,
    0.04 s so; 250k: 1.7 s and 0.6-0.9 s)."""
    mass, preconditioner = _mass_system(basis)
    loads = np.array([_load(basis, values) for values in values_at_points])
    return _conjugate_gradients(mass, loads, preconditioner.diagonal())


def _row_inner(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The inner products of the rows of ``a`` and ``b``, without BLAS."""
    return np.einsum("ij,ij->i", a, b)


def _conjugate_gradients(matrix, loads: np.ndarray, inverse_diagonal: np.ndarray) -> np.ndarray:
    """``matrix^-1 b`` for each row ``b`` of ``loads``, each with its own step lengths and
    its own stop (``|r| < PROJECTION_TOLERANCE |b|``, checked before each step as scipy's
    ``cg`` does), by conjugate gradients preconditioned by ``inverse_diagonal``; a row
    that has stopped keeps its value, and a zero row gives zero."""
    solution = np.zeros_like(loads)
    residual = loads.copy()
    tolerance = PROJECTION_TOLERANCE * np.sqrt(_row_inner(loads, loads))
    direction = previous = None
    for _ in range(PROJECTION_ITERATIONS):
        active = (np.sqrt(_row_inner(residual, residual)) >= tolerance) & (tolerance > 0)
        if not active.any():
            break
        preconditioned = residual * inverse_diagonal
        current = _row_inner(residual, preconditioned)
        if direction is None:
            direction = preconditioned
        else:
            direction *= np.divide(current, previous, out=np.zeros_like(current),
                                   where=active & (previous != 0))[:, None]
            direction += preconditioned
        product = np.array([matrix @ row for row in direction])
        curvature = _row_inner(direction, product)
        step = np.divide(current, curvature, out=np.zeros_like(current),
                         where=active & (curvature != 0))[:, None]
        solution += direction * step
        residual -= product * step
        previous = current
    return solution


#: basis -> its mass matrix and Jacobi preconditioner (an entry goes with its basis)
_MASS_SYSTEMS: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def _mass_system(basis) -> tuple[sp.csr_matrix, sp.dia_matrix]:
    """The mass matrix of ``basis`` (:func:`_mass_matrix`) and the inverse of its
    diagonal, assembled once per basis: the cases of a study share their mesh and basis,
    and assembling them took a third of a 1-D yield-stress case's post-processing (0.6 of
    1.7 ms of its fields)."""
    found = _MASS_SYSTEMS.get(basis)
    if found is None:
        mass = _mass_matrix(basis)
        found = _MASS_SYSTEMS[basis] = (mass, sp.diags(1.0 / mass.diagonal()))
    return found


def _basis_values(basis, derivative: int = 0) -> list[np.ndarray]:
    """The values (``derivative`` 0) or gradients (1) of each basis function at the
    quadrature points of ``basis``, as the arrays ``basis`` keeps."""
    return [np.asarray(basis.basis[i][0].get(derivative)) for i in range(basis.Nbfun)]


def _mass_matrix(basis) -> sp.csr_matrix:
    """The mass matrix ``asm(_mass, basis)`` of a scalar element, as the product
    ``A^T (B A)`` of sparse matrices: ``A`` picks each element's dofs (one entry a row)
    and ``B A`` has the element mass matrices (:func:`_element_masses`) as its rows.
    scipy's compiled sparse product sums them into the global entries without sorting;
    ``asm``'s COO to CSR conversion sorts 36 entries an element (a 1M-unknown P2 section:
    3-4 s with ``asm``, 0.4-1 s so; bench/summary.py).

    The element entries are ``asm``'s bit for bit; only the order in which the entries of
    neighbouring elements are added differs, by a rounding of the sum (a relative 1e-16;
    none in 1-D, where at most two elements share an entry). ``tests/test_summary_speed.py``
    compares both with ``asm``.
    """
    element = _element_masses(basis)
    if element is None:
        return asm(_mass, basis).tocsr()
    nt, nb, _ = element.shape
    slots = nt * nb                               # one per element and local dof
    index = np.int32 if slots * nb < 2 ** 31 else np.int64
    local_dofs = np.ascontiguousarray(basis.element_dofs.T, dtype=index)   # (elements, nb)
    pick = sp.csr_matrix((np.ones(slots), local_dofs.ravel(), np.arange(slots + 1, dtype=index)),
                         shape=(slots, basis.N))
    rows = sp.csr_matrix((element.ravel(), np.repeat(local_dofs, nb, axis=0).ravel(),
                          np.arange(0, slots * nb + 1, nb, dtype=index)), shape=(slots, basis.N))
    mass = (pick.T.tocsr() @ rows).tocsr()
    mass.sort_indices()
    return mass


def _element_masses(basis) -> np.ndarray | None:
    """The element mass matrices ``(elements, i, j)`` as scikit-fem's bilinear assembly of
    ``_mass`` computes them, bit for bit (its entry ``(j, i)`` of element ``e`` is
    ``np.sum(phi_j * phi_i * dx, axis=1)``: the products at the points, added in order),
    faster (1M unknowns: 1.3 s in ``asm``, 0.2-0.4 s here): the basis values of a Lagrange
    element are the same on every element, so ``phi_j phi_i`` is a number per point, and
    an entry below the diagonal is the one above (``phi_i phi_j = phi_j phi_i`` exactly).
    None for a basis without that structure (a vector or composite element)."""
    phi = _reference_values(basis)
    if phi is None:
        return None
    weights = np.ascontiguousarray(basis.dx.T)    # (points, elements)
    nb = len(phi)
    element = np.empty((nb, nb, weights.shape[1]))   # contiguous rows while filled
    scratch = np.empty(weights.shape[1])
    for i in range(nb):
        for j in range(i, nb):
            products = phi[j] * phi[i]
            entry = element[i, j]
            np.multiply(products[0], weights[0], out=entry)
            for q in range(1, weights.shape[0]):
                entry += np.multiply(products[q], weights[q], out=scratch)
            element[j, i] = entry
    return np.ascontiguousarray(element.transpose(2, 0, 1))


def _reference_values(basis) -> list[np.ndarray] | None:
    """The value of each basis function at each quadrature point, (points,) a function,
    when they are the same on every element (the functions of a scalar Lagrange element
    are its reference ones); else None."""
    if isinstance(basis.elem, (ElementVector, ElementComposite)):
        return None
    values = [np.asarray(basis.basis[i][0]) for i in range(basis.Nbfun)]
    first = [v[0] for v in values]
    # scikit-fem broadcasts the reference values over the elements (a zero stride)
    if all(v.strides[0] == 0 or np.array_equal(v, np.broadcast_to(f, v.shape))
           for f, v in zip(first, values)):
        return first
    return None


def _load(basis, values_at_points) -> np.ndarray:
    """``asm(_load_of, basis, value_at_points=values_at_points)``, bit for bit: the same
    element sums (``np.sum(values * phi_i * dx, axis=1)``: the products at the points,
    added in order), added into the vector in the same order (entry by entry, as scipy's
    COO conversion to a dense array does) by one ``bincount``. The products and sums
    run over the points of all elements at once (1M unknowns: about 0.2 s a field, 0.6 s
    with ``asm``)."""
    phi = _reference_values(basis)
    if phi is None:
        return asm(_load_of, basis, value_at_points=values_at_points)
    values = np.ascontiguousarray(np.asarray(values_at_points).T)   # (points, elements)
    weights = np.ascontiguousarray(basis.dx.T)
    data = np.empty((len(phi), values.shape[1]))
    scratch = np.empty(values.shape[1])
    for i, phi_i in enumerate(phi):
        entry = data[i]
        for q in range(values.shape[0]):
            term = entry if q == 0 else scratch
            np.multiply(values[q], phi_i[q], out=term)
            term *= weights[q]
            if q:
                entry += term
    return np.bincount(basis.element_dofs.ravel(), weights=data.ravel(), minlength=basis.N)


def _at_points(basis, u: np.ndarray, derivative: int = 0) -> np.ndarray:
    """``u`` (dofs of a scalar element) at the quadrature points of ``basis``: the
    values (``derivative`` 0, shape (elements, points)) or the gradient (1, shape (dim,
    elements, points)) of ``basis.interpolate(u)``, bit for bit (the same products
    summed in the same order), without its ``np.unique`` of the dofs of every element of
    the mesh, which only elements of several components need (0.6 s a call on a
    1M-unknown section, also for a facet basis of one wall)."""
    if isinstance(basis.elem, (ElementVector, ElementComposite)):
        found = basis.interpolate(u)
        return np.asarray(found.grad if derivative else found)
    u = np.asarray(u)
    dofs = basis.element_dofs
    terms = _basis_values(basis, derivative)
    shape = (..., None)   # the dof values of an element times its functions at the points
    out = 0.0 * (u[dofs[0]][shape] * terms[0])
    scratch = np.empty_like(out)
    for i, term in enumerate(terms):
        out += np.multiply(u[dofs[i]][shape], term, out=scratch)
    return out


def fields(solution: Solution) -> dict[str, np.ndarray]:
    """Point fields at the dofs: velocity (axial) or angular speed, shear rate,
    apparent viscosity, shear stress magnitude; plus the coordinate ``x``.

    * The shear rate is the L2 projection of the computed one; helical flow takes the
      solver's own (projected) rate and viscosity of the whole motion, axial and
      azimuthal; heated flow the local viscosity ``eta(gamma, T)`` at the temperature
      field (``temperature``, K).
    * The shear stress of a 1-D section is the equilibrated one (:func:`stress_profile_1d`):
      the momentum balance integrated from a wall with that wall's reaction stress, exact
      for the discrete solution's own wall stress; in 2-D it is viscosity times rate.
    * Helical flow adds ``angular_speed`` (rad/s), ``azimuthal_velocity`` (m/s) and, in 2-D,
      ``in_plane_velocity`` ((2, N), m/s); ``velocity`` stays the axial speed.
    """
    basis, domain = solution.domain.basis, solution.domain
    x = basis.doflocs
    if isinstance(solution, HelicalSolution):
        rate = np.maximum(solution.shear_rate, solution.rate_floor)
        viscosity = solution.viscosity
    else:
        gradient = project_all(basis, _at_points(basis, solution.u, 1))
        rate = np.sqrt(np.sum(gradient ** 2, axis=0)) * domain.rate_factor(x)
        rate = np.maximum(rate, solution.rate_floor)
        viscosity = _viscosity(solution, np.maximum(rate, 1e-300))
    stress = stress_profile_1d(solution, x[0]) if domain.dimension == 1 else viscosity * rate
    own_stress = getattr(solution, "stress_magnitude", None)   # the exact method's own
    if own_stress is not None and domain.dimension == 2:
        # a magnitude: the L2 projection of the cone duals can undershoot below zero
        stress = np.maximum(np.asarray(own_stress), 0.0)
    out = {"x": x, "shear_rate": rate, "viscosity": viscosity, "shear_stress": stress}
    if solution.model.is_yield_stress:
        out["unyielded"] = (out["shear_stress"] < solution.model.yield_stress).astype(float)
    if domain.kind == "axial":
        out["velocity"] = solution.u
    else:
        out["angular_speed"] = solution.u
        out["velocity"] = solution.u * x[0]  # azimuthal speed r * omega
    if isinstance(solution, HelicalSolution):
        out["angular_speed"] = solution.angular_speed
        out["azimuthal_velocity"] = solution.azimuthal_velocity
        if solution.in_plane_velocity is not None:
            out["in_plane_velocity"] = solution.in_plane_velocity
    if isinstance(solution, HeatedSolution):
        out["temperature"] = solution.temperature
    return out


def _viscosity(solution: Solution, rate, temperature=None) -> np.ndarray:
    """The apparent viscosity at shear rates ``rate``: the local ``eta(gamma, T)`` of a
    heated flow (``temperature`` the temperature at the same points, by default the
    field at the dofs), else the model's."""
    if isinstance(solution, HeatedSolution):
        return solution.local_viscosity(rate, solution.temperature if temperature is None
                                        else temperature)
    return solution.model.viscosity(rate)


def stress_profile_1d(solution: Solution, x: np.ndarray) -> np.ndarray:
    """Magnitude of the shear stress across a 1-D section at coordinates ``x`` (Pa), from
    the momentum balance and the walls' reaction stresses (statics, exact for the
    discrete solution's wall stresses).

    * Axial flow: ``(A sigma)' = G A`` with ``sigma = eta dw/dx`` and ``A`` the area weight
      (1 across a slit, ``2 pi r`` otherwise), so ``sigma(x) = (A_0 sigma_0 + G int_x0^x A)
      / A(x)`` from the first wall ``x0``, whose stress on the fluid gives ``sigma_0``.
      At the axis of a pipe (``A = 0``) the stress is 0 by symmetry.
    * Rotational flow: the torque per length ``M`` is the same on every cylinder
      ``r``, so ``tau(r) = |M| / (2 pi r^2)``.
    * Helical flow (1-D): both components, ``sqrt(sigma_rz^2 + (M / (2 pi r^2))^2)``.
    """
    domain = solution.domain
    signed = wall_stresses(solution)
    x = np.asarray(x, dtype=float)
    if domain.kind == "rotational":
        inner = domain.walls["inner"]
        torque = signed["inner"] * inner.perimeter * inner.position
        return np.abs(torque) / (2 * math.pi * x ** 2)
    name, wall = next(iter(domain.walls.items()))
    # the fluid's stress on the wall is eta dw/dn along the normal into the fluid, the
    # opposite of the domain's outward normal
    sigma0 = -wall.outward_sign * signed[name]
    x0 = wall.position
    G = solution.pressure_gradient
    if domain.axisymmetric:
        moment = x0 * sigma0 + G * (x ** 2 - x0 ** 2) / 2
        sigma = np.divide(moment, x, out=np.zeros_like(x), where=x > 0)
    else:
        sigma = sigma0 + G * (x - x0)
    if isinstance(solution, HelicalSolution):
        torque = solution.torque_per_length["inner"]
        return np.hypot(sigma, torque / (2 * math.pi * x ** 2))
    return np.abs(sigma)


def wall_stresses(solution: Solution) -> dict[str, float]:
    """Signed mean shear stress on each wall (Pa): the axial force the fluid exerts on the
    wall per unit length, along +z, divided by the wall's wetted perimeter; for rotational
    flow the magnitude of the wall-tangential stress. A solution that carries its own
    ``axial_wall_shear_stress`` (helical flow, whose axial flux depends on the rotation
    too) is taken at its word."""
    own = getattr(solution, "axial_wall_shear_stress", None)
    if own:
        return {name: float(own[name]) for name in solution.domain.walls}
    if isinstance(solution, HeatedSolution):
        # the coupled balance's own reaction: the isothermal problem's would take the
        # viscosity at one temperature everywhere
        return {name: float(solution.heat["wall_shear_stress"][name])
                for name in solution.domain.walls}
    reaction = getattr(solution, "reaction", None)   # the exact method's own residual
    if reaction is None:
        problem = solution.problem()
        # with slip the residual vanishes at slipping walls (the slip term balances the
        # viscous flux there): the reaction leaves that term out
        balance = getattr(problem, "reaction", problem.residual)
        reaction = balance(solution.u, solution.pressure_gradient)
    out = {}
    shares = wall_force_shares(solution.domain)
    for name, wall in solution.domain.walls.items():
        dofs, weights = shares[name]
        force = float(weights @ reaction[dofs])  # per unit length, on the fluid
        # the reaction is a s^2 (eta du/dn) at the wall: divide by the wall's weight
        out[name] = -force / wall.perimeter
        if solution.domain.kind == "rotational":
            out[name] = abs(force) / (wall.perimeter * wall.position)
    return out


def singular_exclusion_radius(solution: Solution) -> float:
    """Radius (m) of the neighbourhood of each singular corner that the wall maxima leave
    out: ``SINGULAR_NEIGHBOURHOOD`` times the section's length scale, and at least two of
    the longest wall cells, so that the corner's own cells are always excluded."""
    mesh = solution.domain.basis.mesh
    longest = 0.0
    for facets in solution.domain.extra.get("wall_facets", {}).values():
        ends = mesh.p[:, mesh.facets[:, facets]]
        longest = max(longest, float(np.max(np.linalg.norm(ends[:, 0] - ends[:, 1], axis=0))))
    return max(SINGULAR_NEIGHBOURHOOD * solution.domain.length_scale, 2.0 * longest)


def singular_points(solution: Solution) -> list[dict]:
    """The section's singular corners (a wall-speed jump, a re-entrant corner), as
    recorded by :mod:`gnflow.geometry` in ``domain.extra["singular_points"]``."""
    return list(solution.domain.extra.get("singular_points", ()))


def wall_distributions(solution: Solution) -> dict[str, dict[str, np.ndarray]]:
    """Along each wall of a 2-D section: arc length ``s`` (m, along the chained wall
    facets), points ``x``, ``y``, the signed wall shear stress (Pa, on the wall along +z),
    the shear rate (1/s) at the facet quadrature points, their weights, and
    ``near_singular_corner`` (True within :func:`singular_exclusion_radius` of a
    singular corner).

    Helical flow: the shear rate is that of the whole motion (the in-plane strain of
    ``in_plane_velocity`` with the axial one) and sets the viscosity; heated flow: the
    viscosity is the local one at the wall temperature; wall slip: ``slip_speed`` (m/s,
    the fluid's speed relative to the wall, along +z; 0 on walls that do not slip)."""
    domain = solution.domain
    mesh = domain.basis.mesh
    corners = singular_points(solution)
    radius = singular_exclusion_radius(solution) if corners else 0.0
    laws = getattr(solution.case.drive, "slip", None) or {}
    reaction = getattr(solution, "reaction", None)
    flux = None if reaction is None else consistent_wall_flux(solution, reaction)
    out = {}
    for name in domain.walls:
        facets = _chained(mesh, domain.extra["wall_facets"][name])
        facet_basis = _wall_basis(domain.basis, facets)
        gradient = _at_points(facet_basis, solution.u, 1)
        normal_derivative = np.sum(gradient * facet_basis.normals, axis=0)
        rate = np.abs(normal_derivative)
        rate_squared = np.sum(gradient ** 2, axis=0)
        if isinstance(solution, HelicalSolution) and solution.in_plane_velocity is not None:
            rate_squared = rate_squared + _in_plane_strain_squared(solution, facet_basis, facets)
            rate = np.sqrt(rate_squared)
        temperature = (_at_points(facet_basis, solution.temperature)
                       if isinstance(solution, HeatedSolution) else None)
        viscosity = _viscosity(solution, np.sqrt(rate_squared + solution.rate_floor ** 2),
                               temperature)
        stress = -viscosity * normal_derivative
        if flux is not None:
            stress = -_at_points(facet_basis, flux)
        slip = np.zeros_like(stress)
        if name in laws:
            slip = _at_points(facet_basis, solution.u) - domain.walls[name].value
        points = np.asarray(facet_basis.global_coordinates())
        lengths = facet_basis.dx.sum(axis=1)
        start = np.concatenate([[0.0], np.cumsum(lengths)[:-1]])
        # positions of the quadrature points along each facet, in proportion to weights
        fraction = np.cumsum(facet_basis.dx, axis=1) - 0.5 * facet_basis.dx
        s = start[:, None] + fraction
        order = np.argsort(s.ravel(), kind="stable")
        x, y = points[0].ravel()[order], points[1].ravel()[order]
        near = np.zeros(x.shape, dtype=bool)
        for corner in corners:
            near |= np.hypot(x - corner["x"], y - corner["y"]) <= radius
        out[name] = {"s": s.ravel()[order], "x": x, "y": y,
                     "shear_stress": stress.ravel()[order],
                     "shear_rate": rate.ravel()[order], "weight": facet_basis.dx.ravel()[order],
                     "near_singular_corner": near, "slip_speed": slip.ravel()[order]}
    return out


def _wall_basis(basis, facets) -> FacetBasis:
    """A facet basis of ``basis``'s element on ``facets``, sharing ``basis``'s dofs: the
    same basis as ``FacetBasis(basis.mesh, basis.elem, facets=facets)`` without a second
    numbering of the dofs of the whole mesh and their locations (0.17 s a wall on a
    1M-unknown section; the locations of a facet basis are not used here)."""
    return FacetBasis(basis.mesh, basis.elem, facets=facets, dofs=basis.dofs,
                      disable_doflocs=True)


def consistent_wall_flux(solution: Solution, reaction: np.ndarray) -> np.ndarray:
    """The flux ``eta du/dn`` along the walls (Pa, outward normal) as a field on the
    walls' dofs whose moments are the reaction: ``int_walls sigma phi_i ds = R_i`` for
    every wall dof (the consistent boundary flux). Its integral over the walls is the
    reaction's sum exactly, so wall drag and the force balance agree with it. Used for
    solutions that carry their own ``reaction`` (the exact method, whose model is not
    the one its stresses follow)."""
    domain = solution.domain
    basis = domain.basis
    facets = np.concatenate([np.asarray(f) for f in domain.extra["wall_facets"].values()])
    mass = asm(_mass, _wall_basis(basis, facets)).tocsr()
    dofs = domain.wall_dofs
    sigma = np.zeros(basis.N)
    sigma[dofs] = spla.spsolve(mass[dofs][:, dofs].tocsc(), np.asarray(reaction)[dofs])
    return sigma


def _in_plane_strain_squared(solution: HelicalSolution, facet_basis, facets) -> np.ndarray:
    """``2 (du_x/dx)^2 + 2 (du_y/dy)^2 + (du_x/dy + du_y/dx)^2`` of the in-plane velocity at
    the quadrature points of ``facet_basis`` (the in-plane share of ``gamma^2``, as in
    :mod:`gnflow.solver.coupled`)."""
    velocity = solution.velocity_basis
    ix, iy = velocity.split_indices()
    packed = np.zeros(velocity.N)
    packed[ix], packed[iy] = solution.in_plane_velocity
    on_wall = FacetBasis(facet_basis.mesh, velocity.elem, facets=facets,
                         quadrature=(facet_basis.X, facet_basis.W))
    g = on_wall.interpolate(packed).grad                      # (2, 2, facets, points)
    return 2 * g[0, 0] ** 2 + 2 * g[1, 1] ** 2 + (g[0, 1] + g[1, 0]) ** 2


def _chained(mesh, facets: np.ndarray) -> np.ndarray:
    """The facets of a wall ordered head to tail (each open or closed chain in turn)."""
    ends = mesh.facets[:, facets]
    by_vertex: dict[int, list[int]] = {}
    for k in range(facets.size):
        for v in ends[:, k]:
            by_vertex.setdefault(int(v), []).append(k)
    unused = set(range(facets.size))
    order = []
    # start chains at vertices used once (open ends) before closed loops
    starts = [v for v, ks in by_vertex.items() if len(ks) == 1] + list(by_vertex)
    for v in starts:
        ks = [k for k in by_vertex[v] if k in unused]
        if not ks:
            continue
        k, vertex = ks[0], v
        while k is not None:
            unused.discard(k)
            order.append(k)
            a, b = ends[:, k]
            vertex = int(b if a == vertex else a)
            nxt = [j for j in by_vertex[vertex] if j in unused]
            k = nxt[0] if nxt else None
    return facets[np.array(order, dtype=np.int64)]


def wall_rates_1d(solution: Solution, signed: dict[str, float]) -> dict[str, float]:
    """Shear rate at each wall of a 1-D section (1/s): the model's flow curve inverted at
    the wall's stress, which is exact for the solution's wall stress (no differentiated
    field). Helical flow inverts at the stress of the whole motion, axial and azimuthal
    (``tau_theta = M / (2 pi r_w^2)``, ``M`` the wall's torque per length); heated flow
    with the fluid at the wall's temperature."""
    out = {}
    for name, tau in signed.items():
        wall = solution.domain.walls[name]
        model = solution.model
        if isinstance(solution, HelicalSolution):
            azimuthal = solution.torque_per_length[name] / (wall.perimeter * wall.position)
            tau = math.hypot(tau, azimuthal)
        if isinstance(solution, HeatedSolution) and solution.spec is not None:
            model = solution.spec.reference_model
            if solution.spec.shift is not None:
                wall_temperature = float(np.mean(solution.temperature[wall.dofs]))
                model = at_temperature(model, float(solution.spec.shift.shift(
                    np.array(wall_temperature))))
        out[name] = invert_flow_curve(model, abs(tau)) if tau else 0.0
    return out


def torque_per_length(solution: Solution) -> tuple[float, float]:
    """Torque per length on the inner cylinder (N m/m) and the relative imbalance
    against the outer cylinder's, which must vanish in steady flow."""
    walls = solution.domain.walls
    if isinstance(solution, HeatedSolution):
        # the coupled balance's reaction gives stress magnitudes; the torque turning the
        # inner cylinder has the sign of its rotation relative to the outer one
        drive = solution.case.drive
        sense = math.copysign(1.0, drive.inner_angular_speed - drive.outer_angular_speed)
        inner, outer = (wall_stresses(solution)[n] * walls[n].perimeter * walls[n].position
                        for n in ("inner", "outer"))
        return sense * inner, abs(inner - outer) / max(abs(inner), 1e-300)
    reaction = getattr(solution, "reaction", None)   # the exact method's own residual
    if reaction is None:
        reaction = solution.problem().internal_force(solution.u)
    inner = float(np.sum(reaction[walls["inner"].dofs]))
    outer = float(np.sum(reaction[walls["outer"].dofs]))
    return inner, abs(inner + outer) / max(abs(inner), 1e-300)


def unyielded_zones(solution: Solution, point_fields: dict) -> dict:
    """Where the stress is below the yield stress, located by interpolation
    (:mod:`gnflow.yielded`), with the uncertainty of each figure.

    * 1-D: ``plugs`` (the intervals of :func:`gnflow.yielded.plug_edges_1d` on the
      equilibrated stress profile), ``plug_edge_uncertainty`` (m), and the area fraction
      of those intervals, ``int_plugs A dx / int A dx`` (``A`` the area weight);
    * 2-D: the area fraction of :func:`gnflow.yielded.unyielded_fraction_2d` on the P2
      sub-triangles (P1: the triangles) with the nodal stress;
    * ``unyielded_fraction_uncertainty``: the interpolated figure's difference from the
      node-resolution one (a cautious bound, see :mod:`gnflow.yielded`).

    The exact method (``method = "none"``) keeps its own 2-D fraction, from the
    complementarity of its optimum (the nodal stress of a non-regularised model is not
    defined in a plug), and its uncertainty: the points the complementarity pair leaves
    undecided at the solver tolerance, counted both ways.
    """
    domain, tau_y = solution.domain, solution.model.yield_stress
    stress = point_fields["shear_stress"]
    if domain.dimension == 1:
        x = point_fields["x"][0]
        edges = plug_edges_1d(x, stress, tau_y)
        node = plug_intervals(x, stress, tau_y)
        lower, upper = float(np.min(x)), float(np.max(x))
        fraction = _interval_area(domain, edges.intervals) / _interval_area(domain, [[lower, upper]])
        node_fraction = _interval_area(domain, node) / _interval_area(domain, [[lower, upper]])
        return {"plugs": edges.intervals, "plug_edge_uncertainty": edges.uncertainty,
                "unyielded_fraction": fraction,
                "unyielded_fraction_uncertainty": abs(fraction - node_fraction)}
    report = solution.regularisation or {}
    if report.get("method") == "none" and "unyielded_fraction" in report:
        return {"unyielded_fraction": report["unyielded_fraction"],
                "unyielded_fraction_uncertainty": report.get("unyielded_fraction_uncertainty")}
    basis = domain.basis
    if basis.element_dofs.shape[0] == 6:
        points, triangles = p2_sub_triangles(basis)
    else:
        points, triangles = np.asarray(basis.doflocs), basis.element_dofs[:3]
    weight = None   # a planar section's area weight is 1 (a product with 1 is exact)
    if domain.axisymmetric:
        weight = domain.area_weight(points[:, triangles].mean(axis=1))
    result = unyielded_fraction_2d(points, triangles, stress - tau_y, weight=weight)
    return {"unyielded_fraction": result.fraction,
            "unyielded_fraction_uncertainty": result.uncertainty}


def _interval_area(domain, intervals) -> float:
    """``int A dx`` over 1-D intervals: their length across a slit, ``pi (b^2 - a^2)``
    for an axisymmetric section."""
    if domain.axisymmetric:
        return float(sum(math.pi * (b * b - a * a) for a, b in intervals))
    return float(sum(b - a for a, b in intervals))


def plug_intervals(x: np.ndarray, stress: np.ndarray, yield_stress: float) -> list[list[float]]:
    """Intervals of a 1-D profile where the stress is below the yield stress, at node
    resolution (the reference of :func:`unyielded_zones`' uncertainty)."""
    order = np.argsort(x)
    x, below = x[order], stress[order] < yield_stress
    intervals, start = [], None
    for xi, b in zip(x, below):
        if b and start is None:
            start = xi
        if not b and start is not None:
            intervals.append([float(start), float(xi)])
            start = None
    if start is not None:
        intervals.append([float(start), float(x[-1])])
    return intervals


def reynolds_number(solution: Solution, mean_velocity: float, wall_rate: float,
                    hydraulic_diameter: float) -> tuple[float, str]:
    """Reynolds number of an axial flow and the definition used.

    * Newtonian: ``Re = rho V D_h / mu``;
    * power law: Metzner & Reed (1955), AIChE J. 1, 434,
      ``Re_MR = rho V^(2-n) D^n / (K 8^(n-1) ((3n+1)/(4n))^n)`` with ``D = D_h``;
    * other models: ``rho V D_h / eta(gamma_w)``, the apparent viscosity at the mean
      wall shear rate.
    """
    rho, V, D = solution.case.fluid.density, abs(mean_velocity), hydraulic_diameter
    model = solution.model
    if model.name == "newtonian":
        return rho * V * D / model.viscosity_value, "rho V D_h / mu"
    if model.name == "power-law":
        n, K = model.flow_index, model.consistency
        # numpy powers: an overflow gives inf (caught by the summary's checks), not an exception
        V, D = np.float64(V), np.float64(D)
        return (float(rho * V ** (2 - n) * D ** n / (K * 8 ** (n - 1) * ((3 * n + 1) / (4 * n)) ** n)),
                "Metzner-Reed: rho V^(2-n) D_h^n / (K 8^(n-1) ((3n+1)/(4n))^n)")
    eta = float(model.viscosity(np.array([max(wall_rate, 1e-300)]))[0])
    return rho * V * D / eta, "rho V D_h / eta(mean wall shear rate)"


def flow_start_pressure_gradient(solution: Solution) -> dict | None:
    """The magnitude of the pressure gradient (Pa/m) a yield-stress fluid at rest in the
    section needs to start flowing, with fixed walls; None if walls move or the fluid has
    no yield stress or a wall turns (helical flow). With wall slip on a 1-D section, the
    force balance of a plug that slides where the slip law's yield stress is below the
    fluid's (exact); on a 2-D section with slip, the no-slip limit load as an upper bound.

    * pipe of radius R: ``2 tau_y / R``; slit of gap h: ``tau_y / (h/2)``; concentric
      annulus: ``2 tau_y / (R_o - R_i)``, exact: the stress ``tau(r) = G r / 2 - C / r``
      with ``tau(R_i) = -tau_y`` and ``tau(R_o) = tau_y`` gives
      ``G (R_o^2 - R_i^2) / 2 = tau_y (R_o + R_i)`` and stays within the yield stress
      between (global force balance of the rigid plug at the limit load);
    * 2-D sections: the section's own limit load from
      :func:`gnflow.solver.scales.stopping_gradient` (exact method or closed form), else the
      upper bound ``tau_y P / A`` (the whole section as a candidate plug; the true value,
      ``tau_y`` times the section's Cheeger constant, is at most this).
    """
    domain, model = solution.domain, solution.model
    # a turning wall (helical flow) shears the material whatever the pressure gradient
    if (not model.is_yield_stress or domain.kind != "axial"
            or any(w.value != 0 for w in domain.walls.values())
            or isinstance(solution, HelicalSolution)):
        return None
    tau_y = model.yield_stress
    g = solution.case.geometry
    slip = getattr(solution.case.drive, "slip", None) or {}
    if slip and domain.dimension == 1:
        # a wall whose slip law (coefficient form) starts below the yield stress lets the
        # plug slide there first: the limit is the force balance of the rigid plug, each
        # wall holding at most a_w = min(tau_y, tau_s,w), and the stress between (linear in
        # y, or G r / 2 - C / r) stays within the yield stress, so it is exact. A Navier
        # slip length slips only where the fluid yields: a_w = tau_y.
        def holds(name):
            law = slip.get(name)
            if law is None or law.length is not None:
                return tau_y
            return min(tau_y, law.yield_stress)
        value = sum(w.perimeter * holds(n) for n, w in domain.walls.items()) / domain.area
        return {"value": value, "source": (
            "force balance of the sliding plug, each wall holding min(tau_y, slip yield "
            "stress) (exact, with wall slip)")}
    if domain.shape == "pipe":
        return {"value": 2 * tau_y / g.radius, "source": "2 tau_y / R (exact, pipe)"}
    if domain.shape == "slit":
        return {"value": tau_y / (g.gap / 2), "source": "tau_y / (h/2) (exact, slit)"}
    if domain.dimension == 1 and domain.shape == "annulus":
        return {"value": 2 * tau_y / (g.outer_radius - g.inner_radius),
                "source": "2 tau_y / (R_o - R_i) (exact, concentric annulus)"}
    from .solver.scales import stopping_limit
    found = stopping_limit(domain, tau_y, solution.case)
    value, how = found if found else (None, None)
    if value and slip:
        return {"value": value, "source": (
            f"{how} without wall slip: an upper bound, a slipping wall lets the plug move "
            "at a lower gradient")}
    if value:
        return {"value": value, "source": how}
    perimeter = sum(w.perimeter for w in domain.walls.values())
    return {"value": tau_y * perimeter / domain.area,
            "source": "upper bound tau_y P / A (the true start gradient may be lower)"}


def summarise(solution: Solution, point_fields: dict | None,
              distributions: dict | None) -> dict:
    """The summary dict (SI units) written to ``summary.json``.

    ``point_fields`` (yield-stress flows: plug intervals, unyielded fraction) and ``distributions`` (2-D:
    wall maxima and means) are those of :func:`fields` and :func:`wall_distributions`,
    computed once by the caller. A converged solve whose numbers are not all finite, or
    whose force or torque balance fails, is reported ``converged: false`` with the reason.
    """
    case, domain = solution.case, solution.domain
    warnings = list(getattr(case, "notices", ())) + list(solution.warnings)
    notes: list[str] = []
    out = {
        "title": case.title,
        "shape": domain.shape,
        "section_dimension": domain.dimension,   # 1: across a gap, 2: a cross-section
        "model": solution.model.name,
        "converged": solution.converged,
        "iterations": solution.iterations,
        "residual": solution.residual,
        "message": solution.message,
        "dofs": int(domain.dofs),
        "cells": int(domain.cells),
        "degree": domain.degree,
        "solve_seconds": solution.seconds,
    }
    if "adapted" in domain.extra:   # the default 1-D mesh, adapted (gnflow.solver.adapt)
        out["mesh_adapted"] = dict(domain.extra["adapted"])
    signed = wall_stresses(solution)
    out.update(_wall_summary(solution, signed, distributions, notes))
    if domain.kind == "axial":
        _axial_summary(solution, signed, out, warnings, notes)
    else:
        _rotational_summary(solution, out, warnings)
    if isinstance(solution, HelicalSolution):
        _helical_summary(solution, out)
    if isinstance(solution, HeatedSolution):
        _heat_summary(solution, out)
    if getattr(case.drive, "slip", None):
        _slip_summary(solution, out)
    if solution.model.is_yield_stress:
        _yield_summary(solution, point_fields, out, warnings)
    if solution.regularisation:
        out["regularisation"] = solution.regularisation
    warnings += _extrapolation_warnings(case, out)
    if case.fluid.temperature_law:
        out["temperature"] = case.fluid.temperature
        out["temperature_law"] = case.fluid.temperature_law
    _check_converged(solution, out)
    if not out["converged"]:
        warnings.append(out["message"])
    out["warnings"] = warnings
    out["notes"] = notes
    out["assumptions"] = assumptions_for(case)
    out["cautions"] = cautions_for(case)
    out["caution"] = CAUTION
    return out


def _wall_summary(solution: Solution, signed: dict, distributions: dict | None,
                  notes: list[str]) -> dict:
    """Wall shear stress and rate, magnitudes, per wall, mean and max (see the module
    docstring for the convention)."""
    domain = solution.domain
    perimeters = {n: w.perimeter for n, w in domain.walls.items()}
    total = sum(perimeters.values())
    stresses = {n: abs(t) for n, t in signed.items()}
    stress = {"convention": (
        "magnitudes; per wall |axial force on the wall| / perimeter; mean perimeter-weighted; "
        "max the largest local value" if domain.kind == "axial" else
        "magnitudes of the azimuthal shear stress on each cylinder; mean perimeter-weighted")}
    if domain.dimension == 1:
        rates = wall_rates_1d(solution, signed)
        largest_stress, largest_rate = max(stresses.values()), max(rates.values())
    else:
        # the mean per wall is the perimeter-weighted mean of the local rate; maxima come
        # from the distribution, away from singular corners, where the local stress of
        # the exact solution is unbounded and the computed one grows with refinement
        rates = {n: float(np.sum(d["shear_rate"] * d["weight"]) / np.sum(d["weight"]))
                 for n, d in distributions.items()}
        kept = [(np.abs(d["shear_stress"][~d["near_singular_corner"]]),
                 d["shear_rate"][~d["near_singular_corner"]]) for d in distributions.values()]
        largest_stress = max((float(np.max(t)) for t, _ in kept if t.size), default=math.nan)
        largest_rate = max((float(np.max(r)) for _, r in kept if r.size), default=math.nan)
        corners = singular_points(solution)
        if corners:
            radius = singular_exclusion_radius(solution)
            stress["excluded_near_singular_corners"] = {
                "radius": radius, "points": [[c["x"], c["y"]] for c in corners]}
            notes.append(f"wall maxima exclude {radius * 1e3:.3g} mm around {len(corners)} "
                         "singular corner(s) (" + "; ".join(
                             f"{c.get('kind', 'corner')} at ({c['x'] * 1e3:.4g}, "
                             f"{c['y'] * 1e3:.4g}) mm" for c in corners)
                         + "), where the computed stress grows without bound under "
                         "refinement")
    stress.update(mean=sum(stresses[n] * perimeters[n] for n in stresses) / total,
                  max=largest_stress, per_wall=stresses)
    if domain.kind == "axial":
        stress["force_direction"] = {n: ("+z" if t > 0 else "-z" if t < 0 else "none")
                                     for n, t in signed.items()}
    rate = {"mean": sum(rates[n] * perimeters[n] for n in rates) / total, "max": largest_rate,
            "per_wall": rates}
    return {"wall_shear_stress": stress, "wall_shear_rate": rate}


def _axial_summary(solution: Solution, signed: dict, out: dict, warnings: list[str],
                   notes: list[str]) -> None:
    domain = solution.domain
    problem = solution.problem()
    gradient = solution.pressure_gradient
    flow_rate = problem.flow_rate(solution.u)
    peak = float(np.max(np.abs(solution.u)))
    # a net flow below round-off of the largest speed times the area has no direction
    moving = abs(flow_rate) > 1e-12 * peak * domain.area
    direction = (1.0 if flow_rate > 0 else -1.0) if moving else 0.0
    out.update({
        "pressure_gradient": gradient,
        "flow_direction": {1.0: "+z", -1.0: "-z", 0.0: "none"}[direction],
        # positive when the pressure falls along the flow
        "pressure_drop_per_length": -gradient * (direction or 1.0),
        "flow_rate": flow_rate,
        "mean_velocity": abs(flow_rate) / domain.area,
        "max_velocity": peak,
        "max_velocity_signed": float(np.max(solution.u)),
        "min_velocity": float(np.min(solution.u)),
        "hydraulic_diameter": domain.hydraulic_diameter,
        "cross_section_area": domain.area,
        "moving_walls": [n for n, w in domain.walls.items() if w.value != 0],
    })
    if moving and out["min_velocity"] * out["max_velocity_signed"] < 0 and min(
            abs(out["min_velocity"]), abs(out["max_velocity_signed"])) > 1e-6 * peak:
        notes.append("part of the section flows against the net flow direction (axial "
                     f"velocity from {out['min_velocity']:.4g} to "
                     f"{out['max_velocity_signed']:.4g} m/s, positive toward +z)")
    perimeters = {n: w.perimeter for n, w in domain.walls.items()}
    # steady axial momentum: the pressure force on the section balances the wall drag
    drag = sum(signed[n] * perimeters[n] for n in signed)
    discrete_area = float(problem.load.sum())
    # relative to the largest force in balance: in plane Couette flow the wall drags
    # cancel each other, and their sum is round-off
    largest = max(max(abs(signed[n]) * perimeters[n] for n in signed),
                  abs(gradient * discrete_area), 1e-300)
    out["force_balance_error"] = abs(drag + gradient * discrete_area) / largest
    # work rates per length: the pressure's -G Q and each moving wall's U F (F the
    # force of the wall on the fluid, -signed * perimeter); their sum is dissipated
    pressure_power = -gradient * flow_rate
    wall_power = sum(-domain.walls[n].value * signed[n] * perimeters[n] for n in signed)
    wall_driven = wall_power > abs(pressure_power)
    out["power_per_length"] = {"pressure": pressure_power, "walls": wall_power,
                               "dissipated": pressure_power + wall_power}
    out["driven_by"] = "moving walls" if wall_driven else "pressure gradient"
    unit = "W/m^2" if domain.shape == "slit" else "W/m"
    if wall_driven:
        notes.append(f"driven mainly by moving walls ({wall_power:.4g} {unit} of wall work "
                     f"against {pressure_power:.4g} {unit} of pressure work): no pumping power "
                     "or Fanning friction factor is given, as both presume a pressure-driven "
                     "flow")
    else:
        out["pumping_power_per_length"] = pressure_power
    start = flow_start_pressure_gradient(solution)
    yields = True
    if start is not None:
        out["flow_start_pressure_gradient"] = start
        yields = abs(gradient) > start["value"]
    out["yields"] = yields
    if not yields:
        return   # no Reynolds number or friction factor: see _yield_summary's warning
    _reynolds_summary(solution, out, warnings, wall_driven, direction)


def _reynolds_summary(solution: Solution, out: dict, warnings: list[str], wall_driven: bool,
                      direction: float) -> None:
    case, domain, model = solution.case, solution.domain, solution.model
    rho = case.fluid.density
    if rho is None:
        out["laminar_check"] = "not made: no [fluid] density given"
        warnings.append("no density given: no Reynolds number and no laminar check; the "
                        "laminar assumption is not verified")
        return
    if not direction:
        out["laminar_check"] = "not made: no net flow"
        return
    V, D = out["mean_velocity"], domain.hydraulic_diameter
    re, definition = reynolds_number(solution, V, out["wall_shear_rate"]["mean"], D)
    out["reynolds_number"] = re
    out["reynolds_definition"] = definition
    if not wall_driven:
        # f = (-dp/dz along the flow) D_h / (2 rho V^2); with fixed walls this equals the
        # mean wall shear stress over rho V^2 / 2 by the force balance
        out["fanning_friction_factor"] = out["pressure_drop_per_length"] * D / (2 * rho * V * V)
    critical, criterion = laminar_limit(model, rho, D)
    compared, compared_name = re, "reynolds_number"
    if model.name == "bingham":
        # Hanks' criterion (Hanks 1963, AIChE J. 9) is stated on the plastic Reynolds
        # number rho V D / mu_p and the Hedstrom number (Hedstrom 1952)
        compared = bingham_plastic_reynolds(rho, V, D, model.plastic_viscosity)
        compared_name = "plastic_reynolds_number"
        out["plastic_reynolds_number"] = compared
        out["hedstrom_number"] = hedstrom_number(rho, model.yield_stress,
                                                 model.plastic_viscosity, D)
    if domain.shape != "pipe":
        criterion += f"; {APPROXIMATE_OFF_PIPE}"
    out["laminar_limit"] = {"reynolds_number": critical, "compared": compared_name,
                            "criterion": criterion}
    out["laminar_check"] = "passed" if compared <= critical else "failed"
    warning = laminar_warning(compared, critical, criterion)
    if warning:
        warnings.append(warning)


def _rotational_summary(solution: Solution, out: dict, warnings: list[str]) -> None:
    case = solution.case
    torque, imbalance = torque_per_length(solution)
    out["torque_per_length"] = torque
    out["torque_imbalance"] = imbalance
    out["inner_angular_speed"] = case.drive.inner_angular_speed
    out["outer_angular_speed"] = case.drive.outer_angular_speed
    out["power_per_length"] = torque * (case.drive.inner_angular_speed
                                        - case.drive.outer_angular_speed)
    g = case.geometry
    if case.fluid.density is None:
        out["laminar_check"] = "not made: no [fluid] density given"
        warnings.append("no density given: no Taylor number and no check for Taylor vortices")
        return
    if case.drive.inner_angular_speed != 0:
        gap = g.outer_radius - g.inner_radius
        inner_rate = out["wall_shear_rate"]["per_wall"]["inner"]
        eta = float(solution.model.viscosity(np.array([max(inner_rate, 1e-300)]))[0])
        nu = eta / case.fluid.density
        taylor = (case.drive.inner_angular_speed * g.inner_radius * gap / nu) ** 2 * (
            gap / g.inner_radius)
        out["taylor_number"] = taylor
        out["laminar_check"] = "passed" if taylor <= CRITICAL_TAYLOR else "failed"
        if taylor > CRITICAL_TAYLOR:
            warnings.append(
                f"Taylor number {taylor:.4g} exceeds {CRITICAL_TAYLOR:.0f} (narrow-gap "
                "critical value, Taylor 1923; common practice as a limit): Taylor vortices "
                "are likely and the purely azimuthal flow computed here does not hold")


def _helical_summary(solution: HelicalSolution, out: dict) -> None:
    """Helical flow: torques, the power split and the Taylor number.

    * ``wall_torque_per_length`` (N m/m): the torque applied to each cylinder to turn it,
      about its own centre (a dict, where ``torque_per_length`` of coaxial cylinders is one
      number); ``azimuthal_wall_shear_stress`` (Pa): its magnitude over perimeter
      times radius, the mean azimuthal stress on that cylinder.
    * ``torque_imbalance``: the torques about the outer centre must cancel: ``M_i + M_o +
      c_i x F_i = 0`` with ``c_i`` the inner centre and ``F_i`` the in-plane force of the
      inner wall on the fluid (concentric: ``M_i + M_o = 0``); relative to the larger torque.
    * ``power_per_length`` (W/m): ``pressure`` and ``walls`` (axial work, as for axial flow),
      ``rotation`` (``sum Omega M``), ``dissipated`` (their sum), and ``dissipation_integral``
      (``int eta gamma^2 dA``); ``power_balance_error`` their relative difference, which the
      steady energy balance makes vanish (to the solver tolerance).
    * ``side_force_per_length`` (2-D, N/m): the in-plane force of the fluid on the inner
      cylinder, ``[F_x, F_y]``.
    * ``taylor_number`` (the solver's, narrow-gap form) and ``taylor_check``.
    """
    case, domain = solution.case, solution.domain
    torques = dict(solution.torque_per_length)
    out["wall_torque_per_length"] = torques
    out["azimuthal_wall_shear_stress"] = {
        n: abs(m) / (domain.walls[n].perimeter * _wall_radius(case, n)) for n, m in torques.items()}
    moment = torques["inner"] + torques["outer"]
    if solution.in_plane_wall_force:
        fx, fy = solution.in_plane_wall_force["inner"]
        centre = case.geometry.eccentricity * (case.geometry.outer_radius
                                               - case.geometry.inner_radius)
        moment += centre * fy
        out["side_force_per_length"] = [-fx, -fy]
    largest = max(abs(torques["inner"]), abs(torques["outer"]))
    out["torque_imbalance"] = abs(moment) / largest if largest > 0 else 0.0
    out["inner_angular_speed"] = case.drive.inner_angular_speed
    out["outer_angular_speed"] = case.drive.outer_angular_speed
    power = out["power_per_length"]
    power["rotation"] = solution.power_per_length["rotational"]
    power["dissipated"] = power["pressure"] + power["walls"] + power["rotation"]
    power["dissipation_integral"] = solution.power_per_length["dissipation"]
    out["power_balance_error"] = abs(power["dissipated"] - power["dissipation_integral"]) / max(
        abs(power["dissipation_integral"]), 1e-300)
    out["taylor_number"] = solution.taylor_number
    out["taylor_check"] = ("not made: no [fluid] density given" if solution.taylor_number is None
                           else "passed" if solution.taylor_number <= CRITICAL_TAYLOR
                           else "failed")
    out["helical_assumptions"] = list(solution.assumptions)


def _wall_radius(case, name: str) -> float:
    return case.geometry.inner_radius if name == "inner" else case.geometry.outer_radius


#: units of the ``heat`` block of the summary
HEAT_UNITS = {"max_temperature": "K", "mean_temperature": "K", "mean_wall_temperature": "K",
              "max_temperature_rise": "K", "mean_temperature_rise": "K",
              "load_factor_reached": "1", "critical_load_factor": "1",
              "dissipation_per_length": "W/m (slit: W/m^2)", "nahme_griffith_number": "1",
              "brinkman_number": "1", "characteristic_speed": "m/s"}


def _heat_summary(solution: HeatedSolution, out: dict) -> None:
    """Viscous heating: the ``heat`` block, the numbers of :mod:`gnflow.solver.heat` with
    their units (``units``), and the temperature law and walls as solved. The wall
    stresses of the summary are already the coupled balance's (:func:`wall_stresses`)."""
    block = {k: v for k, v in solution.heat.items() if k != "wall_shear_stress"}
    spec = solution.spec
    if spec is not None:
        block["conductivity"] = spec.conductivity
        block["wall_temperature"] = dict(spec.wall_temperature)
        block["insulated"] = list(spec.insulated)
        block["temperature_law"] = (None if spec.shift is None else {
            "law": spec.shift.law, "constant": spec.shift.constant,
            "unit": "J/mol" if spec.shift.law == "arrhenius" else "1/K",
            "reference_temperature": spec.shift.reference_temperature})
    block["units"] = {**HEAT_UNITS, "conductivity": "W/(m K)", "wall_temperature": "K"}
    out["heat"] = block


def _slip_summary(solution: Solution, out: dict) -> None:
    """Wall slip: per slipping wall, ``slip_speed`` (m/s, the mean speed of the fluid
    relative to the wall along +z), ``wall_shear_stress`` (Pa, signed along +z: the
    stress of the fluid on the wall by the slip law; the summary's ``wall_shear_stress``
    is the reaction's, equal to it to the solver tolerance) and the ``law`` (SI).
    Coaxial cylinders: the same along +theta (the sense of a positive angular speed),
    ``slip_speed = R (omega(R) - Omega_wall)``; negative on the faster cylinder, which
    the fluid lags."""
    problem = solution.problem()
    slip = getattr(problem, "slip", None)
    if slip is None:   # a solver without slip terms (e.g. helical flow): say so
        out["slip"] = {"note": "slip laws are not applied by this solver"}
        return
    slip = slip.with_model(solution.model)
    speeds, stresses = slip.slip_speed(solution.u), slip.wall_stress(solution.u)
    out["slip"] = {name: {"slip_speed": speeds[name], "wall_shear_stress": stresses[name],
                          "law": {k: v for k, v in vars(law).items() if v is not None}}
                   for name, law in solution.case.drive.slip.items()}


def _yield_summary(solution: Solution, point_fields: dict | None, out: dict,
                   warnings: list[str]) -> None:
    model, domain = solution.model, solution.domain
    out.update(unyielded_zones(solution, point_fields))
    out["yield_stress"] = model.yield_stress
    # moving walls always shear the material; with fixed walls the drive is compared
    # with the section's flow-start gradient (see flow_start_pressure_gradient)
    creeping = out.get("yields") is False
    already = any("does not flow" in w for w in warnings)
    # 2-D sections carry their own warning, from the section's limit load
    if creeping and not already and domain.dimension == 1:
        start = out["flow_start_pressure_gradient"]
        warnings.append(f"the material does not yield: it does not flow below |dp/dz| = "
                        f"{start['value']:.4g} Pa/m ({start['source']}); the small flow "
                        "computed is creep of the regularised model, not a real flow, and "
                        "no Reynolds number or friction factor is given")


def _extrapolation_warnings(case, out: dict) -> list[str]:
    warnings = []
    rate_range = case.fluid.fitted_rate_range
    if rate_range:
        largest, mean = out["wall_shear_rate"]["max"], out["wall_shear_rate"]["mean"]
        if largest > rate_range[1]:
            warnings.append(f"the wall shear rate {largest:.4g} 1/s exceeds the highest rate of "
                            f"the fluid definition's data ({rate_range[1]:.4g} 1/s): the model "
                            "is extrapolated")
        if mean < rate_range[0]:
            warnings.append(f"the mean wall shear rate {mean:.4g} 1/s is below the lowest rate "
                            f"of the fluid definition's data ({rate_range[0]:.4g} 1/s): the "
                            "model is extrapolated")
    temperature_range = case.fluid.fitted_temperature_range
    if temperature_range and case.fluid.temperature is not None and not (
            temperature_range[0] <= case.fluid.temperature <= temperature_range[1]):
        warnings.append(f"the case temperature {case.fluid.temperature - 273.15:.4g} degC lies "
                        f"outside the fluid definition's data ({temperature_range[0] - 273.15:.4g}"
                        f" to {temperature_range[1] - 273.15:.4g} degC): the temperature law is "
                        "extrapolated")
    return warnings


def _all_finite(value) -> bool:
    """Whether every number in a summary is finite: the common case, walked without
    building the dotted names :func:`_non_finite` gives (a third of a 1-D summary's time)."""
    stack = [value]
    while stack:
        item = stack.pop()
        kind = type(item)
        if kind is float:
            if not math.isfinite(item):
                return False
        elif kind is dict:
            stack.extend(item.values())
        elif kind is list or kind is tuple:
            stack.extend(item)
        elif kind in (str, int, bool, type(None)):
            continue
        elif isinstance(item, dict):
            stack.extend(item.values())
        elif isinstance(item, (list, tuple)):
            stack.extend(item)
        elif isinstance(item, (float, np.floating)) and not math.isfinite(item):
            return False
    return True


def _non_finite(value, path: str = "") -> list[str]:
    """Dotted names of the non-finite numbers in a summary."""
    if isinstance(value, dict):
        return [p for k, v in value.items() for p in _non_finite(v, f"{path}{k}.")]
    if isinstance(value, (list, tuple)):
        return [p for i, v in enumerate(value) for p in _non_finite(v, f"{path}{i}.")]
    if isinstance(value, (float, np.floating)) and not math.isfinite(value):
        return [path.rstrip(".")]
    return []


def _check_converged(solution: Solution, out: dict) -> None:
    """Demote a converged solve whose summary fails its own checks: every number
    finite, the force balance (axial) or torque balance (rotational) within tolerance."""
    if not out["converged"]:
        return
    reasons = []
    checked = {k: v for k, v in out.items() if k != "regularisation"}
    bad = [] if _all_finite(checked) else _non_finite(checked)
    if bad:
        reasons.append("non-finite " + ", ".join(bad[:5]))
    tolerance = max(BALANCE_TOLERANCE, 100 * solution.case.solver.tolerance)
    for key, name in (("force_balance_error", "force balance"),
                      ("torque_imbalance", "torque balance")):
        error = out.get(key)
        if error is not None and not error <= tolerance:
            reasons.append(f"{name} error {error:.3g} above {tolerance:.3g}")
    if reasons:
        out["converged"] = False
        out["message"] = (f"not converged: the solver met its tolerance but the result fails "
                          f"its checks ({'; '.join(reasons)})")
