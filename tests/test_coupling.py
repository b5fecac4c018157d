"""Junction networks coupled into the board model, against independent lumped ODEs."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from boardheat.junction import FosterNetwork, foster_to_cauer, foster_zth
from boardheat.run import RunOptions, run_check
from tests.conftest import make_board, raw_board

pytestmark = pytest.mark.gmsh

# an idealised, extremely conductive plate (k = 1e5 W/(m K)): Bi = h L / k ~ 1e-7 and the
# spreading drop under the footprint ~ P ln(r2/r1) / (2 pi k t) < 0.01 K, so the board is one
# lumped node
PLATE = {"k_inplane_w_per_mk": 1e5, "k_through_w_per_mk": 1e5,
         "density_kg_per_m3": 2700.0, "specific_heat_j_per_kgk": 900.0}  # fmt: skip
CAUER_R = [0.8, 2.5, 4.0]  # K/W, junction outward
CAUER_C = [2e-4, 4e-3, 0.05]  # J/K


def _board(junction, h, power, duration):
    raw = raw_board()
    raw["materials"] = {"plate": PLATE}
    raw["stackup"] = [
        {"name": "plate", "kind": "dielectric", "thickness_mm": 1.0, "material": "plate"}
    ]
    raw["outline"] = {"polygon_mm": [[0, 0], [20, 0], [20, 20], [0, 20]]}
    raw["environment"] = {"ambient_c": 25.0, "h_top_w_per_m2k": h, "h_bottom_w_per_m2k": h,
                          "h_edge_w_per_m2k": h}  # fmt: skip
    raw["part"] = [{"refdes": "Q1", "body_mm": [5.0, 5.0, 1.0], "x_mm": 10.0, "y_mm": 10.0,
                    "body_heat_capacity_j_per_k": 0.0, "tj_max_c": 150.0, "junction": junction,
                    "power": power}]  # fmt: skip
    raw["run"] = {"duration_s": duration, "rtol": 1e-5, "atol_k": 1e-4}
    return make_board(raw)


def test_cauer_ladder_coupled_to_a_lumped_board_matches_scipy_ode():
    """Junction of a 3-stage Cauer ladder on a lumped board: FE model vs an independent ODE.

    Lumped network (Incropera & DeWitt sec. 5.2 for the board node; the ladder is the Cauer
    network itself): C_i dT_i/dt = flows through R_{i-1}, R_i; the last resistance ends on the
    board node, C_b dT_b/dt = q_in - hA (T_b - T_a). Integrated with scipy's Radau at rtol
    1e-10. Tolerance: 0.5 % of the junction rise at every recorded time after 1 ms.
    """
    power = {"steps": [[0.0, 3.0]], "pulses": [{"start_s": 2.0, "width_s": 0.05,
                                                 "power_w": 12.0}]}  # fmt: skip
    board = _board({"cauer": {"r_k_per_w": CAUER_R, "c_j_per_k": CAUER_C}}, 25.0, power, 6.0)
    result = run_check(board, RunOptions())
    t = result.traces.t
    tj = result.traces.tj[:, 0]

    h_a = 25.0 * (2 * 0.02**2 + 4 * 0.02 * 0.001)
    c_b = 2700.0 * 900.0 * 0.02**2 * 0.001
    r = np.array(CAUER_R)
    c = np.array([*CAUER_C, c_b])

    def rhs(time, temp):
        p = 3.0 + (12.0 if 2.0 <= time < 2.05 else 0.0)
        flow = np.empty(4)
        q = (temp[:-1] - temp[1:]) / r  # flow from node i to node i+1
        flow[0] = p - q[0]
        flow[1:3] = q[:-1] - q[1:]
        flow[3] = q[-1] - h_a * (temp[3] - 298.15)
        return flow / c

    y = np.full(4, 298.15)
    pieces = [(0.0, 2.0), (2.0, 2.05), (2.05, 6.0)]
    ref_t, ref_tj = [], []
    for a, b in pieces:
        inside = t[(t >= a) & (t <= b)]
        sol = solve_ivp(rhs, (a, b), y, method="Radau", rtol=1e-10, atol=1e-10,
                        t_eval=inside, first_step=1e-7)  # fmt: skip
        ref_t.append(sol.t)
        ref_tj.append(sol.y[0])
        y = solve_ivp(rhs, (a, b), y, method="Radau", rtol=1e-10, atol=1e-10).y[:, -1]
    ref = dict(zip(np.concatenate(ref_t), np.concatenate(ref_tj), strict=True))
    rise_err = [abs(tj[i] - ref[ti]) / (ref[ti] - 298.15) for i, ti in enumerate(t)
                if ti > 1e-3 and ti in ref]  # fmt: skip
    assert len(rise_err) > 20
    assert max(rise_err) < 5e-3, f"max relative error {max(rise_err):.2e}"


def test_foster_network_on_an_ideal_heatsink_follows_datasheet_zth():
    """A Foster network on a board held at ambient: Tj - Ta = P Zth(t) (datasheet definition).

    Zth(t) = sum R_i (1 - exp(-t/tau_i)) is the Foster step response (JEDEC JESD51-14 style
    transient curve; formula recalled from memory). The board is pinned near ambient by
    h = 1e6 W/(m^2 K); the residual board rise P / (h A) = 0.1 % of the junction rise is
    included in the tolerance (1 %).
    """
    foster = {"r_k_per_w": [0.3, 1.2, 2.0], "tau_s": [1e-3, 2e-2, 0.4]}
    board = _board({"foster": foster}, 1e6, 2.0, 2.0)
    result = run_check(board, RunOptions())
    t, tj = result.traces.t, result.traces.tj[:, 0]
    network = FosterNetwork(np.array(foster["r_k_per_w"]), np.array(foster["tau_s"]))
    expected = 2.0 * foster_zth(network, t)
    late = t > 1e-4
    assert np.max(np.abs((tj[late] - 298.15) - expected[late]) / expected[late]) < 0.01
    ladder = foster_to_cauer(network)
    assert result.parts[0].junction_model == "foster"
    assert float(np.sum(ladder.R)) == pytest.approx(3.5, rel=1e-12)


def test_steady_junction_adds_the_ladder_resistance():
    """Steady state: Tj = T_board + P sum(R) (series resistances, Ohm's-law analogy)."""
    board = _board({"cauer": {"r_k_per_w": CAUER_R, "c_j_per_k": CAUER_C}}, 25.0, 2.0, 1.0)
    result = run_check(board, RunOptions(steady=True))
    part = result.parts[0]
    assert part.tj_peak - part.board_peak == pytest.approx(2.0 * sum(CAUER_R), rel=1e-6)
