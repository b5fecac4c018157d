"""The board file format (TOML) as pydantic models: structure, types, ranges and units.

This is the file boundary of boardheat. The models here check the *shape* of a board file
(every key, its type, its range) and carry the units in the key names; cross-field rules
(layer names that must exist, parts on the board, schedules and events) are checked by
:mod:`boardheat.board.load` when it converts these models to SI dataclasses. The JSON Schema
printed by ``boardheat schema`` is generated from these models.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

FORMAT_VERSION = 1

Point = Annotated[list[float], Field(min_length=2, max_length=2, description="[x, y] in mm")]
Positive = Annotated[float, Field(gt=0)]
NonNegative = Annotated[float, Field(ge=0)]
Fraction01 = Annotated[float, Field(ge=0, le=1)]
Name = Annotated[str, Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.+\-]+$")]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)


class CircleSpec(_Strict):
    """A circle: centre and diameter in millimetres."""

    center_mm: Point
    diameter_mm: Positive


class RectSpec(_Strict):
    """An axis-aligned rectangle (optionally rotated) given by centre and size in millimetres."""

    center_mm: Point
    size_mm: Annotated[list[Positive], Field(min_length=2, max_length=2)]
    rotation_deg: float = 0.0


class HoleSpec(_Strict):
    """A cut-out: exactly one of a circle or a polygon."""

    circle: CircleSpec | None = None
    polygon_mm: Annotated[list[Point], Field(min_length=3)] | None = None

    @model_validator(mode="after")
    def _one_shape(self) -> HoleSpec:
        if (self.circle is None) == (self.polygon_mm is None):
            raise ValueError("give exactly one of 'circle' or 'polygon_mm'")
        return self


class OutlineSpec(_Strict):
    """Board outline: a polygon with holes, an outline file from geometry/boards, or a DXF."""

    polygon_mm: Annotated[list[Point], Field(min_length=3)] | None = None
    holes: list[HoleSpec] = []
    file: str | None = Field(
        None, description="outline TOML: a name in geometry/boards or a path relative to the board"
    )
    dxf: str | None = Field(None, description="DXF file, path relative to the board file")
    dxf_layer: str | None = None

    @model_validator(mode="after")
    def _one_source(self) -> OutlineSpec:
        given = [k for k in ("polygon_mm", "file", "dxf") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError(
                f"give exactly one of 'polygon_mm', 'file' or 'dxf' (found {given or 'none'})"
            )
        return self


class MaterialSpec(_Strict):
    """A user-defined material; conductivity may differ in-plane and through-plane."""

    k_inplane_w_per_mk: Positive
    k_through_w_per_mk: Positive
    density_kg_per_m3: Positive
    specific_heat_j_per_kgk: Positive
    description: str = ""


class LayerSpec(_Strict):
    """One stackup layer, listed top to bottom."""

    name: Name
    kind: Literal["copper", "dielectric"]
    thickness_mm: Positive | None = None
    thickness_um: Positive | None = None
    weight_oz: Positive | None = Field(None, description="copper weight, 1 oz/ft^2 = 34.8 um")
    material: str | None = Field(None, description="default: 'copper' or 'fr4' by kind")
    fill: Fraction01 | None = Field(
        None, description="copper area fraction of a copper layer (required for copper)"
    )
    resin: str = Field("fr4", description="material between the copper of a copper layer")

    @model_validator(mode="after")
    def _thickness(self) -> LayerSpec:
        given = [k for k in ("thickness_mm", "thickness_um", "weight_oz") if getattr(self, k)]
        if len(given) != 1:
            raise ValueError(
                "give exactly one of 'thickness_mm', 'thickness_um' or 'weight_oz' "
                f"(found {given or 'none'})"
            )
        if self.weight_oz is not None and self.kind != "copper":
            raise ValueError("'weight_oz' applies to copper layers only")
        if self.kind == "copper" and self.fill is None:
            raise ValueError("a copper layer needs 'fill' (copper area fraction, 0 to 1)")
        if self.kind == "dielectric" and self.fill is not None:
            raise ValueError("'fill' applies to copper layers only")
        return self


class EnvironmentSpec(_Strict):
    """Ambient temperature and heat transfer coefficients on each face (0 = adiabatic)."""

    ambient_c: Annotated[float, Field(ge=-100, le=300)] = 25.0
    h_top_w_per_m2k: NonNegative = 10.0
    h_bottom_w_per_m2k: NonNegative = 10.0
    h_edge_w_per_m2k: NonNegative = 10.0


class RunSpec(_Strict):
    """Run settings: duration, stepper tolerances, mesh density, limits."""

    duration_s: Positive
    method: Literal["trbdf2", "backward_euler"] = "trbdf2"
    rtol: Annotated[float, Field(gt=0, lt=1)] = 1e-3
    atol_k: Positive = 0.02
    dt_s: Positive | None = Field(None, description="fixed time step (turns adaptivity off)")
    mesh_refinement: Annotated[float, Field(ge=0.1, le=10)] = Field(
        1.0, description="scales every element size by 1/mesh_refinement"
    )
    max_segment_um: Positive = Field(
        500.0, description="largest through-thickness element in a dielectric"
    )
    laminate_max_c: float = Field(130.0, description="maximum operating temperature of the board")
    margin_k: NonNegative = Field(5.0, description="a part within this of its limit is NEAR")
    snapshot_s: list[NonNegative] = []


class PartSpec(_Strict):
    """A part: reference designator, package or footprint, placement, thermal data, power."""

    refdes: Name
    package: str | None = None
    body_mm: Annotated[list[Positive], Field(min_length=3, max_length=3)] | None = None
    footprint_mm: Annotated[list[Positive], Field(min_length=2, max_length=2)] | None = None
    x_mm: float
    y_mm: float
    rotation_deg: float = 0.0
    side: Literal["top", "bottom"] = "top"
    theta_jb_k_per_w: NonNegative | None = None
    tj_max_c: float
    body_heat_capacity_j_per_k: NonNegative | None = None
    junction: dict[str, Any] | None = None
    power: NonNegative | dict[str, Any] = Field(
        description="watts: a constant, or a schedule table (steps, ramps, pulses, trains, repeat)"
    )
    description: str = ""


class PourSpec(_Strict):
    """A copper pour: a polygon on a named copper layer with its own fill."""

    name: Name
    layer: str
    polygon_mm: Annotated[list[Point], Field(min_length=3)] | None = None
    rect: RectSpec | None = None
    fill: Fraction01 = 1.0

    @model_validator(mode="after")
    def _one_shape(self) -> PourSpec:
        if (self.polygon_mm is None) == (self.rect is None):
            raise ValueError("give exactly one of 'polygon_mm' or 'rect'")
        return self


class ViaFieldSpec(_Strict):
    """A field of plated thermal vias over a region, spanning a range of layers."""

    name: Name
    polygon_mm: Annotated[list[Point], Field(min_length=3)] | None = None
    rect: RectSpec | None = None
    drill_mm: Positive
    plating_um: Positive = 25.0
    pitch_mm: Positive | None = None
    count: Annotated[int, Field(gt=0)] | None = None
    filled: bool = Field(False, description="barrel filled with copper (else with air/epoxy)")
    from_layer: str | None = None
    to_layer: str | None = None

    @model_validator(mode="after")
    def _rules(self) -> ViaFieldSpec:
        if (self.polygon_mm is None) == (self.rect is None):
            raise ValueError("give exactly one of 'polygon_mm' or 'rect'")
        if (self.pitch_mm is None) == (self.count is None):
            raise ValueError("give exactly one of 'pitch_mm' or 'count'")
        if 2 * self.plating_um * 1e-3 > self.drill_mm:
            raise ValueError("plating_um is thicker than the drill radius")
        return self


class MountSpec(_Strict):
    """A mounting point tied to a chassis or heatsink at a fixed temperature."""

    name: Name
    circle: CircleSpec | None = None
    rect: RectSpec | None = None
    side: Literal["top", "bottom", "both"] = "bottom"
    temperature_c: float
    conductance_w_per_k: Positive | None = Field(
        None, description="total contact conductance to the fixed temperature, W/K"
    )
    h_contact_w_per_m2k: Positive | None = Field(
        None, description="contact conductance per area of each contacting face (side)"
    )

    @model_validator(mode="after")
    def _rules(self) -> MountSpec:
        if (self.circle is None) == (self.rect is None):
            raise ValueError("give exactly one of 'circle' or 'rect'")
        if (self.conductance_w_per_k is None) == (self.h_contact_w_per_m2k is None):
            raise ValueError("give exactly one of 'conductance_w_per_k' or 'h_contact_w_per_m2k'")
        return self


class VariantSpec(_Strict):
    """A design variant: overrides of the base board by field path."""

    name: Name
    description: str = ""
    set: dict[str, Any] = Field(
        default_factory=dict,
        description="field path -> new value, e.g. 'stackup.L2.weight_oz' = 2 or "
        "'part.Q1.power' = 3.0; lists are indexed by name/refdes",
    )
    add_pour: list[dict[str, Any]] = []
    add_via_field: list[dict[str, Any]] = []


class BoardSpec(_Strict):
    """A whole board file."""

    format_version: Literal[1]
    name: str = "board"
    description: str = ""
    outline: OutlineSpec
    materials: dict[str, MaterialSpec] = {}
    stackup: Annotated[list[LayerSpec], Field(min_length=1)]
    environment: EnvironmentSpec = EnvironmentSpec()
    run: RunSpec
    events: dict[str, dict[str, Any]] = {}
    part: Annotated[list[PartSpec], Field(min_length=1)]
    pour: list[PourSpec] = []
    via_field: list[ViaFieldSpec] = []
    mount: list[MountSpec] = []
    variant: list[VariantSpec] = []


def json_schema() -> dict[str, Any]:
    """Return the JSON Schema of the board file format."""
    schema = BoardSpec.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "boardheat board file"
    return schema
