"""Read a board file (TOML), apply a design variant, validate it, and convert it to SI.

Input: a path to a board file. Output: :class:`boardheat.board.model.Board`. Every error is a
:class:`~boardheat.errors.BoardFileError` whose message names the file, the field path
(``part[U3].x_mm``), what was found and what was expected.
"""

from __future__ import annotations

import copy
import difflib
import math
import tomllib
from collections.abc import Mapping
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import ValidationError

from boardheat.board import schema
from boardheat.board.dxf import find_self_crossing, read_dxf_outline
from boardheat.board.materials import BUILTIN_MATERIALS, OZ_COPPER_M
from boardheat.board.model import (
    Board,
    Environment,
    FloatArray,
    Layer,
    Material,
    Mount,
    Part,
    Pour,
    Region,
    RunSettings,
    ViaField,
    frozen_array,
)
from boardheat.errors import BoardFileError
from boardheat.junction import CauerLadder, FosterNetwork, foster_to_cauer, parse_junction
from boardheat.schedules import parse_schedule, resolve_events

MM = 1e-3
UM = 1e-6
ZERO_C = 273.15
#: epoxy mould compound volumetric heat capacity when a package file gives none (recalled).
DEFAULT_MOLD_RHO_C = 1.6e6
#: list sections of the file and the key that names their entries
NAMED_LISTS = {
    "stackup": "name",
    "part": "refdes",
    "pour": "name",
    "via_field": "name",
    "mount": "name",
    "variant": "name",
}


def geometry_dir() -> Path:
    """Return the folder holding the package and board-outline library.

    An installed wheel carries it as ``boardheat/geometry``; a source checkout has it beside
    the package.
    """
    packaged = Path(str(resources.files("boardheat"))) / "geometry"
    if packaged.is_dir():
        return packaged
    return Path(__file__).resolve().parents[2] / "geometry"


def list_packages() -> list[str]:
    """Return the names of every package outline in the library."""
    return sorted(p.stem for p in (geometry_dir() / "packages").glob("*.toml"))


def _closest(name: str, choices: list[str]) -> str:
    match = difflib.get_close_matches(name, choices, n=1, cutoff=0.4)
    return f" (closest: {match[0]!r})" if match else ""


def _read_toml(path: Path, what: str) -> dict[str, Any]:
    try:
        with path.open("rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError as err:
        raise BoardFileError(f"{path}: {what} not found") from err
    except tomllib.TOMLDecodeError as err:
        raise BoardFileError(f"{path}: not valid TOML: {err}") from err
    except OSError as err:
        raise BoardFileError(f"{path}: cannot read {what}: {err.strerror}") from err


def load_package(name: str, where: str) -> dict[str, Any]:
    """Return the raw package outline record ``name`` from ``geometry/packages``."""
    names = list_packages()
    if name not in names:
        raise BoardFileError(f"{where}: {name!r} not in geometry/packages{_closest(name, names)}")
    path = geometry_dir() / "packages" / f"{name}.toml"
    data = _read_toml(path, "package outline")
    for key in ("body_mm", "footprint_mm"):
        if key not in data:
            raise BoardFileError(f"{path}: {key}: missing, expected a list of sizes in mm")
    return data


# ----------------------------------------------------------------------------- errors
def _path_text(loc: tuple[int | str, ...], raw: Mapping[str, Any]) -> str:
    """Turn a pydantic location into ``part[U3].power`` using names where possible."""
    out = ""
    node: Any = raw
    for i, key in enumerate(loc):
        if isinstance(key, int):
            label: str = str(key)
            if isinstance(node, list) and key < len(node):
                section = loc[i - 1] if i else ""
                item = node[key]
                name_key = NAMED_LISTS.get(str(section))
                if isinstance(item, dict) and name_key and isinstance(item.get(name_key), str):
                    label = item[name_key]
            out += f"[{label}]"
        else:
            out += f".{key}" if out else str(key)
        if isinstance(node, dict):
            node = node.get(key) if isinstance(key, str) else None
        elif isinstance(node, list) and isinstance(key, int) and key < len(node):
            node = node[key]
        else:
            node = None
    return out or "(top level)"


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _explain(err: Mapping[str, Any]) -> str:
    kind = str(err["type"])
    if kind == "missing":
        return "missing, expected a value"
    if kind == "extra_forbidden":
        return f"unknown key (found {_short(err.get('input'))})"
    msg = str(err["msg"])
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    return f"found {_short(err.get('input'))}, expected: {msg[0].lower() + msg[1:]}"


def _validation_error(path: Path, err: ValidationError, raw: Mapping[str, Any]) -> BoardFileError:
    errors = err.errors()
    # the deepest location first: pydantic reports union branches too; keep the most specific
    first = errors[0]
    lines = [f"{path}: {_path_text(tuple(first['loc']), raw)}: {_explain(first)}"]
    if len(errors) > 1:
        lines.append(f"(and {len(errors) - 1} more problem(s))")
    return BoardFileError(" ".join(lines))


# ----------------------------------------------------------------------------- variants
def variant_names(raw: Mapping[str, Any]) -> list[str]:
    """Return the variant names declared in a raw board mapping."""
    variants = raw.get("variant", [])
    if not isinstance(variants, list):
        return []
    return [str(v.get("name")) for v in variants if isinstance(v, dict)]


def apply_variant(raw: Mapping[str, Any], name: str, path: Path) -> dict[str, Any]:
    """Return a copy of ``raw`` with variant ``name``'s overrides applied (base is unchanged)."""
    out = copy.deepcopy(dict(raw))
    variants = out.pop("variant", [])
    names = variant_names(raw)
    if name not in names:
        raise BoardFileError(f"{path}: variant: {name!r} not defined{_closest(name, names)}")
    spec = variants[names.index(name)]
    where = f"{path}: variant[{name}]"
    settings = spec.get("set", {})
    if not isinstance(settings, dict):
        raise BoardFileError(f"{where}.set: found {_short(settings)}, expected a table")
    for dotted, value in settings.items():
        _set_path(out, str(dotted), value, f"{where}.set.{dotted!r}")
    for section, key in (("pour", "add_pour"), ("via_field", "add_via_field")):
        extra = spec.get(key, [])
        if not isinstance(extra, list):
            raise BoardFileError(f"{where}.{key}: found {_short(extra)}, expected a list of tables")
        out.setdefault(section, [])
        out[section] = [*out[section], *copy.deepcopy(extra)]
    return out


def _set_path(root: dict[str, Any], dotted: str, value: Any, where: str) -> None:
    keys = dotted.split(".")
    node: Any = root
    for depth, key in enumerate(keys[:-1]):
        if isinstance(node, list):
            section = keys[depth - 1]
            name_key = NAMED_LISTS.get(section, "name")
            names = [str(item.get(name_key)) for item in node if isinstance(item, dict)]
            if key not in names:
                raise BoardFileError(f"{where}: {section} {key!r} not found{_closest(key, names)}")
            node = node[names.index(key)]
        elif isinstance(node, dict):
            if key not in node:
                if key in NAMED_LISTS:
                    raise BoardFileError(
                        f"{where}: the board has no [[{key}]] entries; expected a path to an "
                        f"existing one, '{key}.<name>.<key>'"
                    )
                node[key] = {}
            node = node[key]
        else:
            raise BoardFileError(f"{where}: {key!r} does not name a table or list")
    last = keys[-1]
    if not isinstance(node, dict):
        raise BoardFileError(f"{where}: expected a path ending in a key of a table")
    if last in ("thickness_mm", "thickness_um", "weight_oz"):
        for other in ("thickness_mm", "thickness_um", "weight_oz"):
            node.pop(other, None)
    node[last] = copy.deepcopy(value)


# ----------------------------------------------------------------------------- geometry
def points_in_polygon(points: FloatArray, poly: FloatArray) -> np.ndarray:
    """Return which of ``points`` (m, 2) lie inside ``poly`` (n, 2) by ray casting, (m,) bool."""
    x, y = points[:, 0:1], points[:, 1:2]
    x1, y1 = poly[:, 0], poly[:, 1]
    x2, y2 = np.roll(x1, -1), np.roll(y1, -1)
    straddle = (y1 > y) != (y2 > y)
    with np.errstate(divide="ignore", invalid="ignore"):
        x_cross = x1 + (y - y1) * (x2 - x1) / (y2 - y1)
    crossings = np.sum(straddle & (x < x_cross), axis=1)
    result: np.ndarray = (crossings % 2) == 1
    return result


def _polygon(points: list[list[float]], where: str) -> FloatArray:
    poly = np.asarray(points, dtype=np.float64) * MM
    if np.allclose(poly[0], poly[-1]):
        poly = poly[:-1]
    if len(poly) < 3:
        raise BoardFileError(f"{where}: found {len(poly)} distinct points, expected at least 3")
    crossing = find_self_crossing(poly)
    if crossing is not None:
        i, j = crossing
        raise BoardFileError(
            f"{where}: the polygon crosses itself (edges {i} and {j}, near "
            f"({poly[i][0] / MM:g}, {poly[i][1] / MM:g}) mm); expected a simple polygon"
        )
    signed = 0.5 * float(
        np.dot(poly[:, 0], np.roll(poly[:, 1], -1)) - np.dot(poly[:, 1], np.roll(poly[:, 0], -1))
    )
    if abs(signed) < 1e-12:
        raise BoardFileError(f"{where}: the polygon has zero area; expected a closed outline")
    return frozen_array(poly if signed > 0 else poly[::-1])


def _circle(center_mm: list[float], diameter_mm: float) -> FloatArray:
    """Polygonise a circle with chords no longer than ~1/24 of its circumference."""
    n = max(24, int(math.ceil(math.pi * diameter_mm / 0.5)))
    n = min(n, 96)
    ang = np.linspace(0.0, 2 * np.pi, n, endpoint=False)
    r = diameter_mm / 2 * MM
    pts = np.column_stack(
        [center_mm[0] * MM + r * np.cos(ang), center_mm[1] * MM + r * np.sin(ang)]
    )
    return frozen_array(pts)


def _rect(spec: schema.RectSpec) -> FloatArray:
    sx, sy = spec.size_mm[0] * MM / 2, spec.size_mm[1] * MM / 2
    c, s = math.cos(math.radians(spec.rotation_deg)), math.sin(math.radians(spec.rotation_deg))
    corners = np.array([[-sx, -sy], [sx, -sy], [sx, sy], [-sx, sy]])
    rot = np.array([[c, -s], [s, c]])
    return frozen_array(corners @ rot.T + np.asarray(spec.center_mm) * MM)


def _outline(spec: schema.OutlineSpec, path: Path) -> tuple[FloatArray, tuple[FloatArray, ...]]:
    where = f"{path}: outline"
    if spec.dxf is not None:
        dxf_path = (path.parent / spec.dxf).resolve()
        dxf = read_dxf_outline(dxf_path, layer=spec.dxf_layer, where=f"{where}.dxf")
        outer = frozen_array(dxf.outer)
        return outer, tuple(frozen_array(h) for h in dxf.holes)
    if spec.file is not None:
        candidates = [
            path.parent / spec.file,
            geometry_dir() / "boards" / spec.file,
            geometry_dir() / "boards" / f"{spec.file}.toml",
        ]
        found = next((c for c in candidates if c.is_file()), None)
        if found is None:
            names = sorted(p.stem for p in (geometry_dir() / "boards").glob("*.toml"))
            raise BoardFileError(
                f"{where}.file: {spec.file!r} is neither a file beside the board nor in "
                f"geometry/boards{_closest(spec.file, names)}"
            )
        raw = _read_toml(found, "outline file")
        raw.pop("format_version", None)
        raw.pop("description", None)
        try:
            sub = schema.OutlineSpec.model_validate(raw)
        except ValidationError as err:
            raise _validation_error(found, err, raw) from err
        if sub.file is not None:
            raise BoardFileError(f"{found}: file: an outline file may not refer to another")
        return _outline(sub, found)
    assert spec.polygon_mm is not None
    outer = _polygon(spec.polygon_mm, f"{where}.polygon_mm")
    cut: list[FloatArray] = []
    for i, hole in enumerate(spec.holes):
        hw = f"{where}.holes[{i}]"
        if hole.circle is not None:
            poly = _circle(hole.circle.center_mm, hole.circle.diameter_mm)
        else:
            assert hole.polygon_mm is not None
            poly = _polygon(hole.polygon_mm, f"{hw}.polygon_mm")
        if not points_in_polygon(poly, outer).all():
            raise BoardFileError(f"{hw}: the hole reaches outside the outline; expected it inside")
        for j, other in enumerate(cut):
            if points_in_polygon(poly, other).any() or points_in_polygon(other, poly).any():
                raise BoardFileError(f"{hw}: overlaps holes[{j}]; expected separate holes")
        cut.append(poly)
    return outer, tuple(cut)


def _inside_board(poly: FloatArray, outline: FloatArray, holes: tuple[FloatArray, ...]) -> str:
    """Return '' if ``poly`` lies on the board, else the reason."""
    if not points_in_polygon(poly, outline).all():
        return "it reaches outside the board outline"
    if points_in_polygon(outline, poly).any():
        return "the board outline cuts through it"
    for i, hole in enumerate(holes):
        if points_in_polygon(poly, hole).any() or points_in_polygon(hole, poly).any():
            return f"it overlaps outline hole {i}"
    return ""


# ----------------------------------------------------------------------------- conversion
def _materials(spec: schema.BoardSpec) -> dict[str, Material]:
    mats = dict(BUILTIN_MATERIALS)
    for name, m in spec.materials.items():
        mats[name] = Material(
            name=name,
            k_inplane=m.k_inplane_w_per_mk,
            k_through=m.k_through_w_per_mk,
            rho_c=m.density_kg_per_m3 * m.specific_heat_j_per_kgk,
            source=m.description or "user-defined in the board file",
        )
    return mats


def _layers(spec: schema.BoardSpec, mats: dict[str, Material], path: Path) -> tuple[Layer, ...]:
    layers: list[Layer] = []
    seen: set[str] = set()
    for layer in spec.stackup:
        where = f"{path}: stackup[{layer.name}]"
        if layer.name in seen:
            raise BoardFileError(f"{where}.name: duplicate layer name; expected unique names")
        seen.add(layer.name)
        mat_name = layer.material or ("copper" if layer.kind == "copper" else "fr4")
        for key, name in (("material", mat_name), ("resin", layer.resin)):
            if name not in mats:
                raise BoardFileError(
                    f"{where}.{key}: {name!r} is not a built-in or [materials] entry; expected "
                    f"one of {sorted(mats)}{_closest(name, sorted(mats))}"
                )
        if layer.weight_oz is not None:
            thickness = layer.weight_oz * OZ_COPPER_M
        elif layer.thickness_um is not None:
            thickness = layer.thickness_um * UM
        else:
            assert layer.thickness_mm is not None
            thickness = layer.thickness_mm * MM
        if thickness > 0.02:
            raise BoardFileError(f"{where}: thickness {thickness * 1e3:g} mm; expected < 20 mm")
        layers.append(
            Layer(
                name=layer.name,
                kind=layer.kind,
                thickness=thickness,
                material=mats[mat_name],
                resin=mats[layer.resin],
                fill=layer.fill if layer.fill is not None else 0.0,
            )
        )
    return tuple(layers)


def _part(
    spec: schema.PartSpec,
    events: dict[str, float],
    outline: FloatArray,
    holes: tuple[FloatArray, ...],
    path: Path,
) -> Part:
    where = f"{path}: part[{spec.refdes}]"
    pkg: dict[str, Any] = {}
    if spec.package is not None:
        pkg = load_package(spec.package, f"{where}.package")
    body_mm = spec.body_mm or pkg.get("body_mm")
    footprint_mm = (
        spec.footprint_mm or pkg.get("footprint_mm") or (body_mm[:2] if body_mm else None)
    )
    if body_mm is None or footprint_mm is None:
        raise BoardFileError(
            f"{where}: no size; expected 'package' (one of geometry/packages) or 'body_mm'"
        )
    theta_jb = spec.theta_jb_k_per_w
    if theta_jb is None:
        theta_jb = pkg.get("theta_jb_k_per_w")
    junction_spec = parse_junction(spec.junction, f"{where}.junction")
    ladder: CauerLadder | None = None
    source = "theta_jb"
    if isinstance(junction_spec, FosterNetwork):
        ladder, source = foster_to_cauer(junction_spec), "foster"
    elif isinstance(junction_spec, CauerLadder):
        ladder, source = junction_spec, "cauer"
    if theta_jb is None and ladder is None:
        raise BoardFileError(
            f"{where}.theta_jb_k_per_w: missing; expected a junction-to-board resistance "
            "(the package gives no default) or a 'junction' network"
        )
    body = np.asarray(body_mm, dtype=np.float64) * MM
    if spec.body_heat_capacity_j_per_k is not None:
        body_capacity = spec.body_heat_capacity_j_per_k
    else:
        rho_c = float(pkg.get("mold_rho_c_j_per_m3k", DEFAULT_MOLD_RHO_C))
        body_capacity = float(np.prod(body)) * rho_c
    part = Part(
        refdes=spec.refdes,
        package=spec.package,
        center=frozen_array([spec.x_mm * MM, spec.y_mm * MM]),
        rotation=math.radians(spec.rotation_deg),
        side=spec.side,
        body=frozen_array(body),
        footprint=frozen_array(np.asarray(footprint_mm, dtype=np.float64) * MM),
        theta_jb=float(theta_jb or 0.0),
        tj_max=spec.tj_max_c + ZERO_C,
        body_capacity=body_capacity,
        schedule=parse_schedule(spec.power, events, f"{where}.power"),
        junction=ladder,
        junction_source=source,  # type: ignore[arg-type]
    )
    reason = _inside_board(part.footprint_polygon(), outline, holes)
    if reason:
        raise BoardFileError(
            f"{where}: footprint at ({spec.x_mm:g}, {spec.y_mm:g}) mm: {reason}; "
            "expected the footprint on the board"
        )
    return part


def _region(spec: Any) -> Region:
    if getattr(spec, "polygon_mm", None) is not None:
        poly = np.asarray(spec.polygon_mm, dtype=np.float64) * MM
        return Region(frozen_array(poly))
    if getattr(spec, "rect", None) is not None:
        return Region(_rect(spec.rect))
    return Region(_circle(spec.circle.center_mm, spec.circle.diameter_mm))


def _layer_lookup(layers: tuple[Layer, ...], name: str, where: str, copper: bool) -> int:
    names = [layer.name for layer in layers if layer.kind == "copper" or not copper]
    if name not in names:
        kind = "copper layer" if copper else "layer"
        raise BoardFileError(f"{where}: {name!r} is not a {kind}; expected one of {names}")
    return [layer.name for layer in layers].index(name)


def _features(
    spec: schema.BoardSpec,
    layers: tuple[Layer, ...],
    path: Path,
    outline: FloatArray,
    holes: tuple[FloatArray, ...],
) -> tuple[tuple[Pour, ...], tuple[ViaField, ...], tuple[Mount, ...]]:
    names: set[str] = set()

    def unique(kind: str, name: str) -> str:
        where = f"{path}: {kind}[{name}]"
        if name in names:
            raise BoardFileError(f"{where}.name: duplicate feature name; expected unique names")
        names.add(name)
        return where

    pours = []
    for p in spec.pour:
        where = unique("pour", p.name)
        if p.polygon_mm is not None:
            _polygon(p.polygon_mm, f"{where}.polygon_mm")
        _layer_lookup(layers, p.layer, f"{where}.layer", copper=True)
        pours.append(Pour(name=p.name, layer=p.layer, region=_region(p), fill=p.fill))
    vias = []
    for v in spec.via_field:
        where = unique("via_field", v.name)
        region = _region(v)
        first = _layer_lookup(layers, v.from_layer or layers[0].name, f"{where}.from_layer", False)
        last = _layer_lookup(layers, v.to_layer or layers[-1].name, f"{where}.to_layer", False)
        if first > last:
            raise BoardFileError(
                f"{where}: from_layer {layers[first].name!r} lies below to_layer "
                f"{layers[last].name!r}; expected from_layer above to_layer"
            )
        drill, plating = v.drill_mm * MM, v.plating_um * UM
        if v.pitch_mm is not None:
            pitch = v.pitch_mm * MM
            if pitch <= drill:
                raise BoardFileError(f"{where}.pitch_mm: {v.pitch_mm:g}; expected > drill_mm")
        else:
            assert v.count is not None
            pitch = math.sqrt(region.area / v.count)
        r_out = drill / 2
        r_in = 0.0 if v.filled else max(r_out - plating, 0.0)
        fraction = math.pi * (r_out**2 - r_in**2) / pitch**2
        if fraction >= 0.9:
            raise BoardFileError(f"{where}: barrel copper fills {fraction:.0%}; expected < 90 %")
        vias.append(
            ViaField(
                name=v.name,
                region=region,
                first_layer=first,
                last_layer=last,
                copper_fraction=fraction,
                drill=drill,
                plating=plating,
                pitch=pitch,
                filled=v.filled,
            )
        )
    mounts = []
    for m in spec.mount:
        where = unique("mount", m.name)
        region = _region(m)
        if not points_in_polygon(region.polygon, outline).all():
            raise BoardFileError(f"{where}: the contact reaches outside the board outline")
        for i, hole in enumerate(holes):
            if points_in_polygon(region.polygon, hole).all():
                raise BoardFileError(
                    f"{where}: the contact lies inside outline hole {i}; expected it to cover "
                    "board material (e.g. a ring around the hole)"
                )
        contact_area = region.area - sum(
            Region(h).area for h in holes if points_in_polygon(h, region.polygon).all()
        )
        if m.conductance_w_per_k is not None:
            conductance = m.conductance_w_per_k
        else:
            assert m.h_contact_w_per_m2k is not None
            # h_contact acts on each contacting face: both faces clamp twice the area
            conductance = m.h_contact_w_per_m2k * contact_area * (2 if m.side == "both" else 1)
        mounts.append(
            Mount(
                name=m.name,
                region=region,
                side=m.side,
                temperature=m.temperature_c + ZERO_C,
                conductance=conductance,
            )
        )
    return tuple(pours), tuple(vias), tuple(mounts)


def board_from_raw(raw: Mapping[str, Any], path: Path, variant: str = "base") -> Board:
    """Validate a raw board mapping (already parsed TOML) and convert it to SI."""
    try:
        spec = schema.BoardSpec.model_validate(raw)
    except ValidationError as err:
        raise _validation_error(path, err, raw) from err
    mats = _materials(spec)
    layers = _layers(spec, mats, path)
    outline, holes = _outline(spec.outline, path)
    events = resolve_events(spec.events, f"{path}: events")
    seen: set[str] = set()
    parts = []
    for p in spec.part:
        if p.refdes in seen:
            raise BoardFileError(f"{path}: part[{p.refdes}].refdes: duplicate reference designator")
        seen.add(p.refdes)
        parts.append(_part(p, events, outline, holes, path))
    pours, vias, mounts = _features(spec, layers, path, outline, holes)
    r = spec.run
    if r.dt_s is not None and r.dt_s > r.duration_s:
        raise BoardFileError(f"{path}: run.dt_s: {r.dt_s:g} s; expected <= duration_s")
    env = spec.environment
    return Board(
        source=path,
        name=spec.name,
        description=spec.description,
        outline=outline,
        holes=holes,
        layers=layers,
        parts=tuple(parts),
        environment=Environment(
            ambient=env.ambient_c + ZERO_C,
            h_top=env.h_top_w_per_m2k,
            h_bottom=env.h_bottom_w_per_m2k,
            h_edge=env.h_edge_w_per_m2k,
        ),
        run=RunSettings(
            duration=r.duration_s,
            method=r.method,
            rtol=r.rtol,
            atol=r.atol_k,
            dt=r.dt_s,
            mesh_refinement=r.mesh_refinement,
            max_segment=r.max_segment_um * UM,
            laminate_max=r.laminate_max_c + ZERO_C,
            margin=r.margin_k,
            snapshot_times=tuple(sorted(t for t in r.snapshot_s if t <= r.duration_s)),
        ),
        events=events,
        pours=pours,
        via_fields=vias,
        mounts=mounts,
        variant=variant,
    )


def read_raw(path: Path) -> dict[str, Any]:
    """Read a board file as a plain mapping (TOML syntax errors become BoardFileError)."""
    return _read_toml(Path(path), "board file")


def load_board(path: str | Path, variant: str | None = None) -> Board:
    """Load, validate and convert a board file; optionally apply one named variant.

    Parameters
    ----------
    path : board file (TOML)
    variant : name of a ``[[variant]]`` to apply, or None for the base board
    """
    path = Path(path)
    raw = read_raw(path)
    _check_variant_names(raw, path)
    if variant is None or variant == "base":
        base = dict(raw)
        variants = base.pop("variant", [])
        board = board_from_raw(base, path)
        # validate every variant's own section shape now, so a typo fails before solving
        for i, v in enumerate(variants if isinstance(variants, list) else []):
            try:
                schema.VariantSpec.model_validate(v)
            except ValidationError as err:
                first = err.errors()[0]
                loc = ("variant", i, *first["loc"])
                raise BoardFileError(f"{path}: {_path_text(loc, raw)}: {_explain(first)}") from err
        return board
    return _variant_board(raw, variant, path)


def _check_variant_names(raw: Mapping[str, Any], path: Path) -> None:
    """Reject duplicate variant names and a variant called 'base' (the unmodified board)."""
    seen: set[str] = set()
    for name in variant_names(raw):
        if name == "base":
            raise BoardFileError(
                f"{path}: variant[base].name: 'base' names the unmodified board; expected "
                "another name"
            )
        if name in seen:
            raise BoardFileError(f"{path}: variant[{name}].name: duplicate variant name")
        seen.add(name)


def _variant_board(raw: Mapping[str, Any], name: str, path: Path) -> Board:
    """Return the board a variant makes; its errors say which variant made it."""
    changed = apply_variant(raw, name, path)
    try:
        return board_from_raw(changed, path, variant=name)
    except BoardFileError as err:
        raise BoardFileError(f"{err} (in the board made by variant[{name}])") from err


def load_variants(path: str | Path) -> list[Board]:
    """Return the base board followed by every design variant, each fully validated."""
    path = Path(path)
    raw = read_raw(path)
    boards = [load_board(path)]
    for name in variant_names(raw):
        boards.append(_variant_board(raw, name, path))
    return boards
