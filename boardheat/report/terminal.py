"""Terminal rendering of a check (and of a variant comparison) with rich.

Input: check results (SI, kelvin). Output: tables and lines printed to the
:class:`rich.console.Console` the caller passes in; the library itself never prints. All
data go in as :class:`rich.text.Text`, so brackets in names are never read as markup. Colour
is added only where the console supports it (rich drops it in CI and with ``no_color``).
"""

from __future__ import annotations

from collections.abc import Sequence

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from boardheat.checks import CheckResult
from boardheat.report.compare import (
    check_results,
    compare_cells,
    compare_header,
    compare_rows,
)
from boardheat.report.documents import PART_HEADER, SANITY_HEADER, part_row, sanity_row
from boardheat.report.summary import (
    CAUTION_LINE,
    analysis_line,
    laminate_line,
    stats_line,
    verdict_line,
)

#: status styles (our own choice)
STATUS_STYLE = {
    "PASS": "bold spring_green3",
    "NEAR": "bold black on dark_goldenrod",
    "FAIL": "bold bright_white on red3",
}
#: the same statuses inside running text (no background)
INLINE_STYLE = {"PASS": "", "NEAR": "bold dark_goldenrod", "FAIL": "bold red3"}
SANITY_STYLE = {True: "spring_green3", False: "bold red3"}
DIM = "grey58"


def _t(text: str, style: str = "") -> Text:
    return Text(str(text), style=style)


def parts_table(result: CheckResult) -> Table:
    """Return the per-part table: refdes, package, model, peak Tj, time, limit, margin, status."""
    table = Table(box=box.SIMPLE_HEAVY, header_style="bold", pad_edge=False,
                  title=_t("Junction temperatures", "bold"), title_justify="left")  # fmt: skip
    for i, name in enumerate(PART_HEADER):
        table.add_column(name, justify="right" if 3 <= i < 9 else "left")
    for p in result.parts:
        cells = [_t(c) for c in part_row(p)]
        cells[-1] = _t(f" {p.status} ", STATUS_STYLE[p.status])
        if p.status != "PASS":
            cells[6].stylize("bold")
        table.add_row(*cells)
    return table


def sanity_table(result: CheckResult) -> Table:
    """Return the compact table of the lumped-model sanity checks with their numbers."""
    table = Table(box=box.SIMPLE, header_style="bold", pad_edge=False,
                  title=_t("Sanity checks", "bold"), title_justify="left")  # fmt: skip
    for i, name in enumerate(SANITY_HEADER):
        table.add_column(name, justify="right" if 1 <= i <= 3 else "left")
    for c in result.sanity:
        cells = [_t(x) for x in sanity_row(c)]
        cells[-1].stylize(SANITY_STYLE[bool(c.passed)])
        table.add_row(*cells)
    return table


def render_terminal(result: CheckResult, console: Console) -> None:
    """Print the report of one check to ``console``.

    Parts table, laminate line, sanity checks, warnings, run statistics, the one-line
    verdict and the caution.
    """
    head = Text()
    head.append(f"{result.board_name}", style="bold")
    head.append(f" · variant {result.variant}")
    head.append(f" · {result.source}", style=DIM)
    console.print(head)
    console.print(_t(analysis_line(result), DIM))
    if result.parts:
        console.print(parts_table(result))
    else:
        console.print(_t("no parts on this board"))
    lam = Text("laminate: ", style="bold")
    lam.append(laminate_line(result), style=INLINE_STYLE[result.laminate.status])
    console.print(lam)
    if result.sanity:
        console.print(sanity_table(result))
    if result.warnings:
        console.print(_t(f"warnings ({len(result.warnings)}):", "bold dark_orange"))
        for w in result.warnings:
            line = Text("  ! ", style="bold dark_orange")
            line.append(w)
            console.print(line)
    else:
        console.print(_t("warnings: none", DIM))
    stats = stats_line(result.stats)
    if stats:
        console.print(_t(stats, DIM))
    verdict = Text("Verdict: ", style="bold")
    verdict.append(verdict_line(result), style=STATUS_STYLE[result.verdict])
    console.print(verdict)
    console.print(_t(CAUTION_LINE, "italic " + DIM))


def render_compare(results: Sequence[CheckResult], console: Console) -> None:
    """Print a variant comparison to ``console``: peak Tj per part per variant, Δ to the base.

    The first result is the base; Δ > 0 means the variant runs hotter.
    """
    check_results(results)
    table = Table(box=box.SIMPLE_HEAVY, header_style="bold", pad_edge=False,
                  title=_t(f"{results[0].board_name}: peak Tj per variant (base: "
                           f"{results[0].variant})", "bold"), title_justify="left")  # fmt: skip
    for i, name in enumerate(compare_header(results)):
        table.add_column(name, justify="left" if i == 0 else "right")
    for row in compare_rows(results):
        cells = [_t(c) for c in compare_cells(results, row)]
        col = 1
        for i, p in enumerate(row.cells):
            if p is not None and p.status != "PASS":
                cells[col].stylize(INLINE_STYLE[p.status])
            if i:
                d = row.delta(i)
                if d is not None and d != 0.0:
                    cells[col + 1].stylize("orange3" if d > 0 else "steel_blue1")
                col += 1
            col += 1
        table.add_row(*cells)
    console.print(table)
    for r in results:
        line = Text(f"{r.variant}: ", style="bold")
        line.append(verdict_line(r), style=STATUS_STYLE[r.verdict])
        console.print(line)
    console.print(_t(CAUTION_LINE, "italic " + DIM))
