"""Read a board outline and its holes from a DXF drawing, and check plane polygons.

Part of the board-file boundary. Input: a DXF file that the board file names. Output: a
:class:`DxfOutline` in metres, the outer contour counter-clockwise and every hole clockwise.
Closed LWPOLYLINE/POLYLINE entities and CIRCLEs are contours by themselves; LINE, ARC and open
polylines are joined end to end into closed contours when their ends lie within
:data:`JOIN_TOLERANCE_MM`. Arcs (ARC, CIRCLE, polyline bulges) become chords whose vertices lie
on the true arc and whose central angle is at most ``arc_segment_deg``; a chord of central angle
phi on radius r deviates from the arc by at most r (1 - cos(phi/2)) and cuts off the area
r^2 (phi - sin phi) / 2. The contour of largest area is the outline; every other contour must be a
hole strictly inside it. The polygon checks used here (signed shoelace area and the vectorised
segment-crossing search) are public because the TOML outline validator reuses them.
"""

from __future__ import annotations

import logging
import math
from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt
from ezdxf.filemanagement import readfile
from ezdxf.lldxf.const import DXFError
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from boardheat.errors import BoardFileError

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]
IntArray = npt.NDArray[np.intp]

__all__ = [
    "JOIN_TOLERANCE_MM",
    "DxfOutline",
    "find_self_crossing",
    "polygon_area",
    "read_dxf_outline",
]

logger = logging.getLogger(__name__)

JOIN_TOLERANCE_MM = 0.01
"""Largest gap, in mm, between two entity ends that are joined into one contour corner."""

# $INSUNITS code -> (mm per drawing unit, unit name used in messages). Codes from the DXF
# reference (header variable $INSUNITS). A unitless file (code 0) is read as millimetres,
# the unit that board outlines are drawn in by common practice.
_INSUNITS: dict[int, tuple[float, str]] = {
    0: (1.0, "mm"),
    1: (25.4, "in"),
    4: (1.0, "mm"),
    5: (10.0, "cm"),
    6: (1000.0, "m"),
    9: (0.0254, "mil"),
}
_INSUNITS_NAMES = {2: "feet", 3: "miles", 7: "km", 8: "microinches", 10: "yards", 13: "microns"}

# Entity types that can never be part of an outline; they are skipped without comment.
_ANNOTATION_TYPES = frozenset(
    {"TEXT", "MTEXT", "DIMENSION", "LEADER", "MLEADER", "POINT", "ATTDEF", "VIEWPORT", "HATCH"}
)
# Vertex flag of a spline-fit POLYLINE's control frame (DXF reference, VERTEX group code 70).
_SPLINE_FRAME_CONTROL_POINT = 16
# Number of pair tests evaluated at once in the crossing search (bounds the memory to ~10 MB).
_BLOCK_PAIRS = 1 << 20
# Relative tolerance of the crossing test: a point within this fraction of the polygon's
# extent from a segment touches it.
_REL_TOL = 1e-9
_MAX_LISTED = 6


@dataclass(frozen=True)
class DxfOutline:
    """Board outline read from a DXF drawing.

    Attributes
    ----------
    outer : (n, 2) float ndarray, metres
        Outline vertices, counter-clockwise, not closed (the first vertex is not repeated).
    holes : tuple of (m, 2) float ndarray, metres
        Hole contours, each clockwise and not closed; every hole lies strictly inside
        ``outer`` and outside every other hole.
    """

    outer: FloatArray
    holes: tuple[FloatArray, ...]

    def __post_init__(self) -> None:
        outer = _frozen_polygon(self.outer, "outer")
        holes = tuple(_frozen_polygon(h, f"holes[{k}]") for k, h in enumerate(self.holes))
        object.__setattr__(self, "outer", outer)
        object.__setattr__(self, "holes", holes)


def _frozen_polygon(poly: Any, name: str) -> FloatArray:
    arr = np.array(poly, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 3:
        raise ValueError(f"DxfOutline.{name}: expected an (n >= 3, 2) array, got {arr.shape}")
    arr.setflags(write=False)
    return arr


# --------------------------------------------------------------------------- polygon checks


def polygon_area(poly: FloatArray) -> float:
    """Return the signed area of a closed polygon by the shoelace formula.

    Parameters
    ----------
    poly : (n, 2) float ndarray, metres
        Vertices, not closed (the edge from the last vertex back to the first is implied).

    Returns
    -------
    float
        Area in m^2 (square of the input unit); positive when the vertices run
        counter-clockwise, negative when clockwise.

    Examples
    --------
    >>> polygon_area(np.array([[0.0, 0.0], [2.0, 0.0], [2.0, 1.0], [0.0, 1.0]]))
    2.0
    """
    p = np.asarray(poly, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 2:
        raise ValueError(f"polygon_area: expected an (n, 2) array, got shape {p.shape}")
    x, y = p[:, 0], p[:, 1]
    # Shoelace with the centroid-free form; subtracting the first vertex keeps precision for
    # boards far from the drawing origin.
    x = x - x[0] if x.size else x
    y = y - y[0] if y.size else y
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def find_self_crossing(poly: FloatArray) -> tuple[int, int] | None:
    """Find two edges of a closed polygon that cross or touch.

    Edge ``k`` runs from ``poly[k]`` to ``poly[(k + 1) % n]``. Two non-adjacent edges fail
    when they share any point (crossing, touching, or overlapping); two adjacent edges fail
    when they overlap beyond their common vertex (the contour folds back on itself). A
    zero-length edge (a repeated vertex) therefore shows up as its two neighbours touching.
    Distances below 1e-9 of the polygon's bounding-box diagonal count as contact.

    The search tests all edge pairs with numpy in blocks: a bounding-box filter first, then
    the orientation (cross-product sign) test of the surviving pairs; no Python loop over
    edges.

    Parameters
    ----------
    poly : (n, 2) float ndarray, metres (any length unit)
        Vertices, n >= 3, not closed.

    Returns
    -------
    tuple of int or None
        ``(i, j)`` with ``i < j``, the lexicographically first pair of failing edges, or
        ``None`` when the polygon is simple.

    Examples
    --------
    >>> find_self_crossing(np.array([[0.0, 0.0], [1.0, 1.0], [1.0, 0.0], [0.0, 1.0]]))
    (0, 2)
    """
    p = np.asarray(poly, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 2 or p.shape[0] < 3:
        raise ValueError(f"find_self_crossing: expected an (n >= 3, 2) array, got {p.shape}")
    return _first_self_crossing(p, _REL_TOL * _extent(p))


def _extent(p: FloatArray) -> float:
    span = np.ptp(p, axis=0)
    return float(np.hypot(span[0], span[1]))


def _cross(a: FloatArray, b: FloatArray) -> FloatArray:
    return a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]


def _first_self_crossing(p: FloatArray, tol: float) -> tuple[int, int] | None:
    n = p.shape[0]
    a1 = p
    a2 = np.roll(p, -1, axis=0)
    found = _first_crossing(a1, a2, a1, a2, tol, same=True)

    # Adjacent edges k and k+1 share a vertex; they fail only by folding back (collinear,
    # opposite directions).
    d = a2 - a1
    d_next = np.roll(d, -1, axis=0)
    length = np.hypot(d[:, 0], d[:, 1])
    fold = (np.abs(_cross(d, d_next)) <= tol * length) & (np.sum(d * d_next, axis=1) < 0.0)
    ks = np.flatnonzero(fold)
    if ks.size:
        # Only the fold after the last edge (pair (0, n-1)) can precede the first one.
        pairs = [(int(k), int(k) + 1) if k < n - 1 else (0, n - 1) for k in (ks[0], ks[-1])]
        first_fold = min(pairs)
        found = first_fold if found is None else min(found, first_fold)
    return found


def _first_crossing(
    a1: FloatArray, a2: FloatArray, b1: FloatArray, b2: FloatArray, tol: float, *, same: bool
) -> tuple[int, int] | None:
    """Return the first (i, j) such that segment a_i touches segment b_j, row-major order.

    With ``same`` the two sets are the edges of one closed polygon: only pairs j > i that
    are not adjacent are tested.
    """
    na, nb = a1.shape[0], b1.shape[0]
    amin, amax = np.minimum(a1, a2) - tol, np.maximum(a1, a2) + tol
    bmin, bmax = np.minimum(b1, b2), np.maximum(b1, b2)
    rows = max(1, _BLOCK_PAIRS // max(nb, 1))
    for r0 in range(0, na, rows):
        r1 = min(na, r0 + rows)
        c0 = r0 + 2 if same else 0
        if c0 >= nb:
            break
        overlap = (
            (amin[r0:r1, None, 0] <= bmax[None, c0:, 0])
            & (bmin[None, c0:, 0] <= amax[r0:r1, None, 0])
            & (amin[r0:r1, None, 1] <= bmax[None, c0:, 1])
            & (bmin[None, c0:, 1] <= amax[r0:r1, None, 1])
        )
        ii, jj = np.nonzero(overlap)
        ii = ii + r0
        jj = jj + c0
        if same:
            keep = (jj > ii + 1) & ~((ii == 0) & (jj == na - 1))
            ii, jj = ii[keep], jj[keep]
        if ii.size == 0:
            continue
        hit = np.flatnonzero(_segments_touch(a1[ii], a2[ii], b1[jj], b2[jj], tol))
        if hit.size:
            return int(ii[hit[0]]), int(jj[hit[0]])
    return None


def _segments_touch(
    p1: FloatArray, p2: FloatArray, q1: FloatArray, q2: FloatArray, tol: float
) -> BoolArray:
    """Return, per row, whether closed segments p1-p2 and q1-q2 share a point (within tol)."""
    dp, dq = p2 - p1, q2 - q1
    lp = np.hypot(dp[:, 0], dp[:, 1])
    lq = np.hypot(dq[:, 0], dq[:, 1])
    o1, o2 = _cross(dp, q1 - p1), _cross(dp, q2 - p1)
    o3, o4 = _cross(dq, p1 - q1), _cross(dq, p2 - q1)
    # |cross| / length is the distance of the point from the other segment's line.
    z1, z2 = np.abs(o1) <= tol * lp, np.abs(o2) <= tol * lp
    z3, z4 = np.abs(o3) <= tol * lq, np.abs(o4) <= tol * lq
    proper = (o1 * o2 < 0.0) & (o3 * o4 < 0.0) & ~(z1 | z2 | z3 | z4)
    touch = (
        (z1 & _in_box(q1, p1, p2, tol))
        | (z2 & _in_box(q2, p1, p2, tol))
        | (z3 & _in_box(p1, q1, q2, tol))
        | (z4 & _in_box(p2, q1, q2, tol))
    )
    return proper | touch


def _in_box(q: FloatArray, s1: FloatArray, s2: FloatArray, tol: float) -> BoolArray:
    lo = np.minimum(s1, s2) - tol
    hi = np.maximum(s1, s2) + tol
    return np.all((q >= lo) & (q <= hi), axis=1)  # type: ignore[no-any-return]


def _points_inside(points: FloatArray, poly: FloatArray) -> BoolArray:
    """Return whether each point lies inside the polygon (even-odd crossing-number rule).

    Points on the boundary may go either way; callers rule contact out first.
    """
    x1, y1 = poly[:, 0], poly[:, 1]
    x2, y2 = np.roll(x1, -1), np.roll(y1, -1)
    dy = y2 - y1
    safe_dy = np.where(dy == 0.0, 1.0, dy)
    inside = np.zeros(points.shape[0], dtype=bool)
    rows = max(1, _BLOCK_PAIRS // max(poly.shape[0], 1))
    for r0 in range(0, points.shape[0], rows):
        px = points[r0 : r0 + rows, 0:1]
        py = points[r0 : r0 + rows, 1:2]
        spans = (y1 > py) != (y2 > py)
        x_cut = x1 + (py - y1) * (x2 - x1) / safe_dy
        inside[r0 : r0 + rows] = np.count_nonzero(spans & (px < x_cut), axis=1) % 2 == 1
    return inside


# --------------------------------------------------------------------------- DXF reading


@dataclass
class _Piece:
    """Polyline read from one entity, in drawing units; ``closed`` joins last to first."""

    points: FloatArray  # (k, 2) drawing units
    label: str
    closed: bool


@dataclass
class _Contour:
    """Closed contour in drawing units; ``edge_labels[k]`` names the entity of edge k."""

    points: FloatArray  # (n, 2) drawing units, not closed
    edge_labels: list[str]

    def describe(self) -> str:
        names = list(dict.fromkeys(self.edge_labels))
        if len(names) == 1:
            return names[0]
        return f"the contour joined from {_listing(names)}"


def _listing(items: list[str]) -> str:
    if len(items) <= _MAX_LISTED:
        return ", ".join(items)
    shown = ", ".join(items[:_MAX_LISTED])
    return f"{shown} and {len(items) - _MAX_LISTED} more"


class _Reader:
    """Collect contours from one drawing; every error is prefixed with the file."""

    def __init__(self, prefix: str, step_rad: float, unit: str, mm_per_unit: float) -> None:
        self.prefix = prefix
        self.step_rad = step_rad
        self.unit = unit
        self.tol = JOIN_TOLERANCE_MM / mm_per_unit
        self.pieces: list[_Piece] = []
        self.ignored: Counter[str] = Counter()

    def fail(self, message: str) -> BoardFileError:
        return BoardFileError(f"{self.prefix}: {message}")

    def xy(self, p: FloatArray) -> str:
        return f"({p[0]:.6g}, {p[1]:.6g}) {self.unit}"

    # ----- entities -> pieces

    def add_entity(self, e: Any) -> None:
        kind = e.dxftype()
        label = f"{kind} #{e.dxf.handle}"
        if kind == "LINE":
            start, end = e.dxf.start, e.dxf.end
            pts = np.array([[start[0], start[1]], [end[0], end[1]]], dtype=np.float64)
            self.add_piece(pts, label, closed=False)
        elif kind == "ARC":
            self.add_arc(e, label)
        elif kind == "CIRCLE":
            self.add_circle(e, label)
        elif kind == "LWPOLYLINE":
            xyb = np.array(e.get_points("xyb"), dtype=np.float64).reshape(-1, 3)
            pts = self.bulged(xyb, closed=bool(e.closed))
            self.add_piece(self.to_wcs(pts, e.dxf.extrusion, label), label, bool(e.closed))
        elif kind == "POLYLINE":
            self.add_polyline(e, label)
        elif kind not in _ANNOTATION_TYPES:
            self.ignored[kind] += 1

    def add_piece(self, pts: FloatArray, label: str, closed: bool) -> None:
        if pts.shape[0] < 2 or np.max(np.ptp(pts, axis=0)) <= self.tol:
            return  # a zero-size entity joins nothing and encloses nothing
        self.pieces.append(_Piece(pts, label, closed))

    def add_arc(self, e: Any, label: str) -> None:
        radius = float(e.dxf.radius)
        sweep = math.radians((float(e.dxf.end_angle) - float(e.dxf.start_angle)) % 360.0)
        if sweep < 1e-12:
            raise self.fail(
                f"{label}: start and end angles are equal ({float(e.dxf.start_angle):g} deg); "
                "expected an ARC with distinct angles (draw a full circle as a CIRCLE)"
            )
        n = max(1, math.ceil(sweep / self.step_rad))
        angles = math.radians(float(e.dxf.start_angle)) + sweep * np.arange(n + 1) / n
        pts = self.on_circle(e.dxf.center, radius, angles)
        self.add_piece(self.to_wcs(pts, e.dxf.extrusion, label), label, closed=False)

    def add_circle(self, e: Any, label: str) -> None:
        n = max(3, math.ceil(2.0 * math.pi / self.step_rad))
        angles = 2.0 * math.pi * np.arange(n) / n
        pts = self.on_circle(e.dxf.center, float(e.dxf.radius), angles)
        self.add_piece(self.to_wcs(pts, e.dxf.extrusion, label), label, closed=True)

    @staticmethod
    def on_circle(center: Any, radius: float, angles: FloatArray) -> FloatArray:
        c = np.array([float(center[0]), float(center[1])])
        return c + radius * np.column_stack([np.cos(angles), np.sin(angles)])

    def add_polyline(self, e: Any, label: str) -> None:
        if e.is_poly_face_mesh or e.is_polygon_mesh:
            self.ignored[f"POLYLINE ({'polyface' if e.is_poly_face_mesh else 'mesh'})"] += 1
            return
        rows = [
            (float(v.dxf.location[0]), float(v.dxf.location[1]), float(v.dxf.bulge))
            for v in e.vertices
            if not int(v.dxf.flags) & _SPLINE_FRAME_CONTROL_POINT
        ]
        xyb = np.array(rows, dtype=np.float64).reshape(-1, 3)
        closed = bool(e.is_closed)
        if e.is_3d_polyline:  # WCS vertices without bulges
            self.add_piece(xyb[:, :2].copy(), label, closed)
            return
        pts = self.bulged(xyb, closed=closed)
        self.add_piece(self.to_wcs(pts, e.dxf.extrusion, label), label, closed)

    def bulged(self, xyb: FloatArray, *, closed: bool) -> FloatArray:
        """Replace every bulged polyline segment by chords on its arc (OCS coordinates).

        A bulge b on the segment from vertex k to k+1 is tan(theta/4) of the arc's included
        angle theta, positive counter-clockwise (DXF reference, LWPOLYLINE group code 42).
        """
        pts = xyb[:, :2]
        m = pts.shape[0]
        n_seg = m if closed else m - 1
        bulge = xyb[:, 2]
        if n_seg < 1 or not np.any(bulge[:n_seg] != 0.0):
            return pts.copy()
        out: list[FloatArray] = []
        for k in range(n_seg):
            p0, p1 = pts[k], pts[(k + 1) % m]
            out.append(p0[None, :])
            if bulge[k] != 0.0:
                out.append(self.arc_interior(p0, p1, float(bulge[k])))
        if not closed:
            out.append(pts[-1:])
        return np.concatenate(out, axis=0)

    def arc_interior(self, p0: FloatArray, p1: FloatArray, b: float) -> FloatArray:
        chord = p1 - p0
        c = float(np.hypot(chord[0], chord[1]))
        if c == 0.0:
            return np.empty((0, 2))
        theta = 4.0 * math.atan(b)
        # Centre: from the chord midpoint along the left normal by (c/2)(1 - b^2)/(2b).
        left = np.array([-chord[1], chord[0]]) / c
        center = 0.5 * (p0 + p1) + left * (0.5 * c * (1.0 - b * b) / (2.0 * b))
        radius = float(np.hypot(*(p0 - center)))
        a0 = math.atan2(p0[1] - center[1], p0[0] - center[0])
        n = max(1, math.ceil(abs(theta) / self.step_rad))
        angles = a0 + theta * np.arange(1, n) / n
        return center + radius * np.column_stack([np.cos(angles), np.sin(angles)])

    def to_wcs(self, pts: FloatArray, extrusion: Any, label: str) -> FloatArray:
        """Map object coordinates (OCS) to world x, y; only +z and -z extrusions are plane."""
        ez = np.array([float(extrusion[0]), float(extrusion[1]), float(extrusion[2])])
        ez /= np.linalg.norm(ez)
        if abs(ez[0]) < 1e-9 and abs(ez[1]) < 1e-9:
            if ez[2] > 0.0:
                return pts
            # Arbitrary-axis algorithm (DXF reference, OCS) for extrusion (0, 0, -1) gives
            # the OCS x axis = -WCS x and y axis = +WCS y: a mirror in x.
            mirrored: FloatArray = pts * np.array([-1.0, 1.0])
            return mirrored
        raise self.fail(
            f"{label}: extrusion direction ({ez[0]:.3g}, {ez[1]:.3g}, {ez[2]:.3g}) is not "
            "along z; expected the outline drawn in the XY plane"
        )

    # ----- pieces -> contours

    def contours(self) -> list[_Contour]:
        result = [
            _Contour(p.points, [p.label] * p.points.shape[0]) for p in self.pieces if p.closed
        ]
        chain = [p for p in self.pieces if not p.closed]
        if chain:
            result.extend(self.join(chain))
        return result

    def join(self, chain: list[_Piece]) -> list[_Contour]:
        """Join open pieces end to end; every joint must be exactly two ends within tol."""
        ends = np.array([[p.points[0], p.points[-1]] for p in chain]).reshape(-1, 2)
        pairs = cKDTree(ends).query_pairs(self.tol, output_type="ndarray")
        n_ends = ends.shape[0]
        graph = coo_matrix(
            (np.ones(pairs.shape[0]), (pairs[:, 0], pairs[:, 1])), shape=(n_ends, n_ends)
        )
        _, cluster = connected_components(graph, directed=False)
        size = np.bincount(cluster)[cluster]
        dangling = np.flatnonzero(size == 1)
        if dangling.size:
            ends_text = [f"{chain[k // 2].label} at {self.xy(ends[k])}" for k in dangling]
            raise self.fail(
                f"open contour: {len(ends_text)} entity end(s) meet no other end within "
                f"{JOIN_TOLERANCE_MM} mm: {_listing(ends_text)}; expected LINE, ARC and open "
                f"polyline entities to join end to end into closed contours{self.ignored_note()}"
            )
        branch = np.flatnonzero(size > 2)
        if branch.size:
            k = int(branch[0])
            meeting = [chain[j // 2].label for j in np.flatnonzero(cluster == cluster[k])]
            raise self.fail(
                f"{len(meeting)} entity ends meet at {self.xy(ends[k])} ({_listing(meeting)}); "
                "expected exactly two ends at every corner of a contour (a duplicated or "
                "branching entity?)"
            )
        order = np.argsort(cluster, kind="stable")
        partner = np.empty(n_ends, dtype=np.intp)
        partner[order[0::2]] = order[1::2]
        partner[order[1::2]] = order[0::2]

        visited = np.zeros(len(chain), dtype=bool)
        contours: list[_Contour] = []
        for start in range(len(chain)):
            if visited[start]:
                continue
            parts: list[FloatArray] = []
            labels: list[str] = []
            end = 2 * start  # enter the first piece at its start
            while True:
                k = end // 2
                visited[k] = True
                pts = chain[k].points if end % 2 == 0 else chain[k].points[::-1]
                parts.append(pts[:-1])  # the last point is the next piece's first
                labels.extend([chain[k].label] * (pts.shape[0] - 1))
                end = int(partner[end ^ 1])
                if end == 2 * start:
                    break
            contours.append(_Contour(np.concatenate(parts, axis=0), labels))
        return contours

    def ignored_note(self) -> str:
        if not self.ignored:
            return ""
        kinds = ", ".join(f"{kind} x{count}" for kind, count in sorted(self.ignored.items()))
        return (
            f" (not read as outline geometry: {kinds}; convert splines and ellipses to "
            "polylines and explode block references)"
        )

    def cleaned(self, c: _Contour) -> _Contour:
        """Drop repeated vertices (within tol), including a repeated first vertex."""
        pts = c.points
        step = np.hypot(*(np.roll(pts, -1, axis=0) - pts).T)
        keep = step > self.tol
        if not np.any(keep):
            keep[0] = True
        labels = [lab for lab, k in zip(c.edge_labels, keep, strict=True) if k]
        return _Contour(pts[keep], labels)


def read_dxf_outline(
    path: Path,
    *,
    layer: str | None = None,
    units_mm_per_unit: float | None = None,
    arc_segment_deg: float = 10.0,
    where: str | None = None,
) -> DxfOutline:
    """Read the board outline and its holes from the model space of a DXF file.

    Entities read: closed or open LWPOLYLINE and 2D/3D POLYLINE (bulges included), CIRCLE,
    LINE and ARC. Open pieces are joined end to end into closed contours when their ends
    are within :data:`JOIN_TOLERANCE_MM`. Annotation (text, dimensions, hatches, points) is
    skipped; other entity types (SPLINE, ELLIPSE, INSERT, ...) are skipped and named in the
    error when the outline then cannot be closed. Entities in blocks and paper space are not
    read. All layers are read unless ``layer`` is given.

    Arcs become chords with vertices on the arc, each chord spanning at most
    ``arc_segment_deg``; so the polygons lie inside convex arcs, and a full circle of radius
    r loses the area pi r^2 - (n/2) r^2 sin(2 pi / n) with n = ceil(360 / arc_segment_deg).

    Parameters
    ----------
    path : Path
        The DXF file.
    layer : str, optional
        Read only entities on this layer (compared without regard to case, as CAD does).
    units_mm_per_unit : float, optional
        Millimetres per drawing unit. Default: from the header variable $INSUNITS, which may
        be unitless (read as mm), in, mm, cm, m or mil.
    arc_segment_deg : float
        Largest central angle of one chord replacing an arc, degrees, in [0.1, 90].
    where : str, optional
        Board-file location that named this DXF (e.g. ``"board.toml: outline.dxf"``); it
        starts every error message.

    Returns
    -------
    DxfOutline
        Outline (counter-clockwise) and holes (clockwise), metres.

    Raises
    ------
    BoardFileError
        The file is missing or unreadable, has unsupported units, or its contours do not
        form one outline with holes: no closed contour, an open chain (the dangling ends
        are listed), a contour crossing itself or another (the crossing segments are
        listed), a contour outside the outline, or a hole inside another hole. The message
        names the file and the entity handles.
    """
    prefix = f"{where}: {path}" if where else str(path)
    if not (math.isfinite(arc_segment_deg) and 0.1 <= arc_segment_deg <= 90.0):
        raise BoardFileError(
            f"{prefix}: arc segment angle {arc_segment_deg!r} deg; expected 0.1 to 90 deg"
        )
    if units_mm_per_unit is not None and not (
        math.isfinite(units_mm_per_unit) and units_mm_per_unit > 0.0
    ):
        raise BoardFileError(
            f"{prefix}: units scale {units_mm_per_unit!r} mm per drawing unit; expected a "
            "positive number"
        )
    try:
        doc = readfile(path)
    except FileNotFoundError as err:
        raise BoardFileError(f"{prefix}: file not found; expected a DXF file") from err
    except (OSError, ValueError, DXFError) as err:
        raise BoardFileError(f"{prefix}: not a readable DXF file ({err})") from err

    if units_mm_per_unit is not None:
        mm_per_unit, unit = float(units_mm_per_unit), "drawing units"
    else:
        mm_per_unit, unit = _header_units(doc, prefix)

    reader = _Reader(prefix, math.radians(arc_segment_deg), unit, mm_per_unit)
    layers_seen: set[str] = set()
    wanted = layer.casefold() if layer is not None else None
    for e in doc.modelspace():
        entity_layer = str(e.dxf.get("layer", "0"))
        if e.dxftype() not in _ANNOTATION_TYPES:
            layers_seen.add(entity_layer)
        if wanted is None or entity_layer.casefold() == wanted:
            reader.add_entity(e)

    contours = [reader.cleaned(c) for c in reader.contours()]
    if not contours:
        scope = "on any layer" if layer is None else f"on layer {layer!r}"
        found = f"; layers with geometry: {_listing(sorted(layers_seen))}" if layers_seen else ""
        raise reader.fail(
            f"no closed contour found {scope} of the model space{found}; expected a closed "
            f"LWPOLYLINE/POLYLINE, a CIRCLE, or LINE/ARC entities joined end to end"
            f"{reader.ignored_note()}"
        )
    outer, holes = _arrange(contours, reader)
    scale = mm_per_unit * 1e-3
    outer_m = outer.points * scale
    if polygon_area(outer_m) < 0.0:
        outer_m = outer_m[::-1]
    holes_m = []
    for h in holes:
        hole_m = h.points * scale
        holes_m.append(hole_m[::-1] if polygon_area(hole_m) > 0.0 else hole_m)
    logger.debug(
        "%s: outline with %d vertices and %d holes", prefix, outer_m.shape[0], len(holes_m)
    )
    return DxfOutline(outer=outer_m, holes=tuple(holes_m))


def _header_units(doc: Any, prefix: str) -> tuple[float, str]:
    raw = doc.header.get("$INSUNITS", 0)
    try:
        code = int(raw)
    except (TypeError, ValueError) as err:
        raise BoardFileError(
            f"{prefix}: header $INSUNITS = {raw!r}; expected an integer unit code"
        ) from err
    if code not in _INSUNITS:
        name = _INSUNITS_NAMES.get(code, "unknown")
        raise BoardFileError(
            f"{prefix}: header $INSUNITS = {code} ({name}) is not a board unit; expected 0 "
            "(unitless, read as mm), 1 (in), 4 (mm), 5 (cm), 6 (m) or 9 (mil), or an explicit "
            "units scale (mm per drawing unit)"
        )
    return _INSUNITS[code]


def _arrange(contours: list[_Contour], reader: _Reader) -> tuple[_Contour, list[_Contour]]:
    """Check every contour and split them into the outline and its holes (drawing units)."""
    extent = max(_extent(c.points) for c in contours)
    tol = _REL_TOL * extent
    for c in contours:
        hit = _first_self_crossing(c.points, tol) if c.points.shape[0] >= 3 else None
        if hit is not None:
            raise reader.fail(
                f"{c.describe()} crosses itself: {_edge_text(c, hit[0], reader)} touches "
                f"{_edge_text(c, hit[1], reader)}; expected a simple closed contour"
            )
        if c.points.shape[0] < 3 or abs(polygon_area(c.points)) <= reader.tol**2:
            raise reader.fail(
                f"{c.describe()} encloses no area (vertices {_points_text(c.points, reader)}); "
                "expected a closed contour around a region"
            )
    areas = [abs(polygon_area(c.points)) for c in contours]
    k_outer = int(np.argmax(areas))
    outer = contours[k_outer]
    holes = [c for k, c in enumerate(contours) if k != k_outer]
    for h in holes:
        _check_pair(h, outer, reader, tol, hole_outer=True)
    boxes = np.array([[*c.points.min(axis=0), *c.points.max(axis=0)] for c in holes])
    if len(holes) > 1:
        lo, hi = boxes[:, :2], boxes[:, 2:]
        near = np.all(
            (lo[:, None, :] <= hi[None, :, :] + tol) & (lo[None, :, :] <= hi[:, None, :] + tol),
            axis=2,
        )
        for i, j in zip(*np.nonzero(np.triu(near, k=1)), strict=True):
            _check_pair(holes[int(i)], holes[int(j)], reader, tol, hole_outer=False)
    return outer, holes


def _check_pair(a: _Contour, b: _Contour, reader: _Reader, tol: float, *, hole_outer: bool) -> None:
    """Raise unless contours a and b are apart (holes) or a lies inside b (hole, outline)."""
    a1, a2 = a.points, np.roll(a.points, -1, axis=0)
    b1, b2 = b.points, np.roll(b.points, -1, axis=0)
    hit = _first_crossing(a1, a2, b1, b2, tol, same=False)
    if hit is not None:
        what = "the outline" if hole_outer else "another hole"
        raise reader.fail(
            f"{a.describe()} touches or crosses {what}, {b.describe()}: "
            f"{_edge_text(a, hit[0], reader)} meets {_edge_text(b, hit[1], reader)}; expected "
            "holes strictly inside the outline and apart from each other"
        )
    if hole_outer:
        if not _points_inside(a.points[:1], b.points)[0]:
            raise reader.fail(
                f"{a.describe()} (near {reader.xy(a.points[0])}) lies outside the outline, "
                f"{b.describe()} (the contour of largest area); expected every other closed "
                "contour to be a hole inside the outline (select the outline's layer if the "
                "drawing holds other geometry)"
            )
        return
    for inner, container in ((a, b), (b, a)):
        if _points_inside(inner.points[:1], container.points)[0]:
            raise reader.fail(
                f"{inner.describe()} (near {reader.xy(inner.points[0])}) lies inside the hole "
                f"{container.describe()}; expected holes apart from each other (islands "
                "inside a cut-out are not supported)"
            )


def _edge_text(c: _Contour, k: int, reader: _Reader) -> str:
    p0 = c.points[k]
    p1 = c.points[(k + 1) % c.points.shape[0]]
    return f"segment {reader.xy(p0)}-{reader.xy(p1)} of {c.edge_labels[k]}"


def _points_text(points: Iterable[FloatArray], reader: _Reader) -> str:
    texts = [reader.xy(p) for p in points]
    return _listing(texts)
