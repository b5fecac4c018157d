"""Board-file stage: validation messages, unit conversion, packages, variants."""

from __future__ import annotations

import math

import numpy as np
import pytest

from boardheat.board import json_schema, list_packages, load_board
from boardheat.board.load import apply_variant
from boardheat.errors import BoardFileError
from tests.conftest import ROOT, make_board, raw_board


def test_units_are_converted_to_si(small_board):
    b = small_board
    assert b.environment.ambient == pytest.approx(298.15)
    assert b.layers[0].thickness == pytest.approx(35e-6)
    assert b.thickness == pytest.approx(1.57e-3)
    assert b.parts[0].tj_max == pytest.approx(398.15)
    assert b.parts[0].center.tolist() == pytest.approx([0.02, 0.015])
    assert b.area == pytest.approx(0.04 * 0.03)


def test_weight_oz_gives_ipc_thickness():
    raw = raw_board()
    raw["stackup"][0] = {"name": "top", "kind": "copper", "weight_oz": 2, "fill": 1.0}
    # 1 oz/ft^2 = 34.8 um (IPC-4562 nominal, recalled from memory)
    assert make_board(raw).layers[0].thickness == pytest.approx(69.6e-6)


def test_arrays_are_read_only(small_board):
    with pytest.raises(ValueError, match="read-only"):
        small_board.outline[0, 0] = 1.0


@pytest.mark.parametrize(
    ("mutate", "phrase"),
    [
        (lambda r: r["part"][0].pop("tj_max_c"), "part[U1].tj_max_c: missing"),
        (lambda r: r["part"][0].update(x_mm="20"), "part[U1].x_mm: found '20', expected"),
        (lambda r: r.update(stackup=[]), "stackup: found [], expected"),
        (
            lambda r: r["outline"].update(polygon_mm=[[0, 0], [40, 30], [40, 0], [0, 30]]),
            "crosses itself",
        ),
        (
            lambda r: r["part"][0].update(x_mm=39.0),
            "part[U1]: footprint at (39, 15) mm: it reaches outside the board outline",
        ),
        (
            lambda r: r["part"][0].update(package="QFN-33-5x5", body_mm=None),
            "not in geometry/packages (closest: 'QFN-32-5x5')",
        ),
        (lambda r: r["stackup"][1].update(material="fr5"), "stackup[core].material: 'fr5'"),
        (lambda r: r["part"][0].update(colour="red"), "part[U1].colour: unknown key"),
        (lambda r: r["stackup"][0].pop("fill"), "stackup[top]: found"),
        (
            lambda r: r["environment"].update(h_top_w_per_m2k=-1.0),
            "environment.h_top_w_per_m2k: found -1.0, expected",
        ),
        (lambda r: r["run"].update(dt_s=100.0), "run.dt_s: 100 s; expected <= duration_s"),
        (lambda r: r["part"][0].update(power={"steps": [[0.0, -1.0]]}), "part[U1].power"),
    ],
)
def test_bad_input_names_file_field_and_expectation(mutate, phrase):
    raw = raw_board()
    mutate(raw)
    if raw["part"][0].get("body_mm", 1) is None:
        raw["part"][0].pop("body_mm")
    with pytest.raises(BoardFileError) as info:
        make_board(raw)
    msg = str(info.value)
    assert msg.startswith("test.toml: "), msg
    assert phrase in msg, msg


def test_hole_under_part_is_rejected():
    raw = raw_board()
    raw["outline"]["holes"] = [{"circle": {"center_mm": [20, 15], "diameter_mm": 2.0}}]
    with pytest.raises(BoardFileError, match="overlaps outline hole 0"):
        make_board(raw)


def test_clockwise_outline_is_reoriented():
    raw = raw_board()
    raw["outline"]["polygon_mm"] = [[0, 0], [0, 30], [40, 30], [40, 0]]
    poly = make_board(raw).outline
    signed = 0.5 * np.sum(
        poly[:, 0] * np.roll(poly[:, 1], -1) - poly[:, 1] * np.roll(poly[:, 0], -1)
    )
    assert signed > 0


def test_package_library_supplies_sizes_and_defaults():
    assert "SOIC-8" in list_packages()
    raw = raw_board()
    raw["part"][0].pop("body_mm")
    raw["part"][0].pop("theta_jb_k_per_w")
    raw["part"][0]["package"] = "QFN-32-5x5"
    part = make_board(raw).parts[0]
    assert part.body[:2].tolist() == pytest.approx([5e-3, 5e-3])
    assert part.footprint.max() < 5e-3  # exposed pad smaller than the body
    assert part.theta_jb > 0
    # body capacity = volume x mould-compound rho c (package file value)
    assert part.body_capacity == pytest.approx(float(np.prod(part.body)) * 1.6e6, rel=0.3)


def test_rotation_turns_the_footprint():
    raw = raw_board()
    raw["part"][0].update(body_mm=[8.0, 2.0, 1.0], rotation_deg=90.0)
    poly = make_board(raw).parts[0].footprint_polygon()
    ext = poly.max(axis=0) - poly.min(axis=0)
    assert ext.tolist() == pytest.approx([2e-3, 8e-3])


def test_variant_overrides_by_field_path():
    raw = raw_board(
        variant=[
            {
                "name": "heavy",
                "set": {
                    "stackup.top.weight_oz": 2,
                    "part.U1.power": 2.5,
                    "environment.h_top_w_per_m2k": 15.0,
                },
            }
        ]
    )
    changed = apply_variant(raw, "heavy", make_board(raw_board()).source)
    b = make_board(changed)
    assert b.layers[0].thickness == pytest.approx(2 * 34.8e-6)
    assert float(b.parts[0].schedule.value(1.0)) == 2.5
    assert b.environment.h_top == 15.0
    assert raw["stackup"][0]["thickness_um"] == 35.0  # base untouched


def test_variant_with_unknown_target_is_an_error():
    raw = raw_board(variant=[{"name": "v", "set": {"part.U9.power": 1.0}}])
    with pytest.raises(BoardFileError, match="part 'U9' not found"):
        apply_variant(raw, "v", make_board(raw_board()).source)


def test_demo_board_loads():
    b = load_board(ROOT / "demo_boards" / "buck_4layer" / "board.toml")
    assert len(b.parts) == 7
    assert b.events["core_on"] == pytest.approx(0.025)


def test_json_schema_describes_the_format():
    schema = json_schema()
    assert schema["title"] == "boardheat board file"
    assert {"outline", "stackup", "part", "run"} <= set(schema["required"])
    assert "PartSpec" in schema["$defs"]


def test_missing_file_is_a_board_file_error(tmp_path):
    with pytest.raises(BoardFileError, match="not found"):
        load_board(tmp_path / "nope.toml")


def test_toml_syntax_error_is_reported(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("format_version = 1\nname = \n")
    with pytest.raises(BoardFileError, match="not valid TOML"):
        load_board(bad)


def test_via_field_fraction_is_the_barrel_area_over_pitch_squared():
    raw = raw_board(
        via_field=[
            {
                "name": "v1",
                "rect": {"center_mm": [20, 15], "size_mm": [4, 4]},
                "drill_mm": 0.3,
                "plating_um": 25.0,
                "pitch_mm": 1.0,
            }
        ]
    )
    via = make_board(raw).via_fields[0]
    r_o, r_i = 0.15e-3, 0.125e-3
    assert via.copper_fraction == pytest.approx(math.pi * (r_o**2 - r_i**2) / 1e-6)
