"""Tests of boardheat.schedules: values, exact integrals, breakpoints, events and file errors.

Reference values are worked out by hand in the comments beside each check; where equality is
asserted the inputs are exact binary fractions or the same float expression as documented, and
every other check states its tolerance. Independent checks use scipy.integrate (quad,
trapezoid) and a naive per-component evaluator written here from the definitions.
"""

from __future__ import annotations

import math
import time
from typing import Any

import numpy as np
import pytest
from scipy import integrate

from boardheat.errors import BoardFileError
from boardheat.schedules import Schedule, constant, parse_schedule, resolve_events

WHERE = "board.toml: part[U3].power"


def parse(spec: Any, events: dict[str, float] | None = None) -> Schedule:
    return parse_schedule(spec, events or {}, WHERE)


def values(s: Schedule, t: list[float], side: str = "right") -> list[float]:
    return s.value(np.array(t), side=side).tolist()  # type: ignore[arg-type]


def bits(x: np.ndarray) -> np.ndarray:
    """Return the IEEE-754 bit patterns, for bitwise float comparison."""
    return np.ascontiguousarray(x, dtype=np.float64).view(np.uint64)


# --- values at hand-computed times -----------------------------------------------------------


def test_steps_values_and_limits():
    s = parse({"steps": [[0.0, 1.0], [0.5, 3.0], [2.0, 0.25]]})
    # hand: 1 W on [0, 0.5), 3 W on [0.5, 2), 0.25 W from 2 s on; 0 W before t = 0
    assert values(s, [-1.0, 0.0, 0.25, 0.5, 1.9, 2.0, 100.0]) == [0, 1, 1, 3, 3, 0.25, 0.25]
    assert values(s, [0.0, 0.5, 2.0], side="left") == [0.0, 1.0, 3.0]
    assert s.energy(0.0, 3.0) == 0.5 * 1 + 1.5 * 3 + 1.0 * 0.25  # hand: 5.25 J
    assert s.breakpoints(10.0).tolist() == [0.5, 2.0]  # t = 0 is excluded by design


def test_steps_start_late_are_zero_before():
    s = parse({"steps": [[1.0, 2.0]]})
    assert values(s, [0.0, 0.5, 1.0, 7.0]) == [0.0, 0.0, 2.0, 2.0]
    assert float(s.value(1.0, side="left")) == 0.0


def test_ramp_values_and_limits():
    s = parse({"ramps": [{"start_s": 1.0, "end_s": 3.0, "from_w": 1.0, "to_w": 5.0}]})
    # hand: P = 1 + 2 (t - 1) on [1, 3), 0 elsewhere
    assert values(s, [0.5, 1.0, 2.0, 2.5, 3.0, 4.0]) == [0.0, 1.0, 3.0, 4.0, 0.0, 0.0]
    assert values(s, [1.0, 3.0], side="left") == [0.0, 5.0]
    assert s.energy(0.0, 5.0) == (1.0 + 5.0) / 2 * 2.0  # hand: trapezoid area 6 J
    assert s.breakpoints(10.0).tolist() == [1.0, 3.0]


def test_overlapping_pulses_add():
    s = parse(
        {
            "pulses": [
                {"start_s": 1.0, "width_s": 2.0, "power_w": 1.0},
                {"start_s": 2.0, "width_s": 2.0, "power_w": 0.5},
            ]
        }
    )
    assert values(s, [0.5, 1.5, 2.0, 3.0, 3.5, 4.0]) == [0.0, 1.0, 1.5, 0.5, 0.5, 0.0]
    assert values(s, [1.0, 2.0, 3.0, 4.0], side="left") == [0.0, 1.0, 1.5, 0.5]
    assert s.energy(0.0, 10.0) == 2.0 * 1.0 + 2.0 * 0.5  # hand: 3 J
    assert s.breakpoints(10.0).tolist() == [1.0, 2.0, 3.0, 4.0]


def test_train_with_count_values_and_energy():
    spec = {"start_s": 0.5, "period_s": 1.0, "on_s": 0.25, "on_w": 4.0, "off_w": 1.0, "count": 3}
    s = parse({"trains": [spec]})
    # hand: pulses on [0.5, 0.75), [1.5, 1.75), [2.5, 2.75); 1 W between them; 0 W after 2.75
    t = [0.4, 0.5, 0.6, 0.75, 1.0, 1.5, 2.6, 2.75, 3.0]
    assert values(s, t) == [0.0, 4.0, 4.0, 1.0, 1.0, 4.0, 4.0, 0.0, 0.0]
    assert values(s, [0.5, 0.75, 1.5, 2.75], side="left") == [0.0, 4.0, 1.0, 4.0]
    # analytic: count*on_s*on_w + (count-1)*(period_s-on_s)*off_w = 3 + 1.5 J
    assert s.energy(0.0, 5.0) == 3 * 0.25 * 4.0 + 2 * 0.75 * 1.0
    assert s.breakpoints(5.0).tolist() == [0.5, 0.75, 1.5, 1.75, 2.5, 2.75]


def test_train_with_end_cuts_last_pulse():
    base = {"start_s": 0.0, "period_s": 1.0, "on_s": 0.5, "on_w": 2.0, "off_w": 0.5}
    cut = parse({"trains": [{**base, "end_s": 2.25}]})
    # hand: third pulse starts at 2 s and is cut at end_s = 2.25 s
    assert values(cut, [2.1, 2.25, 2.5]) == [2.0, 0.0, 0.0]
    assert float(cut.value(2.25, side="left")) == 2.0
    assert cut.energy(0.0, 5.0) == (0.5 + 0.5 + 0.25) * 2.0 + 2 * 0.5 * 0.5  # hand: 3 J
    tail = parse({"trains": [{**base, "end_s": 2.75}]})
    # hand: off_w holds from the last fall (2.5 s) until end_s
    assert values(tail, [2.6, 2.75]) == [0.5, 0.0]
    assert tail.energy(0.0, 5.0) == 3 * 0.5 * 2.0 + (0.5 + 0.5 + 0.25) * 0.5  # 3.625 J


def test_train_with_on_equal_period_is_constant_while_on():
    s = parse(
        {"trains": [{"start_s": 1.0, "period_s": 0.1, "on_s": 0.1, "on_w": 2.0, "count": 10}]}
    )
    assert s.breakpoints(10.0).size == 2  # switch-on and switch-off only, no slivers
    t = np.linspace(1.0, 1.95, 97)
    assert np.all(s.value(t) == 2.0)
    # analytic 2 W x 1 s; tolerance: the end is the rounded sum 1 + 9*0.1 + 0.1 (a few ulp)
    assert s.energy(0.0, 3.0) == pytest.approx(2.0, rel=1e-14)


def test_repeat_of_steps_and_pulse():
    pattern = {
        "steps": [[0.0, 3.0], [0.25, 1.0]],
        "pulses": [{"start_s": 0.5, "width_s": 0.125, "power_w": 2.0}],
    }
    s = parse({"repeat": [{"start_s": 1.0, "period_s": 1.0, "count": 2, "pattern": pattern}]})
    # hand: each second from 1 s: 3 W for 0.25 s, then 1 W, plus 2 W on [0.5, 0.625)
    t = [0.5, 1.1, 1.3, 1.5, 1.7, 2.0, 2.3, 3.0, 3.5]
    assert values(s, t) == [0.0, 3.0, 1.0, 3.0, 1.0, 3.0, 1.0, 0.0, 0.0]
    assert values(s, [2.0, 3.0], side="left") == [1.0, 1.0]
    assert s.energy(0.0, 4.0) == 2 * (0.25 * 3.0 + 0.75 * 1.0 + 0.125 * 2.0)  # 3.5 J


def test_repeat_of_train_energy_is_analytic():
    train = {"start_s": 0.0, "period_s": 0.01, "on_s": 0.005, "on_w": 10.0, "count": 4}
    s = parse(
        {
            "repeat": [
                {"start_s": 0.0, "period_s": 1.0, "count": 1000, "pattern": {"trains": [train]}}
            ]
        }
    )
    # analytic: 1000 repetitions x 4 pulses x 5 ms x 10 W = 200 J; tolerance: rounding of
    # the shifted knot times only (relative 1e-9)
    assert s.energy(0.0, 2000.0) == pytest.approx(200.0, rel=1e-9)
    assert s.breakpoints(2000.0).size == 1000 * 8 - 1  # the first rise is at t = 0: excluded


def test_components_superpose():
    parts = {
        "steps": [[0.5, 1.0]],
        "ramps": [{"start_s": 0.0, "end_s": 2.0, "from_w": 0.0, "to_w": 2.0}],
        "pulses": [{"start_s": 1.0, "width_s": 0.25, "power_w": 4.0}],
    }
    total = parse(parts)
    singles = [parse({key: value}) for key, value in parts.items()]
    t = np.linspace(-0.5, 3.0, 1001)
    expected = sum(p.value(t) for p in singles)
    np.testing.assert_allclose(total.value(t), expected, rtol=0, atol=1e-15)
    # hand: at 1.125 s: step 1 W + ramp 1.125 W + pulse 4 W
    assert float(total.value(1.125)) == 6.125
    assert total.energy(0.0, 3.0) == pytest.approx(
        sum(p.energy(0.0, 3.0) for p in singles), rel=1e-15
    )


def test_number_is_constant_power():
    s = parse(1.5)
    assert s.is_constant
    assert values(s, [-1.0, 0.0, 1e6]) == [1.5, 1.5, 1.5]
    assert s.energy(2.0, 4.0) == 3.0
    assert parse({"steps": [[0.0, 2.0], [1.0, 2.0]]}).is_constant  # 2 W for all t >= 0
    assert not parse({"steps": [[0.0, 2.0], [1.0, 3.0]]}).is_constant


# --- exact integrals against independent integrators -----------------------------------------


def test_energy_matches_scipy_quad_on_smooth_segment():
    s = parse(
        {
            "ramps": [{"start_s": 0.2, "end_s": 0.7, "from_w": 1.0, "to_w": 3.0}],
            "steps": [[0.0, 0.5]],
        }
    )
    # scipy.integrate.quad (adaptive Gauss-Kronrod) on [0.3, 0.6], where P is linear: rel 1e-12
    ref, _ = integrate.quad(lambda t: float(s.value(t)), 0.3, 0.6, epsabs=0.0, epsrel=1e-13)
    assert s.energy(0.3, 0.6) == pytest.approx(ref, rel=1e-12)
    # analytic: 0.5 W x 0.3 s + ramp P(t) = 1 + 4 (t - 0.2): mean of P(0.3)=1.4 and P(0.6)=2.6
    assert s.energy(0.3, 0.6) == pytest.approx(0.15 + 0.3 * (1.4 + 2.6) / 2, rel=1e-14)


def test_energy_matches_dense_trapezoid():
    s = parse(
        {
            "steps": [[0.0, 0.3], [1.7, 0.1]],
            "ramps": [{"start_s": 0.3, "end_s": 1.1, "from_w": 0.5, "to_w": 2.0}],
            "pulses": [{"start_s": 0.77, "width_s": 0.013, "power_w": 6.0}],
            "trains": [
                {"start_s": 2.0, "period_s": 0.03, "on_s": 0.007, "on_w": 3.0, "end_s": 3.1}
            ],
            "repeat": [
                {
                    "start_s": 3.2,
                    "period_s": 0.2,
                    "count": 3,
                    "pattern": {"pulses": [{"start_s": 0.05, "width_s": 0.09, "power_w": 1.0}]},
                }
            ],
        }
    )
    t = np.linspace(0.0, 4.0, 400_001)
    h = t[1] - t[0]
    ref = integrate.trapezoid(s.value(t), t)  # scipy, independent of the knots
    # tolerance: composite trapezoid errs by at most |jump| h / 2 at each jump and
    # |kink| h^2 / 8 at each kink; bound with the total variation of the jumps
    jumps = float(np.abs(s.left - s.right).sum())
    assert abs(s.energy(0.0, 4.0) - ref) <= jumps * h / 2 + 1e-12


def test_energy_until_matches_scipy_quad_at_many_times():
    # a pulse train of 5 ms pulses, a ramp and a step, read on a grid of 7 ms steps that does
    # not line up with any knot, so most steps hold part of a pulse
    s = parse(
        {
            "steps": [[0.0, 0.25], [0.31, 1.0]],
            "ramps": [{"start_s": 0.05, "end_s": 0.2, "from_w": 0.0, "to_w": 2.0}],
            "trains": [
                {"start_s": 0.01, "period_s": 0.02, "on_s": 0.005, "on_w": 4.0, "count": 20}
            ],
        }
    )
    grid = np.arange(0.0, 0.5, 0.007)
    got = s.energy_until(grid)
    knots = s.knots
    for t, e in zip(grid, got, strict=True):
        # scipy.integrate.quad (adaptive Gauss-Kronrod) told where P jumps or kinks: abs 1e-12 J
        inner = knots[(knots > 0.0) & (knots < t)]
        ref, _ = integrate.quad(
            lambda x: float(s.value(x)), 0.0, t, points=inner, limit=400, epsabs=1e-14
        )
        assert e == pytest.approx(ref, abs=1e-12)
    # the same function of one time at a time, before the first knot and after the last
    for t in (0.0, 0.003, 0.31, 0.7):
        assert s.energy_until(t) == pytest.approx(s.energy(0.0, t), abs=1e-15)
    # the train alone: 20 pulses of 4 W x 5 ms = 0.4 J by hand, all before 0.5 s
    train = parse(
        {"trains": [{"start_s": 0.01, "period_s": 0.02, "on_s": 0.005, "on_w": 4.0, "count": 20}]}
    )
    assert float(train.energy_until(0.5)) == pytest.approx(0.4, rel=1e-13)
    with pytest.raises(ValueError, match="times >= 0"):
        s.energy_until(np.array([-1.0]))


def test_mean_and_peak():
    s = parse({"pulses": [{"start_s": 1.0, "width_s": 1.0, "power_w": 4.0}], "steps": [[0.0, 1.0]]})
    assert s.mean(0.0, 4.0) == (4.0 + 4.0) / 4.0  # hand: 4 J + 4 J over 4 s
    assert s.peak(0.0, 4.0) == 5.0
    assert s.peak(0.0, 1.0) == 1.0  # the pulse starts at t1: outside (0, t1)
    assert s.peak(2.0, 3.0) == 1.0  # it ended at t0
    assert s.peak(1.5, 1.5) == 5.0
    with pytest.raises(ValueError, match="t0 <= t1"):
        s.energy(2.0, 1.0)


# --- breakpoints -----------------------------------------------------------------------------


def test_breakpoints_are_the_event_shifted_times_bitwise():
    events = resolve_events(
        {"rail": {"at_s": 0.0123}, "mcu": {"after": "rail", "delay_s": 0.0021}},
        "board.toml: events",
    )
    shift = 0.0123 + 0.0021  # the chain, evaluated as documented
    spec = {
        "relative_to": "mcu",
        "steps": [[0.0, 0.2]],
        "pulses": [{"start_s": 0.0005, "width_s": 0.0002, "power_w": 1.5}],
        "trains": [{"start_s": 0.001, "period_s": 0.0004, "on_s": 0.0001, "on_w": 3.0, "count": 5}],
    }
    s = parse(spec, events)
    rises = [0.001 + k * 0.0004 for k in range(5)]
    local = [0.0, 0.0005, 0.0005 + 0.0002, *rises, *[r + 0.0001 for r in rises]]
    expected = np.unique([shift + x for x in local])
    got = s.breakpoints(1.0)
    assert got.size == expected.size == 13
    assert np.array_equal(bits(got), bits(expected))
    assert np.array_equal(bits(s.breakpoints(shift + 0.0007)), bits(expected[:3]))  # t_end kept


def test_breakpoints_skip_continuous_joints_and_keep_kinks():
    ramps = [
        {"start_s": 0.0, "end_s": 1.0, "from_w": 0.0, "to_w": 1.0},
        {"start_s": 1.0, "end_s": 2.0, "from_w": 1.0, "to_w": 2.0},  # same slope: no break at 1
        {"start_s": 2.0, "end_s": 3.0, "from_w": 2.0, "to_w": 0.0},  # slope change at 2
    ]
    assert parse({"ramps": ramps}).breakpoints(10.0).tolist() == [2.0, 3.0]
    assert parse({"steps": [[0.0, 1.0], [1.0, 1.0], [2.0, 2.0]]}).breakpoints(10.0).tolist() == [
        2.0
    ]


def _naive(t: np.ndarray, pulses, ramps, trains, steps) -> np.ndarray:
    """Evaluate P(t) component by component straight from the definitions (reference)."""
    p = np.zeros_like(t)
    for start, width, power in pulses:
        p += np.where((t >= start) & (t < start + width), power, 0.0)
    for start, end, p0, p1 in ramps:
        p += np.where((t >= start) & (t < end), p0 + (p1 - p0) * (t - start) / (end - start), 0.0)
    for start, period, on, on_w, count in trains:
        k = np.floor((t - start) / period)
        inside = (k >= 0) & (k < count)
        p += np.where(inside & (t - start - k * period < on), on_w, 0.0)
    for ts, ps in steps:
        p += np.where(t >= ts, ps, 0.0)  # steps as differences of held powers
    return p


def test_random_superposition_matches_naive_reference():
    rng = np.random.default_rng(20240917)
    pulses = [(rng.uniform(0, 8), rng.uniform(0.01, 1), rng.uniform(0, 5)) for _ in range(12)]
    ramps = []
    for _ in range(6):
        a = rng.uniform(0, 8)
        ramps.append((a, a + rng.uniform(0.05, 2), rng.uniform(0, 3), rng.uniform(0, 3)))
    trains = [
        (rng.uniform(0, 3), rng.uniform(0.1, 0.3), rng.uniform(0.01, 0.09), rng.uniform(0, 2), 10)
        for _ in range(2)
    ]
    step_times = np.sort(rng.uniform(0, 9, 4))
    step_powers = rng.uniform(0, 2, 4)
    spec = {
        "pulses": [{"start_s": a, "width_s": w, "power_w": p} for a, w, p in pulses],
        "ramps": [{"start_s": a, "end_s": b, "from_w": p, "to_w": q} for a, b, p, q in ramps],
        "trains": [
            {"start_s": a, "period_s": T, "on_s": on, "on_w": p, "count": n}
            for a, T, on, p, n in trains
        ],
        "steps": [[float(a), float(p)] for a, p in zip(step_times, step_powers, strict=True)],
    }
    s = parse(spec)
    increments = np.diff(np.concatenate(([0.0], step_powers)))
    t = rng.uniform(0, 10, 5000)
    ref = _naive(t, pulses, ramps, trains, list(zip(step_times, increments, strict=True)))
    # compare away from knots, where rounding of a knot time could flip a comparison
    far = np.min(np.abs(t[:, None] - s.knots[None, :]), axis=1) > 1e-9
    assert far.sum() > 4900
    np.testing.assert_allclose(s.value(t[far]), ref[far], rtol=1e-12, atol=1e-12)
    # every component edge is a breakpoint; the list is sorted without duplicates
    edges = (
        [a for a, _, _ in pulses]
        + [a + w for a, w, _ in pulses]
        + [x for r in ramps for x in r[:2]]
    )
    b = s.breakpoints(100.0)
    assert np.all(np.isin(edges, b))
    assert np.all(np.diff(b) > 0)

    # one time at a time (the stepper's use) takes a plain-float path: bitwise the same values
    probe = np.concatenate([s.knots, t[:500], [0.0, -1.0, 1e300, np.inf, -np.inf]])
    for side in ("left", "right"):
        one_by_one = np.array([float(s.value(float(x), side)) for x in probe])
        assert np.array_equal(one_by_one, s.value(probe, side)), side


# --- events ----------------------------------------------------------------------------------


def test_events_chain_with_delays():
    spec = {
        "fan": {"after": "core", "delay_s": 0.0005},  # defined before what it waits for
        "core": {"after": "io"},
        "io": {"after": "rail", "delay_s": 0.002},
        "rail": {"at_s": 0.001},
    }
    times = resolve_events(spec, "board.toml: events")
    assert list(times) == ["fan", "core", "io", "rail"]
    io = 0.001 + 0.002
    assert times == {"rail": 0.001, "io": io, "core": io + 0.0, "fan": io + 0.0 + 0.0005}


@pytest.mark.parametrize(
    ("spec", "fragment"),
    [
        (
            {"a": {"after": "b"}, "b": {"after": "a"}, "c": {"at_s": 0.0}},
            "events.a.after: found a cycle a -> b -> a",
        ),
        ({"x": {"at_s": 0.0}, "s": {"after": "s"}}, "events.s.after: found a cycle s -> s"),
        (
            {"a": {"after": "b"}, "b": {"after": "c"}, "c": {"after": "b"}},
            "events.b.after: found a cycle b -> c -> b",
        ),
    ],
)
def test_events_cycle_is_named(spec, fragment):
    with pytest.raises(BoardFileError, match="a chain ending at an 'at_s' event") as err:
        resolve_events(spec, "board.toml: events")
    assert str(err.value).startswith(f"board.toml: {fragment}, expected")


def test_unknown_event_suggests_closest():
    spec = {"main_rail": {"at_s": 0.0}, "mcu": {"after": "main_rial", "delay_s": 0.001}}
    with pytest.raises(BoardFileError) as err:
        resolve_events(spec, "board.toml: events")
    msg = str(err.value)
    assert msg.startswith(
        "board.toml: events.mcu.after: found 'main_rial', expected one of the events"
    )
    assert "'main_rail', 'mcu'" in msg
    assert "(closest: 'main_rail')" in msg


@pytest.mark.parametrize(
    ("spec", "fragment", "expected"),
    [
        (
            {"a": {"at_s": 0.001}, "b": {"after": "a", "delay_s": -0.002}},
            "events.b.delay_s: found -0.002",
            "keeping the event at t >= 0 s",
        ),
        ({"a": {"at_s": -1.0}}, "events.a.at_s: found -1.0", "a time >= 0 s"),
        (
            {"a": {"at_s": 0.0, "after": "b"}},
            "events.a: found both 'at_s' and 'after'",
            "exactly one",
        ),
        ({"a": {"delay_s": 1.0}}, "events.a: found neither 'at_s' nor 'after'", "exactly one"),
        (
            {"a": {"at_s": 0.0, "delay": 1.0}},
            "events.a.delay: found an unknown key",
            "(closest: 'delay_s')",
        ),
        ({"a": {"at_s": "1 ms"}}, "events.a.at_s: found '1 ms'", "a finite number"),
        ({"a": {"at_s": 0.0, "delay_s": 1.0}}, "events.a.delay_s: found 1.0", "only with 'after'"),
        (
            {"a": {"at_s": 0.0}, "b": {"after": 3}},
            "events.b.after: found 3",
            "the name of another event",
        ),
        ({"a": 0.5}, "events.a: found 0.5", "a table with the keys at_s, after, delay_s"),
        ({"a": {"at_s": math.inf}}, "events.a.at_s: found inf", "a finite number"),
    ],
)
def test_event_errors(spec, fragment, expected):
    with pytest.raises(BoardFileError) as err:
        resolve_events(spec, "board.toml: events")
    assert str(err.value).startswith(f"board.toml: {fragment}")
    assert expected in str(err.value)


def test_negative_delay_allowed_while_time_stays_nonnegative():
    times = resolve_events({"a": {"at_s": 0.003}, "b": {"after": "a", "delay_s": -0.001}}, "e")
    assert times["b"] == 0.003 - 0.001


# --- board-file errors in power tables --------------------------------------------------------


def test_on_longer_than_period_message_is_exact():
    spec = {"trains": [{"start_s": 0.0, "period_s": 1e-3, "on_s": 2e-3, "on_w": 1.0, "count": 3}]}
    with pytest.raises(BoardFileError) as err:
        parse(spec)
    assert str(err.value) == (
        "board.toml: part[U3].power.trains[0].on_s: "
        "found 0.002, expected a value <= period_s (0.001)"
    )


TRAIN = {"start_s": 0.0, "period_s": 1.0, "on_s": 0.5, "on_w": 1.0}
PULSE = {"start_s": 0.0, "width_s": 1.0, "power_w": 1.0}


@pytest.mark.parametrize(
    ("spec", "path", "expected"),
    [
        (
            {"pulse": [PULSE]},
            "power.pulse: found an unknown key",
            "relative_to, steps, ramps, pulses, trains, repeat (closest: 'pulses')",
        ),
        ({"steps": [[0.0, -1.0]]}, "power.steps[0][1]: found -1.0", "a power >= 0 W"),
        (
            {"steps": [[0.0, 1.0], [0.0, 2.0]]},
            "power.steps[1][0]: found 0.0",
            "a time > the previous step's (0.0)",
        ),
        (
            {"steps": [[0.0, 1.0, 2.0]]},
            "power.steps[0]: found [0.0, 1.0, 2.0]",
            "a pair [t_s, p_w]",
        ),
        ({"steps": []}, "power.steps: found an empty array", "at least one entry"),
        ({"steps": [[math.nan, 1.0]]}, "power.steps[0][0]: found nan", "a finite number"),
        (
            {"ramps": [{"start_s": 1.0, "end_s": 1.0, "from_w": 0.0, "to_w": 1.0}]},
            "power.ramps[0].end_s: found 1.0",
            "a value > start_s (1.0)",
        ),
        (
            {"ramps": [{"start_s": 1.0, "end_s": 2.0, "from_w": 0.0}]},
            "power.ramps[0]: found no 'to_w'",
            "start_s, end_s, from_w, to_w",
        ),
        (
            {"pulses": [{**PULSE, "width_s": 0}]},
            "power.pulses[0].width_s: found 0",
            "a duration > 0 s",
        ),
        (
            {"pulses": [{**PULSE, "start_s": -1.0}]},
            "power.pulses[0].start_s: found -1.0",
            "a time >= 0.0 s",
        ),
        (
            {"pulses": [3.0]},
            "power.pulses[0]: found 3.0",
            "a table with the keys start_s, width_s, power_w",
        ),
        ({"pulses": {"start_s": 0.0}}, "power.pulses: found a table", "an array"),
        (
            {"trains": [{**TRAIN, "count": 2, "end_s": 3.0}]},
            "power.trains[0]: found both 'count' and 'end_s'",
            "exactly one",
        ),
        ({"trains": [TRAIN]}, "power.trains[0]: found neither 'count' nor 'end_s'", "exactly one"),
        (
            {"trains": [{**TRAIN, "count": 2.5}]},
            "power.trains[0].count: found 2.5",
            "a whole number",
        ),
        (
            {"trains": [{**TRAIN, "count": True}]},
            "power.trains[0].count: found true",
            "a whole number",
        ),
        ({"trains": [{**TRAIN, "count": 0}]}, "power.trains[0].count: found 0", "from 1 to"),
        (
            {"trains": [{**TRAIN, "end_s": 1e12}]},
            "power.trains[0].end_s: found 1000000000000.0",
            "at most 5000000 pulses",
        ),
        (
            {"trains": [{**TRAIN, "end_s": 0.0}]},
            "power.trains[0].end_s: found 0.0",
            "a value > start_s (0.0)",
        ),
        (
            {"trains": [{**TRAIN, "count": 1, "off_w": -0.5}]},
            "power.trains[0].off_w: found -0.5",
            "a power >= 0 W",
        ),
        (
            {
                "repeat": [
                    {
                        "start_s": 0.0,
                        "period_s": 1.0,
                        "count": 2,
                        "pattern": {"pulses": [{"start_s": 0.9, "width_s": 0.2, "power_w": 1.0}]},
                    }
                ]
            },
            "power.repeat[0].pattern: found one lasting until 1.1 s",
            "within [0, 1.0) s",
        ),
        (
            {
                "repeat": [
                    {
                        "start_s": 0.0,
                        "period_s": 1.0,
                        "count": 2,
                        "pattern": {"relative_to": "rail", "pulses": [PULSE]},
                    }
                ]
            },
            "power.repeat[0].pattern.relative_to: found an unknown key",
            "steps, ramps, pulses, trains",
        ),
        (
            {"repeat": [{"start_s": 0.0, "period_s": 1.0, "count": 2}]},
            "power.repeat[0]: found no 'pattern'",
            "the keys",
        ),
        (
            {},
            "power: found no power component",
            "at least one of steps, ramps, pulses, trains, repeat",
        ),
        ("5 W", "power: found '5 W'", "a power in watts or a schedule table"),
        (True, "power: found true", "a power in watts or a schedule table"),
        (-2.0, "power: found -2.0", "a power >= 0 W"),
        (
            {"relative_to": "rial", "steps": [[0.0, 1.0]]},
            "power.relative_to: found 'rial'",
            "one of the events 'rail' (closest: 'rail')",
        ),
        (
            {"relative_to": "rail", "pulses": [{**PULSE, "start_s": -0.002}]},
            "power.pulses[0].start_s: found -0.002",
            "a time >= -0.001 s (event 'rail' is at 0.001 s",
        ),
    ],
)
def test_power_errors_name_field_and_expectation(spec, path, expected):
    with pytest.raises(BoardFileError) as err:
        parse(spec, {"rail": 0.001})
    msg = str(err.value)
    assert msg.startswith(f"board.toml: part[U3].{path}, expected"), msg
    assert expected in msg


def test_relative_to_without_events_says_none_defined():
    with pytest.raises(
        BoardFileError, match=r"power.relative_to: found 'rail', expected .*none are defined"
    ):
        parse({"relative_to": "rail", "steps": [[0.0, 1.0]]})


def test_relative_to_allows_negative_local_times():
    s = parse(
        {"relative_to": "rail", "pulses": [{**PULSE, "start_s": -0.001, "width_s": 0.002}]},
        {"rail": 0.001},
    )
    assert s.breakpoints(1.0).tolist() == [0.002]  # rises at 0.001 - 0.001 = 0: excluded
    assert float(s.value(0.0)) == 1.0


# --- the Schedule object ---------------------------------------------------------------------


def test_arrays_are_read_only_and_validated():
    s = parse({"pulses": [PULSE]})
    with pytest.raises(ValueError, match="read-only"):
        s.knots[0] = 5.0
    with pytest.raises(ValueError, match="strictly increasing"):
        Schedule(np.array([1.0, 0.0]), np.zeros(2), np.zeros(2))
    with pytest.raises(ValueError, match="one shape"):
        Schedule(np.array([1.0, 2.0]), np.zeros(3), np.zeros(2))


def test_value_shapes_and_bad_arguments():
    s = parse({"ramps": [{"start_s": 0.0, "end_s": 4.0, "from_w": 0.0, "to_w": 4.0}]})
    grid = np.arange(6.0).reshape(2, 3)
    assert s.value(grid).shape == (2, 3)
    assert s.value(2.0).shape == ()
    assert values(s, [-math.inf, math.inf]) == [0.0, 0.0]
    with pytest.raises(ValueError, match="NaN"):
        s.value(np.array([1.0, math.nan]))
    with pytest.raises(ValueError, match="'left' or 'right'"):
        s.value(1.0, side="middle")  # type: ignore[arg-type]


def test_scaled_equality_and_describe():
    s = parse({"pulses": [{"start_s": 1.0, "width_s": 0.5, "power_w": 2.0}]})
    double = s.scaled(2.0)
    assert values(double, [1.2]) == [4.0]
    assert double.energy(0.0, 5.0) == 2.0 * s.energy(0.0, 5.0)
    assert parse({"pulses": [{"start_s": 1.0, "width_s": 0.5, "power_w": 2.0}]}) == s
    assert hash(s.scaled(1.0)) == hash(s)
    assert double != s
    with pytest.raises(ValueError, match="finite value >= 0"):
        s.scaled(-1.0)
    assert s.describe(4.0) == "peak 2 W, mean 0.25 W over [0, 4] s, 2 breakpoints"
    assert constant(0.5) == parse(0.5)
    with pytest.raises(ValueError, match=">= 0 W"):
        constant(-0.5)


def test_hundred_thousand_pulse_train_is_fast():
    spec = {
        "trains": [{"start_s": 0.0, "period_s": 1e-3, "on_s": 2e-4, "on_w": 5.0, "count": 100_000}]
    }
    t = np.linspace(0.0, 100.5, 1_000_000)
    begin = time.perf_counter()
    s = parse(spec)
    p = s.value(t)
    elapsed = time.perf_counter() - begin
    assert elapsed < 5.0  # loose: the point is no per-pulse Python work (typically ~0.1 s)
    k = np.floor(t / 1e-3)
    ref = np.where((k < 100_000) & (t - k * 1e-3 < 2e-4), 5.0, 0.0)  # definition of the train
    far = np.abs((t - k * 1e-3) - 2e-4) > 1e-12  # away from falls, where rounding decides
    far &= np.abs(t - k * 1e-3) > 1e-12
    assert np.array_equal(p[far], ref[far])
    assert s.breakpoints(200.0).size == 200_000 - 1  # the first rise is at t = 0: excluded
    # analytic: 1e5 pulses x 0.2 ms x 5 W = 100 J; tolerance: knot rounding, relative 1e-9
    assert s.energy(0.0, 200.0) == pytest.approx(100.0, rel=1e-9)
