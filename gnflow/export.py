"""Files: summary.json, profile.csv, fields.vtu/.xdmf and plots, written atomically.

Everything goes into a fresh temporary folder beside the target, which then replaces the
target in one rename, so an interrupted run leaves the previous results or the new ones,
never a mix. File names are fixed here; none comes from case text.
"""

from __future__ import annotations

import csv
import json
import math
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

import meshio
import numpy as np

from .post import fields, wall_distributions
from .solver import Solution


def clean_for_json(value):
    """Plain Python types for JSON; a non-finite number becomes ``None`` (never NaN)."""
    if isinstance(value, dict):
        return {str(k): clean_for_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_for_json(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        value = float(value)
        return value if math.isfinite(value) else None
    return value


@contextmanager
def atomic_directory(target: Path):
    """Yield a temporary folder; on success it replaces ``target`` in one rename."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.partial-", dir=target.parent))
    try:
        yield staging
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    previous = None
    if target.exists():
        previous = Path(tempfile.mkdtemp(prefix=f".{target.name}.old-", dir=target.parent))
        previous.rmdir()
        os.replace(target, previous)
    os.replace(staging, target)
    if previous is not None:
        shutil.rmtree(previous, ignore_errors=True)


def write_json(path: Path, data: dict) -> None:
    path.write_text(json.dumps(clean_for_json(data), indent=2) + "\n", encoding="utf-8")


def profile_columns(solution: Solution) -> tuple[list[str], np.ndarray]:
    """Header and rows of a 1-D profile, sorted across the gap, units in the names."""
    f = fields(solution)
    x = f["x"][0]
    order = np.argsort(x)
    coordinate = "y [m]" if solution.domain.coordinate == "y" else "r [m]"
    if solution.domain.kind == "axial":
        names = [coordinate, "velocity [m/s]"]
        columns = [x, f["velocity"]]
    else:
        names = [coordinate, "angular_speed [rad/s]", "velocity [m/s]"]
        columns = [x, f["angular_speed"], f["velocity"]]
    names += ["shear_rate [1/s]", "viscosity [Pa*s]", "shear_stress [Pa]"]
    columns += [f["shear_rate"], f["viscosity"], f["shear_stress"]]
    return names, np.column_stack(columns)[order]


def write_profile_csv(path: Path, solution: Solution) -> None:
    names, rows = profile_columns(solution)
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(names)
        writer.writerows([[f"{v:.10g}" for v in row] for row in rows])


def write_wall_csv(path: Path, solution: Solution) -> None:
    """Wall shear stress and rate along every wall of a 2-D section."""
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(["wall", "s [m]", "x [m]", "y [m]", "shear_stress [Pa]",
                         "shear_rate [1/s]"])
        for name, d in wall_distributions(solution).items():
            for row in zip(d["s"], d["x"], d["y"], d["shear_stress"], d["shear_rate"]):
                writer.writerow([name] + [f"{v:.10g}" for v in row])


def field_mesh(solution: Solution) -> meshio.Mesh:
    """The solution as a meshio mesh with point data for open viewers."""
    basis = solution.domain.basis
    f = fields(solution)
    x = basis.doflocs
    points = np.zeros((x.shape[1], 3))
    points[:, : x.shape[0]] = x.T
    cells_by_degree = {(1, 1): "line", (1, 2): "line3", (2, 1): "triangle", (2, 2): "triangle6"}
    cell_type = cells_by_degree[(x.shape[0], solution.domain.degree)]
    element_dofs = basis.element_dofs.T
    data = {name: f[name] for name in ("velocity", "shear_rate", "viscosity", "shear_stress",
                                       "angular_speed", "unyielded") if name in f}
    return meshio.Mesh(points, [(cell_type, element_dofs)], point_data=data)


def write_outputs(solution: Solution, summary: dict, out_dir: Path) -> list[str]:
    """Write every output of a run into ``out_dir`` (replacing it); returns the names."""
    from . import plots  # matplotlib is imported only when files are written

    case = solution.case
    with atomic_directory(out_dir) as staging:
        write_json(staging / "summary.json", summary)
        if solution.domain.dimension == 1:
            write_profile_csv(staging / "profile.csv", solution)
        else:
            write_wall_csv(staging / "wall_stress.csv", solution)
        if case.output.fields:
            mesh = field_mesh(solution)
            meshio.write(staging / "fields.vtu", mesh)
            # inline XML data keeps XDMF readable without HDF5 libraries
            meshio.write(staging / "fields.xdmf", mesh, data_format="XML")
        if case.output.plots:
            if solution.domain.dimension == 1:
                plots.profile_plot(solution, staging / "profile.png")
            else:
                plots.section_maps(solution, staging / "fields.png")
                plots.wall_stress_plot(solution, staging / "wall_stress.png")
            plots.convergence_plot(solution, staging / "convergence.png")
        written = sorted(p.name for p in staging.iterdir())
    return written
