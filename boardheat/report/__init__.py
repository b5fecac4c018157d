"""Report stage: check results -> terminal tables, Markdown, JSON, JUnit XML, CSV, plots, VTU.

Input: :class:`~boardheat.checks.CheckResult` (SI units, kelvin) and the board it came from.
Output: text and files for people (terminal, Markdown, PNG), for CI (JUnit XML, JSON) and for
3D viewers (VTU, PVD). Absolute temperatures are shown in °C (``T_c = T_K - 273.15``),
differences in K. No physics is done here. Every report carries the caution that results are
model estimates to be confirmed by measurement, under the applicable safety standards, local
codes and licensed practice.

Modules: :mod:`.terminal` (rich), :mod:`.writer` (all files of one check), :mod:`.documents`
(Markdown, JUnit XML, CSV), :mod:`.jsonfile` (JSON and its schema), :mod:`.plots` (time
plots), :mod:`.boardmap` (temperature map), :mod:`.fields` (VTU/PVD), :mod:`.compare`
(variants), :mod:`.summary` (shared wording), :mod:`.style` (plot look), :mod:`.files`
(atomic writes, :class:`ReportError`).
"""

from boardheat.report.compare import compare_dict, write_compare
from boardheat.report.documents import junit_xml, report_markdown, traces_csv
from boardheat.report.files import ReportError
from boardheat.report.jsonfile import REPORT_JSON_SCHEMA, read_report_json, report_dict
from boardheat.report.plots import plot_schedules
from boardheat.report.summary import CAUTION_LINE, CAUTIONS, verdict_line
from boardheat.report.terminal import render_compare, render_terminal
from boardheat.report.writer import FORMATS, write_report

__all__ = [
    "CAUTIONS",
    "CAUTION_LINE",
    "FORMATS",
    "REPORT_JSON_SCHEMA",
    "ReportError",
    "compare_dict",
    "junit_xml",
    "plot_schedules",
    "read_report_json",
    "render_compare",
    "render_terminal",
    "report_dict",
    "report_markdown",
    "traces_csv",
    "verdict_line",
    "write_compare",
    "write_report",
]
