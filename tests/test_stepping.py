"""Tests of boardheat.stepping against analytic solutions and independent scipy integrators.

Every check names its source. Reference solutions come from outside the project: closed forms,
``scipy.linalg.expm`` (exact for linear constant-coefficient systems, with the forcing folded
into an augmented matrix as in Van Loan, "Computing integrals involving the matrix
exponential", IEEE Trans. Autom. Control 23 (1978) 395-404) and ``scipy.integrate.solve_ivp``
(Radau, rtol = 1e-12).
"""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg as sl
import scipy.sparse as sp
from scipy.integrate import solve_ivp
from scipy.sparse.linalg import spsolve

from boardheat.errors import SettingError, SolverError, StepperWarning
from boardheat.stepping import (
    GAMMA,
    LinearOde,
    StepperOptions,
    available_backends,
    integrate,
    make_factorization,
    solve_steady,
)
from boardheat.stepping.solvers import PARDISO_MIN_DOFS

T_AMB = 300.0  # K
SEED = 20240611


# --- helpers -----------------------------------------------------------------------------


def chain(n=50, capacity=1.0, g_link=50.0, g_amb=0.5, c_source=None, consistent=False):
    """1-D conduction chain: node capacities (J/K), links g_link (W/K), g_amb to ambient per node.

    A is an M-matrix (positive diagonal, non-positive off-diagonal, weakly diagonally dominant).
    The load g = g_amb * T_AMB makes T = T_AMB the steady state without power, so the rise
    u = T - T_AMB obeys M u' + A u = B p. Source 0 heats node 0.
    """
    main = np.full(n, 2.0 * g_link) + g_amb
    main[[0, -1]] -= g_link
    off = -g_link * np.ones(n - 1)
    A = sp.diags_array([main, off, off], offsets=[0, 1, -1]).tocsr()
    caps = np.full(n, capacity)
    if c_source is not None:
        caps[0] = c_source
    if consistent:
        # consistent mass of linear elements with the same total capacity per node
        M = sp.diags_array(
            [caps * 2.0 / 3.0, caps[:-1] / 6.0, caps[:-1] / 6.0], offsets=[0, 1, -1]
        ).tocsr()
        M = M + sp.diags_array(caps - np.asarray(M.sum(axis=1)).ravel())
    else:
        M = sp.diags_array(caps).tocsr()
    g = np.full(n, g_amb * T_AMB)
    B = sp.csr_array((np.ones(1), ([0], [0])), shape=(n, 1))
    return M, A, g, B


def pulse_train(power, starts, widths):
    """Return p(t, side) (1 source, W) and its breakpoints for pulses [start, start + width)."""
    starts = np.asarray(starts, dtype=float)
    ends = starts + np.asarray(widths, dtype=float)

    def p(t, side):
        k = np.searchsorted(starts, t, side="right" if side == "right" else "left") - 1
        if k < 0:
            return np.zeros(1)
        on = (starts[k] <= t < ends[k]) if side == "right" else (starts[k] < t <= ends[k])
        return np.array([power if on else 0.0])

    return p, np.sort(np.concatenate([starts, ends]))


def constant_power_solution(M, A, g, B, T0, power, times):
    """Exact fields (len(times), n) for constant power from t = 0: T_inf + expm(J t)(T0 - T_inf)."""
    T_inf = np.linalg.solve(A.toarray(), g + B.toarray() @ np.atleast_1d(power))
    J = -np.linalg.solve(M.toarray(), A.toarray())
    return np.array([T_inf + sl.expm(J * t) @ (T0 - T_inf) for t in times])


def cosine_ramp_solution(M, A, g, b, power, omega, T0, t):
    """Exact T(t) for p(t) = power (1 - cos(omega t)) via expm of an augmented matrix (Van Loan)."""
    n = M.shape[0]
    Minv = np.linalg.inv(M.toarray())
    Z = np.zeros((n + 3, n + 3))  # state (T, 1, cos(omega t), sin(omega t))
    Z[:n, :n] = -Minv @ A.toarray()
    Z[:n, n] = Minv @ (g + power * b)
    Z[:n, n + 1] = -Minv @ (power * b)
    Z[n + 1, n + 2] = -omega
    Z[n + 2, n + 1] = omega
    return (sl.expm(Z * t) @ np.concatenate([T0, [1.0, 1.0, 0.0]]))[:n]


def identity_probes(n):
    return sp.eye_array(n, format="csr")


def options(**settings):
    """Return StepperOptions on SuperLU (tiny systems: other back ends' call overhead dominates)."""
    return StepperOptions(**{"backend": "splu", **settings})


# --- analytic references -------------------------------------------------------------------


def test_lumped_rc_node_follows_exponential_rise():
    # Incropera & DeWitt, Fundamentals of Heat and Mass Transfer (6th ed.), Sec. 5.1-5.3
    # (lumped capacitance, general analysis with generation): C dT/dt = P - (T - T_inf)/R gives
    # T = T_inf + P R (1 - exp(-t / (R C)))  (closed form recalled from memory).
    C, R, power = 2.0, 4.0, 3.0  # J/K, K/W, W
    ode = LinearOde(
        sp.csr_array([[C]]),
        sp.csr_array([[1.0 / R]]),
        np.array([T_AMB / R]),
        sp.csr_array([[1.0]]),
        lambda t, side: np.array([power]),
    )
    t_end = 5.0 * R * C
    for opts in (options(), options(rtol=1e-5, atol=1e-5)):
        sol = integrate(ode, np.array([T_AMB]), t_end, sp.csr_array([[1.0]]), opts)
        exact = T_AMB + power * R * (1.0 - np.exp(-sol.t / (R * C)))
        scale = opts.atol + opts.rtol * (exact - T_AMB)
        # error-per-step control bounds the local error; the accumulated global error is
        # stated to stay within 5 tolerance units (measured: 0.3 at default, 3.7 at 1e-5)
        assert np.max(np.abs(sol.probes[:, 0] - exact) / scale) < 5.0
        assert sol.t[-1] == t_end
    assert sol.stats.rejected == 0


def test_pulse_response_is_step_minus_delayed_step():
    # Superposition for a linear time-invariant system (e.g. Oppenheim & Willsky, Signals and
    # Systems, 2nd ed., Sec. 2.3): the response to a rectangular pulse [t1, t2) equals the step
    # response from t1 minus the same step response delayed to t2.
    M, A, g, B = chain(n=50, c_source=0.05)
    t1, t2, power = 2.0, 7.0, 10.0
    opts = options(rtol=1e-4, atol=1e-4)
    compare = [1.0, 2.0, 2.5, 4.0, 7.0, 7.3, 9.0, 12.0, 20.0, 30.0]
    runs = {}
    for name, (start, width) in {
        "pulse": (t1, t2 - t1),
        "step": (t1, math.inf),
        "delayed": (t2, math.inf),
    }.items():
        p, bps = pulse_train(power, [start], [width])
        ode = LinearOde(M, A, g, B, p, bps[np.isfinite(bps)])
        sol = integrate(ode, np.full(50, T_AMB), 30.0, identity_probes(50), opts, compare)
        runs[name] = np.array([sol.snapshots[t] for t in compare]) - T_AMB
    superposed = runs["step"] - runs["delayed"]
    peak_rise = np.max(runs["step"])
    # stated bound: 3 tolerance units for the three runs together (measured: 0.13)
    assert np.max(np.abs(runs["pulse"] - superposed)) < 3.0 * (opts.atol + opts.rtol * peak_rise)
    assert np.max(runs["pulse"]) > 1.0  # the pulse really heated the chain


def _fixed_step_errors(method, counts, consistent=False):
    n, power, omega, t_end = 50, 20.0, 2.0 * np.pi / 10.0, 5.0
    M, A, g, B = chain(n=n, consistent=consistent)
    b = B.toarray()[:, 0]
    ode = LinearOde(M, A, g, B, lambda t, side: np.array([power * (1.0 - np.cos(omega * t))]))
    T0 = np.full(n, T_AMB)
    exact = cosine_ramp_solution(M, A, g, b, power, omega, T0, t_end)
    dts, errors = [], []
    for count in counts:
        opts = options(method=method, fixed_dt=t_end / count)
        sol = integrate(ode, T0, t_end, identity_probes(n), opts)
        assert sol.stats.steps == count
        dts.append(t_end / count)
        errors.append(np.max(np.abs(sol.final - exact)))
    return np.array(dts), np.array(errors)


def test_fixed_step_trbdf2_is_second_order_and_backward_euler_first_order():
    # Bank et al. (1985) and Hosea & Shampine (1996): TR-BDF2 is second order; backward Euler
    # is first order (standard, e.g. Hairer & Wanner, Solving ODEs II, ch. IV; chapter recalled
    # from memory). Reference: exact solution by expm of the augmented matrix (Van Loan 1978).
    # Stated: slope within 0.15 of the order (measured 2.01 and 0.97).
    dts, errors = _fixed_step_errors("trbdf2", (20, 40, 80))
    rate = np.polyfit(np.log(dts), np.log(errors), 1)[0]
    assert abs(rate - 2.0) < 0.15, f"observed temporal order {rate:.2f}"
    assert errors[-1] < 1e-4  # K
    dts, errors = _fixed_step_errors("backward_euler", (40, 80, 160))
    rate = np.polyfit(np.log(dts), np.log(errors), 1)[0]
    assert abs(rate - 1.0) < 0.15, f"observed temporal order {rate:.2f}"


def test_consistent_mass_matrix_keeps_second_order():
    # Same reference as above with a non-diagonal (consistent) capacity matrix: exercises the
    # sparse M-vector products of the stages and of the error estimate.
    dts, errors = _fixed_step_errors("trbdf2", (20, 40, 80), consistent=True)
    rate = np.polyfit(np.log(dts), np.log(errors), 1)[0]
    assert abs(rate - 2.0) < 0.15, f"observed temporal order {rate:.2f}"


@pytest.mark.slow
@pytest.mark.parametrize(
    ("method", "order", "counts"),
    [
        ("trbdf2", 2.0, (10, 20, 40, 80, 160, 320, 640)),
        ("backward_euler", 1.0, (40, 80, 160, 320, 640, 1280)),
    ],
)
def test_fixed_step_convergence_study(method, order, counts):
    # Longer dt sweep of the quick order check above; same sources.
    dts, errors = _fixed_step_errors(method, counts)
    rate = np.polyfit(np.log(dts), np.log(errors), 1)[0]
    assert abs(rate - order) < 0.15, f"observed temporal order {rate:.2f}"
    assert errors[-1] < (1.5e-6 if order == 2.0 else 6e-4)  # K, finest step


def test_local_error_estimate_is_asymptotically_exact():
    # Hosea & Shampine (1996): the companion formula with weights ((1-w)/3, (3w+1)/3, d/3) is
    # third order, so the estimate equals the local error of TR-BDF2 up to O(h^4) and the
    # local error itself is O(h^3). One step from a non-equilibrium state of a smooth problem,
    # compared with solve_ivp(Radau, rtol=1e-13).
    C, G, power, omega = 2.0, 1.0, 5.0, 1.3

    def p(t, side):
        return np.array([power * (1.0 - np.cos(omega * t))])

    ode = LinearOde(
        sp.csr_array([[C]]), sp.csr_array([[G]]), np.array([G * T_AMB]), sp.csr_array([[1.0]]), p
    )
    hs, estimates, true_errors = [0.2, 0.1, 0.05, 0.025], [], []
    for h in hs:
        sol = integrate(
            ode,
            np.array([310.0]),
            h,
            sp.csr_array([[1.0]]),
            options(fixed_dt=h, atol=1.0, rtol=0.0),
        )
        ref = solve_ivp(
            lambda t, y: (G * T_AMB + p(t, "left") - G * y) / C,
            (0.0, h),
            [310.0],
            method="Radau",
            rtol=1e-13,
            atol=1e-13,
        )
        estimates.append(sol.err[-1])  # atol = 1 K, rtol = 0: |estimate| in kelvin
        true_errors.append(abs(sol.final[0] - ref.y[0, -1]))
    ratio = np.array(estimates) / np.array(true_errors)
    assert np.all(np.abs(ratio - 1.0) < 0.01), ratio
    slope = np.polyfit(np.log(hs), np.log(true_errors), 1)[0]
    assert abs(slope - 3.0) < 0.15


def test_adaptive_global_error_tracks_tolerance():
    # Reference: solve_ivp(Radau, rtol=1e-12) on each interval where the power is constant.
    # Expectation (tolerance proportionality of error-per-step control, e.g. Hairer, Norsett &
    # Wanner, Solving ODEs I, Sec. II.4, section recalled from memory): local error ~ h^3 = tol
    # and global error ~ h^2, so global error ~ tol^(2/3), a factor ~4.6 per decade of
    # tolerance. Stated bounds: factor 2.5-20 per decade, and the global error stays below 3
    # tolerance units (measured: factors 3.7 and 4.6; 0.32, 0.59, 1.40 units).
    n, power, t_on, t_off, t_end = 30, 10.0, 1.0, 20.0, 60.0
    M, A, g, B = chain(n=n, c_source=0.05)
    p, bps = pulse_train(power, [t_on], [t_off - t_on])
    ode = LinearOde(M, A, g, B, p, bps)
    Md, Ad, b = M.diagonal(), A.toarray(), B.toarray()[:, 0]
    pieces, state = [], np.full(n, T_AMB)
    for start, stop, level in ((0.0, t_on, 0.0), (t_on, t_off, power), (t_off, t_end, 0.0)):
        ref = solve_ivp(
            lambda t, y, q=level: (g + q * b - Ad @ y) / Md,
            (start, stop),
            state,
            method="Radau",
            jac=-Ad / Md[:, None],
            rtol=1e-12,
            atol=1e-12,
            dense_output=True,
        )
        pieces.append((start, stop, ref.sol))
        state = ref.y[:, -1]

    def reference(t):
        for start, stop, dense in pieces:
            if start <= t <= stop:
                return dense(t)
        raise AssertionError(t)

    worst_abs, worst_units = [], []
    for rtol in (1e-2, 1e-3, 1e-4):
        opts = options(rtol=rtol, atol=rtol)
        sol = integrate(ode, np.full(n, T_AMB), t_end, identity_probes(n), opts)
        exact = np.array([reference(t) for t in sol.t])
        error = np.abs(sol.probes - exact)
        worst_abs.append(error.max())
        worst_units.append(np.max(error / (opts.atol + opts.rtol * np.abs(exact - T_AMB))))
    assert max(worst_units) < 3.0, worst_units
    gains = np.array(worst_abs[:-1]) / np.array(worst_abs[1:])
    assert np.all((gains > 2.5) & (gains < 20.0)), gains


# --- qualitative properties ------------------------------------------------------------------


def test_sudden_pulse_never_drives_a_node_below_ambient():
    # Discrete maximum principle: with a diagonal (lumped) capacity matrix and an M-matrix A,
    # M + c dt A is an M-matrix with a non-negative inverse, so a heating step from rest cannot
    # cool any node (Fujii 1973, "Some remarks on finite element analysis of time-dependent
    # field problems"; recalled from memory). Checked on every recorded step, with 1e-12 K of
    # round-off slack on 300 K values.
    n = 50
    M, A, g, B = chain(n=n, g_link=500.0, c_source=1e-3)
    p, bps = pulse_train(10.0, [0.5], [math.inf])
    ode = LinearOde(M, A, g, B, p, bps[:1])
    for opts in (
        options(),
        options(rtol=0.1, atol=1.0),
        options(fixed_dt=10.0),
        options(method="backward_euler", fixed_dt=1.0),
    ):
        sol = integrate(ode, np.full(n, T_AMB), 100.0, identity_probes(n), opts)
        assert sol.probes.min() >= T_AMB - 1e-12, opts
        assert sol.probes[-1, -1] > T_AMB + 0.1  # the far end did heat up

    # The check can fail: a consistent mass matrix undershoots after the same sudden pulse
    # when dt * g_link < C / 6 (M + dt A then has positive off-diagonal entries), the classic
    # reason for lumping; here with backward Euler.
    M, A, g, B = chain(n=n, consistent=True)
    ode = LinearOde(M, A, g, B, p, bps[:1])
    opts = options(method="backward_euler", fixed_dt=1e-4)
    sol = integrate(ode, np.full(n, T_AMB), 0.51, identity_probes(n), opts)
    assert sol.probes.min() < T_AMB - 1e-6


def test_cooling_after_a_pulse_stays_at_ambient_within_tolerance():
    # Backward Euler keeps the discrete maximum principle through the whole pulse (same
    # argument as above). TR-BDF2 does not in general: its stability function
    # R(z) = (1 + (sqrt(2) - 1) z) / (1 - d z)^2 (derived from the two stages) is negative for
    # z < -(1 + sqrt(2)), so a stiff tail may dip below ambient; the error control keeps the
    # dip small. Stated bound: 0.1 atol.
    n = 50
    M, A, g, B = chain(n=n, c_source=0.01)
    p, bps = pulse_train(10.0, [1.0], [49.0])
    ode = LinearOde(M, A, g, B, p, bps)
    sol = integrate(
        ode,
        np.full(n, T_AMB),
        200.0,
        identity_probes(n),
        options(method="backward_euler", fixed_dt=0.5),
    )
    assert sol.probes.min() >= T_AMB - 1e-12
    opts = options()
    sol = integrate(ode, np.full(n, T_AMB), 200.0, identity_probes(n), opts)
    assert sol.probes.min() >= T_AMB - 0.1 * opts.atol


@pytest.mark.parametrize("z", [-0.01, -1.0, -2.0, -5.0, -8.24, -100.0, -1e6])
def test_one_step_reproduces_the_trbdf2_stability_function(z):
    # Linear stability function of TR-BDF2 with gamma = 2 - sqrt(2), derived from the two stages
    # on y' = lambda y: R(z) = (1 + (sqrt(2) - 1) z) / (1 - d z)^2, d = gamma / 2; R(z) -> 0 as
    # z -> -inf (L-stability, Hosea & Shampine 1996), minimum about -0.207 at z = -8.24.
    d = GAMMA / 2.0
    expected = (1.0 + (math.sqrt(2.0) - 1.0) * z) / (1.0 - d * z) ** 2
    ode = LinearOde(
        sp.csr_array([[1.0]]),
        sp.csr_array([[-z]]),
        np.zeros(1),
        sp.csr_array((1, 1)),
        lambda t, side: np.zeros(1),
    )
    sol = integrate(ode, np.array([1.0]), 1.0, sp.csr_array([[1.0]]), options(fixed_dt=1.0))
    assert sol.final[0] == pytest.approx(expected, rel=1e-12, abs=1e-15)


# --- breakpoints, pulse trains, factorization reuse -----------------------------------------


def test_breakpoints_hit_exactly_and_2000_pulses_deliver_the_schedule_energy():
    # Energy balance (DESIGN.md, validation): on an adiabatic chain (A 1 = 0, g = 0) the stored
    # heat 1^T M (T - T0) equals the delivered energy. Summing the TR-BDF2 stages gives
    # 1^T M (T_{n+1} - T_n) = h (w p_n + w p_gamma + d p_{n+1}) (column sums of B are 1), exact
    # for power that is constant within every step, so each pulse must add exactly P * width.
    # The probe row is the capacity vector, so the probe reads the stored heat in J (+ const).
    n, count, power, width, period = 8, 2000, 3.0, 0.2, 1.0
    M, A, g, B = chain(n=n, g_amb=0.0, c_source=0.05)
    starts = 0.1 + period * np.arange(count)
    p, bps = pulse_train(power, starts, np.full(count, width))
    ode = LinearOde(M, A, g, B, p, bps)
    heat = sp.csr_array(M.diagonal()[None, :])
    sol = integrate(ode, np.full(n, T_AMB), count * period + 0.5, heat, options(rtol=1e-2))
    assert np.all(np.isin(bps, sol.t))  # bitwise equality of every breakpoint float
    stored = sol.probes[:, 0] - sol.probes[0, 0]
    index = {t: i for i, t in enumerate(sol.t.tolist())}
    per_pulse = stored[[index[t] for t in starts + width]] - stored[[index[t] for t in starts]]
    np.testing.assert_allclose(per_pulse, power * width, rtol=1e-9)  # J, every pulse resolved
    schedule_energy = power * width * count  # J, independent of the stepper
    assert stored[-1] == pytest.approx(schedule_energy, rel=1e-10)


def test_factorizations_are_reused_across_a_200_pulse_train():
    # Periodic pulses repeat the same step sizes (ladder rungs and landing gaps), so the
    # cached factorizations serve every pulse. Stated ratio: factorizations <= 2 % of steps.
    n, count = 50, 200
    M, A, g, B = chain(n=n, c_source=0.05)
    p, bps = pulse_train(3.0, 0.1 + np.arange(count), np.full(count, 0.2))
    ode = LinearOde(M, A, g, B, p, bps)
    sol = integrate(ode, np.full(n, T_AMB), count + 0.5, identity_probes(n), options())
    stats = sol.stats
    assert stats.steps >= 2 * count
    assert stats.factorizations <= 0.03 * stats.steps, stats
    assert stats.solves == 3 * (stats.steps + stats.rejected)
    assert stats.seconds_factor + stats.seconds_solve <= stats.seconds_total


def test_pulse_train_with_a_crowded_cache_stays_exact_and_factors_less():
    # A cache of two factorizations (as on a 1 M DOF board) under a 50-pulse train. The
    # reference is exact: with power constant between breakpoints, u(t + s) = u_inf +
    # expm(J s) (u(t) - u_inf) with J = -M^-1 A (Moler & Van Loan, SIAM Review 45 (2003) 3,
    # the matrix exponential of a linear constant-coefficient system). Stated bound: half a
    # tolerance unit at every pulse edge (measured 0.07). Cost, measured: LRU alone re-factors
    # 952 times for 17 step sizes; equal steps over recurring gaps and two-rung growth bring
    # it to 607 at 1904 steps instead of 1604.
    n, count, power, width = 50, 50, 3.0, 0.2
    M, A, g, B = chain(n=n, c_source=0.05)
    starts = 0.1 + np.arange(count)
    p, bps = pulse_train(power, starts, np.full(count, width))
    ode = LinearOde(M, A, g, B, p, bps)
    J = -np.linalg.solve(M.toarray(), A.toarray())
    u_on = np.linalg.solve(A.toarray(), B.toarray()[:, 0] * power)
    on, off = sl.expm(J * width), sl.expm(J * (1.0 - width))
    u, exact = np.zeros(n), {}
    for start in starts:
        u = u_on + on @ (u - u_on)
        exact[start + width] = u
        u = off @ u
        exact[start + 1.0] = u
    opts = options(cache_size=2, rtol=1e-3, atol=1e-3)
    sol = integrate(ode, np.full(n, T_AMB), count + 0.2, identity_probes(n), opts)
    assert np.all(np.isin(bps, sol.t))  # no pulse skipped
    index = {t: i for i, t in enumerate(sol.t.tolist())}
    rows = [index[t] for t in exact if t in index]
    assert len(rows) == 2 * count - 1  # every edge but the one past the end
    reference = np.array([u for t, u in exact.items() if t in index])
    unit = opts.atol + opts.rtol * np.max(reference)
    assert np.max(np.abs(sol.probes[rows] - T_AMB - reference)) < 0.5 * unit
    unconstrained = integrate(
        ode, np.full(n, T_AMB), count + 0.2, identity_probes(n), options(rtol=1e-3, atol=1e-3)
    )
    assert sol.stats.factorizations <= 700, sol.stats
    assert sol.stats.steps <= 1.5 * unconstrained.stats.steps


def test_crowded_plans_shrink_and_the_last_stretch_lands_in_equal_steps_exactly():
    # Two cached factorizations, 30 pulses (5 ms in 100 ms) and then 57 s without power. The
    # reference is exact, as in the test above (piecewise-constant power: u(t + s) = u_inf +
    # expm(J s)(u(t) - u_inf), Moler & Van Loan 2003). Stated bound: half a tolerance unit at
    # every edge and at the end. Measured: the equal-step plan of the 95 ms gap starts at 5
    # steps and goes to 4 as the estimate allows, and the last stretch ends in 3 equal steps
    # of 14.93 s (the 16.4 s rung and a remainder would be two new matrices).
    n, count, power, width, t_end = 30, 30, 2.0, 0.005, 60.0
    M, A, g, B = chain(n=n, c_source=1.0)
    starts = 0.1 + 0.1 * np.arange(count)
    p, bps = pulse_train(power, starts, np.full(count, width))
    ode = LinearOde(M, A, g, B, p, bps)
    J = -np.linalg.solve(M.toarray(), A.toarray())
    u_on = np.linalg.solve(A.toarray(), B.toarray()[:, 0] * power)
    u, exact, t = np.zeros(n), {}, 0.0
    for start in starts:
        u = sl.expm(J * (start - t)) @ u
        u = u_on + sl.expm(J * width) @ (u - u_on)
        t = start + width
        exact[t] = u
    exact[t_end] = sl.expm(J * (t_end - t)) @ u
    opts = options(cache_size=2, rtol=1e-3, atol=1e-3)
    sol = integrate(ode, np.full(n, T_AMB), t_end, identity_probes(n), opts)
    index = {t: i for i, t in enumerate(sol.t.tolist())}
    assert all(t in index for t in exact)
    reference = np.array(list(exact.values()))
    unit = opts.atol + opts.rtol * np.max(reference)
    rows = [index[t] for t in exact]
    assert np.max(np.abs(sol.probes[rows] - T_AMB - reference)) < 0.5 * unit
    per_gap = [np.sum((sol.t > s + width) & (sol.t <= s + 0.1 + 1e-12)) for s in starts[:-1]]
    assert min(per_gap[2:]) < max(per_gap[:2])  # the plan took fewer steps later
    last = sol.dt[-3:]
    assert np.unique(last).size == 1
    assert last[0] < 16.384
    assert sol.stats.factorizations <= 20, sol.stats


def test_adaptive_steps_come_from_the_ladder_except_landings():
    # Steps not shortened to land on a stop are base * ratio**k (rounded to 40 mantissa bits):
    # with a whole ratio the base is the stops' common unit (0.1 s here: stops 0.3, 1.3, 4,
    # 6.5, 30), otherwise the first step dt_0.
    n = 20
    M, A, g, B = chain(n=n, c_source=0.05)
    p, bps = pulse_train(5.0, [0.3, 4.0], [1.0, 2.5])
    ode = LinearOde(M, A, g, B, p, bps)
    for ratio in (2.0, 3.0, 2.5):
        opts = options(ladder_ratio=ratio, dt_initial=1e-3)
        sol = integrate(ode, np.full(n, T_AMB), 30.0, identity_probes(n), opts)
        ends_at_stop = np.isin(sol.t, np.append(bps, 30.0))
        # a gap between one and two steps is split into halves: the first half is off-ladder
        first_half = np.zeros_like(ends_at_stop)
        first_half[:-1] = ends_at_stop[1:] & np.isclose(sol.dt[:-1], sol.dt[1:], rtol=1e-9)
        free = sol.dt[1:][~(ends_at_stop | first_half)[1:]]
        assert free.size > 20
        base = 0.1 if ratio in (2.0, 3.0) else 1e-3
        k = np.log(free / base) / np.log(ratio)
        np.testing.assert_allclose(k, np.round(k), atol=1e-9)
        assert sol.stats.distinct_dt <= 40


def test_landing_weighs_one_step_of_the_gap_against_a_sum_of_rungs():
    # Cost model of the controller (a step: 3 solves, a factorization: 20 solves). The gap
    # 0.127 s on a 1 ms unit is 64 + 32 + 16 + 8 + 4 + 2 + 1 ms (its binary digits).
    # Nothing factored: one step of the gap (3 + 20) beats seven new rungs (7 x 23).
    # Every rung factored, the gap not: seven cached steps (21) beat one new matrix (23).
    # 3 ms = 2 + 1 ms cached (6) beats one new matrix. A gap met before always gets its own.
    from boardheat.stepping.control import _Controller, _Ladder

    ladder = _Ladder(1e-3, 2.0)
    rungs = {ladder.rung(k) for k in range(12)}

    def controller():
        c = _Controller(StepperOptions(), first=0.128, t_end=10.0, unit=1e-3)
        assert c.h == pytest.approx(0.128)
        return c

    dt, t_new, landing = controller().propose(1.0, 1.127, cached=lambda dt: False)
    assert (dt, t_new, landing) == (pytest.approx(0.127, rel=1e-12), 1.127, True)
    dt, t_new, landing = controller().propose(1.0, 1.127, cached=rungs.__contains__)
    assert (dt, landing) == (ladder.rung(6), False)  # 64 ms, as the cache knows it
    dt, t_new, landing = controller().propose(1.0, 1.003, cached=rungs.__contains__)
    assert (dt, landing) == (ladder.rung(1), False)  # 2 ms
    c = controller()
    c.propose(1.0, 1.127, cached=rungs.__contains__)
    dt, t_new, landing = c.propose(2.0, 2.127, cached=rungs.__contains__)  # recurring gap
    assert (dt, t_new, landing) == (pytest.approx(0.127, rel=1e-12), 2.127, True)


def _pass_over_gap(c, t, t_stop, cached, crowded, err=0.01):
    """Step a controller from t to the stop t_stop, every step accepted; return the steps."""
    steps = []
    while True:
        dt, t_new, landing = c.propose(t, t_stop, cached=cached, crowded=crowded)
        c.accepted(dt, err)
        steps.append(dt)
        t = t_new
        if landing:
            return steps


def test_crowded_cache_covers_a_recurring_gap_with_equal_steps():
    # Cost model of the controller: a step 3 solves, a factorization 20. A 95 ms gap (a pulse
    # train's off time) first taken adaptively from h = 4 ms with the cache crowded: the step
    # grows two rungs at a time (4, 16 ms); the next rung, 64 ms, is not factored and two of
    # it reach the stop, so the last 75 ms are two equal steps (one new matrix instead of
    # 64 ms and then 11 ms): 4 steps, 3 matrices, 72 solves. Met again with the cache
    # crowded, the gap is covered by 4 equal steps of 23.75 ms (12 solves, one matrix kept
    # from period to period). Errors of 1.0 ask for the same step again (0.9 x 23.75 ms), so
    # the plan keeps its 4 steps.
    from boardheat.stepping.control import _Controller

    def nothing(dt):
        return False

    c = _Controller(StepperOptions(), first=0.004, t_end=10.0, unit=1e-3)
    first = _pass_over_gap(c, 0.0, 0.095, nothing, crowded=True)
    np.testing.assert_allclose(first, [0.004, 0.016, 0.0375, 0.0375], rtol=1e-12)
    _pass_over_gap(c, 0.095, 0.1, nothing, crowded=True)  # the 5 ms on time
    c.h = 0.004  # as a restart after the jump would set it
    second = _pass_over_gap(c, 0.1, 0.195, nothing, crowded=True, err=1.0)
    np.testing.assert_allclose(second, [0.02375] * 4, rtol=1e-12)
    assert len(set(second)) == 1  # one matrix: the steps are bitwise equal

    # Not crowded, the same gap is stepped adaptively (ratio-2 rungs) as before.
    c.h = 0.004
    third = _pass_over_gap(c, 0.2, 0.295, nothing, crowded=False)
    assert third[0] == pytest.approx(0.004)
    assert len(set(third)) > 1

    # A rejected step ends the plan: the rest of the gap is adaptive, and the next plan has
    # as many steps as the rejected one asked for: 0.9 * 8^(-1/3) = 0.45 of 23.75 ms, so
    # ceil(95 / 10.69) = 9 steps of 10.56 ms.
    c.h = 0.004
    dt, t_new, landing = c.propose(0.3, 0.395, cached=nothing, crowded=True)
    assert dt == pytest.approx(0.02375, rel=1e-12)
    assert c.rejects(0.3, dt, 8.0)
    dt, _, _ = c.propose(0.3, 0.395, cached=nothing, crowded=True)
    assert dt == pytest.approx(0.008, rel=1e-12)  # the ladder rung below 10.69 ms
    c.accepted(dt, 0.01)
    rest = _pass_over_gap(c, 0.308, 0.395, nothing, crowded=True)
    assert len(set(rest)) > 1
    c.h = 0.004
    np.testing.assert_allclose(
        _pass_over_gap(c, 0.4, 0.495, nothing, crowded=True), [0.095 / 9] * 9, rtol=1e-12
    )
    # Those 9 steps had errors of 0.01, which allow 5 x 10.56 ms: 2 steps would do, but a
    # plan never again goes below the 4 steps that failed, so the next one has 5.
    c.h = 0.004
    np.testing.assert_allclose(
        _pass_over_gap(c, 0.5, 0.595, nothing, crowded=True), [0.019] * 5, rtol=1e-12
    )


def test_crowded_plan_takes_fewer_steps_when_the_estimate_allows():
    # The next step the estimate allows after a step of error e is 0.9 e^(-1/3) times it
    # (Hairer, Norsett & Wanner, Solving ODEs I, 2nd ed., Sec. II.4, eq. 4.13, recalled from
    # memory; local error of order 3).
    # A plan of 4 x 23.75 ms with e = 0.216 allows 1.5 x 23.75 = 35.6 ms, so the next pass of
    # the same gap takes ceil(95 / 35.6) = 3 equal steps; with e = 1 nothing changes.
    from boardheat.stepping.control import _Controller

    def nothing(dt):
        return False

    c = _Controller(StepperOptions(), first=0.004, t_end=10.0, unit=1e-3)
    _pass_over_gap(c, 0.0, 0.095, nothing, crowded=True)
    _pass_over_gap(c, 0.095, 0.1, nothing, crowded=True)
    c.h = 0.004
    planned = _pass_over_gap(c, 0.1, 0.195, nothing, crowded=True, err=0.216)
    np.testing.assert_allclose(planned, [0.02375] * 4, rtol=1e-12)
    _pass_over_gap(c, 0.195, 0.2, nothing, crowded=True)
    c.h = 0.004
    fewer = _pass_over_gap(c, 0.2, 0.295, nothing, crowded=True, err=1.0)
    np.testing.assert_allclose(fewer, [0.095 / 3] * 3, rtol=1e-12)
    _pass_over_gap(c, 0.295, 0.3, nothing, crowded=True)
    c.h = 0.004
    same = _pass_over_gap(c, 0.3, 0.395, nothing, crowded=True, err=1.0)
    np.testing.assert_allclose(same, [0.095 / 3] * 3, rtol=1e-12)


def test_crowded_cache_meets_a_near_stop_in_equal_steps_of_one_new_matrix():
    # With the cache crowded, a step h = 64 ms that is not factored and a stop 150 ms away
    # (at most 4 of them): three equal steps of 50 ms, one new matrix, where rungs would take
    # 64 ms twice and then 22 ms, two. No step exceeds h. Not when h is factored already, not
    # with the cache roomy, not when the stop is more than 4 steps away.
    from boardheat.stepping.control import _Controller

    def controller():
        c = _Controller(StepperOptions(), first=0.016, t_end=10.0, unit=1e-3)
        c.h = 0.064
        return c

    steps = _pass_over_gap(controller(), 1.0, 1.15, lambda dt: False, crowded=True, err=1.0)
    np.testing.assert_allclose(steps, [0.05] * 3, rtol=1e-12)
    assert len(set(steps)) == 1

    def sixty_four(dt):
        return dt == pytest.approx(0.064)

    dt, _, _ = controller().propose(1.0, 1.15, cached=sixty_four, crowded=True)
    assert dt == pytest.approx(0.064)
    dt, _, _ = controller().propose(1.0, 1.15, cached=lambda dt: False, crowded=False)
    assert dt == pytest.approx(0.064)
    dt, _, _ = controller().propose(1.0, 1.3, cached=lambda dt: False, crowded=True)
    assert dt == pytest.approx(0.064)

    # A rejected step ends the approach; the rest of the gap is adaptive from the shrunk step.
    c = controller()
    dt, _, _ = c.propose(1.0, 1.15, cached=lambda dt: False, crowded=True)
    assert dt == pytest.approx(0.05)
    assert c.rejects(1.0, dt, 8.0)  # asks for 0.45 x 50 ms: the 16 ms rung
    dt, _, _ = c.propose(1.0, 1.15, cached=lambda dt: True, crowded=True)
    assert dt == pytest.approx(0.016)
    # ... and it sets no plan for the gap: only a failed plan of a recurring gap does that
    record = c._gaps[c._interval.key]
    assert (record.count, record.fewest) == (0, 1)


def test_crowded_approach_takes_a_cached_step_that_divides_the_gap():
    # Cost model of the controller (TR-BDF2: 3 solves a step; a factorization counted as
    # factor_cost = 20 solves here). h = 4 ms, not factored, 10 ms to the stop: the approach's
    # own plan is 3 steps of 3.33 ms, a new matrix, 9 + 20 = 29 solves. A cached 2 ms divides
    # the gap: 5 steps, 15 solves, so it is taken. A cached 1 ms (10 steps, 30 solves) is not.
    from boardheat.stepping.control import _Controller

    def controller():
        c = _Controller(StepperOptions(), first=0.004, t_end=10.0, unit=1e-3, factor_cost=20.0)
        c.h = 0.004
        return c

    def holding(*steps):
        return lambda dt: any(dt == pytest.approx(s, rel=1e-9) for s in steps)

    steps = _pass_over_gap(controller(), 0.015, 0.025, holding(0.002), crowded=True, err=1.0)
    np.testing.assert_allclose(steps, [0.002] * 5, rtol=1e-9)
    steps = _pass_over_gap(controller(), 0.015, 0.025, holding(0.001), crowded=True, err=1.0)
    np.testing.assert_allclose(steps, [0.01 / 3] * 3, rtol=1e-9)
    # a cached step that does not divide the gap (3 ms) is of no use; nor is one longer than h
    steps = _pass_over_gap(controller(), 0.015, 0.025, holding(0.003, 0.005), crowded=True)
    np.testing.assert_allclose(steps, [0.01 / 3] * 3, rtol=1e-9)
    # the approach's own step cached: it is taken, the fewest steps
    own = holding(0.01 / 3, 0.002)
    steps = _pass_over_gap(controller(), 0.015, 0.025, own, crowded=True, err=1.0)
    np.testing.assert_allclose(steps, [0.01 / 3] * 3, rtol=1e-9)


def test_crowded_plan_is_dropped_when_adaptive_steps_cost_less():
    # With every matrix cached, the adaptive pass over the gap cost 4 steps = 12 solves, and
    # 4 equal steps would cost the same: no plan (ties go to the adaptive pass).
    from boardheat.stepping.control import _Controller

    def everything(dt):
        return True

    c = _Controller(StepperOptions(), first=0.004, t_end=10.0, unit=1e-3)
    first = _pass_over_gap(c, 0.0, 0.095, everything, crowded=True)
    _pass_over_gap(c, 0.095, 0.1, everything, crowded=True)
    c.h = 0.004
    assert _pass_over_gap(c, 0.1, 0.195, everything, crowded=True) == pytest.approx(first)


@pytest.mark.parametrize(
    ("dt", "err", "crowded", "expected"),
    [
        (0.001, 1e-4, True, 0.004),  # 5x: rung 4 ms, an even rung
        (0.002, 1e-4, True, 0.004),  # 5x: rung 8 ms is odd, so 4 ms
        (0.004, 0.07, True, 0.004),  # 2.2x: rung 8 ms is odd, so the step stays
        (0.004, 0.07, False, 0.008),  # not crowded: every rung
        (0.008, 8.0, True, 0.002),  # shrinking is never rounded further down
    ],
)
def test_crowded_cache_grows_the_step_two_rungs_at_a_time(dt, err, crowded, expected):
    # Rungs 1 ms * 2**k; with the cache crowded a growing step goes to even k only (the ladder
    # of ratio 4), so a climb needs half as many matrices. 0.9 * err^(-1/3), clipped to
    # [0.2, 5], is the controller's growth factor (see _Controller.accepted).
    from boardheat.stepping.control import _Controller

    c = _Controller(StepperOptions(), first=dt, t_end=100.0, unit=1e-3)
    assert c.h == pytest.approx(dt)
    c.propose(0.0, 50.0, cached=lambda step: False, crowded=crowded)
    c.accepted(dt, err)
    assert c.h == pytest.approx(expected, rel=1e-12)


# --- outputs -----------------------------------------------------------------------------------


def test_snapshots_peaks_and_progress():
    n = 20
    M, A, g, B = chain(n=n, c_source=0.05)
    p, bps = pulse_train(5.0, [1.0], [3.0])
    ode = LinearOde(M, A, g, B, p, bps)
    P = sp.csr_array(np.eye(n)[[0, n - 1]])  # probes: heated end, far end
    snapshot_times = [0.0, 0.123456789, 2.5, 10.0]
    calls = []
    sol = integrate(
        ode,
        np.full(n, T_AMB),
        10.0,
        P,
        options(),
        snapshot_times=snapshot_times,
        peak_rows=[0, 1],
        progress=lambda t, steps: calls.append((t, steps)),
    )
    assert set(sol.snapshots) == set(snapshot_times)
    for t in snapshot_times:
        i = int(np.flatnonzero(sol.t == t)[0])  # landed on exactly
        np.testing.assert_array_equal(P @ sol.snapshots[t], sol.probes[i])
    for row in (0, 1):
        t_peak, field_at_peak = sol.peak_fields[row]
        i = int(np.argmax(sol.probes[:, row]))
        assert t_peak == sol.t[i]
        assert (P @ field_at_peak)[row] == sol.probes[i, row]
    assert sol.peak_fields[0][0] == 4.0  # the heated end peaks when the power goes off
    np.testing.assert_array_equal(sol.final, sol.snapshots[10.0])
    assert calls[-1] == (10.0, sol.stats.steps)
    assert sol.t.shape == sol.dt.shape == sol.err.shape == (sol.stats.steps + 1,)
    with pytest.raises(ValueError, match="read-only"):
        sol.probes[0, 0] = 0.0


def test_step_size_floor_warns():
    # A tolerance no step above dt_min can meet: the stepper finishes and warns.
    M, A, g, B = chain(n=5, c_source=0.05)
    p, bps = pulse_train(5.0, [0.0], [math.inf])
    ode = LinearOde(M, A, g, B, p, bps[:1])
    opts = options(rtol=0.0, atol=1e-12, dt_min=0.05)
    with pytest.warns(StepperWarning, match="dt_min"):
        sol = integrate(ode, np.full(5, T_AMB), 1.0, identity_probes(5), opts)
    assert sol.stats.dt_floor_hits > 0
    assert sol.t[-1] == 1.0


def test_invalid_input_raises_solver_error_naming_the_field():
    M, A, g, B = chain(n=4)
    ode = LinearOde(M, A, g, B, lambda t, side: np.zeros(1))
    P = identity_probes(4)
    with pytest.raises(SolverError, match="ladder_ratio"):
        StepperOptions(ladder_ratio=1.0)
    with pytest.raises(SolverError, match="ladder_ratio"):
        StepperOptions(ladder_ratio=8.0)  # could never grow a rung: it stalled at 112 k steps
    with pytest.raises(SolverError, match="fixed_dt"):
        StepperOptions(method="backward_euler")
    with pytest.raises(SolverError, match="atol"):
        StepperOptions(atol=0.0)
    with pytest.raises(SolverError, match="T0"):
        integrate(ode, np.zeros(3), 1.0, P)
    with pytest.raises(SolverError, match="snapshot_times"):
        integrate(ode, np.full(4, T_AMB), 1.0, P, snapshot_times=[2.0])
    with pytest.raises(SolverError, match=r"LinearOde\.g"):
        LinearOde(M, A, np.zeros(3), B, lambda t, side: np.zeros(1))
    with pytest.raises(SolverError, match="breakpoints"):
        LinearOde(M, A, g, B, lambda t, side: np.zeros(1), np.array([2.0, 1.0]))
    bad_power = LinearOde(M, A, g, B, lambda t, side: np.zeros(2))
    with pytest.raises(SolverError, match=r"power\(t=0\.0"):
        integrate(bad_power, np.full(4, T_AMB), 1.0, P)
    with pytest.raises(SolverError, match="max_steps"):
        integrate(ode, np.full(4, T_AMB), 1.0, P, options(fixed_dt=0.01, max_steps=10))
    with pytest.raises(SolverError, match="not installed|splu"):
        make_factorization(A, "nonexistent")


# --- linear solvers ------------------------------------------------------------------------------


def _random_spd_m_matrix(n, rng):
    """Sparse SPD M-matrix: random graph Laplacian plus a positive diagonal (W/K)."""
    rows = rng.integers(0, n, 6 * n)
    cols = rng.integers(0, n, 6 * n)
    keep = rows != cols
    w = rng.uniform(0.1, 10.0, keep.sum())
    L = sp.coo_array((w, (rows[keep], cols[keep])), shape=(n, n)).tocsr()
    L = L + L.T
    lap = sp.diags_array(np.asarray(L.sum(axis=1)).ravel()) - L
    return (lap + sp.diags_array(rng.uniform(0.01, 1.0, n))).tocsr()


def test_solve_steady_matches_spsolve():
    # Reference: scipy.sparse.linalg.spsolve (SuperLU with its default ordering).
    rng = np.random.default_rng(SEED)
    n, n_src = 400, 3
    A = _random_spd_m_matrix(n, rng)
    B = sp.random_array((n, n_src), density=0.05, rng=rng, format="csr")
    ode = LinearOde(sp.eye_array(n), A, rng.uniform(0.0, 5.0, n), B, lambda t, s: np.zeros(n_src))
    power = rng.uniform(0.0, 2.0, n_src)
    T = solve_steady(ode, power)
    expected = spsolve(A.tocsc(), ode.g + B @ power)
    np.testing.assert_allclose(T, expected, rtol=1e-10)


@pytest.mark.parametrize(
    ("backend", "module"),
    [("splu", None), ("cholmod", "sksparse.cholmod"), ("pardiso", "pypardiso")],
)
def test_backends_agree(backend, module):
    if module is not None:
        pytest.importorskip(module)
    rng = np.random.default_rng(SEED + 1)
    K = _random_spd_m_matrix(300, rng)
    rhs = rng.normal(size=300)
    x = make_factorization(K, backend).solve(rhs)
    np.testing.assert_allclose(x, spsolve(K.tocsc(), rhs), rtol=1e-9, atol=1e-12)
    # a factorization dropped above frees its memory; a new one must not be disturbed by that
    K2 = K + sp.diags_array(rng.uniform(0.5, 1.0, 300))
    factor = make_factorization(K2, backend)
    np.testing.assert_allclose(factor.solve(rhs), spsolve(K2.tocsc(), rhs), rtol=1e-9)
    assert factor.backend == backend
    assert backend in available_backends()


@pytest.mark.parametrize(
    ("backend", "module"), [("cholmod", "sksparse.cholmod"), ("pardiso", "pypardiso")]
)
def test_integrate_agrees_across_backends(backend, module):
    # Same pulse response from every direct solver (reference: the SuperLU run).
    pytest.importorskip(module)
    n = 30
    M, A, g, B = chain(n=n, c_source=0.05)
    p, bps = pulse_train(5.0, [0.5], [2.0])
    ode = LinearOde(M, A, g, B, p, bps)
    times = [1.0, 2.5, 4.0]
    # fixed steps: identical step sequences and one or two factorizations (a multi-threaded
    # back end spends most of its time starting up on a 30-DOF system)
    runs = [
        integrate(ode, np.full(n, T_AMB), 4.0, identity_probes(n), opts, times)
        for opts in (options(fixed_dt=0.05), StepperOptions(backend=backend, fixed_dt=0.05))
    ]
    assert runs[1].stats.backend == backend
    assert runs[1].stats.factorizations <= 2
    for t in times:
        np.testing.assert_allclose(runs[1].snapshots[t], runs[0].snapshots[t], rtol=0, atol=1e-10)


def test_auto_backend_prefers_pardiso_then_cholmod_then_splu():
    # the order measured on board matrices (available_backends' docstring)
    names = available_backends()
    order = [b for b in ("pardiso", "cholmod", "splu") if b in names]
    assert names == order
    # PARDISO's set-up outweighs its speed on small systems: auto keeps SuperLU below
    # PARDISO_MIN_DOFS rows
    small = make_factorization(sp.eye_array(3, format="csr"), "auto").backend
    assert small == ("splu" if names[0] == "pardiso" else names[0])
    big = make_factorization(sp.eye_array(PARDISO_MIN_DOFS, format="csr"), "auto").backend
    assert big == names[0]


@pytest.mark.parametrize("backend", ["splu", "pardiso", "cholmod"])
def test_cached_factorizations_of_m_plus_dt_a_solve_exactly(backend):
    # Every cached factorization solves (M + c dt A) x = b as scipy's spsolve does, also when
    # a cache of two evicts and re-factors (with PARDISO and CHOLMOD the sparsity pattern is
    # analysed once for every dt; PARDISO reuses released slots). Reference:
    # scipy.sparse.linalg.spsolve.
    from boardheat.stepping.solvers import _FactorCache

    if backend != "splu" and backend not in available_backends():
        pytest.skip(f"{backend} is not installed")
    rng = np.random.default_rng(SEED + 7)
    n = 400
    A = _random_spd_m_matrix(n, rng)
    M = sp.diags_array(rng.uniform(0.5, 2.0, n)).tocsr()
    rhs = rng.normal(size=n)
    cache = _FactorCache(M, A, 0.3, backend, size=2)
    for dt in (0.1, 0.2, 0.4, 0.1, 0.8, 1.6, 0.2, 0.2):
        x = cache.get(dt).solve(rhs)
        K = (M + (0.3 * dt) * A).tocsc()
        np.testing.assert_allclose(K @ x, rhs, rtol=0, atol=1e-12 * np.abs(rhs).max())
        np.testing.assert_allclose(x, spsolve(K, rhs), rtol=1e-10, atol=1e-14)
    assert cache.counters.factorizations == 7  # only the last 0.2 was still cached
    if backend != "splu":
        assert cache._family is not None
        assert cache._family.analyses == 1


def test_pardiso_counts_the_bytes_of_each_factorization_once():
    # Every factorization of one analysed pattern holds the same memory, 8 bytes per stored
    # entry of L. For a dense n x n SPD matrix L has n(n+1)/2 entries (Golub & Van Loan,
    # Matrix Computations, 4th ed., Sec. 4.2), and a supernodal code stores at most the
    # n x n block: the count lies between the two (n = 60: 14 640 and 28 800 bytes, plus the
    # values). Summing PARDISO's iparm[16] instead would report twice that for the second.
    from boardheat.stepping.pardiso import PardisoPattern

    if "pardiso" not in available_backends():
        pytest.skip("the MKL runtime is not installed")
    n = 60
    X = np.random.default_rng(SEED + 11).normal(size=(n, n))
    upper = sp.triu(sp.csr_array(X @ X.T + n * np.eye(n)), format="csr")
    pattern = PardisoPattern(upper, maxfct=3)
    first, second = pattern.factor(upper.data), pattern.factor(2.0 * upper.data)
    values = 8 * upper.nnz
    assert first.nbytes == second.nbytes
    assert 8 * n * (n + 1) // 2 <= first.nbytes - values <= 8 * (n * n + n)


def test_cholmod_measures_the_bytes_of_its_factor():
    # scikit-sparse does not report the size of L, so the CHOLMOD family measures it as the
    # growth of the resident set over its first factorization. A supernodal factor stores L's
    # columns in dense blocks, so it holds at least L's entries (8 B each) and, measured here,
    # 1.34x that on a 2-D five-point Laplacian; a bound of 2x catches a measurement that
    # counts something else. The 400 x 400 grid makes L (about 60 MiB) too large to come from
    # memory the allocator recycles (glibc maps blocks above 32 MiB fresh).
    from boardheat.stepping.solvers import _CholmodFamily

    pytest.importorskip("sksparse.cholmod")
    m = 400
    T = sp.diags_array([-np.ones(m - 1), 2.0 * np.ones(m), -np.ones(m - 1)], offsets=[-1, 0, 1])
    A = (sp.kron(T, sp.eye_array(m)) + sp.kron(sp.eye_array(m), T)).tocsr()
    family = _CholmodFamily(sp.eye_array(m * m, format="csr"), A)
    first = family.factor(0.5)
    entries = first._factor.L().nnz
    assert 8 * entries <= first.nbytes <= 2 * 8 * entries
    assert family.factor(2.0).nbytes == first.nbytes  # one analysis: one size
    assert family.analyses == 1


def test_pardiso_keeps_one_thread_count_per_handle():
    # Measured here: a numerical factorization on fewer MKL threads than the analysis used
    # kills the process with a segmentation fault. The handle therefore sets its own thread
    # count before every call, whatever MKL was set to meanwhile. Run in a child process so
    # that a regression fails this test instead of killing the test run.
    import subprocess
    import sys

    if "pardiso" not in available_backends():
        pytest.skip("the MKL runtime is not installed")
    script = """
import numpy as np, scipy.sparse as sp
from boardheat.stepping.pardiso import PardisoPattern, set_threads
n = 60  # 3 600 unknowns: at 900 the crash did not occur
grid = sp.diags_array([-np.ones(n - 1), 4.0 * np.ones(n), -np.ones(n - 1)], offsets=[-1, 0, 1])
K = sp.kronsum(grid, grid).tocsr()  # 2-D five-point Laplacian plus 2I, SPD
upper = sp.triu(K, format="csr")
upper.sort_indices()
pattern = PardisoPattern(upper, maxfct=2, threads=2)
first = pattern.factor(upper.data)
set_threads(1)  # what another handle (or a busier machine) would leave behind
second = pattern.factor(2.0 * upper.data)
b = np.ones(K.shape[0])
assert np.allclose(K @ first.solve(b), b)
assert np.allclose(2.0 * (K @ second.solve(b)), b)
print("ok")
"""
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, (done.returncode, done.stderr)  # -11: segmentation fault
    assert done.stdout.strip() == "ok"


def test_pardiso_reports_a_matrix_that_is_not_positive_definite():
    from boardheat.stepping.pardiso import PardisoPattern, factor_once

    if "pardiso" not in available_backends():
        pytest.skip("the MKL runtime is not installed")
    indefinite = sp.csr_array(np.array([[1.0, 2.0], [2.0, 1.0]]))  # eigenvalues 3 and -1
    with pytest.raises(SolverError, match="PARDISO phase 22: error -4"):
        factor_once(indefinite)
    factor = factor_once(sp.eye_array(3, format="csr") * 2.0)
    np.testing.assert_allclose(factor.solve(np.ones(3)), 0.5)
    factor.release()
    with pytest.raises(SolverError, match="after release"):
        factor.solve(np.ones(3))
    pattern = PardisoPattern(sp.eye_array(3, format="csr"), maxfct=1)
    kept = pattern.factor(np.ones(3))
    with pytest.raises(SolverError, match="slots are in use"):
        pattern.factor(np.ones(3))
    kept.release()
    np.testing.assert_allclose(pattern.factor(np.full(3, 4.0)).solve(np.ones(3)), 0.25)


def _layered_board_matrices(n_dofs):
    """(K, M) of the layered board of scripts/bench_solvers.py: W/K and J/K, CSR."""
    spec = importlib.util.spec_from_file_location(
        "bench_solvers", Path(__file__).parents[1] / "scripts" / "bench_solvers.py"
    )
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    _, K, M = bench.layered_board(n_dofs)
    return sp.csr_array(K), sp.csr_array(M)


def _needs_pardiso():
    if "pardiso" not in available_backends():
        pytest.skip("the MKL runtime is not installed")


def test_single_precision_factors_hold_half_the_memory_and_refined_solves_are_exact():
    # Mixed-precision iterative refinement (Moler, J. ACM 14 (1967) 316-321; Higham, Accuracy
    # and Stability of Numerical Algorithms, 2nd ed., 2002, Ch. 12): factors in single
    # precision (unit roundoff 6e-8), residuals in double; each step shrinks the error by
    # about kappa(K) * 6e-8 until it reaches double-precision level. Reference:
    # scipy.sparse.linalg.spsolve. On a layered board (copper and FR-4) from a 1 ms step to
    # a 1000 s one: one single-precision solve alone is off by more than 1e-9 (relative, max
    # norm), so the test sees whether refinement happens; refined, within 1e-7 (the stopping
    # rule aims at 1e-8 and its estimate of the error is measured to be up to 3x low).
    from boardheat.stepping.pardiso import PardisoPattern
    from boardheat.stepping.solvers import _PardisoFamily, _Refined

    _needs_pardiso()
    K, M = _layered_board_matrices(20_000)
    family = _PardisoFamily(M, K, maxfct=2, single=True)
    rhs = np.random.default_rng(SEED + 13).normal(size=K.shape[0])
    for s in (1e-3, 1.0, 60.0, 1000.0):
        factor = family.factor(s)
        assert isinstance(factor, _Refined)
        exact = spsolve((M + s * K).tocsc(), rhs)
        scale = np.abs(exact).max()
        rough = factor._factor.solve(rhs)
        assert np.abs(rough - exact).max() > 1e-9 * scale
        refined = factor.solve(rhs)
        assert np.abs(refined - exact).max() <= 1e-7 * scale
        assert not factor.double
        assert 1 <= factor.refinements <= 2
        factor.release()
    # Bytes: the same analysis stores the same entries of L, 4 bytes each instead of 8
    upper = sp.triu(M + K, format="csr")
    upper.sort_indices()
    single = PardisoPattern(upper, maxfct=1, single=True)
    double = PardisoPattern(upper, maxfct=1)
    single.analyse(upper.data)
    double.analyse(upper.data)
    assert 2 * single.factor_bytes == double.factor_bytes > 0


def test_a_solve_given_a_tolerance_refines_only_as_far_as_it_needs():
    # With an absolute tolerance the refined factorization stops refining once its predicted
    # error is within it, and after its first (always refined) solve skips refinement when
    # ten times the single-precision error measured so far is within it. Reference: spsolve.
    from boardheat.stepping.solvers import _PardisoFamily

    _needs_pardiso()
    K, M = _layered_board_matrices(20_000)
    family = _PardisoFamily(M, K, maxfct=1, single=True)
    factor = family.factor(60.0)
    rng = np.random.default_rng(SEED + 19)
    first = rng.normal(size=K.shape[0])
    factor.solve(first, tolerance=1.0)
    assert factor.refinements == 1  # measures the single-precision error
    exact = spsolve((M + 60.0 * K).tocsc(), first)
    rough_error = np.abs(factor._factor.solve(first) - exact).max()
    for tolerance, refined in ((100.0 * rough_error, 0), (0.0, 1)):
        before = factor.refinements
        rhs = rng.normal(size=K.shape[0])
        x = factor.solve(rhs, tolerance=tolerance)
        assert factor.refinements - before >= refined
        if refined == 0:
            assert factor.refinements == before
        error = np.abs(x - spsolve((M + 60.0 * K).tocsc(), rhs)).max()
        assert error <= max(tolerance, 1e-7 * np.abs(x).max())


def test_refinement_that_cannot_converge_falls_back_to_double(caplog):
    # The tridiagonal 1-D Laplacian tridiag(-1, 2, -1) of order n has eigenvalues
    # 2 - 2 cos(k pi / (n + 1)) (Strang, Linear Algebra and Its Applications, 4th ed., Sec. 7.4,
    # recalled from memory), so kappa ~ 4 (n + 1)^2 / pi^2: 3.6e8 at n = 30 000, beyond
    # 1 / u_single = 1.7e7. Refinement cannot converge; the solve must still be right
    # (reference: spsolve; double precision leaves kappa * 1e-16 ~ 4e-8), via a double-precision
    # factorization of the same matrix, with a warning.
    from boardheat.stepping.solvers import _PardisoFamily

    _needs_pardiso()
    n = 30_000
    T = sp.diags_array(
        [-np.ones(n - 1), 2.0 * np.ones(n), -np.ones(n - 1)], offsets=[-1, 0, 1]
    ).tocsr()
    M = sp.eye_array(n, format="csr") * 1e-9
    family = _PardisoFamily(M, T, maxfct=2, single=True)
    factor = family.factor(1.0)
    rhs = np.random.default_rng(SEED + 17).normal(size=n)
    with caplog.at_level("WARNING", logger="boardheat.stepping.solvers"):
        x = factor.solve(rhs)
    exact = spsolve((M + T).tocsc(), rhs)
    assert np.abs(x - exact).max() <= 1e-6 * np.abs(exact).max()
    assert factor.double
    assert "refactored in double precision" in caplog.text
    np.testing.assert_allclose(factor.solve(2.0 * rhs), 2.0 * x, rtol=1e-12)  # double from now on
    assert factor.nbytes > 0


def test_auto_precision_is_mixed_only_where_memory_crowds_double_factorizations():
    # "auto" halves the factorizations (single precision, refined solves) when the memory
    # budget would hold at most CROWDED_SLOTS of them in double, and not when the count limit
    # is what holds the cache small or memory is plentiful.
    from boardheat.stepping.solvers import CROWDED_SLOTS, _FactorCache

    _needs_pardiso()
    K, M = _layered_board_matrices(6_000)
    probe = _FactorCache(M, K, 0.3, "pardiso", size=40, budget=2**40)
    assert probe.precision == "double"
    double_bytes = probe._expected_bytes
    tight = int((CROWDED_SLOTS + 0.5) * double_bytes)
    mixed = _FactorCache(M, K, 0.3, "pardiso", size=40, budget=tight, precision="auto")
    assert mixed.precision == "mixed"
    assert mixed._expected_bytes < 0.55 * double_bytes
    assert not mixed.crowded  # seven single-precision factorizations fit
    roomy = _FactorCache(M, K, 0.3, "pardiso", size=40, budget=10 * double_bytes, precision="auto")
    assert roomy.precision == "double"
    counted = _FactorCache(M, K, 0.3, "pardiso", size=2, budget=tight, precision="auto")
    assert counted.precision == "double"
    assert counted.crowded
    rhs = np.ones(K.shape[0])
    x = mixed.get(0.5).solve(rhs)
    np.testing.assert_allclose(x, spsolve((M + 0.15 * K).tocsc(), rhs), rtol=1e-7)
    assert mixed.refinements >= 1
    with pytest.raises(SolverError, match="precision 'mixed' with the 'splu' back end"):
        _FactorCache(M, K, 0.3, "splu", size=4, precision="mixed")
    with pytest.raises(SolverError, match="StepperOptions.precision"):
        StepperOptions(precision="quad")


def test_mixed_precision_integration_takes_the_same_steps_as_double():
    # Each solve errs by at most SOLVE_TOLERANCE * atol = 1e-6 K here (refinement stops, or
    # is skipped, once the predicted error is within it), so the step controller sees the
    # same error estimates and takes the same steps, and the probe temperatures agree within
    # 1e-5 K (measured on the demo board, atol 0.02 K: 1.1e-6 K). A 5 W pulse on a layered
    # board, both runs on PARDISO.
    _needs_pardiso()
    K, M = _layered_board_matrices(8_000)
    n = K.shape[0]
    source = n // 2
    B = sp.csr_array((np.ones(1), ([source], [0])), shape=(n, 1))
    p, bps = pulse_train(5.0, [0.5], [2.0])
    ode = LinearOde(M, K, K @ np.full(n, T_AMB), B, p, bps)
    P = sp.csr_array((np.ones(1), ([0], [source])), shape=(1, n))
    runs = {
        precision: integrate(
            ode,
            np.full(n, T_AMB),
            20.0,
            P,
            StepperOptions(backend="pardiso", precision=precision, rtol=1e-3, atol=1e-3),
        )
        for precision in ("double", "mixed")
    }
    double, mixed = runs["double"], runs["mixed"]
    assert mixed.stats.precision == "mixed"
    assert double.stats.precision == "double"
    # the first solve of every factorization is refined (it measures the single-precision
    # error); with atol = 1e-3 K some later ones need not be (on the demo board, atol 0.02 K,
    # 80 of 765 solves are refined)
    assert mixed.stats.factorizations <= mixed.stats.refinements < mixed.stats.solves
    assert double.stats.refinements == 0
    np.testing.assert_array_equal(mixed.t, double.t)
    np.testing.assert_allclose(mixed.probes, double.probes, rtol=0, atol=1e-5)
    assert double.probes.max() - T_AMB > 1.0  # the pulse heats the source node


def test_singular_matrix_raises_solver_error():
    singular = sp.csr_array(np.array([[1.0, -1.0], [-1.0, 1.0]]))
    with pytest.raises(SolverError, match="make_factorization"):
        make_factorization(singular, "splu").solve(np.ones(2))


# --- benchmark (never in the default run) -----------------------------------------------------


@pytest.mark.bench
def test_stepping_overhead_on_a_50k_dof_board():
    # Target from the design brief: wall time <= 1.3 x (factorization + solve time).
    spec = importlib.util.spec_from_file_location(
        "bench_solvers", Path(__file__).parents[1] / "scripts" / "bench_solvers.py"
    )
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    _, K, M = bench.layered_board(50_000)
    n = K.shape[0]
    source = n // 2 - (n // 2) % len(bench.STACKUP)  # a top-copper node near the middle
    B = sp.csr_array((np.ones(1), ([source], [0])), shape=(n, 1))
    p, bps = pulse_train(2.0, [0.0], [5.0])
    ode = LinearOde(M, K, K @ np.full(n, T_AMB), B, p, bps)
    P = sp.csr_array((np.ones(1), ([0], [source])), shape=(1, n))
    sol = integrate(ode, np.full(n, T_AMB), 10.0, P, StepperOptions(cache_size=32))
    stats = sol.stats
    assert stats.seconds_total <= 1.3 * (stats.seconds_factor + stats.seconds_solve), stats


@pytest.mark.parametrize(
    ("load", "now", "forced", "expected"),
    [
        (0.1, 1.0, "", 2),  # a quiet load average is taken as it is (no sampling)
        (1.8, 0.0, "", 2),  # a run just ended: the load average still reads busy, /proc idle
        (1.8, 1.0, "", 1),  # another job holds a core now
        (1.8, None, "", 1),  # no /proc/stat: the load average decides
        (1.8, 0.0, "3", 3),  # BOARDHEAT_THREADS overrides
    ],
)
def test_solver_threads_trust_the_present_over_the_load_average(
    monkeypatch, load, now, forced, expected
):
    from boardheat.stepping import solvers

    monkeypatch.setattr(solvers.os, "cpu_count", lambda: 2)
    monkeypatch.setattr(solvers.os, "getloadavg", lambda: (load, load, load))
    monkeypatch.setattr(solvers, "busy_cores_now", lambda: now)
    monkeypatch.setenv("BOARDHEAT_THREADS", forced)
    assert solvers.solver_threads() == expected


@pytest.mark.skipif(not Path("/proc/stat").exists(), reason="needs Linux /proc/stat")
def test_busy_cores_now_sees_another_process_but_not_this_one():
    # A child process spinning on one core is counted (about 1.0); this process's own threads
    # are not: a thread of ours spinning during the window must not add a core.
    import subprocess
    import sys
    import threading

    from boardheat.stepping.solvers import busy_cores_now

    child = subprocess.Popen([sys.executable, "-c", "while True: pass"])
    try:
        readings = [busy_cores_now(0.2) for _ in range(3)]
    finally:
        child.kill()
        child.wait()
    assert max(readings) >= 0.6, readings  # stated: one busy core reads 0.6 or more

    stop = threading.Event()

    def spin():
        while not stop.is_set():
            pass

    spinner = threading.Thread(target=spin)
    spinner.start()
    try:
        own = [busy_cores_now(0.2) for _ in range(3)]
    finally:
        stop.set()
        spinner.join()
    assert min(own) < 0.5, own  # our own spinning thread is subtracted


def test_memory_budget_follows_the_environment(monkeypatch):
    from boardheat.stepping.solvers import memory_budget

    monkeypatch.setenv("BOARDHEAT_CACHE_GIB", "1.5")
    assert memory_budget() == 3 * 1024**3 // 2
    for bad in ("8GB", "0", "-1", "nan", "inf"):
        monkeypatch.setenv("BOARDHEAT_CACHE_GIB", bad)
        with pytest.raises(SettingError, match="BOARDHEAT_CACHE_GIB=.*expected a number of GiB"):
            memory_budget()
    monkeypatch.delenv("BOARDHEAT_CACHE_GIB")
    assert 0 < memory_budget()


def test_factorization_cache_respects_its_memory_budget():
    # a budget smaller than one factorization keeps exactly the newest one, never fewer
    from boardheat.stepping.solvers import _FactorCache

    n = 2000
    K = sp.diags_array(
        [np.full(n - 1, -1.0), np.full(n, 2.5), np.full(n - 1, -1.0)], offsets=[-1, 0, 1]
    ).tocsr()
    M = sp.eye_array(n, format="csr")
    cache = _FactorCache(M, K, 0.5, "splu", size=40, budget=1)
    for dt in (0.1, 0.2, 0.4, 0.8):
        cache.get(dt)
    assert cache.counters.factorizations == 4
    assert cache.evictions_for_memory == 3
    cache.get(0.8)  # still cached
    assert cache.counters.factorizations == 4
    cache.get(0.1)  # evicted: factored again
    assert cache.counters.factorizations == 5
    # a budget of two and a half factorizations holds two, counting the one being made
    cache = _FactorCache(M, K, 0.5, "splu", size=40, budget=1)
    cache.get(0.1)
    one = cache._store[0.1].nbytes
    cache = _FactorCache(M, K, 0.5, "splu", size=40, budget=int(2.5 * one))
    for dt in (0.1, 0.2, 0.4, 0.8):
        cache.get(dt)
        assert len(cache._store) <= 2
    assert cache.evictions_for_memory == 2
    cache.get(0.4)
    assert cache.counters.factorizations == 4


@pytest.mark.parametrize("backend", ["splu", "pardiso"])
def test_a_cache_that_holds_few_factorizations_is_crowded_from_the_start(backend):
    # CROWDED_SLOTS = 3: a cache that holds at most three, by its count limit or by its
    # memory budget, is crowded before any eviction; one that holds more only after one.
    # PARDISO knows the size of a factorization from its analysis, before the first one;
    # SuperLU only after it.
    from boardheat.stepping.solvers import CROWDED_SLOTS, _FactorCache

    if backend not in available_backends():
        pytest.skip(f"{backend} is not installed")
    assert CROWDED_SLOTS == 3
    n = 6000  # above PARDISO_MIN_DOFS
    K = sp.diags_array(
        [np.full(n - 1, -1.0), np.full(n, 2.5), np.full(n - 1, -1.0)], offsets=[-1, 0, 1]
    ).tocsr()
    M = sp.eye_array(n, format="csr")
    assert _FactorCache(M, K, 0.5, backend, size=3, budget=2**40).crowded
    roomy = _FactorCache(M, K, 0.5, backend, size=40, budget=2**40)
    assert not roomy.crowded
    roomy.get(0.1)
    one = roomy._store[0.1].nbytes
    assert not roomy.crowded
    tight = _FactorCache(M, K, 0.5, backend, size=40, budget=int(3.5 * one))
    assert tight.crowded is (backend == "pardiso")  # three fit: known at once with PARDISO
    tight.get(0.1)
    assert tight.crowded
    four = _FactorCache(M, K, 0.5, backend, size=40, budget=int(4.5 * one))
    for k, dt in enumerate((0.1, 0.2, 0.4, 0.8, 1.6)):
        four.get(dt)
        assert four.crowded is (k == 4)  # crowded once the fifth has freed the first
    assert four.evictions == 1
