"""Meshing stage: Board -> gmsh (OpenCASCADE kernel) -> 2D triangle mesh with named regions.

Input: a :class:`~boardheat.board.Board`. Output: a :class:`Mesh` of P1 triangles over the
board outline (holes cut out) in which every part footprint, copper pour, via field and
mounting contact is an embedded region (a union of whole triangles), handed on as a
:class:`meshio.Mesh` with one cell set per region. The 3D model is the tensor product of this
mesh with the stackup's through-thickness segments (see :mod:`boardheat.assembly`).

Element sizes follow the geometry: a far-field size from the board's extent, a fine size in
and around each heat source from its footprint (a third of its smaller side), grown smoothly
(gmsh Distance + Threshold fields), all divided by ``run.mesh_refinement``.
"""

from __future__ import annotations

import contextlib
import logging
import math
import time
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field

import meshio
import numpy as np
import numpy.typing as npt

from boardheat.board import Board
from boardheat.errors import MeshingError, MeshWarning
from boardheat.stackup import layer_properties

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
log = logging.getLogger(__name__)

MM = 1e-3

#: largest triangle angle accepted without a warning, degrees. The P1 interpolation error of
#: gradients (and so of heat flux) is bounded only while the largest angle stays below some
#: fixed bound under pi (the maximum angle condition: Babuska & Aziz, "On the angle condition
#: in the finite element method", SIAM J. Numer. Anal. 13 (1976) 214-226); 170 degrees is
#: our own choice of how near to flat counts as a sliver.
MAX_ANGLE_DEG = 170.0


@dataclass(frozen=True)
class Mesh:
    """A 2D board mesh.

    Attributes
    ----------
    points : (n_nodes, 2) float, metres
    triangles : (n_tri, 3) int, counter-clockwise node indices
    edges : (n_edges, 2) int, boundary segments of the outline and of every hole
    regions : name -> (k,) int triangle indices; names are ``part:<refdes>``,
        ``pour:<name>``, ``via:<name>``, ``mount:<name>``
    seconds : wall time spent meshing, s
    """

    points: FloatArray
    triangles: IntArray
    edges: IntArray
    regions: dict[str, IntArray]
    seconds: float = 0.0
    sizes: dict[str, float] = field(default_factory=dict)

    @property
    def n_nodes(self) -> int:
        """Return the number of 2D nodes."""
        return int(self.points.shape[0])

    def triangle_areas(self) -> FloatArray:
        """Return the area of every triangle, (n_tri,) m^2."""
        p = self.points[self.triangles]
        d1, d2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
        out: FloatArray = 0.5 * (d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0])
        return out

    def to_meshio(self) -> meshio.Mesh:
        """Return the mesh as a meshio object with one cell set per region."""
        pts = np.column_stack([self.points, np.zeros(self.n_nodes)])
        return meshio.Mesh(
            pts,
            [("triangle", np.asarray(self.triangles))],
            cell_sets={name: [np.asarray(idx)] for name, idx in self.regions.items()},
        )


def _features(board: Board) -> list[tuple[str, FloatArray]]:
    feats: list[tuple[str, FloatArray]] = []
    for part in board.parts:
        feats.append((f"part:{part.refdes}", part.footprint_polygon()))
    feats += [(f"pour:{p.name}", p.region.polygon) for p in board.pours]
    feats += [(f"via:{v.name}", v.region.polygon) for v in board.via_fields]
    feats += [(f"mount:{m.name}", m.region.polygon) for m in board.mounts]
    return feats


def element_sizes(board: Board) -> dict[str, float]:
    """Return the far-field and per-part element sizes, metres, from the geometry alone.

    The far field is resolved against the board's in-plane spreading (fin) length
    ``L = sqrt(sum(k_xy t) / (h_top + h_bottom))``, over which a hot spot's rise decays: a
    quarter of it, but no coarser than a twelfth of the square root of the board area nor a
    sixth of the smaller outline extent, and no finer than the board thickness. A part's size
    is a third of its footprint's smaller side, never below a tenth of the board thickness
    (finer in-plane than that adds nothing to a prism model whose thinnest dimension is through
    the board). All sizes are divided by ``run.mesh_refinement``.
    """
    ext = board.outline.max(axis=0) - board.outline.min(axis=0)
    scale = board.run.mesh_refinement
    sheet = sum(
        float(layer_properties(layer, layer.fill)[0]) * layer.thickness for layer in board.layers
    )
    h_sum = board.environment.h_top + board.environment.h_bottom
    spread = math.sqrt(sheet / h_sum) if h_sum > 0 else math.inf
    far = min(math.sqrt(board.area) / 12.0, float(ext.min()) / 6.0, spread / 4.0)
    # never finer than the board is thick: a hot spot cannot vary faster than that in-plane
    far = max(far, board.thickness) / scale
    sizes = {"far": far}
    floor = 0.1 * board.thickness
    for part in board.parts:
        sizes[f"part:{part.refdes}"] = max(float(part.footprint.min()) / 3.0 / scale, floor)
    for m in board.mounts:
        d = math.sqrt(m.region.area)
        sizes[f"mount:{m.name}"] = max(d / 3.0 / scale, floor)
    return sizes


@contextlib.contextmanager
def _gmsh_session(verbose: bool) -> Iterator[object]:
    import gmsh

    gmsh.initialize(interruptible=False)
    try:
        gmsh.option.setNumber("General.Terminal", 1 if verbose else 0)
        gmsh.option.setNumber("General.Verbosity", 5 if verbose else 0)
        gmsh.model.add("board")
        yield gmsh
    finally:
        gmsh.finalize()


def _add_polygon(occ: object, poly_mm: FloatArray) -> int:
    pts = [occ.addPoint(float(x), float(y), 0.0) for x, y in poly_mm]  # type: ignore[attr-defined]
    lines = [occ.addLine(pts[i], pts[(i + 1) % len(pts)]) for i in range(len(pts))]  # type: ignore[attr-defined]
    loop = occ.addCurveLoop(lines)  # type: ignore[attr-defined]
    return int(occ.addPlaneSurface([loop]))  # type: ignore[attr-defined]


def build_mesh(board: Board, verbose: bool = False) -> Mesh:
    """Mesh the board plane with every footprint, pour, via field and contact embedded.

    Raises
    ------
    MeshingError
        if gmsh fails, with gmsh's own message chained.
    """
    start = time.perf_counter()
    feats = _features(board)
    sizes = element_sizes(board)
    try:
        with _gmsh_session(verbose) as gmsh:
            points, triangles, edges, regions = _mesh_with_gmsh(gmsh, board, feats, sizes)
    except MeshingError:
        raise
    except Exception as err:
        raise MeshingError(f"{board.source}: gmsh failed to mesh the board: {err}") from err
    for a in (points, triangles, edges, *regions.values()):
        a.setflags(write=False)
    mesh = Mesh(points, triangles, edges, regions, time.perf_counter() - start, sizes)
    log.info("mesh: %d nodes, %d triangles in %.2f s", mesh.n_nodes, len(triangles), mesh.seconds)
    sliver = sliver_report(mesh)
    if sliver:
        warnings.warn(f"{board.source}: {sliver}", MeshWarning, stacklevel=2)
    return mesh


def largest_angles(points: FloatArray, triangles: IntArray) -> FloatArray:
    """Return the largest interior angle of every triangle, degrees, (n_tri,)."""
    p = points[triangles]
    # the largest angle faces the longest side: law of cosines on the three side lengths
    sides = np.stack(
        [np.linalg.norm(p[:, (i + 1) % 3] - p[:, (i + 2) % 3], axis=1) for i in range(3)]
    )
    sides.sort(axis=0)
    a, b, c = sides  # c the longest
    cos = np.clip((a * a + b * b - c * c) / (2.0 * a * b), -1.0, 1.0)
    out: FloatArray = np.degrees(np.arccos(cos))
    return out


def sliver_report(mesh: Mesh) -> str | None:
    """Return a one-line description of the triangles flatter than ``MAX_ANGLE_DEG``, or None.

    Such slivers appear where two region outlines touch or nearly touch (a circle inscribed
    in a rectangle, say): the mesh must fill the cusp between them. The line names the worst
    one's position and the regions around it, so that the user can move the outlines apart.
    """
    angles = largest_angles(mesh.points, mesh.triangles)
    flat = np.flatnonzero(angles > MAX_ANGLE_DEG)
    if flat.size == 0:
        return None
    worst = int(flat[np.argmax(angles[flat])])
    x, y = mesh.points[mesh.triangles[worst]].mean(axis=0) / MM
    around = np.flatnonzero(np.isin(mesh.triangles, mesh.triangles[worst]).any(axis=1))
    names = sorted(name for name, tri in mesh.regions.items() if np.isin(around, tri).any())
    beside = f", beside {' and '.join(names)}" if names else ""
    return (
        f"mesh: {flat.size} triangle(s) with an angle above {MAX_ANGLE_DEG:g} degrees (largest "
        f"{angles[worst]:.1f} at x={x:.2f} mm, y={y:.2f} mm{beside}); region outlines that touch "
        "or nearly touch force such slivers, where the conduction is less accurate: move the "
        "outlines apart or nest one inside the other with a margin"
    )


def _mesh_with_gmsh(
    gmsh: object, board: Board, feats: list[tuple[str, FloatArray]], sizes: dict[str, float]
) -> tuple[FloatArray, IntArray, IntArray, dict[str, IntArray]]:
    g: object = gmsh
    occ = g.model.occ  # type: ignore[attr-defined]
    model = g.model  # type: ignore[attr-defined]
    outer = _add_polygon(occ, board.outline / MM)
    board_dt = [(2, outer)]
    if board.holes:
        cutters = [(2, _add_polygon(occ, h / MM)) for h in board.holes]
        board_dt, _ = occ.cut(board_dt, cutters)
    feat_tags = [_add_polygon(occ, poly / MM) for _, poly in feats]
    n_board = len(board_dt)
    if feat_tags:
        _, out_map = occ.fragment(board_dt, [(2, t) for t in feat_tags])
    else:
        out_map = [[dt] for dt in board_dt]
    occ.synchronize()
    board_pieces = {t for entry in out_map[:n_board] for (d, t) in entry if d == 2}
    all_surfaces = {t for (_, t) in model.getEntities(2)}
    stray = sorted(all_surfaces - board_pieces)
    if stray:
        occ.remove([(2, t) for t in stray], recursive=True)
        occ.synchronize()
    feat_pieces = {
        name: sorted({t for (d, t) in out_map[n_board + i] if d == 2} & board_pieces)
        for i, (name, _) in enumerate(feats)
    }
    # size field: fine in and near each source (Distance to its surfaces), coarse far away
    fields = []
    far = sizes["far"] / MM
    for name, pieces in feat_pieces.items():
        if name not in sizes or not pieces:
            continue
        fine = sizes[name] / MM
        dist = model.mesh.field.add("Distance")
        model.mesh.field.setNumbers(dist, "SurfacesList", pieces)
        model.mesh.field.setNumber(dist, "Sampling", 20)
        thr = model.mesh.field.add("Threshold")
        model.mesh.field.setNumber(thr, "InField", dist)
        model.mesh.field.setNumber(thr, "SizeMin", fine)
        model.mesh.field.setNumber(thr, "SizeMax", far)
        model.mesh.field.setNumber(thr, "DistMin", 0.5 * fine)
        # growth ~ 1.25 per element: reach the far size over a distance of ~ 4 x far
        model.mesh.field.setNumber(thr, "DistMax", 0.5 * fine + 4.0 * far)
        fields.append(thr)
    if fields:
        fmin = model.mesh.field.add("Min")
        model.mesh.field.setNumbers(fmin, "FieldsList", fields)
        model.mesh.field.setAsBackgroundMesh(fmin)
    g.option.setNumber("Mesh.MeshSizeMax", far)  # type: ignore[attr-defined]
    g.option.setNumber("Mesh.MeshSizeFromPoints", 0)  # type: ignore[attr-defined]
    g.option.setNumber("Mesh.MeshSizeFromCurvature", 0)  # type: ignore[attr-defined]
    g.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)  # type: ignore[attr-defined]
    g.option.setNumber("Mesh.Algorithm", 6)  # type: ignore[attr-defined]
    model.mesh.generate(2)

    node_tags, coords, _ = model.mesh.getNodes()
    index = np.full(int(node_tags.max()) + 1, -1, dtype=np.int64)
    index[node_tags.astype(np.int64)] = np.arange(len(node_tags))
    xy = coords.reshape(-1, 3)[:, :2] * MM
    tri_of_surface: dict[int, IntArray] = {}
    chunks = []
    offset = 0
    for s in sorted(board_pieces):
        types, _, nodes = model.mesh.getElements(2, s)
        tri = np.zeros((0, 3), dtype=np.int64)
        for etype, enodes in zip(types, nodes, strict=True):
            if etype != 2:
                raise MeshingError(f"{board.source}: gmsh produced element type {etype}")
            tri = index[np.asarray(enodes, dtype=np.int64).reshape(-1, 3)]
        chunks.append(tri)
        tri_of_surface[s] = np.arange(offset, offset + len(tri))
        offset += len(tri)
    triangles = np.concatenate(chunks)
    # drop nodes not used by a triangle (e.g. of removed stray surfaces) and renumber
    used = np.unique(triangles)
    renum = np.full(len(xy), -1, dtype=np.int64)
    renum[used] = np.arange(len(used))
    triangles = renum[triangles]
    points = np.ascontiguousarray(xy[used])
    p = points[triangles]
    signed = (p[:, 1, 0] - p[:, 0, 0]) * (p[:, 2, 1] - p[:, 0, 1]) - (p[:, 1, 1] - p[:, 0, 1]) * (
        p[:, 2, 0] - p[:, 0, 0]
    )
    flip = signed < 0
    triangles[flip] = triangles[flip][:, [0, 2, 1]]
    if np.any(signed == 0):
        raise MeshingError(f"{board.source}: gmsh produced degenerate triangles")
    # boundary edges: triangle edges used by exactly one triangle
    all_edges = np.sort(triangles[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2), axis=1)
    uniq, counts = np.unique(all_edges, axis=0, return_counts=True)
    edges = uniq[counts == 1]
    regions = {
        name: np.concatenate([tri_of_surface[s] for s in pieces]) if pieces else np.zeros(0, int)
        for name, pieces in feat_pieces.items()
    }
    for name, idx in regions.items():
        if name.startswith("part:") and idx.size == 0:
            raise MeshingError(f"{board.source}: {name} footprint did not survive meshing")
    return points, triangles.astype(np.int64), edges.astype(np.int64), regions
