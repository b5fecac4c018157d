"""Board file stage: TOML (or DXF outline) in, a validated SI :class:`Board` out.

The file format is defined in :mod:`boardheat.board.schema`; the SI dataclasses in
:mod:`boardheat.board.model`; reading, variants and cross-field checks in
:mod:`boardheat.board.load`; DXF outlines in :mod:`boardheat.board.dxf`.
"""

from boardheat.board.load import (
    geometry_dir,
    list_packages,
    load_board,
    load_variants,
    read_raw,
    variant_names,
)
from boardheat.board.model import (
    Board,
    Environment,
    Layer,
    Material,
    Mount,
    Part,
    Pour,
    Region,
    RunSettings,
    ViaField,
)
from boardheat.board.schema import json_schema

__all__ = [
    "Board",
    "Environment",
    "Layer",
    "Material",
    "Mount",
    "Part",
    "Pour",
    "Region",
    "RunSettings",
    "ViaField",
    "geometry_dir",
    "json_schema",
    "list_packages",
    "load_board",
    "load_variants",
    "read_raw",
    "variant_names",
]
