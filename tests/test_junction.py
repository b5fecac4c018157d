"""Tests of boardheat.junction: Foster and Cauer networks, their step responses, board-file syntax.

Every physics check names its source. References marked "recalled" are recalled from memory and
were not re-checked against the printed text.
"""

import re
import time

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg

from boardheat.errors import BoardFileError
from boardheat.junction import (
    MAX_FOSTER_STAGES,
    CauerLadder,
    FosterNetwork,
    cauer_zth,
    foster_to_cauer,
    foster_zth,
    ladder_matrices,
    parse_junction,
)

SEED = 7919
T_CHECK = np.logspace(-7, 3, 201)  # s, the window the brief asks for
T_ODE = np.logspace(-7, 3, 61)  # s, fewer points where each one costs an ODE or expm solve
WHERE = "board.toml: part[U3].junction"


def spread_foster(n, seed, low=-6.2, high=-0.7):
    """Foster network whose time constants span 10**low..10**high s (5.5 decades when n >= 2)."""
    rng = np.random.default_rng(seed)
    exponents = rng.uniform(low, high, n)
    if n >= 2:
        exponents[:2] = low, high
    return FosterNetwork(R=rng.uniform(0.02, 1.5, n), tau=10.0 ** np.sort(exponents))


def ladder_flow_rhs(R, C):
    """Right-hand side of the ladder ODE written node by node (independent of ladder_matrices).

    1 W enters node 0; R[i] carries (T[i] - T[i+1]) / R[i] outward; the board beyond R[-1] is
    held at 0. Returns (rhs, jacobian); the system is linear, so the Jacobian is exact.
    """
    n = len(R)

    def rhs(_t, T):
        outflow = (T - np.append(T[1:], 0.0)) / R
        inflow = np.concatenate(([1.0], outflow[:-1]))
        return (inflow - outflow) / C

    forcing = rhs(0.0, np.zeros(n))
    jac = np.column_stack([rhs(0.0, e) - forcing for e in np.eye(n)])
    return (lambda _t, T: jac @ T + forcing), jac


def integrate(rhs, jac, n, times, rtol=1e-9):
    """Integrate from T = 0 at t = 0 with scipy's Radau (stiff, L-stable, order 5)."""
    solution = scipy.integrate.solve_ivp(
        rhs,
        (0.0, times[-1]),
        np.zeros(n),
        method="Radau",
        t_eval=times,
        rtol=rtol,
        atol=1e-14,
        jac=jac,
        first_step=1e-10,
    )
    assert solution.success, solution.message
    return solution.y


def van_loan_junction_rise(R, C, times):
    """Junction rise per watt from block matrix exponentials.

    C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE Trans.
    Automatic Control 23 (1978), Theorem 1 (recalled): expm([[A, b], [0, 0]] t) holds
    int_0^t exp(A s) ds b in its last column, which is T(t) for T' = A T + b, T(0) = 0.
    """
    _, jac = ladder_flow_rhs(np.asarray(R), np.asarray(C))
    n = len(R)
    block = np.zeros((n + 1, n + 1))
    block[:n, :n] = jac
    block[0, n] = 1.0 / C[0]
    return np.array([scipy.linalg.expm(block * t)[0, n] for t in times])


def ladder_foster_spectrum(ladder):
    """Time constants and residues of a ladder's junction impedance, sorted by time constant.

    Independent of the module: G is written out by hand, and the modes come from
    scipy.linalg.eigh. Z(s) = e0^T (G + s C)^-1 e0 = sum_k phi_k[0]^2 / (lambda_k + s), so the
    ladder realises the Foster network tau_k = 1/lambda_k, R_k = phi_k[0]^2 / lambda_k
    (modal expansion of a symmetric RC network; Guillemin, "Synthesis of Passive Networks",
    1957, RC driving-point functions, recalled).
    """
    g = 1.0 / ladder.R
    n = len(g)
    G = np.diag(g)
    for i in range(n - 1):
        G[i + 1, i + 1] += g[i]
        G[i, i + 1] = G[i + 1, i] = -g[i]
    rates, modes = scipy.linalg.eigh(G, np.diag(ladder.C))
    order = np.argsort(1.0 / rates)
    return (1.0 / rates)[order], (modes[0] ** 2 / rates)[order]


def naive_float_cauer(R, tau):
    """Cauer expansion by the same polynomial long division, in plain float64 (test only)."""
    D, N = [1.0], [0.0]
    for r, t in zip(R, tau, strict=True):
        grown_N = [a + t * b for a, b in zip([*N, 0.0], [0.0, *N], strict=True)]
        N = [a + r * b for a, b in zip(grown_N, [*D, 0.0], strict=True)]
        D = [a + t * b for a, b in zip([*D, 0.0], [0.0, *D], strict=True)]
    numerator, denominator = D, N[:-1]
    resistances, capacities = [], []
    while True:
        c = numerator[-1] / denominator[-1]
        rest = [a - c * b for a, b in zip(numerator, [0.0, *denominator], strict=True)][:-1]
        r = denominator[-1] / rest[-1]
        after = [a - r * b for a, b in zip(denominator, rest, strict=True)][:-1]
        capacities.append(c)
        resistances.append(r)
        if not after:
            return np.array(resistances), np.array(capacities)
        numerator, denominator = rest, after


# --- Foster -> Cauer ------------------------------------------------------------------------


@pytest.mark.parametrize("n", [1, 2, 4, 6, 8, 10, 12])
def test_converted_ladder_reproduces_foster_step_response(n):
    # Source: the Foster sum is the analytic step response of the Foster network (one RC
    # section per term); a Cauer ladder synthesised from the same Z(s) has the same step
    # response (Cauer 1926, recalled). Tolerance 1e-9 relative (brief: 1e-6; observed <= 1e-14).
    foster = spread_foster(n, SEED + n)
    ladder = foster_to_cauer(foster)
    assert ladder.stages == n
    assert np.all(ladder.R > 0)
    assert np.all(ladder.C > 0)
    np.testing.assert_allclose(cauer_zth(ladder, T_CHECK), foster_zth(foster, T_CHECK), rtol=1e-9)


@pytest.mark.parametrize("n", [1, 2, 4, 6, 8])
def test_converted_ladder_has_the_foster_poles_and_residues(n):
    # Source: uniqueness of the driving-point function -- the ladder realises Z(s) exactly iff
    # its modes (independent scipy.linalg.eigh) are the Foster tau_i with residues R_i
    # (Guillemin 1957, recalled). Tolerances: 1e-12 on tau, 1e-10 on R (observed <= 2e-14).
    foster = spread_foster(n, SEED + n)
    taus, residues = ladder_foster_spectrum(foster_to_cauer(foster))
    np.testing.assert_allclose(taus, foster.tau, rtol=1e-12)
    np.testing.assert_allclose(residues, foster.R, rtol=1e-10)


def test_converted_ladder_matches_independent_ode_and_matrix_exponential():
    # Independent step responses of the converted 8-stage ladder (node-by-node ODE, written in
    # this file): scipy solve_ivp (Radau, rtol 1e-9) and the Van Loan (1978) block exponential
    # (scipy.linalg.expm). Tolerances: 1e-8 relative for the ODE (rtol 1e-9 per step, error
    # accumulated over 10 decades; observed 1e-10), 1e-9 for expm (observed 1e-12).
    foster = spread_foster(8, SEED + 8)
    ladder = foster_to_cauer(foster)
    rhs, jac = ladder_flow_rhs(ladder.R, ladder.C)
    junction = integrate(rhs, jac, ladder.stages, T_ODE)[0]
    reference = foster_zth(foster, T_ODE)
    np.testing.assert_allclose(junction, reference, rtol=1e-8)
    np.testing.assert_allclose(cauer_zth(ladder, T_ODE), junction, rtol=1e-8)
    expm_rise = van_loan_junction_rise(ladder.R, ladder.C, T_ODE)
    np.testing.assert_allclose(expm_rise, reference, rtol=1e-9)
    np.testing.assert_allclose(cauer_zth(ladder, T_ODE), expm_rise, rtol=1e-9)


@pytest.mark.parametrize("n", [2, 5, 8, 12])
def test_ladder_keeps_total_resistance_and_impedance_moments(n):
    # Exact identities of Z(s) = sum R_i / (1 + s tau_i) = e0^T (G + s C)^-1 e0:
    # s -> 0: Z(0) = sum R_i = sum of ladder R (steady state);
    # s -> inf: s Z(s) -> sum R_i / tau_i = 1 / C_1 (junction node alone, short-time limit);
    # -dZ/ds at 0: sum R_i tau_i = sum_k C_k rho_k^2, rho_k = resistance from node k to the
    # board (first moment; W. C. Elmore, J. Appl. Phys. 19 (1948) 55, recalled).
    # Tolerance 1e-13 relative: only the final float64 rounding of 2n elements (observed 2e-16).
    foster = spread_foster(n, SEED + 100 + n)
    ladder = foster_to_cauer(foster)
    assert ladder.R.sum() == pytest.approx(foster.R.sum(), rel=1e-13)
    assert 1.0 / ladder.C[0] == pytest.approx(np.sum(foster.R / foster.tau), rel=1e-13)
    rho = np.cumsum(ladder.R[::-1])[::-1]
    assert np.sum(ladder.C * rho**2) == pytest.approx(np.sum(foster.R * foster.tau), rel=1e-13)


def test_one_stage_converts_to_r_and_tau_over_r():
    # Analytic: R / (1 + s tau) is one node C = tau / R behind R. Exact arithmetic rounds once,
    # as float division does, so the results are bit-identical.
    foster = FosterNetwork(R=np.array([0.37]), tau=np.array([2.9e-3]))
    ladder = foster_to_cauer(foster)
    assert ladder.R.tolist() == [0.37]
    assert ladder.C.tolist() == [2.9e-3 / 0.37]


def test_equal_time_constants_are_merged():
    # Analytic: R_a / (1 + s tau) + R_b / (1 + s tau) = (R_a + R_b) / (1 + s tau). Values are
    # binary-exact so the merged network must give bit-identical elements.
    repeated = FosterNetwork(R=np.array([0.5, 2.0, 0.75]), tau=np.array([1e-3, 0.1, 1e-3]))
    merged = FosterNetwork(R=np.array([1.25, 2.0]), tau=np.array([1e-3, 0.1]))
    ladder = foster_to_cauer(repeated)
    assert ladder.stages == 2
    assert np.array_equal(ladder.R, foster_to_cauer(merged).R)
    assert np.array_equal(ladder.C, foster_to_cauer(merged).C)
    np.testing.assert_allclose(
        cauer_zth(ladder, T_CHECK), foster_zth(repeated, T_CHECK), rtol=1e-12
    )


def test_float_continued_fraction_goes_wrong_where_exact_arithmetic_does_not():
    # Source: Székely, Microelectronics Journal 28 (1997) (recalled): the Foster-to-Cauer
    # division needs far more than double precision. Measured here: with time constants a
    # decade or more apart, float64 loses only a few digits at 8 stages; it fails when time
    # constants cluster (as in networks fitted with closely spaced terms). This 8-stage
    # network has all tau within a factor 1.3. Python float arithmetic is IEEE 754 and the
    # float version below uses no BLAS, so the outcome is deterministic.
    tau = 1e-6 * np.array([1.0, 1.0075, 1.0083, 1.019, 1.05, 1.18, 1.23, 1.30])
    R = np.array([0.8, 0.3, 1.2, 0.5, 1.9, 0.7, 1.1, 0.4])
    foster = FosterNetwork(R=R, tau=tau)
    exact = foster_to_cauer(foster)
    float_R, float_C = naive_float_cauer(R.tolist(), tau.tolist())

    worst = max(np.max(np.abs(float_R / exact.R - 1)), np.max(np.abs(float_C / exact.C - 1)))
    assert worst > 0.3, f"float64 expansion unexpectedly close: {worst:.2e}"
    # Independent judge (modes by scipy eigh): the exact ladder realises the Foster network
    # (tolerances 1e-12 on tau, 1e-9 on R; observed 2e-16 and 4e-13), the float one does not.
    taus, residues = ladder_foster_spectrum(exact)
    np.testing.assert_allclose(taus, tau, rtol=1e-12)
    np.testing.assert_allclose(residues, R, rtol=1e-9)
    if np.all(float_R > 0) and np.all(float_C > 0):
        _, float_residues = ladder_foster_spectrum(CauerLadder(R=float_R, C=float_C))
        assert np.max(np.abs(float_residues / R - 1)) > 0.1
    np.testing.assert_allclose(cauer_zth(exact, T_CHECK), foster_zth(foster, T_CHECK), rtol=1e-9)


def test_ten_stage_conversion_is_fast():
    # Brief: well under a second for 10 stages (measured 0.03 s; 12 stages 0.07 s).
    foster = spread_foster(10, SEED + 10)
    start = time.perf_counter()
    foster_to_cauer(foster)
    assert time.perf_counter() - start < 1.0


# --- step responses -------------------------------------------------------------------------


def test_foster_zth_matches_series_rc_sections_ode():
    # Independent: each Foster term is a parallel R_i, C_i = tau_i / R_i section carrying the
    # same 1 W, C_i T_i' = 1 - T_i / R_i; Zth = sum T_i. Integrated with solve_ivp (Radau,
    # rtol 1e-9); tolerance 1e-8 relative (observed 2e-10).
    foster = spread_foster(4, SEED + 200)
    C = foster.tau / foster.R
    jac = np.diag(-1.0 / foster.tau)
    T = integrate(lambda _t, T: jac @ T + 1.0 / C, jac, 4, T_ODE)
    np.testing.assert_allclose(foster_zth(foster, T_ODE), T.sum(axis=0), rtol=1e-8)


def test_zth_limits_and_shapes():
    # Analytic limits of a step response: 0 before and at the step, sum R at t = inf, and
    # t / C_1 for t << every time constant (only the junction capacity has charged). Small-t
    # tolerance 1e-6: the next term is O(t / tau_min) = 1e-6 here.
    ladder = CauerLadder(R=np.array([0.3, 0.9, 2.0]), C=np.array([1e-4, 2e-3, 0.5]))
    foster = FosterNetwork(R=np.array([0.4, 1.1]), tau=np.array([1e-4, 0.2]))
    times = np.array([[-1.0, 0.0], [1e-12, np.inf]])
    for zth, total, initial_slope in (
        (cauer_zth(ladder, times), 3.2, 1.0 / 1e-4),
        (foster_zth(foster, times), 1.5, 0.4 / 1e-4 + 1.1 / 0.2),
    ):
        assert zth.shape == (2, 2)
        assert zth[0].tolist() == [0.0, 0.0]
        assert zth[1, 1] == pytest.approx(total, rel=1e-12)
        assert zth[1, 0] == pytest.approx(1e-12 * initial_slope, rel=1e-6)
    with pytest.raises(ValueError, match="NaN"):
        cauer_zth(ladder, np.array([1.0, np.nan]))
    with pytest.raises(ValueError, match="NaN"):
        foster_zth(foster, np.array([np.nan]))


# --- ladder matrices ------------------------------------------------------------------------


def test_ladder_matrices_follow_kirchhoff():
    # Kirchhoff's current law: G is symmetric; uniform temperature drives heat only through
    # R[-1], so G @ 1 = g_out e_last. Exact in floating point for these values (1e-15 abs).
    ladder = CauerLadder(R=np.array([0.25, 0.5, 2.0, 4.0]), C=np.array([1e-4, 1e-3, 0.1, 2.0]))
    C, G, g_out = ladder_matrices(ladder)
    assert g_out == 0.25
    assert C.tolist() == ladder.C.tolist()
    assert C.flags.writeable
    np.testing.assert_array_equal(G, G.T)
    np.testing.assert_allclose(G @ np.ones(4), [0.0, 0.0, 0.0, 0.25], atol=1e-15)
    np.testing.assert_array_equal(np.diag(G, 1), -1.0 / ladder.R[:-1])
    assert np.all(np.linalg.eigvalsh(G) > 0)


def test_ladder_matrices_ode_reproduces_cauer_zth():
    # C T' + G T = e0 (1 W at the junction, board at 0) integrated by solve_ivp (Radau,
    # rtol 1e-9) must reproduce the eigen-decomposition result. Tolerance 1e-8 relative
    # (observed 1e-10).
    rng = np.random.default_rng(SEED + 300)
    ladder = CauerLadder(R=rng.uniform(0.05, 2.0, 5), C=10.0 ** rng.uniform(-5.0, 0.0, 5))
    C, G, _ = ladder_matrices(ladder)
    jac = -G / C[:, None]
    forcing = np.zeros(5)
    forcing[0] = 1.0 / C[0]
    T = integrate(lambda _t, T: jac @ T + forcing, jac, 5, T_ODE)
    np.testing.assert_allclose(cauer_zth(ladder, T_ODE), T[0], rtol=1e-8)


# --- validation and parsing -----------------------------------------------------------------


def test_networks_store_read_only_arrays():
    ladder = CauerLadder(R=[1.0, 2.0], C=(0.1, 0.2))
    foster = FosterNetwork(R=np.array([1.0]), tau=np.array([1e-3]))
    for array in (ladder.R, ladder.C, foster.R, foster.tau):
        assert array.dtype == np.float64
        with pytest.raises(ValueError, match="read-only"):
            array[0] = 5.0


@pytest.mark.parametrize(
    ("build", "message"),
    [
        (lambda: CauerLadder(R=[1.0, -2.0], C=[1.0, 1.0]), "CauerLadder.R[1]: found -2.0"),
        (lambda: CauerLadder(R=[1.0], C=[1.0, 1.0]), "CauerLadder: found 1 values in R and 2"),
        (lambda: CauerLadder(R=[], C=[]), "CauerLadder.R: found an empty list"),
        (lambda: FosterNetwork(R=[1.0], tau=[np.nan]), "FosterNetwork.tau[0]: found nan"),
        (lambda: FosterNetwork(R=[1.0], tau=[0.0]), "FosterNetwork.tau[0]: found 0.0"),
        (
            lambda: FosterNetwork(R=[1.0] * 13, tau=np.logspace(-6, 0, 13)),
            f"FosterNetwork: found 13 stages, expected 1 to {MAX_FOSTER_STAGES}",
        ),
        (lambda: FosterNetwork(R=np.ones((2, 2)), tau=[1.0]), "FosterNetwork.R: found array"),
    ],
)
def test_invalid_networks_are_rejected(build, message):
    with pytest.raises(BoardFileError, match=re.escape(message)):
        build()


def test_parse_junction_builds_networks():
    assert parse_junction(None, WHERE) is None
    ladder = parse_junction({"cauer": {"r_k_per_w": [0.5, 2], "c_j_per_k": [1e-3, 0.2]}}, WHERE)
    assert isinstance(ladder, CauerLadder)
    assert ladder.R.tolist() == [0.5, 2.0]
    assert ladder.C.tolist() == [1e-3, 0.2]
    foster = parse_junction({"foster": {"tau_s": [1e-4, 0.1], "r_k_per_w": [0.3, 1.2]}}, WHERE)
    assert isinstance(foster, FosterNetwork)
    assert foster.R.tolist() == [0.3, 1.2]
    assert foster.tau.tolist() == [1e-4, 0.1]


def _foster(r, tau):
    return {"foster": {"r_k_per_w": r, "tau_s": tau}}


@pytest.mark.parametrize(
    ("spec", "message"),
    [
        ([0.5, 1.0], f"{WHERE}: found [0.5, 1.0] (list), expected a table"),
        ({"rjc": 1.0}, f"{WHERE}: unknown key 'rjc', expected 'cauer' or 'foster'"),
        ({}, f"{WHERE}: found no keys, expected exactly one key"),
        (
            {"cauer": {}, "foster": {}},
            f"{WHERE}: found 'cauer', 'foster', expected exactly one key",
        ),
        ({"foster": [1.0]}, f"{WHERE}.foster: found [1.0] (list), expected a table"),
        (
            {"foster": {"r_k_per_w": [1.0], "tau_ms": [1.0]}},
            f"{WHERE}.foster: unknown key 'tau_ms', expected 'r_k_per_w' and 'tau_s'",
        ),
        ({"cauer": {"r_k_per_w": [1.0]}}, f"{WHERE}.cauer: missing key 'c_j_per_k'"),
        (_foster(1.0, [1.0]), f"{WHERE}.foster.r_k_per_w: found 1.0 (float), expected a list"),
        (_foster([1.0], []), f"{WHERE}.foster.tau_s: found an empty list"),
        (_foster([1.0, "2"], [1.0, 2.0]), f"{WHERE}.foster.r_k_per_w[1]: found '2' (str)"),
        (_foster([1.0], [True]), f"{WHERE}.foster.tau_s[0]: found True (bool)"),
        (_foster([1.0, 0.0], [1.0, 2.0]), f"{WHERE}.foster.r_k_per_w[1]: found 0.0, expected a"),
        (_foster([1.0], [-1e-3]), f"{WHERE}.foster.tau_s[0]: found -0.001, expected a positive"),
        (_foster([float("inf")], [1.0]), f"{WHERE}.foster.r_k_per_w[0]: found inf"),
        (_foster([1.0], [10**400]), f"{WHERE}.foster.tau_s[0]: found 1000"),
        (
            _foster([1.0, 2.0], [1.0]),
            f"{WHERE}.foster: found 2 values in r_k_per_w and 1 in tau_s, expected one of each",
        ),
        (
            _foster([1.0] * 13, np.logspace(-6, 0, 13).tolist()),
            f"{WHERE}.foster: found 13 stages, expected 1 to 12",
        ),
        (
            {"cauer": {"r_k_per_w": [1.0], "c_j_per_k": [1.0, 2.0]}},
            f"{WHERE}.cauer: found 1 values in r_k_per_w and 2 in c_j_per_k",
        ),
    ],
)
def test_parse_junction_errors_name_the_field(spec, message):
    with pytest.raises(BoardFileError, match=re.escape(message)):
        parse_junction(spec, WHERE)
