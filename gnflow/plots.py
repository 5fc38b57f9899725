"""PNG plots of a solved flow: 1-D profiles, 2-D section maps, wall stresses, convergence.

Files only, no physics: every number drawn comes from a :class:`gnflow.results.Results`
(its point fields and wall distributions, computed once for every writer and plot); a
bare results is wrapped in one. Conventions shared by the plots:

* axis labels are words with units, lengths in mm;
* inside an unyielded (plug) zone of a regularised yield-stress fluid the apparent
  viscosity is an artefact of the regularisation (it grows without bound as the
  regularisation sharpens), so it is drawn grey and dashed and the axis is clipped;
* colour scales of 2-D maps are set by the flow away from singular corners (re-entrant
  corners, a moving lid meeting a wall at rest), where the shear rate grows without bound
  and would wash out the rest of the map; the clipping is stated on the panel.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib import colors, ticker  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.tri import Triangulation  # noqa: E402

from .results import Results, as_results  # noqa: E402

if TYPE_CHECKING:  # the results type only, for annotations
    from .solver import Solution

PLUG_NOTE = ("grey dashed: in the plug the viscosity is\n"
             "an artefact of the regularisation (clipped)")
PLUG_NOTE_EXACT = "plug: rigid (no finite viscosity), not drawn"
#: the viscosity axis of a yield-stress profile ends this many times above the largest
#: viscosity in the yielded region: enough to show the rise toward the plug edge
PLUG_VISCOSITY_CLIP = 10.0
#: colour limits of a 2-D map ignore the nodes within this fraction of the section's
#: smaller side from a singular corner (the singular stress decays over about that)
CORNER_EXCLUSION = 0.05
#: without marked corners, colour limits stop at this percentile of the nodal values
ROBUST_PERCENTILE = 99.5
#: colour limits are clipped only when the peak exceeds them by more than this factor
CLIP_WORTHWHILE = 1.25
#: a section this many times wider than high gets its maps stacked one above the other
WIDE_SECTION = 1.6
DPI = 110


# --------------------------------------------------------------------------- helpers

def _nice(value: float) -> float:
    """``value`` rounded to two significant digits (tick positions)."""
    if value <= 0:
        return value
    return float(f"{value:.2g}")


def log_ticks(low: float, high: float) -> list[float] | None:
    """Tick positions for a logarithmic axis over ``[low, high]`` that cannot crowd.

    Over less than two decades matplotlib labels minor ticks too (the labels then run
    into each other); there, four values spaced evenly in the logarithm and rounded to
    two digits are used. Over wider ranges ``None``: decades, labelled by matplotlib.

    >>> log_ticks(0.23, 0.31)
    [0.23, 0.25, 0.28, 0.31]
    >>> log_ticks(1e-3, 10.0) is None
    True
    """
    if not (0 < low < high) or high / low >= 100:
        return None
    ticks = sorted({_nice(v) for v in np.geomspace(low, high, 4)})
    return [t for t in ticks if low * 0.98 <= t <= high * 1.02] or [_nice(np.sqrt(low * high))]


def _log_axis(ax, low: float, high: float, which: str = "x") -> None:
    """A logarithmic axis on ``[low, high]`` with labels that do not overlap."""
    axis = ax.xaxis if which == "x" else ax.yaxis
    (ax.set_xscale if which == "x" else ax.set_yscale)("log")
    (ax.set_xlim if which == "x" else ax.set_ylim)(low, high)
    ticks = log_ticks(low, high)
    if ticks is None:
        axis.set_major_locator(ticker.LogLocator(base=10, numticks=5))
        axis.set_major_formatter(ticker.LogFormatterSciNotation())
    else:
        axis.set_major_locator(ticker.FixedLocator(ticks))
        axis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:.3g}"))
    axis.set_minor_formatter(ticker.NullFormatter())


def _padded(low: float, high: float, factor: float = 1.15) -> tuple[float, float]:
    if high <= low:
        return low / factor, high * factor
    return low / factor ** 0.5, high * factor ** 0.5


def _title(results: Results) -> str:
    return f"{results.case.title} ({results.model.name} fluid, {results.domain.shape})"


def _save(fig, path: Path) -> None:
    fig.savefig(path, dpi=DPI)
    plt.close(fig)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """``(start, stop)`` index ranges where ``mask`` is true (``stop`` exclusive)."""
    edges = np.flatnonzero(np.diff(np.concatenate([[0], mask.astype(int), [0]])))
    return list(zip(edges[::2], edges[1::2]))


# --------------------------------------------------------------------------- 1-D

def _position_label(results: Results) -> str:
    if results.domain.coordinate == "y":
        return "position across the gap y [mm]"
    return "radius r [mm]"


def _speed_panel(results: Results, f: dict, order) -> tuple[np.ndarray, str]:
    if results.domain.kind == "rotational":
        return f["angular_speed"][order], "angular speed omega [rad/s]"
    return f["velocity"][order], "axial velocity w [m/s] (+: toward +z)"


def profile_plot(results: "Results | Solution", path: Path) -> None:
    """Velocity, shear rate, shear stress and apparent viscosity across the gap (1-D).

    The shear-stress panel draws the yield stress as a line; plug zones (stress below it)
    are shaded on every panel, and the viscosity inside them is greyed and clipped.
    """
    results = as_results(results)
    f = results.fields
    order = np.argsort(f["x"][0])
    x = f["x"][0][order] * 1e3
    speed, speed_label = _speed_panel(results, f, order)
    rate, viscosity, stress = (f[k][order] for k in ("shear_rate", "viscosity", "shear_stress"))
    model = results.model
    yield_stress = model.yield_stress if model.is_yield_stress else None
    plug = stress < yield_stress if yield_stress is not None else np.zeros(x.size, bool)
    newtonian = model.name == "newtonian"

    extra = [(key, label) for key, label in (("azimuthal_velocity", "azimuthal velocity [m/s]"),
                                             ("temperature", "temperature [degC]")) if key in f]
    panels = (3 if newtonian else 4) + len(extra)
    fig, axes = plt.subplots(1, panels, figsize=(3.0 * panels + 0.8, 4.3), sharey=True,
                             layout="constrained")
    for ax, (key, label) in zip(axes[panels - len(extra):], extra):
        shift = 273.15 if key == "temperature" else 0.0
        ax.plot(f[key][order] - shift, x, color="tab:purple" if shift else "tab:cyan")
        ax.set_xlabel(label)
    axes[0].plot(speed, x, color="tab:blue")
    axes[0].set_xlabel(speed_label)
    _slip_marks(axes[0], results)
    axes[1].plot(rate, x, color="tab:orange")
    axes[1].set_xlabel("shear rate [1/s]")
    axes[2].plot(stress, x, color="tab:red")
    axes[2].set_xlabel("shear stress [Pa]")
    axes[2].set_xlim(left=0.0)
    if yield_stress is not None:
        axes[2].axvline(yield_stress, color="k", ls="--", lw=0.9,
                        label=f"yield stress {yield_stress:.3g} Pa")
        axes[2].legend(fontsize=7, loc="best")
    if not newtonian:
        _viscosity_panel(axes[3], x, viscosity, plug, _is_exact(results))
    axes[0].set_ylabel(_position_label(results))
    for ax in axes:
        ax.grid(True, alpha=0.3)
        for start, stop in _runs(plug):
            ax.axhspan(x[start], x[stop - 1], color="0.88", zorder=0)
    # with slip, a margin keeps the slip jump at a wall clear of the frame
    margin = 0.03 * float(np.ptp(x)) if results.summary().get("slip") else 0.0
    axes[0].set_ylim(x.min() - margin, x.max() + margin)
    notes = []
    if plug.any():
        notes.append("shaded: unyielded (stress below the yield stress)")
    if results.domain.kind == "axial" and np.any(speed < 0) and not np.any(speed > 0):
        notes.append("the flow runs toward -z")
    if notes:
        fig.supxlabel("; ".join(notes), fontsize=7, color="0.3")
    fig.suptitle(_title(results), fontsize=10)
    _save(fig, path)


def _slip_marks(ax, results: Results) -> None:
    """At each slipping wall (a black line), the wall's own speed (a black tick) joined by
    a red bar to the fluid's speed there: the slip jump, named with its size."""
    slip = results.summary().get("slip") or {}
    rotational = results.domain.kind == "rotational"
    for name, wall in slip.items():
        if not isinstance(wall, dict) or "slip_speed" not in wall:
            continue
        w = results.domain.walls[name]
        jump = wall["slip_speed"] / w.position if rotational else wall["slip_speed"]
        y = w.position * 1e3
        unit = "rad/s" if rotational else "m/s"
        ax.plot([w.value, w.value + jump], [y, y], color="tab:red", lw=2.5,
                solid_capstyle="butt", label=f"slip at {name}: {abs(jump):.3g} {unit}")
        ax.plot([w.value], [y], marker="|", color="k", ms=12, mew=2)
        ax.axhline(y, color="k", lw=0.8)    # the wall
    if slip:
        ax.legend(fontsize=7, loc="best")


def _is_exact(results: Results) -> bool:
    """Whether the solution is the exact (unregularised) yield-stress one."""
    return (getattr(results.solution, "regularisation", None) or {}).get("method") == "none"


def _viscosity_panel(ax, x, viscosity, plug, exact: bool = False) -> None:
    """Log viscosity; the plug part grey, dashed and clipped (an artefact there), or,
    for the exact method, left out (a rigid plug has no finite viscosity)."""
    yielded = ~plug
    shown = viscosity[yielded] if yielded.any() else viscosity
    shown = shown[np.isfinite(shown) & (shown > 0)]
    ax.set_xlabel("apparent viscosity [Pa*s]")
    if plug.any() or not shown.size:
        ax.set_title(PLUG_NOTE_EXACT if exact else PLUG_NOTE, fontsize=7, color="0.35")
    if not shown.size:
        return
    low, high = float(shown.min()), float(shown.max())
    ax.plot(np.where(yielded, viscosity, np.nan), x, color="tab:green")
    if plug.any() and not exact:
        high = min(float(viscosity.max()), PLUG_VISCOSITY_CLIP * high)
        # join the dashed plug line to its yielded neighbours, so no gap opens at the edge
        grown = plug | np.roll(plug, 1) | np.roll(plug, -1)
        ax.plot(np.where(grown, np.minimum(viscosity, high), np.nan), x, color="0.55", ls="--")
    _log_axis(ax, *_padded(low, high), which="x")


# --------------------------------------------------------------------------- convergence

def convergence_plot(results: "Results | Solution", path: Path) -> None:
    """Relative residual against iteration, Newton and Picard steps marked, the
    tolerance drawn and named in the legend."""
    results = as_results(results)
    fig, ax = plt.subplots(figsize=(5.5, 3.8), layout="constrained")
    history = results.history
    if history:
        its = [h.iteration for h in history]
        res = [max(h.residual, 1e-18) for h in history]
        ax.semilogy(its, res, color="0.5", lw=0.8)
        for method, marker in (("newton", "o"), ("picard", "s")):
            pts = [(h.iteration, max(h.residual, 1e-18)) for h in history if h.method == method]
            if pts:
                ax.semilogy(*zip(*pts), marker, ms=4, label=f"{method} step")
    elif math.isfinite(results.solution.residual):
        # no iteration: the start state met the tolerance (a Newtonian flow, or a 1-D
        # flow whose start is its discrete solution); its residual is the one point
        start = max(results.solution.residual, 1e-18)
        ax.semilogy([0], [start], "D", ms=5, color="tab:green",
                    label="start state (no iteration needed)")
        ax.set_xlim(-1.0, 1.0)
        ax.set_ylim(start / 10.0, max(start, results.case.solver.tolerance) * 10.0)
        ax.set_xticks([0])
    ax.axhline(results.case.solver.tolerance, color="tab:red", ls="--", lw=0.8,
               label=f"tolerance {results.case.solver.tolerance:.0e}")
    if history:
        ax.xaxis.set_major_locator(ticker.MaxNLocator(integer=True))
    ax.set_xlabel("iteration")
    ax.set_ylabel("relative residual")
    ax.set_title("convergence history", fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    _save(fig, path)


# --------------------------------------------------------------------------- 2-D

def singular_points(results: Results) -> list[dict]:
    """The section's singular corners (dicts with ``x``, ``y``, ``walls``, ``kind``)."""
    return list(results.domain.extra.get("singular_points", []) or [])


def colour_limits(values: np.ndarray, points: np.ndarray, corners: list[dict],
                  radius: float) -> tuple[float, float, str]:
    """Colour limits of a map and a note saying how they were clipped ('' if not).

    With singular corners the limits come from the nodes farther than ``radius`` from
    every corner; without them, from the :data:`ROBUST_PERCENTILE` percentile. Either
    way the note names the largest value left out, so the reader knows.

    >>> v = np.array([1.0, 2.0, 3.0, 100.0])
    >>> p = np.array([[0.0, 1.0, 2.0, 3.0], [0.0, 0.0, 0.0, 0.0]])
    >>> colour_limits(v, p, [{"x": 3.0, "y": 0.0}], 0.5)
    (1.0, 3.0, 'clipped at 3 (up to 100 at the corners)')
    """
    keep = np.ones(values.size, bool)
    for corner in corners:
        keep &= np.hypot(points[0] - corner["x"], points[1] - corner["y"]) > radius
    if corners and keep.sum() >= 3:
        low, high = float(values[keep].min()), float(values[keep].max())
        how = "at the corners"
    else:
        low, high = float(values.min()), float(np.percentile(values, ROBUST_PERCENTILE))
        how = f"in the top {100 - ROBUST_PERCENTILE:g} % of nodes"
    peak = float(values.max())
    if peak > CLIP_WORTHWHILE * high:
        return low, high, f"clipped at {high:.3g} (up to {peak:.3g} {how})"
    return low, peak, ""


def _wall_segments(mesh, facets) -> np.ndarray:
    """The straight segments (facet end to facet end) of a wall, ``(n, 2, 2)`` in mm."""
    ends = mesh.p[:, mesh.facets[:, facets]] * 1e3        # (x or y, end, facet)
    return np.transpose(ends, (2, 1, 0))


def _draw_segments(ax, segments: np.ndarray, colour, width: float) -> None:
    """Wall segments as one collection: drawn as separate lines of a plain ``plot`` would
    be (same caps, joins and layer), at the cost of one artist instead of one per facet,
    which on a fine mesh is what made the maps slow to lay out and draw."""
    ax.add_collection(LineCollection(segments, colors=colour, linewidths=width,
                                     capstyle="projecting", joinstyle="round", zorder=2))


def _draw_walls(ax, results: Results) -> None:
    mesh = results.domain.basis.mesh
    walls = list(results.domain.extra["wall_facets"].values())
    if walls:   # all walls are drawn alike here: one collection for all of them
        _draw_segments(ax, np.concatenate([_wall_segments(mesh, f) for f in walls]), "k", 1.0)


def _map_panels(results: Results, f: dict, vertices: int) -> list[tuple]:
    """(label, values, logarithmic[, (u_x, u_y)]) of each map; no viscosity map for a
    Newtonian fluid. A fourth entry is an in-plane velocity whose streamlines are drawn
    over the map (helical flow in a 2-D section)."""
    panels = [("axial velocity w [m/s]", f["velocity"][:vertices], False),
              ("shear rate [1/s]", f["shear_rate"][:vertices], False),
              ("shear stress [Pa]", f["shear_stress"][:vertices], False)]
    if results.model.name != "newtonian":
        panels.append(("apparent viscosity [Pa*s]", f["viscosity"][:vertices], True))
    if "in_plane_velocity" in f:     # helical flow: the motion in the section, with its
        ux, uy = f["in_plane_velocity"][:, :vertices]                # streamlines drawn over
        panels.insert(1, ("in-plane speed [m/s]", np.hypot(ux, uy), False, (ux, uy)))
    elif "azimuthal_velocity" in f:  # helical flow: the swirl beside the axial speed
        panels.insert(1, ("azimuthal velocity [m/s]", f["azimuthal_velocity"][:vertices], False))
    if "temperature" in f:           # viscous heating
        panels.append(("temperature [degC]", f["temperature"][:vertices] - 273.15, False))
    return panels


#: points per side of the grid on which in-plane streamlines are traced
STREAMLINE_GRID = 160


def _streamlines(ax, triangulation: Triangulation, ux: np.ndarray, uy: np.ndarray) -> None:
    """In-plane streamlines over a map: the nodal velocity interpolated linearly onto a
    regular grid (masked outside the section) and traced by matplotlib."""
    from matplotlib.tri import LinearTriInterpolator

    x = np.linspace(triangulation.x.min(), triangulation.x.max(), STREAMLINE_GRID)
    y = np.linspace(triangulation.y.min(), triangulation.y.max(), STREAMLINE_GRID)
    gx, gy = np.meshgrid(x, y)
    u = LinearTriInterpolator(triangulation, ux)(gx, gy)
    v = LinearTriInterpolator(triangulation, uy)(gx, gy)
    if np.ma.count(u) < 4 or not np.ma.max(np.hypot(u, v)) > 0:
        return
    ax.streamplot(x, y, u, v, color="w", linewidth=0.6, density=1.4, arrowsize=0.8)


def section_maps(results: "Results | Solution", path: Path) -> None:
    """Filled contour maps over a 2-D section: velocity, shear rate, shear stress and
    (non-Newtonian fluids) apparent viscosity, and in helical flow the in-plane speed with
    its streamlines beside the axial speed; walls in black, singular corners marked, the
    yield surface (yield-stress fluids) dashed white. Wide sections are stacked."""
    results = as_results(results)
    mesh = results.domain.basis.mesh
    f = results.fields
    vertices = mesh.nvertices
    points = mesh.p[:, :vertices]  # a quadratic mesh lists its edge nodes after these
    triangulation = Triangulation(points[0] * 1e3, points[1] * 1e3, mesh.t[:3].T)
    panels = _map_panels(results, f, vertices)
    corners = singular_points(results)
    width, height = float(np.ptp(points[0])), float(np.ptp(points[1]))
    radius = CORNER_EXCLUSION * min(width, height)
    stacked = width > WIDE_SECTION * height
    if stacked:
        panel_height = max(1.2, 7.5 * height / width)
        fig, axes = plt.subplots(len(panels), 1, figsize=(8.0, len(panels) * (panel_height + 0.75)
                                                           + 0.5), layout="constrained")
    else:
        side = 3.6 * min(height / width, 1.3) if width else 3.6
        columns = 2 if len(panels) == 4 else 3
        rows = -(-len(panels) // columns)
        fig, axes = plt.subplots(rows, columns, figsize=(4.3 * columns, rows * (side + 0.9) + 0.4),
                                 layout="constrained")
    axes = np.atleast_1d(axes).ravel()
    stress = f["shear_stress"][:vertices]
    plug = (stress < results.model.yield_stress if results.model.is_yield_stress
            else np.zeros(vertices, bool))
    for index, (ax, (label, values, logarithmic, *arrows)) in enumerate(zip(axes, panels)):
        if index == 0 or logarithmic:
            # the velocity is bounded, and a log scale holds the viscosity's range; in a
            # plug the viscosity is the regularisation's artefact and sets no limit
            note = ""
            shown = values[~plug] if logarithmic and (~plug).sum() >= 3 else values
            low, high = float(shown.min()), float(shown.max())
        else:
            low, high, note = colour_limits(values, points, corners, radius)
        scale = {}
        if logarithmic and high > low > 0:
            levels = np.geomspace(low, high, 21)
            scale = {"norm": colors.LogNorm(low, high)}
        else:
            levels = ticker.MaxNLocator(nbins=20).tick_values(low, high) if high > low else 20
        filled = ax.tricontourf(triangulation, np.clip(values, low, high), levels=levels,
                                cmap="viridis", extend="max" if note else "neither", **scale)
        bar = fig.colorbar(filled, ax=ax, label=label, shrink=0.9, pad=0.01)
        if scale:
            ticks = log_ticks(low, high)
            bar.ax.yaxis.set_major_locator(ticker.FixedLocator(ticks) if ticks else
                                           ticker.LogLocator(numticks=6))
            bar.ax.yaxis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:.3g}"))
            bar.ax.yaxis.set_minor_formatter(ticker.NullFormatter())
        if logarithmic and plug.any():
            ax.tricontourf(triangulation, stress, levels=[0.0, results.model.yield_stress],
                           colors="0.8")
            exact = _is_exact(results)
            ax.set_title("grey: plug (rigid: no finite viscosity)" if exact else
                         "grey: plug (its viscosity is an artefact\nof the regularisation)",
                         fontsize=7, color="0.3")
        if results.model.is_yield_stress and np.ptp(stress) > 0:
            ax.tricontour(triangulation, stress, levels=[results.model.yield_stress],
                          colors="w", linestyles="--", linewidths=0.9)
        if arrows:
            _streamlines(ax, triangulation, *arrows[0])
            ax.set_title("white: in-plane streamlines", fontsize=7, color="0.3")
        _draw_walls(ax, results)
        for corner in corners:
            ax.plot(corner["x"] * 1e3, corner["y"] * 1e3, "x", color="tab:red", ms=6, mew=1.5)
        if note:
            ax.set_title(note, fontsize=7, color="0.3")
        ax.set_aspect("equal")
        if not stacked or index == len(panels) - 1:
            ax.set_xlabel("x [mm]")
        ax.set_ylabel("y [mm]")
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    notes = []
    if results.model.is_yield_stress:
        notes.append("white dashed: yield surface (stress = yield stress)")
    if corners:
        notes.append("red x: singular corner (the shear rate grows without bound there)")
    if any(len(panel) > 3 for panel in panels):
        notes.append("in-plane speed: white streamlines of the flow in the section, arrows "
                     "its direction (axial speed w normal to the page)")
    if notes:
        fig.supxlabel("; ".join(notes), fontsize=7, color="0.3")
    fig.suptitle(_title(results), fontsize=10)
    _save(fig, path)


def direction_text(x: np.ndarray, y: np.ndarray) -> str:
    """Where a wall's coordinate starts and which way it runs, in words (mm).

    A closed wall (its ends meet) is said to run clockwise or counter-clockwise, by the
    sign of its enclosed area; an open one by its first heading.

    >>> t = np.linspace(0.0, 2 * np.pi, 50)
    >>> direction_text(1e-3 * np.cos(t), 1e-3 * np.sin(t))
    's = 0 at (1, 0) mm, counter-clockwise'
    >>> direction_text(np.array([0.0, 0.0]), np.array([0.0, -0.002]))
    's = 0 at (0, 0) mm, toward -y'
    """
    size = max(np.ptp(x), np.ptp(y))
    x0, y0 = (0.0 if abs(v) < 1e-2 * size else v for v in (x[0], y[0]))
    start = f"s = 0 at ({x0 * 1e3:.3g}, {y0 * 1e3:.3g}) mm"
    closed = x.size > 3 and np.hypot(x[-1] - x[0], y[-1] - y[0]) < 0.05 * size
    if closed:
        area = 0.5 * np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y)
        return f"{start}, {'counter-clockwise' if area > 0 else 'clockwise'}"
    k = max(1, x.size // 20)
    dx, dy = x[k] - x[0], y[k] - y[0]
    heading = ("+x" if dx > 0 else "-x") if abs(dx) >= abs(dy) else ("+y" if dy > 0 else "-y")
    return f"{start}, toward {heading}"


def _wall_start(d: dict) -> tuple[np.ndarray, np.ndarray]:
    """The wall's points with its start (s = 0, a facet end) put first: the samples are
    quadrature points, the first of them a little way along the first facet."""
    s, x, y = d["s"], d["x"], d["y"]
    if s.size < 2 or s[1] == s[0]:
        return x, y
    back = s[0] / (s[1] - s[0])
    return (np.concatenate([[x[0] - back * (x[1] - x[0])], x]),
            np.concatenate([[y[0] - back * (y[1] - y[0])], y]))


def _corner_positions(d: dict, corners: list[dict], tolerance: float) -> list[float]:
    """Arc-length positions on a wall of the corners that lie on it."""
    out = []
    for corner in corners:
        distance = np.hypot(d["x"] - corner["x"], d["y"] - corner["y"])
        nearest = int(np.argmin(distance))
        if distance[nearest] <= tolerance:
            out.append(float(d["s"][nearest]))
    return out


def wall_stress_plot(results: "Results | Solution", path: Path) -> None:
    """Wall shear stress along each wall against arc length, beside a key of the section
    showing where each wall's coordinate starts (circle) and which way it runs (arrow).

    The stress is the one the fluid exerts on the wall, positive along +z; the yield
    stress is drawn where it is reached, singular corners are marked, and points the
    wall distribution flags as near a singular corner are drawn faint.
    """
    results = as_results(results)
    distributions = results.wall_distributions
    corners = singular_points(results)
    mesh = results.domain.basis.mesh
    size = float(max(np.ptp(mesh.p[0]), np.ptp(mesh.p[1])))
    width, height = float(np.ptp(mesh.p[0])), float(np.ptp(mesh.p[1]))
    if width > 2.5 * height:  # a wide section: its key goes below, at full width
        fig, (ax, key) = plt.subplots(2, 1, figsize=(8.5, 4.6 + 6.0 * height / width),
                                      layout="constrained", gridspec_kw={
                                          "height_ratios": [3.2, 0.4 + 6.0 * height / width]})
    else:
        fig, (ax, key) = plt.subplots(1, 2, figsize=(10.5, 4.2), layout="constrained",
                                      gridspec_kw={"width_ratios": [2.3, 1]})
    lines = []
    for name, d in distributions.items():
        s, stress = d["s"] * 1e3, d["shear_stress"]
        faint = np.asarray(d.get("near_singular_corner", np.zeros(s.size, bool)), bool)
        line, = ax.plot(s, np.where(faint, np.nan, stress), lw=1.1,
                        label=f"{name}: {direction_text(*_wall_start(d))}")
        if faint.any():
            ax.plot(s, np.where(faint, stress, np.nan), lw=1.1, color=line.get_color(),
                    alpha=0.35)
        for position in _corner_positions(d, corners, 0.02 * size):
            ax.axvline(position * 1e3, color=line.get_color(), ls=":", lw=0.9)
        lines.append((name, d, line.get_color()))
    if results.model.is_yield_stress:
        tau_y = results.model.yield_stress
        stresses = np.concatenate([d["shear_stress"] for d in distributions.values()])
        for sign in (1.0, -1.0):
            if np.any(sign * stresses > 0):
                ax.axhline(sign * tau_y, color="k", ls="--", lw=0.8,
                           label="yield stress" if sign > 0 or not np.any(stresses > 0)
                           else None)
    ax.set_xlabel("distance along the wall s [mm] (start and direction: legend and key)")
    ax.set_ylabel("wall shear stress [Pa] (on the wall, +: along +z)")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    faint_any = any(np.any(d.get("near_singular_corner", False))
                    for d in distributions.values())
    ax.set_title("wall shear stress along each wall"
                 + ("; dotted: singular corner" if corners else "")
                 + ("; faint: near a singular corner, where the stress is not resolved"
                    if faint_any else ""), fontsize=9)
    _wall_key(key, results, lines, corners)
    fig.suptitle(_title(results), fontsize=10)
    _save(fig, path)


def _wall_key(ax, results: Results, lines, corners) -> None:
    """The section outline with each wall in its colour, its start and direction."""
    mesh = results.domain.basis.mesh
    for name, d, colour in lines:
        _draw_segments(ax, _wall_segments(mesh, results.domain.extra["wall_facets"][name]),
                       colour, 2.0)
        x, y = d["x"] * 1e3, d["y"] * 1e3
        ax.plot(x[0], y[0], "o", color=colour, ms=6, mfc="white", mew=1.5)
        k = max(1, x.size // 12)
        ax.annotate("", xy=(x[k], y[k]), xytext=(x[0], y[0]),
                    arrowprops={"arrowstyle": "->", "color": colour, "lw": 1.5})
    for corner in corners:
        ax.plot(corner["x"] * 1e3, corner["y"] * 1e3, "x", color="tab:red", ms=7, mew=1.5)
    ax.set_aspect("equal")
    ax.set_xlabel("x [mm]")
    ax.set_ylabel("y [mm]")
    ax.set_title("key: o where s starts, arrow the way it runs", fontsize=8)
