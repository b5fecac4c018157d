"""Checks stage: temperature histories + limits -> per-part verdicts and sanity checks.

Input: the recorded probe histories of a run (junction and footprint temperatures of every
part, the board's mean temperature and boundary heat flow), the board and the fields at the
hottest instants. Output: :class:`PartResult` per part (peak junction temperature, time of
peak, time above the limit, margin, PASS / NEAR / FAIL), the laminate check, and the
lumped-capacitance sanity checks, each with its numbers:

* board energy balance, ``int P dt = C (T_mean(t_end) - T_0) + int Q_out dt`` (first law);
* board Biot number ``Bi = h_max (d/2) / k_z,eff`` (Incropera & DeWitt, Fundamentals of Heat
  and Mass Transfer, sec. 5.1, eq. 5.10; lumped through the thickness when Bi < 0.1);
* the lumped board model ``C dtheta/dt = P(t) - hA theta`` (Incropera sec. 5.2, eq. 5.5/5.6),
  with C and hA computed from the board file independently of the assembled matrices, against
  the field solution's mean temperature rise;
* the adiabatic bound ``E / C`` on the footprint temperature rise during pulses shorter than
  the local diffusion time (all pulse energy kept in the part body and the copper under it).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import numpy.typing as npt

from boardheat.board import Board, Layer, Part
from boardheat.schedules import Schedule
from boardheat.stackup import layer_properties

FloatArray = npt.NDArray[np.float64]
Status = Literal["PASS", "NEAR", "FAIL"]

#: relative disagreement of the lumped board model with the field mean rise that warns
LUMPED_TOLERANCE = 0.15
#: energy-balance closure that warns (fraction of the energy delivered)
ENERGY_TOLERANCE = 0.02
#: slack on the adiabatic bound (the discrete footprint mean is area-, not capacity-weighted)
ADIABATIC_TOLERANCE = 0.05


@dataclass(frozen=True)
class PartResult:
    """The verdict for one part; temperatures in kelvin, times in seconds."""

    refdes: str
    package: str | None
    junction_model: str
    tj_max: float
    tj_peak: float
    t_peak: float
    time_above: float
    board_peak: float
    tj_steady: float | None
    power_peak: float
    energy: float
    status: Status

    @property
    def margin(self) -> float:
        """Return tj_max - tj_peak, K (negative when the limit is exceeded)."""
        return self.tj_max - self.tj_peak


@dataclass(frozen=True)
class SanityCheck:
    """One lumped-capacitance sanity check with its numbers (SI units, see ``unit``)."""

    name: str
    value: float
    reference: float
    tolerance: float
    passed: bool
    unit: str
    detail: str


@dataclass(frozen=True)
class LaminateResult:
    """Hottest board point against the laminate's maximum operating temperature (K)."""

    peak: float
    limit: float
    time: float
    status: Status


@dataclass(frozen=True)
class Traces:
    """Recorded histories: t (n,) s; tj, board, power (n, n_parts) K, K, W; mean (n,) K."""

    t: FloatArray
    tj: FloatArray
    board: FloatArray
    power: FloatArray
    mean: FloatArray
    loss: FloatArray
    refdes: tuple[str, ...]


@dataclass(frozen=True)
class HotField:
    """Board surface temperatures at the hottest instant, for the map plot.

    points (n, 2) m; triangles (m, 3); top, bottom (n,) K; time s; refdes of the part whose
    junction peak is closest to its limit.
    """

    points: FloatArray
    triangles: npt.NDArray[np.int64]
    top: FloatArray
    bottom: FloatArray
    time: float
    refdes: str


@dataclass(frozen=True)
class FieldSeries:
    """3D temperature fields at a few instants, for 3D viewers.

    points (n, 3) m; wedges (m, 6) int, prism cells (triangle at the upper z node, then the
    same triangle one node lower); times (k,) s; values (k, n) K.
    """

    points: FloatArray
    wedges: npt.NDArray[np.int64]
    times: FloatArray
    values: FloatArray


@dataclass(frozen=True)
class CheckResult:
    """Everything a run decided, ready for the report."""

    board_name: str
    variant: str
    source: str
    steady: bool
    ambient: float
    duration: float
    margin: float
    parts: tuple[PartResult, ...]
    laminate: LaminateResult
    sanity: tuple[SanityCheck, ...]
    warnings: tuple[str, ...]
    traces: Traces
    hot: HotField | None
    stats: dict[str, float | int | str] = field(default_factory=dict)
    fields: FieldSeries | None = None

    @property
    def verdict(self) -> Status:
        """Return FAIL if any part or the laminate fails, else NEAR if any is near, else PASS."""
        statuses = [p.status for p in self.parts] + [self.laminate.status]
        if "FAIL" in statuses:
            return "FAIL"
        return "NEAR" if "NEAR" in statuses else "PASS"


def status_of(peak: float, limit: float, margin: float) -> Status:
    """Return FAIL above ``limit``, NEAR within ``margin`` below it, else PASS."""
    if peak > limit:
        return "FAIL"
    return "NEAR" if peak > limit - margin else "PASS"


def time_above(t: FloatArray, y: FloatArray, limit: float) -> float:
    """Return the time ``y(t)`` spends above ``limit``, s, interpolating crossings linearly."""
    if len(t) < 2:
        return 0.0
    y0, y1, dt = y[:-1] - limit, y[1:] - limit, np.diff(t)
    both = (y0 > 0) & (y1 > 0)
    cross = (y0 > 0) != (y1 > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(y0 > 0, y0 / (y0 - y1), y1 / (y1 - y0))
    return float(np.sum(dt[both]) + np.sum((dt * frac)[cross]))


def part_results(
    board: Board, traces: Traces, steady: dict[str, float] | None, margin: float
) -> tuple[PartResult, ...]:
    """Return the verdict of every part from its junction temperature history."""
    out = []
    duration = float(traces.t[-1]) if len(traces.t) else 0.0
    for j, part in enumerate(board.parts):
        tj = traces.tj[:, j]
        k = int(np.argmax(tj))
        peak = float(tj[k])
        model = part.junction_source if part.junction is not None else "theta_jb"
        out.append(
            PartResult(
                refdes=part.refdes,
                package=part.package,
                junction_model=model,
                tj_max=part.tj_max,
                tj_peak=peak,
                t_peak=float(traces.t[k]),
                time_above=time_above(traces.t, tj, part.tj_max),
                board_peak=float(traces.board[:, j].max()),
                tj_steady=None if steady is None else steady.get(part.refdes),
                power_peak=part.schedule.peak(0.0, duration)
                if duration > 0
                else float(part.schedule.value(0.0)),
                energy=part.schedule.energy(0.0, duration),
                status=status_of(peak, part.tj_max, margin),
            )
        )
    return tuple(out)


# ----------------------------------------------------------------------------- sanity checks
def _rho_c(layer: Layer) -> float:
    """Return a layer's homogenised volumetric heat capacity at its own fill, J/(m^3 K)."""
    return float(layer_properties(layer, layer.fill)[2])


def board_capacity(board: Board) -> float:
    """Return the board's heat capacity from the file alone, J/K (laminate + parts + ladders).

    Pours and via fields are included by the area they change; this is independent of the
    assembled capacity matrix, so an error there shows up as a disagreement.
    """
    area = board.area
    total = 0.0
    for layer in board.layers:
        total += _rho_c(layer) * layer.thickness * area
    for pour in board.pours:
        layer = board.layers[board.layer_index(pour.layer)]
        d_rc = (pour.fill - layer.fill) * (layer.material.rho_c - layer.resin.rho_c)
        total += d_rc * layer.thickness * _clipped_area(pour.region.polygon, board)
    copper = next((layer.material for layer in board.layers if layer.kind == "copper"), None)
    cu_rho_c = copper.rho_c if copper is not None else 3.44e6
    for via in board.via_fields:
        via_area = _clipped_area(via.region.polygon, board)
        for layer in board.layers[via.first_layer : via.last_layer + 1]:
            rc = _rho_c(layer)
            total += via.copper_fraction * (cu_rho_c - rc) * layer.thickness * via_area
    total += sum(p.body_capacity for p in board.parts)
    total += sum(float(np.sum(p.junction.C)) for p in board.parts if p.junction is not None)
    return total


def _clipped_area(poly: FloatArray, board: Board) -> float:
    """Return the area of ``poly`` that lies on the board (estimated on a sample grid)."""
    from boardheat.board.load import points_in_polygon

    lo, hi = poly.min(axis=0), poly.max(axis=0)
    n = 120
    xs = np.linspace(lo[0], hi[0], n + 1)[:-1] + (hi[0] - lo[0]) / (2 * n)
    ys = np.linspace(lo[1], hi[1], n + 1)[:-1] + (hi[1] - lo[1]) / (2 * n)
    pts = np.array(np.meshgrid(xs, ys)).reshape(2, -1).T
    inside = points_in_polygon(pts, poly) & points_in_polygon(pts, board.outline)
    for hole in board.holes:
        inside &= ~points_in_polygon(pts, hole)
    return float(inside.mean() * (hi[0] - lo[0]) * (hi[1] - lo[1]))


def board_conductance(board: Board) -> float:
    """Return the board's total heat-loss conductance hA + contacts from the file, W/K."""
    env = board.environment
    perimeter = _perimeter(board.outline) + sum(_perimeter(h) for h in board.holes)
    return float(
        (env.h_top + env.h_bottom) * board.area
        + env.h_edge * perimeter * board.thickness
        + sum(m.conductance for m in board.mounts)
    )


def _perimeter(poly: FloatArray) -> float:
    return float(np.sum(np.linalg.norm(poly - np.roll(poly, -1, axis=0), axis=1)))


def biot_number(board: Board) -> float:
    """Return the through-thickness Biot number h_max (d/2) / k_z,eff of the bare board."""
    env = board.environment
    r = sum(
        layer.thickness / float(layer_properties(layer, layer.fill)[1]) for layer in board.layers
    )
    k_eff = board.thickness / r
    return max(env.h_top, env.h_bottom) * board.thickness / 2.0 / k_eff


def lumped_mean_rise(
    t: FloatArray, power: FloatArray, capacity: float, conductance: float
) -> FloatArray:
    """Integrate C dtheta/dt = P(t) - G theta exactly for P linear between samples, (n,) K.

    Incropera & DeWitt sec. 5.3 (general lumped analysis with a time-varying source); the
    exponential integrator is exact for piecewise-linear P.
    """
    theta = np.zeros_like(t)
    if conductance <= 0.0:  # adiabatic board: all energy stays, theta = int P dt / C
        steps = 0.5 * (power[1:] + power[:-1]) * np.diff(t)
        theta[1:] = np.cumsum(steps) / capacity
        return theta
    tau = capacity / conductance
    for i in range(1, len(t)):
        h = t[i] - t[i - 1]
        if h <= 0:
            theta[i] = theta[i - 1]
            continue
        e = math.exp(-h / tau)
        p0, p1 = power[i - 1], power[i]
        slope = (p1 - p0) / h
        # particular solution of a linear source: theta_p(s) = (p0 + slope (s - tau)) / G
        theta_p0 = (p0 - slope * tau) / conductance
        theta_p1 = (p1 - slope * tau) / conductance
        theta[i] = theta_p1 + (theta[i - 1] - theta_p0) * e
    return theta


def lumped_rise_of_schedules(
    schedules: Sequence[Schedule],
    t: FloatArray,
    capacity: float,
    conductance: float,
    extra_power: float = 0.0,
) -> FloatArray:
    """Return the lumped mean rise at the times t for the exact power sum of ``schedules``, K.

    The samples are t together with every breakpoint of every schedule, each breakpoint on
    both sides of its jump (two samples at one time), so the total power is linear between
    consecutive samples and :func:`lumped_mean_rise` integrates it exactly. Sampling the power
    at t alone would spread a jump at the end of a long step over the whole step.

    Parameters
    ----------
    schedules : sequence of Schedule
    t : (n,) float ndarray, s
        Increasing times, t[0] = 0.
    capacity : float, J/K
    conductance : float, W/K
    extra_power : float, W
        A constant source added to the schedules (fixed-temperature contacts).

    Returns
    -------
    (n,) float ndarray, K
    """
    t_end = float(t[-1])
    grid = np.unique(np.concatenate([t, *(s.breakpoints(t_end) for s in schedules)]))
    left = np.full(grid.size, float(extra_power))
    right = np.full(grid.size, float(extra_power))
    for schedule in schedules:
        left += schedule.value(grid, "left")
        right += schedule.value(grid, "right")
    times = np.repeat(grid, 2)
    power = np.column_stack([left, right]).reshape(-1)
    theta = lumped_mean_rise(times, power, capacity, conductance)
    return np.asarray(theta[2 * np.searchsorted(grid, t) + 1], dtype=np.float64)


def sanity_checks(
    board: Board,
    traces: Traces,
    *,
    model_capacity: float,
    loss_offset: float,
    steady: bool,
    footprint_rise_in_pulses: dict[str, list[tuple[float, float, float]]] | None = None,
) -> tuple[SanityCheck, ...]:
    """Return the lumped-capacitance sanity checks of a run (see the module docstring).

    ``footprint_rise_in_pulses`` maps refdes -> [(pulse start, pulse energy J, field rise K)].
    """
    checks: list[SanityCheck] = []
    t, p_total = traces.t, traces.power.sum(axis=1)
    ambient = board.environment.ambient
    bi = biot_number(board)
    checks.append(
        SanityCheck(
            "board Biot number",
            bi,
            0.1,
            0.0,
            True,
            "-",
            "through-thickness lumping of the bare board is valid for Bi < 0.1 "
            "(Incropera sec. 5.1); informational",
        )
    )
    capacity = board_capacity(board)
    conductance = board_conductance(board)
    if steady:
        q_out = float(traces.loss[-1] - loss_offset)
        p_in = float(p_total[-1])
        rel = abs(q_out - p_in) / max(p_in, 1e-30)
        checks.append(
            SanityCheck(
                "steady energy balance",
                q_out,
                p_in,
                0.005,
                rel <= 0.005,
                "W",
                f"heat leaving the board {q_out:.4g} W vs power {p_in:.4g} W ({rel:.2%})",
            )
        )
        rise = float(traces.mean[-1] - ambient)
        contact = sum(m.conductance * (m.temperature - ambient) for m in board.mounts)
        expect = (p_in + contact) / conductance if conductance > 0 else rise
        rel = abs(rise - expect) / max(abs(expect), 1e-12)
        checks.append(
            SanityCheck(
                "steady mean rise P/(hA)",
                rise,
                expect,
                LUMPED_TOLERANCE,
                rel <= LUMPED_TOLERANCE or bool(board.mounts),
                "K",
                f"field mean rise {rise:.3g} K vs lumped {expect:.3g} K ({rel:.1%})"
                + ("; informational with contacts" if board.mounts else ""),
            )
        )
        return tuple(checks)
    # energy balance over the run: the schedules' exact energy against the stored heat and
    # the boundary loss (trapezoid on the recorded steps; the loss is smooth in time)
    delivered = sum(p.schedule.energy(0.0, float(t[-1])) for p in board.parts)
    stored = model_capacity * float(traces.mean[-1] - traces.mean[0])
    lost = float(np.trapezoid(traces.loss - loss_offset, t))
    closure = abs(delivered - stored - lost) / max(delivered, 1e-30)
    checks.append(
        SanityCheck(
            "energy balance",
            stored + lost,
            delivered,
            ENERGY_TOLERANCE,
            closure <= ENERGY_TOLERANCE,
            "J",
            f"delivered {delivered:.4g} J = stored {stored:.4g} J + lost {lost:.4g} J "
            f"(closure {closure:.2%})",
        )
    )
    tau = capacity / conductance if conductance > 0 else math.inf
    # contacts to a fixed temperature act as a conductance plus a source G_c (T_fix - T_amb)
    contact_source = sum(m.conductance * (m.temperature - ambient) for m in board.mounts)
    schedules = [p.schedule for p in board.parts]
    lumped = lumped_rise_of_schedules(schedules, t, capacity, conductance, contact_source)
    field_rise = traces.mean - ambient
    scale = max(float(np.max(np.abs(lumped))), 1e-9)
    dev = float(np.max(np.abs(field_rise - lumped))) / scale
    ok = dev <= LUMPED_TOLERANCE or board.mounts != ()
    checks.append(
        SanityCheck(
            "lumped board model",
            float(field_rise[-1]),
            float(lumped[-1]),
            LUMPED_TOLERANCE,
            ok,
            "K",
            f"tau = C/(hA) = {capacity:.4g} J/K / {conductance:.4g} W/K = {tau:.4g} s; final "
            f"mean rise P/(hA) = {(p_total[-1] + contact_source) / max(conductance, 1e-300):.3g} "
            f"K; field vs lumped max deviation {dev:.1%} of the peak rise"
            + (
                "; informational: a contact sees its local, not the mean, temperature"
                if board.mounts
                else ""
            ),
        )
    )
    for refdes, pulses in (footprint_rise_in_pulses or {}).items():
        part = board.part(refdes)
        c_local = local_capacity(board, part)
        for start, energy, rise in pulses:
            bound = energy / c_local
            ok = rise <= bound * (1 + ADIABATIC_TOLERANCE)
            checks.append(
                SanityCheck(
                    f"adiabatic bound {refdes} @ {start:.4g} s",
                    rise,
                    bound,
                    ADIABATIC_TOLERANCE,
                    ok,
                    "K",
                    f"pulse energy {energy:.3g} J into {c_local:.3g} J/K (body + copper under "
                    f"the footprint): footprint rise {rise:.3g} K <= E/C = {bound:.3g} K",
                )
            )
    return tuple(checks)


def local_capacity(board: Board, part: Part) -> float:
    """Return body + outer-copper capacity under the footprint, J/K (adiabatic-bound region)."""
    layer = board.layers[0] if part.side == "top" else board.layers[-1]
    area = float(np.prod(part.footprint))
    return part.body_capacity + _rho_c(layer) * layer.thickness * area


def local_diffusion_time(board: Board, part: Part) -> float:
    """Return d^2/alpha of the first dielectric under the part's outer copper, s."""
    layers = board.layers if part.side == "top" else tuple(reversed(board.layers))
    for layer in layers:
        if layer.kind == "dielectric":
            m = layer.material
            return layer.thickness**2 * m.rho_c / m.k_through
    return 0.0
