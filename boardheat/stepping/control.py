"""Step-size control: the step ladder, landing on stops, rejection and restarts."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from boardheat.errors import SolverError
from boardheat.stepping.problem import FloatArray, StepperOptions

GAMMA = 2.0 - math.sqrt(2.0)
"""Fraction of the step covered by the trapezoidal stage of TR-BDF2."""
_D = GAMMA / 2.0  # d: diagonal coefficient of both stages (= 1 - sqrt(2)/2)
_W = math.sqrt(2.0) / 4.0  # w: weight of Z_n and Z_gamma in the BDF2 stage
_SAFETY = 0.9
_FAC_MIN = 0.2
_FAC_MAX = 5.0
_PROGRESS_SECONDS = 0.25
_MANTISSA_BITS = 40  # step sizes equal to 40 bits share one factorization
_APPROACH_STEPS = 4  # crowded cache: a stop this many new-rung steps away is met in equal steps
# error estimate  K e = E_F h F_n + E_GAMMA M δ_γ + E_END M δ  (see integrate)
_E_F = -4.0 * _W / 3.0
_E_GAMMA = (1.0 + 2.0 * _W) / (3.0 * _D)
_E_END = -2.0 / 3.0


def _quantize(dt: float) -> float:
    """Round dt to 40 mantissa bits so that steps differing by rounding share one matrix."""
    mantissa, exponent = math.frexp(dt)
    scale = float(1 << _MANTISSA_BITS)
    return math.ldexp(round(mantissa * scale) / scale, exponent)


class _Ladder:
    """Step sizes base * ratio**k (k any integer), each rounded by :func:`_quantize`."""

    def __init__(self, base: float, ratio: float) -> None:
        self.base = _quantize(base)
        self._ratio = ratio
        self._log_ratio = math.log(ratio)

    def rung(self, k: int) -> float:
        return _quantize(self.base * self._ratio**k)

    def floor(self, dt: float) -> float:
        """Largest rung <= dt (within 1e-9 relative)."""
        k = math.floor(math.log(dt / self.base) / self._log_ratio + 1e-9)
        while self.rung(k) > dt * (1.0 + 1e-9):
            k -= 1
        while self.rung(k + 1) <= dt * (1.0 + 1e-9):
            k += 1
        return self.rung(k)

    def even_floor(self, dt: float) -> float:
        """Largest rung base * ratio**(2j) <= dt: the ladder of ratio squared, same base."""
        k = round(math.log(self.floor(dt) / self.base) / self._log_ratio)
        return self.rung(k - k % 2)

    def ceil(self, dt: float) -> float:
        """Smallest rung >= dt (within 1e-9 relative)."""
        below = self.floor(dt)
        if below >= dt * (1.0 - 1e-9):
            return below
        return self.floor(below * self._ratio * (1.0 + 1e-6))


@dataclass
class _GapRecord:
    """What the controller learned about one length of interval between stops."""

    count: int = 0  # steps of an equal-step plan (0: none yet)
    adaptive_cost: float = math.inf  # solves of the last adaptive pass (steps + factorizations)
    fewest: int = 1  # a plan never has fewer steps (one more than a plan that was rejected)


@dataclass
class _Interval:
    """The interval between stops being stepped through."""

    stop: float
    key: float  # its length, quantized
    attempts: int = 0  # steps tried, rejected ones included
    accepted: int = 0
    misses: int = 0  # steps whose matrix was not factored when proposed
    planned: bool = False  # a plan of a recurring gap was taken (see _plan_gap)
    step: float = 0.0  # the equal step of a plan in force (0: adaptive)
    allowed: float = math.inf  # smallest next step the estimate allowed after a planned step
    approach: bool = False  # the end of the interval was met in equal steps (see _approach)


def ladder_unit(stops: FloatArray, ratio: float) -> float | None:
    """Return the largest time unit 10^-j s (j = 0..9) of which every stop is a multiple.

    Board schedules are written in round times (5 ms, 100 ms, 60 s), so their breakpoints
    share such a unit. A step ladder anchored at it, ``unit * ratio**k`` with a whole ratio,
    reaches every stop by a sum of ladder steps (greedy: the largest rung that fits, until
    it lands; with ratio 2 the binary decomposition of the gap), so landing on a breakpoint
    can do without a matrix off the ladder where the rungs are cheaper (see
    ``_Controller._land_in_one``). None for a ratio that is not a whole number, or when no
    unit fits (then landing steps are taken off the ladder).

    >>> ladder_unit(np.array([0.005, 0.025, 60.05, 120.0]), 2.0)
    0.001
    >>> ladder_unit(np.array([0.005, 0.025]), 2.5) is None
    True
    """
    if ratio != round(ratio) or ratio < 2.0 or stops.size == 0:
        return None
    for j in range(10):
        unit = 10.0**-j
        multiples = stops / unit
        if np.all(np.abs(multiples - np.round(multiples)) <= 1e-7 * np.maximum(1.0, multiples)):
            return unit
    return None


def _starting_step(
    m_lump: FloatArray,
    A: Any,
    T: FloatArray,
    F: FloatArray,
    T_ref: FloatArray,
    opts: StepperOptions,
) -> float:
    """Guess a first step (s) from the scaled rate of change and its derivative.

    After the starting-step heuristic of Hairer, Nørsett & Wanner, Solving Ordinary
    Differential Equations I (2nd ed., 1993), Sec. II.4, for order p = 2:
    h = (0.01 / max(d1, d2))^(1/3), with d1 = ‖M_l⁻¹ F‖ and d2 = ‖M_l⁻¹ A M_l⁻¹ F‖ in the
    error norm of :class:`StepperOptions` (M_l: row-sum lumped M). F is affine in T, so d2 is
    the exact difference quotient and their cap h ≤ 100·h0, a guard against a poor quotient,
    is not applied. A field at rest (d1 = d2 = 0) under constant power stays at rest, so any
    step is exact: the result is then unbounded and the caller clips it to the next stop,
    t_end and dt_max (a power that varies inside the interval is caught by the estimate).
    """
    scale = opts.atol + opts.rtol * np.abs(T - T_ref)
    rate = F / m_lump
    d1 = float(np.max(np.abs(rate) / scale))
    d2 = float(np.max(np.abs(A @ rate) / m_lump / scale))
    largest = max(d1, d2)
    return math.inf if largest == 0.0 else float((0.01 / largest) ** (1.0 / 3.0))


class _Controller:
    """Step-size choice: ladder rungs, landing on stops, rejection, restart after a jump."""

    def __init__(
        self,
        opts: StepperOptions,
        first: float,
        t_end: float,
        unit: float | None = None,
        solves_per_step: int = 3,
        factor_cost: float = 20.0,
    ) -> None:
        self.adaptive = opts.fixed_dt is None
        self._opts = opts
        self.floor_hits = 0
        self.first_floor_time = math.nan
        self._learned_restart: float | None = None
        self._after_jump = False
        start = min(max(first, opts.dt_min), opts.dt_max, t_end)
        self._unit = unit
        self._seen_gaps: set[float] = set()
        self._ladder = _Ladder(unit if unit is not None else start, opts.ladder_ratio)
        self.h = self._ladder.floor(start) if unit is not None else self._ladder.base
        self._h_floor = self._ladder.ceil(opts.dt_min)
        self._h_cap = self._ladder.floor(opts.dt_max) if math.isfinite(opts.dt_max) else math.inf
        self._fixed_dt = opts.fixed_dt if opts.fixed_dt is not None else math.inf
        self._segment = (0.0, 0, 0.0)  # fixed steps: start, number of steps, step
        self._segment_done = 0
        self._step_cost = float(solves_per_step)
        self._factor_cost = float(factor_cost)
        self._crowded = False
        self._gaps: dict[float, _GapRecord] = {}
        self._interval = _Interval(stop=math.nan, key=math.nan)

    def propose(
        self,
        t: float,
        t_stop: float,
        cached: Callable[[float], bool] | None = None,
        crowded: bool = False,
    ) -> tuple[float, float, bool]:
        """Return (dt used in the formulas, time reached, whether the step lands on t_stop).

        ``cached(dt)`` tells whether the matrix of step dt is factored already; it lets a
        landing choose between one step of the whole gap and a sum of rungs (see
        :meth:`_land_in_one`). ``crowded`` tells that the cache has had to free a
        factorization to make room; the controller then covers recurring gaps with equal steps
        where that costs fewer solves (:meth:`_plan_gap`) and grows the step two rungs at a
        time (:meth:`accepted`).
        """
        self._crowded = crowded
        if self.adaptive and t_stop != self._interval.stop:
            self._start_interval(t_stop - t, t_stop)
        dt, t_new, landing = self._propose(t, t_stop, cached)
        self._interval.attempts += 1
        if cached is not None and not cached(dt):
            self._interval.misses += 1
        return dt, t_new, landing

    def _start_interval(self, gap: float, t_stop: float) -> None:
        """Close the record of the last interval between stops and plan the next one."""
        done = self._interval
        if (not done.planned or done.approach) and done.key in self._gaps:
            record = self._gaps[done.key]
            record.adaptive_cost = self._step_cost * done.attempts
            record.adaptive_cost += self._factor_cost * done.misses
            if record.count == 0:
                record.count = done.accepted
        elif done.step > 0.0 and math.isfinite(done.allowed):  # a plan carried through
            record = self._gaps[done.key]
            enough = math.ceil(done.key / done.allowed * (1.0 - 1e-9))
            record.count = min(record.count, max(record.fewest, enough))
        key = _quantize(gap)
        self._interval = _Interval(stop=t_stop, key=key)
        known = self._gaps.get(key)
        if known is None:
            self._gaps[key] = _GapRecord()
        elif self._crowded and self.h < gap * (1.0 - 1e-7):
            self._plan_gap(known, gap)

    def _plan_gap(self, record: _GapRecord, gap: float) -> None:
        """Cover a recurring gap with ``record.count`` equal steps if that costs fewer solves.

        Periodic schedules (pulse trains) repeat the same gaps between stops, and left to
        itself the controller covers each with the same ramp of three or four step sizes. When
        the cache cannot hold them all (large boards: one factorization per 2.5 GiB at 1 M
        DOFs), every ramp factors them again. Equal steps need one matrix per gap, held
        from one period to the next. Their number is first the step count of the gap's first
        pass. It then follows the estimate as a step size would: after a plan carried through,
        the next one has as few steps as the smallest step the estimate allowed after any of
        them (its usual growth rule, :meth:`accepted`) permits. After a rejection it has as many
        as the rejected step asked for, and never again fewer than the failed plan plus one,
        so that it cannot swing between two counts. The plan is taken only while its steps
        cost fewer solves than the last adaptive pass over the same gap did, steps and
        factorizations counted as in :meth:`_land_in_one`. A rejected step ends the plan for
        the rest of the gap. Measured on the demo board with two factorizations cached: the
        radio bursts' 95 ms gaps went from 5 planned steps to 3 in the first burst and 2 in
        the second; the run from 321 steps to 233 (963 to 705 solves), 38 to 41
        factorizations, and its peak Tj error against the reference stayed at 0.016 K.
        """
        if record.count >= 1 and self._step_cost * record.count < record.adaptive_cost:
            self._interval.planned = True
            self._interval.step = _quantize(gap / record.count)

    def _propose(
        self, t: float, t_stop: float, cached: Callable[[float], bool] | None
    ) -> tuple[float, float, bool]:
        gap = t_stop - t
        if cached is not None and self._approach(gap, cached):
            self._interval.approach = True
            self._interval.step = self._approach_step(gap, cached)
        if self._interval.step > 0.0:  # an equal-step plan of a recurring gap or an approach
            step = self._interval.step
            landing = step >= gap * (1.0 - 1e-6)
            return step, (t_stop if landing else t + step), landing
        single = False
        if self.adaptive and self.h >= gap * (1.0 - 1e-7):
            single = self._land_in_one(gap, cached)
        if self.adaptive and self._on_ladder(gap) and not single:
            # binary decomposition of the gap: the largest rung that fits, until it lands
            step = self._ladder.floor(min(self.h, gap) * (1.0 + 1e-7))
            landing = step >= gap * (1.0 - 1e-7)
            t_new = t_stop if landing else t + step
        elif self.adaptive:
            landing = self.h >= gap * (1.0 - 1e-6)
            step = gap if landing else (0.5 * gap if 2.0 * self.h > gap else self.h)
            t_new = t_stop if landing else t + _quantize(step)
        else:
            if self._segment_done == self._segment[1]:
                count = max(1, math.ceil(gap / self._fixed_dt * (1.0 - 1e-12)))
                self._segment, self._segment_done = (t, count, gap / count), 0
            start, count, step = self._segment
            landing = self._segment_done + 1 == count
            t_new = t_stop if landing else start + (self._segment_done + 1) * step
        if not t_new > t:
            raise SolverError(
                f"integrate: step {step:.3e} s at t={t!r} s is below the time resolution; "
                "expected dt_min well above the spacing of floats at t"
            )
        return self._key(step), t_new, landing

    def _approach(self, gap: float, cached: Callable[[float], bool]) -> bool:
        """Return whether to cover the rest of the gap with equal steps of at most ``h``.

        Only with the cache crowded, and only when the step ``h`` is a new matrix anyway and
        at most ``_APPROACH_STEPS`` of it reach the stop. Then ceil(gap / h) equal steps need
        that one new matrix, where rungs need it and then one more for the remainder that
        lands (after a climb to the 65.5 s rung, 56.7 s to the stop), or none when a step
        already factored divides the gap (:meth:`_approach_step`). Like the last step of a
        stretched approach to an output point, no step is longer than the controller's own;
        a rejection ends the plan (:meth:`rejects`).
        """
        if not (self.adaptive and self._crowded):
            return False
        if self._interval.step > 0.0 or not self.h < gap * (1.0 - 1e-7):
            return False
        return gap <= _APPROACH_STEPS * self.h * (1.0 + 1e-9) and not cached(self._key(self.h))

    def _approach_step(self, gap: float, cached: Callable[[float], bool]) -> float:
        """Return the equal step of an approach: gap / n with n >= ceil(gap / h).

        n = ceil(gap / h) takes the fewest steps. When its step is not factored, a larger n
        whose step is factored already is taken instead, as long as its extra steps cost
        fewer solves than that new matrix would (steps and factorizations counted as in
        :meth:`_land_in_one`). The stops of a start-up sequence lie on a round grid (5 ms,
        7 ms, 9 ms, 15 ms, ...), so a step held from one gap often divides the next: 6 ms in
        three cached 2 ms steps instead of two new 3 ms steps. Plans of recurring gaps
        (:meth:`_plan_gap`) do not do this: their matrix is factored once and held from
        period to period, so a cached step with more steps would cost more in every period.
        """
        fewest = math.ceil(gap / self.h * (1.0 - 1e-9))
        own = self._key(gap / fewest)
        if cached(own):
            return own
        new_matrix = self._step_cost * fewest + self._factor_cost
        n = fewest + 1
        while self._step_cost * n < new_matrix:
            step = self._key(gap / n)
            if cached(step):
                return step
            n += 1
        return own

    def _key(self, step: float) -> float:
        """Return the step as the formulas use it and the factorization cache knows it."""
        if self._unit is not None:
            multiple = step / self._unit
            k = round(multiple)
            if k >= 1 and abs(multiple - k) <= 1e-6 * multiple:
                # a gap taken as a difference of large times carries rounding (300.03 -
                # 300.025 = 0.0049999999999954525 s): key the matrix by the step on the unit
                # grid, so the same step never gets a second factorization
                step = k * self._unit
        return _quantize(step)

    def _land_in_one(self, gap: float, cached: Callable[[float], bool] | None) -> bool:
        """Return whether to land with one step of the whole gap rather than a sum of rungs.

        Both keep every step within the controller's step h. A gap on the unit grid can be
        covered by rungs (greedy, largest first: ``popcount`` steps with ratio 2), which
        needs no matrix off the ladder but may take many steps, each of a rung that may have
        been evicted; one step of the gap costs one step and, unless cached, one
        factorization. A gap met before (periodic schedules repeat them) always gets its own
        matrix, factored once. Otherwise the cheaper plan is taken, counting a step as
        ``solves_per_step`` solves and a factorization as ``factor_cost`` solves (ties: one
        step). Measured on the 230 k DOF benchmark board, covering the 54.9 s gap before the
        300 s burst by rungs took ten steps of ten different sizes (32.8 s down to 1 ms).
        """
        key = _quantize(gap)
        recurring = key in self._seen_gaps
        self._seen_gaps.add(key)
        if recurring or not self._on_ladder(gap):
            return True
        if cached is None:
            return False
        one = self._key(gap)
        cost_one = self._step_cost + (0.0 if cached(one) else self._factor_cost)
        unit = self._unit if self._unit is not None else gap
        cost_rungs, planned, left = 0.0, set(), gap
        while left > 0.5 * unit and cost_rungs < cost_one:
            rung = self._ladder.floor(min(self.h, left) * (1.0 + 1e-7))
            k = self._key(rung)
            cost_rungs += self._step_cost
            if k not in planned and not cached(k):
                cost_rungs += self._factor_cost
            planned.add(k)
            left -= rung
        return cost_one <= cost_rungs

    def _on_ladder(self, gap: float) -> bool:
        """Return whether ``gap`` is a whole number of ladder units (exact landing by rungs)."""
        if self._unit is None:
            return False
        multiple = gap / self._unit
        return abs(multiple - round(multiple)) <= 1e-7 * max(1.0, multiple) and round(multiple) > 0

    def rejects(self, t: float, dt: float, err: float) -> bool:
        """Return True (and shrink the step) if a step with normalized error err is redone."""
        if not (self.adaptive and err > 1.0):
            return False
        shrink = max(_FAC_MIN, _SAFETY * err ** (-1.0 / 3.0))
        if self._interval.step > 0.0 and not self._interval.approach:
            # the plan of a recurring gap fails: adaptive from here on, and a longer plan next
            record = self._gaps[self._interval.key]
            wanted = math.ceil((self._interval.stop - t) / max(dt * shrink, self._h_floor))
            record.fewest = max(record.fewest, record.count + 1)
            record.count = max(record.count + 1, wanted)
        self._interval.step = 0.0  # an approach that fails is adaptive from here on too
        if dt > self._h_floor * (1.0 + 1e-9):
            self.h = max(self._h_floor, self._ladder.floor(dt * shrink))
            return True
        self.floor_hits += 1  # at the floor: accept, and warn at the end
        if self.floor_hits == 1:
            self.first_floor_time = t
        return False

    def accepted(self, dt: float, err: float) -> None:
        """Set the next step to dt * min(5, max(0.2, 0.9 err^(-1/3))) rounded down to the ladder."""
        if not self.adaptive:
            self._segment_done += 1
            return
        self._interval.accepted += 1
        clipped = dt < self.h * (1.0 - 1e-7)
        grow = _FAC_MAX if err <= 0.0 else _SAFETY * err ** (-1.0 / 3.0)
        grow = min(_FAC_MAX, max(_FAC_MIN, grow))
        proposal = dt * grow
        if self._interval.planned and self._interval.step > 0.0:  # a recurring gap's plan
            self._interval.allowed = min(self._interval.allowed, proposal)
        if clipped and grow >= 1.0:  # a step shortened to land does not shrink the next one
            proposal = max(proposal, self.h)
        h = self._ladder.floor(proposal)
        if self._crowded and h > dt * (1.0 + 1e-9):
            h = max(self._ladder.even_floor(h), self._ladder.floor(dt))
        self.h = min(self._h_cap, max(self._h_floor, h))
        if self._after_jump and not clipped:
            self._learned_restart = self.h  # what the estimate asked for after the last jump
        self._after_jump = False

    def restart(self, guess: Callable[[], float]) -> None:
        """Shrink the next step after a jump in p.

        Uses ``restart_dt`` if set, else the step the error estimate asked for right after the
        previous jump, else the starting-step heuristic ``guess()``.
        """
        if not self.adaptive:
            return
        restart = self._opts.restart_dt or self._learned_restart or guess()
        restart = max(min(restart, self.h), self._opts.dt_min)
        self.h = max(self._h_floor, self._ladder.floor(restart))
        self._after_jump = True
