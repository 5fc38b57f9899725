"""Linear solvers for the reduced systems of one nonlinear iteration."""

from __future__ import annotations

import math

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla


#: Free unknowns up to which "auto" starts with a sparse direct solve. 1-D systems are
#: banded and factor in linear time. For 2-D P2 sections SuperLU's fill-in grows faster
#: than linearly: on square ducts (2026-12-02, 2 loaded cores, Newton without the
#: error estimates) AMG-preconditioned CG (the loop in ``_cg``) was ahead of SuperLU at
#: 20k unknowns (Herschel-Bulkley 6.9 s against 7.8 s, power law 5.2 s against 7.1 s)
#: and at 40k (11.0 s against 24.6 s, 12.8 s against 25.9 s). A sharply regularised plug
#: that makes CG climb past CG_CLIMB iterations moves to the direct solver by itself.
DIRECT_LIMIT = 60_000
DIRECT_LIMIT_2D = 15_000
#: "auto" on AMG switches to the direct solver when one CG solve needs more iterations than
#: this (the preconditioner no longer captures the operator) and the system is below
#: DIRECT_HARD_LIMIT unknowns (SuperLU's fill-in on 2-D P2 stays below ~2 GiB there).
CG_CLIMB = 150
#: Half-bandwidth up to which a 1-D system is factored as a banded matrix (P2: 2)
BANDED_WIDTH = 16
DIRECT_HARD_LIMIT = 400_000
#: SuperLU options for the symmetric systems solved here (tangents and frozen operators,
#: symmetric positive definite for a monotone flow curve): a minimum-degree ordering of
#: A + A^T and diagonal pivots preferred (threshold pivoting kept for safety) instead of
#: scipy's default COLAMD ordering of A^T A. Square-duct P2 tangents (2026-12-04):
#: 2.6k / 9.8k / 19k unknowns factored in 8.0 / 52.6 / 155 ms -> 4.2 / 24.2 / 65 ms,
#: fill 0.57-0.59 of the default, solves 1.6-2x faster, residuals the same (1e-14);
#: the grid-sequence levels below 15k unknowns spent 40 % of their time factoring.
SYMMETRIC_LU = {"permc_spec": "MMD_AT_PLUS_A", "diag_pivot_thresh": 0.1,
                "options": {"SymmetricMode": True}}


def inner(a: np.ndarray, b: np.ndarray) -> float:
    """``a . b`` of two vectors without BLAS. OpenBLAS threads a dot product over the
    cores; on a machine whose cores are busy with other work the threads wait for each
    other, and one dot product of 160k entries took 2 ms instead of 0.05 ms (measured
    2026-12-02, 2 shared cores); numpy's own einsum loop is single-threaded (0.35 ms)."""
    return float(np.einsum("i,i->", a, b))


class LinearSolver:
    """Solves the reduced (free-dof) systems of one nonlinear iteration.

    ``direct``: a sparse LU factorisation (SuperLU), reused for every right-hand side of
    the iteration. ``amg``: conjugate gradients preconditioned by a pyamg
    smoothed-aggregation hierarchy. The hierarchy is kept across Newton iterations (the
    tangent changes only through the viscosity) and rebuilt when CG needs more than
    ``rebuild_after`` iterations: rebuilding costs several CG solves, so it pays only
    once the old hierarchy has gone stale. The CG tolerance is the Newton forcing term
    (inexact Newton), so early iterations are solved loosely and late ones tightly.

    ``auto`` picks by size (DIRECT_LIMIT, DIRECT_LIMIT_2D) and moves from AMG to direct
    when CG iterations climb past CG_CLIMB. A factorisation that SuperLU reports exactly
    singular (a zero pivot from a degenerate viscosity field) is retried once with
    AMG-preconditioned CG, which needs no pivots; if that fails too the error propagates
    to the nonlinear iteration, which ends as not converged with the reason.
    """

    def __init__(self, method: str, size: int, rebuild_after: int = 40, dimension: int = 1):
        self.automatic = method == "auto"
        if self.automatic:
            limit = DIRECT_LIMIT if dimension == 1 else DIRECT_LIMIT_2D
            method = "direct" if size <= limit else "amg"
        self.method = method
        self.size = size
        self.dimension = dimension
        self.band = None
        self.rebuild_after = rebuild_after
        self.hierarchy = None
        self.matrix = None
        self.factor = None
        self.cg_iterations: list[int] = []
        self.setups = 0
        self.fallbacks = 0
        self.switched = False
        self._weight_of = self._weight_values = None

    def prepare(self, matrix: sp.csr_matrix) -> None:
        self.matrix = matrix
        if (self.automatic and self.method == "amg" and self.size <= DIRECT_HARD_LIMIT
                and self.cg_iterations and self.cg_iterations[-1] > CG_CLIMB):
            self.method, self.switched = "direct", True
        self.factor = None
        if self.method == "direct":
            try:
                self.factor = self._banded(matrix) if self.dimension == 1 else None
                if self.factor is None:
                    self.factor = spla.splu(matrix.tocsc(), **SYMMETRIC_LU)
                return
            except RuntimeError:   # "Factor is exactly singular"
                self.fallbacks += 1
                self.hierarchy = None
        if self.hierarchy is None or (self.cg_iterations and
                                      self.cg_iterations[-1] > self.rebuild_after):
            self._build_hierarchy(matrix)

    def _banded(self, matrix: sp.csr_matrix):
        """A banded Cholesky factor of a 1-D system (None if it is not positive definite
        or not narrowly banded).

        A 1-D mesh couples each dof only with the few of its neighbouring elements, so in
        the reverse Cuthill-McKee order the matrix is banded (half-bandwidth 2 for P2) and
        LAPACK's banded Cholesky factors it in linear time, several times faster than a
        general sparse LU at the sizes of a 1-D case. The order, and where each stored
        entry goes in the band, depend only on the sparsity pattern, which the matrices
        of one problem share (checked), so they are found once.
        """
        if self.band is None or not (np.array_equal(self.band[0], matrix.indptr)
                                     and np.array_equal(self.band[1], matrix.indices)):
            self.band = _cached_layout(matrix)
        _, _, order, width, upper, position = self.band
        if width > BANDED_WIDTH:
            return None
        bands = np.zeros((width + 1, matrix.shape[0]))
        bands.flat[position] = matrix.data[upper]
        try:
            factor = sla.cholesky_banded(bands, check_finite=False)
        except np.linalg.LinAlgError:   # not positive definite: the general LU decides
            return None
        return _BandedFactor(factor, order)

    def _build_hierarchy(self, matrix) -> None:
        import pyamg
        self.hierarchy = pyamg.smoothed_aggregation_solver(
            matrix, symmetry="symmetric", max_coarse=500,
            # the coarsest level of an SPD operator is SPD: a sparse LU is exact and takes
            # milliseconds; the pseudo-inverse (a dense SVD) only after a singular factor
            coarse_solver="pinv" if self.fallbacks else "splu",
            # a local (Gershgorin-type) Jacobi weight needs no spectral-radius estimate
            smooth=("jacobi", {"weighting": "local"}),
            # one forward Gauss-Seidel sweep before the coarse correction and one
            # backward after it keep the V-cycle symmetric (a CG preconditioner) at half
            # the smoothing of pyamg's symmetric sweeps: 160k-unknown duct (2026-12-03),
            # CG to 1e-10 on a Newtonian operator 35 -> 42 iterations, 0.74 -> 0.55-0.63 s;
            # on a Herschel-Bulkley tangent 51 -> 64, 1.02-1.06 -> 0.89-0.94 s
            presmoother=("gauss_seidel", {"sweep": "forward"}),
            postsmoother=("gauss_seidel", {"sweep": "backward"}))
        self.setups += 1

    def solve(self, rhs: np.ndarray, rtol: float = 1e-10, guess=None) -> np.ndarray:
        if self.factor is not None:
            solution = self.factor.solve(rhs)
        else:
            solution = self._cg(rhs, rtol, guess)
        if not np.all(np.isfinite(solution)):
            raise np.linalg.LinAlgError("the linear solve gave non-finite values")
        return solution

    def _cg(self, rhs, rtol, guess, maxiter: int = 2000) -> np.ndarray:
        """Conjugate gradients preconditioned by one V-cycle, stopped at
        ``|r|_D <= rtol |rhs|_D``: the textbook loop (Saad, *Iterative Methods for Sparse
        Linear Systems*, 2nd ed., Alg. 9.1) with the vectors updated in place; scipy's
        ``cg`` and pyamg's preconditioner wrapper each add vector allocations, norms
        and (pyamg) a residual evaluation on the finest level per iteration.

        ``|v|_D = |D^-1/2 v|`` (``D`` the diagonal) is the norm the Newton convergence
        test measures residuals in (:meth:`gnflow.solver.assembly.Problem.relative_residual`).
        In the Euclidean norm the stiff equations of a plug or of a region of vanishing
        rates dominate, so a step solved to its forcing term left the other equations
        less converged than the term asked. On a 160k-unknown duct (2026-12-03) a power
        law (n = 0.5) took 5 fine Newton steps (1.2e-10 after the fourth, tolerance
        1e-10) and now takes 4 (8.9e-11); Herschel-Bulkley ends its fifth at 1.8e-10
        instead of 6.9e-10.
        """
        matrix = self.matrix
        x = np.zeros_like(rhs) if guess is None else np.array(guess, dtype=float)
        r = rhs - matrix @ x if guess is not None else rhs.copy()
        weight = self._weight(matrix)

        def size(v):   # |D^-1/2 v|^2
            return float(np.einsum("i,i,i->", v, weight, v))
        limit = rtol * rtol * size(rhs)
        z = self._v_cycle(r)
        p = z.copy()
        rz = inner(r, z)
        iterations = 0
        while size(r) > limit and iterations < maxiter:
            q = matrix @ p
            curvature = inner(p, q)
            if not (curvature > 0 and math.isfinite(curvature)):
                raise np.linalg.LinAlgError("conjugate gradients broke down (the operator "
                                            "is not positive definite)")
            alpha = rz / curvature
            x += alpha * p
            r -= alpha * q
            z = self._v_cycle(r)
            rz, previous = inner(r, z), rz
            p *= rz / previous
            p += z
            iterations += 1
        self.cg_iterations.append(iterations)
        return x

    def _weight(self, matrix) -> np.ndarray:
        """``1/D`` of the matrix, scaled to a largest entry of 1 (the ratio a stopping
        test takes does not change, and squares of tiny residuals stay in range); a
        non-positive diagonal entry (never in an SPD matrix) gets weight 1."""
        if self._weight_of is not matrix:
            diagonal = matrix.diagonal()
            positive = diagonal > 0
            weight = np.ones_like(diagonal)
            weight[positive] = 1.0 / diagonal[positive]
            self._weight_values = weight / np.max(weight, initial=1e-300)
            self._weight_of = matrix
        return self._weight_values

    def _v_cycle(self, rhs: np.ndarray) -> np.ndarray:
        """One V-cycle of the hierarchy from a zero start (pre- and post-smoothing, the
        coarsest level solved by its coarse solver)."""
        levels = self.hierarchy.levels

        def cycle(level: int, b: np.ndarray) -> np.ndarray:
            a = levels[level].A
            if level == len(levels) - 1:
                return np.asarray(self.hierarchy.coarse_solver(a, b)).reshape(b.shape)
            x = np.zeros_like(b)
            levels[level].presmoother(a, x, b)
            x += levels[level].P @ cycle(level + 1, levels[level].R @ (b - a @ x))
            levels[level].postsmoother(a, x, b)
            return x
        return cycle(0, rhs)

    def report(self) -> dict:
        """What the solver did, for the solution's record."""
        return {"method": "direct" if self.method == "direct" else "amg",
                "amg_setups": self.setups, "cg_iterations": sum(self.cg_iterations),
                "singular_factor_fallbacks": self.fallbacks,
                "switched_to_direct": self.switched}


#: The band layouts of the last few sparsity patterns: a study solves the same 1-D mesh
#: many times, and the layout (a reordering) costs as much as a factorisation.
_LAYOUTS: dict = {}
_LAYOUTS_KEPT = 8


def _cached_layout(matrix: sp.csr_matrix):
    """``(indptr, indices) + _band_layout(matrix)``, from the cache when the pattern was
    seen before (the arrays are read-only: shared by every solver of that pattern)."""
    key = (matrix.shape[0], matrix.indptr.tobytes(), matrix.indices.tobytes())
    found = _LAYOUTS.get(key)
    if found is None:
        found = (matrix.indptr.copy(), matrix.indices.copy()) + _band_layout(matrix)
        for part in found:
            if isinstance(part, np.ndarray):
                part.setflags(write=False)
        if len(_LAYOUTS) >= _LAYOUTS_KEPT:
            _LAYOUTS.pop(next(iter(_LAYOUTS)))
        _LAYOUTS[key] = found
    return found


def _band_layout(matrix: sp.csr_matrix):
    """Reverse Cuthill-McKee order of a symmetric sparsity pattern, its half-bandwidth,
    and for the stored entries on or above the permuted diagonal (a mask) their flat
    positions in LAPACK's upper banded storage."""
    from scipy.sparse.csgraph import reverse_cuthill_mckee
    order = reverse_cuthill_mckee(matrix, symmetric_mode=True)
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    rows = rank[np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr))]
    cols = rank[matrix.indices]
    upper = cols >= rows
    width = int(np.max(cols - rows, initial=0))
    position = (width + rows[upper] - cols[upper]) * matrix.shape[0] + cols[upper]
    return order, width, upper, position


class _BandedFactor:
    """A banded Cholesky factor in a permuted order, solving like SuperLU's factor."""

    def __init__(self, factor: np.ndarray, order: np.ndarray):
        self.factor, self.order = factor, order

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        solution = np.empty_like(rhs, dtype=float)
        solution[self.order] = sla.cho_solve_banded((self.factor, False), rhs[self.order],
                                                         check_finite=False)
        return solution
