"""Time plots: junction temperatures with limit lines, power schedules, variant overlays.

Input: check results (kelvin, seconds) and the board's power schedules. Output: PNG files.
Temperatures are drawn in °C. A schedule is drawn exactly, not sampled: P(t) is linear
between its breakpoints, so the polyline through the left and right values at every
breakpoint is P itself. The time axis is logarithmic when the breakpoints span more than
:data:`LOG_DECADES` decades up to the end of the run (a fast pulse early in a long run),
otherwise linear.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import numpy.typing as npt
from matplotlib.axes import Axes

from boardheat.board import Board, Part
from boardheat.checks import CheckResult
from boardheat.report.files import ReportError, ensure_dir
from boardheat.report.style import (
    AMBIENT,
    INK,
    STATUS_COLOURS,
    colour,
    limit_lines,
    new_figure,
    save_png,
    style_axes,
)
from boardheat.report.summary import array_to_celsius, fmt_s, to_celsius
from boardheat.schedules import Schedule

FloatArray = npt.NDArray[np.float64]

#: decades between the first breakpoint and the end of the run above which time is logarithmic
LOG_DECADES = 3.0
#: breakpoints per axis above which they are marked only by ticks, not by lines
MAX_MARKED = 60


def schedule_polyline(
    schedule: Schedule, t_end: float, t_start: float = 0.0
) -> tuple[FloatArray, FloatArray]:
    """Return the exact polyline of P(t) on [t_start, t_end].

    Returns
    -------
    t : (m,) float ndarray, seconds
    p : (m,) float ndarray, watts
        Each breakpoint appears twice, with the value from the left then from the right.

    Examples
    --------
    >>> from boardheat.schedules import Schedule
    >>> s = Schedule(np.array([1.0, 2.0]), np.array([0.0, 3.0]), np.array([3.0, 0.0]))
    >>> t, p = schedule_polyline(s, 4.0)
    >>> t.tolist(), p.tolist()
    ([0.0, 1.0, 1.0, 2.0, 2.0, 4.0], [0.0, 0.0, 3.0, 3.0, 0.0, 0.0])
    """
    bp = schedule.breakpoints(t_end)
    bp = bp[(bp > t_start) & (bp < t_end)]
    t = np.concatenate(([t_start], np.repeat(bp, 2), [t_end]))
    left = schedule.value(bp, side="left")
    right = schedule.value(bp, side="right")
    inner = np.column_stack((left, right)).ravel()
    p = np.concatenate(([schedule.value(t_start)], inner, [schedule.value(t_end, side="left")]))
    return t, p


def log_time_start(schedules: Sequence[Schedule], t_end: float) -> float | None:
    """Return the left end of a logarithmic time axis, s, or None for a linear axis.

    Logarithmic when ``t_end`` over the first breakpoint exceeds 10**LOG_DECADES; the axis
    then starts one decade before that breakpoint.

    >>> from boardheat.schedules import Schedule
    >>> pulse = Schedule(np.array([1e-3, 2e-3]), np.array([0.0, 5.0]), np.array([5.0, 0.0]))
    >>> log_time_start([pulse], 10.0), log_time_start([pulse], 0.5)
    (0.0001, None)
    """
    if not (t_end > 0 and math.isfinite(t_end)) or not schedules:
        return None
    bp = np.concatenate([s.breakpoints(t_end) for s in schedules])
    bp = bp[bp > 0]
    if bp.size == 0:
        return None
    first = float(bp.min())
    return first / 10.0 if math.log10(t_end / first) > LOG_DECADES else None


def parts_of(board: Board, refdes: Sequence[str]) -> list[Part]:
    """Return the board's parts in the order of ``refdes``; a clear error if one is missing."""
    known = {p.refdes: p for p in board.parts}
    missing = [r for r in refdes if r not in known]
    if missing:
        raise ReportError(
            f"board {board.name!r}: found no part {missing[0]!r} that the result lists; "
            f"expected the board the result was computed from (parts: "
            f"{', '.join(known) or 'none'})"
        )
    return [known[r] for r in refdes]


def _time_axis(ax: Axes, start: float | None, t_end: float) -> None:
    if start is not None:
        ax.set_xscale("log")
        ax.set_xlim(start, t_end)
    else:
        ax.set_xlim(0.0, t_end)


def _mark_breakpoints(ax: Axes, bp: FloatArray, tint: str) -> None:
    """Mark breakpoints by ticks on the time axis (and light lines when there are few)."""
    if bp.size == 0:
        return
    ax.plot(bp, np.zeros_like(bp), linestyle="none", marker="|", markersize=7, color=tint,
            transform=ax.get_xaxis_transform(), clip_on=False)  # fmt: skip
    if bp.size <= MAX_MARKED:
        for t in bp:
            ax.axvline(t, color=tint, linewidth=0.5, alpha=0.35, linestyle=":")


def _draw_power(ax: Axes, parts: Sequence[Part], t_end: float, start: float | None) -> None:
    for i, part in enumerate(parts):
        t, p = schedule_polyline(part.schedule, t_end, start or 0.0)
        ax.plot(t, p, color=colour(i), linewidth=1.2, label=part.refdes)
    ax.set_ylabel("power (W)", color=INK)
    ax.set_ylim(bottom=0.0)


def plot_junctions(result: CheckResult, board: Board, path: Path) -> Path:
    """Plot every part's junction temperature with its limit, and the power schedules.

    Upper panel: Tj(t) in °C, each part's Tj max dashed in the same colour, its peak marked.
    Lower panel: the power schedules (exact). A steady-state result is drawn as bars of the
    steady Tj against each limit instead.
    """
    tr = result.traces
    if not tr.refdes:
        raise ReportError(f"{result.board_name}/{result.variant}: found no parts to plot")
    parts = parts_of(board, tr.refdes)
    if result.steady or len(tr.t) < 2:
        return _plot_steady(result, path)
    t_end = float(result.duration)
    start = log_time_start([p.schedule for p in parts], t_end)
    fig = new_figure(9.0, 6.6)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3.0, 1.3])
    keep = tr.t > 0 if start is not None else np.ones(len(tr.t), dtype=bool)
    t = tr.t[keep]
    tj = array_to_celsius(tr.tj[keep])
    by_refdes = {p.refdes: p for p in result.parts}
    limits = []
    for j, refdes in enumerate(tr.refdes):
        c = colour(j)
        top.plot(t, tj[:, j], color=c, linewidth=1.5, label=refdes)
        pr = by_refdes.get(refdes)
        if pr is not None:
            limits.append((to_celsius(pr.tj_max), c))
            top.plot([pr.t_peak], [to_celsius(pr.tj_peak)], marker="o", markersize=4,
                     color=c, markeredgecolor="white", linestyle="none")  # fmt: skip
    limit_lines(top, limits)
    top.axhline(to_celsius(result.ambient), color=AMBIENT, linewidth=0.8, linestyle=":")
    top.set_ylabel("junction temperature (°C)", color=INK)
    top.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False,
               title="dashed: Tj max", title_fontsize=7)  # fmt: skip
    top.set_title(f"{board.name} · {result.variant} — junction temperatures, verdict "
                  f"{result.verdict}", color=STATUS_COLOURS[result.verdict], fontsize=11,
                  loc="left")  # fmt: skip
    _draw_power(bottom, parts, t_end, start)
    bp = np.unique(np.concatenate([np.zeros(0)] + [p.schedule.breakpoints(t_end) for p in parts]))
    _mark_breakpoints(bottom, bp[bp < t_end], INK)
    bottom.set_xlabel("time (s)", color=INK)
    for ax in (top, bottom):
        style_axes(ax)
    _time_axis(bottom, start, t_end)
    return save_png(fig, path)


def _plot_steady(result: CheckResult, path: Path) -> Path:
    """Bars of the steady junction temperature per part from ambient, limits dashed in ink."""
    fig = new_figure(max(5.0, 1.0 + 0.7 * len(result.parts)), 4.8)
    ax = fig.subplots()
    ambient = to_celsius(result.ambient)
    for i, p in enumerate(result.parts):
        c = colour(i)
        ax.bar(i, to_celsius(p.tj_peak) - ambient, bottom=ambient, color=c, width=0.6)
        # the limit in ink above the bar: in the bar's own colour it would vanish into it
        ax.hlines(to_celsius(p.tj_max), i - 0.42, i + 0.42, colors=INK, linestyles="--",
                  linewidth=1.3, zorder=3)  # fmt: skip
        ax.text(i, to_celsius(p.tj_peak), f"{to_celsius(p.tj_peak):.1f}", ha="center",
                va="bottom", fontsize=8, color=INK)  # fmt: skip
    ax.set_xticks(range(len(result.parts)), [p.refdes for p in result.parts])
    ax.axhline(ambient, color=AMBIENT, linewidth=0.8, linestyle=":")
    ax.set_ylabel("steady junction temperature (°C)", color=INK)
    ax.set_title(f"{result.board_name} · {result.variant} — steady state, dashed: Tj max, "
                 f"verdict {result.verdict}", color=STATUS_COLOURS[result.verdict],
                 fontsize=11, loc="left")  # fmt: skip
    style_axes(ax)
    return save_png(fig, path)


def plot_schedules(board: Board, path: Path, t_end: float | None = None) -> Path:
    """Plot each part's power versus time, one axis per part, breakpoints marked.

    For checking a power sequence before solving. Drawn exactly from the breakpoints.

    Parameters
    ----------
    board : the board whose parts' schedules to draw
    path : the PNG to write (its folder is created if needed)
    t_end : end of the time axis, s; the board's run duration by default

    Returns
    -------
    Path
        ``path``.
    """
    end = board.run.duration if t_end is None else t_end
    if not (isinstance(end, int | float) and math.isfinite(end) and end > 0):
        raise ReportError(f"plot_schedules t_end: found {end!r}, expected a time > 0 s")
    if not board.parts:
        raise ReportError(f"board {board.name!r}: found no parts, expected at least one")
    end = float(end)
    path = Path(path)
    ensure_dir(path.parent)
    start = log_time_start([p.schedule for p in board.parts], end)
    n = len(board.parts)
    fig = new_figure(9.0, min(1.1 + 1.35 * n, 120.0))
    axes = np.atleast_1d(fig.subplots(n, 1, sharex=True, squeeze=False)[:, 0])
    for i, (ax, part) in enumerate(zip(axes, board.parts, strict=True)):
        t, p = schedule_polyline(part.schedule, end, start or 0.0)
        ax.fill_between(t, p, color=colour(i), alpha=0.15, linewidth=0)
        ax.plot(t, p, color=colour(i), linewidth=1.3)
        bp = part.schedule.breakpoints(end)
        _mark_breakpoints(ax, bp[bp < end], colour(i))
        ax.set_ylim(0.0, max(float(p.max()), 1e-12) * 1.15)
        ax.set_ylabel("W", color=INK)
        ax.text(1.0, 1.0, f"{part.refdes}  {part.schedule.describe(end)}", transform=ax.transAxes,
                ha="right", va="bottom", fontsize=8, color=INK)  # fmt: skip
        style_axes(ax)
    axes[-1].set_xlabel("time (s)" + (" — logarithmic" if start is not None else ""), color=INK)
    _time_axis(axes[-1], start, end)
    fig.suptitle(f"{board.name} · {board.variant} — power schedules over {fmt_s(end)}",
                 color=INK, fontsize=11, x=0.01, ha="left")  # fmt: skip
    return save_png(fig, path)


def plot_compare(results: Sequence[CheckResult], board: Board, refdes: str, path: Path) -> Path:
    """Overlay one part's junction temperature in every variant, limits dashed.

    Parameters
    ----------
    results : one result per variant; the first is the base
    board : the base board (for the power breakpoints that choose the time axis)
    refdes : the part to overlay
    path : the PNG to write
    """
    t_end = max(float(r.duration) for r in results)
    known = {p.refdes: p for p in board.parts}
    schedules = [known[refdes].schedule] if refdes in known else []
    start = log_time_start(schedules, t_end)
    fig = new_figure(9.0, 5.0)
    ax = fig.subplots()
    limits = []
    for i, r in enumerate(results):
        if refdes not in r.traces.refdes:
            continue
        j = r.traces.refdes.index(refdes)
        c = colour(i)
        keep = r.traces.t > 0 if start is not None else np.ones(len(r.traces.t), dtype=bool)
        tj = array_to_celsius(r.traces.tj[keep, j])
        marker = "o" if keep.sum() == 1 else None
        ax.plot(r.traces.t[keep], tj, color=c, linewidth=1.5, marker=marker,
                label=f"{r.variant} ({r.verdict})")  # fmt: skip
        limits += [(to_celsius(p.tj_max), c) for p in r.parts if p.refdes == refdes]
    limit_lines(ax, limits)
    ax.set_ylabel(f"Tj of {refdes} (°C)", color=INK)
    ax.set_xlabel("time (s)", color=INK)
    ax.legend(loc="best", fontsize=8, frameon=False, title="variant (dashed: Tj max)",
              title_fontsize=7)  # fmt: skip
    ax.set_title(f"{board.name} — {refdes} across variants (smallest margin in "
                 f"{results[0].variant})", color=INK, fontsize=11, loc="left")  # fmt: skip
    style_axes(ax)
    _time_axis(ax, start, t_end)
    return save_png(fig, path)
