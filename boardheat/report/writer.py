"""Write every report file of one check into a folder.

Input: a :class:`~boardheat.checks.CheckResult` and the board it was computed from. Output:
``report.md``, ``report.json``, ``junit.xml``, ``traces.csv``, ``junction.png``,
``board_map.png``, ``field.vtu`` (+ ``field.pvd`` and ``field_series/`` with several recorded
instants), each written atomically. The Markdown report is written last, so it only links
files that exist.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from boardheat.board import Board
from boardheat.checks import CheckResult
from boardheat.report.boardmap import plot_board_map
from boardheat.report.documents import junit_xml, report_markdown, traces_csv
from boardheat.report.fields import write_fields
from boardheat.report.files import ReportError, ensure_dir, write_text
from boardheat.report.jsonfile import write_report_json
from boardheat.report.plots import parts_of, plot_junctions

#: every format :func:`write_report` knows, in writing order of the files
FORMATS: tuple[str, ...] = ("md", "json", "junit", "csv", "png", "vtu")

#: captions of the plots in the Markdown report
CAPTIONS = {
    "junction.png": "Junction temperature of every part (dashed: Tj max) and power schedules",
    "board_map.png": "Board temperature at the hottest instant with part footprints",
}


def _check_formats(formats: Iterable[str]) -> tuple[str, ...]:
    if isinstance(formats, str):
        formats = (formats,)
    chosen = tuple(formats)
    unknown = [f for f in chosen if f not in FORMATS]
    if unknown:
        raise ReportError(
            f"report formats: found {unknown[0]!r}, expected some of {', '.join(FORMATS)}"
        )
    return chosen


def write_report(
    result: CheckResult,
    board: Board,
    out_dir: Path,
    *,
    formats: Iterable[str] = FORMATS,
    strict: bool = False,
) -> dict[str, Path]:
    """Write the report files of ``result`` into ``out_dir`` (created if needed).

    Parameters
    ----------
    result : the check to report
    board : the board the result was computed from (outlines, schedules, thickness)
    out_dir : the folder to write into
    formats : any of "md", "json", "junit", "csv", "png", "vtu"
    strict : in JUnit XML, count a NEAR part or laminate as a failure

    Returns
    -------
    dict
        File name relative to ``out_dir`` -> path of every file written.

    Raises
    ------
    ReportError
        For an unknown format, a board that does not match the result, or a file that cannot
        be written; files already written stay complete, none is left half-written.
    """
    chosen = _check_formats(formats)
    parts_of(board, result.traces.refdes)  # a board that does not match fails before writing
    out_dir = ensure_dir(Path(out_dir))
    written: dict[str, Path] = {}
    if "json" in chosen:
        written["report.json"] = write_report_json(result, out_dir / "report.json")
    if "junit" in chosen:
        written["junit.xml"] = write_text(out_dir / "junit.xml", junit_xml(result, strict=strict))
    if "csv" in chosen:
        written["traces.csv"] = write_text(out_dir / "traces.csv", traces_csv(result))
    if "png" in chosen:
        if result.traces.refdes:
            written["junction.png"] = plot_junctions(result, board, out_dir / "junction.png")
        if result.hot is not None:
            written["board_map.png"] = plot_board_map(result, board, out_dir / "board_map.png")
    if "vtu" in chosen:
        written.update(write_fields(result, board, out_dir))
    if "md" in chosen:
        images = {CAPTIONS[name]: name for name in CAPTIONS if name in written}
        others = [name for name in written if name not in CAPTIONS
                  and not name.startswith("field_series/")]  # fmt: skip
        text = report_markdown(result, images, others)
        written["report.md"] = write_text(out_dir / "report.md", text)
    return written
