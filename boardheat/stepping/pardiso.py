"""A thin driver of MKL PARDISO that factors many matrices of one sparsity pattern.

Every matrix the stepper factors, K = M + c·dt·A, has the same sparsity pattern; only dt
changes. PARDISO splits a factorization into an analysis (fill-reducing ordering and symbolic
factorization, phase 11) and a numerical factorization (phase 22), and one handle can hold up
to ``maxfct`` numerical factorizations that share one analysis (oneMKL Developer Reference,
"pardiso": parameters maxfct and mnum, phases 11/22/33/0/-1). Measured on the demo board
(13 k DOF, one thread): analysis 0.08 s, numerical factorization 0.04 s; at 52 k DOF 0.39 s and
0.31 s. Analysing once instead of per step size therefore cuts the cost of every further
factorization by half to two thirds.

The library is the MKL runtime that the ``mkl`` wheel (pulled in by pypardiso) installs; the
calls are made here, so that a solve is one foreign call (phase 33) without the per-call
matrix comparison and index conversion of pypardiso's ``solve``.
"""

from __future__ import annotations

import ctypes
import glob
import os
import site
import sys
from functools import cache
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

from boardheat.errors import SolverError
from boardheat.stepping.problem import FloatArray

_SPD = 2  # PARDISO matrix type: real symmetric positive definite (Cholesky, upper triangle)
_IntArray = npt.NDArray[np.int32]
_Values = npt.NDArray[Any]  # float64, or float32 on a single-precision handle

#: PARDISO error codes (oneMKL Developer Reference, "pardiso", parameter error)
_ERRORS = {
    -1: "input inconsistent",
    -2: "not enough memory",
    -3: "reordering problem",
    -4: "zero pivot, numerical factorization or iterative refinement problem",
    -5: "unclassified (internal) error",
    -6: "reordering failed",
    -7: "diagonal matrix is singular",
    -8: "32-bit integer overflow problem",
    -9: "not enough memory for out-of-core solver",
    -10: "error opening out-of-core files",
    -11: "read/write error with out-of-core files",
}


def _runtime_candidates() -> list[str]:
    """Return paths (or names) where the MKL runtime may be, most likely first."""
    forced = os.environ.get("PYPARDISO_MKL_RT")  # the variable pypardiso itself honours
    found: list[str] = [forced] if forced else []
    for prefix in dict.fromkeys((sys.prefix, sys.base_prefix, site.USER_BASE or "")):
        if prefix:
            for lib in ("lib", "lib64", "Library/bin"):
                found += sorted(glob.glob(os.path.join(prefix, lib, "*mkl_rt*")), key=len)
    return found


@cache
def _pardiso_function() -> tuple[Any, Any]:
    """Return the ``pardiso`` entry point of the MKL runtime (argument types set) and the library.

    The runtime is looked for where the ``mkl`` wheel (a dependency of pypardiso) installs it,
    which takes milliseconds; only if that fails is pypardiso asked, whose import searches the
    whole environment (0.5 s measured here).
    """
    library: Any = None
    for candidate in _runtime_candidates():
        try:
            library = ctypes.CDLL(candidate)
            break
        except OSError:
            continue
    if library is None:
        import pypardiso  # optional dependency: its own, slower search for the MKL runtime

        library = pypardiso.PyPardisoSolver(mtype=_SPD).libmkl
    function = library.pardiso
    int_p = ctypes.POINTER(ctypes.c_int32)
    function.argtypes = [
        ctypes.POINTER(ctypes.c_int64),  # pt: 64 opaque handle words
        int_p,  # maxfct
        int_p,  # mnum
        int_p,  # mtype
        int_p,  # phase
        int_p,  # n
        ctypes.c_void_p,  # a (values)
        int_p,  # ia (1-based row pointers)
        int_p,  # ja (1-based column indices)
        int_p,  # perm
        int_p,  # nrhs
        int_p,  # iparm
        int_p,  # msglvl
        ctypes.c_void_p,  # b
        ctypes.c_void_p,  # x
        int_p,  # error
    ]
    function.restype = None
    init = library.pardisoinit
    init.argtypes = [ctypes.POINTER(ctypes.c_int64), int_p, int_p]
    init.restype = None
    return function, library


def _default_iparm() -> npt.NDArray[np.int32]:
    """Return PARDISO's default parameters for an SPD matrix, without iterative refinement.

    ``pardisoinit`` fills the defaults; they include two steps of iterative refinement on every
    solve (iparm[7] = 2), each one more forward/backward substitution. A Cholesky factorization
    of an SPD matrix is backward stable without it (Higham, Accuracy and Stability of
    Numerical Algorithms, 2nd ed., 2002, Thm 10.3), so it is switched off: measured on the demo
    board, a solve then takes 3.2 ms instead of 6.8 ms and differs from scipy's spsolve by
    1e-13 (relative) either way.
    """
    _, library = _pardiso_function()
    pt = np.zeros(64, dtype=np.int64)
    iparm = np.zeros(64, dtype=np.int32)
    library.pardisoinit(
        pt.ctypes.data_as(ctypes.POINTER(ctypes.c_int64)),
        ctypes.byref(ctypes.c_int32(_SPD)),
        iparm.ctypes.data_as(ctypes.POINTER(ctypes.c_int32)),
    )
    iparm[0] = 1  # the values below are supplied, not defaulted
    iparm[7] = 0  # no iterative refinement
    iparm[34] = 0  # ia/ja are one-based
    return iparm


def available() -> bool:
    """Return whether the MKL runtime with PARDISO can be loaded in this environment."""
    try:
        _pardiso_function()
    except (ImportError, OSError, AttributeError):
        return False
    return True


def set_threads(threads: int) -> None:
    """Set the number of OpenMP threads MKL (and so PARDISO) uses in this process."""
    _, library = _pardiso_function()
    setter = getattr(library, "MKL_Set_Num_Threads", None)
    if setter is not None:
        setter(ctypes.c_int(max(1, int(threads))))


class PardisoPattern:
    """One PARDISO handle: a sparsity pattern analysed once, up to ``maxfct`` factorizations.

    Parameters
    ----------
    upper : (n, n) sparse CSR
        Upper triangle (diagonal included) of the symmetric pattern, indices sorted. Only its
        structure is kept; values are passed to :meth:`factor`.
    maxfct : int
        Most numerical factorizations held at once (slots are reused after :meth:`release`).
    threads : int
        MKL threads of every call on this handle. Fixed for the handle's life: measured with
        MKL 2026.2 here, a numerical factorization on fewer threads than the analysis used
        crashes the process (segmentation fault), and the caller's choice of threads can
        change during a run (it follows the machine's load).
    single : bool
        Factor and solve in single precision (iparm[27] = 1; values, right-hand sides and
        solutions are float32 inside PARDISO), fixed for the handle's life like the threads.
        Half the memory per factorization; measured at 1.02 M DOFs on 2 threads: 9.1-9.7 s
        per factorization against 18-21 s in double, 0.18-0.22 s per solve against
        0.28-0.32 s. A solve is then good to a relative residual of about 1e-7 only; the
        caller refines it (see ``boardheat.stepping.solvers._Refined``).
    """

    def __init__(self, upper: Any, maxfct: int, threads: int = 1, single: bool = False) -> None:
        csr = sp.csr_array(upper)
        csr.sort_indices()
        n = int(csr.shape[0])
        if csr.shape != (n, n) or n == 0:
            raise SolverError(f"PARDISO: matrix shape {csr.shape}; expected square (n, n)")
        if np.any(np.diff(csr.indptr) == 0):
            raise SolverError("PARDISO: the matrix has an empty row; expected SPD (it is singular)")
        self.n = n
        self.nnz = int(csr.nnz)
        self.maxfct = int(maxfct)
        self.threads = max(1, int(threads))
        self.single = bool(single)
        self._dtype = np.float32 if self.single else np.float64
        self.itemsize = np.dtype(self._dtype).itemsize  # bytes per value, factor entry included
        self._ia: _IntArray = (csr.indptr + 1).astype(np.int32)
        self._ja: _IntArray = (csr.indices + 1).astype(np.int32)
        self._pt = np.zeros(64, dtype=np.int64)
        self._iparm = _default_iparm()
        self._iparm[27] = int(self.single)  # precision of the factors and solves
        self._perm = np.zeros(n, dtype=np.int32)
        self._free = list(range(self.maxfct, 0, -1))  # mnum slots 1..maxfct, popped from the end
        self._analysed = False
        self.analyses = 0
        self.analysis_bytes = 0
        self.factor_bytes = 0  # bytes of one numerical factorization, known after the analysis

    def _call(self, phase: int, mnum: int, values: _Values, b: _Values, x: _Values) -> None:
        function, _ = _pardiso_function()
        set_threads(self.threads)  # another handle, or numpy's BLAS, may have changed it
        error = ctypes.c_int32(0)
        int_p = ctypes.POINTER(ctypes.c_int32)
        function(
            self._pt.ctypes.data_as(ctypes.POINTER(ctypes.c_int64)),
            ctypes.byref(ctypes.c_int32(self.maxfct)),
            ctypes.byref(ctypes.c_int32(mnum)),
            ctypes.byref(ctypes.c_int32(_SPD)),
            ctypes.byref(ctypes.c_int32(phase)),
            ctypes.byref(ctypes.c_int32(self.n)),
            values.ctypes.data,
            self._ia.ctypes.data_as(int_p),
            self._ja.ctypes.data_as(int_p),
            self._perm.ctypes.data_as(int_p),
            ctypes.byref(ctypes.c_int32(1)),
            self._iparm.ctypes.data_as(int_p),
            ctypes.byref(ctypes.c_int32(0)),
            b.ctypes.data,
            x.ctypes.data,
            ctypes.byref(error),
        )
        if error.value != 0:
            what = _ERRORS.get(error.value, "unknown error")
            raise SolverError(
                f"PARDISO phase {phase}: error {error.value} ({what}) on the {self.n}x{self.n} "
                "matrix; expected a symmetric positive definite matrix"
            )

    def analyse(self, values: _Values) -> None:
        """Order and analyse the pattern (once): sets ``factor_bytes`` before any factorization.

        ``values`` are upper-triangle values on the pattern (CSR order), finite.
        """
        if self._analysed:
            return
        empty = np.zeros(0, dtype=self._dtype)
        self._call(11, 1, np.ascontiguousarray(values, dtype=self._dtype), empty, empty)
        self._analysed = True
        self.analyses += 1
        self.analysis_bytes = 1024 * int(self._iparm[14])  # peak of the analysis, kB
        # iparm[17]: entries PARDISO stores for the factor L (its supernodes as dense
        # blocks), fixed by the analysis, so every factorization of the handle holds
        # 8 bytes per entry (4 in single precision). Not iparm[16]: that one adds up the
        # handle's factorizations (measured on the 52 k DOF demo: 79, 154, 230 MiB for one,
        # two, three live ones, while the resident set grew by 73 MiB = 8 B x 9.6 M entries of
        # L each time; at 1.02 M DOFs 2.47 GiB in double and 1.24 GiB in single for 332 M).
        self.factor_bytes = self.itemsize * int(self._iparm[17])

    def factor(self, values: FloatArray) -> PardisoFactor:
        """Factor the matrix with this pattern and these upper-triangle values (CSR order)."""
        data = np.ascontiguousarray(values, dtype=self._dtype)
        if data.shape != (self.nnz,) or not np.all(np.isfinite(data)):
            kind = "single-precision " if self.single else ""
            raise SolverError(
                f"PARDISO: {data.shape} values given; expected ({self.nnz},) finite {kind}numbers"
            )
        if not self._free:
            raise SolverError(
                f"PARDISO: all {self.maxfct} factorization slots are in use; expected a "
                "factorization to be released first"
            )
        empty = np.zeros(0, dtype=self._dtype)
        self.analyse(data)
        mnum = self._free.pop()
        try:
            self._call(22, mnum, data, empty, empty)
        except SolverError:
            self._free.append(mnum)
            raise
        return PardisoFactor(self, mnum, data, self.factor_bytes)

    def solve(self, mnum: int, values: _Values, rhs: FloatArray) -> FloatArray:
        """Return x with K x = rhs for factorization ``mnum`` of K (values: K's, kept alive)."""
        b = np.ascontiguousarray(rhs, dtype=self._dtype)
        if b.shape != (self.n,):
            raise SolverError(f"PARDISO: right-hand side shape {b.shape}; expected ({self.n},)")
        x = np.empty(self.n, dtype=self._dtype)
        self._call(33, mnum, values, b, x)
        return x.astype(np.float64, copy=False)

    def release(self, mnum: int) -> None:
        """Free the memory of factorization ``mnum`` (phase 0) and reuse its slot."""
        empty = np.zeros(0)
        self._call(0, mnum, empty, empty, empty)
        self._free.append(mnum)

    def __del__(self) -> None:
        # phase -1 frees everything the handle holds; suppressed at interpreter shutdown,
        # when the library may already be unloaded
        if getattr(self, "_analysed", False):
            empty = np.zeros(0)
            try:
                self._call(-1, 1, empty, empty, empty)
            except Exception:  # noqa: BLE001, S110 -- nothing to report to at shutdown
                pass


class PardisoFactor:
    """One numerical factorization held in a :class:`PardisoPattern` slot."""

    backend = "pardiso"

    def __init__(self, pattern: PardisoPattern, mnum: int, values: _Values, nbytes: int):
        self._pattern: PardisoPattern | None = pattern
        self._mnum = mnum
        self._values = values  # phase 33 may refine iteratively with the matrix: keep it
        self.nbytes = nbytes + values.nbytes

    def solve(self, rhs: FloatArray) -> FloatArray:
        """Return the solution x of K x = rhs."""
        if self._pattern is None:
            raise SolverError("PARDISO: solve after release; expected a live factorization")
        return self._pattern.solve(self._mnum, self._values, rhs)

    def release(self) -> None:
        """Free the factorization now (idempotent); later solves raise SolverError."""
        pattern, self._pattern = self._pattern, None
        if pattern is not None:
            pattern.release(self._mnum)

    def __del__(self) -> None:
        try:
            self.release()
        except Exception:  # noqa: BLE001, S110 -- at interpreter shutdown MKL may be gone
            pass


def factor_once(matrix: Any, threads: int = 1) -> PardisoFactor:
    """Analyse and factor one SPD matrix (its upper triangle is read) on ``threads`` threads."""
    upper = sp.triu(sp.csr_array(matrix, dtype=np.float64), format="csr")
    upper.sort_indices()
    return PardisoPattern(upper, maxfct=1, threads=threads).factor(upper.data)
