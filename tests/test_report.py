"""Tests of boardheat.report: every output format of a hand-built check result.

The results are built by hand (three parts: one FAIL, one NEAR, one PASS; one failed sanity
check), so each expected number is known exactly. Files are read back with independent
readers: json, xml.etree, csv, meshio and the PNG signature and header.
"""

from __future__ import annotations

import csv
import json
import struct
import xml.etree.ElementTree as ET
from dataclasses import replace
from pathlib import Path

import meshio
import numpy as np
import pytest
from rich.console import Console

from boardheat.board import Board, Environment, Layer, Part, RunSettings
from boardheat.board.materials import BUILTIN_MATERIALS
from boardheat.checks import (
    CheckResult,
    FieldSeries,
    HotField,
    LaminateResult,
    PartResult,
    SanityCheck,
    Traces,
)
from boardheat.report import (
    CAUTION_LINE,
    CAUTIONS,
    REPORT_JSON_SCHEMA,
    ReportError,
    junit_xml,
    plot_schedules,
    read_report_json,
    render_compare,
    render_terminal,
    report_dict,
    verdict_line,
    write_compare,
    write_report,
)
from boardheat.report import files as report_files
from boardheat.report.jsonfile import validate
from boardheat.report.plots import log_time_start, schedule_polyline
from boardheat.schedules import Schedule, constant

SEED = 2718
ZC = 273.15
DURATION = 10.0


# ------------------------------------------------------------------------------ fixtures
def pulse(start: float, width: float, power: float) -> Schedule:
    knots = np.array([start, start + width])
    return Schedule(knots, np.array([0.0, power]), np.array([power, 0.0]))


def make_part(refdes: str, x: float, y: float, side: str, schedule: Schedule) -> Part:
    return Part(
        refdes=refdes,
        package="QFN-16",
        center=np.array([x, y]),
        rotation=0.3 if refdes == "U2" else 0.0,
        side=side,  # type: ignore[arg-type]
        body=np.array([4e-3, 4e-3, 1e-3]),
        footprint=np.array([3e-3, 3e-3]),
        theta_jb=8.0,
        tj_max=398.15,
        body_capacity=0.02,
        schedule=schedule,
    )


def make_board() -> Board:
    fr4, cu = BUILTIN_MATERIALS["fr4"], BUILTIN_MATERIALS["copper"]
    layers = (
        Layer("top", "copper", 35e-6, cu, fr4, 0.5),
        Layer("core", "dielectric", 1.5e-3, fr4, fr4, 0.0),
        Layer("bottom", "copper", 35e-6, cu, fr4, 0.5),
    )
    train = Schedule(
        np.array([2.0, 2.5, 4.0, 4.5]),
        np.array([0.0, 2.0, 0.0, 2.0]),
        np.array([2.0, 0.0, 2.0, 0.0]),
    )
    return Board(
        source=Path("boards/demo.toml"),
        name="demo",
        description="a small test board",
        outline=np.array([[0.0, 0.0], [0.06, 0.0], [0.06, 0.04], [0.0, 0.04]]),
        holes=(np.array([[0.05, 0.03], [0.054, 0.03], [0.054, 0.034], [0.05, 0.034]]),),
        layers=layers,
        parts=(
            make_part("U1", 0.015, 0.02, "top", pulse(1e-3, 2e-3, 5.0)),
            make_part("U2", 0.035, 0.02, "top", constant(1.0)),
            make_part("Q3", 0.045, 0.012, "bottom", train),
        ),
        environment=Environment(ambient=298.15, h_top=10.0, h_bottom=8.0, h_edge=5.0),
        run=RunSettings(
            duration=DURATION,
            method="trbdf2",
            rtol=1e-3,
            atol=1e-3,
            dt=None,
            mesh_refinement=1.0,
            max_segment=1e-3,
            laminate_max=403.15,
            margin=5.0,
            snapshot_times=(),
        ),  # fmt: skip
    )


def grid_mesh(nx: int = 13, ny: int = 9) -> tuple[np.ndarray, np.ndarray]:
    """Structured triangulation of the 60 x 40 mm board: points (n, 2) m, triangles (m, 3)."""
    xs, ys = np.linspace(0, 0.06, nx), np.linspace(0, 0.04, ny)
    X, Y = np.meshgrid(xs, ys)
    points = np.column_stack([X.ravel(), Y.ravel()])
    tri = []
    for j in range(ny - 1):
        for i in range(nx - 1):
            a = j * nx + i
            tri += [[a, a + 1, a + nx + 1], [a, a + nx + 1, a + nx]]
    return points, np.array(tri, dtype=np.int64)


def make_result(*, fields: bool = True, scale: float = 1.0, variant: str = "base") -> CheckResult:
    rng = np.random.default_rng(SEED)
    t = np.concatenate([[0.0], np.geomspace(1e-5, DURATION, 59)])
    n = len(t)
    refdes = ("U1", "U2", "Q3")
    rise = scale * np.column_stack([
        110.0 * (1 - np.exp(-t / 0.5)),  # U1 peaks at 408.15 K + noise: over its limit
        96.5 * (1 - np.exp(-t / 2.0)),  # U2 within 5 K of 398.15 K: NEAR
        40.0 * (1 - np.exp(-t / 1.0)),
    ])  # fmt: skip
    tj = 298.15 + rise + rng.uniform(0, 1e-3, (n, 3))
    board_t = 298.15 + 0.6 * rise
    power = np.column_stack([np.where(t < 3e-3, 5.0, 0.0), np.ones(n), np.zeros(n)])
    traces = Traces(t=t, tj=tj, board=board_t, power=power, mean=298.15 + 0.3 * rise.mean(1),
                    loss=0.1 * t, refdes=refdes)  # fmt: skip
    k = tj.argmax(axis=0)
    parts = tuple(
        PartResult(
            refdes=r, package="QFN-16", junction_model="theta_jb", tj_max=398.15,
            tj_peak=float(tj[k[j], j]), t_peak=float(t[k[j]]),
            time_above=1.0 / 3.0 if tj[k[j], j] > 398.15 else 0.0,
            board_peak=float(board_t[:, j].max()), tj_steady=None if j == 2 else 0.1 + 300.0,
            power_peak=float(power[:, j].max()), energy=0.01 + 0.02,
            status="FAIL" if tj[k[j], j] > 398.15 else
            ("NEAR" if tj[k[j], j] > 393.15 else "PASS"),
        )
        for j, r in enumerate(refdes)
    )  # fmt: skip
    sanity = (
        SanityCheck("board Biot number", 0.0123456789, 0.1, 0.0, True, "-", "informational"),
        SanityCheck("energy balance", 10.5, 10.0, 0.02, False, "J",
                    "delivered 10 J = stored 8 J + lost 2.5 J (closure 5.00%)"),
    )  # fmt: skip
    points, triangles = grid_mesh()
    top = 298.15 + 80.0 * np.exp(-((points - [0.015, 0.02]) ** 2).sum(1) / 1e-4)
    hot = HotField(points=points, triangles=triangles, top=top, bottom=top - 1.5,
                   time=float(t[k[0]]), refdes="U1")  # fmt: skip
    series = None
    if fields:
        nz = 3
        z = np.array([0.0, -0.8e-3, -1.57e-3])
        pts3 = np.vstack([np.column_stack([points, np.full(len(points), zz)]) for zz in z])
        npt2 = len(points)
        wedges = np.vstack([np.hstack([triangles + i * npt2, triangles + (i + 1) * npt2])
                            for i in range(nz - 1)])  # fmt: skip
        times = np.array([1.0, hot.time, DURATION])
        values = 298.15 + rng.uniform(0.0, 90.0, (3, len(pts3)))
        series = FieldSeries(points=pts3, wedges=wedges, times=times, values=values)
    return CheckResult(
        board_name="demo", variant=variant, source="boards/demo.toml", steady=False,
        ambient=298.15, duration=DURATION, margin=5.0, parts=parts,
        laminate=LaminateResult(peak=363.15, limit=403.15, time=2.5, status="PASS"),
        sanity=sanity,
        warnings=("sanity check 'energy balance' disagrees: [bold]closure[/bold] 5% <&>",),
        traces=traces, hot=hot,
        stats={"dofs": 12345, "steps": 59, "rejected": 2, "factorizations": 4,
               "seconds_total": 1.2345678901234567, "backend": "splu"},
        fields=series,
    )  # fmt: skip


@pytest.fixture(scope="module")
def board() -> Board:
    return make_board()


@pytest.fixture(scope="module")
def result() -> CheckResult:
    return make_result()


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory, result, board) -> dict[str, Path]:
    return write_report(result, board, tmp_path_factory.mktemp("report"))


def png_size(path: Path) -> tuple[int, int]:
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", f"{path.name} is not a PNG"
    assert data[12:16] == b"IHDR"
    width, height = struct.unpack(">II", data[16:24])
    return width, height


def leftovers(folder: Path) -> list[Path]:
    return [p for p in folder.rglob("*") if p.name.endswith(report_files.TEMP_SUFFIX)]


# --------------------------------------------------------------------------------- setup
def test_fixture_has_one_fail_one_near(result):
    assert [p.status for p in result.parts] == ["FAIL", "NEAR", "PASS"]
    assert result.verdict == "FAIL"


def test_write_report_writes_every_file(written):
    expected = {"report.md", "report.json", "junit.xml", "traces.csv", "junction.png",
                "board_map.png", "field.vtu", "field.pvd"}  # fmt: skip
    assert expected <= set(written)
    assert all(path.is_file() and path.stat().st_size > 0 for path in written.values())
    out_dir = written["report.md"].parent
    assert leftovers(out_dir) == []


# ---------------------------------------------------------------------------------- JSON
def test_json_round_trip_preserves_every_number(written, result):
    doc = read_report_json(written["report.json"])
    assert doc == report_dict(result)  # floats compare bit for bit
    u1 = doc["parts"][0]
    assert u1["tj_peak_c"] == result.parts[0].tj_peak - ZC
    assert u1["t_peak_s"] == result.parts[0].t_peak
    assert u1["margin_k"] == result.parts[0].margin
    assert u1["time_above_s"] == 1.0 / 3.0
    assert u1["energy_j"] == 0.01 + 0.02  # 0.030000000000000002: no rounding on the way
    assert doc["parts"][2]["tj_steady_c"] is None
    assert doc["sanity_checks"][0]["value"] == 0.0123456789
    assert doc["stats"]["seconds_total"] == 1.2345678901234567
    assert doc["stats"]["dofs"] == 12345
    assert doc["verdict"] == "FAIL"
    assert doc["counts"] == {"parts": 3, "pass": 1, "near": 1, "fail": 1}


def test_json_follows_its_schema(result):
    doc = report_dict(result)
    assert validate(doc, REPORT_JSON_SCHEMA) is None
    assert set(doc) == set(REPORT_JSON_SCHEMA["properties"])
    part_schema = REPORT_JSON_SCHEMA["properties"]["parts"]["items"]
    assert set(doc["parts"][0]) == set(part_schema["properties"])
    for key in part_schema["properties"]:
        unit_free = ("refdes", "package", "junction_model", "status")
        assert key in unit_free or key.rsplit("_", 1)[1] in ("c", "s", "k", "w", "j")


def test_json_non_finite_becomes_null(tmp_path, result, board):
    odd = replace(result, stats={**result.stats, "seconds_total": float("nan")})
    path = write_report(odd, board, tmp_path, formats=("json",))["report.json"]
    assert read_report_json(path)["stats"]["seconds_total"] is None


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda d: d.update(schema_version=2), "schema_version: found 2, expected 1"),
        (lambda d: d.update(schema_version=True), "schema_version: found True"),
        (lambda d: d.update(schema="other"), "schema: found 'other'"),
        (lambda d: d["parts"][1].update(tj_peak_c="hot"), "$.parts[1].tj_peak_c: found string"),
        (lambda d: d["parts"][0].pop("status"), "$.parts[0]: found no key 'status'"),
        (lambda d: d["laminate"].update(extra=1), "$.laminate.extra: found an unknown key"),
        (lambda d: d["parts"][0].update(status="OK"), "expected one of 'PASS', 'NEAR', 'FAIL'"),
    ],
)
def test_read_report_json_rejects_bad_documents(tmp_path, result, change, message):
    doc = json.loads(json.dumps(report_dict(result)))
    change(doc)
    path = tmp_path / "report.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    with pytest.raises(ReportError, match="report.json") as err:
        read_report_json(path)
    assert message in str(err.value)


def test_read_report_json_rejects_non_json_and_missing(tmp_path):
    bad = tmp_path / "report.json"
    bad.write_text("{not json", encoding="utf-8")
    with pytest.raises(ReportError, match="invalid JSON"):
        read_report_json(bad)
    with pytest.raises(ReportError, match="could not read"):
        read_report_json(tmp_path / "missing.json")
    bad.write_text("[1, 2]", encoding="utf-8")
    with pytest.raises(ReportError, match="found array, expected a JSON object"):
        read_report_json(bad)


# ----------------------------------------------------------------------------- JUnit XML
def test_junit_counts_and_failures(written):
    root = ET.parse(written["junit.xml"]).getroot()
    assert root.tag == "testsuites"
    (suite,) = root.findall("testsuite")
    assert suite.get("name") == "boardheat.demo.base"
    cases = suite.findall("testcase")
    assert len(cases) == 3 + 2 + 1
    assert suite.get("tests") == root.get("tests") == "6"
    assert suite.get("failures") == root.get("failures") == "2"
    assert (suite.get("errors"), suite.get("skipped"), suite.get("time")) == ("0", "0", "1.235")
    failed = {(c.get("classname"), c.get("name")): c.find("failure") for c in cases}
    u1 = failed[("parts", "U1")]
    assert u1 is not None
    assert u1.get("type") == "JunctionLimitExceeded"
    assert "exceeds Tj max" in u1.get("message")
    assert "125.0 °C" in u1.get("message")
    sanity = failed[("sanity", "energy balance")]
    assert sanity is not None
    assert sanity.get("type") == "SanityCheck"
    assert failed[("parts", "U2")] is None
    assert failed[("parts", "Q3")] is None
    assert failed[("sanity", "board Biot number")] is None
    assert failed[("laminate", "laminate")] is None
    near = next(c for c in cases if c.get("name") == "U2")
    assert near.findtext("system-out").startswith("NEAR")


def test_junit_strict_fails_near_parts(result):
    root = ET.fromstring(junit_xml(result, strict=True).encode())
    assert root.get("failures") == "3"
    u2 = next(c for c in root.iter("testcase") if c.get("name") == "U2")
    assert u2.find("failure").get("type") == "JunctionNearLimit"


def test_junit_escapes_awkward_names(result):
    part = replace(result.parts[0], refdes='U<1>&"x"\x01')
    odd = replace(result, parts=(part, *result.parts[1:]), board_name="a&b")
    root = ET.fromstring(junit_xml(odd).encode())
    assert root.find("testsuite").get("name") == "boardheat.a&b.base"
    names = [c.get("name") for c in root.iter("testcase")]
    assert 'U<1>&"x"\ufffd' in names


# ----------------------------------------------------------------------------------- CSV
def test_csv_header_rows_and_values(written, result):
    with open(written["traces.csv"], newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    header = rows[0]
    assert header[:4] == ["t_s", "tj_U1_c", "board_U1_c", "power_U1_w"]
    assert header[-1] == "board_mean_c"
    assert len(header) == 1 + 3 * 3 + 1
    assert len(rows) == 1 + len(result.traces.t)
    k = 37
    row = dict(zip(header, map(float, rows[1 + k]), strict=True))
    assert row["t_s"] == result.traces.t[k]
    assert row["tj_U2_c"] == result.traces.tj[k, 1] - ZC
    assert row["power_U1_w"] == result.traces.power[k, 0]
    assert row["board_mean_c"] == result.traces.mean[k] - ZC


# ------------------------------------------------------------------------------ Markdown
def test_markdown_has_verdict_tables_and_cautions(written, result):
    text = written["report.md"].read_text(encoding="utf-8")
    assert verdict_line(result) in text.replace("\\", "")
    assert "1 of 3 parts exceeds its Tj max" in text
    for caution in CAUTIONS:
        assert caution in text
    assert "confirm them by measurement on hardware" in text
    assert "can fail or ignite" in text
    assert "![Junction temperature" in text
    assert "(junction.png)" in text
    assert "(board_map.png)" in text
    assert "| degrees of freedom | 12345 |" in text
    assert "delivered 10 J" in text  # the sanity-check numbers
    assert "\\[bold\\]closure" in text  # warning text escaped, not formatted


def test_verdict_line_wording(result):
    line = verdict_line(result)
    assert line.startswith("FAIL — 1 of 3 parts exceeds its Tj max (U1 by ")
    assert "1 within the 5.0 K warning band (U2)" in line
    calm = replace(result, parts=(replace(result.parts[2]),))
    assert verdict_line(calm).startswith("PASS — all 1 part within Tj max")


# ---------------------------------------------------------------------------------- plots
@pytest.mark.parametrize("name", ["junction.png", "board_map.png"])
def test_plots_are_valid_pngs(written, name):
    width, height = png_size(written[name])
    assert 600 <= width <= 2400
    assert 300 <= height <= 2400


def test_plot_schedules(tmp_path, board):
    path = plot_schedules(board, tmp_path / "sub" / "schedule.png")
    width, height = png_size(path)
    assert width > 600
    assert height > 3 * 100
    assert leftovers(tmp_path) == []
    with pytest.raises(ReportError, match="t_end: found -1.0"):
        plot_schedules(board, tmp_path / "x.png", t_end=-1.0)


def test_schedule_polyline_is_exact():
    ramp_then_pulse = Schedule(
        np.array([0.5, 1.5, 2.0, 2.25]),
        np.array([0.0, 4.0, 4.0, 7.0]),
        np.array([0.0, 4.0, 7.0, 1.0]),
    )
    t, p = schedule_polyline(ramp_then_pulse, 3.0)
    rng = np.random.default_rng(SEED)
    probe = np.sort(rng.uniform(0.0, 3.0, 500))
    assert np.allclose(np.interp(probe, t, p), ramp_then_pulse.value(probe), atol=1e-12)
    i = np.flatnonzero(t == 2.0)
    assert p[i].tolist() == [4.0, 7.0]  # left then right value at the jump


def test_log_time_axis_choice(board):
    schedules = [p.schedule for p in board.parts]
    assert log_time_start(schedules, DURATION) == pytest.approx(1e-4)  # 1 ms pulse, 10 s run
    assert log_time_start(schedules[1:], DURATION) is None  # first breakpoint at 2 s
    assert log_time_start([constant(1.0)], DURATION) is None


def test_steady_result_plots_bars(tmp_path, result, board):
    steady_traces = replace(result.traces, t=result.traces.t[-1:], tj=result.traces.tj[-1:],
                            board=result.traces.board[-1:], power=result.traces.power[-1:],
                            mean=result.traces.mean[-1:], loss=result.traces.loss[-1:])  # fmt: skip
    steady = replace(result, steady=True, traces=steady_traces, fields=None)
    out = write_report(steady, board, tmp_path, formats=("png", "md"))
    assert png_size(out["junction.png"])[0] > 400
    assert "steady state" in out["report.md"].read_text(encoding="utf-8")


# ---------------------------------------------------------------------------------- fields
def test_vtu_at_hottest_instant_reads_back(written, result):
    mesh = meshio.read(written["field.vtu"])
    assert mesh.cells[0].type == "wedge"
    frame = result.fields.values[1]  # the recorded time equal to the hot field's time
    np.testing.assert_array_equal(mesh.point_data["temperature_c"], frame - ZC)
    np.testing.assert_array_equal(mesh.cells[0].data, result.fields.wedges)


def test_vtu_series_collection(written, result):
    root = ET.parse(written["field.pvd"]).getroot()
    sets = root.findall("Collection/DataSet")
    assert [float(s.get("timestep")) for s in sets] == result.fields.times.tolist()
    out_dir = written["field.pvd"].parent
    last = meshio.read(out_dir / sets[-1].get("file"))
    np.testing.assert_array_equal(last.point_data["temperature_c"], result.fields.values[2] - ZC)


def test_vtu_without_3d_fields_extrudes_the_surfaces(tmp_path, board):
    plain = make_result(fields=False)
    out = write_report(plain, board, tmp_path, formats=("vtu",))
    assert set(out) == {"field.vtu"}
    mesh = meshio.read(out["field.vtu"])
    n = len(plain.hot.points)
    temps = mesh.point_data["temperature_c"]
    np.testing.assert_array_equal(temps[:n], plain.hot.top - ZC)
    np.testing.assert_array_equal(temps[n:], plain.hot.bottom - ZC)
    assert mesh.points[n:, 2] == pytest.approx(-board.thickness)


# ------------------------------------------------------------------------- atomic writes
def test_failing_png_writer_leaves_nothing(tmp_path, result, board, monkeypatch):
    from matplotlib.figure import Figure

    def half_written(self, fname, **kwargs):
        Path(fname).write_bytes(b"\x89PNG\r\n\x1a\n partial")
        raise RuntimeError("disk full while drawing")

    monkeypatch.setattr(Figure, "savefig", half_written)
    with pytest.raises(RuntimeError, match="disk full"):
        write_report(result, board, tmp_path, formats=("png",))
    assert not (tmp_path / "junction.png").exists()
    assert list(tmp_path.iterdir()) == []


def test_failing_vtu_writer_leaves_nothing(tmp_path, result, board, monkeypatch):
    def half_written(path, mesh, file_format=None):
        Path(path).write_text("<VTKFile", encoding="utf-8")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(meshio, "write", half_written)
    with pytest.raises(ReportError, match="field.vtu: could not write the file"):
        write_report(result, board, tmp_path, formats=("vtu",))
    assert list(tmp_path.iterdir()) == []


def test_failed_replace_keeps_previous_file(tmp_path, result, board, monkeypatch):
    target = tmp_path / "report.json"
    target.write_text("previous", encoding="utf-8")

    def refuse(src, dst):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(report_files.os, "replace", refuse)
    with pytest.raises(ReportError, match="report.json: could not write the file"):
        write_report(result, board, tmp_path, formats=("json",))
    assert target.read_text(encoding="utf-8") == "previous"
    assert leftovers(tmp_path) == []


# ----------------------------------------------------------------------------- bad input
def test_bad_arguments_get_clear_errors(tmp_path, result, board):
    with pytest.raises(ReportError, match="found 'pdf', expected some of md, json"):
        write_report(result, board, tmp_path, formats=("md", "pdf"))
    blocker = tmp_path / "file"
    blocker.write_text("x", encoding="utf-8")
    with pytest.raises(ReportError, match="found a file, expected a folder"):
        write_report(result, board, blocker)
    other = replace(board, parts=board.parts[:2])
    with pytest.raises(ReportError, match="found no part 'Q3'"):
        write_report(result, other, tmp_path / "new")
    assert not (tmp_path / "new").exists()
    with pytest.raises(ReportError, match="found no results"):
        write_compare([], board, tmp_path)


# ------------------------------------------------------------------------------ terminal
def test_terminal_output(result):
    console = Console(record=True, no_color=True, width=120)
    render_terminal(result, console)
    text = console.export_text()
    for refdes in ("U1", "U2", "Q3"):
        assert refdes in text
    assert "Verdict: FAIL — 1 of 3 parts exceeds its Tj max" in text
    assert CAUTION_LINE[:60] in " ".join(text.split())
    assert "[bold]closure[/bold]" in text  # data is never read as markup
    assert "energy balance" in text
    assert "DISAGREES" in text
    assert "laminate: hottest board point 90.0 °C" in text
    assert "run: 12345 DOFs, 59 steps (2 rejected), 4 factorizations" in text
    assert "\x1b[" not in text


# ------------------------------------------------------------------------------- compare
def test_compare_files_and_terminal(tmp_path, result, board):
    cooler = make_result(scale=0.8, variant="thick copper")
    out = write_compare([result, cooler], board, tmp_path)
    assert set(out) == {"compare.md", "compare.json", "compare.png"}
    png_size(out["compare.png"])
    doc = json.loads(out["compare.json"].read_text(encoding="utf-8"))
    assert doc["schema"] == "boardheat-compare"
    assert doc["critical_refdes"] == "U1"
    u1 = doc["parts"][0]["variants"]
    assert u1[0]["delta_k"] is None
    assert u1[1]["delta_k"] == cooler.parts[0].tj_peak - result.parts[0].tj_peak
    assert [v["verdict"] for v in doc["variants"]] == ["FAIL", "PASS"]
    md = out["compare.md"].read_text(encoding="utf-8")
    assert "thick copper" in md
    assert CAUTIONS[1] in md
    assert "(compare.png)" in md
    console = Console(record=True, no_color=True, width=160)
    render_compare([result, cooler], console)
    text = console.export_text()
    delta = cooler.parts[0].tj_peak - result.parts[0].tj_peak
    assert f"{delta:+.1f}" in text
    assert "thick copper: PASS" in text
    assert "base: FAIL" in text
    assert leftovers(tmp_path) == []
