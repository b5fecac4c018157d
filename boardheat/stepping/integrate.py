"""Integrate the board's semi-discrete heat balance M T' + A T = g + B p(t) in time.

Stage 6 of the data flow. Input: the capacity matrix M (J/K), the conductance matrix A (W/K),
the constant load g (W), the source-spreading matrix B and a power schedule p(t) (W) with its
breakpoints. Output: probe temperature histories (K), requested fields, per-probe peak fields and
solver statistics. Time is advanced with TR-BDF2 (γ = 2 − √2; Bank et al. 1985, Hosea & Shampine
1996) under local error control, with step sizes drawn from a geometric ladder so that few
matrices M + d·dt·A need factoring, and with steps that land exactly on every breakpoint and
snapshot time. Fixed-step backward Euler is kept as the baseline, and steady states
A T = g + B p are solved directly with the same sparse direct back ends.
"""

from __future__ import annotations

import logging
import math
import time
import warnings
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

from boardheat.errors import SolverError, StepperWarning
from boardheat.stepping.control import (
    _D,
    _E_END,
    _E_F,
    _E_GAMMA,
    _PROGRESS_SECONDS,
    _W,
    GAMMA,
    _Controller,
    _starting_step,
    ladder_unit,
)
from boardheat.stepping.problem import (
    FloatArray,
    LinearOde,
    Side,
    Solution,
    SolverStats,
    StepperOptions,
)
from boardheat.stepping.solvers import (
    FACTOR_COST_IN_SOLVES,
    _FactorCache,
    _resolve_backend,
    _Timed,
)

logger = logging.getLogger(__name__)


class _System:
    """Products of one LinearOde that every step needs (diagonal of M, loads, powers)."""

    def __init__(self, ode: LinearOde) -> None:
        self.M = ode.M
        self.A = ode.A
        self.B = ode.B
        self.g = ode.g
        self.n_src = ode.n_src
        diagonal = np.asarray(ode.M.diagonal(), dtype=np.float64)
        off_diagonal = (ode.M - sp.diags_array(diagonal)).count_nonzero()
        self.m_diag: FloatArray | None = diagonal if off_diagonal == 0 else None
        self.m_lump = np.asarray(ode.M.sum(axis=1), dtype=np.float64).reshape(-1)
        if not np.all(self.m_lump > 0.0):
            raise SolverError("LinearOde.M: a row sums to <= 0 J/K; expected positive capacity")
        self._power = ode.power

    def mass(self, x: FloatArray) -> FloatArray:
        if self.m_diag is not None:
            return self.m_diag * x
        return np.asarray(self.M @ x, dtype=np.float64)

    def power(self, t: float, side: Side) -> FloatArray:
        p = np.asarray(self._power(t, side), dtype=np.float64)
        if p.shape != (self.n_src,) or not np.all(np.isfinite(p)):
            raise SolverError(
                f"LinearOde.power(t={t!r}, side={side!r}): returned shape {p.shape}; "
                f"expected ({self.n_src},) finite watts"
            )
        return p

    def load(self, p: FloatArray) -> FloatArray:
        return self.g + np.asarray(self.B @ p, dtype=np.float64)

    def load_change(self, p_new: FloatArray, p_old: FloatArray) -> FloatArray | None:
        if np.array_equal(p_new, p_old):
            return None
        return np.asarray(self.B @ (p_new - p_old), dtype=np.float64)


class _History:
    """Growable record of accepted steps."""

    def __init__(self, n_probe: int) -> None:
        self.size = 0
        self._t = np.empty(1024)
        self._dt = np.empty(1024)
        self._err = np.empty(1024)
        self._probes = np.empty((1024, n_probe))

    def append(self, t: float, dt: float, err: float, probes: FloatArray) -> None:
        if self.size == self._t.shape[0]:
            grow = self.size
            self._t = np.concatenate([self._t, np.empty(grow)])
            self._dt = np.concatenate([self._dt, np.empty(grow)])
            self._err = np.concatenate([self._err, np.empty(grow)])
            self._probes = np.concatenate([self._probes, np.empty((grow, self._probes.shape[1]))])
        i = self.size
        self._t[i] = t
        self._dt[i] = dt
        self._err[i] = err
        self._probes[i] = probes
        self.size += 1

    def arrays(self) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
        """Return read-only copies of (t, probes, dt, err) trimmed to the recorded steps."""
        t, probes, dt, err = (
            a[: self.size].copy() for a in (self._t, self._probes, self._dt, self._err)
        )
        for a in (t, probes, dt, err):
            a.setflags(write=False)
        return t, probes, dt, err


class _Recorder:
    """Probe histories, rejected steps, snapshots, peak fields and progress reports."""

    def __init__(
        self,
        P: Any,
        rows: npt.NDArray[np.int64],
        snaps: FloatArray,
        progress: Callable[[float, int], None] | None,
        T0: FloatArray,
    ) -> None:
        self._P = P
        self._rows = rows
        self._snaps = set(snaps.tolist())
        self._progress = progress
        self._last_report = time.perf_counter()
        self.history = _History(P.shape[0])
        self.rejected: list[tuple[float, float, float]] = []
        self.snapshots: dict[float, FloatArray] = {0.0: T0} if 0.0 in self._snaps else {}
        values = self._probe(T0)
        self.history.append(0.0, 0.0, 0.0, values)
        self.peak_value = values[rows].copy()
        self.peak_time = np.zeros(rows.size)
        self.peak_field = [T0] * rows.size

    def _probe(self, T: FloatArray) -> FloatArray:
        return np.asarray(self._P @ T, dtype=np.float64)

    def accepted(self, t: float, dt: float, err: float, T: FloatArray, landing: bool) -> None:
        values = self._probe(T)
        self.history.append(t, dt, err, values)
        if landing and t in self._snaps:
            self.snapshots[t] = T
        if self._rows.size:
            for j in np.flatnonzero(values[self._rows] > self.peak_value):
                self.peak_value[j] = values[self._rows[j]]
                self.peak_time[j] = t
                self.peak_field[j] = T  # fields are never modified in place: no copy needed
        if self._progress is not None:
            now = time.perf_counter()
            if now - self._last_report >= _PROGRESS_SECONDS:
                self._progress(t, self.history.size - 1)
                self._last_report = now

    def finish(self, t: float) -> None:
        if self._progress is not None:
            self._progress(t, self.history.size - 1)

    def peak_fields(self) -> dict[int, tuple[float, FloatArray]]:
        return {
            int(row): (float(self.peak_time[j]), self.peak_field[j])
            for j, row in enumerate(self._rows.tolist())
        }


def _readonly(values: Sequence[float]) -> FloatArray:
    a = np.array(values, dtype=np.float64)
    a.setflags(write=False)
    return a


def _stops(
    ode: LinearOde, snapshot_times: FloatArray, t_end: float
) -> tuple[FloatArray, set[float]]:
    """Return the sorted times to land on and the set of breakpoints among them."""
    bp = ode.breakpoints[(ode.breakpoints > 0.0) & (ode.breakpoints < t_end)]
    snaps = snapshot_times[snapshot_times > 0.0]
    stops = np.unique(np.concatenate([bp, snaps, [t_end]]))
    return stops, set(bp.tolist())


#: Linear solves may err by this fraction of the absolute tolerance atol (max norm, kelvin),
#: which only mixed-precision factorizations use (to skip refinement steps). Error-controlled
#: stiff integrators stop their Newton iterations at a fraction of 1e-1 to 1e-2 of the
#: tolerance (Hairer & Wanner, Solving ODEs II, 2nd ed., Sec. IV.8, recalled from memory); a
#: linear solve's error is not corrected by the next step, so a tenfold margin is added.
SOLVE_TOLERANCE = 1e-3


def _trbdf2_step(
    system: _System,
    factor: _Timed,
    state: tuple[float, FloatArray, FloatArray, FloatArray],
    dt: float,
    t_new: float,
    tolerance: float = 0.0,
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Return (T_{n+1}, error estimate e, p(t_new, "left")) of one TR-BDF2 step.

    ``state`` is (t_n, T_n, F_n, p_n); the equations are in the docstring of :func:`integrate`.
    ``tolerance`` (K) is the error each solve may make (see ``SOLVE_TOLERANCE``).
    """
    t, T, F, p0 = state
    dh = _D * dt
    rhs = 2.0 * F
    load_gamma = system.load_change(system.power(t + GAMMA * dt, "left"), p0)
    if load_gamma is not None:
        rhs += load_gamma
    m_delta_gamma = system.mass(factor.solve(dh * rhs, tolerance))
    p1 = system.power(t_new, "left")
    load_end = system.load_change(p1, p0)
    delta = factor.solve(
        (_W / _D) * m_delta_gamma + dh * (F if load_end is None else F + load_end), tolerance
    )
    estimate = factor.solve(
        (_E_F * dt) * F + _E_GAMMA * m_delta_gamma + _E_END * system.mass(delta), tolerance
    )
    return T + delta, estimate, p1


def _backward_euler_step(
    system: _System,
    factor: _Timed,
    state: tuple[float, FloatArray, FloatArray, FloatArray],
    dt: float,
    t_new: float,
    tolerance: float = 0.0,
) -> tuple[FloatArray, FloatArray]:
    """Return (T_{n+1}, p(t_new, "left")) of one step (M + dt A) δ = dt (F_n + f_{n+1} − f_n)."""
    _, T, F, p0 = state
    p1 = system.power(t_new, "left")
    load_end = system.load_change(p1, p0)
    return T + factor.solve(dt * (F if load_end is None else F + load_end), tolerance), p1


def integrate(
    ode: LinearOde,
    T0: FloatArray,
    t_end: float,
    P: Any,
    options: StepperOptions = StepperOptions(),  # noqa: B008 -- frozen, so a shared default is safe
    snapshot_times: Sequence[float] = (),
    peak_rows: Sequence[int] = (),
    progress: Callable[[float, int], None] | None = None,
) -> Solution:
    r"""Integrate M T' + A T = g + B p(t) from T(0) = T0 to t_end.

    TR-BDF2 (Bank et al., IEEE Trans. CAD 4 (1985) 436-451; Hosea & Shampine, Appl. Numer.
    Math. 20 (1996) 21-37) with γ = 2 − √2, d = γ/2, w = √2/4. With F(t, T) = f(t) − A T,
    f = g + B p and Z_k = h F(t_k, T_k) the two stages are

        M (T_γ − T_n)     = d Z_n + d Z_γ               trapezoidal rule to t_n + γh
        M (T_{n+1} − T_n) = w Z_n + w Z_γ + d Z_{n+1}   BDF2 to t_n + h

    and both use K = M + d h A. They are solved in increment form (no cancellation against
    the ~300 K level):  K δ_γ = d h (2 F_n + f_γ − f_n),
    K δ = (w/d) M δ_γ + d h (F_n + f_{n+1} − f_n),  T_{n+1} = T_n + δ.

    Local error estimate (Hosea & Shampine 1996): the difference between the step and the
    third-order companion formula with weights ((1 − w)/3, (3w + 1)/3, d/3) on (Z_n, Z_γ, Z_{n+1}),
    filtered by (I − d h J)^{-1} as they recommend for stiff problems. For M T' = F this is

        K e = (1 − 4w)/3 Z_n + 1/3 Z_γ − (2d/3) Z_{n+1}
            = −(4w/3) h F_n + (1 + 2w)/(3d) M δ_γ − (2/3) M δ,

    i.e. a third solve with the same factorization. A step is rejected when the norm of
    :class:`StepperOptions` exceeds 1; the next step is dt·min(5, max(0.2, 0.9 err^(−1/3)))
    rounded down to the ladder dt_0 · ratio^k, so few distinct matrices are factored (an LRU
    cache of ``cache_size`` factorizations, keyed by dt). Steps land exactly on every
    breakpoint, snapshot time and t_end. When the controller's step reaches past the next stop
    and the stops share a time unit (:func:`~boardheat.stepping.control.ladder_unit`), the gap
    is covered either by one step of the gap itself (off the ladder; cached too, and always
    taken for a gap met before, since periodic schedules repeat the same gaps) or by a sum of
    rungs, whichever costs fewer solves given what is cached (a factorization counted as
    ``FACTOR_COST_IN_SOLVES`` solves of its back end). Without a common unit the step is the
    gap, and a gap between one and two steps is split in halves. A step starting at a
    breakpoint uses p(t, "right"), one ending there p(t, "left"); after a jump in p the step
    restarts small and grows again as the estimate allows. The restart step is ``restart_dt``
    if set, else the step the estimate asked for right after the previous jump, else (first
    jump) the starting-step heuristic of Hairer, Nørsett & Wanner (Sec. II.4) on the new state.
    A step at ``dt_min`` whose estimate still exceeds 1 is accepted and counted, and one
    :class:`~boardheat.errors.StepperWarning` reports the count.

    Cost of pulse trains: no pulse is ever skipped, since both edges of every pulse are stops.
    Each pulse costs at least two steps, and typically one restart ramp per edge (steps grow by
    the ladder ratio every one to three steps from the restart step up to the gap). Measured
    on an 8-node chain, 2000 pulses at rtol = 1e-2: 13 274 steps (6.6 per pulse), 34
    factorizations. The same step sizes recur from pulse to pulse, so factorizations stay few
    as long as the cache holds the rungs of one ramp plus the landing gaps. Once it has had to
    evict (large boards: the memory budget holds two factorizations at 1 M DOFs), LRU alone
    would re-factor every rung of every ramp, so the controller changes three things: a gap
    between stops met before is covered by equal steps, one matrix per gap kept from period to
    period, when that costs fewer solves than its last adaptive pass, with as few steps as the
    estimate allows (:meth:`~boardheat.stepping.control._Controller._plan_gap`); a growing
    step moves two rungs at a time (ratio² ladder), halving the matrices of a climb; and a stop
    at most four new-rung steps away is met in equal steps, one new matrix instead of the rung
    and the remainder, or in a step already factored that divides the gap
    (:meth:`~boardheat.stepping.control._Controller._approach`). A cache that holds at most
    ``CROWDED_SLOTS`` factorizations is crowded from the start. Measured on the demo board with
    two cached factorizations: LRU alone 244 steps and 183 factorizations; equal steps and
    two-rung growth 321 and 38; plans that follow the estimate 233 and 41; approaches in equal
    steps 231 and 38; with cached divisors and crowded from the start 234 and 34 (peak error
    against the reference 0.017, 0.016, 0.016, 0.014, 0.014 K). 230 k DOFs with two: 189 ->
    42 factorizations, 285 -> 144 s. ``stats.factorizations > stats.distinct_dt`` still shows
    re-factoring where each period needs more step sizes than the cache holds.

    Backward Euler (K = M + h A, K δ = h (F_n + f_{n+1} − f_n)) runs with fixed steps only.

    With ``fixed_dt`` each interval between stops is split into ceil(gap / fixed_dt) equal
    steps and nothing is rejected (TR-BDF2 still records its error estimate).

    Parameters
    ----------
    ode : LinearOde
    T0 : (n,) float ndarray, K
        Initial field.
    t_end : float, s
        End time (> 0).
    P : (n_probe, n) sparse, dimensionless
        Probe matrix; ``P @ T`` is recorded after every accepted step.
    options : StepperOptions
    snapshot_times : sequence of float, s
        Times in [0, t_end] whose full fields are kept.
    peak_rows : sequence of int
        Probe rows whose field at their largest recorded value is kept.
    progress : callable (t [s], accepted steps) -> None, optional
        Called at most every 0.25 s of wall time and once at the end.

    Returns
    -------
    Solution
    """
    wall_start = time.perf_counter()
    system = _System(ode)
    n = ode.n
    T = np.array(T0, dtype=np.float64)
    if T.shape != (n,) or not np.all(np.isfinite(T)):
        raise SolverError(f"integrate: T0 has shape {T.shape}; expected ({n},) finite kelvin")
    if not (0.0 < t_end < math.inf):
        raise SolverError(f"integrate: t_end={t_end!r}; expected a finite time > 0 s")
    P = sp.csr_array(P, dtype=np.float64)
    if P.shape[1] != n:
        raise SolverError(f"integrate: P has shape {P.shape}; expected (n_probe, {n})")
    snaps = np.array(snapshot_times, dtype=np.float64).reshape(-1)
    if np.any(~np.isfinite(snaps)) or np.any(snaps < 0.0) or np.any(snaps > t_end):
        raise SolverError(f"integrate: snapshot_times {snaps}; expected times in [0, {t_end}] s")
    rows = np.array(peak_rows, dtype=np.int64).reshape(-1)
    if np.any(rows < 0) or np.any(rows >= P.shape[0]):
        raise SolverError(f"integrate: peak_rows {rows}; expected rows of P in [0, {P.shape[0]})")

    opts = options
    trbdf2 = opts.method == "trbdf2"
    backend = _resolve_backend(opts.backend, n)
    factors = _FactorCache(
        ode.M, ode.A, _D if trbdf2 else 1.0, backend, opts.cache_size, precision=opts.precision
    )
    stops, breakpoints = _stops(ode, snaps, t_end)
    T_ref = np.full(n, opts.t_ref) if opts.t_ref is not None else T.copy()
    T.setflags(write=False)
    record = _Recorder(P, rows, snaps, progress, T)

    t = 0.0
    p0 = system.power(0.0, "right")
    F = system.load(p0) - ode.A @ T  # W, right-hand side at the start of the step
    rise = np.abs(T - T_ref)

    def guess() -> float:
        return _starting_step(system.m_lump, ode.A, T, F, T_ref, opts)

    unit = ladder_unit(stops, opts.ladder_ratio)
    control = _Controller(
        opts,
        opts.dt_initial or guess(),
        t_end,
        unit,
        solves_per_step=3 if trbdf2 else 1,
        factor_cost=FACTOR_COST_IN_SOLVES[backend],
    )
    solve_tolerance = SOLVE_TOLERANCE * opts.atol
    attempts = 0
    i_stop = 0
    while i_stop < stops.size:
        dt, t_new, landing = control.propose(
            t, float(stops[i_stop]), factors.cached, crowded=factors.crowded
        )
        attempts += 1
        if attempts > opts.max_steps:
            raise SolverError(
                f"integrate: max_steps={opts.max_steps} reached at t={t:.6g} s of "
                f"t_end={t_end:.6g} s; expected fewer steps: raise max_steps or loosen rtol/atol"
            )
        factor = factors.get(dt)
        if trbdf2:
            T_new, estimate, p1 = _trbdf2_step(
                system, factor, (t, T, F, p0), dt, t_new, solve_tolerance
            )
            rise_new = np.abs(T_new - T_ref)
            scale = opts.atol + opts.rtol * np.maximum(rise, rise_new)
            err = float(np.max(np.abs(estimate) / scale))
            finite = math.isfinite(err)
        else:
            T_new, p1 = _backward_euler_step(
                system, factor, (t, T, F, p0), dt, t_new, solve_tolerance
            )
            err = math.nan
            finite = math.isfinite(float(T_new.sum()))
        if not finite:
            raise SolverError(
                f"integrate: non-finite temperatures in the step from t={t:.6g} s "
                f"(dt={dt:.3e} s); expected SPD M and A and finite powers"
            )
        if control.rejects(t, dt, err):
            record.rejected.append((t, dt, err))
            continue

        T_new.setflags(write=False)
        T, t, p0 = T_new, t_new, p1
        if trbdf2:
            rise = rise_new
        control.accepted(dt, err)
        jump = False
        if landing:
            i_stop += 1
            if t in breakpoints:
                p_right = system.power(t, "right")
                jump = not np.array_equal(p_right, p0)
                p0 = p_right
        F = system.load(p0) - ode.A @ T
        if jump:
            control.restart(guess)
        record.accepted(t, dt, err, T, landing)

    record.finish(t)
    if control.floor_hits:
        warnings.warn(
            f"integrate: {control.floor_hits} step(s) accepted at the step-size floor dt_min="
            f"{opts.dt_min:g} s with the error estimate above tolerance (first at t="
            f"{control.first_floor_time:.6g} s); expected the estimate to meet rtol/atol above "
            "dt_min",
            StepperWarning,
            stacklevel=2,
        )
    times, probes, dts, errs = record.history.arrays()
    counters = factors.counters
    stats = SolverStats(
        steps=record.history.size - 1,
        rejected=len(record.rejected),
        factorizations=counters.factorizations,
        solves=counters.solves,
        seconds_factor=counters.seconds_factor,
        seconds_solve=counters.seconds_solve,
        seconds_total=time.perf_counter() - wall_start,
        backend=backend,
        distinct_dt=len(factors.keys_factored),
        dt_floor_hits=control.floor_hits,
        precision=factors.precision,
        refinements=factors.refinements,
    )
    logger.debug("integrate finished: %s", stats)
    if stats.factorizations > stats.distinct_dt:
        logger.info(
            "integrate: %d of %d factorizations re-factored a step size evicted from the cache; "
            "a larger cache_size (or ladder_ratio) would avoid them",
            stats.factorizations - stats.distinct_dt,
            stats.factorizations,
        )
    return Solution(
        t=times,
        probes=probes,
        dt=dts,
        err=errs,
        rejected_t=_readonly([r[0] for r in record.rejected]),
        rejected_dt=_readonly([r[1] for r in record.rejected]),
        rejected_err=_readonly([r[2] for r in record.rejected]),
        snapshots=record.snapshots,
        peak_fields=record.peak_fields(),
        final=T,
        stats=stats,
    )
