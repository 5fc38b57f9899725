"""1-D flows from the closed form of their stress field: the flow curve inverted at the
quadrature points, a Gauss rule graded toward the rate's cusp at a zero-stress point, the
exact solution at a given pressure gradient (the start of a 1-D Newton iteration), and
the discrete solution found from it cell by cell (the discrete balance of a 1-D P2 mesh
decouples into 2 x 2 problems per cell and one flux constant).

Used by :mod:`.newton` (its start and its primal-dual steps) and by :mod:`.adapt` (the
error estimate of the default 1-D mesh, the start of its re-solve); it imports neither.
"""

from __future__ import annotations

import math

import numpy as np

from .. import rheology
from .assembly import RATE_FLOOR, Problem

_XI, _WEIGHTS = np.polynomial.legendre.leggauss(4)
_GAUSS_4 = (_XI, _WEIGHTS)
_GAUSS_2 = np.polynomial.legendre.leggauss(2)
#: Sub-intervals on each side of a zero-stress point in a cell, as fractions of the
#: distance to the cell's end: the rates' cusp is integrated on a graded rule.
_GRADED = np.array([0.0, 1 / 1024, 1 / 256, 1 / 64, 1 / 16, 1 / 4, 1.0])
#: The largest rate an exact 1-D start may hold (1/s): the upper end of the range of
#: scales.invert_flow_curve
_LARGEST_RATE = math.exp(60.0)


def cusp_rule(t0: float):
    """Points and weights on [-1, 1] of a composite Gauss rule graded toward ``t0``."""
    points, weights = [], []
    for end in (-1.0, 1.0):
        length = end - t0
        if abs(length) < 1e-12:
            continue
        a, b = t0 + length * _GRADED[:-1], t0 + length * _GRADED[1:]
        mid, half = 0.5 * (a + b), 0.5 * (b - a)
        points.append((mid[:, None] + half[:, None] * _XI).ravel())
        weights.append((np.abs(half)[:, None] * _WEIGHTS).ravel())
    return np.concatenate(points), np.concatenate(weights)


def flow_curve_rates(model: rheology.Model, floor: float, stress, guess, tolerance=1e-10,
                     limit=50):
    """Rates ``g >= 0`` with ``eta(sqrt(g^2 + floor^2)) g = stress`` (arrays), by Newton on
    ``log g`` from ``guess``, vectorised over the points not yet converged; None if some
    point has not converged within ``limit`` iterations (the caller falls back to primal
    Newton). The flow curve is increasing for every model, so the root is unique."""
    stress = np.asarray(stress, dtype=float)
    target = np.log(np.maximum(stress, 1e-300)).ravel()
    start = np.asarray(guess, dtype=float).ravel()
    log_rate = np.log(np.where(start > 0, start, max(floor, 1e-300)))
    active = np.arange(log_rate.size)
    with np.errstate(all="ignore"):
        for _ in range(limit):
            rate = np.exp(log_rate[active])
            floored = np.sqrt(rate * rate + floor * floor)
            eta = model.viscosity(floored)
            slope = 1.0 + model.viscosity_derivative(floored) * rate * rate / (floored * eta)
            step = (np.log(eta * rate) - target[active]) / np.maximum(slope, 1e-3)
            log_rate[active] -= np.clip(step, -5.0, 5.0)
            active = active[~(np.abs(step) < tolerance)]
            if active.size == 0:
                return np.exp(log_rate).reshape(stress.shape)
    return None


def _plastic(model: rheology.Model, rate):
    """The plastic part of a regularised yield-stress flow curve at ``rate``."""
    m = model.regularisation_parameter
    if model.regularisation == "papanastasiou":
        return -model.yield_stress * np.expm1(-m * rate)
    return model.yield_stress * np.minimum(rate / m, 1.0)


def _plastic_inverse(model: rheology.Model, stress):
    """The rate at which the plastic part reaches ``stress``; inf within 1e-9 of the yield
    stress and above, where a stress known to round-off no longer fixes the rate (the
    Papanastasiou part saturates: ``P(16 / s) = tau_y`` to round-off for ``m = 80 s``)."""
    m = model.regularisation_parameter
    fraction = np.minimum(np.maximum(stress, 0.0) / model.yield_stress, 1.0)
    with np.errstate(all="ignore"):
        rate = -np.log1p(-fraction) / m if model.regularisation == "papanastasiou" \
            else fraction * m
    return np.where(fraction < 1.0 - 1e-9, rate, np.inf)


def _viscous_inverse(model: rheology.Model, stress):
    """The rate at which the viscous part ``K g^n`` reaches ``stress``."""
    return (np.maximum(stress, 0.0) / model.consistency) ** (1.0 / model.flow_index)


def yield_stress_bounds(model: rheology.Model, stress):
    """(lower, upper) bounds of the rate on a regularised yield-stress flow curve at
    ``stress`` (arrays; without the rate floor): a start for :func:`flow_curve_rates`.

    The flow curve is ``tau = P(g) + V(g)``, a plastic part ``P`` rising to the yield
    stress and a viscous part ``V = K g^n``, both increasing. At the root ``g`` neither
    part exceeds ``tau`` and one is at least ``tau / 2``, so ``min(P^-1(tau/2),
    V^-1(tau/2)) <= g <= min(P^-1(tau), V^-1(tau))``; ``V(g) >= tau - tau_y`` (the
    unregularised rate is a lower bound). Any bounds ``l <= g <= u`` tighten to
    ``V^-1(tau - P(u)) <= g <= V^-1(tau - P(l))`` and the same with ``P`` and ``V``
    exchanged: one round of that, with both parts, leaves bounds within a few per cent
    of each other over most of the curve (12 % where both parts are linear, a bi-viscous
    plug; decades only at the knee), where the start ``stress / eta`` at the flow's rate
    scale is off by decades in the plug and at its edge."""
    stress = np.asarray(stress, dtype=float)
    with np.errstate(all="ignore"):
        upper = np.minimum(_plastic_inverse(model, stress), _viscous_inverse(model, stress))
        half = 0.5 * stress
        lower = np.maximum(np.minimum(_plastic_inverse(model, half), _viscous_inverse(model, half)),
                           _viscous_inverse(model, stress - model.yield_stress))
        upper = np.minimum.reduce([
            upper, _viscous_inverse(model, stress - _plastic(model, lower)),
            _plastic_inverse(model, stress - model.consistency * lower ** model.flow_index)])
        lower = np.maximum.reduce([
            lower, _viscous_inverse(model, stress - _plastic(model, upper)),
            _plastic_inverse(model, stress - model.consistency * upper ** model.flow_index)])
    return np.minimum(lower, upper), upper


class _Line:
    """The dofs of a 1-D domain in order, the Gauss points between consecutive dofs, and
    the rate and compliance integrals of the flow whose flux is ``q = G A(x) + c``."""

    def __init__(self, problem: Problem, model: rheology.Model, gradient: float):
        domain = problem.domain
        self.domain, self.model, self.floor = domain, model, problem.rate_floor
        self.gradient = gradient if domain.kind == "axial" else 0.0
        self.x = domain.basis.doflocs[0]
        self.order = np.argsort(self.x)
        self.xs = self.x[self.order]
        self.mid, self.half = 0.5 * (self.xs[:-1] + self.xs[1:]), 0.5 * np.diff(self.xs)
        self.power = model.name == "power-law"
        # 4 Gauss points per interval between dofs for a power law (closed-form inversion;
        # its flux places the zero-stress point, see adapt), 2 for the others: each point
        # costs an inversion of the flow curve at every evaluation, and as a start the
        # error of 2 points (h^4 of the rate's 4th derivative) is far below what Newton
        # corrects in its first step
        xi, wi = _GAUSS_4 if self.power else _GAUSS_2
        self.points = (self.mid[:, None] + self.half[:, None] * xi[None, :]).ravel()
        self.weights = self.half[:, None] * wi[None, :]
        self.walls = sorted(domain.walls.values(), key=lambda w: w.position)
        self.guess = None
        # the unregularised flow curve of a yield-stress model (closed-form rates; no
        # floor): a first flux constant, see _flux_constant
        self.ideal = False

    def primitive(self, p):
        """``A(x) = int a dx`` up to a constant."""
        return math.pi * p * p if self.domain.axisymmetric else p

    def zero_stress_interval(self, c):
        """(interval, point) where the flux ``G A + c`` vanishes inside the gap, or None."""
        if self.gradient == 0.0:
            return None
        value = -c / self.gradient
        x0 = (math.sqrt(value / math.pi) if value > 0 else None) if self.domain.axisymmetric \
            else value
        xs = self.xs
        if x0 is None or not xs[0] < x0 < xs[-1]:
            return None
        return int(np.clip(np.searchsorted(xs, x0) - 1, 0, self.half.size - 1)), x0

    def _rates(self, stress):
        """The rates at these stresses (None if the inversion fails)."""
        model, floor = self.model, self.floor
        if self.power:
            return (stress / model.consistency) ** (1.0 / model.flow_index)
        # the first guess: for a yield-stress model within its bounds (the previous
        # evaluation's rates, clipped to them), else the viscosity at the flow's rate
        # scale (the floor is RATE_FLOOR of it), exact on a Newtonian plateau and close
        n = self.points.size
        if model.is_yield_stress:
            lower, upper = yield_stress_bounds(model, stress)
            with np.errstate(all="ignore"):
                start = np.sqrt(lower * upper)
            if self.guess is not None:
                start[:n] = self.guess
            start = np.clip(start, lower, upper)
        else:
            start = stress / model.viscosity(
                np.full(stress.shape, floor / RATE_FLOOR if floor > 0 else 1.0))
            if self.guess is not None:
                start[:n] = self.guess
        rate = flow_curve_rates(model, floor, stress, start)
        if rate is not None:
            self.guess = rate[:n]
        return rate

    def integrals(self, c):
        """``int u' dx`` and ``int 1 / (a s^2 T) dx`` over each interval between dofs
        for the flux constant ``c`` (the interval holding the zero-stress point, where
        the rate has a cusp, by a rule graded toward it), or None."""
        domain, model, floor = self.domain, self.model, self.floor
        mid, half, points = self.mid, self.half, self.points
        cusp = self.zero_stress_interval(c)
        at = points
        if cusp is not None:
            k, x0 = cusp
            xi_k, w_k = cusp_rule(2 * (x0 - self.xs[k]) / (self.xs[k + 1] - self.xs[k]) - 1)
            at = np.concatenate([points, mid[k] + half[k] * xi_k])
        a_, s_ = domain.area_weight(at[None]), domain.rate_factor(at[None])
        q = self.gradient * self.primitive(at) + c
        stress = np.abs(q) / (a_ * s_)
        stress = np.maximum(stress, 1e-14 * np.max(stress, initial=0.0))
        with np.errstate(all="ignore"):
            if self.ideal:
                # rate ((tau - tau_y)+ / K)^(1/n); 1 / T = g / (n (tau - tau_y)), and 0 in
                # the plug
                excess = np.maximum(stress - model.yield_stress, 0.0)
                rate = (excess / model.consistency) ** (1.0 / model.flow_index)
                yielded = excess > 0
                compliance = np.where(yielded, rate / (model.flow_index * np.where(
                    yielded, excess, 1.0)), 0.0) / (a_ * s_ * s_)
            else:
                rate = self._rates(stress)
                if rate is None:
                    return None
                floored = np.sqrt(rate * rate + floor * floor)
                tangent = model.viscosity(floored) + \
                    model.viscosity_derivative(floored) * rate * rate / floored
                compliance = 1.0 / (a_ * s_ * s_ * tangent)
            slope = np.sign(q) * rate / s_
        if not (np.all(np.isfinite(slope)) and np.all(np.isfinite(compliance))):
            return None
        if np.max(rate, initial=0.0) > _LARGEST_RATE:
            # beyond the range the summary inverts flow curves on (scales.invert_flow_curve):
            # the general start decides (a pipe of a Cross fluid with a rate exponent 0.9
            # and no plateau has wall rates of 1e51 1/s, and ends not converged)
            return None
        n = points.size
        steps = np.sum(self.weights * slope[:n].reshape(self.weights.shape), axis=1)
        reach = np.sum(self.weights * compliance[:n].reshape(self.weights.shape), axis=1)
        if cusp is not None:
            steps[k] = half[k] * float(np.sum(w_k * slope[n:]))
            reach[k] = half[k] * float(np.sum(w_k * compliance[n:]))
        return steps, reach


def line_start(problem: Problem, model: rheology.Model, gradient: float,
               refine_flux: bool = True):
    """The exact solution of a 1-D flow at a given pressure gradient, at the dofs (the
    start of its Newton iteration; None if it cannot be formed).

    The flux ``q = a s tau`` (area weight ``a``, rate factor ``s``, signed shear stress
    ``tau``) obeys ``q' = G a`` in every 1-D flow (``G = 0`` for rotational flow), so
    ``q = G A(x) + c`` with ``A = int a dx`` and one constant ``c``; the rate follows
    from the inverse flow curve, ``u' = sign(q) H(|q| / (a s)) / s``, with the rate
    floor of the problem. A pipe has no flux on its axis (``c = 0``); between two walls
    ``c`` is the root of the speed difference ``int u' dx = u_2 - u_1``, increasing in
    ``c`` with slope ``int 1 / (a s^2 T)`` (``T`` the flow curve's tangent), found by
    Newton steps kept inside a bracket. The rate is integrated between consecutive dofs
    by 4-point Gauss rules (graded toward the zero-stress point, where the rate has a
    cusp, in the interval holding it). The interpolant of the exact solution is within the
    discretisation error of the discrete one, so Newton converges from it in a step or
    two (the Picard steps of the general start are not needed). Without ``refine_flux``
    the first ``c`` is kept for models other than power laws (the Newtonian one, or for a
    yield-stress model that of its unregularised flow curve; a power law's is always
    found to round-off, as it places the zero-stress point, see adapt): the far wall's
    speed is then met by the spread mismatch alone."""
    line = _Line(problem, model, gradient)
    walls = line.walls
    if len(walls) == 1:
        if not (line.domain.axisymmetric and line.xs[0] == 0.0):
            return None
        c = 0.0
        found = line.integrals(c)
        if found is None:
            return None
        u_sorted = np.concatenate([[0.0], np.cumsum(found[0])])
        u_sorted += walls[0].value - u_sorted[-1]
    else:
        found = _flux_constant(line, refine_flux)
        if found is None:
            return None
        c, (steps, reach) = found
        u_sorted = np.concatenate([[0.0], np.cumsum(steps)]) + walls[0].value
        # what is left of the mismatch, spread as the flux correction would spread it
        reach = np.concatenate([[0.0], np.cumsum(reach)])
        u_sorted += (walls[1].value - u_sorted[-1]) * reach / reach[-1]
    x = line.x
    u = np.empty_like(x)
    u[line.order] = u_sorted
    for wall in line.domain.walls.values():
        u[wall.dofs] = wall.value
    if not np.all(np.isfinite(u)):
        return None
    # the flux at the outermost wall, exact: for the error estimate of the default mesh
    # (gnflow.solver.adapt.adapted_at_once), which then needs no solve on it
    problem.line_start_flux = (u, line.gradient * line.primitive(walls[-1].position) + c)
    return u


def line_solution(problem: Problem, model: rheology.Model, gradient: float):
    """The discrete solution of a 1-D flow at a given pressure gradient, at the dofs, or
    None where no start can be formed: :func:`discrete_line_solution` from the exact
    state of :func:`line_start` with its first flux constant (that solve fixes the
    constant to round-off in its own Newton steps, where each refinement here inverts
    the flow curve at every point: bench/one_solve.py annulus and coaxial cases, Carreau
    and Cross, 1.3 -> 0.8 ms for the start), else the exact start itself. The start stays
    on the problem beside its flux, ``problem.line_start_flux = (returned, flux, start)``
    (a power law's both exact), for the error estimate of the default mesh
    (gnflow.solver.adapt.adapted_at_once)."""
    if model is not problem.model:
        return line_start(problem, model, gradient)
    rough = line_start(problem, model, gradient, refine_flux=False)
    if rough is None:
        return line_start(problem, model, gradient)
    discrete = discrete_line_solution(problem, rough, gradient)
    if discrete is None:
        return line_start(problem, model, gradient)   # Newton from the exact start
    problem.line_start_flux = (discrete, problem.line_start_flux[1], rough)
    return discrete


def _flux_constant(line: _Line, refine: bool = True):
    """``(c, integrals(c))`` for the flux constant ``c`` that meets both walls' speeds, or
    None: from the Newtonian ``c`` (for a yield-stress model, from the root for its
    unregularised flow curve), Newton steps, bisecting once the root is bracketed and a
    step leaves the bracket (:func:`_root`)."""
    model, walls, gradient = line.model, line.walls, line.gradient
    wanted = walls[1].value - walls[0].value
    points = line.points
    s_all = line.domain.rate_factor(points[None])
    a_all = line.domain.area_weight(points[None])
    # the flux of the pressure load across the gap, and that of the wall motion's
    # shear at the model's stress
    shear = abs(wanted) * float(np.max(s_all)) / float(line.xs[-1] - line.xs[0])
    with np.errstate(all="ignore"):
        moving = float(np.max(a_all * s_all)) * float(model.stress(np.array([shear]))[0])
    scale = max(abs(gradient) * float(np.ptp(line.primitive(points))),
                moving if math.isfinite(moving) else 0.0)
    if not scale > 0:
        return None

    def mismatch(c):
        found = line.integrals(c)
        if found is None:
            return None
        return float(np.sum(found[0])) - wanted, found

    # the first c: the Newtonian one (with the model's viscosity at the wall motion's
    # shear), in closed form as the speed difference is linear in c for it
    with np.errstate(all="ignore"):
        mu = float(model.viscosity(np.array([max(shear, 1e-300)]))[0])
    mu = mu if math.isfinite(mu) and mu > 0 else 1.0
    inverse = line.weights.ravel() / (a_all * s_all * s_all)
    c = (wanted * mu - gradient * float(np.sum(inverse * line.primitive(points)))) / \
        float(np.sum(inverse))
    if not math.isfinite(c):
        return None
    if model.is_yield_stress:
        # first the c of the unregularised flow curve, whose rates are closed-form: the
        # regularised c is within the regularisation error of it, a step or two away,
        # where from the Newtonian c it took four evaluations of the regularised rates
        # (bench/one_solve.py annulus, Bingham and Herschel-Bulkley); a gap the ideal
        # fluid does not shear (no root, or a flat mismatch) keeps the Newtonian c
        line.ideal = True
        f = mismatch(c)
        found = _root(mismatch, c, f, walls, 1e-6) if f is not None else None
        line.ideal = False
        if found is not None and math.isfinite(found[0]):
            c = found[0]
    f = mismatch(c)
    if f is None:
        return None
    # the mismatch left is spread by the caller to first order: as a start, c to 1e-7 is
    # as good as exact (Newton's steps are the same), and each evaluation inverts the
    # flow curve at every point; a power law's inversion is closed-form and its c
    # is found to round-off (it places the zero-stress point, see adapt)
    if not (refine or line.power):
        return c, f[1]
    return _root(mismatch, c, f, walls, 1e-13 if line.power else 1e-7)


def _root(mismatch, c, f, walls, relative):
    """``(c, integrals(c))`` at the root of ``mismatch`` (``(value, integrals)`` of a
    flux constant) from ``c`` with ``f = mismatch(c)``, to ``relative`` of the speeds,
    or None: Newton steps, bisecting once the root is bracketed and a step leaves the
    bracket."""
    low, high = -math.inf, math.inf
    target = relative * max(abs(walls[0].value), abs(walls[1].value),
                            float(np.sum(np.abs(f[1][0]))), 1e-300)
    for _ in range(60):
        if abs(f[0]) <= target:
            return c, f[1]
        if f[0] > 0:
            high = c
        else:
            low = c
        slope = float(np.sum(f[1][1]))
        step = c - f[0] / slope if slope > 0 else math.nan
        if not (math.isfinite(step) and low < step < high):
            if not (math.isfinite(low) and math.isfinite(high)):
                return None
            step = 0.5 * (low + high)
        c = step
        f = mismatch(c)
        if f is None:
            return None
        if math.isfinite(high - low) and high - low <= 1e-15 * max(abs(low), abs(high)):
            return c, f[1]
    return None


class _Cells:
    """What the cell-by-cell solve of a 1-D P2 problem needs of its mesh, in the order of
    the cells from the first node to the last: the dofs, the products of the basis
    gradients its residuals and tangents are sums of (with the quadrature weights), the
    loads of a unit pressure gradient. Built once per basis and flow kind and kept on
    the basis (a study solves the same mesh many times), read-only."""

    def __init__(self, problem: Problem):
        basis = problem.domain.basis
        x = basis.doflocs[0]
        left, right, middle = basis.element_dofs
        order = np.argsort(x[left])
        self.valid = bool(np.all(x[left] < x[right])
                          and np.array_equal(left[order[1:]], right[order[:-1]]))
        if not self.valid:
            return
        self.left, self.right, self.middle = left[order], right[order], middle[order]
        self.first = float(x[self.left[0]])
        dx = basis.dx[order]
        a, s = problem.area_weight[order], problem.rate_factor[order]
        d_left, self.d_right, self.d_middle = (basis.basis[j][0].grad[0][order]
                                               for j in range(3))
        self.s2 = s * s
        self.weight, self.curvature = a * self.s2, a * self.s2 * self.s2
        self.tests = np.stack([d_left, self.d_middle]) * dx
        self.pairs = np.stack([d_left * self.d_right, d_left * self.d_middle,
                               self.d_middle * self.d_right, self.d_middle * self.d_middle]) * dx
        self.first_test = d_left[0] * dx[0]
        # the loads of a unit G on the left and mid-point functions, with the in-flux
        # of the cells before (the left equation's), and their sizes
        cell_load = np.einsum("eq,eq->e", a, dx)
        self.unit_loads = np.stack([
            np.einsum("eq,eq->e", a * basis.basis[0][0].value[order], dx)
            + np.concatenate([[0.0], np.cumsum(cell_load)[:-1]]),
            np.einsum("eq,eq->e", a * basis.basis[2][0].value[order], dx)])
        self.unit_noise = 1e-13 * np.abs(self.unit_loads).sum(axis=0)
        self.abs_tests = np.abs(self.tests)
        for value in vars(self).values():
            if isinstance(value, np.ndarray):
                value.setflags(write=False)

    @classmethod
    def of(cls, problem: Problem) -> "_Cells":
        store = problem.domain.basis.__dict__.setdefault("_gnflow_line_cells", {})
        key = (problem.domain.axisymmetric, problem.domain.kind)
        if key not in store:
            store[key] = cls(problem)
        return store[key]


def discrete_line_solution(problem: Problem, u, gradient: float, limit: int = 30):
    """The discrete (P2) solution of a 1-D flow at a given pressure gradient, from a
    start ``u`` near it (the exact solution of :func:`line_start`), found cell by cell;
    None where it cannot be formed (then Newton on the whole mesh goes on from ``u``).

    In 1-D the discrete balance decouples. The three local basis functions of a cell
    sum to one, so the cell's residuals sum to its load, ``r_l + r_m + r_r = G A_e``
    (``A_e = int_e a``), and the equation of the node between cells ``e`` and ``e + 1``
    is ``r_r^e + r_l^(e+1) = 0``: the discrete flux into cell ``e``, ``P_e = -r_l^e``,
    is ``P_e = c + G sum_(f<e) A_f`` with one constant ``c`` (0 on a pipe's axis, whose
    dof is free). Given ``c`` each cell has two equations, ``r_l^e = -P_e`` and
    ``r_m^e = 0``, in its two unknowns (the rise across it and its mid-point value),
    solved by Newton with the consistent tangent, vectorised over the cells; between
    two walls ``c`` is one more unknown, fixed by the sum of the rises, and enters the
    same Newton step (a bordered system whose blocks are the cells' 2 x 2 tangents).
    The quadrature, area weight, rate factor and rate floor are the problem's own, so
    the result is the state Newton on the whole mesh converges to, within round-off:
    from it the solve's convergence test passes without a step."""
    domain, model = problem.domain, problem.model
    if not (type(problem) is Problem and domain.dimension == 1 and domain.degree == 2
            and domain.basis.Nbfun == 3 and len(domain.walls) in (1, 2)):
        return None
    cells = _Cells.of(problem)
    walls = sorted(domain.walls.values(), key=lambda w: w.position)
    if not cells.valid or (len(walls) == 1 and not (domain.axisymmetric
                                                    and cells.first == 0.0)):
        return None   # one wall: a pipe, its axis at the first node
    gradient = gradient if domain.kind == "axial" else 0.0
    d_right, d_middle, s2 = cells.d_right, cells.d_middle, cells.s2
    weight, curvature, tests, pairs = cells.weight, cells.curvature, cells.tests, cells.pairs
    loads, load_noise = gradient * cells.unit_loads, abs(gradient) * cells.unit_noise
    floor2 = problem.rate_floor * problem.rate_floor
    axial = domain.kind == "axial"   # s = 1
    rise = u[cells.right] - u[cells.left]    # the unknowns: the rise across each cell
    mid = u[cells.middle] - u[cells.left]    # and the mid-point value over its left node
    two_walls = len(walls) == 2
    wanted = walls[1].value - walls[0].value if two_walls else 0.0
    c = 0.0
    with np.errstate(all="ignore"):
        if two_walls:   # the start's flux constant: its left residual, on the first cell
            g = rise[0] * d_right[0] + mid[0] * d_middle[0]
            rate = np.sqrt(s2[0] * g * g + floor2)
            c = -(float(np.sum(weight[0] * model.viscosity(rate) * g * cells.first_test))
                  + float(loads[0, 0]))
        previous = None
        for _ in range(limit):
            g = rise[:, None] * d_right
            g += mid[:, None] * d_middle
            g2 = g * g
            rate = np.sqrt((g2 if axial else s2 * g2) + floor2)
            eta = model.viscosity(rate)
            force = weight * eta * g
            e1, e2 = np.einsum("keq,eq->ke", tests, force) + loads
            e1 += c
            size = np.abs(e1) + np.abs(e2)
            if previous is not None:
                # a cell whose residual grew against that of its last state under the
                # new c (near a zero-stress point, where a power law with n < 1 is
                # steepest, Newton overshoots and cycles) goes back half its step and
                # is evaluated again: each cell's problem is convex, so its residual
                # falls along a short enough step; what round-off leaves of a residual
                # is no guide to the worth of a step
                worse = size > previous[0]
                if previous[3] < 20 and worse.any():
                    worse &= size > load_noise + 1e-13 * np.einsum(
                        "keq,eq->e", cells.abs_tests, np.abs(force))
                    if worse.any():
                        rise = np.where(worse, 0.5 * (previous[1] + rise), rise)
                        mid = np.where(worse, 0.5 * (previous[2] + mid), mid)
                        previous[3] += 1
                        continue
            tangent = weight * eta + curvature * (model.viscosity_derivative(rate) / rate) * g2
            j11, j12, j21, j22 = np.einsum("keq,eq->ke", pairs, tangent)
            det = j11 * j22 - j12 * j21
            # J^-1 e and J^-1 (1, 0): the step is -(J^-1 e) - dc J^-1 (1, 0)
            y1, y2 = (j22 * e1 - j12 * e2) / det, (j11 * e2 - j21 * e1) / det
            z1, z2 = j22 / det, -j21 / det
            dc = ((rise - y1).sum() - wanted) / z1.sum() if two_walls else 0.0
            step_rise, step_mid = -y1 - dc * z1, -y2 - dc * z2
            moved = max(abs(step_rise).max(), abs(step_mid).max())
            if not (math.isfinite(moved) and math.isfinite(dc)):
                return None
            # the cell's residual had it stayed where it was, under the new c: what its
            # step must not exceed
            previous = [np.abs(e1 + dc) + np.abs(e2), rise, mid, 0]
            rise, mid, c = rise + step_rise, mid + step_mid, c + dc
            if moved <= 1e-11 * max(abs(rise).max(), abs(mid).max()):
                break
        else:
            return None
    nodes = np.concatenate([[0.0], np.cumsum(rise)])
    nodes += walls[0].value if two_walls else walls[0].value - nodes[-1]
    solution = np.empty_like(u)
    solution[cells.left], solution[cells.right[-1]] = nodes[:-1], nodes[-1]
    solution[cells.middle] = nodes[:-1] + mid
    for wall in walls:
        solution[wall.dofs] = wall.value
    return solution if np.all(np.isfinite(solution)) else None
