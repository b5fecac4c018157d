"""Sparse direct solver back ends and the cache of factorizations of M + c dt A."""

from __future__ import annotations

import importlib
import logging
import math
import os
import time
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass
from functools import cache
from typing import Any, Literal, Protocol

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import splu

from boardheat.errors import SettingError, SolverError
from boardheat.stepping.problem import FloatArray, LinearOde

logger = logging.getLogger(__name__)


class Factorization(Protocol):
    """A factored square matrix K; ``solve(b)`` returns x with K x = b, both (n,) arrays."""

    backend: str

    def solve(self, rhs: FloatArray) -> FloatArray:
        """Return the solution x of K x = rhs."""
        ...


class _SpluFactorization:
    backend = "splu"

    def __init__(self, matrix: Any) -> None:
        # Symmetric mode with a minimum-degree ordering of A^T + A and no pivoting: for SPD
        # board matrices it fills less and runs faster than the default COLAMD (DESIGN.md).
        self._lu = splu(
            sp.csc_array(matrix, dtype=np.float64),
            permc_spec="MMD_AT_PLUS_A",
            diag_pivot_thresh=0.0,
            options={"SymmetricMode": True},
        )

    def solve(self, rhs: FloatArray) -> FloatArray:
        return np.asarray(self._lu.solve(rhs), dtype=np.float64)

    @property
    def nbytes(self) -> int:
        """Memory held by the factors: values (8 B) and row indices (4 B) of L and U."""
        return int(12 * (self._lu.L.nnz + self._lu.U.nnz))


class _CholmodFactorization:
    backend = "cholmod"

    def __init__(self, matrix: Any, factor: Any = None, nbytes: int | None = None) -> None:
        csc = sp.csc_matrix(matrix, dtype=np.float64)
        if factor is None:
            from sksparse.cholmod import cholesky  # optional dependency (scikit-sparse)

            # cholesky() reads the lower triangle of a CSC spmatrix and returns a callable Factor
            factor = cholesky(csc)
        self._factor = factor
        # L holds at least the lower triangle of K: 8 B per entry (values only)
        self.nbytes = max(4 * (csc.nnz + csc.shape[0]), nbytes or 0)

    def solve(self, rhs: FloatArray) -> FloatArray:
        return np.asarray(self._factor(rhs), dtype=np.float64).reshape(-1)


def resident_bytes() -> int | None:
    """Return this process's resident set size in bytes (Linux /proc), or None elsewhere."""
    try:
        with open("/proc/self/statm", encoding="ascii") as statm:
            pages = int(statm.read().split()[1])
    except (OSError, ValueError, IndexError):
        return None
    return pages * os.sysconf("SC_PAGE_SIZE")


_STAT_WINDOW_S = 0.1  # how long busy_cores_now() watches /proc/stat


def _cpu_jiffies() -> tuple[int, int]:
    """Return (busy, total) CPU time of all cores since boot, in clock ticks (Linux only).

    The first line of /proc/stat is ``cpu user nice system idle iowait irq softirq steal
    ...`` (proc(5)); idle and iowait count as not busy.
    """
    with open("/proc/stat", encoding="ascii") as stat:
        fields = stat.readline().split()
    if not fields or fields[0] != "cpu":
        raise OSError("/proc/stat: first line is not the 'cpu' total")
    ticks = [int(x) for x in fields[1:]]
    total = sum(ticks[:8])  # guest times are already inside user and nice
    return total - ticks[3] - ticks[4], total


def busy_cores_now(window: float = _STAT_WINDOW_S) -> float | None:
    """Return how many cores other work keeps busy over the next ``window`` seconds.

    Read from /proc/stat before and after a short sleep, less what this process's own threads
    used meanwhile (idle OpenMP workers spin for a while after a parallel region); None where
    there is no /proc/stat or no tick passed.
    """
    try:
        busy_0, total_0 = _cpu_jiffies()
        own_0, wall_0 = time.process_time(), time.perf_counter()
        time.sleep(window)
        busy_1, total_1 = _cpu_jiffies()
        own_1, wall_1 = time.process_time(), time.perf_counter()
    except (OSError, ValueError, IndexError):
        return None
    if total_1 <= total_0:
        return None
    cores = os.cpu_count() or 1
    everyone = cores * (busy_1 - busy_0) / (total_1 - total_0)
    return max(0.0, everyone - (own_1 - own_0) / (wall_1 - wall_0))


def solver_threads() -> int:
    """Return how many threads PARDISO may use: the idle cores, at least one.

    ``BOARDHEAT_THREADS`` overrides it (variant workers set it to 1). Measured on the demo
    board on 2 cores: two threads halve the solve time on an idle machine (3.7 vs 7.2 ms per
    solve) but cost 70 % more wall time when another job holds a core, so busy cores are left
    alone. The 1-minute load average is the first guess. It remembers the past minute,
    though: right after a large run it still reads about 1 to 2 on an idle machine. Since a
    run keeps its thread count from start to end (see ``PardisoPattern``), a busy-looking
    load average is checked against what /proc/stat shows for the next 0.1 s, and the
    present wins. Measured at 1 M DOFs on 2 cores, one thread instead of two doubles the time
    of a factorization (22-26 s vs 10.5-15 s).
    """
    forced = os.environ.get("BOARDHEAT_THREADS", "")
    if forced.isdigit() and int(forced) > 0:
        return int(forced)
    cores = os.cpu_count() or 1
    try:
        busy = os.getloadavg()[0]
    except OSError:
        busy = 0.0
    if busy >= 0.5 and cores > 1:
        now = busy_cores_now()
        if now is not None:
            busy = now
    return max(1, min(cores, int(cores - busy + 0.5)))


class _PardisoFactorization:
    backend = "pardiso"

    def __init__(self, matrix: Any) -> None:
        from boardheat.stepping.pardiso import factor_once

        # Board matrices are symmetric positive definite: PARDISO's matrix type 2 (real SPD,
        # Cholesky) reads the upper triangle only and factors ~1.5x faster than the general
        # type 11.
        self._factor = factor_once(matrix, solver_threads())
        self.nbytes = self._factor.nbytes

    def solve(self, rhs: FloatArray) -> FloatArray:
        return self._factor.solve(rhs)


_FACTORIZERS: dict[str, Callable[[Any], Factorization]] = {
    "splu": _SpluFactorization,
    "cholmod": _CholmodFactorization,
    "pardiso": _PardisoFactorization,
}


@cache
def _importable(module: str) -> bool:
    try:
        importlib.import_module(module)
    except (ImportError, OSError):  # OSError: a wheel whose shared library fails to load
        return False
    return True


def available_backends() -> list[str]:
    """Return the usable linear-solver back ends, in the order ``"auto"`` prefers them.

    PARDISO first, then CHOLMOD, then SuperLU, by speed on board matrices M + c·dt·A. Measured
    here (2 cores; numerical factorization with the analysis reused / one solve) on the demo
    board and its refinements of ``scripts/bench_stepper.py``:

    ======== ================== ============================ ==============================
    DOF      PARDISO            CHOLMOD, OpenBLAS             CHOLMOD, reference BLAS
    ======== ================== ============================ ==============================
    13 k     0.033 s / 1.8 ms   0.10 s / 3.2 ms              0.36 s / 7.0 ms
    52 k     0.15 s / 6-9 ms    0.65 s / 20 ms               1.5-2.6 s / 28 ms
    230 k    1.4 s / 54 ms      3.6 s / 103 ms               14-16 s / 165 ms
    ======== ================== ============================ ==============================

    (CHOLMOD: scikit-sparse 0.4.16 on SuiteSparse 5.12; the two fill L alike, 56 M entries at
    230 k.) SuperLU is the always-available fallback.

    >>> available_backends()[-1]
    'splu'
    """
    from boardheat.stepping import pardiso

    names = ["pardiso"] if pardiso.available() else []
    if _importable("sksparse.cholmod"):
        names.append("cholmod")
    return [*names, "splu"]


#: a factorization cache that holds at most this many (by count or memory) is crowded at once
CROWDED_SLOTS = 3

#: below this many unknowns SuperLU beats PARDISO (whose per-factorization set-up dominates)
PARDISO_MIN_DOFS = 5000


def _resolve_backend(backend: str, n: int | None = None) -> str:
    usable = available_backends()
    if backend == "auto":
        if usable[0] == "pardiso" and n is not None and n < PARDISO_MIN_DOFS:
            return "splu"
        return usable[0]
    if backend not in usable:
        raise SolverError(
            f"linear solver backend {backend!r}: not installed; expected one of {usable}"
        )
    return backend


def make_factorization(matrix: Any, backend: str = "auto") -> Factorization:
    """Factor a sparse symmetric positive definite matrix once for repeated solves.

    Parameters
    ----------
    matrix : (n, n) sparse, any unit
        The matrix K to factor.
    backend : {"auto", "splu", "cholmod", "pardiso"}
        ``"auto"`` picks PARDISO if the MKL runtime loads (but SuperLU below
        ``PARDISO_MIN_DOFS`` rows, where PARDISO's set-up dominates), else CHOLMOD if
        scikit-sparse imports, else scipy's SuperLU with a symmetric minimum-degree ordering:
        the order of :func:`available_backends`. A dropped PARDISO factorization frees MKL's
        memory at once.

    Returns
    -------
    Factorization
        Object whose ``solve(rhs)`` returns x with K x = rhs.
    """
    shape = getattr(matrix, "shape", None)
    name = _resolve_backend(backend, shape[0] if shape is not None else None)
    if shape is None or len(shape) != 2 or shape[0] != shape[1] or shape[0] == 0:
        raise SolverError(f"make_factorization: matrix shape {shape}; expected square (n, n)")
    try:
        return _FACTORIZERS[name](matrix)
    except Exception as err:  # each back end has its own exception types
        raise SolverError(
            f"make_factorization ({name}): factoring the {shape[0]}x{shape[1]} matrix failed "
            f"({err}); expected a symmetric positive definite matrix"
        ) from err


def solve_steady(ode: LinearOde, p: FloatArray, backend: str = "auto") -> FloatArray:
    """Return the steady field T (n,) in K that solves A T = g + B p.

    Parameters
    ----------
    ode : LinearOde
    p : (n_src,) float ndarray, W
        Constant source powers.
    backend : {"auto", "splu", "cholmod", "pardiso"}
        Linear solver, as in :func:`make_factorization`.
    """
    power = np.asarray(p, dtype=np.float64)
    if power.shape != (ode.n_src,) or not np.all(np.isfinite(power)):
        raise SolverError(
            f"solve_steady: p has shape {power.shape}; expected ({ode.n_src},) finite watts"
        )
    T = make_factorization(ode.A, backend).solve(ode.g + ode.B @ power)
    if not np.all(np.isfinite(T)):
        raise SolverError("solve_steady: the solution is not finite; expected A to be SPD")
    return T


class _Timed:
    """A factorization that counts its solves and their wall time."""

    def __init__(self, factor: Factorization, counters: _Counters, n: int) -> None:
        self._factor = factor
        self._counters = counters
        # bytes held (a guess of 1000 per row where the back end cannot tell)
        self._nbytes_guess = 1000 * n
        self._released = False

    @property
    def nbytes(self) -> int:
        """Bytes the factorization holds (read each time: a fallback may change it)."""
        return int(getattr(self._factor, "nbytes", self._nbytes_guess))

    @property
    def refinements(self) -> int:
        """Refinement steps of its solves so far (mixed precision only)."""
        return int(getattr(self._factor, "refinements", 0))

    def solve(self, rhs: FloatArray, tolerance: float = 0.0) -> FloatArray:
        """Return x with K x = rhs.

        A mixed-precision factorization may stop refining at an absolute error ``tolerance``
        (max norm; see ``_Refined``); the other back ends solve to full precision.
        """
        start = time.perf_counter()
        if isinstance(self._factor, _Refined):
            x = self._factor.solve(rhs, tolerance)
        else:
            x = self._factor.solve(rhs)
        self._counters.seconds_solve += time.perf_counter() - start
        self._counters.solves += 1
        return x

    def release(self) -> None:
        """Free the factorization's memory now where the back end allows it."""
        if self._released:
            return
        self._released = True
        self._counters.refinements += self.refinements
        release = getattr(self._factor, "release", None)
        if release is not None:
            release()


#: What one factorization costs, in solves with it (the step-size controller weighs landing
#: plans with it). A fixed figure per back end, not a timing of this run, so that the steps
#: taken do not depend on the machine's load. Measured here (factorization / solve seconds):
#: PARDISO 16 (13 k DOF), 20 (230 k), 33 (1 M); on the layered test matrices of
#: scripts/bench_solvers.py CHOLMOD takes about 50 (52 k, 205 k) and splu with
#: MMD_AT_PLUS_A 90 (52 k) to 170 (205 k).
FACTOR_COST_IN_SOLVES = {"pardiso": 20.0, "cholmod": 50.0, "splu": 90.0}


@dataclass
class _Counters:
    factorizations: int = 0
    solves: int = 0
    refinements: int = 0  # of released factorizations (see _FactorCache.refinements)
    seconds_factor: float = 0.0
    seconds_solve: float = 0.0


def positive_gib(text: str) -> float | None:
    """Return ``text`` as a finite number of GiB > 0, or None if it is not one."""
    try:
        gib = float(text)
    except ValueError:
        return None
    return gib if 0.0 < gib < math.inf else None


def memory_budget() -> int:
    """Return the bytes the factorization cache may hold: a quarter of physical memory.

    ``BOARDHEAT_CACHE_GIB`` (a number of GiB > 0) sets another limit. On large boards the
    budget decides how many step sizes stay factored: measured on the 1 M DOF benchmark board
    (2.5 GiB per factorization), a 5.9 GiB budget holds two.
    """
    forced = os.environ.get("BOARDHEAT_CACHE_GIB", "").strip()
    if forced:
        gib = positive_gib(forced)
        if gib is None:
            raise SettingError(
                f"environment variable BOARDHEAT_CACHE_GIB={forced!r}; expected a number of "
                "GiB > 0 (the memory the cached factorizations may hold)"
            )
        return int(gib * 1024**3)
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        total = 8 * 1024**3
    return int(total // 4)


#: Iterative refinement of a single-precision solve stops once the error it predicts for its
#: result is at most this fraction of the solution (max norms; see ``_Refined``).
REFINE_TOL = 1e-8

#: at most this many refinement steps per solve before falling back to double precision
REFINE_MAX_STEPS = 5

#: A solve given an error tolerance skips refinement when this many times the largest
#: single-precision error seen with the same factorization (relative) is within it.
REFINE_SAFETY = 10.0


class _RefinementError(Exception):
    """Refinement of a single-precision solve did not converge (K too ill-conditioned)."""


class _Refined:
    """A single-precision factorization of K = M + s·A whose solves are refined in double.

    Mixed-precision iterative refinement (Wilkinson 1963; Moler, J. ACM 14 (1967) 316-321;
    Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., 2002, Ch. 12): x_0 =
    K32⁻¹ b from the single-precision factors, then r = b − K x (K and r in double) and
    x ← x + K32⁻¹ r. Each step shrinks the error by a factor ρ of about κ(K)·u_single
    (u = 6e-8), and each correction is about the error before it, so after step k the error
    left is about ρ_k·|dx_k|, with ρ_1 = |dx_1|/|x_0| and ρ_k = |dx_k|/|dx_(k−1)|. Refinement
    stops once that is at most ``REFINE_TOL`` = 1e-8 of |x|. Measured on the 228 k DOF
    benchmark board (error against a double solve, max norm, relative): ρ = 1e-6 at
    dt = 1 ms, 2e-6 at 1 s, 5e-5 at 63 s, 5e-4 at 1000 s; one step leaves 5e-13, 2e-11,
    7e-9, 4e-7, a second 2e-15 ... 3e-10. So one step suffices up to about a minute and two
    beyond. A ρ above 1/2, or ``REFINE_MAX_STEPS`` steps without reaching the tolerance,
    means κ(K) is too large for single precision: the matrix is refactored in double
    (``fallback``) and solved there from then on. The residual costs one product with the
    sparse M and A, about 2 % of a solve (10 nonzeros per row).

    A caller that needs less (the step controller: a thousandth of its absolute tolerance in
    kelvin) passes ``tolerance``, an absolute error allowed in max norm. Refinement stops as
    soon as the predicted error is within it, and is skipped altogether when the unrefined
    solve's error, predicted from ρ_1 (the relative error of the single-precision solves of
    this factorization, the largest measured so far, times ``REFINE_SAFETY``), is: ρ_1 is a
    property of K, 1e-6 for the restart steps of milliseconds. The first solve with each
    factorization is always refined, which measures ρ_1.
    """

    backend = "pardiso"

    def __init__(self, factor: Any, M: Any, A: Any, s: float, fallback: Callable[[], Any]) -> None:
        self._factor = factor
        self._M = M
        self._A = A
        self._s = s
        self._fallback: Callable[[], Any] | None = fallback
        self.refinements = 0  # refinement steps taken (each one more solve)
        self.double = False  # True once refactored in double precision
        self._rho_first = 0.0  # largest relative error of an unrefined solve measured so far

    @property
    def nbytes(self) -> int:
        return int(self._factor.nbytes)

    def _refine(self, b: FloatArray, tolerance: float) -> FloatArray:
        if not np.any(b):
            return np.zeros_like(b)
        x: FloatArray = np.asarray(self._factor.solve(b), dtype=np.float64)
        size = last = float(np.max(np.abs(x)))  # the first correction is compared with x_0
        if self._rho_first > 0.0 and REFINE_SAFETY * self._rho_first * size <= tolerance:
            return x
        for k in range(REFINE_MAX_STEPS):
            if not 0.0 < size < math.inf:
                break
            dx = self._factor.solve(b - (self._M @ x + self._s * (self._A @ x)))
            self.refinements += 1
            x = x + dx
            size = float(np.max(np.abs(x)))
            step = float(np.max(np.abs(dx)))
            rho = step / last
            if not rho <= 0.5:  # not contracting (or NaN)
                break
            if k == 0:
                self._rho_first = max(self._rho_first, rho)
            if rho * step <= max(REFINE_TOL * size, tolerance):
                return x
            last = step
        raise _RefinementError

    def solve(self, rhs: FloatArray, tolerance: float = 0.0) -> FloatArray:
        """Return x with K x = rhs, to ``REFINE_TOL`` of |x| or to ``tolerance`` (max norm)."""
        b = np.asarray(rhs, dtype=np.float64)
        if not self.double:
            try:
                return self._refine(b, tolerance)
            except _RefinementError:
                self._to_double()
        return np.asarray(self._factor.solve(b), dtype=np.float64)

    def _to_double(self) -> None:
        if self._fallback is None:
            raise SolverError("mixed precision: the double-precision fallback was already used")
        logger.warning(
            "refinement of a single-precision solve of M + %.3g·A did not converge; the "
            "matrix is refactored in double precision",
            self._s,
        )
        fallback, self._fallback = self._fallback, None
        old, self._factor = self._factor, fallback()
        old.release()
        self.double = True

    def release(self) -> None:
        self._factor.release()


class _PardisoFamily:
    """Factorizations of K = M + s·A for many s, sharing one PARDISO analysis.

    The upper triangles of M and A are laid on their union pattern (diagonal always present)
    once; the values of K for a given s are then one vectorized ``m + s·a``, with no sparse
    addition, and PARDISO's ordering and symbolic factorization (about half to two thirds of a
    factorization's time) run once for all s. With ``single`` the factors are held in single
    precision and every solve is refined in double (:class:`_Refined`); a matrix whose
    refinement does not converge is refactored with a double-precision handle of the same
    pattern, made (and analysed) on first need.
    """

    def __init__(self, M: Any, A: Any, maxfct: int, single: bool = False) -> None:
        from boardheat.stepping.pardiso import PardisoPattern

        n = int(M.shape[0])
        upper_m = sp.triu(sp.coo_array(M, dtype=np.float64)).tocoo()
        upper_a = sp.triu(sp.coo_array(A, dtype=np.float64)).tocoo()
        diagonal = np.arange(n, dtype=np.int64)
        rows = np.concatenate([upper_m.row, upper_a.row, diagonal]).astype(np.int64)
        cols = np.concatenate([upper_m.col, upper_a.col, diagonal]).astype(np.int64)
        keys, where = np.unique(rows * n + cols, return_inverse=True)  # CSR order: row, col
        pattern_rows = keys // n
        indptr = np.searchsorted(pattern_rows, np.arange(n + 1))
        pattern = sp.csr_array((np.ones(keys.size), keys % n, indptr), shape=(n, n))
        n_m, n_a = upper_m.nnz, upper_a.nnz
        self._m = np.bincount(where[:n_m], weights=upper_m.data, minlength=keys.size)
        self._a = np.bincount(where[n_m : n_m + n_a], weights=upper_a.data, minlength=keys.size)
        self._M = sp.csr_array(M, dtype=np.float64)  # for the residuals of refinement
        self._A = sp.csr_array(A, dtype=np.float64)
        self._upper = pattern
        self._maxfct = maxfct
        # the thread count is chosen once: every phase of one handle must use the same
        self._pattern = PardisoPattern(pattern, maxfct, threads=solver_threads(), single=single)
        self._double: PardisoPattern | None = None if single else self._pattern
        self._past_analyses = 0

    @property
    def single(self) -> bool:
        """Whether new factorizations are made in single precision (and refined)."""
        return self._pattern.single

    def use_single(self) -> int:
        """Make new factorizations in single precision; return the bytes of one (analyses).

        Call before the first factorization. The double-precision handle and its analysis are
        freed; a :class:`_Refined` that falls back to double makes (and analyses) a new one.
        """
        from boardheat.stepping.pardiso import PardisoPattern

        if not self.single:
            threads = self._pattern.threads
            self._past_analyses += self._pattern.analyses
            # the double handle's analysis (0.3 GiB at 1 M DOFs) is freed; a fallback redoes it
            self._pattern = PardisoPattern(self._upper, self._maxfct, threads, single=True)
            self._double = None
        return self.prepare()

    def _factor_double(self, s: float) -> Factorization:
        from boardheat.stepping.pardiso import PardisoPattern

        if self._double is None:
            self._double = PardisoPattern(self._upper, self._maxfct, self._pattern.threads)
        return self._double.factor(self._m + s * self._a)

    def factor(self, s: float) -> Factorization:
        if not self.single:
            return self._pattern.factor(self._m + s * self._a)
        try:
            factor = self._pattern.factor(self._m + s * self._a)
        except SolverError as err:  # e.g. a pivot lost to single-precision rounding
            logger.warning("single-precision factorization failed (%s); using double", err)
            return self._factor_double(s)
        return _Refined(factor, self._M, self._A, s, lambda: self._factor_double(s))

    def prepare(self) -> int:
        """Run the analysis now; return the bytes one factorization will hold."""
        values = np.asarray(self._m + self._a, dtype=np.float64)  # the analysis reads its pattern
        self._pattern.analyse(values)
        return self._pattern.factor_bytes + self._pattern.itemsize * values.size

    @property
    def analyses(self) -> int:
        done = self._past_analyses + self._pattern.analyses
        if self._double is not None and self._double is not self._pattern:
            done += self._double.analyses
        return done


class _CholmodFamily:
    """Factorizations of K = M + s·A for many s, sharing one CHOLMOD symbolic analysis.

    ``analyze`` (fill-reducing ordering and supernodal structure) runs once on the pattern of
    M + A, which every K with s > 0 shares; each s then costs only the numerical
    factorization (``Factor.cholesky``, which copies the analysis). Measured at 230 k DOFs:
    analysis 3.1 s, numerical factorization 3.6 s (OpenBLAS). scikit-sparse does not report
    the size of L, so it is measured once, as the growth of the resident set over the first
    factorization: L's values are one block, which the C allocator maps fresh from the
    system (glibc maps every block above 32 MiB at the latest), so the growth is its size.
    """

    def __init__(self, M: Any, A: Any) -> None:
        from sksparse.cholmod import analyze  # optional dependency (scikit-sparse)

        self._M = sp.csc_matrix(M, dtype=np.float64)
        self._A = sp.csc_matrix(A, dtype=np.float64)
        # |M| + |A|: no entry of the pattern cancels, whatever the values
        self._symbolic = analyze(abs(self._M) + abs(self._A))
        self.analyses = 1
        self._nbytes: int | None = None

    def factor(self, s: float) -> Factorization:
        K = self._M + s * self._A
        before = resident_bytes()
        numeric = self._symbolic.cholesky(K)
        after = resident_bytes()
        if self._nbytes is None and before is not None and after is not None:
            self._nbytes = after - before
        return _CholmodFactorization(K, numeric, self._nbytes)

    def prepare(self) -> int:
        """Return 0: the size of L is known only after the first factorization."""
        return 0


class _FactorCache:
    """LRU cache of factorizations of M + c*dt*A keyed by the (quantized) step dt.

    Holds at most ``size`` factorizations and at most ``budget`` bytes of them, the one being
    made included: before a new factorization, the least recently used ones are freed until
    it fits (its size is that of the previous one; with PARDISO every factorization shares
    one analysis and so has exactly the same size). The newest is always kept, even alone
    over budget. With PARDISO one factorization holds 0.42 GiB at 228 k DOFs and 2.5 GiB at
    1.02 M DOFs (the board meshes of ``scripts/bench_stepper.py --size 8`` and ``--size 24``).
    ``evictions`` counts the factorizations freed to make room; once it is positive, or when
    the cache holds few (:attr:`crowded`), the step controller plans for a crowded cache (see
    ``_Controller.propose``).
    """

    def __init__(
        self,
        M: Any,
        A: Any,
        c: float,
        backend: str,
        size: int,
        budget: int | None = None,
        precision: Literal["auto", "double", "mixed"] = "double",
    ) -> None:
        self._M = M
        self._A = A
        self._c = c
        self._backend = backend
        self._size = size
        self._budget = memory_budget() if budget is None else budget
        self._store: OrderedDict[float, _Timed] = OrderedDict()
        self.counters = _Counters()
        self.keys_factored: set[float] = set()
        self.evictions_for_memory = 0
        self.evictions = 0
        self._expected_bytes = 0  # size of the next factorization: that of the last one
        # evictions come before each new factorization, so ``size`` slots are enough
        self._family: _PardisoFamily | _CholmodFamily | None = None
        if precision == "mixed" and backend != "pardiso":
            raise SolverError(
                f"precision 'mixed' with the {backend!r} back end; expected the 'pardiso' back "
                "end (the only one here that factors in single precision) or precision 'double'"
            )
        start = time.perf_counter()  # analyses are counted as factorization time
        if backend == "pardiso":
            family = _PardisoFamily(M, A, size, single=precision == "mixed")
            self._family = family
            self._expected_bytes = family.prepare()
            slots = self._budget // max(1, self._expected_bytes)
            if precision == "auto" and slots <= CROWDED_SLOTS and slots < size:
                # memory, not the count limit, would crowd the cache: halve each factorization
                self._expected_bytes = family.use_single()
        elif backend == "cholmod":
            self._family = _CholmodFamily(M, A)
            self._expected_bytes = self._family.prepare()
        self.counters.seconds_factor += time.perf_counter() - start

    @property
    def precision(self) -> str:
        """'mixed' when factors are held in single precision and solves refined, else 'double'."""
        single = isinstance(self._family, _PardisoFamily) and self._family.single
        return "mixed" if single else "double"

    @property
    def refinements(self) -> int:
        """Refinement steps taken by the held factorizations' solves (mixed precision)."""
        return self.counters.refinements + sum(t.refinements for t in self._store.values())

    def _held_bytes(self) -> int:
        return sum(t.nbytes for t in self._store.values())

    @property
    def crowded(self) -> bool:
        """True once a factorization was freed to make room, or when the cache holds few.

        The step controller plans for a crowded cache (see ``_Controller.propose``). A cache
        that holds at most ``CROWDED_SLOTS`` factorizations (by its count limit or by its
        memory budget) is crowded from the start, before any eviction: a start-up sequence
        alone takes more step sizes (the demo board's first 30 ms take six). The memory of one
        factorization is known before the first with PARDISO (from its analysis), after it
        with the other back ends.
        """
        if self.evictions > 0:
            return True
        slots = self._size
        if self._expected_bytes > 0:
            slots = min(slots, self._budget // self._expected_bytes)
        return slots <= CROWDED_SLOTS

    def cached(self, dt: float) -> bool:
        """Return whether the factorization of step dt is held (without touching its age)."""
        return dt in self._store

    def get(self, dt: float) -> _Timed:
        hit = self._store.get(dt)
        if hit is not None:
            self._store.move_to_end(dt)
            return hit
        while len(self._store) >= self._size:
            self._evict()
        while self._store and self._held_bytes() + self._expected_bytes > self._budget:
            self._evict(for_memory=True)
        start = time.perf_counter()
        try:
            if self._family is not None:
                factor = self._family.factor(self._c * dt)
            else:
                factor = make_factorization(self._M + (self._c * dt) * self._A, self._backend)
        except SolverError:
            raise
        except Exception as err:  # each back end has its own exception types
            raise SolverError(
                f"factoring M + {self._c:.3g}·{dt:.3e}·A failed ({err}); expected symmetric "
                "positive definite M and A"
            ) from err
        self.counters.seconds_factor += time.perf_counter() - start
        self.counters.factorizations += 1
        self.keys_factored.add(dt)
        timed = _Timed(factor, self.counters, int(self._M.shape[0]))
        self._store[dt] = timed
        self._expected_bytes = timed.nbytes
        while len(self._store) > 1 and self._held_bytes() > self._budget:
            # the first one, or one larger than the last: over budget after all
            self._evict(for_memory=True)
        return timed

    def _evict(self, for_memory: bool = False) -> None:
        self.evictions += 1
        self.evictions_for_memory += int(for_memory)
        _, factor = self._store.popitem(last=False)
        factor.release()
