"""Files: summary.json, profile.csv, wall_stress.csv, fields.vtu/.xdmf and plots.

Writers only read a :class:`~gnflow.results.Results`; no physics here. Everything goes
into a fresh temporary folder beside the target, which then replaces the target in one
rename, so an interrupted run leaves the previous results or the new ones, never a mix.
The folder and its files get the permissions the user's umask gives new ones. File names
are fixed here; none comes from case text.
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

import numpy as np

from .results import Results, as_results, profile_columns


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


def _umask() -> int:
    """The process umask (read by setting and restoring it; there is no getter)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


@contextmanager
def atomic_directory(target: Path):
    """Yield a temporary folder; on success it replaces ``target`` in one rename.

    ``tempfile.mkdtemp`` makes the folder 0700 whatever the umask; it is opened up to
    the mode a plain ``mkdir`` would give before the rename, so colleagues on a shared
    machine read the results as they read any other new folder.
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.partial-", dir=target.parent))
    try:
        yield staging
        staging.chmod(0o777 & ~_umask())
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


def write_profile_csv(path: Path, results: Results) -> None:
    names, rows = profile_columns(results)
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(names)
        writer.writerows([[f"{v:.10g}" for v in row] for row in rows])


def write_wall_csv(path: Path, results: Results) -> None:
    """Wall shear stress and rate along every wall of a 2-D section.

    ``shear_stress [Pa]`` is signed: the stress the fluid exerts on the wall along +z.
    ``near_singular_corner`` is 1 within the excluded neighbourhood of a singular corner
    (see :func:`gnflow.post.singular_exclusion_radius`), else 0. With wall slip a last
    column ``slip_speed [m/s]`` gives the fluid's speed relative to the wall along +z
    (0 on walls without a slip law).
    """
    slipping = bool(getattr(results.case.drive, "slip", None))
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(["wall", "s [m]", "x [m]", "y [m]", "shear_stress [Pa]",
                         "shear_rate [1/s]", "near_singular_corner"]
                        + (["slip_speed [m/s]"] if slipping else []))
        for name, d in results.wall_distributions.items():
            for *row, near, slip in zip(d["s"], d["x"], d["y"], d["shear_stress"],
                                        d["shear_rate"], d["near_singular_corner"],
                                        d["slip_speed"]):
                writer.writerow([name] + [f"{v:.10g}" for v in row] + [int(near)]
                                + ([f"{slip:.10g}"] if slipping else []))


def field_mesh(results: Results):
    """The solution as a meshio mesh with point data for open viewers (1-D sections lie
    along x).

    ``velocity`` is the axial speed, except in helical flow, where it is the 3-component
    velocity ``(u_x, u_y, w)`` of the motion (2-D: the in-plane velocity and the axial
    speed; 1-D, along the x axis at y = 0: ``(0, v_theta, w)``, the azimuthal direction
    there being +y), with ``axial_velocity``, ``angular_speed`` and ``azimuthal_velocity``
    beside it. Heated flow adds ``temperature`` (K).
    """
    import meshio

    basis = results.domain.basis
    f = results.fields
    x = basis.doflocs
    points = np.zeros((x.shape[1], 3))
    points[:, : x.shape[0]] = x.T
    cells_by_degree = {(1, 1): "line", (1, 2): "line3", (2, 1): "triangle", (2, 2): "triangle6"}
    cell_type = cells_by_degree[(x.shape[0], results.domain.degree)]
    element_dofs = basis.element_dofs.T
    data = {name: f[name] for name in ("velocity", "shear_rate", "viscosity", "shear_stress",
                                       "angular_speed", "unyielded", "azimuthal_velocity",
                                       "temperature") if name in f}
    if "azimuthal_velocity" in f:
        data["axial_velocity"] = f["velocity"]
        vector = np.zeros((x.shape[1], 3))
        if "in_plane_velocity" in f:
            vector[:, :2] = f["in_plane_velocity"].T
        else:
            vector[:, 1] = f["azimuthal_velocity"]
        vector[:, 2] = f["velocity"]
        data["velocity"] = vector
    return meshio.Mesh(points, [(cell_type, element_dofs)], point_data=data)


#: rows of an array formatted in one go when an XDMF file is written (bounds the memory
#: of the intermediate tuple and string on very large meshes)
XML_ROWS_PER_CHUNK = 65536


def xml_text(data: np.ndarray, fmt: str) -> str:
    """``data`` as the text ``numpy.savetxt(..., fmt)`` writes, byte for byte (one row a
    line, columns separated by one space; a 1-D array is one column), formatted with one
    ``%`` operation per chunk of rows instead of one per row.

    >>> xml_text(np.array([[1.5, -2.0], [0.25, 3.0]]), "%.3e")
    '1.500e+00 -2.000e+00\\n2.500e-01 3.000e+00\\n'
    >>> xml_text(np.array([3, 4]), "%d")
    '3\\n4\\n'
    """
    rows = data if data.ndim == 2 else data[:, None]
    line = " ".join([fmt] * rows.shape[1]) + "\n"
    parts = []
    for start in range(0, rows.shape[0], XML_ROWS_PER_CHUNK):
        chunk = rows[start:start + XML_ROWS_PER_CHUNK]
        parts.append((line * chunk.shape[0]) % tuple(chunk.ravel().tolist()))
    return "".join(parts)


def write_xdmf(path: Path, mesh) -> None:
    """``mesh`` as an XDMF file with its data inline as XML text (readable without HDF5
    libraries): the file meshio writes with ``data_format="XML"``, the same bytes, but the
    arrays are turned into text by :func:`xml_text` (meshio formats one row at a time,
    which took seconds on a section of 100k unknowns)."""
    from meshio.xdmf.common import dtype_to_format_string
    from meshio.xdmf.main import XdmfWriter

    class _InlineWriter(XdmfWriter):
        def numpy_to_xml_string(self, data):
            if self.data_format != "XML" or data.ndim not in (1, 2):
                return super().numpy_to_xml_string(data)
            return "\n" + xml_text(data, dtype_to_format_string[data.dtype.name])

    _InlineWriter(path, mesh, data_format="XML")


def write_outputs(solved, summary: dict, out_dir: Path) -> list[str]:
    """Write every output of a run into ``out_dir`` (replacing it); returns the names.

    ``solved`` is a :class:`~gnflow.results.Results` (a bare solution is wrapped in one);
    ``summary`` is the dict written to ``summary.json``, normally ``results.summary()``.
    """
    import meshio

    from . import plots  # matplotlib is imported only when files are written

    results = as_results(solved)
    case = results.case
    with atomic_directory(out_dir) as staging:
        write_json(staging / "summary.json", summary)
        if results.domain.dimension == 1:
            write_profile_csv(staging / "profile.csv", results)
        else:
            write_wall_csv(staging / "wall_stress.csv", results)
        if case.output.fields:
            mesh = field_mesh(results)
            meshio.write(staging / "fields.vtu", mesh)
            write_xdmf(staging / "fields.xdmf", mesh)
        if case.output.plots:
            if results.domain.dimension == 1:
                plots.profile_plot(results, staging / "profile.png")
            else:
                plots.section_maps(results, staging / "fields.png")
                plots.wall_stress_plot(results, staging / "wall_stress.png")
            plots.convergence_plot(results, staging / "convergence.png")
        written = sorted(p.name for p in staging.iterdir())
    return written
