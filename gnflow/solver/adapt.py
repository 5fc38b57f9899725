"""The adapted default mesh of a smooth 1-D flow: one solve, an estimate of the error of
its flow rate (or torque) from the closed form of the stress field, and, where the
estimate asks for it, a second solve on a mesh that spreads that error evenly.

Every 1-D flow has its stress field in closed form up to one constant: the flux
``q = a s tau`` (area weight ``a``, rate factor ``s``, signed shear stress ``tau``)
obeys ``q' = G a`` (``G = 0`` for rotational flow). The solve on the default mesh gives
``G`` and the wall flux (the residual at a wall dof), so the exact solution's rate
``u'`` is known at any point through the inverse flow curve, and so is the rate ``z'``
of the dual solution (the linearised problem loaded by the flow rate, or driven by a
unit wall speed for the torque), whose flux is ``-(A(x) + c)`` with ``A = int a dx``.
With ``T`` the tangent of the flow curve and ``w = a s^2 T``, the P2 solution's rate in
a cell is close to the w-weighted L2 projection ``Pi`` of the exact rate on the linear
functions, so the output's error is about ``sum int w (u' - Pi u')(z' - Pi z')`` over the
cells: the dual-weighted form of the error (Becker & Rannacher 2001, Acta Numerica 10)
with cell-wise best-approximation errors. The estimate sums the cells' terms without
sign, over ``|Q|`` (or the wall flux); the mesh is built on the larger
``sqrt(E_u E_z)``, ``E_f = int w (f' - Pi f')^2``. Both rates are exact in form where
they are not smooth: at the zero-stress point of a power law the rate goes as
``|x - x0|^(1/n)`` and ``T`` vanishes (``n > 1``) or grows without bound (``n < 1``);
with a moving wall the dual rate does not vanish there and is the more singular of the
two, so the energy of the error alone underestimates the flow-rate error of such flows
5 to 50 times (measured on the smooth cases of ``bench/smooth_1d.py``, where this
estimate is 0.25 to 4 times the error wherever the error exceeds 1e-9).

A cheap screen from the discrete solution alone (:func:`screen`) skips the estimate where
the error is far below the trigger (not for power laws in axial flow, whose cusp it cannot
see). Where the estimate exceeds :data:`TRIGGER`, the mesh is rebuilt from the default one: a
node moves to the zero-stress point if there is one, pairs of cells far below the cell
tolerance are merged, cells above it are cut (graded toward the zero-stress point) until
the estimate is below :data:`TARGET`, and the flow is solved again, starting from the
exact solution of the first solve's stress field, made the discrete solution on the new
mesh cell by cell (:func:`gnflow.solver.line_flow.discrete_line_solution`), so that Newton
only confirms it. Only the default mesh is adapted
(``[mesh]`` without ``cells`` or ``wall_refinement``, see ``MeshSpec.adaptive``). Where
the start is itself the exact solution with its exact wall flux (a power law in axial
flow at a given pressure gradient, :func:`adapted_at_once`), an estimate above the
trigger sends the solve to the adapted mesh before any solve on the default one, and one
far below it, without a zero-stress point inside the gap, stands for the estimate of the
solve on the default mesh (:data:`STANDING_ESTIMATE`).
"""

from __future__ import annotations

import math

import numpy as np

from ..geometry import build_domain
from .line_flow import cusp_rule, discrete_line_solution, flow_curve_rates

#: Estimated relative error of the flow rate (torque) above which the default mesh is
#: adapted: on the smooth cases above the estimate is at least 0.25 times the error
#: wherever that exceeds 1e-9.
TRIGGER = 4e-9
#: The estimated relative error the adapted mesh is built for.
TARGET = 1e-9
#: An adapted mesh has at most this many cells (the re-solve stays in milliseconds);
#: past it the default mesh's solution is kept.
MAX_ADAPTED_CELLS = 1200
#: An estimate from the exact start at most this fraction of TRIGGER, for a flow without
#: a zero-stress point inside the gap, stands for the one from the solve on the default
#: mesh (refined forms no second one): the two were within 0.7 % of each other on the 48
#: such pipe and annulus flows measured (power laws n = 0.2 to 2, dp/dz -300 and -6000
#: Pa/m, walls at rest and moving; estimates 3e-15 to 7e-10). Near a zero-stress point
#: they differ (the start's flux places it exactly), and both are formed as before.
STANDING_ESTIMATE = 0.25

_XI, _WEIGHTS = np.polynomial.legendre.leggauss(4)
_TWO_POINTS = np.polynomial.legendre.leggauss(2)


class RateProfile:
    """The exact rates of a solved 1-D flow and of its dual, from the closed form of the
    stress field and the solution's pressure gradient and wall flux."""

    def __init__(self, solution, wall_flux: float | None = None):
        """The profile of a solution, or (``wall_flux`` given, the flux ``q`` at the
        outermost wall) of any state of its problem: a start whose flux is known."""
        problem = solution.problem()
        domain = solution.domain
        self.domain, self.problem, self.u = domain, problem, solution.u
        self.model, self.floor = problem.model, problem.rate_floor
        self.gradient = solution.pressure_gradient if domain.kind == "axial" else 0.0
        wall = max(domain.walls.values(), key=lambda w: w.position)
        self.x_wall = wall.position
        if wall_flux is None:
            residual = problem.residual(solution.u, self.gradient)
            wall_flux = wall.outward_sign * float(residual[wall.dofs[0]])
        self.q_wall = wall_flux
        self.nodes = domain.basis.mesh.p[0].copy()
        self.dofs = domain.basis.element_dofs
        self.x0 = self._zero_stress_point()
        self.dual_constant = None
        # the output and its size: the flow rate, or the torque (the wall flux)
        self.output = (abs(problem.flow_rate(solution.u)) if domain.kind == "axial"
                       else abs(self.q_wall))

    def _primitive(self, x):
        """``A(x) = int a dx`` up to a constant."""
        return math.pi * x * x if self.domain.axisymmetric else x

    def flux(self, x):
        return self.q_wall + self.gradient * (self._primitive(x) - self._primitive(self.x_wall))

    def _zero_stress_point(self) -> float | None:
        """The interior point where the stress vanishes (snapped to a node within
        round-off of it), or None."""
        if self.gradient == 0.0:
            return None
        value = self._primitive(self.x_wall) - self.q_wall / self.gradient
        if self.domain.axisymmetric:
            x0 = math.sqrt(value / math.pi) if value > 0 else None
        else:
            x0 = value
        lo, hi = self.nodes[0], self.nodes[-1]
        if x0 is None or not lo < x0 < hi:
            return None
        nearest = self.nodes[np.argmin(np.abs(self.nodes - x0))]
        return float(nearest) if abs(nearest - x0) <= 1e-9 * (hi - lo) else x0

    def _locate(self, x):
        p = self.nodes
        cell = np.clip(np.searchsorted(p, x) - 1, 0, p.size - 2)
        h = p[cell + 1] - p[cell]
        d = self.dofs
        return (x - p[cell]) / h, h, self.u[d[0, cell]], self.u[d[1, cell]], self.u[d[2, cell]]

    def fe_derivative(self, x):
        """``du/dx`` of the P2 solution at points ``x``."""
        t, h, u0, u1, um = self._locate(x)
        return (u0 * (4 * t - 3) + u1 * (4 * t - 1) + um * (4 - 8 * t)) / h

    def fe_values(self, x):
        """The P2 solution at points ``x`` (the start of the re-solve)."""
        t, _, u0, u1, um = self._locate(x)
        return u0 * (1 - t) * (1 - 2 * t) + u1 * t * (2 * t - 1) + um * 4 * t * (1 - t)

    def fields(self, x):
        """(``w = a s^2 T``, signed ``u'``, ``A(x)``) at points ``x``, or None if the flow
        curve cannot be inverted there."""
        a = self.domain.area_weight(x[None])
        s = self.domain.rate_factor(x[None])
        q = self.flux(x)
        stress = np.abs(q) / (a * s)
        # at (or within round-off of) the zero-stress point: a stress 1e-14 times the
        # largest is zero to the estimate, and keeps the inversion's steps few
        stress = np.maximum(stress, 1e-14 * np.max(stress, initial=0.0))
        if self.model.name == "power-law":
            # the flow curve inverted in closed form; the rate floor (1e-9 of the flow's
            # rate scale) changes the rates by far less than the estimate needs
            rate = (stress / self.model.consistency) ** (1.0 / self.model.flow_index)
        else:
            # the start: the rate at the stress with the first solve's viscosity there,
            # exact on a Newtonian plateau (near a zero-stress point), close elsewhere
            first = np.abs(self.fe_derivative(x)) * s
            start = stress / self.model.viscosity(np.sqrt(first * first + self.floor * self.floor))
            rate = flow_curve_rates(self.model, self.floor, stress, start)
            if rate is None:
                return None
        floored = np.sqrt(rate * rate + self.floor * self.floor)
        tangent = self.model.viscosity(floored) + \
            self.model.viscosity_derivative(floored) * rate * rate / floored
        primitive = self._primitive(x) if self.domain.kind == "axial" else np.zeros_like(x)
        return a * s * s * tangent, np.sign(q) * rate / s, primitive

    def _rules(self, lo, hi, rule=None):
        """[(cells, points (cells, k), weights (cells, k))]: 8-point Gauss, and the
        graded rule for a cell holding the zero-stress point."""
        near = (np.zeros(lo.size, dtype=bool) if self.x0 is None
                else (lo <= self.x0) & (self.x0 <= hi))
        rules = []
        plain = np.flatnonzero(~near)
        if plain.size:
            rules.append((plain, *(rule or (_XI, _WEIGHTS))))
        for k in np.flatnonzero(near):
            xi, weights = cusp_rule(2 * (self.x0 - lo[k]) / (hi[k] - lo[k]) - 1)
            rules.append((np.array([k]), xi, weights))
        return rules

    def _sampled(self, lo, hi, rule=None):
        """For each rule: (cells, xi, weights * half, w, u', A) at its points, from one
        evaluation of the fields at all of them; None on failure."""
        rules, points = self._rules(lo, hi, rule), []
        for cells, xi, _ in rules:
            half = 0.5 * (hi[cells] - lo[cells])
            points.append(((0.5 * (lo[cells] + hi[cells]))[:, None]
                           + half[:, None] * xi[None, :]).ravel())
        found = self.fields(np.concatenate(points))
        if found is None:
            return None
        out, start = [], 0
        for (cells, xi, weights), x in zip(rules, points):
            shape = (cells.size, xi.size)
            w, g, prim = (f[start:start + x.size].reshape(shape) for f in found)
            start += x.size
            half = 0.5 * (hi[cells] - lo[cells])
            out.append((cells, xi, weights[None, :] * half[:, None], w, g, prim))
        return out

    def set_dual(self, sampled) -> bool:
        """Fix the dual's flux constant from the walls, given the samples of all cells
        (False if it cannot be found)."""
        inverse = sum(float(np.sum(dx / w)) for _, _, dx, w, _, _ in sampled)
        moment = sum(float(np.sum(dx * prim / w)) for _, _, dx, w, _, prim in sampled)
        if self.domain.kind != "axial":
            self.dual_constant = 1.0 / inverse        # z goes from 1 to 0 across the gap
        elif len(self.domain.walls) == 1:
            self.dual_constant = 0.0                   # pipe: no flux on the axis
        else:
            self.dual_constant = -moment / inverse     # z = 0 on both walls
        return math.isfinite(self.dual_constant)

    def indicators(self, lo, hi, sampled=None):
        """``sqrt(E_u E_z)`` of the cells ``[lo, hi]`` (arrays), or None."""
        sampled = sampled or self._sampled(lo, hi)
        if sampled is None:
            return None
        result = np.empty(lo.size)
        self.cross = np.empty(lo.size)
        for cells, xi, dx, w, g, prim in sampled:
            error_u, error_z, cross = _projection_errors(xi, dx, w, g,
                                                         -(prim + self.dual_constant) / w)
            result[cells] = np.sqrt(error_u * error_z)
            self.cross[cells] = cross
        return result if np.all(np.isfinite(result)) else None

    def values(self, points) -> np.ndarray | None:
        """The exact solution at ``points`` (sorted, from wall to wall) for the first
        solve's pressure gradient: the rate integrated from wall to wall, with the wall
        flux corrected to first order so that the far wall's speed is met (pipe: the
        flux vanishes on the axis). The start of the re-solve."""
        lo, hi = points[:-1], points[1:]
        walls = sorted(self.domain.walls.values(), key=lambda w: w.position)
        if len(walls) == 1:
            self.q_wall = self.gradient * self._primitive(self.x_wall)
        for _ in range(2):
            self.x0 = self._zero_stress_point()
            sampled = self._sampled(lo, hi, _TWO_POINTS)   # half-cells: 2 points will do
            if sampled is None:
                return None
            steps, compliance = np.empty(lo.size), np.empty(lo.size)
            for cells, _, dx, w, g, _ in sampled:
                steps[cells] = np.sum(dx * g, axis=1)
                compliance[cells] = np.sum(dx / w, axis=1)
            u = np.concatenate([[0.0], np.cumsum(steps)]) + walls[0].value
            if len(walls) == 1:
                return u - u[-1] + walls[0].value
            # the flux correction dq that meets the far wall changes u' by dq / w: to
            # first order, u changes by dq int 1/w; where w vanishes (a zero-stress point
            # for n > 1) that is not enough, and the flux is corrected and u formed again
            reach = np.concatenate([[0.0], np.cumsum(compliance)])
            mismatch = walls[1].value - u[-1]
            if abs(mismatch) <= 1e-6 * np.max(np.abs(u)):
                break
            self.q_wall += mismatch / reach[-1]
        return u + mismatch * reach / reach[-1]


def _projection_errors(xi, dx, w, f, h):
    """``(int w (f - Pi f)^2, int w (h - Pi h)^2, int w (f - Pi f)(h - Pi h))`` per cell,
    ``Pi`` the w-weighted L2 projection on the linear functions of the cell coordinate
    ``xi``; formed as ``(f, h) - (Pi f, Pi h)``, whose rounding (1e-16 of the products
    per cell) is far below any error that matters here."""
    wd = w * dx
    basis = np.stack([np.ones_like(xi), xi, xi * xi], axis=1)
    m0, m1, m2 = (wd @ basis).T
    det = m0 * m2 - m1 * m1
    regular = det > 1e-14 * m0 * m2
    det = np.where(regular, det, 1.0)
    bf, bh = ((wd * f) @ basis[:, :2]).T, ((wd * h) @ basis[:, :2]).T

    def product(a, b, ab):
        with np.errstate(all="ignore"):
            projected = np.where(regular, (a[0] * b[0] * m2 - (a[0] * b[1] + a[1] * b[0]) * m1
                                           + a[1] * b[1] * m0) / det, a[0] * b[0] / m0)
        return np.sum(wd * ab, axis=1) - projected
    return (np.maximum(product(bf, bf, f * f), 0.0), np.maximum(product(bh, bh, h * h), 0.0),
            product(bf, bh, f * h))


def estimate(solution, wall_flux: float | None = None):
    """(estimated relative error of the output, the profile, the cells' indicators) of a
    1-D P2 solution, or None if it cannot be formed. The estimate sums
    ``|int w (u' - Pi u')(z' - Pi z')|`` over the cells (the error's leading term, cell by
    cell, without cancellation between cells); the indicators are the larger
    ``sqrt(E_u E_z)``, which the adapted mesh is built on. (``wall_flux``: see
    :class:`RateProfile`.)"""
    profile = RateProfile(solution, wall_flux)
    p = profile.nodes
    sampled = profile._sampled(p[:-1], p[1:])
    if sampled is None or not (profile.output > 0 and profile.set_dual(sampled)):
        return None
    indicators = profile.indicators(p[:-1], p[1:], sampled)
    if indicators is None:
        return None
    return float(np.sum(np.abs(profile.cross))) / profile.output, profile, indicators


def adapted_points(profile: RateProfile, indicators: np.ndarray,
                   target: float = TARGET) -> np.ndarray | None:
    """Nodes of a mesh whose estimated relative error is below ``target``: the current
    nodes with a node at the zero-stress point, merged and cut cells; None if it
    would need more than :data:`MAX_ADAPTED_CELLS` cells or the estimate fails."""
    p = profile.nodes.copy()
    ind = indicators.copy()
    if profile.x0 is not None:
        k = int(np.argmin(np.abs(p - profile.x0)))
        if 0 < k < p.size - 1 and p[k] != profile.x0:
            p[k] = profile.x0
            moved = profile.indicators(p[k - 1:k + 1], p[k:k + 2])
            if moved is None:
                return None
            ind[k - 1:k + 1] = moved
    budget = target * profile.output
    for _ in range(3):   # merge pairs far below their share of the budget
        tolerance = budget / (p.size - 1)
        pairs = np.arange(0, p.size - 2, 2)
        if pairs.size == 0:
            break
        candidates = pairs[(ind[pairs] + ind[pairs + 1]) < 0.01 * tolerance]
        if profile.x0 is not None:
            candidates = candidates[p[candidates + 1] != profile.x0]
        if candidates.size == 0:
            break
        merged = profile.indicators(p[candidates], p[candidates + 2])
        if merged is None:
            return None
        chosen = merged < 0.1 * tolerance
        if not chosen.any():
            break
        ind[candidates[chosen]] = merged[chosen]
        ind = np.delete(ind, candidates[chosen] + 1)
        p = np.delete(p, candidates[chosen] + 1)
    for _ in range(12):
        if np.sum(ind) <= budget:
            return p
        # each cell is cut into the number of pieces its indicator calls for (it falls
        # as h^5 where the rates are smooth); a cell at the zero-stress point is cut
        # into pieces graded toward it, the indicator falling more slowly there
        tolerance = budget / (p.size - 1)
        pieces = np.ceil((ind / tolerance) ** 0.2 - 1e-9).astype(int)
        pieces = np.clip(pieces, 1, 64)
        if profile.x0 is not None:
            at = (p[:-1] == profile.x0) | (p[1:] == profile.x0)
            pieces[at & (ind > tolerance)] = np.maximum(pieces[at & (ind > tolerance)], 4)
        total = int(np.sum(pieces))
        if total > MAX_ADAPTED_CELLS:
            return None
        cut = np.flatnonzero(pieces > 1)
        if cut.size == 0:
            return p
        cells = np.repeat(cut, pieces[cut])
        first = np.repeat(np.cumsum(pieces[cut]) - pieces[cut], pieces[cut])
        j = np.arange(cells.size) - first
        m = pieces[cells]
        t_lo, t_hi = j / m, (j + 1) / m
        if profile.x0 is not None:   # graded toward the zero-stress point
            right = p[cells + 1] == profile.x0
            left = p[cells] == profile.x0
            t_lo = np.where(right, 1 - (1 - t_lo) ** 3, np.where(left, t_lo ** 3, t_lo))
            t_hi = np.where(right, 1 - (1 - t_hi) ** 3, np.where(left, t_hi ** 3, t_hi))
        h = p[cells + 1] - p[cells]
        lows = p[cells] + h * t_lo
        highs = np.where(t_hi == 1.0, p[cells + 1], p[cells] + h * t_hi)
        halves = profile.indicators(lows, highs)
        if halves is None:
            return None
        keep = np.ones(p.size - 1, dtype=bool)
        keep[cut] = False
        starts = np.concatenate([p[:-1][keep], lows])
        order = np.argsort(starts, kind="stable")
        ind = np.concatenate([ind[keep], halves])[order]
        p = np.concatenate([starts[order], [p[-1]]])
    return None


#: The cheap screen's margin: its estimate times this is below TRIGGER only where the full
#: estimate is too (the full one was at most 5.1 times the screen's on the smooth cases of
#: bench/smooth_1d.py other than power laws in axial flow, which skip the screen).
SCREEN_MARGIN = 20.0


def screen(solution) -> float:
    """A cheap estimate from the discrete solution alone: the energy of the error from the
    jumps of the second derivative between cells (third derivative ~ jump / h, cell error
    ~ w h^5 (third derivative)^2 / 720) over the dissipation. Blind to the cusp of a power
    law's rate at a zero-stress point (it underestimates that 5 to 75 times), so power laws
    in axial flow skip it."""
    problem, basis = solution.problem(), solution.domain.basis
    h = np.diff(basis.mesh.p[0])
    d, u = basis.element_dofs, solution.u
    second = 4 * (u[d[0]] - 2 * u[d[2]] + u[d[1]]) / (h * h)
    jumps = (np.diff(second) / (0.5 * (h[:-1] + h[1:]))) ** 2
    third = np.zeros(h.size)
    third[:-1] += 0.5 * jumps
    third[1:] += 0.5 * jumps
    third[[0, -1]] *= 2
    gradient, coefficient, _ = problem._coefficients(u, False)
    weight = np.sum(coefficient * basis.dx, axis=1) / h
    dissipation = float(np.sum(coefficient * np.sum(gradient ** 2, axis=0) * basis.dx))
    if not dissipation > 0:
        return math.inf
    return float(np.sum(weight * h ** 5 * third)) / 720 / dissipation


class _Start:
    """What :class:`RateProfile` reads of a solution, for a start state of a problem."""

    def __init__(self, problem, u, gradient):
        self._p, self.u, self.pressure_gradient = problem, u, gradient
        self.domain = problem.domain

    def problem(self):
        return self._p


def adapted_at_once(case, problem, start, history):
    """``(domain, problem, outcome)`` of the solve on the adapted mesh, formed before any
    solve on the default one, or None (the default mesh is then solved and estimated as
    usual, :func:`refined`).

    For a power law in axial flow at a given pressure gradient the start is the exact
    solution (:func:`gnflow.solver.line_flow.line_start`), whose wall flux is exact: the
    estimate needs nothing of a solve on the default mesh (the screen, which does, is
    skipped for these flows anyway). Where it exceeds TRIGGER the flow is solved on the
    adapted mesh only, sparing the default mesh's solve (annulus, n = 0.3: 6 of its 10
    Newton steps). ``history`` gets the adapted solve's steps if it converges."""
    from .assembly import Problem

    model, domain = problem.model, problem.domain
    u, gradient = start
    known = getattr(problem, "line_start_flux", None)
    if not (getattr(case.mesh, "adaptive", False) and domain.dimension == 1
            and domain.degree == 2 and domain.kind == "axial" and model.name == "power-law"
            and type(problem) is Problem and not getattr(case.drive, "slip", None)
            and case.drive.flow_rate is None and known is not None and known[0] is u):
        return None
    try:
        # the estimate of the exact state (line_flow.line_solution keeps it beside the
        # discrete one); below the trigger it is formed again from the solve on the
        # default mesh (refined), whose flux it was tuned with, unless it stands for that
        # one (STANDING_ESTIMATE): near the zero-stress point of a shear-thickening flow
        # the two differ (slit, n = 1.5, moving wall: this one below TRIGGER, that one
        # above)
        exact = known[2] if len(known) > 2 else u
        found = estimate(_Start(problem, exact, gradient), known[1])
        chosen = _adapted_mesh(found)
    except (ArithmeticError, ValueError, FloatingPointError):
        return None
    if found is not None and found[1].x0 is None and found[0] <= STANDING_ESTIMATE * TRIGGER:
        problem.standing_estimate = found[0]   # the default mesh will do: see refined
    if chosen is None:
        return None
    before, profile, points = chosen
    return _solve_adapted(case, model, points, profile, problem.rate_floor, gradient, None,
                          0, history, domain.cells, before, interpolate=False)


def _adapted_mesh(found):
    """``(estimate, profile, points)`` of the adapted mesh an error estimate ``found``
    (``(estimate, profile, indicators)`` or None) asks for, or None where it is at most
    TRIGGER or no mesh can be formed."""
    if found is None or found[0] <= TRIGGER:
        return None
    before, profile, indicators = found
    points = adapted_points(profile, indicators)
    return None if points is None else (before, profile, points)


def _solve_adapted(case, model, points, profile, rate_floor, gradient, flow_rate, done,
                   history, default_cells, before, interpolate):
    """``(domain, problem, outcome)`` of the solve on the mesh with nodes ``points``,
    started from the exact solution of ``profile``'s stress field (or, if that cannot be
    formed and ``interpolate``, from the profile's P2 solution), made the discrete one
    where that can be formed at a given pressure gradient, or None if it does not
    converge. ``history`` gets its steps only if it converges."""
    from .assembly import Problem
    from .continuation import iterate_once
    from .linear import LinearSolver

    new_domain = build_domain(case, nodes=points)
    problem = Problem(new_domain, model)
    problem.rate_floor = rate_floor
    problem.linear = LinearSolver(case.solver.linear_solver, problem.free.size, dimension=1)
    # the start: the exact solution of the stress field (its error is the first solve's,
    # about 1e-6), far closer near a zero-stress point than the interpolated first
    # solution (whose rate is off by its whole size there)
    x = new_domain.basis.doflocs[0]
    ordered = np.sort(x)
    values = profile.values(ordered)
    if values is None and not interpolate:
        return None
    u = profile.fe_values(x) if values is None else values[np.searchsorted(ordered, x)]
    for wall in new_domain.walls.values():
        u[wall.dofs] = wall.value
    if flow_rate is None:
        # from there the discrete solution cell by cell, where it can be formed: Newton
        # then only confirms it (annulus, power law n = 0.3, 415 cells: 4 steps -> 0)
        discrete = discrete_line_solution(problem, u, gradient)
        u = u if discrete is None else discrete
    steps: list = []
    outcome = iterate_once(problem, u, gradient, flow_rate, case.solver.method,
                           case.solver.tolerance, case.solver.max_iterations, steps, done)
    if not outcome.converged:
        return None
    for step in steps:
        history.append(step)
    new_domain.extra["adapted"] = {"default_cells": default_cells, "cells": new_domain.cells,
                                   "estimate_default_mesh": before}
    return new_domain, problem, outcome


def refined(case, solution, history):
    """``(domain, problem, outcome)`` of the solve on the adapted mesh, or None when the
    default mesh of ``solution`` is fine enough, the case is not one this applies to, or
    the re-solve fails (the caller keeps ``solution`` then)."""
    from .assembly import Problem

    model, domain = solution.model, solution.domain
    if not (getattr(case.mesh, "adaptive", False) and solution.converged
            and domain.dimension == 1 and domain.degree == 2
            and model.name != "newtonian" and not model.is_yield_stress
            and type(solution.problem()) is Problem and not getattr(case.drive, "slip", None)):
        return None
    if getattr(solution.problem(), "standing_estimate", None) is not None:
        return None   # the estimate from the exact start was far below TRIGGER
    try:
        if not (model.name == "power-law" and domain.kind == "axial") and \
                SCREEN_MARGIN * screen(solution) <= TRIGGER:
            return None
        chosen = _adapted_mesh(estimate(solution))
    except (ArithmeticError, ValueError, FloatingPointError):
        return None
    if chosen is None:
        return None
    before, profile, points = chosen
    return _solve_adapted(case, model, points, profile, solution.problem().rate_floor,
                          solution.pressure_gradient, case.drive.flow_rate,
                          solution.iterations, history, domain.cells, before,
                          interpolate=True)
