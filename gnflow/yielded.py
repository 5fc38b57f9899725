"""Unyielded regions of a yield-stress flow, located by interpolation of the level set
``phi = tau - tau_y`` rather than at mesh nodes.

Pure functions over arrays; post-processing supplies the stress at the nodes.

* 1-D: :func:`plug_edges_1d` finds each plug edge where the piecewise-linear interpolant
  of ``phi`` between two adjacent nodes crosses zero.
* 2-D: :func:`unyielded_fraction_2d` integrates the region ``phi < 0`` of the
  piecewise-linear interpolant of ``phi`` exactly, triangle by triangle;
  :func:`p2_sub_triangles` splits each P2 triangle into its four sub-triangles at the
  edge midpoints, so that the P2 nodal values define that interpolant at twice the
  resolution of the vertices.

Each result carries an uncertainty: the difference between the interpolated estimate and
the node-resolution one (a plug edge placed at the nearest node, a triangle counted by
the share of its vertices inside). For a level set whose interpolation error is of
second order, the interpolated edge is far closer than this, so the figure is a cautious
bound; it shrinks in proportion to the local mesh size.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class PlugEdges:
    """Plug intervals ``[[start, end], ...]`` of a 1-D profile and their uncertainty (m)."""

    intervals: list
    uncertainty: float


def plug_edges_1d(x, stress, yield_stress: float) -> PlugEdges:
    """Intervals where the stress is below the yield stress, their edges interpolated.

    Between adjacent nodes ``x_i < x_j`` where ``phi = stress - yield_stress`` changes
    sign, the edge is ``x_i + (x_j - x_i) phi_i / (phi_i - phi_j)`` (the zero of the
    linear interpolant). The uncertainty is the largest distance from an interpolated
    edge to the node the node-resolution rule would report.

    >>> r = plug_edges_1d([0.0, 1.0, 2.0, 3.0], [0.0, 1.0, 2.0, 3.0], 1.5)
    >>> r.intervals, r.uncertainty
    ([[0.0, 1.5]], 0.5)
    """
    x = np.asarray(x, dtype=float)
    order = np.argsort(x)
    x = x[order]
    phi = np.asarray(stress, dtype=float)[order] - yield_stress
    below = phi < 0
    intervals, start, uncertainty = [], None, 0.0
    for i in range(x.size):
        if i == 0:
            if below[0]:
                start = x[0]
            continue
        if below[i] == below[i - 1]:
            continue
        edge = x[i - 1] + (x[i] - x[i - 1]) * phi[i - 1] / (phi[i - 1] - phi[i])
        # the node-resolution rule puts an entering edge at the first node below and a
        # leaving edge at the first node above: both are x[i]
        uncertainty = max(uncertainty, abs(x[i] - edge))
        if below[i]:
            start = edge
        else:
            intervals.append([float(start), float(edge)])
            start = None
    if start is not None:
        intervals.append([float(start), float(x[-1])])
    return PlugEdges(intervals, float(uncertainty))


@dataclass(frozen=True)
class UnyieldedFraction:
    """Area fraction of ``phi < 0``: interpolated, at node resolution, and the
    uncertainty (their difference)."""

    fraction: float
    node_fraction: float
    uncertainty: float


def unyielded_fraction_2d(points, triangles, level, weight=None) -> UnyieldedFraction:
    """Area fraction where the piecewise-linear interpolant of ``level`` is negative.

    ``points`` (2, N), ``triangles`` (3, T) vertex indices, ``level`` (N,) the values of
    ``phi = tau - tau_y`` at the points; ``weight`` (T,) optional per-triangle area
    weights. In a triangle with vertex values ``phi_a < 0 <= phi_b, phi_c`` the linear
    ``phi`` is negative on the corner triangle at ``a`` whose share of the area is
    ``t_b t_c`` with ``t_k = phi_a / (phi_a - phi_k)``; with two negative vertices the
    share is one minus that of the positive corner. This is exact for linear ``phi``.

    >>> p = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    >>> t = np.array([[0], [1], [2]])
    >>> unyielded_fraction_2d(p, t, np.array([-1.0, 1.0, 1.0])).fraction   # (1/2)^2
    0.25
    """
    p = np.asarray(points, dtype=float)
    t = np.asarray(triangles)
    phi = np.asarray(level, dtype=float)[t]                       # (3, T)
    a, b, c = p[:, t[0]], p[:, t[1]], p[:, t[2]]
    area = 0.5 * np.abs((b[0] - a[0]) * (c[1] - a[1]) - (c[0] - a[0]) * (b[1] - a[1]))
    if weight is not None:
        area = area * np.asarray(weight, dtype=float)
    negative = phi < 0
    count = negative.sum(axis=0)
    share = np.where(count == 3, 1.0, 0.0)
    # the lone vertex (negative if count == 1, positive if count == 2) and its corner share
    lone_is_negative = count == 1
    lone = np.where(lone_is_negative, np.argmax(negative, axis=0), np.argmin(negative, axis=0))
    mixed = (count == 1) | (count == 2)
    columns = np.arange(t.shape[1])
    phi_lone = phi[lone, columns]
    corner = np.ones(t.shape[1])
    for offset in (1, 2):
        other = phi[(lone + offset) % 3, columns]
        with np.errstate(divide="ignore", invalid="ignore"):
            corner *= np.where(mixed, phi_lone / (phi_lone - other), 0.0)
    share = np.where(mixed, np.where(lone_is_negative, corner, 1.0 - corner), share)
    total = area.sum()
    fraction = float((share * area).sum() / total)
    node_fraction = float((count / 3.0 * area).sum() / total)
    return UnyieldedFraction(fraction, node_fraction, abs(fraction - node_fraction))


def p2_sub_triangles(basis) -> tuple[np.ndarray, np.ndarray]:
    """Points and sub-triangles of a P2 triangle basis: each triangle split into four at
    its edge midpoints, vertices numbered as the basis's dofs (so P2 nodal values are the
    level values of the sub-triangles' vertices).

    scikit-fem numbers a P2 triangle's dofs as its three vertices, then the midpoints of
    the edges (0, 1), (1, 2), (0, 2) (``MeshTri.t2f``).
    """
    d = basis.element_dofs
    if d.shape[0] != 6:
        raise ValueError("p2_sub_triangles needs a P2 triangle basis (6 dofs per element)")
    v0, v1, v2, m01, m12, m02 = d
    sub = np.hstack([np.vstack([v0, m01, m02]), np.vstack([m01, v1, m12]),
                     np.vstack([m02, m12, v2]), np.vstack([m01, m12, m02])])
    return np.asarray(basis.doflocs), sub
