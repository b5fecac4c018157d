"""Every demo board end to end against its pinned expected.json (change pins only on purpose).

Pins are written by ``python scripts/pin_demos.py``; peak junction temperatures must agree to
rel = 1e-6, verdicts and statuses exactly, and the sanity checks must stay quiet.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from boardheat.board import load_board
from boardheat.run import RunOptions, run_check

ROOT = Path(__file__).resolve().parents[1]
DEMOS = sorted(p.parent for p in ROOT.glob("demo_boards/*/board.toml"))

pytestmark = pytest.mark.gmsh


def test_there_are_demo_boards():
    assert len(DEMOS) >= 1


@pytest.mark.parametrize("demo", DEMOS, ids=[d.name for d in DEMOS])
def test_demo_board_matches_its_pins(demo):
    pins = demo / "expected.json"
    assert pins.is_file(), f"{pins} missing: run python scripts/pin_demos.py {demo}"
    expected = json.loads(pins.read_text())
    result = run_check(load_board(demo / "board.toml"), RunOptions())
    assert result.verdict == expected["verdict"]
    assert result.stats["dofs"] == expected["dofs"]
    for part in result.parts:
        assert part.tj_peak - 273.15 == pytest.approx(expected["tj_peak_c"][part.refdes], rel=1e-6)
        assert part.status == expected["status"][part.refdes]
    assert result.laminate.peak - 273.15 == pytest.approx(expected["laminate_peak_c"], rel=1e-6)
    # the lumped-capacitance sanity checks stay quiet on a sound model
    assert [c.name for c in result.sanity if not c.passed] == expected["sanity_failed"] == []
    assert not result.warnings
