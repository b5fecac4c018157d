"""Stackup stage: layers -> through-thickness nodes and effective orthotropic properties.

Input: a :class:`~boardheat.board.Board`. Output: a :class:`Stackup` holding the
through-thickness segmentation (nodes at every layer interface, thick dielectrics subdivided)
and, per segment, the base in-plane and through-plane conductivity and volumetric heat
capacity. A copper layer of copper area fraction phi is homogenised as (DESIGN.md, physics):

    k_xy = phi k_cu + (1 - phi) k_resin,xy                      (parallel rule)
    k_z  = 1 / (phi / k_cu + (1 - phi) / k_resin,z)             (series rule)
    rho c = phi (rho c)_cu + (1 - phi) (rho c)_resin            (volume average)

Via fields raise k_z over their span by the barrel copper area fraction f (parallel rule):
``k_z' = f k_cu + (1 - f) k_z``; the same for rho c.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from boardheat.board import Board, Layer

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]


@dataclass(frozen=True)
class GradedLayer:
    """Nodes a laminate holds only to resolve the shortest pulse, and how columns drop them.

    Attributes
    ----------
    side : the heated outer copper layer's side, ``"top"`` or ``"bottom"``
    drop : (n_drop,) int, through-thickness node indices that columns far from that side's
        parts do without
    above, below : (n_drop,) int, the kept nodes each dropped one is interpolated between
        (linearly in z)
    reach : m, how far heat spreads sideways in the heated copper during the shortest pulse,
        ``REACH_LENGTHS`` diffusion lengths sqrt(alpha_xy t) of that copper; columns farther
        than this from every footprint on ``side`` drop the nodes
    """

    side: str
    drop: IntArray
    above: IntArray
    below: IntArray
    reach: float


@dataclass(frozen=True)
class Stackup:
    """Through-thickness discretisation of the board, node 0 at the top surface.

    Attributes
    ----------
    z : (nz,) float, metres below the top surface of each node
    seg_layer : (nz - 1,) int, index of the layer each segment belongs to
    k_xy, k_z, rho_c : (nz - 1,) float, base properties of each segment,
        W/(m K), W/(m K), J/(m^3 K)
    layer_top, layer_bottom : (n_layers,) int, node index at the top / bottom of each layer
    layers : the board's layers, top to bottom
    graded : the laminates graded for the shortest pulse (see :class:`GradedLayer`)
    """

    z: FloatArray
    seg_layer: IntArray
    k_xy: FloatArray
    k_z: FloatArray
    rho_c: FloatArray
    layer_top: IntArray
    layer_bottom: IntArray
    layers: tuple[Layer, ...]
    graded: tuple[GradedLayer, ...] = ()

    @property
    def nz(self) -> int:
        """Return the number of through-thickness nodes."""
        return int(self.z.shape[0])

    @property
    def h(self) -> FloatArray:
        """Return the segment thicknesses, (nz - 1,) metres."""
        out: FloatArray = np.diff(self.z)
        return out

    @property
    def thickness(self) -> float:
        """Return the board thickness, m."""
        return float(self.z[-1])


def layer_properties(layer: Layer, fill: FloatArray | float) -> tuple[FloatArray, ...]:
    """Return (k_xy, k_z, rho_c) of ``layer`` at copper fill ``fill`` (any shape).

    Dielectric layers ignore ``fill``. See the module docstring for the mixing rules.
    """
    phi = np.asarray(fill, dtype=np.float64)
    m = layer.material
    if layer.kind == "dielectric":
        ones = np.ones_like(phi)
        return m.k_inplane * ones, m.k_through * ones, m.rho_c * ones
    r = layer.resin
    k_xy = phi * m.k_inplane + (1.0 - phi) * r.k_inplane
    k_z = 1.0 / (phi / m.k_through + (1.0 - phi) / r.k_through)
    rho_c = phi * m.rho_c + (1.0 - phi) * r.rho_c
    return k_xy, k_z, rho_c


def via_enhanced(
    k_z: FloatArray, rho_c: FloatArray, fraction: float, copper_k: float, copper_rho_c: float
) -> tuple[FloatArray, FloatArray]:
    """Return through-plane conductivity and heat capacity with via barrels (parallel rule)."""
    return (
        fraction * copper_k + (1.0 - fraction) * k_z,
        fraction * copper_rho_c + (1.0 - fraction) * rho_c,
    )


#: first graded element under a heated copper layer, as a fraction of the diffusion length
#: sqrt(alpha t) of the shortest pulse, and the growth ratio of the elements after it. Chosen
#: by measurement against the semi-infinite solid (tests/test_physics.py): for a pulse of
#: 2 ms, 20 ms and 200 ms into a copper-skinned laminate the surface rise at the end of the
#: pulse is within 1.3 %, 2.8 % and 4.8 % (first element one diffusion length, growth 3:
#: 3.1 %, 7.1 % and 10.2 %, two nodes fewer).
FIRST_FRACTION = 0.5
GRADING = 2.0
#: lateral reach of a pulse's heat in the heated copper, in diffusion lengths sqrt(alpha t):
#: beyond 3 of them the error-function profile of a suddenly heated half-space is below
#: erfc(1.5) = 3.4 % of its surface value (Carslaw & Jaeger sec. 2.4; recalled from memory)
REACH_LENGTHS = 3.0


def _coarse_subset(z: FloatArray, max_segment: float) -> npt.NDArray[np.bool_]:
    """Return a boolean mask of the nodes ``z`` (ascending, ends kept) a coarse column keeps.

    Greedy from the first node: keep the farthest node within ``max_segment`` of the last
    kept one, so that the coarse elements respect ``max_segment`` and nest in the graded ones.
    """
    keep = np.zeros(z.size, dtype=bool)
    keep[0] = keep[-1] = True
    last = 0
    while last < z.size - 1:
        reach = np.flatnonzero(z <= z[last] + max_segment * (1.0 + 1e-9))
        last = max(int(reach[-1]), last + 1)
        keep[last] = True
    return keep


def layer_nodes(
    layer: Layer, max_segment: float, diffusion_length: float | None, heated: str | None
) -> FloatArray:
    """Return relative node positions (0..1, top to bottom) inside one layer.

    Copper layers get one element (their through-plane resistance is negligible next to the
    dielectric's). A dielectric far from any heat source is split uniformly so that no element
    is thicker than ``max_segment``. A dielectric right under (``heated="top"``) or over
    (``"bottom"``) an outer copper layer carrying parts is graded geometrically away from that
    side: the first element is ``FIRST_FRACTION`` of the diffusion length sqrt(alpha t) of the
    shortest pulse, the next ones grow by ``GRADING``, so short pulses are resolved where their
    heat goes and the rest of the stack stays coarse.
    """
    if layer.kind == "copper":
        return np.array([0.0, 1.0])
    n_uniform = max(1, math.ceil(layer.thickness / max_segment - 1e-9))
    if heated is None or diffusion_length is None or diffusion_length >= layer.thickness / 2:
        return np.linspace(0.0, 1.0, n_uniform + 1)
    sizes = [min(FIRST_FRACTION * diffusion_length, max_segment)]
    while sum(sizes) < layer.thickness:  # ends: the sizes reach max_segment > 0
        sizes.append(min(sizes[-1] * GRADING, max_segment))
    # the sizes overshoot the layer by less than the last one: scale them all down to fit,
    # so that none exceeds max_segment and the first stays within the diffusion length
    widths = np.array(sizes) / sum(sizes)
    nodes = np.concatenate([[0.0], np.cumsum(widths)])
    nodes[-1] = 1.0
    return nodes if heated == "top" else (1.0 - nodes)[::-1]


def build_stackup(board: Board, shortest_time: float | None = None) -> Stackup:
    """Discretise the board's stackup through the thickness.

    Parameters
    ----------
    board : the validated board
    shortest_time : s, the shortest time scale to resolve (shortest pulse), or None
    """
    z = [0.0]
    seg_layer: list[int] = []
    props: list[tuple[float, float, float]] = []
    top, bottom = [], []
    graded: list[GradedLayer] = []
    layers = board.layers
    sides = {p.side for p in board.parts}
    last = len(layers) - 1
    for index, layer in enumerate(layers):
        diffusion = None
        if shortest_time is not None and shortest_time > 0:
            alpha = layer.material.k_through / layer.material.rho_c
            diffusion = math.sqrt(alpha * shortest_time)
        heated = None
        if index == 1 and "top" in sides and layers[0].kind == "copper":
            heated = "top"
        elif index == last - 1 and "bottom" in sides and layers[last].kind == "copper":
            heated = "bottom"
        nodes = layer_nodes(layer, board.run.max_segment, diffusion, heated)
        k_xy, k_z, rho_c = (float(v) for v in layer_properties(layer, layer.fill))
        if heated is not None and shortest_time is not None:
            first = len(z) - 1
            # an ungraded (uniform) split keeps all its nodes: none to drop
            keep = _coarse_subset(layer.thickness * nodes, board.run.max_segment)
            if not keep.all():
                kept = np.flatnonzero(keep)
                drop = np.flatnonzero(~keep)
                where = np.searchsorted(kept, drop)
                copper = layers[0 if heated == "top" else last].material
                graded.append(
                    GradedLayer(
                        side=heated,
                        drop=first + drop,
                        above=first + kept[where - 1],
                        below=first + kept[where],
                        reach=REACH_LENGTHS
                        * math.sqrt(copper.k_inplane / copper.rho_c * shortest_time),
                    )
                )
        top.append(len(z) - 1)
        z_top = z[-1]
        for i in range(1, len(nodes)):
            # the last node closes the layer exactly, so rounding never shifts interfaces
            z.append(
                z_top + layer.thickness * nodes[i]
                if i < len(nodes) - 1
                else z_top + layer.thickness
            )
            seg_layer.append(index)
            props.append((k_xy, k_z, rho_c))
        bottom.append(len(z) - 1)
    arr = np.array(props)
    out = Stackup(
        z=np.array(z),
        seg_layer=np.array(seg_layer, dtype=np.int64),
        k_xy=arr[:, 0].copy(),
        k_z=arr[:, 1].copy(),
        rho_c=arr[:, 2].copy(),
        layer_top=np.array(top, dtype=np.int64),
        layer_bottom=np.array(bottom, dtype=np.int64),
        layers=board.layers,
        graded=tuple(graded),
    )
    for a in (out.z, out.seg_layer, out.k_xy, out.k_z, out.rho_c, out.layer_top, out.layer_bottom):
        a.setflags(write=False)
    return out
