"""Board map: surface temperature at the hottest instant with the outline, holes and parts.

Input: the result's :class:`~boardheat.checks.HotField` (nodal surface temperatures, K, on the
2D board mesh, m) and the board (outline, holes, part footprints). Output: a PNG. The nodal
values are drawn with linear (Gouraud) shading on the mesh triangles, which is exactly the
P1 finite-element field. Plan coordinates are shown in mm, temperatures in °C. When parts sit
on the bottom side, a second panel shows the bottom surface, seen through the board from the
top (not mirrored), on the same colour scale.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import numpy.typing as npt
from matplotlib import patheffects
from matplotlib.axes import Axes
from matplotlib.collections import Collection
from matplotlib.colors import Normalize
from matplotlib.tri import Triangulation

from boardheat.board import Board
from boardheat.checks import CheckResult, HotField
from boardheat.report.files import ReportError
from boardheat.report.style import HEAT_MAP, INK, new_figure, save_png
from boardheat.report.summary import array_to_celsius, fmt_s

FloatArray = npt.NDArray[np.float64]

MM = 1e3  # metres -> millimetres for the axes


def _closed(poly: FloatArray) -> FloatArray:
    """Return ``poly`` (n, 2) in mm with its first point repeated at the end."""
    mm: FloatArray = np.vstack([poly, poly[:1]]) * MM
    return mm


def _draw_surface(
    ax: Axes, hot: HotField, values_c: FloatArray, norm: Normalize, board: Board, side: str
) -> Collection:
    tri = Triangulation(hot.points[:, 0] * MM, hot.points[:, 1] * MM, hot.triangles)
    mappable = ax.tripcolor(tri, values_c, shading="gouraud", cmap=HEAT_MAP, norm=norm)
    outline = _closed(board.outline)
    ax.plot(outline[:, 0], outline[:, 1], color=INK, linewidth=1.4)
    for hole in board.holes:
        ring = _closed(hole)
        ax.fill(ring[:, 0], ring[:, 1], facecolor="white", edgecolor=INK, linewidth=1.0)
    halo = [patheffects.withStroke(linewidth=2.2, foreground="white")]
    for part in board.parts:
        ring = _closed(part.footprint_polygon())
        on_this_side = part.side == side
        width = 2.0 if part.refdes == hot.refdes else 1.0
        ax.plot(ring[:, 0], ring[:, 1], color=INK if on_this_side else "#5c6b78",
                linewidth=width, linestyle="-" if on_this_side else "--")  # fmt: skip
        cx, cy = part.center * MM
        weight = "bold" if part.refdes == hot.refdes else "normal"
        ax.text(cx, cy, part.refdes, ha="center", va="center", fontsize=7, color=INK,
                path_effects=halo, fontweight=weight)  # fmt: skip
    k = int(np.argmax(values_c))
    x, y = hot.points[k] * MM
    ax.plot([x], [y], marker="+", markersize=10, markeredgewidth=1.6, color="white")
    ax.annotate(f"{values_c[k]:.1f} °C", (x, y), xytext=(6, 6), textcoords="offset points",
                fontsize=8, color=INK, path_effects=halo)  # fmt: skip
    ax.set_aspect("equal")
    ax.set_xlabel("x (mm)", color=INK)
    ax.set_ylabel("y (mm)", color=INK)
    ax.tick_params(colors=INK, labelsize=8)
    for spine in ax.spines.values():
        spine.set_color("#aab4be")
    return mappable


def plot_board_map(result: CheckResult, board: Board, path: Path) -> Path:
    """Plot the board's surface temperature at the hottest instant with part footprints.

    Part outlines are solid on the shown side and dashed on the other; the part whose
    junction came closest to its limit is drawn bold; ``+`` marks the hottest point.

    Raises
    ------
    ReportError
        If the result holds no hot field or the field does not fit its mesh.
    """
    hot = result.hot
    if hot is None:
        raise ReportError(
            f"{result.board_name}/{result.variant}: found no board field at the hottest "
            "instant, expected a result with a hot field for the board map"
        )
    n = len(hot.points)
    if hot.top.shape != (n,) or hot.bottom.shape != (n,) or hot.points.shape != (n, 2):
        raise ReportError(
            f"{result.board_name}/{result.variant}: hot field: found {n} points, top "
            f"{hot.top.shape}, bottom {hot.bottom.shape}, expected (n, 2) and (n,) each"
        )
    top = array_to_celsius(hot.top)
    bottom = array_to_celsius(hot.bottom)
    two = any(p.side == "bottom" for p in board.parts)
    lo = float(min(top.min(), bottom.min()) if two else top.min())
    hi = float(max(top.max(), bottom.max()) if two else top.max())
    norm = Normalize(vmin=lo, vmax=hi if hi > lo else lo + 1e-6)
    span = np.ptp(board.outline, axis=0)
    aspect = float(span[1] / span[0]) if span[0] > 0 else 1.0
    panel_h = min(max(3.2, 7.0 * aspect), 9.0)
    fig = new_figure(8.6, panel_h * (2 if two else 1) + 0.8)
    axes = fig.subplots(2 if two else 1, 1, squeeze=False)[:, 0]
    mappable = _draw_surface(axes[0], hot, top, norm, board, "top")
    axes[0].set_title("top surface", fontsize=9, color=INK, loc="left")
    if two:
        _draw_surface(axes[1], hot, bottom, norm, board, "bottom")
        axes[1].set_title("bottom surface (seen from the top)", fontsize=9, color=INK,
                          loc="left")  # fmt: skip
    bar = fig.colorbar(mappable, ax=list(axes), shrink=0.85, pad=0.02)
    bar.set_label("temperature (°C)", color=INK)
    bar.ax.tick_params(labelsize=8, colors=INK)
    fig.suptitle(f"{board.name} · {result.variant} — board temperature at t = "
                 f"{fmt_s(hot.time)} (hottest instant, {hot.refdes})", color=INK,
                 fontsize=11, x=0.01, ha="left")  # fmt: skip
    return save_png(fig, path)
