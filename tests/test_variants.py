"""Design variants: compare equals solving each variant alone, mesh reuse, errors, CLI.

The demo board ``demo_boards/copper_options`` (our own invention) is solved in steady state in
the default run (a second or so per variant); its full transient comparison is ``slow``. The
short transient and CLI runs use the small boards below, also of our own invention.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from boardheat import variants
from boardheat.board import load_board, load_variants
from boardheat.board.load import apply_variant, board_from_raw
from boardheat.checks import CheckResult
from boardheat.cli import app
from boardheat.errors import BoardFileError
from boardheat.meshing import element_sizes
from boardheat.report.compare import critical_refdes
from boardheat.run import RunOptions, run_check
from boardheat.variants import geometry_key, run_variants
from tests.conftest import ROOT, make_board, raw_board, stackup_toml

pytestmark = pytest.mark.gmsh

DEMO = ROOT / "demo_boards" / "copper_options" / "board.toml"
DEMO_VARIANTS = ["base", "inner_2oz", "big_pour", "via_field", "all_copper"]
COPPER_OPTIONS = ["inner_2oz", "big_pour", "via_field"]

#: a small two-part board with two copper options (our own invention): U1 fails in the base
SMALL = (
    """\
# test board of our own invention
format_version = 1
name = "variant_test"

[outline]
polygon_mm = [[0, 0], [30, 0], [30, 20], [0, 20]]

"""
    + stackup_toml(core_mm=1.0, fill=0.3)
    + """
[environment]
ambient_c = 25

[run]
duration_s = 5.0
margin_k = 3.0

[[part]]
refdes = "U1"
body_mm = [4, 4, 1]
x_mm = 10
y_mm = 10
theta_jb_k_per_w = 10
tj_max_c = 100
power = {{ steps = [[0, 0.5]], pulses = [{{ start_s = 1.0, width_s = 0.5, power_w = 3.0 }}] }}

[[part]]
refdes = "R1"
body_mm = [3, 1.5, 0.5]
x_mm = 22
y_mm = 10
theta_jb_k_per_w = 20
tj_max_c = 125
power = 0.2

[[variant]]
name = "heavy"
description = "2 oz outer copper"
set = {{ "stackup.top.weight_oz" = 2, "stackup.bottom.weight_oz" = 2 }}

[[variant]]
name = "vias"
description = "thermal vias and a bottom pour under U1"
[[variant.add_via_field]]
name = "VU1"
rect = {{ center_mm = [10, 10], size_mm = [4, 4] }}
drill_mm = 0.3
pitch_mm = 0.8

[[variant.add_pour]]
name = "PU1"
layer = "bottom"
rect = {{ center_mm = [10, 10], size_mm = [12, 12] }}
{extra}"""
)

#: a 120 x 80 mm board with sparse copper whose far-field element size is set by the in-plane
#: spreading length sqrt(sum(k t)/(h_top + h_bottom)) (our own invention)
WIDE = (
    """\
# test board of our own invention
format_version = 1
name = "wide"

[outline]
polygon_mm = [[0, 0], [120, 0], [120, 80], [0, 80]]

"""
    + stackup_toml(core_mm=1.5, fill=0.3)
    + """
[environment]
ambient_c = 25
h_top_w_per_m2k = 10
h_bottom_w_per_m2k = 10

[run]
duration_s = 5.0

[[part]]
refdes = "U1"
body_mm = [5, 5, 1]
x_mm = 40
y_mm = 40
theta_jb_k_per_w = 10
tj_max_c = 125
power = 1.0

[[variant]]
name = "fan"
description = "forced air on top: changes only h, but h sets the far-field element size here"
set = { "environment.h_top_w_per_m2k" = 30 }

[[variant]]
name = "hotter"
set = { "part.U1.power" = 2.0 }
"""
)


def _small(tmp_path: Path, extra: str = "") -> Path:
    path = tmp_path / "board.toml"
    path.write_text(SMALL.format(extra=extra))
    return path


def _assert_same(a: CheckResult, b: CheckResult, rel: float = 1e-9) -> None:
    """Assert that two results agree part by part (peak, time of peak, steady, footprint)."""
    assert [p.refdes for p in a.parts] == [p.refdes for p in b.parts]
    for pa, pb in zip(a.parts, b.parts, strict=True):
        assert pa.tj_peak == pytest.approx(pb.tj_peak, rel=rel), pa.refdes
        assert pa.board_peak == pytest.approx(pb.board_peak, rel=rel), pa.refdes
        assert pa.tj_steady == pytest.approx(pb.tj_steady, rel=rel), pa.refdes
        assert pa.t_peak == pytest.approx(pb.t_peak, rel=rel), pa.refdes
        assert pa.status == pb.status
    assert a.laminate.peak == pytest.approx(b.laminate.peak, rel=rel)
    assert a.verdict == b.verdict
    assert a.stats["dofs"] == b.stats["dofs"]


def _counting_build_mesh(calls: list[str]):
    real = variants.build_mesh

    def counting(board, verbose=False):
        calls.append(board.variant)
        return real(board, verbose=verbose)

    return counting


@pytest.fixture(scope="module")
def demo_steady():
    """Solve the demo board's variants in steady state once, counting the meshes built."""
    calls: list[str] = []
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(variants, "build_mesh", _counting_build_mesh(calls))
        results, boards = run_variants(DEMO, RunOptions(steady=True), jobs=1)
    return results, boards, calls


# ----------------------------------------------------------------------------- demo board
def test_demo_board_declares_its_copper_options():
    boards = load_variants(DEMO)
    assert [b.variant for b in boards] == DEMO_VARIANTS
    base = boards[0]
    assert "own invention" in DEMO.read_text()
    assert len(base.mounts) == 1
    assert {p.refdes for p in base.parts} >= {"Q1", "Q2", "U1", "R1"}
    by_name = {b.variant: b for b in boards}
    layer = base.layer_index("L2")
    heavy = by_name["inner_2oz"].layers[layer].thickness
    assert heavy == pytest.approx(2 * base.layers[layer].thickness)
    assert len(by_name["big_pour"].pours) == len(base.pours) + 1
    assert len(by_name["via_field"].via_fields) == len(base.via_fields) + 2


def test_compare_equals_each_variant_solved_alone(demo_steady):
    """run_variants (shared meshes) and load_board(variant=...) + run_check agree to 1e-9."""
    results, boards, _ = demo_steady
    assert [r.variant for r in results] == DEMO_VARIANTS
    for result, board in zip(results, boards, strict=True):
        alone = run_check(load_board(DEMO, variant=board.variant), RunOptions(steady=True))
        _assert_same(result, alone)


def test_mesh_is_built_once_per_geometry(demo_steady):
    """Build the 2D mesh once per distinct geometry key.

    The 2 oz inner-plane variant changes no region and no element size (only the thickness,
    which the 2D mesh does not see): it reuses the base mesh. The pour and via options embed
    new regions and get their own.
    """
    results, boards, calls = demo_steady
    keys = [geometry_key(b) for b in boards]
    assert keys[0] == keys[1]
    assert len(set(keys)) == 4
    assert calls == ["base", "big_pour", "via_field", "all_copper"]
    assert results[1].stats["nodes_2d"] == results[0].stats["nodes_2d"]


def test_adding_copper_never_heats_the_critical_parts(demo_steady):
    """Physical monotonicity on the demo board: copper options lower the power stage's Tj.

    For a single heat source the rise at the source is P R_eff, and R_eff never grows when any
    conductance grows (Rayleigh's monotonicity law for resistor networks, e.g. Doyle & Snell,
    Random Walks and Electric Networks, 1984, sec. 1.4; recalled from memory). With several
    sources a part may warm because a neighbour's heat now spreads toward it (U2, away from
    the new copper, warms by ~0.1 K with the big pour), so this is a check of the demo board,
    not a theorem: the MOSFETs and the base's critical part get no hotter with any option, and
    the combination is at least as good as each option alone. Tolerance 1e-9 K.
    """
    results, _, _ = demo_steady
    by_name = {r.variant: {p.refdes: p.tj_peak for p in r.parts} for r in results}
    watched = {"Q1", "Q2", critical_refdes(results)}
    for refdes in watched:
        base = by_name["base"][refdes]
        for option in [*COPPER_OPTIONS, "all_copper"]:
            assert by_name[option][refdes] <= base + 1e-9, (option, refdes)
        best_single = min(by_name[o][refdes] for o in COPPER_OPTIONS)
        assert by_name["all_copper"][refdes] <= best_single + 1e-9, refdes
    # each option matters by more than a rounding: at least 1 K on Q1
    assert all(by_name[o]["Q1"] < by_name["base"]["Q1"] - 1.0 for o in COPPER_OPTIONS)


@pytest.mark.slow
def test_demo_transient_comparison_tells_the_copper_story():
    """The full transient check: the base fails on Q1 (stall pulse), the best option passes."""
    results, _ = run_variants(DEMO, RunOptions(), jobs=2)
    by_name = {r.variant: r for r in results}
    assert critical_refdes(results) == "Q1"
    assert by_name["base"].verdict in ("NEAR", "FAIL")
    assert by_name["all_copper"].verdict == "PASS"
    q1 = {name: next(p for p in r.parts if p.refdes == "Q1") for name, r in by_name.items()}
    for option in [*COPPER_OPTIONS, "all_copper"]:
        assert q1[option].tj_peak <= q1["base"].tj_peak + 1e-9, option
    alone = run_check(load_board(DEMO, variant="via_field"))
    _assert_same(by_name["via_field"], alone)


# ----------------------------------------------------------------------------- small boards
def test_transient_compare_in_worker_processes_equals_each_variant_alone(tmp_path):
    """The process pool (spawn) returns what a serial, one-variant-at-a-time run returns."""
    path = _small(tmp_path)
    results, boards = run_variants(path, RunOptions(), jobs=2)
    assert [r.variant for r in results] == ["base", "heavy", "vias"]
    for result, board in zip(results, boards, strict=True):
        alone = run_check(load_board(path, variant=board.variant), RunOptions())
        _assert_same(result, alone)
        assert not result.steady
        assert len(result.traces.t) > 10


def test_geometry_key_follows_the_element_sizes():
    """Key the mesh on the element sizes, not only on the polygons.

    Heat transfer coefficients change the far-field element size on a wide sparse board, so a
    variant that only changes h must not reuse the base mesh; a power change may.
    """
    raw_path = Path("wide.toml")
    raw = tomllib.loads(WIDE)
    base = board_from_raw({k: v for k, v in raw.items() if k != "variant"}, raw_path)
    fan = board_from_raw(apply_variant(raw, "fan", raw_path), raw_path, "fan")
    hotter = board_from_raw(apply_variant(raw, "hotter", raw_path), raw_path, "hotter")
    assert element_sizes(fan)["far"] < element_sizes(base)["far"]
    assert geometry_key(fan) != geometry_key(base)
    assert element_sizes(hotter) == element_sizes(base)
    assert geometry_key(hotter) == geometry_key(base)


def test_geometry_key_tells_a_pour_from_a_via_field_on_the_same_polygon():
    """The mesh names its regions 'pour:X' or 'via:X': the key must tell them apart."""
    square = {"polygon_mm": [[5, 5], [15, 5], [15, 15], [5, 15]]}
    pour = make_board(raw_board(pour=[{"name": "X", "layer": "top", **square}]))
    via = make_board(raw_board(via_field=[{"name": "X", "drill_mm": 0.3, "count": 10, **square}]))
    assert geometry_key(pour) != geometry_key(via)


def test_compare_equals_alone_when_a_variant_changes_the_element_size(tmp_path):
    """Regression: the mesh of the base was reused for a variant that meshes differently."""
    path = tmp_path / "wide.toml"
    path.write_text(WIDE)
    calls: list[str] = []
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(variants, "build_mesh", _counting_build_mesh(calls))
        results, boards = run_variants(path, RunOptions(steady=True), jobs=1)
    assert calls == ["base", "fan"]
    for result, board in zip(results, boards, strict=True):
        alone = run_check(load_board(path, variant=board.variant), RunOptions(steady=True))
        _assert_same(result, alone)


# ----------------------------------------------------------------------------- CLI
def test_cli_compare_exit_code_table_and_files(tmp_path):
    path = _small(tmp_path)
    out = tmp_path / "cmp"
    res = CliRunner().invoke(app, ["compare", str(path), "--jobs", "1", "--out", str(out)])
    assert res.exit_code == 1, res.output  # the base fails
    assert "base: FAIL" in res.output
    assert "vias: PASS" in res.output
    assert f"comparison written to {out}/" in res.output
    data = json.loads((out / "compare.json").read_text())
    assert [v["variant"] for v in data["variants"]] == ["base", "heavy", "vias"]
    assert data["critical_refdes"] == "U1"
    u1 = next(p for p in data["parts"] if p["refdes"] == "U1")
    deltas = [v["delta_k"] for v in u1["variants"]]
    assert deltas[0] is None
    assert all(d < 0 for d in deltas[1:])
    assert (out / "compare.png").stat().st_size > 0
    assert (out / "compare.md").read_text().startswith("# Variant comparison: variant")


def test_cli_compare_steady_on_the_demo_passes(tmp_path):
    """In steady state (final powers, no stall pulse) every demo variant is within limits."""
    res = CliRunner().invoke(app, ["compare", str(DEMO), "--steady", "--jobs", "1"])
    assert res.exit_code == 0, res.output
    for name in DEMO_VARIANTS:
        assert f"{name}: PASS" in res.output


def test_cli_compare_with_a_bad_variant_exits_2_naming_the_field(tmp_path):
    extra = '\n[[variant]]\nname = "thick"\nset = { "stackup.L9.weight_oz" = 2 }\n'
    res = CliRunner().invoke(app, ["compare", str(_small(tmp_path, extra)), "--jobs", "1"])
    assert res.exit_code == 2
    assert "variant[thick].set.'stackup.L9.weight_oz': stackup 'L9' not found" in res.output
    assert "Traceback" not in res.output


def test_cli_check_unknown_variant_exits_2(tmp_path):
    res = CliRunner().invoke(app, ["check", str(_small(tmp_path)), "--variant", "vais"])
    assert res.exit_code == 2
    assert "variant: 'vais' not defined (closest: 'vias')" in res.output


# ----------------------------------------------------------------------------- variant errors
@pytest.mark.parametrize(
    ("extra", "phrase"),
    [
        (
            '[[variant]]\nname = "v"\nset = { "part.U9.power" = 1.0 }\n',
            r"variant\[v\]\.set\.'part\.U9\.power': part 'U9' not found",
        ),
        (
            '[[variant]]\nname = "v"\nset = { "stackup.top.weight_oz.x" = 1.0 }\n',
            r"variant\[v\]\.set\.'stackup\.top\.weight_oz\.x': expected a path ending in a key",
        ),
        (
            '[[variant]]\nname = "v"\nset = { "outline.polygon_mm.1" = 3 }\n',
            r"variant\[v\]\.set\.'outline\.polygon_mm\.1': expected a path ending in a key",
        ),
        (
            '[[variant]]\nname = "v"\nadd_pour = { name = "P" }\n',
            r"variant\[v\]\.add_pour: found \{'name': 'P'\}, "
            r"expected: input should be a valid list",
        ),
        (
            '[[variant]]\nname = "v"\nset = { "part.U1.power" = -1.0 }\n',
            r"part\[U1\]\.power",
        ),
    ],
    ids=["unknown-refdes", "path-through-a-value", "list-index", "add-not-a-list", "bad-value"],
)
def test_variant_errors_name_the_field_path(tmp_path, extra, phrase):
    with pytest.raises(BoardFileError, match=phrase):
        load_variants(_small(tmp_path, extra))


def test_unknown_variant_lists_the_closest_name(tmp_path):
    with pytest.raises(BoardFileError, match=r"variant: 'heavvy' not defined \(closest: 'heavy'\)"):
        load_board(_small(tmp_path), variant="heavvy")


def test_duplicate_variant_names_are_rejected(tmp_path):
    extra = '[[variant]]\nname = "heavy"\nset = { "part.U1.power" = 2.0 }\n'
    with pytest.raises(BoardFileError, match=r"variant\[heavy\]\.name: duplicate"):
        load_board(_small(tmp_path, extra))


def test_variant_named_base_is_rejected(tmp_path):
    extra = '[[variant]]\nname = "base"\nset = { "part.U1.power" = 2.0 }\n'
    with pytest.raises(BoardFileError, match=r"variant\[base\]\.name"):
        load_board(_small(tmp_path, extra))


def test_variant_path_through_a_missing_list_is_a_board_file_error(tmp_path):
    extra = '[[variant]]\nname = "v"\nset = { "run.part.x" = 1 }\n'
    with pytest.raises(BoardFileError, match=r"variant\[v\]\.set\.'run\.part\.x'"):
        load_variants(_small(tmp_path, extra))


def test_error_in_a_variants_result_names_the_variant(tmp_path):
    extra = '[[variant]]\nname = "v"\nset = { "part.U1.tj_max_c" = "hot" }\n'
    with pytest.raises(BoardFileError, match=r"part\[U1\]\.tj_max_c.*variant\[v\]"):
        load_variants(_small(tmp_path, extra))
