"""Plot style of the report: our colours, figure sizes and the PNG writer (matplotlib, Agg).

Figures are built with :class:`matplotlib.figure.Figure` on an Agg canvas, never through
pyplot, so the report needs no display and keeps no global figure state. Every PNG is written
through :func:`boardheat.report.files.atomic_path`.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure

from boardheat.report.files import atomic_path

#: line colours, one per part (cycled); chosen to stay apart in colour and lightness
PALETTE: tuple[str, ...] = (
    "#0b6e99", "#c2410c", "#5b8c2a", "#8e3b8f", "#b8860b",
    "#1d9a8a", "#a4243b", "#4c5fd5", "#6b4f2a", "#d1478a",
)  # fmt: skip

#: verdict colours for plot titles and bars
STATUS_COLOURS = {"PASS": "#2f7d4f", "NEAR": "#b07d00", "FAIL": "#b3261e"}

#: ink for outlines, text and grid
INK = "#22303c"
GRID = "#d5dbe1"
AMBIENT = "#7d8a96"

#: the board-map colour scale, cool (dark slate) to hot (deep red) through sand
HEAT_MAP = LinearSegmentedColormap.from_list(
    "boardheat_heat",
    ["#1b2a41", "#24567a", "#2f8f9d", "#9cc5a1", "#f1d9a0", "#eea25b", "#d4583a", "#8c1c13"],
)

DPI = 120


def colour(i: int) -> str:
    """Return the line colour of the ``i``-th part."""
    return PALETTE[i % len(PALETTE)]


def new_figure(width: float, height: float) -> Figure:
    """Return an empty figure of ``width`` x ``height`` inches on an Agg canvas."""
    fig = Figure(figsize=(width, height), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def style_axes(ax: Axes) -> None:
    """Apply our axis look: light grid behind the data, no top/right frame."""
    ax.grid(True, color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(INK)
    ax.tick_params(colors=INK, labelsize=8)


def limit_lines(ax: Axes, limits: Sequence[tuple[float, str]], dash: float = 5.0) -> None:
    """Draw each limit as a dashed horizontal line in its own colour.

    Limits that coincide share one line whose dashes take turns in the colours of all of
    them, so no colour hides another.

    Parameters
    ----------
    limits : (value, colour) pairs, values in the axis unit
    dash : length of one dash, points
    """
    groups: dict[float, list[str]] = {}
    for value, tint in limits:
        groups.setdefault(value, []).append(tint)
    gap = 0.6 * dash
    for value, tints in groups.items():
        period = len(tints) * (dash + gap)
        for i, tint in enumerate(tints):
            offset = (period - i * (dash + gap)) % period
            ax.axhline(value, color=tint, linewidth=1.1, linestyle=(offset, (dash, period - dash)))


def save_png(fig: Figure, path: Path) -> Path:
    """Write ``fig`` as a PNG to ``path`` atomically and return ``path``."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=DPI, facecolor="white")
    return path
