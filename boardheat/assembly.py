"""Assembly stage: Mesh x Stackup -> the semi-discrete heat balance M T' + A T = g + B p(t).

Input: a 2D :class:`~boardheat.meshing.Mesh`, a :class:`~boardheat.stackup.Stackup` and the
:class:`~boardheat.board.Board`. Output: a :class:`System` in CSR form.

The 3D element is the tensor-product prism of a P1 triangle and a linear through-thickness
segment. For ``rho c dT/dt = div(K grad T)``, K = diag(k_xy, k_xy, k_z), the Galerkin weak
form on one prism gives (DESIGN.md, Assembly)

    A_e = k_xy K2D (x) Mz  +  k_z M2D (x) Kz,        M_e = rho c M2D (x) Mz,

with K2D, M2D the triangle stiffness and mass and Kz = [[1,-1],[-1,1]]/h, Mz the segment
mass. Both M2D and Mz are row-sum lumped by default (vertex / trapezoidal quadrature, still
second-order accurate): the lumped capacity keeps the discrete maximum principle (no
undershoot below ambient after a sudden pulse), and lumping the transverse coupling keeps
A an M-matrix on non-obtuse meshes even for 35 um copper under 0.3 mm elements.
``consistent=True`` uses the exact (consistent) matrices instead, for verification.

DOFs are numbered ``node * nz + k`` (through-thickness index fastest, which reduces fill-in
of the sparse factorisation). Cauer junction ladders are appended as extra unknowns after
the finite-element DOFs; their last resistance ties into the footprint's surface nodes by
conductances shared by area.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

from boardheat.board import Board, Part
from boardheat.junction import ladder_matrices
from boardheat.meshing import Mesh
from boardheat.stackup import Stackup, layer_properties, via_enhanced

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]


@dataclass(frozen=True)
class System:
    """The assembled model ``M T' + A T = g + B p(t)``.

    Attributes
    ----------
    M : (n, n) CSR, J/K, heat capacity (diagonal when lumped)
    A : (n, n) CSR, W/K, conduction + convection + contacts + junction ladders
    g : (n,) W, constant load from ambient and fixed-temperature contacts
    B : (n, n_src) CSR, W per W, column j spreads part j's power (columns sum to 1)
    P : (n_probe, n) CSR, probe rows: ``part:<refdes>`` footprint mean temperature,
        ``junction:<refdes>`` junction node (ladder parts only), ``board:mean`` capacity-weighted
        mean temperature of every DOF (stored heat is ``total_capacity * (mean - T_ambient)``),
        ``board:loss`` boundary heat-flow coefficient row (W/K)
    probe_names : names of the rows of P
    loss_offset : W; boundary heat flow out of the board is ``P[board:loss] @ T - loss_offset``
    nz : through-thickness nodes; n_fe : finite-element nodes (ladder DOFs follow)
    prolong : (n_fe + n_ladder, n_dofs) CSR or None: the unknowns are the nodes kept after
        columns far from the heat sources dropped their graded nodes; all nodes = prolong @ T
    fe_capacity : J/K, heat capacity of the board laminate (without parts and ladders)
    total_capacity : J/K, every capacity in M (board, part bodies, junction ladders)
    surface_area : m^2, one face of the board (outline minus holes)
    seconds : wall time of the assembly, s
    """

    M: sp.csr_matrix
    A: sp.csr_matrix
    g: FloatArray
    B: sp.csr_matrix
    P: sp.csr_matrix
    probe_names: tuple[str, ...]
    loss_offset: float
    nz: int
    n_fe: int
    fe_capacity: float
    total_capacity: float
    surface_area: float
    seconds: float
    prolong: sp.csr_matrix | None = None

    @property
    def n_dofs(self) -> int:
        """Return the number of unknowns."""
        return int(self.A.shape[0])

    def fe_field(self, T: FloatArray) -> FloatArray:
        """Return the temperature (n_fe,) of every finite-element node, ``node * nz + k``.

        Where columns dropped graded nodes (``prolong``), those are interpolated back.
        """
        full = T if self.prolong is None else self.prolong @ T
        out: FloatArray = np.asarray(full[: self.n_fe], dtype=np.float64)
        return out

    def probe(self, name: str) -> int:
        """Return the row index of a named probe."""
        return self.probe_names.index(name)


def triangle_geometry(points: FloatArray, triangles: IntArray) -> tuple[FloatArray, FloatArray]:
    """Return triangle areas (n_tri,) m^2 and P1 basis gradients (n_tri, 3, 2) 1/m."""
    p = points[triangles]
    x, y = p[..., 0], p[..., 1]
    # gradient of the basis at node i is (y_j - y_k, x_k - x_j) / (2 area), (i, j, k) cyclic
    b = np.stack([y[:, 1] - y[:, 2], y[:, 2] - y[:, 0], y[:, 0] - y[:, 1]], axis=1)
    c = np.stack([x[:, 2] - x[:, 1], x[:, 0] - x[:, 2], x[:, 1] - x[:, 0]], axis=1)
    area = 0.5 * (b[:, 0] * c[:, 1] - b[:, 1] * c[:, 0])
    grads = np.stack([b, c], axis=2) / (2.0 * area)[:, None, None]
    return area, grads


def segment_properties(mesh: Mesh, stack: Stackup, board: Board) -> tuple[FloatArray, ...]:
    """Return k_xy, k_z, rho_c per (triangle, segment), each (n_tri, nz - 1), SI units.

    Starts from the stackup's base properties; pours replace the fill of their layer; via
    fields then raise k_z and rho c over their span (parallel rule).
    """
    n_tri = len(mesh.triangles)
    shape = (n_tri, stack.nz - 1)
    k_xy = np.broadcast_to(stack.k_xy, shape).copy()
    k_z = np.broadcast_to(stack.k_z, shape).copy()
    rho_c = np.broadcast_to(stack.rho_c, shape).copy()
    for pour in board.pours:
        tri = mesh.regions[f"pour:{pour.name}"]
        index = board.layer_index(pour.layer)
        segs = np.flatnonzero(stack.seg_layer == index)
        kx, kz, rc = layer_properties(board.layers[index], pour.fill)
        k_xy[np.ix_(tri, segs)] = kx
        k_z[np.ix_(tri, segs)] = kz
        rho_c[np.ix_(tri, segs)] = rc
    copper = next((layer.material for layer in board.layers if layer.kind == "copper"), None)
    for via in board.via_fields:
        tri = mesh.regions[f"via:{via.name}"]
        segs = np.flatnonzero(
            (stack.seg_layer >= via.first_layer) & (stack.seg_layer <= via.last_layer)
        )
        cu_k = copper.k_through if copper else 390.0
        cu_rc = copper.rho_c if copper else 3.44e6
        block = np.ix_(tri, segs)
        k_z[block], rho_c[block] = via_enhanced(
            k_z[block], rho_c[block], via.copper_fraction, cu_k, cu_rc
        )
    return k_xy, k_z, rho_c


def _face_weights(mesh: Mesh, tri: IntArray, areas: FloatArray) -> FloatArray:
    """Return lumped nodal areas (n_nodes,) m^2 of the triangles ``tri``."""
    w: FloatArray = np.bincount(
        mesh.triangles[tri].ravel(), np.repeat(areas[tri] / 3.0, 3), minlength=mesh.n_nodes
    ).astype(np.float64)
    return w


def _drop_far_levels(
    mesh: Mesh, stack: Stackup, board: Board, n: int
) -> tuple[sp.csr_matrix, IntArray] | None:
    """Return the prolongation from kept to all unknowns and the column of each kept one.

    The column is the mesh node (-1 for junction-ladder unknowns); None if every node is kept.

    A column (mesh node) farther than ``GradedLayer.reach`` from every footprint on the
    graded laminate's side does without the nodes that laminate holds only for the shortest
    pulse: there only slow behaviour matters (the issue of through-thickness resolution). Its
    dropped nodes follow the kept ones above and below linearly in z. Unknowns keep the order
    node-major, through-thickness fastest; junction-ladder unknowns stay last.
    """
    nz, n2 = stack.nz, mesh.n_nodes
    keep = np.ones((n2, nz), dtype=bool)
    links: list[tuple[IntArray, int, int, int]] = []  # (columns, dropped, above, below)
    for layer in stack.graded:
        near = np.zeros(n2, dtype=bool)
        for part in board.parts:
            if part.side == layer.side:
                near |= _within(mesh.points, part, layer.reach)
        far = np.flatnonzero(~near)
        if far.size == 0:
            continue
        keep[np.ix_(far, layer.drop)] = False
        links += [
            (far, int(k), int(a), int(b))
            for k, a, b in zip(layer.drop, layer.above, layer.below, strict=True)
        ]
    if keep.all():
        return None
    n_kept = int(keep.sum())
    index = np.full((n2, nz), -1, dtype=np.int64)
    index[keep] = np.arange(n_kept)
    fine = np.arange(n2)[:, None] * nz + np.arange(nz)[None, :]
    rows, cols, vals = [fine[keep]], [index[keep]], [np.ones(n_kept)]
    z = stack.z
    for columns, k, a, b in links:
        w_above = (z[b] - z[k]) / (z[b] - z[a])
        rows += [fine[columns, k], fine[columns, k]]
        cols += [index[columns, a], index[columns, b]]
        vals += [np.full(columns.size, w_above), np.full(columns.size, 1.0 - w_above)]
    n_fe = n2 * nz
    rows.append(np.arange(n_fe, n))
    cols.append(np.arange(n_kept, n_kept + n - n_fe))
    vals.append(np.ones(n - n_fe))
    prolong = sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(n, n_kept + n - n_fe),
    )
    column = np.concatenate([np.nonzero(keep)[0], np.full(n - n_fe, -1)]).astype(np.int64)
    return prolong, column


def _within(points: FloatArray, part: Part, distance: float) -> npt.NDArray[np.bool_]:
    """Return which points lie within ``distance`` of the part's footprint rectangle."""
    c, s = math.cos(part.rotation), math.sin(part.rotation)
    d = points - part.center
    along = np.abs(d[:, 0] * c + d[:, 1] * s) - part.footprint[0] / 2.0
    across = np.abs(-d[:, 0] * s + d[:, 1] * c) - part.footprint[1] / 2.0
    gap = np.hypot(np.maximum(along, 0.0), np.maximum(across, 0.0))
    out: npt.NDArray[np.bool_] = gap <= distance
    return out


def _lumped_in_columns(
    prolong: sp.csr_matrix, A_rest: sp.csr_matrix, column: IntArray
) -> sp.csr_matrix:
    """Return P^T A_rest P with couplings inside a column moved onto the diagonal.

    A_rest holds the in-plane conduction (K2D (x) Mz with Mz lumped: it couples equal levels
    of neighbouring columns only), the boundary terms and the junction ladders. Interpolating
    a dropped node between two kept ones of its column makes P^T A_rest P couple those two
    with a positive weight (the dropped node's diagonal times both interpolation weights),
    which would break the M-matrix property. Moving every such coupling onto the diagonal is
    the row-sum lumping of the through-thickness weights that the full model applies to Mz:
    row sums, symmetry and the sign pattern are kept. ``column`` is the mesh node of each
    kept unknown (-1 for junction-ladder unknowns).
    """
    R = (prolong.T @ A_rest @ prolong).tocoo()
    same = (R.row != R.col) & (column[R.row] == column[R.col]) & (column[R.row] >= 0)
    diagonal = np.bincount(R.row[same], weights=R.data[same], minlength=R.shape[0])
    kept = sp.coo_matrix((R.data[~same], (R.row[~same], R.col[~same])), shape=R.shape)
    return (kept + sp.diags(diagonal)).tocsr()


def assemble(
    mesh: Mesh, stack: Stackup, board: Board, consistent: bool = False, far_columns: bool = True
) -> System:
    """Assemble capacity, conductance, loads and probes of the board.

    Parameters
    ----------
    mesh, stack, board : outputs of the meshing, stackup and board stages
    consistent : use consistent instead of row-sum lumped matrices (verification only)
    far_columns : let columns far from the heat sources drop the nodes graded for the
        shortest pulse (see :func:`_drop_far_levels`); False keeps every node everywhere
    """
    start = time.perf_counter()
    nz = stack.nz
    ns = nz - 1
    n_fe = mesh.n_nodes * nz
    tri = mesh.triangles
    areas, grads = triangle_geometry(mesh.points, tri)
    k_xy, k_z, rho_c = segment_properties(mesh, stack, board)
    h = stack.h

    K2 = np.einsum("eid,ejd->eij", grads, grads) * areas[:, None, None]  # (n_tri, 3, 3), -
    if consistent:
        M2 = areas[:, None, None] * (np.ones((3, 3)) + np.eye(3))[None] / 12.0
        Mz = np.array([[2.0, 1.0], [1.0, 2.0]]) / 6.0  # times h
    else:
        M2 = areas[:, None, None] * np.eye(3)[None] / 3.0
        Mz = np.eye(2) / 2.0
    Kz = np.array([[1.0, -1.0], [-1.0, 1.0]])  # divided by h

    # local prism matrices (n_tri, ns, 3, 2, 3, 2) assembled segment by segment to bound memory;
    # the in-plane part (rows_l ...) and the through-thickness part (rows_t ...) apart, since
    # columns that drop graded nodes treat them differently (_drop_far_levels)
    rows_l: list[IntArray] = []
    cols_l: list[IntArray] = []
    vals_l: list[FloatArray] = []
    rows_t: list[IntArray] = []
    cols_t: list[IntArray] = []
    vals_t: list[FloatArray] = []
    node = tri[:, :, None] * nz  # (n_tri, 3, 1)
    for s in range(ns):
        dof = node + np.array([s, s + 1])[None, None, :]  # (n_tri, 3, 2)
        r = np.broadcast_to(dof[:, :, :, None, None], (len(tri), 3, 2, 3, 2))
        c = np.broadcast_to(dof[:, None, None, :, :], (len(tri), 3, 2, 3, 2))
        for loc, rows, cols, vals in (
            (np.einsum("e,eij,ab->eiajb", k_xy[:, s] * h[s], K2, Mz), rows_l, cols_l, vals_l),
            (np.einsum("e,eij,ab->eiajb", k_z[:, s] / h[s], M2, Kz), rows_t, cols_t, vals_t),
        ):
            keep = loc != 0.0
            rows.append(r[keep])
            cols.append(c[keep])
            vals.append(loc[keep])
    # capacity: rho c M2 (x) Mz
    cap_rows, cap_cols, cap_vals = [], [], []
    for s in range(ns):
        dof = node + np.array([s, s + 1])[None, None, :]
        loc = np.einsum("e,eij,ab->eiajb", rho_c[:, s] * h[s], M2, Mz)
        keep = loc != 0.0
        cap_rows.append(np.broadcast_to(dof[:, :, :, None, None], loc.shape)[keep])
        cap_cols.append(np.broadcast_to(dof[:, None, None, :, :], loc.shape)[keep])
        cap_vals.append(loc[keep])

    # convection on top, bottom and edges (lumped: keeps A an M-matrix), and mount contacts
    env = board.environment
    all_tri = np.arange(len(tri))
    node_area = _face_weights(mesh, all_tri, areas)
    loss = np.zeros(n_fe)
    nodes = np.arange(mesh.n_nodes)
    loss[nodes * nz] += env.h_top * node_area
    loss[nodes * nz + nz - 1] += env.h_bottom * node_area
    e0, e1 = mesh.edges[:, 0], mesh.edges[:, 1]
    length = np.linalg.norm(mesh.points[e0] - mesh.points[e1], axis=1)
    for s in range(ns):
        quarter = env.h_edge * length * h[s] / 4.0
        for n_ in (e0, e1):
            np.add.at(loss, n_ * nz + s, quarter)
            np.add.at(loss, n_ * nz + s + 1, quarter)
    g = loss * env.ambient
    fixed = np.zeros(n_fe)
    for mount in board.mounts:
        w = _face_weights(mesh, mesh.regions[f"mount:{mount.name}"], areas)
        w = w / w.sum()
        faces = {"top": [0], "bottom": [nz - 1], "both": [0, nz - 1]}[mount.side]
        for k in faces:
            contact = mount.conductance * w / len(faces)
            fixed[nodes * nz + k] += contact
            g[nodes * nz + k] += contact * mount.temperature
    surface_area = float(node_area.sum())

    # parts: power spread over the footprint on the outer layer of the part's side
    n_parts = len(board.parts)
    ladders = [p for p in board.parts if p.junction is not None]
    n_lad = sum(len(p.junction.R) for p in ladders if p.junction is not None)
    n = n_fe + n_lad
    b_rows, b_cols, b_vals = [], [], []
    p_rows, p_cols, p_vals = [], [], []
    names: list[str] = []
    extra_cap = np.zeros(n)
    lad_rows, lad_cols, lad_vals = [], [], []
    next_dof = n_fe
    for j, part in enumerate(board.parts):
        w = _face_weights(mesh, mesh.regions[f"part:{part.refdes}"], areas)
        at = np.flatnonzero(w)
        w = w[at] / w[at].sum()
        k = 0 if part.side == "top" else nz - 1
        fp_dofs = at * nz + k
        p_rows.append(np.full(at.size, j))
        p_cols.append(fp_dofs)
        p_vals.append(w)
        names.append(f"part:{part.refdes}")
        extra_cap[fp_dofs] += part.body_capacity * w
        if part.junction is None:
            b_rows.append(fp_dofs)
            b_cols.append(np.full(at.size, j))
            b_vals.append(w)
            continue
        C, G, g_out = ladder_matrices(part.junction)
        m = len(C)
        lad = np.arange(next_dof, next_dof + m)
        next_dof += m
        extra_cap[lad] += C
        gi, gj = np.nonzero(G)
        lad_rows.append(lad[gi])
        lad_cols.append(lad[gj])
        lad_vals.append(G[gi, gj])
        # last ladder node <-> footprint nodes, conductance g_out shared by area
        last = lad[-1]
        lad_rows += [np.full(at.size, last), fp_dofs, fp_dofs]
        lad_cols += [fp_dofs, np.full(at.size, last), fp_dofs]
        lad_vals += [-g_out * w, -g_out * w, g_out * w]
        b_rows.append(np.array([lad[0]]))
        b_cols.append(np.array([j]))
        b_vals.append(np.array([1.0]))
    row = n_parts
    next_dof = n_fe
    for part in board.parts:
        if part.junction is None:
            continue
        p_rows.append(np.array([row]))
        p_cols.append(np.array([next_dof]))
        p_vals.append(np.array([1.0]))
        names.append(f"junction:{part.refdes}")
        next_dof += len(part.junction.R)
        row += 1

    M_fe = sp.coo_matrix(
        (np.concatenate(cap_vals), (np.concatenate(cap_rows), np.concatenate(cap_cols))),
        shape=(n, n),
    ).tocsr()
    cap_fe = np.asarray(M_fe.sum(axis=1)).ravel()
    fe_capacity = float(cap_fe.sum())
    M = (M_fe + sp.diags(extra_cap)).tocsr()
    if not consistent:
        M = sp.diags(M.diagonal()).tocsr()
    boundary = np.zeros(n)
    boundary[:n_fe] = loss + fixed
    g_full = np.zeros(n)
    g_full[:n_fe] = g
    A_rest = sp.coo_matrix(
        (
            np.concatenate([*vals_l, *lad_vals, boundary]),
            (
                np.concatenate([*rows_l, *lad_rows, np.arange(n)]),
                np.concatenate([*cols_l, *lad_cols, np.arange(n)]),
            ),
        ),
        shape=(n, n),
    ).tocsr()
    A_through = sp.coo_matrix(
        (np.concatenate(vals_t), (np.concatenate(rows_t), np.concatenate(cols_t))), shape=(n, n)
    ).tocsr()
    B = sp.coo_matrix(
        (np.concatenate(b_vals), (np.concatenate(b_rows), np.concatenate(b_cols))),
        shape=(n, n_parts),
    ).tocsr()
    reduction = _drop_far_levels(mesh, stack, board, n) if far_columns else None
    prolong = None
    if reduction is None:
        A = (A_through + A_rest).tocsr()
    else:
        prolong, column = reduction
        A = (prolong.T @ A_through @ prolong + _lumped_in_columns(prolong, A_rest, column)).tocsr()
        M = (prolong.T @ M @ prolong) if consistent else sp.diags(prolong.T @ M.diagonal())
        M = M.tocsr()
        g_full = prolong.T @ g_full
        B = (prolong.T @ B).tocsr()
    A.sum_duplicates()
    # board-level rows: capacity-weighted mean temperature and boundary heat-flow coefficient
    cap_all = np.asarray(M.sum(axis=1)).ravel()
    total_capacity = float(cap_all.sum())
    mean_row = cap_all / total_capacity
    loss_row = boundary if prolong is None else prolong.T @ boundary
    part_rows = sp.coo_matrix(
        (np.concatenate(p_vals), (np.concatenate(p_rows), np.concatenate(p_cols))), shape=(row, n)
    ).tocsr()
    P = sp.vstack(
        [
            part_rows if prolong is None else part_rows @ prolong,
            sp.csr_matrix(mean_row[None, :]),
            sp.csr_matrix(loss_row[None, :]),
        ]
    ).tocsr()
    names += ["board:mean", "board:loss"]
    for arr in (g_full,):
        arr.setflags(write=False)
    return System(
        M=M,
        A=A,
        g=g_full,
        B=B,
        P=P,
        probe_names=tuple(names),
        loss_offset=float(g_full.sum()),
        nz=nz,
        n_fe=n_fe,
        fe_capacity=fe_capacity,
        total_capacity=total_capacity,
        surface_area=surface_area,
        seconds=time.perf_counter() - start,
        prolong=prolong,
    )
