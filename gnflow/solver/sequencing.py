"""Grid sequencing: the coarse solution carried to a finer mesh as its initial state."""

from __future__ import annotations

import numpy as np
from skfem import ElementTriP1

from ..geometry import Domain, reference_coordinates
from .solution import Solution

#: Unknowns above which a 2-D nonlinear solve starts from a solve on the mesh half as fine
SEQUENCING_LIMIT = 20_000
#: Unknowns above which a level of a grid sequence starts from a coarser level in turn.
#: The coarsest level is where the regularisation continuation and the start from the
#: stress-consistent state (several direct solves) happen, so it pays to make it small:
#: on a 160k-unknown duct (Herschel-Bulkley) the levels below the fine one took 1.6 s
#: from a 10k-unknown coarsest level and 1.1 s from a 2.6k one (7 Newton steps there,
#: 3 on the 10k level instead of 7).
SEQUENCE_FLOOR = 5_000

# coarse triangles (nearest by centroid) searched for each fine dof: long thin cells
# put the containing triangle's centroid farther away than several neighbours' centroids
CANDIDATES = 24
#: triangles searched first; a point inside one of them (to INSIDE) needs no more
FIRST_CANDIDATES = 4
INSIDE = 1e-9
# a point whose best straight-triangle barycentric coordinate is below this lies in no
# candidate (it cannot happen on nested sections; guarded all the same)
OUTSIDE = -0.5


def _barycentric(p: np.ndarray, t: np.ndarray, x: np.ndarray, tind: np.ndarray) -> np.ndarray:
    """Barycentric coordinates (lambda_1, lambda_2) of points ``x`` (2, N) in the straight
    triangles ``tind`` (N,); lambda_0 = 1 - lambda_1 - lambda_2."""
    a, b, c = p[:, t[0, tind]], p[:, t[1, tind]], p[:, t[2, tind]]
    e1, e2, d = b - a, c - a, x - a
    det = e1[0] * e2[1] - e1[1] * e2[0]
    return np.array([(e2[1] * d[0] - e2[0] * d[1]) / det, (e1[0] * d[1] - e1[1] * d[0]) / det])


def _by_parents(domain: Domain, p, t, tree, best, cells, straight) -> np.ndarray:
    """Place the fine dofs by the coarse triangle that holds each fine triangle's
    centroid (its parent, on nested meshes); returns the dofs left to search.

    A fine triangle has half as many centroids as the P2 mesh has dofs, and on nested
    meshes its parent, the coarse triangle nearest its centroid, holds all its dofs:
    one nearest-neighbour query of the centroids replaces a four-neighbour query of the
    dofs (1M fine dofs: 0.4 s instead of 1.4 s). A dof its parent does not hold (meshes
    that are not nested, curved walls) is searched as before. ``best``, ``cells`` and
    ``straight`` are filled in for the dofs placed.
    """
    fine = domain.basis
    mesh = fine.mesh
    _, parent = tree.query(mesh.p[:, mesh.t[:3]].mean(axis=1).T, k=1)
    parent = np.asarray(parent, dtype=np.int64).reshape(-1)
    dofs = fine.element_dofs
    owner = np.full(fine.N, -1, dtype=np.int64)
    for local in range(dofs.shape[0]):
        owner[dofs[local]] = parent
    placed = np.flatnonzero(owner >= 0)
    lam = _barycentric(p, t, fine.doflocs[:, placed], owner[placed])
    inside = np.minimum(np.minimum(lam[0], lam[1]), 1 - lam[0] - lam[1])
    held = inside >= -INSIDE
    chosen = placed[held]
    best[chosen], cells[chosen] = inside[held], owner[chosen]
    straight[:, chosen] = lam[:, held]
    left = np.ones(fine.N, dtype=bool)
    left[chosen] = False
    return np.flatnonzero(left)


def interpolated(coarse: Solution, domain: Domain) -> np.ndarray:
    """The coarse solution evaluated at the fine mesh's dofs; never raises for a point the
    coarse mesh's inverse map cannot place.

    Each fine dof is located among its :data:`FIRST_CANDIDATES` nearest coarse triangles,
    or, if none of them contains it, among its :data:`CANDIDATES` nearest, as the one
    whose straight-triangle barycentric coordinates are least negative. The coarse
    field is evaluated at the point's reference coordinates in that (curved) element
    (:func:`gnflow.geometry.reference_coordinates`); where that Newton iteration does not
    converge (a point in the thin sliver between a curved wall and its chord lies outside
    the curved element) the straight-triangle coordinates are used, which extrapolates
    from the adjacent element; a point in no candidate takes the value of the nearest
    coarse dof. It is only a start for Newton, so these fallbacks cost iterations, not
    accuracy.
    """
    from scipy.spatial import cKDTree

    basis = coarse.domain.basis
    mesh = basis.mesh
    p, t = mesh.p, mesh.t[:3]
    x = domain.basis.doflocs
    tree = cKDTree(p[:, t].mean(axis=1).T)
    best = np.full(x.shape[1], -np.inf)
    cells = np.zeros(x.shape[1], dtype=np.int64)
    straight = np.zeros((2, x.shape[1]))
    todo = np.arange(x.shape[1])
    if 1.5 * domain.basis.mesh.t.shape[1] < x.shape[1]:   # fewer centroids than dofs
        todo = _by_parents(domain, p, t, tree, best, cells, straight)
    # the few nearest triangles hold almost every point; only the points that none of
    # them contains are searched among CANDIDATES (160k fine dofs: 1.7 s -> 0.6 s)
    for search, k in enumerate((min(FIRST_CANDIDATES, t.shape[1]), min(CANDIDATES, t.shape[1]))):
        if todo.size == 0:
            break
        _, candidates = tree.query(x[:, todo].T, k=k)
        candidates = candidates.reshape(todo.size, k)
        if search == 0:
            cells[todo] = candidates[:, 0]
        for column in range(k):
            tind = candidates[:, column]
            lam = _barycentric(p, t, x[:, todo], tind)
            inside = np.minimum(np.minimum(lam[0], lam[1]), 1 - lam[0] - lam[1])
            better = inside > best[todo]
            chosen = todo[better]
            best[chosen], cells[chosen] = inside[better], tind[better]
            straight[:, chosen] = lam[:, better]
        todo = todo[best[todo] < -INSIDE]
        if todo.size == 0:
            break
    if mesh.elem is ElementTriP1:
        # straight (affine) triangles: the barycentric coordinates are the reference ones
        # (1M fine dofs: the inverse-map iteration cost 0.7 s of 3 s)
        ref = straight
    else:
        ref, converged = reference_coordinates(mesh, x[:, :, np.newaxis], cells)
        ref = np.where(converged[np.newaxis], ref, straight[:, :, np.newaxis])[:, :, 0]
    values = np.zeros(x.shape[1])
    for local in range(basis.Nbfun):
        phi, _ = basis.elem.lbasis(ref, local)
        values += phi * coarse.u[basis.element_dofs[local, cells]]
    lost = best < OUTSIDE
    if lost.any():
        _, nearest = cKDTree(basis.doflocs.T).query(x[:, lost].T)
        values[lost] = coarse.u[nearest]
    return values
