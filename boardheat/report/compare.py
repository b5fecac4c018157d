"""Design-variant comparison: peak junction temperatures side by side, differences to the base.

Input: one :class:`~boardheat.checks.CheckResult` per variant, the first being the base.
Output: ``compare.md``, ``compare.json`` (schema ``boardheat-compare`` version 1, units in the
key names) and ``compare.png`` (the critical part's junction temperature in every variant;
critical = the smallest margin in the base). Differences are ``Tj_peak(variant) -
Tj_peak(base)`` in K: positive means the variant runs hotter.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from boardheat.board import Board
from boardheat.checks import CheckResult, PartResult
from boardheat.report.documents import md_escape, md_table
from boardheat.report.files import ReportError, ensure_dir, write_text
from boardheat.report.jsonfile import dumps
from boardheat.report.plots import plot_compare
from boardheat.report.summary import (
    CAUTIONS,
    critical_part,
    fmt_c,
    fmt_k,
    to_celsius,
    verdict_line,
)

COMPARE_SCHEMA = "boardheat-compare"
COMPARE_VERSION = 1


@dataclass(frozen=True)
class CompareRow:
    """One part across variants; ``cells[i]`` is its result in variant i (None if absent)."""

    refdes: str
    cells: tuple[PartResult | None, ...]

    def delta(self, i: int) -> float | None:
        """Return Tj_peak(variant i) - Tj_peak(base), K, or None if either is absent."""
        base, other = self.cells[0], self.cells[i]
        if base is None or other is None:
            return None
        return other.tj_peak - base.tj_peak


def check_results(results: Sequence[CheckResult]) -> None:
    """Raise :class:`ReportError` unless ``results`` holds at least one check result."""
    if not results:
        raise ReportError("compare: found no results, expected one per variant (base first)")
    for i, r in enumerate(results):
        if not isinstance(r, CheckResult):
            raise ReportError(
                f"compare: results[{i}]: found {type(r).__name__}, expected a CheckResult"
            )


def compare_rows(results: Sequence[CheckResult]) -> list[CompareRow]:
    """Return one row per reference designator: the base's parts first, then any others."""
    order: list[str] = []
    for r in results:
        order += [p.refdes for p in r.parts if p.refdes not in order]
    maps = [{p.refdes: p for p in r.parts} for r in results]
    return [CompareRow(ref, tuple(m.get(ref) for m in maps)) for ref in order]


def critical_refdes(results: Sequence[CheckResult]) -> str | None:
    """Return the refdes with the smallest margin in the base result (None without parts)."""
    crit = critical_part(results[0].parts)
    return None if crit is None else crit.refdes


def _smallest_margin(r: CheckResult) -> float | None:
    crit = critical_part(r.parts)
    return None if crit is None else crit.margin


def _num(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def compare_dict(results: Sequence[CheckResult]) -> dict[str, Any]:
    """Return the JSON document of a comparison as plain Python data."""
    check_results(results)
    variants = [r.variant for r in results]
    parts = []
    for row in compare_rows(results):
        entries = []
        for i, (variant, p) in enumerate(zip(variants, row.cells, strict=True)):
            entries.append({
                "variant": variant,
                "tj_peak_c": None if p is None else _num(to_celsius(p.tj_peak)),
                "tj_max_c": None if p is None else _num(to_celsius(p.tj_max)),
                "margin_k": None if p is None else _num(p.margin),
                "delta_k": None if i == 0 else _num(row.delta(i)),
                "status": None if p is None else p.status,
            })  # fmt: skip
        parts.append({"refdes": row.refdes, "variants": entries})
    return {
        "schema": COMPARE_SCHEMA,
        "schema_version": COMPARE_VERSION,
        "board": results[0].board_name,
        "base_variant": variants[0],
        "critical_refdes": critical_refdes(results),
        "variants": [
            {
                "variant": r.variant,
                "verdict": r.verdict,
                "verdict_text": verdict_line(r),
                "smallest_margin_k": _num(_smallest_margin(r)),
                "laminate_peak_c": _num(to_celsius(r.laminate.peak)),
            }
            for r in results
        ],
        "parts": parts,
        "cautions": list(CAUTIONS),
    }


def compare_cells(results: Sequence[CheckResult], row: CompareRow) -> list[str]:
    """Return a row's table cells: refdes, then peak Tj °C (and Δ K after the base) per variant."""
    cells = [row.refdes]
    for i, p in enumerate(row.cells):
        cells.append("—" if p is None else f"{fmt_c(p.tj_peak)} {p.status}")
        if i:
            d = row.delta(i)
            cells.append("—" if d is None else fmt_k(d, sign=True))
    return cells


def compare_header(results: Sequence[CheckResult]) -> list[str]:
    """Return the table header matching :func:`compare_cells`."""
    head = ["Refdes"]
    for i, r in enumerate(results):
        head.append(f"{r.variant}{' (base)' if i == 0 else ''}: peak Tj (°C)")
        if i:
            head.append(f"{r.variant}: Δ vs base (K)")
    return head


def compare_markdown(results: Sequence[CheckResult], image: str | None) -> str:
    """Return the Markdown comparison (``image`` is the relative link of the overlay plot)."""
    check_results(results)
    base = results[0]
    out = [f"# Variant comparison: {md_escape(base.board_name)}", "",
           f"Base: **{md_escape(base.variant)}**. Δ = peak Tj in the variant minus peak Tj in "
           "the base; positive runs hotter.", "", "## Peak junction temperatures", ""]  # fmt: skip
    rows = [[md_escape(c) for c in compare_cells(results, row)] for row in compare_rows(results)]
    out += md_table(
        [md_escape(h) for h in compare_header(results)],
        rows,
        numeric=range(1, len(rows[0]) if rows else 1),
    )
    out += ["", "## Verdicts", ""]
    out += [f"- **{md_escape(r.variant)}**: {md_escape(verdict_line(r))}" for r in results]
    crit = critical_refdes(results)
    if image and crit:
        out += ["", "## Critical part", "",
                f"{md_escape(crit)} has the smallest margin in the base.", "",
                f"![{md_escape(crit)} junction temperature per variant]({image})"]  # fmt: skip
    out += ["", "## Cautions", ""] + [f"- {c}" for c in CAUTIONS]
    return "\n".join(out) + "\n"


def write_compare(results: list[CheckResult], board: Board, out_dir: Path) -> dict[str, Path]:
    """Write ``compare.md``, ``compare.json`` and ``compare.png`` into ``out_dir``.

    Parameters
    ----------
    results : one result per variant, the base first
    board : the base board (names the plot, chooses its time axis)
    out_dir : created if needed

    Returns
    -------
    dict
        File name -> path of every file written (no plot when the base has no parts).
    """
    check_results(results)
    out_dir = ensure_dir(Path(out_dir))
    written: dict[str, Path] = {}
    crit = critical_refdes(results)
    if crit is not None:
        written["compare.png"] = plot_compare(results, board, crit, out_dir / "compare.png")
    written["compare.json"] = write_text(out_dir / "compare.json", dumps(compare_dict(results)))
    image = "compare.png" if "compare.png" in written else None
    written["compare.md"] = write_text(out_dir / "compare.md", compare_markdown(results, image))
    return written
