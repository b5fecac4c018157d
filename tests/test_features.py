"""Copper pours, thermal via fields and mounting contacts against hand calculations.

Every board here is built in code (raw board-file mappings validated by the board stage),
meshed by gmsh and solved by the full pipeline (``run_check``); each test names the formula it
checks, its source and its tolerance. The hand values are computed in the tests from the
board-file inputs (layer thicknesses, fills, drill, plating, pitch), not with the model's own
mixing functions.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from matplotlib.tri import LinearTriInterpolator, Triangulation

from boardheat.assembly import assemble, segment_properties
from boardheat.board.materials import OZ_COPPER_M
from boardheat.checks import board_capacity
from boardheat.errors import BoardFileError
from boardheat.meshing import Mesh, build_mesh
from boardheat.run import RunOptions, build_model, run_check
from boardheat.stackup import build_stackup
from tests.conftest import make_board, raw_board

pytestmark = pytest.mark.gmsh

ZERO_C = 273.15
#: built-in material values the hand calculations use (boardheat/board/materials.py: copper
#: k = 390 W/(m K), common practice for foil; FR-4 0.8 in-plane, 0.3 through, recalled)
K_CU = 390.0
K_FR4_XY = 0.8
K_FR4_Z = 0.3


def _environment(ambient: float, h_top: float, h_bottom: float, h_edge: float) -> dict[str, float]:
    return {
        "ambient_c": ambient,
        "h_top_w_per_m2k": h_top,
        "h_bottom_w_per_m2k": h_bottom,
        "h_edge_w_per_m2k": h_edge,
    }


def _source(refdes: str, x: float, y: float, size: tuple[float, float], power: float) -> dict:
    """Return a part that is only a heat source: no junction drop, no body capacity."""
    return {
        "refdes": refdes,
        "body_mm": [size[0], size[1], 0.5],
        "x_mm": x,
        "y_mm": y,
        "theta_jb_k_per_w": 0.0,
        "body_heat_capacity_j_per_k": 0.0,
        "tj_max_c": 500.0,
        "power": power,
    }


def _with_regions(mesh: Mesh, regions: dict[str, np.ndarray]) -> Mesh:
    """Return ``mesh`` with some named regions replaced (e.g. a footprint over every triangle)."""
    return Mesh(mesh.points, mesh.triangles, mesh.edges, {**mesh.regions, **regions})


# ----------------------------------------------------------------------------- pours (fin)
STRIP_LENGTH_MM = 100.0
STRIP_WIDTH_MM = 4.0
HEATED_MM = 4.0  # the source covers 0 <= x <= HEATED_MM
FILM_MM = 0.1  # FR-4 film under the copper
H_FACE = 8.0  # W/(m^2 K) on both faces; edges adiabatic
STRIP_POWER = 0.1  # W


def _strip(base_fill: float, pour_fill: float | None):
    """Return a 100 x 4 mm strip: 2 oz copper over a 0.1 mm FR-4 film, heated at x < 4 mm."""
    raw = raw_board()
    length, width = STRIP_LENGTH_MM, STRIP_WIDTH_MM
    strip = [[0, 0], [length, 0], [length, width], [0, width]]
    raw["outline"] = {"polygon_mm": strip}
    raw["stackup"] = [
        {"name": "cu", "kind": "copper", "weight_oz": 2.0, "fill": base_fill},
        {"name": "film", "kind": "dielectric", "thickness_mm": FILM_MM},
    ]
    raw["environment"] = _environment(20.0, H_FACE, H_FACE, 0.0)
    # the footprint must lie inside the outline, so it stops 0.4 mm short of the long edges;
    # with adiabatic long edges the width-averaged temperature still obeys the 1-D equation
    # with the same source over 0 <= x <= HEATED_MM (see the test docstring)
    inset = 0.4
    raw["part"] = [
        _source("S1", HEATED_MM / 2, width / 2, (HEATED_MM, width - 2 * inset), STRIP_POWER)
    ]
    raw["run"] = {"duration_s": 1.0}
    if pour_fill is not None:
        raw["pour"] = [{"name": "P1", "layer": "cu", "polygon_mm": strip, "fill": pour_fill}]
    return make_board(raw)


def _width_mean(result, x: float) -> float:
    """Return the top-surface rise averaged over the strip width at ``x`` (m), K."""
    hot = result.hot
    tri = Triangulation(hot.points[:, 0], hot.points[:, 1], hot.triangles)
    interp = LinearTriInterpolator(tri, hot.top - result.ambient)
    # stay a hair inside the outline so every sample falls in a triangle
    eps = 1e-9
    y = np.linspace(eps, STRIP_WIDTH_MM * 1e-3 - eps, 81)
    xs = np.full_like(y, min(x, STRIP_LENGTH_MM * 1e-3 - eps))
    values = np.asarray(interp(xs, y))
    return float(np.trapezoid(values, y) / (y[-1] - y[0]))


@pytest.mark.parametrize(
    ("base_fill", "pour_fill", "copper"),
    [(0.1, None, 0.1), (0.1, 1.0, 1.0)],
    ids=["no-pour", "full-pour"],
)
def test_pour_strip_is_a_fin_with_adiabatic_tip(base_fill, pour_fill, copper):
    """A thin copper strip heated at one end follows the straight-fin solution within 2 %.

    Source: Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, sec. 3.6.2, Table 3.4
    case B (adiabatic tip): theta(x)/theta_b = cosh(m(L - x))/cosh(mL), m^2 = h P/(k A_c)
    (section and table numbers of the 6th edition, recalled from memory).

    Why the strip is a 1-D fin: the faces lose heat with h = 8 W/(m^2 K), the long edges and
    the ends are adiabatic (h_edge = 0), so the perimeter is P = 2w and the conduction term is
    the parallel rule over the layers, k A_c = w sum(k_xy,i t_i), giving
    m^2 = 2h / sum(k_xy,i t_i). The through-thickness Biot number h sum(t_i/k_z,i) is at most
    4e-3 (it lowers the bottom face's effective h by that fraction and m by ~0.1 %), so each
    cross-section is isothermal through the thickness. The source covers the
    end 0 <= x <= a but stops 0.4 mm short of the long edges (a footprint must lie inside the
    outline); integrating the 3-D equation over the width with adiabatic edges gives exactly
    the 1-D fin equation for the width-averaged temperature with the source P/a spread over
    0 <= x <= a, so the test compares width averages.

    Beyond the heated end the profile is case B with L = L_t - a. The absolute level comes from
    the same fin equation with a uniform source q' = P/a on 0 <= x <= a and theta'(0) = 0
    (derived here by matching theta and theta' at x = a):
        theta(x) = theta_p sinh(m a) cosh(m (L_t - x)) / sinh(m L_t),  x >= a,
        theta_p = P / (a h P_perimeter).
    Checked: theta(x)/theta(a) at x - a in {2, 6, 16, 36, 66, 96} mm wherever the exact ratio
    exceeds 2 %, and theta(a) itself; tolerance 2 % each. The no-pour strip has base fill 0.1
    (mL ~ 7.2); the full pour (fill 1) raises sum(k t) ten-fold (mL ~ 2.3).
    """
    board = _strip(base_fill, pour_fill)
    result = run_check(board, RunOptions(steady=True))

    t_cu = 2.0 * OZ_COPPER_M  # 2 oz foil (IPC nominal 34.8 um per oz, recalled)
    k_cu_layer = copper * K_CU + (1.0 - copper) * K_FR4_XY  # parallel rule, copper + resin
    kt = k_cu_layer * t_cu + K_FR4_XY * FILM_MM * 1e-3  # sum of k_xy t over layers, W/K
    m = math.sqrt(2.0 * H_FACE / kt)
    a = HEATED_MM * 1e-3
    length_total = STRIP_LENGTH_MM * 1e-3
    fin_length = length_total - a
    theta_p = STRIP_POWER / (a * H_FACE * 2.0 * STRIP_WIDTH_MM * 1e-3)
    theta_base = (
        theta_p * math.sinh(m * a) * math.cosh(m * fin_length) / math.sinh(m * length_total)
    )

    measured_base = _width_mean(result, a)
    assert measured_base == pytest.approx(theta_base, rel=0.02), (
        f"m L = {m * fin_length:.2f}: base rise {measured_base:.3f} K vs {theta_base:.3f} K"
    )
    checked = 0
    for dx_mm in (2.0, 6.0, 16.0, 36.0, 66.0, 96.0):
        x = a + dx_mm * 1e-3
        exact = math.cosh(m * (length_total - x)) / math.cosh(m * fin_length)
        if exact < 0.02:
            continue
        ratio = _width_mean(result, x) / measured_base
        assert ratio == pytest.approx(exact, rel=0.02), f"x - a = {dx_mm} mm"
        checked += 1
    assert checked >= 4


# ----------------------------------------------------------------------------- via fields
VIA_PLATE_MM = 10.0
H_SINK = 1e6  # W/(m^2 K): the bottom face is all but held at ambient


def _via_stack() -> list[dict[str, Any]]:
    return [
        {"name": "top", "kind": "copper", "thickness_um": 35.0, "fill": 0.7},
        {"name": "pp", "kind": "dielectric", "thickness_mm": 0.2},
        {"name": "L2", "kind": "copper", "thickness_um": 35.0, "fill": 0.9},
        {"name": "core", "kind": "dielectric", "thickness_mm": 1.2},
        {"name": "bot", "kind": "copper", "thickness_um": 35.0, "fill": 0.5},
    ]


def _via_plate(via: dict[str, Any] | None):
    raw = raw_board()
    s = VIA_PLATE_MM
    square = [[0, 0], [s, 0], [s, s], [0, s]]
    raw["outline"] = {"polygon_mm": square}
    raw["stackup"] = _via_stack()
    raw["environment"] = _environment(20.0, 0.0, H_SINK, 0.0)
    raw["part"] = [_source("S1", s / 2, s / 2, (s - 1.0, s - 1.0), 1.0)]
    raw["run"] = {"duration_s": 1.0, "mesh_refinement": 0.3}
    if via is not None:
        raw["via_field"] = [{"name": "V1", "polygon_mm": square, **via}]
    return make_board(raw)


#: case -> (via_field keys, (first, last) layer the barrels span)
VIA_CASES = {
    "none": (None, ("top", "bot")),
    "through": ({"drill_mm": 0.3, "plating_um": 25.0, "pitch_mm": 1.0}, ("top", "bot")),
    "count": ({"drill_mm": 0.3, "plating_um": 25.0, "count": 100}, ("top", "bot")),
    "filled": (
        {"drill_mm": 0.3, "plating_um": 25.0, "pitch_mm": 1.0, "filled": True},
        ("top", "bot"),
    ),
    "blind": (
        {"drill_mm": 0.3, "plating_um": 25.0, "pitch_mm": 1.0, "to_layer": "L2"},
        ("top", "L2"),
    ),
}


def _hand_via_resistance(via: dict[str, Any] | None, span: tuple[str, str]) -> float:
    """Return the top-to-ambient resistance of the plate by the series/parallel rules, K/W.

    Per layer: copper layers of fill phi in series through the thickness,
    k_z = 1/(phi/k_cu + (1 - phi)/k_resin,z); the via barrels in parallel over their span,
    k_z' = f k_cu + (1 - f) k_z, f = pi (r_o^2 - r_i^2)/pitch^2 (r_i = 0 when filled); layers
    in series, R = sum t_i/(k_z,i A) + 1/(h A) (Incropera & DeWitt sec. 3.1, plane wall and
    composite wall thermal circuits; section recalled from memory).
    """
    area = (VIA_PLATE_MM * 1e-3) ** 2
    f = 0.0
    if via is not None:
        r_o = via["drill_mm"] * 1e-3 / 2
        r_i = 0.0 if via.get("filled") else r_o - via["plating_um"] * 1e-6
        pitch = via["pitch_mm"] * 1e-3 if "pitch_mm" in via else math.sqrt(area / via["count"])
        f = math.pi * (r_o**2 - r_i**2) / pitch**2
    names = [layer["name"] for layer in _via_stack()]
    first, last = names.index(span[0]), names.index(span[1])
    total = 1.0 / (H_SINK * area)
    for i, layer in enumerate(_via_stack()):
        if layer["kind"] == "copper":
            t = layer["thickness_um"] * 1e-6
            phi = layer["fill"]
            k_z = 1.0 / (phi / K_CU + (1.0 - phi) / K_FR4_Z)
        else:
            t = layer["thickness_mm"] * 1e-3
            k_z = K_FR4_Z
        if first <= i <= last:
            k_z = f * K_CU + (1.0 - f) * k_z
        total += t / (k_z * area)
    return total


@pytest.mark.parametrize("case", list(VIA_CASES))
def test_via_field_through_plane_resistance_matches_parallel_rule(case):
    """A plate fully covered by a via field: top-to-ambient resistance as the hand calculation.

    Uniform flux on the whole top face (the footprint is widened to every triangle, as in the
    plane-wall test), bottom face at h = 1e6 W/(m^2 K), adiabatic edges: the field is 1-D and
    piecewise linear through the layers, which linear prisms represent exactly, so the
    tolerance is 1e-6 (the requirement is 2 %). Hand value: ``_hand_via_resistance``
    (series rule per layer, barrel copper in parallel, f = pi (r_o^2 - r_i^2)/pitch^2).
    """
    via, span = VIA_CASES[case]
    board = _via_plate(via)
    mesh = build_mesh(board)
    everything = np.arange(len(mesh.triangles))
    if via is not None:
        covered = mesh.triangle_areas()[mesh.regions["via:V1"]].sum()
        assert covered == pytest.approx(board.area, rel=1e-12)
    model = build_model(board, mesh=_with_regions(mesh, {"part:S1": everything}))
    result = run_check(board, RunOptions(steady=True), model=model)
    rise = result.parts[0].tj_peak - result.ambient
    expected = _hand_via_resistance(via, span)
    assert rise == pytest.approx(expected, rel=1e-6)
    if case == "through":
        # the barrels carry most of the heat: 0.3 mm drill, 25 um plating, 1 mm pitch gives
        # f = 2.2 % and k_z of FR-4 from 0.3 to 8.7 W/(m K)
        bare = _hand_via_resistance(None, span)
        assert expected < bare / 20


def test_via_field_over_part_of_the_board_only_changes_its_region():
    """A via field on the left half raises k_z there (parallel rule) and nowhere else."""
    raw = raw_board()
    raw["outline"] = {"polygon_mm": [[0, 0], [10, 0], [10, 10], [0, 10]]}
    raw["stackup"] = _via_stack()
    raw["part"] = [_source("S1", 7.5, 5.0, (2.0, 2.0), 0.1)]
    left_half = [[0, 0], [5, 0], [5, 10], [0, 10]]
    raw["via_field"] = [
        {
            "name": "V1",
            "polygon_mm": left_half,
            "drill_mm": 0.3,
            "plating_um": 25.0,
            "pitch_mm": 1.0,
        }
    ]
    board = make_board(raw)
    mesh = build_mesh(board)
    stack = build_stackup(board)
    _, k_z, _ = segment_properties(mesh, stack, board)
    centroid_x = mesh.points[mesh.triangles].mean(axis=1)[:, 0]
    left = np.zeros(len(mesh.triangles), dtype=bool)
    left[mesh.regions["via:V1"]] = True
    assert np.all(centroid_x[left] < 5e-3)
    assert np.all(centroid_x[~left] > 5e-3)
    core = int(np.flatnonzero(stack.seg_layer == 3)[0])
    f = math.pi * (0.15e-3**2 - 0.125e-3**2) / 1e-3**2
    assert board.via_fields[0].copper_fraction == pytest.approx(f, rel=1e-12)
    assert k_z[~left, core] == pytest.approx(K_FR4_Z, rel=1e-12)
    assert k_z[left, core] == pytest.approx(f * K_CU + (1 - f) * K_FR4_Z, rel=1e-12)


# ----------------------------------------------------------------------------- mounts
PLATE_MM = 20.0
PLATE_THICKNESS_MM = 2.0
#: an idealised spreader (k = 1e5 W/(m K)): the plate is one temperature to ~1e-3 K per W
IDEAL = {
    "ideal_spreader": {
        "k_inplane_w_per_mk": 1e5,
        "k_through_w_per_mk": 1e5,
        "density_kg_per_m3": 2000.0,
        "specific_heat_j_per_kgk": 900.0,
    }
}


def _mount_plate(h: float, mount: dict[str, Any], holes=(), power: float = 2.0, **run: Any):
    raw = raw_board()
    s = PLATE_MM
    raw["materials"] = IDEAL
    raw["outline"] = {"polygon_mm": [[0, 0], [s, 0], [s, s], [0, s]], "holes": list(holes)}
    raw["stackup"] = [
        {
            "name": "plate",
            "kind": "dielectric",
            "thickness_mm": PLATE_THICKNESS_MM,
            "material": "ideal_spreader",
        }
    ]
    raw["environment"] = _environment(25.0, h, h, h)
    raw["part"] = [_source("S1", 6.0, 6.0, (4.0, 4.0), power)]
    raw["run"] = {"duration_s": 1.0, **run}
    raw["mount"] = [{"name": "M1", "temperature_c": 50.0, **mount}]
    return make_board(raw)


SCREW = {"circle": {"center_mm": [15, 15], "diameter_mm": 6.0}, "side": "bottom"}


def test_mount_conductance_alone_sets_the_plate_temperature():
    """Adiabatic faces, one contact G to T_fix: T = T_fix + P/G (thermal circuit, one resistor).

    Incropera & DeWitt sec. 3.1 (thermal resistance networks). The spreader's own
    resistance is below 1e-3 K/W (1/(2 pi k t) = 8e-4 K/W times a log factor), against
    1/G = 2 K/W: tolerance 0.5 %.
    """
    board = _mount_plate(0.0, {**SCREW, "conductance_w_per_k": 0.5})
    result = run_check(board, RunOptions(steady=True))
    expected = 50.0 + ZERO_C + 2.0 / 0.5
    rise = result.parts[0].tj_peak - (50.0 + ZERO_C)
    assert rise == pytest.approx(expected - (50.0 + ZERO_C), rel=5e-3)
    balance = next(c for c in result.sanity if c.name == "steady energy balance")
    assert balance.passed, balance.detail


def test_mount_in_parallel_with_convection():
    """Contact G to T_fix in parallel with convection hA to ambient (two-resistor network).

    T = (P + G T_fix + hA T_amb)/(G + hA), hA = h (2 s^2 + 4 s d) over both faces and the
    edges (Incropera & DeWitt sec. 3.1, resistances in parallel). Tolerance 0.5 % of the rise
    over ambient.
    """
    h, g = 10.0, 0.5
    board = _mount_plate(h, {**SCREW, "conductance_w_per_k": g})
    result = run_check(board, RunOptions(steady=True))
    s, d = PLATE_MM * 1e-3, PLATE_THICKNESS_MM * 1e-3
    h_a = h * (2 * s**2 + 4 * s * d)
    ambient, fixed = 25.0 + ZERO_C, 50.0 + ZERO_C
    expected = (2.0 + g * fixed + h_a * ambient) / (g + h_a)
    assert result.parts[0].tj_peak - ambient == pytest.approx(expected - ambient, rel=5e-3)


def test_mount_contact_coefficient_acts_on_the_ring_around_a_screw_hole():
    """h_contact over a ring around a hole: G = h_c pi (D^2 - d^2)/4, T = T_fix + P/G.

    The model polygonises both circles (at least 24 sides each), which loses up to ~1 % of the
    ring area against the exact circles used here: tolerance 2 %.
    """
    ring = {"circle": {"center_mm": [15, 15], "diameter_mm": 8.0}, "side": "bottom"}
    hole = {"circle": {"center_mm": [15, 15], "diameter_mm": 3.2}}
    board = _mount_plate(0.0, {**ring, "h_contact_w_per_m2k": 2000.0}, holes=[hole])
    result = run_check(board, RunOptions(steady=True))
    g = 2000.0 * math.pi * (8e-3**2 - 3.2e-3**2) / 4
    rise = result.parts[0].tj_peak - (50.0 + ZERO_C)
    assert rise == pytest.approx(2.0 / g, rel=0.02)


def test_mount_transient_follows_the_lumped_rc_toward_the_contact_temperature():
    """Lumped plate tied to T_fix: T(t) = T_fix + P/G + (T_0 - T_fix - P/G) exp(-t G/C).

    Incropera & DeWitt sec. 5.3 (general lumped capacitance analysis with a source); the plate
    starts at ambient (25 C) below the contact (50 C), so the fixed-temperature load g = G T_fix
    drives it. Biot number with the ideal spreader ~1e-6; tolerance 1 % of the final rise.
    """
    g = 0.5
    board = _mount_plate(
        0.0, {**SCREW, "conductance_w_per_k": g}, duration_s=60.0, rtol=1e-4, atol_k=1e-3
    )
    result = run_check(board, RunOptions())
    s, d = PLATE_MM * 1e-3, PLATE_THICKNESS_MM * 1e-3
    capacity = 2000.0 * 900.0 * s * s * d
    fixed, start = 50.0 + ZERO_C, 25.0 + ZERO_C
    t = result.traces.t
    final = fixed + 2.0 / g
    exact = final + (start - final) * np.exp(-t * g / capacity)
    mean = result.traces.mean
    # traces.mean is capacity weighted over every DOF; the plate is the only capacity here
    assert np.max(np.abs(mean - exact)) < 0.01 * (final - start)
    assert t[-1] == pytest.approx(60.0)


def test_mount_on_both_faces_counts_both_contact_areas():
    """A contact coefficient on both faces acts on twice the area: G = 2 h_c A.

    Thermal circuit of two equal contacts in parallel, each with a contact resistance per unit
    area 1/h_c (Incropera & DeWitt sec. 3.1, contact resistance; section recalled from memory).
    Tolerance 0.5 % (square contact, polygon exact).
    """
    square = {"rect": {"center_mm": [15, 15], "size_mm": [6, 6]}, "side": "both"}
    board = _mount_plate(0.0, {**square, "h_contact_w_per_m2k": 1000.0})
    result = run_check(board, RunOptions(steady=True))
    g = 2 * 1000.0 * 36e-6
    rise = result.parts[0].tj_peak - (50.0 + ZERO_C)
    assert rise == pytest.approx(2.0 / g, rel=5e-3)


def test_mount_inside_a_hole_is_a_board_file_error():
    hole = {"circle": {"center_mm": [15, 15], "diameter_mm": 3.2}}
    inside = {"circle": {"center_mm": [15, 15], "diameter_mm": 3.0}, "side": "bottom"}
    with pytest.raises(BoardFileError, match=r"mount\[M1\]"):
        _mount_plate(0.0, {**inside, "conductance_w_per_k": 1.0}, holes=[hole])


def test_board_capacity_from_the_file_includes_via_barrels():
    """The file-only capacity (sanity checks) equals the assembled capacity, vias included.

    First principles: C = sum rho c V; with the plate fully covered by the field the only
    difference between the two is the barrel copper, f (rho c_cu - rho c_layer) t A
    (0.5 % of the total here). Tolerance 1e-9.
    """
    board = _via_plate({"drill_mm": 0.3, "plating_um": 25.0, "pitch_mm": 1.0})
    system = assemble(build_mesh(board), build_stackup(board), board)
    assert board_capacity(board) == pytest.approx(system.total_capacity, rel=1e-9)
