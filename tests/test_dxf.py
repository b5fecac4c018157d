"""Tests of the DXF outline reader, the polygon checks, and the shipped geometry library.

Analytic references named beside each check:
- inscribed regular n-gon area (n/2) r^2 sin(2 pi / n) (elementary geometry);
- circular segment area r^2 (theta - sin theta) / 2 with r = c / (2 sin(theta/2)) for chord c
  (CRC Standard Mathematical Tables, plane geometry);
- bulge = tan(theta/4), positive counter-clockwise (Autodesk DXF reference, LWPOLYLINE code 42);
- 1 in = 25.4 mm exactly (international yard and pound agreement, 1959); 1 mil = 0.001 in;
- OCS of extrusion (0, 0, -1) mirrors x (DXF reference, arbitrary axis algorithm), checked
  against ezdxf's own OCS transform;
- point-in-polygon for the library checks: matplotlib.path.Path, an implementation outside
  this project.
"""

from __future__ import annotations

import importlib.util
import math
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from ezdxf.filemanagement import new as new_drawing
from matplotlib.path import Path as MplPath

from boardheat.board.dxf import (
    JOIN_TOLERANCE_MM,
    DxfOutline,
    find_self_crossing,
    polygon_area,
    read_dxf_outline,
)
from boardheat.errors import BoardFileError

ROOT = Path(__file__).resolve().parent.parent
GEOMETRY = ROOT / "geometry"
MM2 = 1e-6  # m^2 per mm^2


def new_doc(insunits: int = 4) -> Any:
    doc = new_drawing("R2010")
    doc.header["$INSUNITS"] = insunits
    return doc


def save(doc: Any, tmp_path: Path, name: str = "board.dxf") -> Path:
    path = tmp_path / name
    doc.saveas(path)
    return path


def add_rect(msp: Any, x0: float, y0: float, x1: float, y1: float, **attribs: Any) -> Any:
    pts = [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]
    return msp.add_lwpolyline(pts, close=True, dxfattribs=attribs)


def ngon_area(r: float, n: int) -> float:
    """Area of the regular n-gon inscribed in a circle of radius r (elementary geometry)."""
    return 0.5 * n * r * r * math.sin(2.0 * math.pi / n)


# ----------------------------------------------------------------------------- areas


@pytest.mark.parametrize("arc_deg", [10.0, 3.0])
def test_rectangle_with_circular_hole_area(tmp_path: Path, arc_deg: float) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 100.0, 80.0)
    r = 5.0
    msp.add_circle((30.0, 40.0), r)
    out = read_dxf_outline(save(doc, tmp_path), arc_segment_deg=arc_deg)

    assert len(out.holes) == 1
    assert polygon_area(out.outer) == pytest.approx(8000.0 * MM2, rel=1e-12)
    hole = out.holes[0]
    n = math.ceil(360.0 / arc_deg)
    assert hole.shape == (n, 2)
    # vertices on the true circle (chords inside it)
    radii = np.hypot(hole[:, 0] - 0.030, hole[:, 1] - 0.040)
    np.testing.assert_allclose(radii, r * 1e-3, rtol=1e-12)
    # holes run clockwise: negative signed area equal to the inscribed n-gon
    assert -polygon_area(hole) == pytest.approx(ngon_area(r, n) * MM2, rel=1e-12)

    net = polygon_area(out.outer) + polygon_area(hole)
    exact = (8000.0 - math.pi * r * r) * MM2
    # polygonisation error: pi r^2 - n-gon area, which is <= pi r^2 (2 pi/n)^2 / 6 (Taylor)
    bound = (math.pi * r * r - ngon_area(r, n)) * MM2
    assert bound <= math.pi * r * r * (2.0 * math.pi / n) ** 2 / 6.0 * MM2
    assert 0.0 < net - exact <= bound * (1.0 + 1e-9)


@pytest.mark.parametrize("theta_deg", [90.0, -60.0, 180.0])
def test_bulge_arc_matches_circular_segment_area(tmp_path: Path, theta_deg: float) -> None:
    theta = math.radians(theta_deg)
    b = math.tan(theta / 4.0)  # DXF bulge definition
    doc = new_doc()
    # counter-clockwise 40 x 20 rectangle whose right edge (40,0)->(40,20) is an arc: a positive
    # bulge turns counter-clockwise, which bows out of a counter-clockwise outline
    pts = [(0.0, 0.0, 0.0), (40.0, 0.0, b), (40.0, 20.0, 0.0), (0.0, 20.0, 0.0)]
    doc.modelspace().add_lwpolyline(pts, format="xyb", close=True)
    step = 7.0
    out = read_dxf_outline(save(doc, tmp_path), arc_segment_deg=step)

    c = 20.0
    r = c / (2.0 * math.sin(abs(theta) / 2.0))
    segment = 0.5 * r * r * (abs(theta) - math.sin(abs(theta)))  # circular segment area
    sign = 1.0 if theta > 0 else -1.0
    exact = (800.0 + sign * segment) * MM2
    n = math.ceil(abs(theta_deg) / step)
    assert out.outer.shape == (4 + n - 1, 2)
    # chords inscribed in the arc: polygonal segment r^2 (n sin(theta/n) - sin theta) / 2
    chorded = 0.5 * r * r * (n * math.sin(abs(theta) / n) - math.sin(abs(theta)))
    area = polygon_area(out.outer)
    assert area == pytest.approx((800.0 + sign * chorded) * MM2, rel=1e-10)
    bound = 0.5 * r * r * (abs(theta) - n * math.sin(abs(theta) / n)) * MM2
    assert 0.0 < abs(area - exact) <= bound * (1.0 + 1e-9)
    # every vertex of the arc lies on the circle through the chord ends; the centre sits on the
    # chord's perpendicular bisector y = 10 at distance r cos(theta/2) from the chord
    centre_x = 40.0 - sign * r * math.cos(theta / 2.0)
    arc_pts = out.outer[np.abs(out.outer[:, 0] - 0.040) > 1e-9]
    arc_pts = arc_pts[arc_pts[:, 0] > 0.001]
    np.testing.assert_allclose(
        np.hypot(arc_pts[:, 0] * 1e3 - centre_x, arc_pts[:, 1] * 1e3 - 10.0), r, rtol=1e-9
    )


def test_polyline_entity_with_bulge_equals_lwpolyline(tmp_path: Path) -> None:
    pts = [(0.0, 0.0, 0.0), (40.0, 0.0, 0.4), (40.0, 20.0, 0.0), (0.0, 20.0, -0.2)]
    doc = new_doc()
    doc.modelspace().add_lwpolyline(pts, format="xyb", close=True)
    lw = read_dxf_outline(save(doc, tmp_path, "lw.dxf"))
    doc = new_doc()
    doc.modelspace().add_polyline2d(pts, format="xyb", close=True)
    old = read_dxf_outline(save(doc, tmp_path, "old.dxf"))
    np.testing.assert_allclose(old.outer, lw.outer, atol=1e-15)


def test_line_arc_chain_joins_into_rounded_rectangle(tmp_path: Path) -> None:
    W, H, r = 60.0, 40.0, 5.0
    doc = new_doc()
    msp = doc.modelspace()
    # entities in scrambled order, two lines drawn backwards: joining must not depend on either
    msp.add_arc((W - r, H - r), r, 0.0, 90.0)
    msp.add_line((0.0, r), (0.0, H - r))
    msp.add_line((W - r, H), (r, H))
    msp.add_arc((r, r), r, 180.0, 270.0)
    msp.add_line((W - r, 0.0), (r, 0.0))  # backwards
    msp.add_arc((W - r, r), r, 270.0, 360.0)
    msp.add_arc((r, H - r), r, 90.0, 180.0)
    msp.add_line((W, H - r), (W, r))  # backwards
    out = read_dxf_outline(save(doc, tmp_path), arc_segment_deg=10.0)

    assert out.holes == ()
    n = 9  # chords per quarter circle at 10 degrees
    corner_poly = 0.5 * n * r * r * math.sin(math.pi / 2.0 / n)  # inscribed quarter sector
    expected_poly = W * H - 4.0 * (r * r - corner_poly)
    assert polygon_area(out.outer) == pytest.approx(expected_poly * MM2, rel=1e-10)
    exact = W * H - (4.0 - math.pi) * r * r  # rounded rectangle
    bound = 4.0 * (math.pi * r * r / 4.0 - corner_poly)
    assert 0.0 < (exact - expected_poly) <= bound * (1.0 + 1e-9)
    assert out.outer.shape == (4 * (n + 1), 2)
    assert find_self_crossing(out.outer) is None


def test_gap_below_tolerance_joins_and_above_reports_open(tmp_path: Path) -> None:
    def triangle(gap: float) -> Path:
        doc = new_doc()
        msp = doc.modelspace()
        msp.add_line((0.0, 0.0), (50.0, 0.0))
        msp.add_line((50.0 + gap, 0.0), (0.0, 30.0))
        msp.add_line((0.0, 30.0), (0.0, 0.0))
        return save(doc, tmp_path, f"gap{gap}.dxf")

    gap = 0.5 * JOIN_TOLERANCE_MM
    out = read_dxf_outline(triangle(gap))
    # the joint takes one of the two ends, moving a corner by at most the gap: the area moves
    # by at most gap times half the two adjacent edge lengths (50 mm and 58.3 mm)
    assert polygon_area(out.outer) == pytest.approx(750.0 * MM2, abs=gap * 55.0 * MM2)
    with pytest.raises(BoardFileError, match="open contour"):
        read_dxf_outline(triangle(5.0 * JOIN_TOLERANCE_MM))


def test_mirrored_extrusion_circle_lands_where_ezdxf_puts_it(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 100.0, 80.0)
    circle = msp.add_circle((-30.0, 40.0), 5.0, dxfattribs={"extrusion": (0.0, 0.0, -1.0)})
    wcs_center = circle.ocs().to_wcs(circle.dxf.center)  # ezdxf as the reference
    out = read_dxf_outline(save(doc, tmp_path))
    center = out.holes[0].mean(axis=0) * 1e3
    np.testing.assert_allclose(center, [wcs_center.x, wcs_center.y], atol=1e-9)
    assert center[0] == pytest.approx(30.0)


# ----------------------------------------------------------------------------- units


@pytest.mark.parametrize(
    ("code", "mm_per_unit"),
    [(1, 25.4), (4, 1.0), (5, 10.0), (6, 1000.0), (9, 0.0254), (0, 1.0)],
)
def test_units_from_insunits(tmp_path: Path, code: int, mm_per_unit: float) -> None:
    doc = new_doc(insunits=code)
    add_rect(doc.modelspace(), 0.0, 0.0, 4.0, 3.0)
    out = read_dxf_outline(save(doc, tmp_path))
    assert polygon_area(out.outer) == pytest.approx(12.0 * mm_per_unit**2 * MM2, rel=1e-12)
    assert out.outer[:, 0].max() == pytest.approx(4.0 * mm_per_unit * 1e-3, rel=1e-12)


def test_inch_file_scaled_by_25_4(tmp_path: Path) -> None:
    doc = new_doc(insunits=1)
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 4.0, 3.0)
    msp.add_circle((1.0, 1.0), 0.125)
    out = read_dxf_outline(save(doc, tmp_path))
    np.testing.assert_allclose(out.outer.max(axis=0), [0.1016, 0.0762], rtol=1e-12)
    radii = np.hypot(*(out.holes[0] - 0.0254).T)
    np.testing.assert_allclose(radii, 0.125 * 0.0254, rtol=1e-12)


def test_explicit_scale_overrides_header(tmp_path: Path) -> None:
    doc = new_doc(insunits=1)
    add_rect(doc.modelspace(), 0.0, 0.0, 4.0, 3.0)
    out = read_dxf_outline(save(doc, tmp_path), units_mm_per_unit=2.0)
    assert polygon_area(out.outer) == pytest.approx(48.0 * MM2, rel=1e-12)


def test_unsupported_units_are_an_error(tmp_path: Path) -> None:
    doc = new_doc(insunits=2)  # feet
    add_rect(doc.modelspace(), 0.0, 0.0, 4.0, 3.0)
    path = save(doc, tmp_path)
    with pytest.raises(BoardFileError, match=r"\$INSUNITS = 2 \(feet\)") as info:
        read_dxf_outline(path)
    assert str(path) in str(info.value)


# ----------------------------------------------------------------------------- bad input


def test_open_contour_reports_dangling_ends(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    first = msp.add_line((0.0, 0.0), (50.0, 0.0))
    msp.add_line((50.0, 0.0), (50.0, 30.0))
    last = msp.add_line((50.0, 30.0), (0.0, 30.0))
    path = save(doc, tmp_path)
    with pytest.raises(BoardFileError, match="open contour") as info:
        read_dxf_outline(path, where="board.toml: outline.dxf")
    msg = str(info.value)
    assert msg.startswith(f"board.toml: outline.dxf: {path}: ")
    assert f"LINE #{first.dxf.handle} at (0, 0) mm" in msg
    assert f"LINE #{last.dxf.handle} at (0, 30) mm" in msg


def test_open_contour_names_ignored_curves(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    msp.add_line((0.0, 0.0), (50.0, 0.0))
    msp.add_line((50.0, 0.0), (50.0, 30.0))
    msp.add_spline([(50.0, 30.0), (25.0, 35.0), (0.0, 0.0)])
    with pytest.raises(BoardFileError, match="SPLINE x1"):
        read_dxf_outline(save(doc, tmp_path))


def test_self_crossing_bow_tie(tmp_path: Path) -> None:
    doc = new_doc()
    bow = doc.modelspace().add_lwpolyline(
        [(0.0, 0.0), (10.0, 10.0), (10.0, 0.0), (0.0, 10.0)], close=True
    )
    path = save(doc, tmp_path)
    with pytest.raises(BoardFileError, match="crosses itself") as info:
        read_dxf_outline(path)
    msg = str(info.value)
    assert str(path) in msg
    assert f"LWPOLYLINE #{bow.dxf.handle}" in msg
    assert "(0, 0) mm-(10, 10) mm" in msg
    assert "(10, 0) mm-(0, 10) mm" in msg


def test_hole_outside_outline(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 50.0, 40.0)
    stray = msp.add_circle((80.0, 10.0), 2.0)
    path = save(doc, tmp_path)
    with pytest.raises(BoardFileError, match="lies outside the outline") as info:
        read_dxf_outline(path)
    assert f"CIRCLE #{stray.dxf.handle}" in str(info.value)
    assert str(path) in str(info.value)


def test_hole_crossing_outline(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 50.0, 40.0)
    msp.add_circle((0.0, 20.0), 3.0)
    with pytest.raises(BoardFileError, match="touches or crosses the outline"):
        read_dxf_outline(save(doc, tmp_path))


def test_nested_hole(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 100.0, 100.0)
    add_rect(msp, 20.0, 20.0, 80.0, 80.0)
    island = msp.add_circle((50.0, 50.0), 5.0)
    with pytest.raises(BoardFileError, match="lies inside the hole") as info:
        read_dxf_outline(save(doc, tmp_path))
    assert f"CIRCLE #{island.dxf.handle}" in str(info.value)


def test_overlapping_holes(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 100.0, 100.0)
    msp.add_circle((40.0, 50.0), 6.0)
    msp.add_circle((48.0, 50.0), 6.0)
    with pytest.raises(BoardFileError, match="touches or crosses another hole"):
        read_dxf_outline(save(doc, tmp_path))


def test_branching_chain(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    for a, b in [((0, 0), (10, 0)), ((10, 0), (10, 10)), ((10, 10), (0, 10)), ((0, 10), (0, 0))]:
        msp.add_line(a, b)
    msp.add_line((0.0, 0.0), (10.0, 0.0))  # drawn twice, as CAD exports sometimes do
    with pytest.raises(BoardFileError, match=r"3 entity ends meet at \(0, 0\) mm"):
        read_dxf_outline(save(doc, tmp_path))


def test_empty_file(tmp_path: Path) -> None:
    path = save(new_doc(), tmp_path)
    with pytest.raises(BoardFileError, match="no closed contour found") as info:
        read_dxf_outline(path)
    assert str(path) in str(info.value)


def test_not_a_dxf_and_missing_file(tmp_path: Path) -> None:
    junk = tmp_path / "junk.dxf"
    junk.write_text("this is not a drawing\n")
    with pytest.raises(BoardFileError, match="not a readable DXF"):
        read_dxf_outline(junk)
    with pytest.raises(BoardFileError, match="file not found"):
        read_dxf_outline(tmp_path / "missing.dxf")


def test_degenerate_contours(tmp_path: Path) -> None:
    doc = new_doc()
    # collinear "triangle": its closing edge runs back over the first two
    doc.modelspace().add_lwpolyline([(0.0, 0.0), (10.0, 0.0), (20.0, 0.0)], close=True)
    with pytest.raises(BoardFileError, match="crosses itself"):
        read_dxf_outline(save(doc, tmp_path, "collinear.dxf"))
    doc = new_doc()
    doc.modelspace().add_lwpolyline([(0.0, 0.0), (10.0, 0.0), (0.0, 0.0)], close=True)
    with pytest.raises(BoardFileError, match="encloses no area"):
        read_dxf_outline(save(doc, tmp_path, "two_points.dxf"))


def test_arc_with_equal_angles(tmp_path: Path) -> None:
    doc = new_doc()
    doc.modelspace().add_arc((0.0, 0.0), 5.0, 30.0, 30.0)
    with pytest.raises(BoardFileError, match="start and end angles are equal"):
        read_dxf_outline(save(doc, tmp_path))


@pytest.mark.parametrize("bad", [0.0, -5.0, 120.0, float("nan")])
def test_bad_arc_segment_angle(tmp_path: Path, bad: float) -> None:
    doc = new_doc()
    add_rect(doc.modelspace(), 0.0, 0.0, 4.0, 3.0)
    with pytest.raises(BoardFileError, match="arc segment angle"):
        read_dxf_outline(save(doc, tmp_path), arc_segment_deg=bad)


def test_layer_selection(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 50.0, 40.0, layer="OUTLINE")
    msp.add_circle((10.0, 10.0), 1.6, dxfattribs={"layer": "OUTLINE"})
    add_rect(msp, 200.0, 0.0, 300.0, 100.0, layer="FRAME")  # a drawing frame beside the board
    path = save(doc, tmp_path)
    with pytest.raises(BoardFileError, match="lies outside the outline"):
        read_dxf_outline(path)  # all layers: the larger frame becomes the outline
    out = read_dxf_outline(path, layer="outline")  # layer names compare without case
    assert len(out.holes) == 1
    assert polygon_area(out.outer) == pytest.approx(2000.0 * MM2, rel=1e-12)
    with pytest.raises(BoardFileError, match="layers with geometry: FRAME, OUTLINE"):
        read_dxf_outline(path, layer="MISSING")


def test_outline_arrays_are_read_only(tmp_path: Path) -> None:
    doc = new_doc()
    msp = doc.modelspace()
    add_rect(msp, 0.0, 0.0, 4.0, 3.0)
    msp.add_circle((1.0, 1.0), 0.5)
    out = read_dxf_outline(save(doc, tmp_path))
    assert isinstance(out, DxfOutline)
    with pytest.raises(ValueError, match="read-only"):
        out.outer[0, 0] = 1.0
    with pytest.raises(ValueError, match="read-only"):
        out.holes[0][0, 0] = 1.0


# ----------------------------------------------------------------------------- example DXF


def load_script() -> Any:
    spec = importlib.util.spec_from_file_location(
        "make_example_dxf", ROOT / "scripts" / "make_example_dxf.py"
    )
    assert spec is not None
    assert spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_shipped_example_dxf(tmp_path: Path) -> None:
    shipped = GEOMETRY / "boards" / "example-outline.dxf"
    out = read_dxf_outline(shipped)
    assert len(out.holes) == 3
    r = 10.0
    n = 9  # 10-degree chords on the 90-degree corner arc
    corner_poly = 0.5 * n * r * r * math.sin(math.pi / 2.0 / n)
    assert polygon_area(out.outer) == pytest.approx((7000.0 - r * r + corner_poly) * MM2, rel=1e-9)
    hole_areas = sorted(-polygon_area(h) / MM2 for h in out.holes)
    assert hole_areas == pytest.approx([ngon_area(1.6, 36)] * 2 + [200.0], rel=1e-9)
    # the file matches what the script builds today, and its layer holds everything
    fresh = read_dxf_outline(save(load_script().build_example_outline(), tmp_path))
    np.testing.assert_allclose(fresh.outer, out.outer, atol=1e-12)
    on_layer = read_dxf_outline(shipped, layer="OUTLINE")
    assert len(on_layer.holes) == 3


# ----------------------------------------------------------------------------- polygon checks


def star_polygon(rng: np.random.Generator, n: int, *, radius_spread: float = 0.5) -> np.ndarray:
    """Return a simple polygon: sorted distinct angles, positive radii (star-shaped)."""
    angles = np.sort(rng.uniform(0.0, 2.0 * np.pi, n))
    angles = angles[np.diff(angles, append=angles[0] + 2.0 * np.pi) > 1e-6]
    radii = rng.uniform(1.0 - radius_spread, 1.0 + radius_spread, angles.size)
    return np.column_stack([radii * np.cos(angles), radii * np.sin(angles)])


def test_random_star_polygons_are_simple() -> None:
    rng = np.random.default_rng(20240611)
    for n in [3, 4, 5, 17, 64, 300, 2500]:
        poly = star_polygon(rng, n) * 0.05 + np.array([0.3, -0.2])
        assert find_self_crossing(poly) is None, n


def test_polygon_area_matches_triangle_fan() -> None:
    rng = np.random.default_rng(8191)
    poly = star_polygon(rng, 50)
    r = np.hypot(poly[:, 0], poly[:, 1])
    a = np.arctan2(poly[:, 1], poly[:, 0])
    fan = 0.5 * np.sum(r * np.roll(r, -1) * np.sin(np.roll(a, -1) - a))  # triangles at origin
    assert polygon_area(poly) == pytest.approx(fan, rel=1e-12)
    assert polygon_area(poly[::-1]) == pytest.approx(-fan, rel=1e-12)


def test_reversed_run_of_convex_polygon_crosses_at_known_edges() -> None:
    # Reversing vertices k..l of a convex polygon makes edge k-1 (p[k-1] -> p[l]) and edge l
    # (p[k] -> p[l+1]) chords with interleaved ends: exactly that pair crosses.
    rng = np.random.default_rng(31337)
    for _ in range(40):
        n = int(rng.integers(6, 400))
        angles = np.sort(rng.uniform(0.0, 2.0 * np.pi, n))
        keep = np.diff(angles, append=angles[0] + 2.0 * np.pi) > 1e-4
        poly = np.column_stack([np.cos(angles[keep]), np.sin(angles[keep])])
        n = poly.shape[0]
        k = int(rng.integers(1, n - 2))
        l_end = int(rng.integers(k + 1, n - 1))
        crossed = poly.copy()
        crossed[k : l_end + 1] = poly[k : l_end + 1][::-1]
        assert find_self_crossing(crossed) == (k - 1, l_end)


def _orient(a: tuple[int, int], b: tuple[int, int], c: tuple[int, int]) -> int:
    return (b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0])


def _on_segment(p: tuple[int, int], a: tuple[int, int], b: tuple[int, int]) -> bool:
    return (
        _orient(a, b, p) == 0
        and min(a[0], b[0]) <= p[0] <= max(a[0], b[0])
        and min(a[1], b[1]) <= p[1] <= max(a[1], b[1])
    )


Pt = tuple[int, int]


def _segments_meet(a: Pt, b: Pt, c: Pt, d: Pt) -> bool:
    o1, o2, o3, o4 = _orient(a, b, c), _orient(a, b, d), _orient(c, d, a), _orient(c, d, b)
    if o1 * o2 < 0 and o3 * o4 < 0:
        return True
    return any(
        [_on_segment(c, a, b), _on_segment(d, a, b), _on_segment(a, c, d), _on_segment(b, c, d)]
    )


def brute_force_crossing(pts: list[tuple[int, int]]) -> tuple[int, int] | None:
    """Return the first failing edge pair, by exact integer arithmetic one pair at a time."""
    n = len(pts)
    seg = [(pts[k], pts[(k + 1) % n]) for k in range(n)]
    for i in range(n):
        for j in range(i + 1, n):
            if j == i + 1 or (i == 0 and j == n - 1):
                # adjacent: fail only when they fold back over each other
                first, second = (i, j) if j == i + 1 else (j, i)
                a, b = seg[first]
                _, c = seg[second]
                if (
                    _orient(a, b, c) == 0
                    and (b[0] - a[0]) * (c[0] - b[0]) + (b[1] - a[1]) * (c[1] - b[1]) < 0
                ):
                    return (i, j)
            elif _segments_meet(*seg[i], *seg[j]):
                return (i, j)
    return None


def test_find_self_crossing_agrees_with_exact_brute_force() -> None:
    rng = np.random.default_rng(977)
    n_crossing = 0
    for _ in range(400):
        n = int(rng.integers(3, 9))
        grid = rng.choice(49, size=n, replace=False)  # distinct points of a 7 x 7 grid
        pts = [(int(g % 7), int(g // 7)) for g in grid]
        expected = brute_force_crossing(pts)
        n_crossing += expected is not None
        assert find_self_crossing(np.array(pts, dtype=np.float64)) == expected, pts
    assert 50 < n_crossing < 400  # both outcomes were exercised


@pytest.mark.parametrize(
    ("poly", "expected"),
    [
        ([[0, 0], [1, 1], [1, 0], [0, 1]], (0, 2)),  # bow-tie
        ([[0, 0], [4, 0], [4, 4], [2, 0], [0, 4]], (0, 2)),  # vertex touching an edge
        ([[0, 0], [2, 0], [1, 0]], (0, 1)),  # folds back along itself
        ([[0, 0], [4, 0], [4, 4], [0, 4]], None),
    ],
)
def test_find_self_crossing_cases(poly: list[list[float]], expected: Any) -> None:
    assert find_self_crossing(np.array(poly, dtype=np.float64)) == expected


def test_polygon_checks_reject_bad_shapes() -> None:
    with pytest.raises(ValueError, match=r"\(n >= 3, 2\)"):
        find_self_crossing(np.zeros((2, 2)))
    with pytest.raises(ValueError, match=r"\(n, 2\)"):
        polygon_area(np.zeros((4, 3)))


# ----------------------------------------------------------------------------- geometry library

PACKAGE_KEYS = {
    "format_version",
    "name",
    "description",
    "source",
    "body_mm",
    "footprint_mm",
    "exposed_pad",
    "theta_jb_k_per_w",
    "mold_rho_c_j_per_m3k",
}
REQUIRED_PACKAGES = {
    "SOT-23", "SOT-23-6", "SOT-223", "SOIC-8", "SOIC-8-EP", "TSSOP-20-EP", "QFN-16-3x3",
    "QFN-20-4x4", "QFN-32-5x5", "QFN-48-7x7", "LQFP-48", "LQFP-64", "DFN-8-3x3", "SON-8-5x6",
    "DPAK", "D2PAK", "RES-0603", "RES-1206", "RES-2512", "IND-12x12",
}  # fmt: skip
PACKAGE_FILES = sorted((GEOMETRY / "packages").glob("*.toml"))


def test_package_library_is_complete() -> None:
    names = {p.stem for p in PACKAGE_FILES}
    assert REQUIRED_PACKAGES <= names
    readme = (GEOMETRY / "README.md").read_text(encoding="utf-8")
    for name in names:
        assert f"| {name} |" in readme, f"{name} missing from the geometry/README.md table"


@pytest.mark.parametrize("path", PACKAGE_FILES, ids=lambda p: p.stem)
def test_package_file(path: Path) -> None:
    text = path.read_text(encoding="utf-8")
    first = text.splitlines()[0]
    assert first.startswith("# ")
    assert "recalled from memory" in first
    data = tomllib.loads(text)
    assert set(data) <= PACKAGE_KEYS
    assert set(data) >= PACKAGE_KEYS - {"mold_rho_c_j_per_m3k"}
    assert data["format_version"] == 1
    assert data["name"] == path.stem
    assert "recalled" in data["source"]
    body, foot = data["body_mm"], data["footprint_mm"]
    assert len(body) == 3
    assert all(0.1 < v < 50.0 for v in body)
    assert len(foot) == 2
    assert all(0.1 < v < 50.0 for v in foot)
    assert isinstance(data["exposed_pad"], bool)
    if data["exposed_pad"]:  # a pad lies under the body
        assert foot[0] <= body[0]
        assert foot[1] <= body[1]
    assert 0.1 <= data["theta_jb_k_per_w"] <= 500.0
    # volumetric heat capacity of solids: about 1-4 MJ/(m3 K) (epoxy to copper, recalled)
    assert 1.0e6 <= data.get("mold_rho_c_j_per_m3k", 1.6e6) <= 4.0e6


BOARD_FILES = sorted((GEOMETRY / "boards").glob("*.toml"))


def _hole_polygon(hole: dict[str, Any]) -> np.ndarray:
    if "circle" in hole:
        c = np.asarray(hole["circle"]["center_mm"], dtype=np.float64)
        r = 0.5 * float(hole["circle"]["diameter_mm"])
        t = np.linspace(0.0, 2.0 * np.pi, 128, endpoint=False)
        ring: np.ndarray = c + r * np.column_stack([np.cos(t), np.sin(t)])
        return ring
    return np.asarray(hole["polygon_mm"], dtype=np.float64)


def test_three_example_boards_ship() -> None:
    assert len(BOARD_FILES) >= 3


@pytest.mark.parametrize("path", BOARD_FILES, ids=lambda p: p.stem)
def test_example_board_outline(path: Path) -> None:
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    assert set(data) <= {"format_version", "description", "polygon_mm", "holes"}
    assert data["format_version"] == 1
    assert "own invention" in data["description"]
    outer = np.asarray(data["polygon_mm"], dtype=np.float64)
    assert polygon_area(outer) > 0.0  # counter-clockwise
    assert find_self_crossing(outer) is None
    assert not np.allclose(outer[0], outer[-1])  # not closed
    board = MplPath(outer)
    holes = [_hole_polygon(h) for h in data.get("holes", [])]
    assert holes
    for k, hole in enumerate(holes):
        assert find_self_crossing(hole) is None
        assert board.contains_points(hole).all(), f"hole {k} leaves the board"
        for j, other in enumerate(holes[:k]):
            assert not MplPath(other).contains_points(hole).any(), f"holes {j} and {k} overlap"
            assert not MplPath(hole).contains_points(other).any(), f"holes {j} and {k} overlap"
