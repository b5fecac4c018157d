"""Shared fixtures: small boards built in code (raw board-file mappings), no TOML needed."""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import pytest

from boardheat.board.load import board_from_raw
from boardheat.board.model import Board

ROOT = Path(__file__).resolve().parents[1]


def stackup_toml(core_mm: float, fill: float) -> str:
    """Return the ``[[stackup]]`` tables of a 1 oz / core / 1 oz board as board-file text.

    The text has no braces, so it can be joined into a ``str.format`` template.
    """
    copper = f'kind = "copper"\nweight_oz = 1\nfill = {fill!r}\n'
    return (
        f'[[stackup]]\nname = "top"\n{copper}\n'
        f'[[stackup]]\nname = "core"\nkind = "dielectric"\nthickness_mm = {core_mm!r}\n\n'
        f'[[stackup]]\nname = "bottom"\n{copper}'
    )


def raw_board(**overrides: Any) -> dict[str, Any]:
    """Return a valid raw 2-layer 40 x 30 mm board with one part; keys can be overridden."""
    raw: dict[str, Any] = {
        "format_version": 1,
        "name": "test",
        "outline": {"polygon_mm": [[0, 0], [40, 0], [40, 30], [0, 30]]},
        "stackup": [
            {"name": "top", "kind": "copper", "thickness_um": 35.0, "fill": 0.5},
            {"name": "core", "kind": "dielectric", "thickness_mm": 1.5},
            {"name": "bot", "kind": "copper", "thickness_um": 35.0, "fill": 0.5},
        ],
        "environment": {
            "ambient_c": 25.0,
            "h_top_w_per_m2k": 10.0,
            "h_bottom_w_per_m2k": 10.0,
            "h_edge_w_per_m2k": 10.0,
        },
        "run": {"duration_s": 10.0},
        "part": [
            {
                "refdes": "U1",
                "body_mm": [5.0, 5.0, 1.0],
                "x_mm": 20.0,
                "y_mm": 15.0,
                "theta_jb_k_per_w": 10.0,
                "tj_max_c": 125.0,
                "power": 1.0,
            },
        ],
    }
    out = copy.deepcopy(raw)
    out.update(copy.deepcopy(overrides))
    return out


def make_board(raw: dict[str, Any], name: str = "test.toml") -> Board:
    """Validate a raw mapping as if read from ``name``."""
    return board_from_raw(raw, Path(name))


@pytest.fixture
def small_board() -> Board:
    return make_board(raw_board())
