"""Wall slip: the velocity of the fluid at a wall differs from the wall's by a slip law.

Concentrated suspensions and pastes slip at smooth walls (a thin depleted layer next to
the wall shears instead of the bulk). A slip law relates the slip velocity
``u_s = u(wall) - U(wall)`` to the wall shear stress ``tau_w`` that the wall exerts on the
fluid. Three forms, each per wall:

* **Navier slip length** ``b``: ``|u_s| = b gamma_w``, the wall shear rate extrapolated to
  zero a distance ``b`` behind the wall (Navier 1823). For a generalized Newtonian fluid
  ``tau_w = tau(gamma_w) = tau(|u_s| / b)``, the flow curve at the rate ``|u_s|/b``.
* **Power-law slip** ``|u_s| = beta |tau_w|^p`` (``p = 1``: linear slip), the form used for
  pastes and filled polymers (Mooney 1931, J. Rheol. 2, 210, introduced the slip velocity
  as a function of wall stress; the power form is common practice, e.g. Kalyon 2005,
  J. Rheol. 49 — recalled from memory).
* either with a **slip yield stress** ``tau_s``: no slip while ``|tau_w| <= tau_s``, then
  ``|u_s| = beta (|tau_w| - tau_s)^p`` (or ``b gamma_w``) above it.

In the weak form the wall value of ``u`` is no longer prescribed; the traction becomes a
boundary term ``int_wall a F(u - U) v ds`` with ``F`` the inverse slip law (the stress as a
function of the slip velocity), a nonlinear Robin condition. ``F`` is monotone, so Newton's
tangent ``int a F'(u_s) du v ds`` keeps the operator symmetric positive definite. Two
non-smooth points are regularised, as the bulk yield stress is: the slip yield stress by
``tau_s (1 - exp(-|u_s| / eps))`` (Papanastasiou's form applied to the wall), and
``p > 1`` (infinite ``F'`` at zero slip) by a floor on ``|u_s|``; ``eps`` is a small
fraction of the case's speed scale.

**Coaxial cylinders** (rotational flow, unknown ``omega(r)``). The fluid slips by the
azimuthal speed ``u_s = R (omega(R) - Omega)`` relative to a cylinder of radius ``R``
turning at ``Omega``. The balance assembled (:mod:`.assembly`, coefficient
``a s^2 eta`` with ``a = 2 pi r``, ``s = r``) is
``int_Ri^Ro 2 pi r^3 eta omega' psi' dr = [2 pi r^3 eta omega' psi]_Ri^Ro``, the weak form
of ``(2 pi r^2 tau_rtheta)' = 0`` with ``tau_rtheta = eta r omega'``: its boundary terms
are torques per length times the test function, ``2 pi R^2 t_theta psi(R)``, ``t_theta``
the wall's azimuthal traction on the fluid. A slipping wall pulls the fluid back by
``t_theta = -F(u_s)``, so the slip term is ``P R F(R (omega(R) - Omega)) psi(R)`` with
``P = 2 pi R`` the wall's perimeter and the lever ``R`` (the unknown is an angular speed),
and its tangent ``P R^2 F'(u_s)``: still a positive diagonal entry, the tangent stays
symmetric. The 1-D wall terms below carry that lever (1 for axial flow). The start solves
the statics of the gap (:meth:`SlipProblem._rotational_start`).

Newton starts from the no-slip start with each wall's slip set by its law at the wall
stress that start exerts (:meth:`SlipProblem.slip_start`), and convergence is measured
with the viscous force and the slip drag apart (:meth:`SlipProblem.relative_residual`).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp
from skfem import BilinearForm, FacetBasis, LinearForm, asm

from .assembly import ROUND_OFF_CHECK, Problem, _norm
from .linear import LinearSolver
from .newton import picard_step
from ..specs import SlipLaw  # noqa: F401  (re-exported)

#: slip speeds are regularised below this fraction of the case's speed scale. A wall held
#: by a slip yield stress creeps at about eps ln(tau_s / (tau_s - tau_w)): measured 1e-7 of
#: the flow rate at 1e-8 (1e-5 at 1e-6, 1e-9 at 1e-10), with the same Newton iterations
#: from 1e-6 to 1e-10 (the measure of convergence does not see the term's stiffness).
SLIP_SMOOTHING = 1e-8


@BilinearForm
def _slip_tangent(du, v, w):
    return w.coefficient * du * v


@LinearForm
def _slip_force(v, w):
    return w.coefficient * v


class WallSlip:
    """The slip boundary terms of one domain: force, tangent and diagonal on all dofs.

    ``laws``: wall name -> :class:`SlipLaw`. 1-D walls are points carrying the wall's
    perimeter weight; 2-D walls are integrated along their facets.
    """

    def __init__(self, domain, laws: dict[str, SlipLaw], model, speed_scale: float):
        self.domain = domain
        self.laws = laws
        self.model = model
        self.smoothing = SLIP_SMOOTHING * max(speed_scale, 1e-300)
        self.dofs = np.unique(np.concatenate([domain.walls[n].dofs for n in laws])) \
            if laws else np.array([], dtype=np.int64)
        self._facet_bases = {}
        if domain.dimension == 2:
            for name in laws:
                facets = domain.extra["wall_facets"][name]
                self._facet_bases[name] = FacetBasis(domain.basis.mesh, domain.basis.elem,
                                                     facets=facets)

    def lever(self, wall) -> float:
        """The factor from the unknown to the wall-tangential speed: 1 for axial flow
        (``u`` is the speed), the wall radius ``R`` for rotational flow (``u`` is the
        angular speed ``omega``; the fluid slips by ``u_s = R (omega(R) - Omega)``)."""
        return wall.position if self.domain.kind == "rotational" else 1.0

    def with_model(self, model) -> WallSlip:
        other = object.__new__(WallSlip)
        other.__dict__.update(self.__dict__)
        other.model = model
        return other

    def _terms(self, u, secant: bool = False):
        """(force vector, tangent matrix) over all dofs; with ``secant`` the matrix has the
        secant coefficient ``F(u_s)/u_s`` instead of ``F'(u_s)`` (for Picard steps)."""
        n = self.domain.basis.N
        force = np.zeros(n)
        matrix = sp.csr_matrix((n, n))
        for name, law in self.laws.items():
            wall = self.domain.walls[name]
            if self.domain.dimension == 1:
                # a point wall of weight P (perimeter) and lever L: the term is
                # P L F(L (u - U)), its derivative P L^2 F' (see the module docstring)
                lever = self.lever(wall)
                slip = lever * (u[wall.dofs] - wall.value)
                value, slope = law.stress(slip, self.model, self.smoothing)
                if secant:
                    slope = law.secant(slip, self.model, self.smoothing)
                force[wall.dofs] += wall.perimeter * lever * value
                matrix = matrix + sp.csr_matrix(
                    (wall.perimeter * lever * lever * slope, (wall.dofs, wall.dofs)),
                    shape=(n, n))
                continue
            basis = self._facet_bases[name]
            slip = np.asarray(basis.interpolate(u)) - wall.value
            value, slope = law.stress(slip, self.model, self.smoothing)
            if secant:
                slope = law.secant(slip, self.model, self.smoothing)
            force += asm(_slip_force, basis, coefficient=value)
            matrix = matrix + asm(_slip_tangent, basis, coefficient=slope).tocsr()
        return force, matrix

    def force(self, u) -> np.ndarray:
        """``int_wall a F(u - U) v ds`` for every dof."""
        return self._terms(u)[0]

    def tangent(self, u) -> sp.csr_matrix:
        """``int_wall a F'(u - U) du v ds`` over all dofs."""
        return self._terms(u)[1]

    def secant(self, u) -> sp.csr_matrix:
        """``int_wall a (F(u_s)/u_s) du v ds`` over all dofs: the frozen slip operator."""
        return self._terms(u, secant=True)[1]

    def slip_at_reaction(self, reaction) -> np.ndarray:
        """Slip speeds (all dofs; zero off the slipping walls) at which each wall's slip
        law balances the nodal forces ``reaction`` that a fixed wall would exert. The
        stress at a wall dof is its force over its share of the wall, ``int_wall a v ds``
        (the slip term adds ``F`` times that share), inverted by the unsmoothed law.
        Rotational flow: the share is ``P R`` and the slip speed is divided by ``R``
        (returned as a slip in angular speed)."""
        slip = np.zeros(self.domain.basis.N)
        for name, law in self.laws.items():
            wall = self.domain.walls[name]
            lever = self.lever(wall)
            if self.domain.dimension == 1:
                share = np.full(wall.dofs.size, wall.perimeter * lever)
            else:
                basis = self._facet_bases[name]
                ones = np.ones_like(np.asarray(basis.interpolate(np.zeros(basis.N))))
                share = asm(_slip_force, basis, coefficient=ones)[wall.dofs]
            stress = -reaction[wall.dofs] / share
            speed = np.array([law.slip_speed(value, self.model) for value in stress])
            slip[wall.dofs] = np.sign(stress) * speed / lever
        return slip

    def wall_stress(self, u) -> dict[str, float]:
        """Mean shear stress of the fluid on each slipping wall by its slip law (Pa),
        signed along +z (rotational flow: along +theta, the sense of a positive angular
        speed), like the slip speed: a fluid faster than the wall drags it forward."""
        out = {}
        for name, law in self.laws.items():
            wall = self.domain.walls[name]
            if self.domain.dimension == 1:
                slip = self.lever(wall) * (u[wall.dofs] - wall.value)
                value, _ = law.stress(slip, self.model, self.smoothing)
                out[name] = float(np.sum(value))
            else:
                basis = self._facet_bases[name]
                value, _ = law.stress(np.asarray(basis.interpolate(u)) - wall.value,
                                      self.model, self.smoothing)
                out[name] = float(np.sum(value * basis.dx) / np.sum(basis.dx))
        return out

    def slip_speed(self, u) -> dict[str, float]:
        """Mean slip speed along each slipping wall (m/s, signed along +z; rotational
        flow: ``R (omega(R) - Omega)``, along +theta)."""
        out = {}
        for name in self.laws:
            wall = self.domain.walls[name]
            if self.domain.dimension == 1:
                out[name] = float(self.lever(wall) * (np.mean(u[wall.dofs]) - wall.value))
            else:
                basis = self._facet_bases[name]
                slip = np.asarray(basis.interpolate(u)) - wall.value
                out[name] = float(np.sum(slip * basis.dx) / np.sum(basis.dx))
        return out


def speed_scale(case, domain, model) -> float:
    """A speed typical of the flow, for the slip regularisation (m/s)."""
    from .scales import characteristic_rate
    return characteristic_rate(case, domain, model) * domain.length_scale


class SlipProblem(Problem):
    """The discrete problem with slip on some walls: their dofs are unknowns, and the
    slip law's boundary term joins the residual and the tangent.

    Picard steps use the slip law's secant ``F(u_s) / u_s`` at the state of the last
    frozen coefficient, so every frozen operator keeps a Robin term on slipping walls and
    stays non-singular even when every wall slips. The start is the no-slip one with the
    slip its wall stresses call for (:meth:`slip_start`).
    """

    def __init__(self, domain, model, slip: WallSlip):
        super().__init__(domain, model)
        self.slip = slip
        n = domain.basis.N
        self.fixed = np.setdiff1d(domain.wall_dofs, slip.dofs)
        self.free = np.setdiff1d(np.arange(n), self.fixed)
        self.linear = LinearSolver("direct", self.free.size)
        self._frozen_state = None
        self._wall_speeds = np.zeros(n)
        for name in slip.laws:
            wall = domain.walls[name]
            self._wall_speeds[wall.dofs] = wall.value

    def boundary_values(self) -> np.ndarray:
        u = super().boundary_values()
        u[self.slip.dofs] = 0.0       # unknowns now; the slip term carries the wall speed
        u[self.fixed] = super().boundary_values()[self.fixed]
        return u

    def _wall(self) -> WallSlip:
        """The slip terms with the problem's current model (continuation changes it)."""
        if self.slip.model is not self.model:
            self.slip = self.slip.with_model(self.model)
        return self.slip

    def reaction(self, u, pressure_gradient) -> np.ndarray:
        """The force balance without the slip term: at a wall, the force the wall exerts."""
        return super().residual(u, pressure_gradient)

    def residual(self, u, pressure_gradient) -> np.ndarray:
        return super().residual(u, pressure_gradient) + self._wall().force(u)

    def relative_residual(self, u, pressure_gradient, beyond_round_off: bool = True) -> float:
        """Residual on the free dofs over the size of the forces in balance, in the
        diagonally scaled norm of :meth:`Problem.relative_residual`.

        The viscous force, the slip drag and the pressure load are measured apart: at a
        slipping wall the first two balance each other (each is the wall's share of the
        pressure force), so their sum, small there, would understate the forces in balance
        and lift round-off above the tolerance (measured: 49 times, in a pipe with a
        slip yield stress, where a fixed wall's reaction carries the scale).

        The weights are those of the viscous operator alone, as for a fixed wall: the
        slip term's own stiffness is up to ``tau_s / eps`` on a wall held by a slip yield
        stress, an artefact of the smoothing that would shrink that wall's share of the
        scale (measured: 170 times) and make the measure depend on ``SLIP_SMOOTHING``.

        At a slipping wall's dofs the residual is measured by the viscous force of the
        correction it calls for, ``r_i K_i / (K_i + S_i)`` (``K_i`` the viscous diagonal,
        ``S_i`` the slip term's stiffness, the row sum of its tangent). On a free wall
        ``S_i`` is small and nothing changes; on a wall held by a slip yield stress
        ``S_i ~ P tau_s / eps`` is up to 1e6 times ``K_i``, and the wall's speed, a float
        near the wall speed ``U``, only resolves the slip to ``ulp(U)``: a residual floor
        ``S_i ulp(U)`` of 3e-9 (coaxial cylinders, the inner one at 1 rev/s held) and 5e-8
        (a slit's top wall at 5 mm/s held), above the tolerance however many iterations
        (100 measured), although that wall's speed was right to round-off. A wall at rest
        (``U = 0``) has no such floor, so pipes and slits with fixed walls are unchanged.
        """
        gradient, coefficient, _ = self._coefficients(u, False)
        viscous = self.plan.force(coefficient * gradient)
        drag = self._wall().force(u)
        diagonal = self.plan.diagonal(coefficient)
        # weights scaled so that the stiffest dof has weight 1, as in the base class
        weight = np.sqrt(np.max(diagonal[self.free], initial=0.0) / diagonal)
        imbalance = viscous + drag + pressure_gradient * self.load
        dofs = self.slip.dofs
        if dofs.size:
            stiffness = np.asarray(abs(self._wall().tangent(u)[dofs]).sum(axis=1)).ravel()
            imbalance[dofs] *= diagonal[dofs] / (diagonal[dofs] + stiffness)
        residual = imbalance[self.free] * weight[self.free]
        scale = max(_norm(viscous * weight), _norm(drag * weight),
                    _norm(pressure_gradient * self.load * weight))
        if scale == 0.0:
            return 0.0 if _norm(residual) == 0.0 else math.inf
        relative = float(_norm(residual) / scale)
        if beyond_round_off and relative <= ROUND_OFF_CHECK:
            # as for a fixed wall: less the round-off share of the viscous force. A plug
            # sliding on its walls has a huge regularised viscosity and a speed far from
            # zero everywhere, which lifts that share to 1e-9 (a Bingham pipe held by a
            # slip yield stress ran 100 iterations at 1.5e-9)
            relative = self._beyond_round_off(u, pressure_gradient, residual, weight, scale)
        return relative

    def tangent(self, u) -> sp.csr_matrix:
        free = self.free
        return super().tangent(u) + self._wall().tangent(u)[free][:, free]

    def _secant(self) -> sp.csr_matrix:
        u = self._frozen_state if self._frozen_state is not None else self.boundary_values()
        return self._wall().secant(u)

    def frozen_coefficient(self, u) -> np.ndarray:
        self._frozen_state = u
        return super().frozen_coefficient(u)

    def frozen(self, coefficient) -> sp.csr_matrix:
        free = self.free
        return super().frozen(coefficient) + self._secant()[free][:, free]

    def frozen_action(self, coefficient, v) -> np.ndarray:
        secant = self._secant()
        return super().frozen_action(coefficient, v) + secant @ (v - self._wall_speeds)

    def without_slip(self) -> Problem:
        """The same domain and model with every wall fixed at its speed."""
        plain = Problem(self.domain, self.model)
        plain.rate_floor = self.rate_floor
        plain.linear = LinearSolver("auto" if self.linear.automatic else self.linear.method,
                                    plain.free.size, dimension=self.domain.dimension)
        return plain

    def slip_start(self, start, target):
        """A start with slip, from the start ``(u, G)`` of :meth:`without_slip`.

        A start with the walls as unknowns from the outset is poor whatever the law: at
        zero slip the secant ``G(eps)/eps`` holds a wall with ``p > 1`` or a slip yield
        stress fixed, and leaves one with ``p < 1`` almost free (the first Newton iterate of
        a flow-rate drive then had a pressure gradient 140 times too large). Instead each slipping wall's
        stress is read from the no-slip start's reaction (exact for pipes and slits by
        statics, ``tau_w = -G R / 2``), the slip law gives the slip speed there, and one
        frozen solve with the slip secant at that slip and the start's viscosity spreads
        it into the bulk. Pressure-driven pipes and slits start at their solution: the
        slip flow is the no-slip flow plus the slip speed.
        """
        u, gradient = start
        if self.domain.kind == "rotational":
            rotational = self._rotational_start(u)
            if rotational is not None:
                return rotational
        shifted = u.copy()
        slip = self._wall().slip_at_reaction(self.reaction(u, gradient))
        shifted[self.slip.dofs] = (self._wall_speeds + slip)[self.slip.dofs]
        coefficient = super().frozen_coefficient(u)
        self._frozen_state = shifted
        return picard_step(self, shifted, gradient, target, coefficient)

    def _rotational_start(self, u):
        """Coaxial cylinders: the start from statics, or None if the torque is not found.

        The torque per length ``M`` is the same on every cylinder ``r``, slip or not, so
        ``|tau| = M / (2 pi r^2)`` and the speed difference the cylinders impose is shared
        by the bulk, ``int rate(|tau|) / r dr``, and the slip of each slipping wall,
        ``u_s(|tau(R)|) / R``: one increasing function of ``M``, whose root gives the wall
        slips and the viscosity at each quadrature point; one frozen solve with those
        spreads them into the gap. (The no-slip start's torque, which the axial walls use,
        overestimates the stress here: with it, a Bingham gap took 70-94 Newton iterations
        and three continuation stages, against 3 without slip.)
        """
        from scipy.optimize import brentq

        from .newton import _rates_at_stress
        wall, model = self._wall(), self.model
        walls = self.domain.walls
        difference = walls["inner"].value - walls["outer"].value
        radius = self.rate_factor                       # r at the quadrature points
        weight = self.plan.dx / radius                  # d(omega) = rate / r dr
        torque = abs(float(np.sum(self.reaction(u, 0.0)[walls["inner"].dofs])))
        guess = np.maximum(self.shear_rate(u), 1e-300)
        if not (difference != 0 and torque > 0 and math.isfinite(torque)):
            return None

        def shares(m):
            stress = m / (2 * math.pi * radius ** 2)
            rates = _rates_at_stress(model, stress, guess)
            slips = {name: law.slip_speed(m / (2 * math.pi * walls[name].position ** 2), model)
                     for name, law in wall.laws.items()}
            return rates, slips

        def mismatch(log_m):
            rates, slips = shares(math.exp(log_m))
            total = float(np.sum(rates * weight)) + sum(
                speed / walls[name].position for name, speed in slips.items())
            return math.log(max(total, 1e-300)) - math.log(abs(difference))
        low = high = math.log(torque)
        for _ in range(30):
            if mismatch(high) > 0:
                break
            high += math.log(10.0)
        for _ in range(30):
            if mismatch(low) < 0:
                break
            low -= math.log(10.0)
        if not mismatch(low) < 0 < mismatch(high):
            return None
        rates, slips = shares(math.exp(brentq(mismatch, low, high, xtol=1e-6)))
        viscosity = model.viscosity(np.maximum(rates, self.rate_floor))
        if not np.all(np.isfinite(viscosity)) or not np.all(viscosity > 0):
            return None
        sense = math.copysign(1.0, difference)
        shifted = u.copy()
        for name, speed in slips.items():
            # the fluid lags the faster cylinder and leads the slower one
            lag = -sense if name == "inner" else sense
            shifted[walls[name].dofs] = walls[name].value + lag * speed / walls[name].position
        coefficient = self.area_weight * radius ** 2 * viscosity
        self._frozen_state = shifted
        return picard_step(self, shifted, 0.0, None, coefficient)

    def sibling(self, model) -> SlipProblem:
        other = super().sibling(model)
        other._frozen_state = None
        return other
