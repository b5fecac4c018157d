"""Checks stage: verdict logic, lumped models, and the sanity checks catching a broken model."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import boardheat.run
from boardheat.assembly import assemble
from boardheat.checks import (
    board_capacity,
    lumped_mean_rise,
    lumped_rise_of_schedules,
    status_of,
    time_above,
)
from boardheat.meshing import build_mesh
from boardheat.run import RunOptions, run_check
from boardheat.stackup import build_stackup
from tests.conftest import make_board, raw_board


def test_status_bands():
    assert status_of(400.0, 398.15, 5.0) == "FAIL"
    assert status_of(395.0, 398.15, 5.0) == "NEAR"
    assert status_of(390.0, 398.15, 5.0) == "PASS"


def test_time_above_interpolates_crossings():
    # a triangle 0 -> 10 -> 0 over 2 s is above 5 for exactly 1 s (geometry)
    t = np.array([0.0, 1.0, 2.0])
    y = np.array([0.0, 10.0, 0.0])
    assert time_above(t, y, 5.0) == pytest.approx(1.0)
    assert time_above(t, y, 20.0) == 0.0


def test_lumped_rise_matches_exponential_and_ode():
    """Lumped model C dtheta/dt = P(t) - G theta (Incropera & DeWitt sec. 5.3).

    Exact for a step; a ramp checked against scipy's Radau at rtol 1e-10 (tolerance 1e-8 K).
    """
    t = np.linspace(0.0, 50.0, 201)
    c, g = 10.0, 0.5
    step = lumped_mean_rise(t, np.full_like(t, 2.0), c, g)
    assert step == pytest.approx(2.0 / g * (1 - np.exp(-t * g / c)), abs=1e-12)
    ramp = 0.1 * t
    sol = solve_ivp(lambda s, y: (0.1 * s - g * y) / c, (0, 50), [0.0], t_eval=t,
                    method="Radau", rtol=1e-10, atol=1e-12)  # fmt: skip
    assert lumped_mean_rise(t, ramp, c, g) == pytest.approx(sol.y[0], abs=1e-8)


def test_lumped_rise_sees_a_pulse_and_a_ramp_inside_one_recorded_step():
    """The lumped model integrates the schedules, not the power sampled at recorded times.

    A 3 W pulse on [10, 20] s and a ramp 0 -> 2 W on [30, 50] s (held after), recorded only at
    0, 25 and 100 s. Pulse: superposition of two step responses (Incropera & DeWitt
    sec. 5.3), theta = P/G (1 - e^(-10/tau)) e^(-(t - 20)/tau); the ramp is checked against
    scipy's Radau at rtol 1e-10 on the exact schedule (tolerance 1e-7 K). Sampling the power
    at the three recorded times alone sees 0 W everywhere but at 100 s.
    """
    from boardheat.schedules import Schedule

    c, g, tau = 10.0, 0.5, 20.0
    pulse = Schedule(np.array([10.0, 20.0]), np.array([0.0, 3.0]), np.array([3.0, 0.0]))
    ramp = Schedule(np.array([30.0, 50.0]), np.array([0.0, 2.0]), np.array([0.0, 2.0]))
    t = np.array([0.0, 25.0, 100.0])
    theta = lumped_rise_of_schedules([pulse, ramp], t, c, g)
    assert theta[1] == pytest.approx(3.0 / g * (1 - np.exp(-10 / tau)) * np.exp(-5 / tau))

    def rate(s, y):
        return [(float(pulse.value(s)) + float(ramp.value(s)) - g * y[0]) / c]

    pieces = [0.0, 10.0, 20.0, 30.0, 50.0, 100.0]  # integrated piece by piece (kinks, jumps)
    y = [0.0]
    for a, b in zip(pieces[:-1], pieces[1:], strict=True):
        y = solve_ivp(rate, (a, b), y, method="Radau", rtol=1e-10, atol=1e-12).y[:, -1]
    assert theta[2] == pytest.approx(y[0], abs=1e-7)
    assert theta[0] == 0.0


@pytest.mark.gmsh
def test_board_capacity_from_the_file_equals_the_assembled_capacity():
    raw = raw_board(pour=[{"name": "gnd", "layer": "bot", "rect": {"center_mm": [20, 15],
                                                                   "size_mm": [20, 10]},
                           "fill": 1.0}])  # fmt: skip
    board = make_board(raw)
    system = assemble(build_mesh(board), build_stackup(board), board)
    assert board_capacity(board) == pytest.approx(system.total_capacity, rel=1e-3)


@pytest.mark.gmsh
def test_sanity_checks_pass_on_a_sound_model_and_fire_on_a_broken_one(monkeypatch):
    raw = raw_board(run={"duration_s": 30.0})
    raw["part"][0]["power"] = {
        "steps": [[0.0, 1.0]],
        "pulses": [{"start_s": 10.0, "width_s": 0.05, "power_w": 8.0}],
    }
    board = make_board(raw)
    sound = run_check(board, RunOptions())
    assert all(c.passed for c in sound.sanity), [c.detail for c in sound.sanity if not c.passed]
    assert not sound.warnings

    real_assemble = boardheat.run.assemble

    def half_capacity(*args, **kwargs):
        # a deliberately broken model: every heat capacity halved, nothing else changed
        system = real_assemble(*args, **kwargs)
        return dataclasses.replace(system, M=(0.5 * system.M).tocsr())

    monkeypatch.setattr(boardheat.run, "assemble", half_capacity)
    broken = run_check(board, RunOptions())
    failed = {c.name.split(" @")[0] for c in broken.sanity if not c.passed}
    assert "lumped board model" in failed
    assert "energy balance" in failed
    assert any("adiabatic bound" in w for w in broken.warnings)
    assert any("lumped board model" in w for w in broken.warnings)
