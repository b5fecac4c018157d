"""Text documents of one check: Markdown report, JUnit XML for CI, CSV time series.

Input: a :class:`~boardheat.checks.CheckResult` (SI units, kelvin). Output: the text of
``report.md``, ``junit.xml`` and ``traces.csv``; absolute temperatures in °C, differences in K.
No physics is done here: every number comes from the result.
"""

from __future__ import annotations

import csv
import io
import re
import xml.etree.ElementTree as ET
from collections.abc import Container, Iterable, Mapping, Sequence

import numpy as np

from boardheat.checks import CheckResult, PartResult, SanityCheck
from boardheat.report.summary import (
    CAUTIONS,
    analysis_line,
    array_to_celsius,
    fmt_c,
    fmt_k,
    fmt_num,
    fmt_s,
    fmt_tolerance,
    laminate_line,
    sanity_result,
    stat_items,
    verdict_line,
)

# ------------------------------------------------------------------------------- Markdown
_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>|#])")


def md_escape(text: str) -> str:
    r"""Return ``text`` safe inside a Markdown paragraph or table cell (one line).

    >>> md_escape("U1|a*b\nc")
    'U1\\|a\\*b c'
    """
    return _MD_SPECIAL.sub(r"\\\1", " ".join(str(text).splitlines()))


def _md_code(text: str) -> str:
    """Return ``text`` as inline code (backticks inside become quotes)."""
    return "`" + " ".join(str(text).replace("`", "'").splitlines()) + "`"


def md_table(
    header: Sequence[str], rows: Iterable[Sequence[str]], numeric: Container[int] = ()
) -> list[str]:
    """Return the lines of a Markdown table; the columns indexed in ``numeric`` align right.

    >>> md_table(["a", "b"], [["x", "1"]], numeric={1})
    ['| a | b |', '| :-- | --: |', '| x | 1 |']
    """
    align = ["--:" if i in numeric else ":--" for i in range(len(header))]
    lines = ["| " + " | ".join(header) + " |", "| " + " | ".join(align) + " |"]
    lines += ["| " + " | ".join(row) + " |" for row in rows]
    return lines


def part_row(p: PartResult) -> list[str]:
    """Return one part's cells: refdes, package, model, peak, time, limit, margin, above, ss."""
    return [
        p.refdes,
        p.package or "—",
        p.junction_model,
        fmt_c(p.tj_peak),
        fmt_s(p.t_peak),
        fmt_c(p.tj_max),
        fmt_k(p.margin),
        fmt_s(p.time_above),
        fmt_c(p.tj_steady),
        p.status,
    ]


PART_HEADER = (
    "Refdes", "Package", "Junction model", "Peak Tj (°C)", "Time of peak",
    "Tj max (°C)", "Margin (K)", "Time above limit", "Steady Tj (°C)", "Status",
)  # fmt: skip


def sanity_row(c: SanityCheck) -> list[str]:
    """Return one sanity check's cells: name, value, reference, tolerance, unit, result."""
    return [c.name, fmt_num(c.value), fmt_num(c.reference), fmt_tolerance(c.tolerance),
            c.unit, sanity_result(c)]  # fmt: skip


SANITY_HEADER = ("Check", "Value", "Reference", "Tolerance", "Unit", "Result")


def report_markdown(
    result: CheckResult, images: Mapping[str, str], files: Sequence[str] = ()
) -> str:
    """Return the Markdown report.

    Parameters
    ----------
    result : the check to report
    images : caption -> relative link of each plot written beside the report
    files : relative names of the other files written (listed at the end)
    """
    out = [
        f"# Thermal check: {md_escape(result.board_name)} — variant {md_escape(result.variant)}",
        "",
        f"**Verdict: {md_escape(verdict_line(result))}**",
        "",
        f"Board file: {_md_code(result.source)}; {md_escape(analysis_line(result))}.",
        "",
        "## Junction temperatures",
        "",
    ]
    rows = [[md_escape(cell) for cell in part_row(p)] for p in result.parts]
    rows = [r[:-1] + [f"**{r[-1]}**" if r[-1] != "PASS" else r[-1]] for r in rows]
    out += md_table(PART_HEADER, rows, numeric=range(3, 9)) if rows else ["No parts on this board."]
    lam = md_escape(laminate_line(result))
    out += ["", "## Laminate", "", lam[:1].upper() + lam[1:], ""]
    out += ["## Sanity checks", ""]
    if result.sanity:
        out += md_table(SANITY_HEADER, ([md_escape(x) for x in sanity_row(c)]
                                        for c in result.sanity), numeric={1, 2, 3})  # fmt: skip
        out.append("")
        out += [f"- *{md_escape(c.name)}*: {md_escape(c.detail)}" for c in result.sanity]
    else:
        out.append("No sanity checks were run.")
    out += ["", "## Warnings", ""]
    out += [f"- {md_escape(w)}" for w in result.warnings] or ["None."]
    out += ["", "## Run statistics", ""]
    items = stat_items(result.stats)
    out += (md_table(("Quantity", "Value"), ([md_escape(k), md_escape(v)] for k, v in items),
                     numeric={1}) if items else ["Not recorded."])  # fmt: skip
    if images:
        out += ["", "## Plots", ""]
        for caption, link in images.items():
            out += [f"![{md_escape(caption)}]({link})", ""]
        out.pop()
    if files:
        out += ["", "## Other files", ""]
        out += [f"- [{md_escape(name)}]({name})" for name in files]
    out += ["", "## Cautions", ""]
    out += [f"- {c}" for c in CAUTIONS]
    return "\n".join(out) + "\n"


# ------------------------------------------------------------------------------ JUnit XML
_XML_BAD = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def xml_text(text: str) -> str:
    r"""Return ``text`` with characters XML 1.0 cannot hold replaced by U+FFFD.

    >>> xml_text("U1\x00<") == "U1\ufffd<"
    True
    """
    return _XML_BAD.sub("\ufffd", str(text))


def _sub(parent: ET.Element, tag: str, text: str | None = None, **attrib: str) -> ET.Element:
    el = ET.SubElement(parent, tag, {k: xml_text(v) for k, v in attrib.items()})
    if text is not None:
        el.text = xml_text(text)
    return el


def _part_numbers(p: PartResult) -> str:
    return (
        f"peak Tj {fmt_c(p.tj_peak)} °C at {fmt_s(p.t_peak)}, Tj max {fmt_c(p.tj_max)} °C, "
        f"margin {fmt_k(p.margin)} K, above the limit for {fmt_s(p.time_above)}"
    )


def _part_details(p: PartResult) -> str:
    return "\n".join([
        f"refdes: {p.refdes}", f"package: {p.package or '-'}",
        f"junction model: {p.junction_model}", f"peak Tj: {fmt_c(p.tj_peak, 2)} °C",
        f"time of peak: {fmt_s(p.t_peak)}", f"Tj max: {fmt_c(p.tj_max, 2)} °C",
        f"margin: {fmt_k(p.margin, 2)} K", f"time above limit: {fmt_s(p.time_above)}",
        f"hottest footprint: {fmt_c(p.board_peak, 2)} °C",
        f"steady-state Tj: {fmt_c(p.tj_steady, 2)} °C",
        f"peak power: {fmt_num(p.power_peak)} W", f"energy: {fmt_num(p.energy)} J",
    ])  # fmt: skip


def junit_xml(result: CheckResult, *, strict: bool = False) -> str:
    """Return a JUnit XML document: one test case per part, per sanity check, and laminate.

    A FAIL part fails with type ``JunctionLimitExceeded``; a NEAR part passes with a note in
    ``system-out``, or fails with type ``JunctionNearLimit`` when ``strict``; a sanity check
    that disagrees fails with type ``SanityCheck``; the laminate fails with
    ``LaminateLimitExceeded`` (``LaminateNearLimit`` for NEAR when ``strict``).
    """
    total = result.stats.get("seconds_total", 0.0)
    seconds = f"{float(total):.3f}" if isinstance(total, int | float) else "0.000"
    root = ET.Element("testsuites", name="boardheat")
    suite = _sub(root, "testsuite", name=f"boardheat.{result.board_name}.{result.variant}")
    props = _sub(suite, "properties")
    for key, value in (("board", result.board_name), ("variant", result.variant),
                       ("source", result.source), ("verdict", result.verdict),
                       ("ambient_c", fmt_c(result.ambient, 2)),
                       ("near_band_k", fmt_k(result.margin, 2))):  # fmt: skip
        _sub(props, "property", name=key, value=value)
    failures = 0
    for p in result.parts:
        case = _sub(suite, "testcase", classname="parts", name=p.refdes)
        numbers = _part_numbers(p)
        if p.status == "FAIL" or (p.status == "NEAR" and strict):
            kind = "JunctionLimitExceeded" if p.status == "FAIL" else "JunctionNearLimit"
            what = "exceeds Tj max" if p.status == "FAIL" else "is within the NEAR band"
            _sub(case, "failure", _part_details(p), type=kind,
                 message=f"{p.refdes} {what}: {numbers}")  # fmt: skip
            failures += 1
        elif p.status == "NEAR":
            _sub(case, "system-out", f"NEAR: within {fmt_k(result.margin)} K of Tj max; "
                 f"{numbers}")  # fmt: skip
        else:
            _sub(case, "system-out", f"PASS: {numbers}")
    for c in result.sanity:
        case = _sub(suite, "testcase", classname="sanity", name=c.name)
        numbers = (f"value {fmt_num(c.value)} {c.unit} vs reference {fmt_num(c.reference)} "
                   f"{c.unit}, tolerance {fmt_tolerance(c.tolerance)}")  # fmt: skip
        if c.passed:
            _sub(case, "system-out", f"{numbers}: {c.detail}")
        else:
            _sub(case, "failure", c.detail, type="SanityCheck",
                 message=f"{c.name} disagrees: {numbers}")  # fmt: skip
            failures += 1
    lam = result.laminate
    case = _sub(suite, "testcase", classname="laminate", name="laminate")
    if lam.status == "FAIL" or (lam.status == "NEAR" and strict):
        kind = "LaminateLimitExceeded" if lam.status == "FAIL" else "LaminateNearLimit"
        _sub(case, "failure", laminate_line(result), type=kind,
             message=f"laminate: {laminate_line(result)}")  # fmt: skip
        failures += 1
    else:
        _sub(case, "system-out", laminate_line(result))
    notes = [verdict_line(result), *(f"warning: {w}" for w in result.warnings), *CAUTIONS]
    _sub(suite, "system-out", "\n".join(notes))
    counts = {
        "tests": str(len(result.parts) + len(result.sanity) + 1),
        "failures": str(failures),
        "errors": "0",
        "skipped": "0",
        "time": seconds,
    }
    for el in (root, suite):
        el.attrib.update(counts)
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, "unicode") + "\n"


# ------------------------------------------------------------------------------------ CSV
def csv_header(refdes: Sequence[str]) -> list[str]:
    """Return the CSV column names.

    >>> csv_header(["U1"])
    ['t_s', 'tj_U1_c', 'board_U1_c', 'power_U1_w', 'board_mean_c']
    """
    cols = ["t_s"]
    for r in refdes:
        cols += [f"tj_{r}_c", f"board_{r}_c", f"power_{r}_w"]
    return [*cols, "board_mean_c"]


def traces_csv(result: CheckResult) -> str:
    """Return the recorded histories as CSV: time, then Tj, footprint and power per part.

    Values use the shortest representation that reads back to the same float.
    """
    tr = result.traces
    n_parts = len(tr.refdes)
    block = np.empty((len(tr.t), 2 + 3 * n_parts), dtype=np.float64)
    block[:, 0] = tr.t
    block[:, 1 : 1 + 3 * n_parts : 3] = array_to_celsius(tr.tj)
    block[:, 2 : 2 + 3 * n_parts : 3] = array_to_celsius(tr.board)
    block[:, 3 : 3 + 3 * n_parts : 3] = tr.power
    block[:, -1] = array_to_celsius(tr.mean)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(csv_header(tr.refdes))
    writer.writerows([repr(v) for v in row] for row in block.tolist())
    return buf.getvalue()
