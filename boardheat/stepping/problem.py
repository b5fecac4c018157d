"""Problem, options and result types of the time stepper (see :mod:`boardheat.stepping`)."""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

from boardheat.errors import SolverError

FloatArray = npt.NDArray[np.float64]
Side = Literal["left", "right"]
PowerFunction = Callable[[float, Side], FloatArray]
BackendName = Literal["auto", "splu", "cholmod", "pardiso"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class LinearOde:
    """Semi-discrete heat balance M T' + A T = g + B p(t), every term in watts.

    Attributes
    ----------
    M : (n, n) sparse, J/K
        Heat capacity matrix, symmetric positive definite (usually diagonal: row-sum lumped).
    A : (n, n) sparse, W/K
        Conductance matrix (conduction, convection, contacts), symmetric positive definite.
    g : (n,) float ndarray, W
        Constant load, e.g. the convective terms h·S·T_ambient.
    B : (n, n_src) sparse, dimensionless
        Column j spreads the watts of source j over the DOFs (column sums are 1).
    power : callable (t [s], side) -> (n_src,) float ndarray, W
        Source powers at time t; ``side`` picks the one-sided limit at a breakpoint.
    breakpoints : (k,) float ndarray, s
        Sorted times where p(t) or p'(t) is discontinuous.
    """

    M: Any
    A: Any
    g: FloatArray
    B: Any
    power: PowerFunction
    breakpoints: FloatArray = field(default_factory=lambda: np.zeros(0))

    def __post_init__(self) -> None:
        M = sp.csr_array(self.M, dtype=np.float64)
        A = sp.csr_array(self.A, dtype=np.float64)
        n = M.shape[0]
        if M.shape != (n, n) or A.shape != (n, n):
            raise SolverError(
                f"LinearOde: M has shape {M.shape} and A has shape {A.shape}; "
                "expected both square and of equal size"
            )
        g = np.array(self.g, dtype=np.float64)
        if g.shape != (n,):
            raise SolverError(f"LinearOde.g: shape {g.shape}; expected ({n},) watts")
        B = sp.csr_array(self.B, dtype=np.float64)
        if B.ndim != 2 or B.shape[0] != n:
            raise SolverError(f"LinearOde.B: shape {B.shape}; expected ({n}, n_src)")
        bp = np.array(self.breakpoints, dtype=np.float64).reshape(-1)
        if not np.all(np.isfinite(bp)) or np.any(np.diff(bp) < 0.0):
            raise SolverError("LinearOde.breakpoints: expected finite times sorted ascending")
        g.setflags(write=False)
        bp.setflags(write=False)
        for name, value in (("M", M), ("A", A), ("g", g), ("B", B), ("breakpoints", bp)):
            object.__setattr__(self, name, value)

    @property
    def n(self) -> int:
        """Number of unknowns (DOFs)."""
        return int(self.M.shape[0])

    @property
    def n_src(self) -> int:
        """Number of heat sources (columns of B)."""
        return int(self.B.shape[1])


@dataclass(frozen=True)
class StepperOptions:
    """Settings of :func:`integrate`; times in s, tolerances in K.

    The error norm of one step is ``max_i |e_i| / (atol + rtol * r_i)`` over every DOF, where
    ``e`` is the local error estimate and ``r_i`` the larger of the rises |T_i − T_ref,i| at the
    start and end of the step. The reference ``t_ref`` (K) defaults to the initial field T0, so
    ``rtol`` acts on the temperature rise, not on the absolute ~300 K. The maximum over all
    DOFs (not an RMS, not probes only) keeps a small hot spot from hiding behind a cool board.

    Attributes
    ----------
    method : {"trbdf2", "backward_euler"}
        Adaptive (or fixed-step) TR-BDF2, or fixed-step backward Euler (needs ``fixed_dt``).
    rtol, atol : float
        Relative tolerance on the rise (dimensionless) and absolute tolerance (K).
    t_ref : float or None, K
        Reference temperature of the rise; None uses the initial field.
    dt_initial, dt_min, dt_max : float, s
        First step (None: starting-step heuristic) and bounds of the adaptive step.
    fixed_dt : float or None, s
        Fixed-step mode: each interval between stops is cut into equal steps <= fixed_dt.
    ladder_ratio : float, in (1, 4]
        Adaptive steps are dt_0 * ladder_ratio**k (k integer): dt_0 is the stops' common
        decimal unit for a whole ratio (2, 3, 4), else the first step. At most 4: a step grows
        by at most 5x, so with a larger ratio it could never reach the next rung.
    restart_dt : float or None, s
        First step after a jump in power; None learns it from the previous jump.
    backend : {"auto", "splu", "cholmod", "pardiso"}
        Sparse direct solver (see :func:`make_factorization`).
    max_steps : int
        Limit on attempted steps (accepted + rejected).
    cache_size : int
        Number of factorizations kept (least recently used one evicted first).
    precision : {"auto", "double", "mixed"}
        Precision of the factorizations. "mixed" (PARDISO only) holds them in single precision,
        half the memory and about half the time of a factorization, and refines every solve
        in double until its error is below 1e-8 of the solution or a thousandth of ``atol``.
        "auto" takes "mixed" with PARDISO when memory would hold at most ``CROWDED_SLOTS`` (3)
        double factorizations (about a million DOFs on 24 GiB), else "double".
    """

    method: Literal["trbdf2", "backward_euler"] = "trbdf2"
    rtol: float = 1e-3
    atol: float = 0.05
    t_ref: float | None = None
    dt_initial: float | None = None
    dt_min: float = 1e-9
    dt_max: float = math.inf
    fixed_dt: float | None = None
    ladder_ratio: float = 2.0
    restart_dt: float | None = None
    backend: BackendName = "auto"
    max_steps: int = 2_000_000
    cache_size: int = 40
    precision: Literal["auto", "double", "mixed"] = "auto"

    def __post_init__(self) -> None:
        def bad(name: str, expected: str) -> SolverError:
            value = getattr(self, name)
            return SolverError(f"StepperOptions.{name}: got {value!r}; expected {expected}")

        if self.method not in ("trbdf2", "backward_euler"):
            raise bad("method", "'trbdf2' or 'backward_euler'")
        if self.backend not in ("auto", "splu", "cholmod", "pardiso"):
            raise bad("backend", "'auto', 'splu', 'cholmod' or 'pardiso'")
        if not self.rtol >= 0.0:
            raise bad("rtol", ">= 0")
        if not self.atol > 0.0:
            raise bad("atol", "> 0 kelvin")
        if not 0.0 < self.dt_min < self.dt_max:
            raise bad("dt_min", f"> 0 and below dt_max={self.dt_max}")
        for name in ("dt_initial", "fixed_dt", "restart_dt"):
            value = getattr(self, name)
            if value is not None and not (0.0 < value < math.inf):
                raise bad(name, "None or a finite step > 0 s")
        if self.method == "backward_euler" and self.fixed_dt is None:
            raise bad("fixed_dt", "a step size: method='backward_euler' runs with fixed steps")
        if not 1.0 < self.ladder_ratio <= 4.0:
            raise bad("ladder_ratio", "in (1, 4]: steps grow by at most 5x, so up to one rung")
        if self.max_steps < 1:
            raise bad("max_steps", ">= 1")
        if self.cache_size < 1:
            raise bad("cache_size", ">= 1")
        if self.precision not in ("auto", "double", "mixed"):
            raise bad("precision", "'auto', 'double' or 'mixed'")


@dataclass(frozen=True)
class SolverStats:
    """Work counters of one :func:`integrate` call (seconds are wall-clock)."""

    steps: int
    rejected: int
    factorizations: int
    solves: int
    seconds_factor: float
    seconds_solve: float
    seconds_total: float
    backend: str
    distinct_dt: int
    dt_floor_hits: int = 0
    precision: str = "double"  # of the factorizations: "double" or "mixed" (see StepperOptions)
    refinements: int = 0  # refinement steps of mixed-precision solves (each one more solve)


@dataclass(frozen=True)
class Solution:
    """Result of :func:`integrate`.

    Attributes
    ----------
    t : (n_rec,) float ndarray, s
        Time of every accepted step, starting with 0.
    probes : (n_rec, n_probe) float ndarray, K
        ``P @ T`` at each recorded time.
    dt : (n_rec,) float ndarray, s
        Step that ended at each recorded time (0 for t = 0).
    err : (n_rec,) float ndarray, dimensionless
        Normalized local error estimate of that step (NaN for backward Euler; 0 at t = 0).
    rejected_t, rejected_dt, rejected_err : (n_rej,) float ndarray, s, s, dimensionless
        Start, size and normalized error estimate of every rejected step.
    snapshots : dict of float -> (n,) float ndarray, K
        Fields at the requested snapshot times (landed on exactly).
    peak_fields : dict of int -> (float, (n,) float ndarray)
        For each requested probe row: time (s) of its largest recorded value and the field (K).
    final : (n,) float ndarray, K
        Field at t_end.
    stats : SolverStats
    """

    t: FloatArray
    probes: FloatArray
    dt: FloatArray
    err: FloatArray
    rejected_t: FloatArray
    rejected_dt: FloatArray
    rejected_err: FloatArray
    snapshots: dict[float, FloatArray]
    peak_fields: dict[int, tuple[float, FloatArray]]
    final: FloatArray
    stats: SolverStats
