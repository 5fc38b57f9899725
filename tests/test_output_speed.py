"""The fast output paths give what the plain library calls give.

* :func:`gnflow.export.xml_text` formats arrays with one ``%`` operation per chunk of rows;
  it must give the bytes ``numpy.savetxt`` gives (which is what meshio's XDMF writer uses
  row by row), for floats and integers, one and two columns, and across chunk borders.
* :func:`gnflow.export.write_xdmf` must write the file ``meshio.write(..., data_format="XML")``
  writes, byte for byte, for a solved 2-D section.
* The wall outlines in the maps are drawn as one line collection: the segments must be the
  facets of each wall, end to end, as the per-facet lines were.
"""

import filecmp
import io

import meshio
import numpy as np
import pytest

import gnflow
from gnflow import export, plots


def _savetxt(data, fmt):
    buffer = io.StringIO()
    np.savetxt(buffer, data, fmt=fmt)
    return buffer.getvalue()


@pytest.mark.parametrize("shape, dtype, fmt", [
    ((7, 3), np.float64, "%.16e"), ((5,), np.float64, "%.16e"), ((9, 6), np.int64, "%d"),
    ((4, 2), np.float32, "%.7e"), ((1, 1), np.int32, "%d")])
def test_xml_text_is_what_savetxt_writes(shape, dtype, fmt):
    rng = np.random.default_rng(3)
    data = (rng.standard_normal(shape) * 1e3).astype(dtype)
    assert export.xml_text(data, fmt) == _savetxt(data, fmt)


def test_xml_text_across_chunk_borders(monkeypatch):
    monkeypatch.setattr(export, "XML_ROWS_PER_CHUNK", 4)
    data = np.arange(30.0).reshape(10, 3) / 7.0      # 3 chunks, the last one short
    assert export.xml_text(data, "%.16e") == _savetxt(data, "%.16e")
    assert export.xml_text(np.arange(9), "%d") == _savetxt(np.arange(9), "%d")


@pytest.fixture(scope="module")
def duct():
    case = gnflow.Case.from_dict({
        "fluid": {"model": "power-law", "consistency": 3.0, "flow_index": 0.5},
        "geometry": {"shape": "rectangle", "width": 0.04, "height": 0.02},
        "drive": {"pressure_gradient": -2.0e4}, "mesh": {"cells": 12}})
    return gnflow.solve(case)


def test_xdmf_file_is_the_one_meshio_writes(duct, tmp_path):
    mesh = export.field_mesh(duct)
    meshio.write(tmp_path / "meshio.xdmf", mesh, data_format="XML")
    export.write_xdmf(tmp_path / "gnflow.xdmf", mesh)
    assert filecmp.cmp(tmp_path / "meshio.xdmf", tmp_path / "gnflow.xdmf", shallow=False)
    back = meshio.read(tmp_path / "gnflow.xdmf")
    np.testing.assert_array_equal(back.points, mesh.points)
    for name, values in mesh.point_data.items():
        np.testing.assert_array_equal(back.point_data[name], values)


def test_wall_segments_are_the_wall_facets(duct):
    mesh = duct.domain.basis.mesh
    for facets in duct.domain.extra["wall_facets"].values():
        segments = plots._wall_segments(mesh, facets)
        assert segments.shape == (len(facets), 2, 2)
        for k, facet in enumerate(facets):
            ends = mesh.p[:, mesh.facets[:, facet]].T * 1e3     # (end, x or y) in mm
            np.testing.assert_array_equal(segments[k], ends)
