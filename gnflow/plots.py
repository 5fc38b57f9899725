"""PNG plots: profiles across the gap and the convergence history. Files only, no physics."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from matplotlib.tri import Triangulation  # noqa: E402

from .export import profile_columns  # noqa: E402
from .post import fields, wall_distributions  # noqa: E402
from .solver import Solution  # noqa: E402


def _shade_plugs(axes, x, stress, yield_stress):
    below = stress < yield_stress
    if not below.any():
        return
    edges = np.flatnonzero(np.diff(below.astype(int)))
    bounds = np.concatenate([[0], edges + 1, [len(x)]])
    for start, stop in zip(bounds[:-1], bounds[1:]):
        if below[start]:
            for ax in axes:
                ax.axhspan(x[start], x[stop - 1], color="0.85", zorder=0)
    axes[0].text(0.02, 0.02, "shaded: unyielded (stress below yield stress)",
                 transform=axes[0].transAxes, fontsize=7, color="0.3")


def profile_plot(solution: Solution, path: Path) -> None:
    """Velocity, shear rate and apparent viscosity across the gap (1-D sections)."""
    names, rows = profile_columns(solution)
    x = rows[:, 0] * 1e3
    speed_column = 1
    fig, axes = plt.subplots(1, 3, figsize=(11, 4.2), sharey=True)
    label = names[0].replace(" [m]", " [mm]")
    axes[0].plot(rows[:, speed_column], x, color="tab:blue")
    axes[0].set_xlabel(names[speed_column])
    axes[1].plot(rows[:, -3], x, color="tab:orange")
    axes[1].set_xlabel(names[-3])
    axes[2].semilogx(rows[:, -2], x, color="tab:green")
    axes[2].set_xlabel(names[-2])
    axes[0].set_ylabel(label)
    for ax in axes:
        ax.grid(True, alpha=0.3)
    if solution.model.is_yield_stress:
        _shade_plugs(axes, x, rows[:, -1], solution.model.yield_stress)
    _save(fig, path, solution)


def _save(fig, path: Path, solution: Solution) -> None:
    """Title a figure with the case and save it."""
    fig.suptitle(f"{solution.case.title} ({solution.model.name} fluid, {solution.domain.shape})",
                 fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def convergence_plot(solution: Solution, path: Path) -> None:
    """Relative residual against iteration, Newton and Picard steps marked."""
    fig, ax = plt.subplots(figsize=(5.5, 3.8))
    history = solution.history
    if history:
        its = [h.iteration for h in history]
        res = [max(h.residual, 1e-18) for h in history]
        ax.semilogy(its, res, color="0.5", lw=0.8)
        for method, marker in (("newton", "o"), ("picard", "s")):
            pts = [(h.iteration, max(h.residual, 1e-18)) for h in history if h.method == method]
            if pts:
                ax.semilogy(*zip(*pts), marker, ms=4, label=method)
        ax.legend(fontsize=8)
    ax.axhline(solution.case.solver.tolerance, color="tab:red", ls="--", lw=0.8,
               label="tolerance")
    ax.set_xlabel("iteration")
    ax.set_ylabel("relative residual")
    ax.set_title("convergence history", fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _draw_walls(ax, solution: Solution) -> None:
    mesh = solution.domain.basis.mesh
    for name, facets in solution.domain.extra["wall_facets"].items():
        ends = mesh.p[:, mesh.facets[:, facets]] * 1e3
        ax.plot(ends[0], ends[1], color="k", lw=1.2)


def section_maps(solution: Solution, path: Path) -> None:
    """Filled contour maps of velocity, shear rate and apparent viscosity over a 2-D
    section, the walls drawn in black and (yield-stress fluids) the yield surface dashed."""
    mesh = solution.domain.basis.mesh
    f = fields(solution)
    vertices = mesh.nvertices
    corners = mesh.p[:, :vertices]  # a quadratic mesh lists its edge nodes after these
    triangulation = Triangulation(corners[0] * 1e3, corners[1] * 1e3, mesh.t.T)
    panels = [("velocity [m/s]", f["velocity"][:vertices], False),
              ("shear rate [1/s]", f["shear_rate"][:vertices], False),
              ("apparent viscosity [Pa*s]", f["viscosity"][:vertices], True)]
    width = np.ptp(mesh.p[0])
    height = np.ptp(mesh.p[1])
    aspect = height / width if width else 1.0
    fig, axes = plt.subplots(1, 3, figsize=(13, max(2.6, 4.2 * min(aspect, 1.5)) + 0.6))
    for ax, (label, values, logarithmic) in zip(axes, panels):
        if logarithmic:
            values = np.log10(np.maximum(values, 1e-300))
            label = "log10 " + label
        filled = ax.tricontourf(triangulation, values, levels=24, cmap="viridis")
        fig.colorbar(filled, ax=ax, shrink=0.8, label=label)
        if solution.model.is_yield_stress and np.ptp(f["shear_stress"][:vertices]) > 0:
            ax.tricontour(triangulation, f["shear_stress"][:vertices],
                          levels=[solution.model.yield_stress], colors="w", linestyles="--",
                          linewidths=0.9)
        _draw_walls(ax, solution)
        ax.set_aspect("equal")
        ax.set_xlabel("x [mm]")
        ax.set_ylabel("y [mm]")
    if solution.model.is_yield_stress:
        axes[0].set_title("dashed: yield surface (stress = yield stress)", fontsize=8)
    _save(fig, path, solution)


def wall_stress_plot(solution: Solution, path: Path) -> None:
    """Wall shear stress along each wall of a 2-D section, against arc length."""
    fig, ax = plt.subplots(figsize=(7, 3.8))
    for name, d in wall_distributions(solution).items():
        ax.plot(d["s"] * 1e3, d["shear_stress"], label=name, lw=1.0)
    ax.set_xlabel("position along the wall [mm]")
    ax.set_ylabel("wall shear stress [Pa]")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    ax.set_title("wall shear stress along the perimeter", fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
