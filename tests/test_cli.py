"""Command line, in-process with typer's CliRunner: every exit code and its key line."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import pytest
from typer.testing import CliRunner

from boardheat.cli import app
from boardheat.errors import SolverError
from tests.conftest import stackup_toml

pytestmark = pytest.mark.gmsh

BOARD = (
    """\
# test board of our own invention
format_version = 1
name = "cli_test"

[outline]
polygon_mm = [[0, 0], [30, 0], [30, 20], [0, 20]]

"""
    + stackup_toml(core_mm=1.0, fill=0.6)
    + """
[environment]
ambient_c = 25

[run]
duration_s = 5.0
margin_k = 3.0

[[part]]
refdes = "U1"
body_mm = [4, 4, 1]
x_mm = 15
y_mm = 10
theta_jb_k_per_w = 10
tj_max_c = {limit}
power = {{ pulses = [{{ start_s = 1.0, width_s = 0.5, power_w = 2.0 }}], steps = [[0, 0.3]] }}
"""
)


@pytest.fixture
def runner():
    return CliRunner()


def _write(tmp_path, limit=125.0, text=None):
    path = tmp_path / "board.toml"
    path.write_text(text if text is not None else BOARD.format(limit=limit))
    return path


def test_exit_0_all_within_limits_and_report_files(runner, tmp_path):
    out = tmp_path / "out"
    res = runner.invoke(app, ["check", str(_write(tmp_path)), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "Verdict: PASS" in res.output
    for name in ("report.md", "report.json", "junit.xml", "traces.csv", "junction.png"):
        assert (out / name).is_file(), name
    data = json.loads((out / "report.json").read_text())
    assert data["verdict"] == "PASS"
    suites = ET.parse(out / "junit.xml").getroot()
    assert suites.find(".//testcase[@name='U1']") is not None
    assert not list(out.glob("*.tmp*"))


def test_exit_1_when_a_limit_is_exceeded(runner, tmp_path):
    res = runner.invoke(app, ["check", str(_write(tmp_path, limit=26.0))])
    assert res.exit_code == 1, res.output
    assert "Verdict: FAIL" in res.output


def test_near_fails_only_with_strict(runner, tmp_path):
    path = _write(tmp_path)
    base = runner.invoke(app, ["check", str(path), "--quiet"])
    assert base.exit_code == 0
    # set the limit just above the peak: NEAR with a 3 K band
    res = runner.invoke(app, ["check", str(path), "--steady", "--quiet"])
    assert res.exit_code == 0
    from boardheat.board import load_board
    from boardheat.run import RunOptions, run_check

    peak = run_check(load_board(path), RunOptions()).parts[0].tj_peak - 273.15
    near = _write(tmp_path, limit=round(peak + 1.0, 3))
    assert runner.invoke(app, ["check", str(near), "--quiet"]).exit_code == 0
    strict = runner.invoke(app, ["check", str(near), "--strict", "--quiet"])
    assert strict.exit_code == 1
    assert "NEAR" in strict.output


def test_exit_2_on_bad_input_with_one_clear_line(runner, tmp_path):
    text = BOARD.format(limit=125.0).replace("x_mm = 15", "x_mm = 29")
    res = runner.invoke(app, ["check", str(_write(tmp_path, text=text))])
    assert res.exit_code == 2
    assert "part[U1]: footprint at (29, 10) mm: it reaches outside the board outline" in (
        res.output
    )
    assert "Traceback" not in res.output


def test_exit_2_on_a_bad_cache_setting_with_one_clear_line(runner, tmp_path, monkeypatch):
    monkeypatch.setenv("BOARDHEAT_CACHE_GIB", "8GB")
    res = runner.invoke(app, ["check", str(_write(tmp_path)), "--quiet"])
    assert res.exit_code == 2
    message = " ".join(res.output.split())  # the console wraps at its width
    assert "BOARDHEAT_CACHE_GIB='8GB'; expected a number of GiB > 0" in message
    assert "Traceback" not in res.output


def test_exit_2_on_missing_file(runner, tmp_path):
    res = runner.invoke(app, ["check", str(tmp_path / "nope.toml")])
    assert res.exit_code == 2
    assert "does not exist" in res.output


def test_exit_3_on_solver_failure(runner, tmp_path, monkeypatch):
    import boardheat.run

    def broken(*args, **kwargs):
        raise SolverError("factorization failed: matrix is singular")

    monkeypatch.setattr(boardheat.run, "run_check", broken)
    res = runner.invoke(app, ["check", str(_write(tmp_path))])
    assert res.exit_code == 3
    assert "solver error: factorization failed" in res.output


def test_schema_prints_json_schema(runner):
    res = runner.invoke(app, ["schema"])
    assert res.exit_code == 0
    assert json.loads(res.output)["title"] == "boardheat board file"


def test_schedule_plot(runner, tmp_path):
    png = tmp_path / "s.png"
    res = runner.invoke(app, ["schedule", str(_write(tmp_path)), "--out", str(png)])
    assert res.exit_code == 0, res.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "U1" in res.output


def test_packages_lists_library(runner):
    res = runner.invoke(app, ["packages"])
    assert res.exit_code == 0
    assert "SOIC-8" in res.output
