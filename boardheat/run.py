"""Run a whole check: Board -> stackup -> mesh -> assembly -> stepping -> checks.

This module only sequences the stages and converts their outputs; each stage's physics lives
in its own module. ``run_check`` returns a :class:`~boardheat.checks.CheckResult` that the
report stage renders.
"""

from __future__ import annotations

import logging
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np
import numpy.typing as npt

from boardheat.assembly import System, assemble
from boardheat.board import Board
from boardheat.checks import (
    CheckResult,
    FieldSeries,
    HotField,
    LaminateResult,
    Traces,
    local_diffusion_time,
    part_results,
    sanity_checks,
    status_of,
)
from boardheat.errors import BoardheatWarning
from boardheat.meshing import Mesh, build_mesh
from boardheat.stackup import Stackup, build_stackup
from boardheat.stepping import LinearOde, Solution, StepperOptions, integrate, solve_steady

FloatArray = npt.NDArray[np.float64]
log = logging.getLogger(__name__)

#: shortest time scale the through-thickness mesh resolves by default, s
MIN_RESOLVED_TIME = 1e-4


@dataclass(frozen=True)
class RunOptions:
    """How to run a check (defaults come from the board file's ``[run]`` table)."""

    steady: bool = False
    verbose: bool = False
    backend: Literal["auto", "splu", "cholmod", "pardiso"] = "auto"
    margin: float | None = None
    rtol: float | None = None
    atol: float | None = None
    method: Literal["trbdf2", "backward_euler"] | None = None
    dt: float | None = None


@dataclass(frozen=True)
class Model:
    """The discretised board: what meshing, stackup and assembly produced."""

    board: Board
    stackup: Stackup
    mesh: Mesh
    system: System


def shortest_feature(board: Board) -> float | None:
    """Return the shortest interval between power changes of any part within the run, s.

    A part whose power is on from t = 0 changes power at t = 0 as well (the board starts at
    ambient), so a pulse from the start counts like any other.
    """
    gaps = []
    for part in board.parts:
        bp = part.schedule.breakpoints(board.run.duration)
        if part.schedule.value(0.0, side="right") != 0.0:
            bp = np.concatenate([[0.0], bp])
        if len(bp) > 1:
            gaps.append(float(np.min(np.diff(bp))))
    return max(min(gaps), MIN_RESOLVED_TIME) if gaps else None


def build_model(board: Board, verbose: bool = False, mesh: Mesh | None = None) -> Model:
    """Discretise a board: stackup, mesh (or reuse ``mesh``) and assembled system."""
    stack = build_stackup(board, shortest_feature(board))
    mesh = mesh if mesh is not None else build_mesh(board, verbose=verbose)
    system = assemble(mesh, stack, board)
    return Model(board, stack, mesh, system)


def make_ode(model: Model) -> LinearOde:
    """Return the semi-discrete system with the parts' schedules as its sources."""
    parts = model.board.parts
    duration = model.board.run.duration

    def power(t: float, side: Literal["left", "right"] = "right") -> FloatArray:
        return np.array([float(p.schedule.value(t, side=side)) for p in parts])

    bps = [p.schedule.breakpoints(duration) for p in parts]
    breakpoints = np.unique(np.concatenate([*bps, np.zeros(0)]))
    breakpoints = breakpoints[(breakpoints > 0) & (breakpoints < duration)]
    s = model.system
    return LinearOde(M=s.M, A=s.A, g=s.g, B=s.B, power=power, breakpoints=breakpoints)


def _junction_rows(model: Model) -> list[int]:
    names = model.system.probe_names
    rows = []
    for part in model.board.parts:
        key = f"junction:{part.refdes}" if part.junction is not None else f"part:{part.refdes}"
        rows.append(names.index(key))
    return rows


def _traces(model: Model, t: FloatArray, probes: FloatArray) -> Traces:
    board, s = model.board, model.system
    parts = board.parts
    rows = _junction_rows(model)
    fp = probes[:, [s.probe(f"part:{p.refdes}") for p in parts]]
    # at a breakpoint the power jumps: a resistive junction model takes the larger side
    right = np.column_stack([p.schedule.value(t, side="right") for p in parts])
    left = np.column_stack([p.schedule.value(t, side="left") for p in parts])
    power = np.maximum(left, right)
    theta = np.array([p.theta_jb if p.junction is None else 0.0 for p in parts])
    tj = probes[:, rows] + power * theta
    return Traces(
        t=t,
        tj=tj,
        board=fp,
        power=right,
        mean=probes[:, s.probe("board:mean")],
        loss=probes[:, s.probe("board:loss")],
        refdes=tuple(p.refdes for p in parts),
    )


def _hot_field(model: Model, field: FloatArray, time_s: float, refdes: str) -> HotField:
    fe = model.system.fe_field(field).reshape(-1, model.system.nz)
    return HotField(
        points=model.mesh.points,
        triangles=model.mesh.triangles,
        top=fe[:, 0].copy(),
        bottom=fe[:, -1].copy(),
        time=time_s,
        refdes=refdes,
    )


def _field_series(model: Model, fields: list[tuple[float, FloatArray]]) -> FieldSeries:
    """Stack 3D fields (finite-element DOFs only) at the given instants for the 3D viewers."""
    mesh, s, stack = model.mesh, model.system, model.stackup
    nz = s.nz
    n2 = mesh.n_nodes
    points = np.column_stack(
        [np.repeat(mesh.points, nz, axis=0), np.tile(-stack.z, n2)]
    )  # node * nz + k, z = 0 on top and negative downwards
    tri = mesh.triangles * nz
    wedges = np.concatenate(
        [np.column_stack([tri + k, tri + k + 1]) for k in range(nz - 1)]
    ).astype(np.int64)
    unique = sorted({float(t): f for t, f in fields}.items())
    times = np.array([t for t, _ in unique])
    values = np.array([s.fe_field(f) for _, f in unique])
    return FieldSeries(points=points, wedges=wedges, times=times, values=values)


def _pulse_rises(model: Model, traces: Traces) -> dict[str, list[tuple[float, float, float]]]:
    """Find up to three short pulses per part and the footprint's rise during each.

    A pulse is short when it lasts less than the part's local diffusion time; the search is
    vectorised over the schedule's intervals.
    """
    out: dict[str, list[tuple[float, float, float]]] = {}
    board = model.board
    for j, part in enumerate(board.parts):
        bp = part.schedule.breakpoints(board.run.duration)
        if bp.size < 2:
            continue
        a, b = bp[:-1], bp[1:]
        p_in = part.schedule.value(0.5 * (a + b))
        p_before = part.schedule.value(a, side="left")
        short = (b - a < local_diffusion_time(board, part)) & (p_in > p_before) & (p_in > 0)
        ia = np.searchsorted(traces.t, a)
        ib = np.searchsorted(traces.t, b)
        recorded = (ib < len(traces.t)) & (ia < len(traces.t))
        recorded[recorded] &= traces.t[ia[recorded]] == a[recorded]
        found = []
        for k in np.flatnonzero(short & recorded)[:3]:
            rise = float(traces.board[ib[k], j] - traces.board[ia[k], j])
            found.append((float(a[k]), part.schedule.energy(float(a[k]), float(b[k])), rise))
        if found:
            out[part.refdes] = found
    return out


def run_check(
    board: Board,
    options: RunOptions | None = None,
    progress: Callable[[float, int], None] | None = None,
    model: Model | None = None,
) -> CheckResult:
    """Run the whole check of one board (or variant) and return its verdicts.

    Parameters
    ----------
    board : the validated board
    options : overrides of the board file's run settings
    progress : called with (simulated time s, steps) while stepping
    model : a prebuilt model to reuse (e.g. the same mesh for several variants)
    """
    options = options or RunOptions()
    start = time.perf_counter()
    caught: list[str] = []
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always", BoardheatWarning)
        model = model or build_model(board, verbose=options.verbose)
        result = _solve(model, options, progress)
    for w in record:
        if issubclass(w.category, BoardheatWarning):
            caught.append(str(w.message))
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    settle_warnings = [
        f"{p.refdes}: still heating at the end of the run (peak at {p.t_peak:.4g} s); held at "
        f"its final power it settles {p.tj_steady - p.tj_peak:.1f} K hotter, "
        + (
            f"{p.tj_steady - p.tj_max:.1f} K above its limit"
            if p.tj_steady > p.tj_max
            else f"{p.tj_max - p.tj_steady:.1f} K below its limit"
        )
        for p in result.parts
        if not result.steady
        and p.tj_steady is not None
        and p.t_peak >= result.duration * (1 - 1e-9)
        and p.tj_steady > p.tj_peak + result.margin
    ]
    sanity_warnings = [
        f"sanity check '{c.name}' disagrees: {c.detail}" for c in result.sanity if not c.passed
    ]
    stats = dict(result.stats)
    stats["seconds_total"] = time.perf_counter() - start
    return CheckResult(
        **{
            **result.__dict__,
            "warnings": tuple(caught + settle_warnings + sanity_warnings),
            "stats": stats,
        }
    )


def _solve(
    model: Model, options: RunOptions, progress: Callable[[float, int], None] | None
) -> CheckResult:
    board, s = model.board, model.system
    run = board.run
    margin = run.margin if options.margin is None else options.margin
    ode = make_ode(model)
    T0 = np.full(s.n_dofs, board.environment.ambient)
    rows = _junction_rows(model)
    stats: dict[str, float | int | str] = {
        "dofs": s.n_dofs,
        "nodes_2d": model.mesh.n_nodes,
        "triangles": len(model.mesh.triangles),
        "layers_z": s.nz,
        "seconds_mesh": model.mesh.seconds,
        "seconds_assembly": s.seconds,
    }
    final_power = np.array(
        [float(p.schedule.value(run.duration, side="left")) for p in board.parts]
    )
    t0 = time.perf_counter()
    steady_field = solve_steady(ode, final_power, backend=options.backend)
    stats["seconds_steady"] = time.perf_counter() - t0
    steady_probes = s.P @ steady_field
    theta = np.array([p.theta_jb if p.junction is None else 0.0 for p in board.parts])
    tj_steady = steady_probes[rows] + final_power * theta
    steady_map = {p.refdes: float(v) for p, v in zip(board.parts, tj_steady, strict=True)}
    if options.steady:
        t = np.array([run.duration])
        probes = steady_probes[None, :]
        traces = _traces(model, t, probes)
        traces = Traces(**{**traces.__dict__, "power": final_power[None, :]})
        hot_index = int(np.argmax(tj_steady - np.array([p.tj_max for p in board.parts])))
        hot = _hot_field(model, steady_field, run.duration, board.parts[hot_index].refdes)
        lam_peak, lam_time = float(s.fe_field(steady_field).max()), run.duration
        series = _field_series(model, [(run.duration, steady_field)])
    else:
        method = options.method or run.method
        dt = options.dt if options.dt is not None else run.dt
        opts = StepperOptions(
            method=method,
            rtol=options.rtol if options.rtol is not None else run.rtol,
            atol=options.atol if options.atol is not None else run.atol,
            fixed_dt=dt,
            backend=options.backend,
        )
        sol: Solution = integrate(
            ode,
            T0,
            run.duration,
            s.P,
            opts,
            snapshot_times=run.snapshot_times,
            peak_rows=tuple(rows),
            progress=progress,
        )
        st = sol.stats
        stats.update(
            steps=st.steps,
            rejected=st.rejected,
            factorizations=st.factorizations,
            solves=st.solves,
            seconds_factor=st.seconds_factor,
            seconds_solve=st.seconds_solve,
            seconds_stepping=st.seconds_total,
            backend=st.backend,
            precision=st.precision,
        )
        traces = _traces(model, sol.t, sol.probes)
        excess = traces.tj.max(axis=0) - np.array([p.tj_max for p in board.parts])
        hot_index = int(np.argmax(excess))
        hot_row = rows[hot_index]
        hot_t, hot_T = sol.peak_fields.get(hot_row, (run.duration, sol.final))
        hot = _hot_field(model, hot_T, hot_t, board.parts[hot_index].refdes)
        candidates = [
            (hot_t, hot_T),
            (run.duration, sol.final),
            *sol.peak_fields.values(),
            *sol.snapshots.items(),
        ]
        lam_time, lam_field = max(candidates, key=lambda c: float(s.fe_field(c[1]).max()))
        lam_peak = float(s.fe_field(lam_field).max())
        series = _field_series(
            model, [(hot_t, hot_T), (run.duration, sol.final), *sol.snapshots.items()]
        )
    parts = part_results(board, traces, steady_map, margin)
    laminate = LaminateResult(
        peak=lam_peak,
        limit=run.laminate_max,
        time=float(lam_time),
        status=status_of(lam_peak, run.laminate_max, margin),
    )
    sanity = sanity_checks(
        board,
        traces,
        model_capacity=s.total_capacity,
        loss_offset=s.loss_offset,
        steady=options.steady,
        footprint_rise_in_pulses=None if options.steady else _pulse_rises(model, traces),
    )
    return CheckResult(
        board_name=board.name,
        variant=board.variant,
        source=str(board.source),
        steady=options.steady,
        ambient=board.environment.ambient,
        duration=run.duration,
        margin=margin,
        parts=parts,
        laminate=laminate,
        sanity=sanity,
        warnings=(),
        traces=traces,
        hot=hot,
        stats=stats,
        fields=series,
    )
