"""Power-versus-time schedules: board-file power tables in, exact piecewise-linear P(t) out.

Stage 2 of the data flow. ``board.py`` passes the ``[events]`` table to :func:`resolve_events`
and each part's ``power`` entry to :func:`parse_schedule`; the result is a :class:`Schedule`, a
right-continuous piecewise-linear P(t) in watts whose knots are the exact times at which P or
dP/dt may jump. Components (steps, ramps, pulses, trains, repeats) superpose: their powers add.
The stepper lands on :meth:`Schedule.breakpoints` while integrating the load f(t) = Σ P_i(t) b_i
of C T' + K T = f(t); between breakpoints P is linear, so the integral of P over a step is exact
with the trapezoidal rule.
"""

from __future__ import annotations

import bisect
import difflib
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal, NoReturn

import numpy as np
import numpy.typing as npt

from boardheat.errors import BoardFileError

FloatArray = npt.NDArray[np.float64]

MAX_KNOTS = 10_000_000
"""Most knots one train or repeat may create: a memory guard (three float arrays per schedule)."""

_COMPONENTS = ("steps", "ramps", "pulses", "trains", "repeat")


@dataclass(frozen=True, eq=False)
class Schedule:
    """Power versus time of one heat source: a sum of linear pieces, exact breakpoints.

    P(t) is linear between consecutive knots and may jump at a knot. Before the first knot it is
    ``left[0]``, after the last one ``right[-1]``. At a knot P takes the value from the right
    (P is right-continuous); ``left`` keeps the limit from below. The arrays are read-only copies.

    Parameters
    ----------
    knots : (k,) float ndarray, seconds
        Strictly increasing, finite.
    left : (k,) float ndarray, watts
        Limit of P from below at each knot.
    right : (k,) float ndarray, watts
        Value of P at each knot, equal to the limit from above.

    Examples
    --------
    A ramp from 0 W at 1 s to 4 W at 3 s that then switches off:

    >>> s = Schedule(np.array([1.0, 3.0]), np.array([0.0, 4.0]), np.array([0.0, 0.0]))
    >>> s.value([0.5, 2.0, 3.0]).tolist(), float(s.value(3.0, side="left"))
    ([0.0, 2.0, 0.0], 4.0)
    >>> s.energy(0.0, 10.0), s.breakpoints(10.0).tolist()
    (4.0, [1.0, 3.0])
    """

    knots: FloatArray
    left: FloatArray
    right: FloatArray
    _span: FloatArray = field(init=False, repr=False)  # (k-1,) s, knot spacing
    _rise: FloatArray = field(init=False, repr=False)  # (k-1,) W, change of P over each piece
    _lists: tuple[list[float], ...] | None = field(
        init=False, repr=False, default=None, compare=False
    )  # knots, left, right, span, rise as Python lists, built on first scalar use

    def __post_init__(self) -> None:
        for name in ("knots", "left", "right"):
            arr = np.array(getattr(self, name), dtype=np.float64)  # a copy the caller cannot alter
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        k, shapes = self.knots, {self.knots.shape, self.left.shape, self.right.shape}
        span = np.diff(k)
        if k.ndim != 1 or k.size == 0 or len(shapes) != 1:
            raise ValueError(f"Schedule: found shapes {shapes}, expected one shape (k,), k >= 1")
        if not all(np.isfinite(a).all() for a in (k, self.left, self.right)) or np.any(span <= 0):
            raise ValueError("Schedule: expected finite values and strictly increasing knots")
        rise = self.left[1:] - self.right[:-1]
        for name, arr in (("_span", span), ("_rise", rise)):
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Schedule):
            return NotImplemented
        mine, theirs = (self.knots, self.left, self.right), (other.knots, other.left, other.right)
        return all(np.array_equal(a, b) for a, b in zip(mine, theirs, strict=True))

    def __hash__(self) -> int:
        return hash((self.knots.tobytes(), self.left.tobytes(), self.right.tobytes()))

    def value(self, t: float | FloatArray, side: Literal["left", "right"] = "right") -> FloatArray:
        """Return P at the times ``t``.

        Parameters
        ----------
        t : float or (...) float ndarray, seconds
        side : {"right", "left"}
            At a discontinuity, "right" gives the limit from above (the value P takes there) and
            "left" the limit from below. Elsewhere both agree.

        Returns
        -------
        (...) float ndarray, watts
            Same shape as ``t`` (0-d for a scalar).
        """
        if side not in ("left", "right"):
            raise ValueError(f"Schedule.value side: found {side!r}, expected 'left' or 'right'")
        if isinstance(t, float | int) and not math.isnan(t):
            return np.asarray(self._scalar_value(float(t), side))
        tt = np.asarray(t, dtype=np.float64)
        if np.isnan(tt).any():
            raise ValueError("Schedule.value t: found NaN, expected times in seconds")
        k = self.knots
        i = np.searchsorted(k, tt, side="right") - 1  # k[i] <= t < k[i+1]
        if k.size == 1:
            out = np.where(i < 0, self.left[0], self.right[0])
        else:
            seg = np.clip(i, 0, k.size - 2)
            with np.errstate(over="ignore"):  # t = ±inf or huge: w is clipped to [0, 1] anyway
                w = np.clip((tt - k[seg]) / self._span[seg], 0.0, 1.0)
            inner = self.right[seg] + self._rise[seg] * w  # exact at w = 0 and on flat pieces
            out = np.where(i < 0, self.left[0], np.where(i >= k.size - 1, self.right[-1], inner))
        if side == "left":  # the two sides differ only exactly at knots
            j = np.minimum(np.searchsorted(k, tt, side="left"), k.size - 1)
            out = np.where(k[j] == tt, self.left[j], out)
        return np.asarray(out, dtype=np.float64)

    def _scalar_value(self, t: float, side: str) -> float:
        """:meth:`value` for one time, in plain floats (the stepper asks once per stage).

        The same operations in the same order as the array path, so the result is bitwise
        equal to it; about 20 times quicker than numpy on a 0-d array.
        """
        lists = self._lists
        if lists is None:
            lists = (self.knots.tolist(), self.left.tolist(), self.right.tolist())
            lists += (self._span.tolist(), self._rise.tolist())
            object.__setattr__(self, "_lists", lists)
        knots, left, right, span, rise = lists
        i = bisect.bisect_right(knots, t) - 1
        if i < 0:
            out = left[0]
        elif i >= len(knots) - 1:
            out = right[-1]
        else:
            w = min(max((t - knots[i]) / span[i], 0.0), 1.0)
            out = right[i] + rise[i] * w
        if side == "left":
            j = min(bisect.bisect_left(knots, t), len(knots) - 1)
            if knots[j] == t:
                out = left[j]
        return out

    def breakpoints(self, t_end: float) -> FloatArray:
        """Return the knots in (0, t_end] where P or dP/dt is discontinuous.

        t = 0 is excluded: every run starts there. Knots where P and its slope are both
        continuous (two abutting pieces that line up) are left out.

        Returns
        -------
        (m,) float ndarray, seconds
            Sorted, unique, each bitwise equal to a knot.
        """
        with np.errstate(over="ignore"):  # an overflowing slope is still a slope change
            slope = self._rise / self._span
        before = np.concatenate(([0.0], slope))
        after = np.concatenate((slope, [0.0]))
        k = self.knots
        mask = ((self.left != self.right) | (before != after)) & (k > 0.0) & (k <= t_end)
        return np.asarray(k[mask], dtype=np.float64)

    def _window(self, t0: float, t1: float) -> tuple[FloatArray, FloatArray, FloatArray]:
        """Return the P(t) limits at both ends of every linear piece of [t0, t1], watts."""
        if not (math.isfinite(t0) and math.isfinite(t1) and t1 >= t0):
            raise ValueError(f"Schedule window: found [{t0!r}, {t1!r}], expected finite t0 <= t1")
        k = self.knots
        inner = k[np.searchsorted(k, t0, side="right") : np.searchsorted(k, t1, side="left")]
        x = np.concatenate(([t0], inner, [t1]))
        return x, self.value(x[:-1], "right"), self.value(x[1:], "left")

    def energy(self, t0: float, t1: float) -> float:
        """Return the exact integral of P over [t0, t1], joules (trapezoids on linear pieces)."""
        x, a, b = self._window(t0, t1)
        return float(0.5 * np.dot(a + b, np.diff(x)))

    def energy_until(self, t: float | FloatArray) -> FloatArray:
        """Return the integral of P over [0, t] for every t >= 0, joules.

        :meth:`energy` for many end times at once (one pass over the knots, not one window per
        time): the mean power of each step of a time grid is ``np.diff(energy_until(grid)) /
        np.diff(grid)``, exact, for pulses shorter than a step as well.

        >>> s = Schedule(np.array([1.0, 3.0]), np.array([0.0, 4.0]), np.array([0.0, 0.0]))
        >>> s.energy_until(np.array([0.0, 2.0, 3.0, 9.0])).tolist()
        [0.0, 1.0, 4.0, 4.0]
        """
        tt = np.asarray(t, dtype=np.float64)
        if not (np.isfinite(tt).all() and (tt >= 0.0).all()):
            raise ValueError("Schedule.energy_until t: expected finite times >= 0 s")
        k = self.knots
        # E(t) = integral of P from k[0] to t (negative before k[0], where P = left[0])
        at_knots = np.concatenate(
            ([0.0], np.cumsum(0.5 * (self.right[:-1] + self.left[1:]) * self._span))
        )

        def from_first_knot(x: FloatArray) -> FloatArray:
            i = np.searchsorted(k, x, side="right") - 1  # k[i] <= x < k[i+1]
            seg = np.clip(i, 0, k.size - 1)
            p_x = self.value(x, side="left")  # P just before x: the end of x's own piece
            inner = at_knots[seg] + 0.5 * (self.right[seg] + p_x) * (x - k[seg])
            return np.where(i < 0, (x - k[0]) * self.left[0], inner)

        return np.asarray(from_first_knot(tt) - from_first_knot(np.zeros(1))[0], dtype=np.float64)

    def mean(self, t0: float, t1: float) -> float:
        """Return the mean power over [t0, t1], watts; needs t1 > t0."""
        if not t1 > t0:
            raise ValueError(f"Schedule.mean: found [{t0!r}, {t1!r}], expected t1 > t0")
        return self.energy(t0, t1) / (t1 - t0)

    def peak(self, t0: float, t1: float) -> float:
        """Return the supremum of P over (t0, t1), watts; P(t0) when t1 == t0.

        A pulse that starts exactly at t1 is outside the window; one that ends at t1 is inside.
        """
        x, a, b = self._window(t0, t1)
        if t1 == t0:
            return float(a[0])
        return float(max(a.max(), b.max()))

    def scaled(self, factor: float) -> Schedule:
        """Return this schedule with every power multiplied by ``factor`` (finite, >= 0).

        >>> constant(2.0).scaled(1.5).peak(0.0, 1.0)
        3.0
        """
        if not (math.isfinite(factor) and factor >= 0.0):
            raise ValueError(
                f"Schedule.scaled: found factor {factor!r}, expected a finite value >= 0"
            )
        return Schedule(self.knots, self.left * factor, self.right * factor)

    @property
    def is_constant(self) -> bool:
        """True when P takes one value for all t >= 0 (the run's time span)."""
        # No jump or kink after t = 0 and a flat tail after the last knot: P is flat on [0, inf).
        return self.breakpoints(math.inf).size == 0

    def describe(self, t_end: float) -> str:
        """Return one line for reports: peak and mean over [0, t_end], number of breakpoints.

        >>> constant(2.5).describe(10.0)
        'peak 2.5 W, mean 2.5 W over [0, 10] s, 0 breakpoints'
        """
        n = self.breakpoints(t_end).size
        return (
            f"peak {self.peak(0.0, t_end):.4g} W, mean {self.mean(0.0, t_end):.4g} W "
            f"over [0, {t_end:.4g}] s, {n} breakpoint{'' if n == 1 else 's'}"
        )


def constant(power: float) -> Schedule:
    """Return the schedule P(t) = ``power`` watts for all t.

    >>> constant(0.75).is_constant, constant(0.75).breakpoints(1.0).size
    (True, 0)
    """
    if not (math.isfinite(power) and power >= 0.0):
        raise ValueError(f"constant: found power {power!r}, expected a finite value >= 0 W")
    return Schedule(np.zeros(1), np.full(1, power), np.full(1, power))


def _from_knots(knots: FloatArray, left: FloatArray, right: FloatArray) -> Schedule:
    """Build a schedule from non-decreasing knots, merging knots that coincide.

    A run of equal knots keeps the limit from below of its first entry and the value from the
    right of its last one, which is the chronological meaning of the input.
    """
    first = np.flatnonzero(np.concatenate(([True], knots[1:] != knots[:-1])))
    last = np.concatenate((first[1:] - 1, [knots.size - 1]))
    return Schedule(knots[first], left[first], right[last])


def _superpose(parts: Sequence[Schedule]) -> Schedule:
    """Return the sum of ``parts`` on the union of their knots."""
    if len(parts) == 1:
        return parts[0]
    grid = np.unique(np.concatenate([p.knots for p in parts]))
    left = np.zeros_like(grid)
    right = np.zeros_like(grid)
    for p in parts:  # a loop over components; each works only on the knots of its support
        lo = int(np.searchsorted(grid, p.knots[0], side="left"))
        hi = int(np.searchsorted(grid, p.knots[-1], side="right"))
        if p.left[0] != 0.0:
            left[:lo] += p.left[0]
            right[:lo] += p.left[0]
        if p.right[-1] != 0.0:
            left[hi:] += p.right[-1]
            right[hi:] += p.right[-1]
        left[lo:hi] += p.value(grid[lo:hi], "left")
        right[lo:hi] += p.value(grid[lo:hi], "right")
    return Schedule(grid, left, right)


def _fail(path: str, found: str, expected: str) -> NoReturn:
    """Raise the board-file error: where, what was found, what was expected."""
    raise BoardFileError(f"{path}: found {found}, expected {expected}")


def _show(x: Any) -> str:
    """Return a short, TOML-flavoured rendering of a value for messages."""
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, int | float | str):
        return repr(x)
    if isinstance(x, Mapping):
        return "a table"
    if isinstance(x, list | tuple):
        text = repr(list(x))
        return text if len(text) <= 60 else text[:56] + " ...]"
    return f"a value of type {type(x).__name__}"


def _closest(name: str, choices: Sequence[str]) -> str:
    match = difflib.get_close_matches(name, choices, n=1)
    return f" (closest: {match[0]!r})" if match else ""


def _table(
    x: Any, path: str, allowed: Sequence[str], required: Sequence[str] = ()
) -> Mapping[str, Any]:
    """Check that ``x`` is a table with only ``allowed`` keys and all ``required`` ones."""
    if not isinstance(x, Mapping):
        _fail(path, _show(x), f"a table with the keys {', '.join(allowed)}")
    for key in x:
        if key not in allowed:
            choices = f"one of {', '.join(allowed)}{_closest(str(key), allowed)}"
            _fail(f"{path}.{key}", "an unknown key", choices)
    for key in required:
        if key not in x:
            _fail(path, f"no {key!r}", f"the keys {', '.join(required)}")
    return x


def _array(x: Any, path: str) -> list[Any]:
    if not isinstance(x, list | tuple):
        _fail(path, _show(x), "an array")
    if not x:
        _fail(path, "an empty array", "at least one entry")
    return list(x)


def _number(
    x: Any, path: str, low: float = -math.inf, strict: bool = False, expected: str = ""
) -> float:
    """Return ``x`` as a finite float that is >= ``low`` (> ``low`` when ``strict``)."""
    if isinstance(x, bool) or not isinstance(x, int | float) or not math.isfinite(x):
        _fail(path, _show(x), "a finite number")
    if x < low or (strict and x == low):
        _fail(path, _show(x), expected)
    return float(x)


def _power(x: Any, path: str) -> float:
    return _number(x, path, 0.0, expected="a power >= 0 W")


def _duration(x: Any, path: str) -> float:
    return _number(x, path, 0.0, strict=True, expected="a duration > 0 s")


def _count(x: Any, path: str, limit: int) -> int:
    if isinstance(x, bool) or not isinstance(x, int):
        _fail(path, _show(x), "a whole number")
    if not 1 <= x <= limit:
        _fail(path, _show(x), f"a whole number from 1 to {limit}")
    return x


def _event_choices(name: Any, events: Mapping[str, float]) -> str:
    known = list(events)
    if not known:
        return "the name of an event defined under [events] (none are defined)"
    listed = ", ".join(repr(e) for e in known)
    return f"one of the events {listed}{_closest(str(name), known)}"


@dataclass(frozen=True)
class _Frame:
    """Time origin of a schedule table: ``shift`` seconds after t = 0, set by ``event``."""

    shift: float
    event: str | None

    def time(self, x: Any, path: str) -> float:
        """Return a local time in seconds whose absolute time shift + t is >= 0."""
        t = _number(x, path)
        if self.shift + t < 0.0:
            why = f" (event {self.event!r} is at {self.shift!r} s; t >= 0 after shifting)"
            _fail(path, _show(x), f"a time >= {0.0 - self.shift!r} s{why if self.event else ''}")
        return t


def _parse_steps(x: Any, path: str, frame: _Frame) -> list[Schedule]:
    rows = _array(x, path)
    times = np.empty(len(rows))
    powers = np.empty(len(rows))
    for i, row in enumerate(rows):  # a loop over file entries, not over time samples
        where = f"{path}[{i}]"
        if not isinstance(row, list | tuple) or len(row) != 2:
            _fail(where, _show(row), "a pair [t_s, p_w]")
        times[i] = frame.time(row[0], f"{where}[0]")
        if i and times[i] <= times[i - 1]:
            _fail(
                f"{where}[0]",
                _show(row[0]),
                f"a time > the previous step's ({float(times[i - 1])!r})",
            )
        powers[i] = _power(row[1], f"{where}[1]")
    return [_from_knots(times, np.concatenate(([0.0], powers[:-1])), powers)]


def _parse_ramp(x: Any, path: str, frame: _Frame) -> Schedule:
    keys = ("start_s", "end_s", "from_w", "to_w")
    table = _table(x, path, keys, keys)
    start = frame.time(table["start_s"], f"{path}.start_s")
    end = _number(table["end_s"], f"{path}.end_s", start, True, f"a value > start_s ({start!r})")
    p0 = _power(table["from_w"], f"{path}.from_w")
    p1 = _power(table["to_w"], f"{path}.to_w")
    return _from_knots(np.array([start, end]), np.array([0.0, p1]), np.array([p0, 0.0]))


def _parse_pulse(x: Any, path: str, frame: _Frame) -> Schedule:
    keys = ("start_s", "width_s", "power_w")
    table = _table(x, path, keys, keys)
    start = frame.time(table["start_s"], f"{path}.start_s")
    width = _duration(table["width_s"], f"{path}.width_s")
    p = _power(table["power_w"], f"{path}.power_w")
    return _from_knots(np.array([start, start + width]), np.array([0.0, p]), np.array([p, 0.0]))


def _parse_train(x: Any, path: str, frame: _Frame) -> Schedule:
    keys = ("start_s", "period_s", "on_s", "on_w", "off_w", "count", "end_s")
    table = _table(x, path, keys, keys[:4])
    start = frame.time(table["start_s"], f"{path}.start_s")
    period = _duration(table["period_s"], f"{path}.period_s")
    on = _duration(table["on_s"], f"{path}.on_s")
    if on > period:
        _fail(f"{path}.on_s", _show(table["on_s"]), f"a value <= period_s ({period!r})")
    on_w = _power(table["on_w"], f"{path}.on_w")
    off_w = _power(table.get("off_w", 0.0), f"{path}.off_w")
    if ("count" in table) == ("end_s" in table):
        found = "both 'count' and 'end_s'" if "count" in table else "neither 'count' nor 'end_s'"
        _fail(path, found, "exactly one of them")
    limit = MAX_KNOTS // 2
    if "count" in table:
        n = _count(table["count"], f"{path}.count", limit)
        rise = start + period * np.arange(n, dtype=np.float64)  # (n,) s
        end = float(rise[-1] + on)  # the train ends when its last pulse does
    else:
        end = _number(
            table["end_s"], f"{path}.end_s", start, True, f"a value > start_s ({start!r})"
        )
        if end - start > period * (limit - 1):
            _fail(f"{path}.end_s", _show(table["end_s"]), f"at most {limit} pulses of period_s")
        n_max = math.ceil((end - start) / period) + 1
        rise = start + period * np.arange(n_max, dtype=np.float64)
        rise = rise[rise < end]
    if on == period:  # abutting pulses: one constant piece, no rounding slivers between pulses
        return _from_knots(np.array([start, end]), np.array([0.0, on_w]), np.array([on_w, 0.0]))
    # Keep the knots ordered when on_s is within rounding of period_s; cut the last pulse at end.
    fall = np.minimum(rise + on, np.append(rise[1:], end))
    n = rise.size
    knots = np.append(np.column_stack((rise, fall)).ravel(), end)  # (2n+1,) s
    left = np.empty(2 * n + 1)
    left[0::2], left[1::2], left[0] = off_w, on_w, 0.0
    right = np.empty(2 * n + 1)
    right[0::2], right[1::2], right[-1] = on_w, off_w, 0.0
    return _from_knots(knots, left, right)


def _parse_repeat(x: Any, path: str, frame: _Frame) -> Schedule:
    keys = ("start_s", "period_s", "count", "pattern")
    table = _table(x, path, keys, keys)
    start = frame.time(table["start_s"], f"{path}.start_s")
    period = _duration(table["period_s"], f"{path}.period_s")
    count = _count(table["count"], f"{path}.count", MAX_KNOTS)
    pattern = _parse_table(table["pattern"], f"{path}.pattern", _Frame(0.0, None), nested=True)
    last = float(pattern.knots[-1])
    if last > period:
        _fail(f"{path}.pattern", f"one lasting until {last!r} s", f"it within [0, {period!r}) s")
    # One repetition: the pattern cut off at period_s (a last step holds until then).
    q, ql, qr = pattern.knots, pattern.left, pattern.right.copy()
    if last < period:
        q, ql, qr = np.append(q, period), np.append(ql, qr[-1]), np.append(qr, 0.0)
    qr[-1] = 0.0
    if count * q.size > MAX_KNOTS:
        _fail(f"{path}.count", _show(count), f"at most {MAX_KNOTS // q.size} for this pattern")
    origin = start + period * np.arange(count, dtype=np.float64)  # (count,) s
    grid = origin[:, None] + q[None, :]  # (count, m) s
    grid[:-1] = np.minimum(grid[:-1], origin[1:, None])  # rounding may not overlap the next one
    return _from_knots(grid.ravel(), np.tile(ql, count), np.tile(qr, count))


def _parse_table(x: Any, path: str, frame: _Frame, *, nested: bool) -> Schedule:
    """Return the sum of a table's components, in the table's own (local) time."""
    allowed = _COMPONENTS[:-1] if nested else ("relative_to", *_COMPONENTS)
    table = _table(x, path, allowed)
    parts = _parse_steps(table["steps"], f"{path}.steps", frame) if "steps" in table else []
    builders = (("ramps", _parse_ramp), ("pulses", _parse_pulse), ("trains", _parse_train))
    for key, build in (*builders, ("repeat", _parse_repeat)):
        if key in table:
            entries = _array(table[key], f"{path}.{key}")
            parts += [build(e, f"{path}.{key}[{i}]", frame) for i, e in enumerate(entries)]
    if not parts:
        kinds = ", ".join(k for k in allowed if k in _COMPONENTS)
        _fail(path, "no power component", f"at least one of {kinds}")
    return _superpose(parts)


def resolve_events(spec: Mapping[str, Any], where: str) -> dict[str, float]:
    """Return the absolute time of every event of a power-up sequence, seconds.

    Each event is ``{ at_s = t }`` or ``{ after = "other", delay_s = d }`` (``delay_s`` defaults
    to 0 and may be negative as long as the event stays at t >= 0). A chained time is
    ``time[other] + delay_s``, evaluated in floating point exactly in that order.

    >>> resolve_events({"rail": {"at_s": 0.001}, "reset": {"after": "rail", "delay_s": 0.004}}, "b")
    {'rail': 0.001, 'reset': 0.005}
    """
    if not isinstance(spec, Mapping):
        _fail(where, _show(spec), "a table of events")
    at: dict[str, float] = {}
    parent: dict[str, str] = {}
    delay: dict[str, float] = {}
    for name, entry in spec.items():
        path = f"{where}.{name}"
        table = _table(entry, path, ("at_s", "after", "delay_s"))
        if ("at_s" in table) == ("after" in table):
            found = "both 'at_s' and 'after'" if "at_s" in table else "neither 'at_s' nor 'after'"
            _fail(path, found, "exactly one of them")
        if "at_s" in table:
            if "delay_s" in table:
                _fail(f"{path}.delay_s", _show(table["delay_s"]), "delay_s only with 'after'")
            at[name] = _number(table["at_s"], f"{path}.at_s", 0.0, expected="a time >= 0 s")
        else:
            if not isinstance(table["after"], str):
                _fail(f"{path}.after", _show(table["after"]), "the name of another event")
            parent[name] = table["after"]
            delay[name] = _number(table.get("delay_s", 0.0), f"{path}.delay_s")
    times = dict(at)
    for name in spec:
        chain: dict[str, int] = {}  # events waiting for their parent, in the order met
        cur = name
        while cur not in times:
            if cur in chain:
                cycle = " -> ".join([*list(chain)[chain[cur] :], cur])
                _fail(
                    f"{where}.{cur}.after", f"a cycle {cycle}", "a chain ending at an 'at_s' event"
                )
            chain[cur] = len(chain)
            if parent[cur] not in spec:
                _fail(f"{where}.{cur}.after", _show(parent[cur]), _event_choices(parent[cur], spec))
            cur = parent[cur]
        for child in reversed(chain):
            times[child] = times[parent[child]] + delay[child]
            if times[child] < 0.0:
                at_t = f"a delay keeping the event at t >= 0 s (it would be at {times[child]!r} s)"
                _fail(f"{where}.{child}.delay_s", _show(delay[child]), at_t)
    return {name: times[name] for name in spec}


def parse_schedule(spec: Any, events: Mapping[str, float], where: str) -> Schedule:
    """Return the schedule of one part's ``power`` entry, in absolute time.

    ``spec`` is a number (constant watts, >= 0) or a table of components whose powers add:
    ``steps`` ``[[t_s, p_w], ...]`` (0 W before the first time, the last power holds forever),
    ``ramps`` ``{start_s, end_s, from_w, to_w}`` (linear over [start, end), 0 W outside),
    ``pulses`` ``{start_s, width_s, power_w}``, ``trains`` ``{start_s, period_s, on_s, on_w,
    off_w = 0, count | end_s}`` and ``repeat`` ``{start_s, period_s, count, pattern}``.

    A train's pulse k rises at ``start_s + k*period_s`` and falls ``on_s`` later; ``off_w``
    applies between pulses. With ``count`` the train ends when its last pulse falls; with
    ``end_s`` it covers [start_s, end_s) and a pulse that reaches ``end_s`` is cut there. A
    repeat's ``pattern`` (steps, ramps, pulses, trains; all within [0, period_s)) is placed at
    ``start_s + k*period_s`` and cut off at each period's end. With ``relative_to = "event"``
    every knot is ``events[event] + local_time`` (local times may be negative as long as the
    sum is not), so breakpoints equal those sums bitwise.

    Parameters
    ----------
    spec : float or table
        The parsed TOML value.
    events : mapping of event name to absolute time, seconds
        As returned by :func:`resolve_events`.
    where : str
        Field path of ``spec`` for messages, e.g. ``"board.toml: part[U3].power"``.

    Raises
    ------
    BoardFileError
        With the field path, what was found and what was expected.

    Examples
    --------
    >>> s = parse_schedule({"relative_to": "rail", "pulses": [{"start_s": 0.5, "width_s": 0.25,
    ...                     "power_w": 2.0}]}, {"rail": 1.0}, "board.toml: part[Q1].power")
    >>> s.breakpoints(10.0).tolist(), s.energy(0.0, 10.0)
    ([1.5, 1.75], 0.5)
    """
    if isinstance(spec, int | float) and not isinstance(spec, bool):
        return constant(_power(spec, where))
    if not isinstance(spec, Mapping):
        _fail(where, _show(spec), "a power in watts or a schedule table")
    frame = _Frame(0.0, None)
    if "relative_to" in spec:
        event = spec["relative_to"]
        if not isinstance(event, str) or event not in events:
            _fail(f"{where}.relative_to", _show(event), _event_choices(event, events))
        frame = _Frame(float(events[event]), event)
    local = _parse_table(spec, where, frame, nested=False)
    if frame.shift == 0.0:
        return local
    return _from_knots(frame.shift + local.knots, local.left, local.right)
