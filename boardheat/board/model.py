"""Validated board in SI units: the frozen dataclasses every later stage consumes.

Nothing downstream of :func:`boardheat.board.load_board` re-checks these values: a ``Board``
cannot hold an invalid state. Lengths are metres, temperatures kelvin, powers watts,
conductivities W/(m K), volumetric heat capacities J/(m^3 K).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np
import numpy.typing as npt

from boardheat.junction import CauerLadder
from boardheat.schedules import Schedule

FloatArray = npt.NDArray[np.float64]


def frozen_array(values: object, shape_tail: tuple[int, ...] = ()) -> FloatArray:
    """Return a read-only float64 copy of ``values``."""
    arr = np.array(values, dtype=np.float64)
    if shape_tail:
        arr = arr.reshape((-1, *shape_tail))
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True)
class Material:
    """A (possibly orthotropic) material.

    Attributes
    ----------
    k_inplane, k_through : float, W/(m K)
    rho_c : float, volumetric heat capacity, J/(m^3 K)
    """

    name: str
    k_inplane: float
    k_through: float
    rho_c: float
    source: str = ""


@dataclass(frozen=True)
class Layer:
    """One stackup layer; ``fill`` is a copper layer's copper area fraction (0: dielectric)."""

    name: str
    kind: Literal["copper", "dielectric"]
    thickness: float
    material: Material
    resin: Material
    fill: float


@dataclass(frozen=True)
class Region:
    """A closed polygon on the board plane, (n, 2) metres, counter-clockwise."""

    polygon: FloatArray

    @property
    def area(self) -> float:
        """Return the polygon area, m^2."""
        x, y = self.polygon[:, 0], self.polygon[:, 1]
        return float(0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))


@dataclass(frozen=True)
class Pour:
    """A copper pour on a copper layer with its own fill fraction."""

    name: str
    layer: str
    region: Region
    fill: float


@dataclass(frozen=True)
class ViaField:
    """Thermal vias over a region spanning layers ``first_layer..last_layer`` (indices, inclusive).

    ``copper_fraction`` is the barrel copper area per unit board area (parallel rule).
    """

    name: str
    region: Region
    first_layer: int
    last_layer: int
    copper_fraction: float
    drill: float
    plating: float
    pitch: float
    filled: bool


@dataclass(frozen=True)
class Mount:
    """A contact to a fixed-temperature chassis or heatsink; ``conductance`` in W/K (total)."""

    name: str
    region: Region
    side: Literal["top", "bottom", "both"]
    temperature: float
    conductance: float


@dataclass(frozen=True)
class Part:
    """A placed part with its thermal data.

    Attributes
    ----------
    center : (2,) metres; rotation in radians (counter-clockwise)
    body : (3,) metres (x, y, z at zero rotation)
    footprint : (2,) metres, heat-entry rectangle centred at ``center``
    theta_jb : K/W, junction to board (used when ``junction`` is None)
    tj_max : K
    body_capacity : J/K, lumped at the footprint
    """

    refdes: str
    package: str | None
    center: FloatArray
    rotation: float
    side: Literal["top", "bottom"]
    body: FloatArray
    footprint: FloatArray
    theta_jb: float
    tj_max: float
    body_capacity: float
    schedule: Schedule
    junction: CauerLadder | None = None
    junction_source: Literal["theta_jb", "cauer", "foster"] = "theta_jb"

    def footprint_polygon(self, size: FloatArray | None = None) -> FloatArray:
        """Return the rotated footprint (or ``size``) rectangle, (4, 2) metres, CCW."""
        sx, sy = (self.footprint if size is None else size) / 2.0
        corners = np.array([[-sx, -sy], [sx, -sy], [sx, sy], [-sx, sy]])
        c, s = np.cos(self.rotation), np.sin(self.rotation)
        rot = np.array([[c, -s], [s, c]])
        out: FloatArray = corners @ rot.T + self.center
        return out

    def body_polygon(self) -> FloatArray:
        """Return the rotated body outline, (4, 2) metres."""
        return self.footprint_polygon(self.body[:2])

    def with_power_scaled(self, factor: float) -> Part:
        """Return a copy whose power schedule is multiplied by ``factor``."""
        return dataclasses.replace(self, schedule=self.schedule.scaled(factor))


@dataclass(frozen=True)
class Environment:
    """Ambient temperature (K) and heat transfer coefficients W/(m^2 K) on each face."""

    ambient: float
    h_top: float
    h_bottom: float
    h_edge: float


@dataclass(frozen=True)
class RunSettings:
    """Run settings in SI units."""

    duration: float
    method: Literal["trbdf2", "backward_euler"]
    rtol: float
    atol: float
    dt: float | None
    mesh_refinement: float
    max_segment: float
    laminate_max: float
    margin: float
    snapshot_times: tuple[float, ...]


@dataclass(frozen=True)
class Board:
    """A whole validated board, SI units throughout."""

    source: Path
    name: str
    description: str
    outline: FloatArray
    holes: tuple[FloatArray, ...]
    layers: tuple[Layer, ...]
    parts: tuple[Part, ...]
    environment: Environment
    run: RunSettings
    events: dict[str, float] = field(default_factory=dict)
    pours: tuple[Pour, ...] = ()
    via_fields: tuple[ViaField, ...] = ()
    mounts: tuple[Mount, ...] = ()
    variant: str = "base"

    @property
    def thickness(self) -> float:
        """Return the total board thickness, m."""
        return float(sum(layer.thickness for layer in self.layers))

    @property
    def area(self) -> float:
        """Return the board's plan area (outline minus holes), m^2."""
        total = Region(self.outline).area
        return total - sum(Region(h).area for h in self.holes)

    def part(self, refdes: str) -> Part:
        """Return the part with this reference designator."""
        for p in self.parts:
            if p.refdes == refdes:
                return p
        raise KeyError(refdes)

    def layer_index(self, name: str) -> int:
        """Return the index (0 = top) of the named layer."""
        return [layer.name for layer in self.layers].index(name)

    def with_ambient(self, ambient: float) -> Board:
        """Return a copy at another ambient temperature, K."""
        return dataclasses.replace(
            self, environment=dataclasses.replace(self.environment, ambient=ambient)
        )

    def with_run(self, **changes: object) -> Board:
        """Return a copy with some run settings replaced."""
        return dataclasses.replace(self, run=dataclasses.replace(self.run, **changes))  # type: ignore[arg-type]
