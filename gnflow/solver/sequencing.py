"""Grid sequencing: the coarse solution carried to a finer mesh as its initial state."""

from __future__ import annotations

import numpy as np

from ..geometry import Domain
from .solution import Solution

SEQUENCING_LIMIT = 20_000


def interpolated(coarse: Solution, domain: Domain) -> np.ndarray:
    """The coarse solution evaluated at the fine mesh's dofs.

    The coarse field is evaluated on a straight-sided copy of its mesh (same dofs); each
    fine dof is located in the coarse triangle, among its nearest ones, whose
    barycentric coordinates are least negative, so that points in the thin slivers
    between a curved wall and its chords are extrapolated from the adjacent triangle.
    """
    from scipy.spatial import cKDTree
    from skfem import Basis, MeshTri

    coarse_mesh = coarse.domain.basis.mesh
    linear = MeshTri(coarse_mesh.p, coarse_mesh.t)
    basis = Basis(linear, coarse.domain.basis.elem)
    x = domain.basis.doflocs
    centroids = linear.p[:, linear.t].mean(axis=1)
    k = min(8, linear.t.shape[1])
    _, candidates = cKDTree(centroids.T).query(x.T, k=k)
    candidates = candidates.reshape(x.shape[1], k)
    best = np.full(x.shape[1], -np.inf)
    cells = candidates[:, 0].copy()
    for column in range(k):
        tind = candidates[:, column]
        ref = basis.mapping.invF(x[:, :, np.newaxis], tind=tind)[:, :, 0]
        inside = np.minimum(np.minimum(ref[0], ref[1]), 1 - ref[0] - ref[1])
        better = inside > best
        best[better], cells[better] = inside[better], tind[better]
    ref = basis.mapping.invF(x[:, :, np.newaxis], tind=cells)
    values = np.zeros(x.shape[1])
    for local in range(basis.Nbfun):
        phi = np.asarray(basis.elem.gbasis(basis.mapping, ref, local, tind=cells)[0])[:, 0]
        values += phi * coarse.u[basis.element_dofs[local, cells]]
    return values
