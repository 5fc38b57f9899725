"""Linear solvers for the reduced systems of one nonlinear iteration."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla


#: Free unknowns above which "auto" chooses algebraic multigrid over a sparse direct solve
DIRECT_LIMIT = 60_000
DIRECT_LIMIT_2D = 12_000


class LinearSolver:
    """Solves the reduced (free-dof) systems of one nonlinear iteration.

    ``direct``: a sparse LU factorisation (SuperLU), reused for every right-hand side of
    the iteration. ``amg``: conjugate gradients preconditioned by a pyamg
    smoothed-aggregation hierarchy. The hierarchy is kept across Newton iterations (the
    tangent changes only through the viscosity) and rebuilt when CG needs more than
    ``rebuild_after`` iterations: rebuilding costs several CG solves, so it pays only
    once the old hierarchy has gone stale. The CG tolerance is the Newton forcing term
    (inexact Newton), so early iterations are solved loosely and late ones tightly.
    """

    def __init__(self, method: str, size: int, rebuild_after: int = 40, dimension: int = 1):
        if method == "auto":
            # 1-D systems are banded and factor in linear time; 2-D fill-in grows faster
            limit = DIRECT_LIMIT if dimension == 1 else DIRECT_LIMIT_2D
            method = "direct" if size <= limit else "amg"
        self.method = method
        self.rebuild_after = rebuild_after
        self.hierarchy = None
        self.preconditioner = None
        self.matrix = None
        self.factor = None
        self.cg_iterations: list[int] = []
        self.setups = 0

    def prepare(self, matrix: sp.csr_matrix) -> None:
        self.matrix = matrix
        if self.method == "direct":
            self.factor = spla.splu(matrix.tocsc())
        elif self.hierarchy is None or (self.cg_iterations and
                                        self.cg_iterations[-1] > self.rebuild_after):
            import pyamg
            self.hierarchy = pyamg.smoothed_aggregation_solver(
                matrix, symmetry="symmetric", max_coarse=500, coarse_solver="splu",
                # a local (Gershgorin-type) Jacobi weight needs no spectral-radius estimate
                smooth=("jacobi", {"weighting": "local"}))
            self.preconditioner = self.hierarchy.aspreconditioner(cycle="V")
            self.setups += 1

    def solve(self, rhs: np.ndarray, rtol: float = 1e-10, guess=None) -> np.ndarray:
        if self.method == "direct":
            return self.factor.solve(rhs)
        count = [0]

        def counter(_):
            count[0] += 1
        solution, info = spla.cg(self.matrix, rhs, x0=guess, rtol=rtol, maxiter=2000,
                                 M=self.preconditioner,
                                 callback=counter)
        self.cg_iterations.append(count[0])
        return solution
