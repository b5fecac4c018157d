"""3D fields for viewers: the hottest instant as VTU, the recorded instants as a VTU series.

Input: the result's :class:`~boardheat.checks.FieldSeries` (prism mesh, m; temperatures, K)
or, when the run kept no 3D field at the hottest instant, its
:class:`~boardheat.checks.HotField` (surface temperatures at that instant). Output:

* ``field.vtu`` — the hottest instant, wedge cells, point data ``temperature_c`` (°C). From
  a hot field alone the board is one prism layer between its top (z = 0) and bottom
  (z = -thickness) surfaces: the nodal values are the computed surface temperatures, the
  interior is the viewer's linear interpolation between them.
* ``field.pvd`` + ``field_series/field_NNNN.vtu`` — every recorded instant, when there are
  several. A PVD collection (the VTK XML file that lists one VTU per time step) is written
  rather than XDMF + HDF5: h5py is not among our dependencies, and meshio's XDMF time-series
  writer puts its ``.h5`` file in the current working directory, which a library must not do.

Wedges follow the VTK order: the upper triangle counter-clockwise seen from +z, then the
same triangle one node lower.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import meshio
import numpy as np
import numpy.typing as npt

from boardheat.board import Board
from boardheat.checks import CheckResult, FieldSeries
from boardheat.report.files import ReportError, atomic_path, ensure_dir, write_text
from boardheat.report.summary import array_to_celsius

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

FIELD_VTU = "field.vtu"
SERIES_PVD = "field.pvd"
SERIES_DIR = "field_series"
POINT_DATA = "temperature_c"


def write_vtu(path: Path, points: FloatArray, wedges: IntArray, kelvin: FloatArray) -> Path:
    """Write one temperature field as a VTU file atomically.

    Parameters
    ----------
    path : the file to write
    points : (n, 3) float ndarray, metres
    wedges : (m, 6) int ndarray, node indices of the prisms
    kelvin : (n,) float ndarray, kelvin; written as ``temperature_c`` in °C
    """
    mesh = meshio.Mesh(
        np.asarray(points, dtype=np.float64),
        [("wedge", np.asarray(wedges, dtype=np.int64))],
        point_data={POINT_DATA: array_to_celsius(kelvin)},
    )
    with atomic_path(path) as tmp:
        meshio.write(tmp, mesh, file_format="vtu")
    return path


def _check_series(fs: FieldSeries, where: str) -> None:
    n, k = len(fs.points), len(fs.times)
    shapes_ok = (
        fs.points.shape == (n, 3)
        and fs.wedges.ndim == 2
        and fs.wedges.shape[1] == 6
        and fs.values.shape == (k, n)
    )
    if not shapes_ok:
        raise ReportError(
            f"{where}: 3D fields: found points {fs.points.shape}, wedges {fs.wedges.shape}, "
            f"times {fs.times.shape}, values {fs.values.shape}; expected (n, 3), (m, 6), "
            "(k,) and (k, n)"
        )
    if fs.wedges.size and (fs.wedges.min() < 0 or fs.wedges.max() >= n):
        raise ReportError(f"{where}: 3D fields: found wedge node indices outside 0..{n - 1}")


def hottest_field(result: CheckResult, board: Board) -> tuple[FloatArray, IntArray, FloatArray]:
    """Return the 3D field at the hottest instant: points (n, 3) m, wedges (m, 6), values (n,) K.

    Uses the recorded 3D field at the hot field's time if there is one, else extrudes the
    hot field's surfaces over the board thickness; with no hot field, the recorded instant
    with the highest temperature.

    Raises
    ------
    ReportError
        If the result holds neither a hot field nor 3D fields.
    """
    where = f"{result.board_name}/{result.variant}"
    fs, hot = result.fields, result.hot
    if fs is not None:
        _check_series(fs, where)
        if hot is not None:
            match = np.flatnonzero(np.isclose(fs.times, hot.time, rtol=1e-12, atol=0.0))
            if match.size:
                return fs.points, fs.wedges, fs.values[int(match[0])]
        elif len(fs.times):
            return fs.points, fs.wedges, fs.values[int(np.argmax(fs.values.max(axis=1)))]
    if hot is None:
        raise ReportError(f"{where}: found no temperature field, expected a hot field or 3D fields")
    thickness = board.thickness
    if not thickness > 0:
        raise ReportError(f"board {board.name!r}: found thickness {thickness!r} m, expected > 0")
    n = len(hot.points)
    xy = np.asarray(hot.points, dtype=np.float64)
    points = np.vstack([np.column_stack([xy, np.zeros(n)]),
                        np.column_stack([xy, np.full(n, -thickness)])])  # fmt: skip
    tri = np.asarray(hot.triangles, dtype=np.int64)
    wedges = np.hstack([tri, tri + n])
    values = np.concatenate([hot.top, hot.bottom])
    return points, wedges, values


def write_series(fs: FieldSeries, out_dir: Path, where: str = "fields") -> dict[str, Path]:
    """Write every recorded instant as a VTU and a ``field.pvd`` collection listing them.

    The VTU files go to ``out_dir/field_series``; the collection is written last, so it
    only ever lists complete files.

    Returns
    -------
    dict
        File name relative to ``out_dir`` -> path, the collection under ``field.pvd``.
    """
    _check_series(fs, where)
    folder = ensure_dir(out_dir / SERIES_DIR)
    written: dict[str, Path] = {}
    root = ET.Element("VTKFile", type="Collection", version="0.1", byte_order="LittleEndian")
    collection = ET.SubElement(root, "Collection")
    width = max(4, len(str(len(fs.times) - 1)))
    for i, t in enumerate(fs.times):
        name = f"{SERIES_DIR}/field_{i:0{width}d}.vtu"
        written[name] = write_vtu(folder / Path(name).name, fs.points, fs.wedges, fs.values[i])
        ET.SubElement(collection, "DataSet", timestep=repr(float(t)), group="", part="0",
                      file=name)  # fmt: skip
    ET.indent(root)
    text = '<?xml version="1.0"?>\n' + ET.tostring(root, "unicode") + "\n"
    written[SERIES_PVD] = write_text(out_dir / SERIES_PVD, text)
    return written


def write_fields(result: CheckResult, board: Board, out_dir: Path) -> dict[str, Path]:
    """Write ``field.vtu`` (hottest instant) and, with several recorded instants, the series.

    Returns
    -------
    dict
        File name relative to ``out_dir`` -> path; empty when the result holds no field.
    """
    out: dict[str, Path] = {}
    if result.hot is None and result.fields is None:
        return out
    points, wedges, values = hottest_field(result, board)
    out[FIELD_VTU] = write_vtu(out_dir / FIELD_VTU, points, wedges, values)
    fs = result.fields
    if fs is not None and len(fs.times) > 1:
        out.update(write_series(fs, out_dir, f"{result.board_name}/{result.variant}"))
    return out
