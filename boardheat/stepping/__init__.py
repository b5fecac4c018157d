"""Integrate the board's semi-discrete heat balance M T' + A T = g + B p(t) in time.

Stage 6 of the data flow. Input: the capacity matrix M (J/K), the conductance matrix A (W/K),
the constant load g (W), the source-spreading matrix B and a power schedule p(t) (W) with its
breakpoints. Output: probe temperature histories (K), requested fields, per-probe peak fields
and solver statistics. Time is advanced with TR-BDF2 (gamma = 2 - sqrt(2); Bank et al. 1985,
Hosea & Shampine 1996) under local error control, with step sizes drawn from a binary ladder
so that few matrices M + d dt A need factoring, and with steps that land exactly on every
breakpoint and snapshot time. Fixed-step backward Euler is kept as the baseline, and steady
states A T = g + B p are solved directly with the same sparse direct back ends.

Modules: :mod:`~boardheat.stepping.problem` (types), :mod:`~boardheat.stepping.solvers`
(back ends, factorization cache), :mod:`~boardheat.stepping.control` (step sizes),
:mod:`~boardheat.stepping.integrate` (the time loop).
"""

from boardheat.stepping.control import GAMMA
from boardheat.stepping.integrate import integrate
from boardheat.stepping.problem import (
    BackendName,
    FloatArray,
    LinearOde,
    PowerFunction,
    Side,
    Solution,
    SolverStats,
    StepperOptions,
)
from boardheat.stepping.solvers import (
    Factorization,
    available_backends,
    make_factorization,
    solve_steady,
)

__all__ = [
    "GAMMA",
    "BackendName",
    "Factorization",
    "FloatArray",
    "LinearOde",
    "PowerFunction",
    "Side",
    "SolverStats",
    "Solution",
    "StepperOptions",
    "available_backends",
    "integrate",
    "make_factorization",
    "solve_steady",
]
