"""Benchmark the adaptive TR-BDF2 stepper against fixed-step backward Euler and scipy's BDF.

All cases integrate the same semi-discrete board model M T' + A T = g + B p(t) over the board's
whole power sequence (``[run] duration_s``; default board ``demo_boards/buck_4layer``):

* ``reference``  TR-BDF2 at a very tight tolerance (rtol 1e-6, atol 1e-5 K): the peak junction
  temperature of every part, against which every other case is scored. ``refcheck`` repeats it
  at 10x looser tolerances; their difference bounds the reference's own error.
* ``trbdf2``     adaptive TR-BDF2 at the board's own ``[run]`` rtol/atol.
* ``loose``      adaptive TR-BDF2 with rtol and atol both 3, 10 and 30 times the board's. The
  quickest TR-BDF2 run (these or ``trbdf2``) whose peak junction temperatures all lie within
  ``--be-target`` of the reference is TR-BDF2 "at equal accuracy": the ratios at 0.1 K compare
  it with the largest backward Euler step that meets the same 0.1 K, the ratios at TR-BDF2's
  own accuracy compare ``trbdf2`` with backward Euler made as accurate as ``trbdf2`` (a work-
  precision comparison: each method at the cheapest setting that meets the accuracy).
* ``be``         fixed-step backward Euler (steps land on every breakpoint), dt halved from
  ``--be-dt0`` until every peak junction temperature is within ``--be-target`` (0.1 K) of the
  reference and, if TR-BDF2 came closer than that, within TR-BDF2's own error too (equal
  accuracy both ways). A run whose predicted stepping time would exceed what is left of
  ``--be-budget`` is not started; the dt and cost needed are then extrapolated from the finest
  measured run (error ~ dt, steps counted exactly from the breakpoints, seconds per step and
  per factorization as measured) and the output says so.
* ``be_constant`` backward Euler with one constant step t = k dt over the whole sequence,
  landing on no breakpoint: the literal fixed step. Each step is loaded with every part's exact
  mean power over it (a pulse shorter than dt keeps its energy). dt is halved as for ``be``,
  with its own ``--be-budget``. Landing on the breakpoints is itself a form of adaptivity, so
  ``be`` is the stronger baseline; both are reported.
* ``ivp``        ``scipy.integrate.solve_ivp(method="BDF")`` on y' = M^-1 (g + B p(t) - A y)
  (M is lumped, so M^-1 is a diagonal scaling) with the constant sparse Jacobian -M^-1 A,
  integrated for the rise y = T - T_ambient with the same rtol/atol as ``trbdf2``. solve_ivp
  cannot land on the discontinuities of p(t), so it is restarted at every breakpoint, interval
  by interval. It stops at ``--ivp-budget`` seconds (its time is then a lower bound).
* ``check``      the full ``run_check`` of the board (mesh, assembly, steady state, stepping,
  checks), the time an engineer waits for a verdict.

Every case runs in its own child process. Peak memory is the peak resident set size of that
process during the case: the kernel's high-water mark (VmHWM) is reset through
``/proc/self/clear_refs`` once the model is built, so the figure covers the case itself plus the
model it holds (matrices, mesh), but not Python start-up or meshing. Where the reset is refused
the figure is ``ru_maxrss`` of the whole child (marked with ``*``).

``--size S`` multiplies ``run.mesh_refinement`` by S. DOFs grow as S^2 only once the far field
dominates the mesh; measured on the demo board: 12 k at S = 1, 51 k at 3, 228 k at 8, 1.02 M
at 24. Above ``--full-max-dofs`` only ``trbdf2`` runs unless ``--cases`` asks for more;
``--duration`` shortens the sequence and ``--cache-size`` bounds the factorizations held (each
one holds 2.5 GiB at 1 M DOFs with PARDISO: 334 M stored entries of L).

Usage::

    python scripts/bench_stepper.py --threads 1 --json demo.json   # demo board, every case
    python scripts/bench_stepper.py --threads 1 --cases trbdf2,reference,be_constant \
        --be-dt0 0.00390625 --be-budget 1500     # one constant dt, measured down to 1.95 ms
    python scripts/bench_stepper.py --size 8                       # ~230 k DOFs, TR-BDF2 only
    python scripts/bench_stepper.py --size 24 --duration 0.1 --cache-size 3   # ~1 M DOFs
    python scripts/bench_stepper.py --size 24 --cache-gib 8.5    # 1 M DOFs, three factorizations
    python scripts/bench_stepper.py --show demo.json               # print a saved run again
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import scipy.sparse as sp

DEMO_BOARD = Path(__file__).resolve().parents[1] / "demo_boards" / "buck_4layer" / "board.toml"
REF_RTOL, REF_ATOL = 1e-6, 1e-5  # reference tolerances (dimensionless, K)
EQUAL_ACCURACY = 0.1  # K: backward Euler must match every peak Tj of the reference this well
# K: no BE target below this; the reference itself is only good to ~1e-3 K (on the demo board
# the refcheck run, at 10x its tolerances, differs from it by 0.8 mK)
MIN_TARGET = 1e-3
# the library sets PARDISO's thread count itself (BOARDHEAT_THREADS overrides its choice); the
# others cover MKL/OpenMP/BLAS as loaded by scipy and numpy
THREAD_VARIABLES = (
    "BOARDHEAT_THREADS",
    "OMP_NUM_THREADS",
    "MKL_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
)
ALL_CASES = ("trbdf2", "reference", "refcheck", "loose", "be", "be_constant", "ivp", "check")
LOOSEN = (3.0, 10.0, 30.0)  # the "loose" TR-BDF2 runs: board rtol and atol times these

Figures = dict[str, Any]


class BudgetSpentError(Exception):
    """Raised inside solve_ivp's right-hand side when the wall-time budget is spent."""

    def __init__(self, t: float) -> None:
        super().__init__(f"wall-time budget spent at t={t:.6g} s")
        self.t = t


# ---------------------------------------------------------------- child side: one case


def _status_kib(key: str) -> float:
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith(key + ":"):
                return float(line.split()[1])
    raise KeyError(key)


def start_memory_window() -> tuple[float, bool]:
    """Reset the peak-RSS mark if the kernel allows it; return (current RSS MiB, reset done)."""
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")  # 5: reset the resident-set high-water mark (Linux >= 4.0)
        return _status_kib("VmRSS") / 1024.0, True
    except OSError:
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
        return rss, False


def peak_memory() -> float:
    """Return the peak resident set size since the last reset (or since start), MiB."""
    try:
        return _status_kib("VmHWM") / 1024.0
    except (OSError, KeyError):
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def scaled_board(spec: Figures) -> Any:
    """Load the board, scale its mesh refinement by ``size`` and cut its sequence short."""
    from boardheat.board import load_board

    board = load_board(spec["board"])
    changes: dict[str, Any] = {"mesh_refinement": board.run.mesh_refinement * spec["size"]}
    if spec.get("duration"):
        duration = float(spec["duration"])
        changes["duration"] = duration
        changes["snapshot_times"] = tuple(t for t in board.run.snapshot_times if t <= duration)
    return board.with_run(**changes)


def model_figures(model: Any) -> Figures:
    s = model.system
    every = s.n_dofs if s.prolong is None else s.prolong.shape[0]  # all nodes + ladder unknowns
    ladders = every - s.n_fe
    return {
        "dofs": int(s.n_dofs),
        "nodes_2d": int(model.mesh.n_nodes),
        "layers_z": int(s.nz),
        # finite-element nodes kept as unknowns (far columns drop graded ones)
        "nodes_kept": int(s.n_dofs - ladders),
        "seconds_mesh": float(model.mesh.seconds),
        "seconds_assembly": float(s.seconds),
    }


def peak_junction(model: Any, t: np.ndarray, probes: np.ndarray) -> dict[str, float]:
    """Return the peak junction temperature (K) of every part, as ``run_check`` computes it."""
    # the private helper is used on purpose: the benchmark must score exactly the quantity the
    # check reports (probe temperature plus theta_jb times the larger one-sided power)
    from boardheat.run import _traces

    traces = _traces(model, t, probes)
    peaks = traces.tj.max(axis=0)
    return {refdes: float(v) for refdes, v in zip(traces.refdes, peaks, strict=True)}


def case_stepper(spec: Figures, model: Any) -> Figures:
    from boardheat.run import make_ode
    from boardheat.stepping import StepperOptions, integrate

    board, s = model.board, model.system
    ode = make_ode(model)
    T0 = np.full(s.n_dofs, board.environment.ambient)
    opts = StepperOptions(
        method=spec["method"],
        rtol=spec["rtol"],
        atol=spec["atol"],
        fixed_dt=spec.get("fixed_dt"),
        backend=spec["backend"],
        cache_size=spec["cache_size"],
        ladder_ratio=spec.get("ladder_ratio", 2.0),
        precision=spec.get("precision", "auto"),
    )
    last = [time.perf_counter()]

    def progress(t: float, steps: int) -> None:
        # long cases (1 M DOFs run for tens of minutes) say where they are every 30 s
        now = time.perf_counter()
        if now - last[0] >= 30.0:
            last[0] = now
            where = f"    [{spec['label']}] t = {t:.6g} s, {steps} steps"
            print(where, file=sys.stderr, flush=True)

    sol = integrate(ode, T0, board.run.duration, s.P, opts, progress=progress)
    st = sol.stats
    stops = np.unique(np.append(ode.breakpoints, board.run.duration))
    return {
        "steps": st.steps,
        "rejected": st.rejected,
        "factorizations": st.factorizations,
        "distinct_dt": st.distinct_dt,
        "solves": st.solves,
        "seconds_factor": st.seconds_factor,
        "seconds_solve": st.seconds_solve,
        "seconds_wall": st.seconds_total,
        "backend": st.backend,
        "precision": st.precision,
        "refinements": st.refinements,
        "peak_tj": peak_junction(model, sol.t, sol.probes),
        "stops": stops.tolist(),
        "complete": True,
    }


def case_be_constant(spec: Figures, model: Any) -> Figures:
    """Backward Euler with one constant step over the whole sequence, landing on no breakpoint.

    The literal fixed step: t_k = k dt. Each step is loaded with the exact mean power of every
    part over that step (from :meth:`Schedule.energy_until`), the kindest load for a step that
    straddles a power change: it keeps every pulse's energy, where sampling P at the step's end
    would drop a pulse shorter than dt or hold it for a whole step. One factorization of
    M/dt + A serves every step.
    """
    from boardheat.run import make_ode
    from boardheat.stepping.solvers import make_factorization

    board, s = model.board, model.system
    ode = make_ode(model)
    duration = board.run.duration
    n, _ = fixed_steps(np.array([duration]), spec["fixed_dt"])  # no stop before the end
    dt = duration / n
    start = time.perf_counter()
    t = np.linspace(0.0, duration, n + 1)
    energy = np.stack([part.schedule.energy_until(t) for part in board.parts], axis=1)
    mean_power = np.diff(energy, axis=0) / dt  # (n, parts) W
    m_dt = sp.csr_array(ode.M / dt)
    began = time.perf_counter()
    factor = make_factorization(sp.csr_array(m_dt + ode.A), spec["backend"])
    seconds_factor = time.perf_counter() - began
    u = np.full(s.n_dofs, board.environment.ambient)
    probes = np.empty((n + 1, s.P.shape[0]))
    probes[0] = s.P @ u
    seconds_solve, last = 0.0, time.perf_counter()
    for k in range(n):
        rhs = m_dt @ u + ode.g + ode.B @ mean_power[k]
        began = time.perf_counter()
        u = factor.solve(rhs)
        seconds_solve += time.perf_counter() - began
        probes[k + 1] = s.P @ u
        if began - last >= 30.0:
            last = began
            where = f"    [{spec['label']}] t = {t[k + 1]:.6g} s, {k + 1} steps"
            print(where, file=sys.stderr, flush=True)
    wall = time.perf_counter() - start
    return {
        "steps": n,
        "rejected": 0,
        "factorizations": 1,
        "distinct_dt": 1,
        "solves": n,
        "seconds_factor": seconds_factor,
        "seconds_solve": seconds_solve,
        "seconds_wall": wall,
        "backend": getattr(factor, "backend", "?"),
        "peak_tj": peak_junction(model, t, probes),
        "complete": True,
    }


def case_ivp(spec: Figures, model: Any) -> Figures:
    from scipy.integrate import solve_ivp

    from boardheat.run import make_ode

    board, s = model.board, model.system
    ode = make_ode(model)
    m = np.asarray(ode.M.diagonal(), dtype=np.float64)
    if (ode.M - sp.diags_array(m)).count_nonzero():
        raise SystemExit("ivp case: M is not diagonal (consistent mass); expected a lumped M")
    inv_m = 1.0 / m
    A, B = ode.A, ode.B
    jac = sp.csc_array(sp.diags_array(-inv_m) @ A)  # constant: the ODE is linear
    T_amb = np.full(s.n_dofs, board.environment.ambient)
    f_amb = ode.g - A @ T_amb  # load at ambient; the unknown is the rise y = T - T_amb
    stops = np.concatenate([[0.0], ode.breakpoints, [board.run.duration]])
    start = time.perf_counter()
    deadline = start + spec["budget"]
    counts = {"nfev": 0, "njev": 0, "nlu": 0, "steps": 0, "intervals": 0}
    times, probes = [np.zeros(1)], [(s.P @ T_amb)[None, :]]
    y = np.zeros(s.n_dofs)
    t_reached = 0.0
    complete = True
    for a, b in zip(stops[:-1], stops[1:], strict=True):

        def rhs(t: float, u: np.ndarray, b: float = b) -> np.ndarray:
            if time.perf_counter() > deadline:
                raise BudgetSpentError(t)
            # one-sided power: the interval's own piece of p(t), also at its two ends
            p = ode.power(t, "left" if t >= b else "right")
            return inv_m * (f_amb + B @ p - A @ u)

        try:
            sol = solve_ivp(
                rhs, (a, b), y, method="BDF", jac=jac, rtol=spec["rtol"], atol=spec["atol"]
            )
        except BudgetSpentError as stop:
            t_reached, complete = stop.t, False
            break
        if not sol.success:
            raise SystemExit(f"ivp case: solve_ivp failed on [{a}, {b}] s: {sol.message}")
        for key in ("nfev", "njev", "nlu"):
            counts[key] += int(getattr(sol, key))
        counts["steps"] += sol.t.size - 1
        counts["intervals"] += 1
        times.append(sol.t[1:])
        probes.append((s.P @ (sol.y[:, 1:] + T_amb[:, None])).T)
        y = sol.y[:, -1].copy()
        t_reached = float(b)
        # scipy's BDF object and its LU closure form a reference cycle: without a collection
        # every finished interval keeps its last LU until the cyclic collector happens to run
        # (3.4 GB peak measured on the demo board instead of about one LU)
        del sol
        gc.collect()
    wall = time.perf_counter() - start
    t_all, p_all = np.concatenate(times), np.concatenate(probes)
    return {
        **counts,
        "seconds_wall": wall,
        "t_reached": t_reached,
        "complete": complete,
        "peak_tj": peak_junction(model, t_all, p_all) if complete else None,
    }


def case_check(spec: Figures, board: Any) -> Figures:
    from boardheat.run import RunOptions, run_check

    start = time.perf_counter()
    result = run_check(board, RunOptions(backend=spec["backend"]))
    wall = time.perf_counter() - start
    stats = dict(result.stats)
    return {
        "seconds_wall": wall,
        "steps": stats.get("steps"),
        "factorizations": stats.get("factorizations"),
        "solves": stats.get("solves"),
        "seconds_factor": stats.get("seconds_factor"),
        "seconds_solve": stats.get("seconds_solve"),
        "seconds_stepping": stats.get("seconds_stepping"),
        "seconds_steady": stats.get("seconds_steady"),
        "seconds_mesh": stats.get("seconds_mesh"),
        "seconds_assembly": stats.get("seconds_assembly"),
        "dofs": stats.get("dofs"),
        "backend": stats.get("backend"),
        "complete": True,
    }


def solver_settings() -> Figures:
    """Return the MKL thread count now in force and the library's cache memory budget."""
    out: Figures = {"mkl_threads": None, "cache_budget_gib": None}
    try:
        import ctypes

        import pypardiso

        library = pypardiso.PyPardisoSolver().libmkl
        get_threads = library.MKL_Get_Max_Threads
        get_threads.restype = ctypes.c_int
        out["mkl_threads"] = int(get_threads())
    except (ImportError, OSError, AttributeError):
        pass
    from boardheat.stepping import solvers

    budget = getattr(solvers, "memory_budget", None)
    if budget is not None:
        out["cache_budget_gib"] = budget() / 1024.0**3
    return out


def run_child(spec: Figures) -> Figures:
    """Run one case in this process and return its figures."""
    from boardheat.run import build_model

    board = scaled_board(spec)
    out: Figures = {"case": spec["case"], "label": spec["label"]}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if spec["case"] == "check":
            rss_start, reset = start_memory_window()  # the check builds its own model
            out.update(case_check(spec, board))
        else:
            model = build_model(board)
            out.update(model_figures(model))
            rss_start, reset = start_memory_window()
            if spec["case"] == "ivp":
                out.update(case_ivp(spec, model))
            elif spec["case"] == "be_constant":
                out.update(case_be_constant(spec, model))
            else:
                out.update(case_stepper(spec, model))
    out["rss_start_mib"] = rss_start
    out["peak_mib"] = peak_memory()
    out.update(solver_settings())
    out["peak_is_case_only"] = reset
    out["warnings"] = sorted({str(w.message) for w in caught})
    return out


# ---------------------------------------------------------------- parent side


def launch(spec: Figures, args: argparse.Namespace) -> Figures:
    """Run one case in a child process (or here, with --in-process) and return its figures."""
    start = time.perf_counter()
    if args.in_process:
        figures = run_child(spec)
        figures["seconds_process"] = time.perf_counter() - start
        return figures
    threads = args.threads
    env = dict(os.environ)
    if threads is not None:
        for key in THREAD_VARIABLES:
            env[key] = str(threads)
    with tempfile.TemporaryDirectory() as tmp:
        out_path = Path(tmp) / "case.json"
        cmd = [sys.executable, __file__, "--child", json.dumps(spec), "--child-out", str(out_path)]
        subprocess.run(cmd, check=True, env=env)
        figures: Figures = json.loads(out_path.read_text())
    figures["seconds_process"] = time.perf_counter() - start
    print(
        f"  [{spec['label']}] done in {figures['seconds_process']:.1f} s of process time",
        file=sys.stderr,
        flush=True,
    )
    return figures


def peak_error(case: Figures, ref: Figures | None) -> float | None:
    """Return max over parts of |peak Tj - reference peak Tj|, K (None if not comparable)."""
    if ref is None or case.get("peak_tj") is None:
        return None
    return max(abs(case["peak_tj"][k] - v) for k, v in ref["peak_tj"].items())


def fixed_steps(stops: np.ndarray, dt: float) -> tuple[int, int]:
    """Return (steps, distinct step sizes) of fixed-step stepping that lands on every stop.

    Mirrors the stepper's fixed mode: each gap between stops is cut into ceil(gap / dt) equal
    steps. With the end of the run as the only stop: one constant step for the whole run.
    """
    gaps = np.diff(np.concatenate([[0.0], stops]))
    counts = np.maximum(1, np.ceil(gaps / dt * (1.0 - 1e-12)))
    sizes = np.unique(np.round(np.log2(gaps / counts), 9))
    return int(counts.sum()), int(sizes.size)


def step_cost(runs: list[Figures]) -> tuple[float, float]:
    """Return (fixed s, s per step) of stepping without factorizations, fitted to the BE runs.

    A straight line through (steps, wall - factor seconds) of the runs separates the per-run
    set-up from the per-step work; with a single run the whole cost is charged to its steps.
    """
    steps = np.array([r["steps"] for r in runs], dtype=float)
    work = np.array([r["seconds_wall"] - r["seconds_factor"] for r in runs])
    if np.unique(steps).size >= 2:
        slope, fixed = np.polyfit(steps, work, 1)
        if slope > 0.0 and fixed >= 0.0:
            return float(fixed), float(slope)
    return 0.0, float(work[-1] / steps[-1])


def be_sweep(
    args: argparse.Namespace,
    base: Figures,
    ref: Figures,
    targets: list[float],
    constant: bool = False,
) -> tuple[list[Figures], list[Figures]]:
    """Halve the backward Euler step until it meets every target error; extrapolate past budget.

    ``constant`` False: the stepper's fixed mode, whose steps land on every breakpoint (case
    ``be``); True: one constant step, loaded with each step's mean power (``be_constant``).
    Returns the measured runs and, for each target (K), the first (largest-dt) run that meets
    it, or an extrapolated estimate.
    """
    stops = np.array(ref["stops"])
    name = "BE constant dt" if constant else "backward Euler dt"
    runs: list[Figures] = []
    spent = 0.0
    dt = args.be_dt0
    note = ""
    while True:
        steps, _ = fixed_steps(stops[-1:] if constant else stops, dt)
        if runs:
            fixed, per_step = step_cost(runs)
            predicted = fixed + steps * per_step
            if spent + predicted > args.be_budget:
                note = (
                    f"dt = {dt:.4g} s not run: predicted {predicted:.0f} s of stepping exceeds "
                    f"what is left of --be-budget {args.be_budget:g} s"
                )
                break
        case = "be_constant" if constant else "be"
        spec = {**base, "case": case, "label": f"{name} {dt:.4g}", "fixed_dt": dt}
        # rtol/atol are not used by fixed-step backward Euler (it has no error estimate)
        r = launch({**spec, "method": "backward_euler", "rtol": 0.0, "atol": 1.0}, args)
        r["dt"] = dt
        r["error"] = peak_error(r, ref)
        runs.append(r)
        spent += r["seconds_wall"]
        if r["error"] <= min(targets):
            break
        if dt / 2.0 < args.be_dt_min:
            note = f"dt = {dt / 2:.4g} s is below --be-dt-min {args.be_dt_min:g} s"
            break
        dt /= 2.0
    out = []
    for target in targets:
        hit = next((r for r in runs if r["error"] <= target), None)
        if hit is None:
            out.append(extrapolate_be(runs, stops, note, target, constant))
        else:
            how = f"measured: largest dt of the sweep within {target:.3g} K is {hit['dt']:.4g} s"
            out.append({**hit, "target": target, "extrapolated": False, "how": how})
    return runs, out


def extrapolate_be(
    runs: list[Figures], stops: np.ndarray, note: str, target: float, constant: bool = False
) -> Figures:
    """Estimate the fixed dt and cost at which backward Euler's peak Tj error reaches target.

    Backward Euler is first order, and an interval between breakpoints that is shorter than dt
    is taken in one step whose error does not fall with dt at all, so the error falls at most
    in proportion to dt: error(dt') ~ error(dt) * dt' / dt from the finest measured run gives
    the largest dt that could meet the target, i.e. a lower bound on the steps. The slope
    fitted to the last measured runs is reported beside it.

    With a constant step (``constant``) the same rule is an estimate only: while dt is longer
    than a pulse, halving dt can cut the error by more than half (the pulse's energy is spread
    over fewer, shorter steps), so the steps are then not a lower bound.
    """
    usable = [r for r in runs if r["error"] > 0.0][-3:]
    finest = runs[-1]
    order = math.nan
    if len(usable) >= 2:
        dts = np.log([r["dt"] for r in usable])
        errs = np.log([r["error"] for r in usable])
        order = float(np.polyfit(dts, errs, 1)[0])
    dt_needed = finest["dt"] * target / finest["error"]
    steps, sizes = fixed_steps(stops[-1:] if constant else stops, dt_needed)
    fixed, per_step = step_cost(runs)
    per_factor = finest["seconds_factor"] / max(1, finest["factorizations"])
    solve_per = finest["seconds_solve"] / max(1, finest["solves"])
    how = (
        f"EXTRAPOLATED ({note}): error ~ dt (first order; fitted slope of the last "
        f"{len(usable)} runs {order:.2f}) from {finest['error']:.4f} K at dt = "
        f"{finest['dt']:.4g} s gives dt <= {dt_needed:.3g} s for {target:.3g} K; "
        + (
            f"{steps} constant steps (an estimate, not a bound); "
            if constant
            else f"steps counted exactly from the breakpoints ({steps}, at least); "
        )
        + f"time = {fixed:.2f} s + steps x "
        f"{per_step * 1e3:.2f} ms (line fitted to the measured runs) + {sizes} factorizations "
        f"x {per_factor:.2f} s (as measured at dt = {finest['dt']:.4g} s); memory as measured "
        "there"
    )
    return {
        "label": "BE constant (extrap.)" if constant else "backward Euler (extrap.)",
        "target": target,
        "dt": dt_needed,
        "steps": steps,
        "rejected": 0,
        "factorizations": sizes,
        "solves": steps,
        "seconds_factor": sizes * per_factor,
        "seconds_solve": steps * solve_per,
        "seconds_wall": fixed + steps * per_step + sizes * per_factor,
        "peak_mib": finest["peak_mib"],
        "peak_is_case_only": finest["peak_is_case_only"],
        "error": target,
        "order": order,
        "extrapolated": True,
        "how": how,
    }


def fmt(value: Any, spec: str = "", missing: str = "-") -> str:
    return missing if value is None else format(value, spec)


def table_row(label: str, r: Figures, error: float | None, approx: bool = False) -> str:
    mem = fmt(r.get("peak_mib"), ".0f") + ("" if r.get("peak_is_case_only", True) else "*")
    tilde = "~" if approx else ""
    return (
        f"{label:24} {tilde + fmt(r.get('steps'), 'd'):>9} {fmt(r.get('rejected'), 'd'):>5} "
        f"{tilde + fmt(r.get('factorizations'), 'd'):>7} {tilde + fmt(r.get('solves'), 'd'):>9} "
        f"{tilde + fmt(r.get('seconds_factor'), '.2f'):>9} "
        f"{tilde + fmt(r.get('seconds_solve'), '.2f'):>9} "
        f"{tilde + fmt(r.get('seconds_wall'), '.2f'):>9} {mem:>8} {fmt(error, '.4f'):>10}"
    )


def verdict(value: float | None, target: float, above: bool) -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    return "met" if (value >= target if above else value <= target) else "MISSED"


def report(fig: Figures) -> None:
    """Print the figures of one benchmark run: header, table, notes and ratios."""
    cases = fig["cases"]
    head = next(iter(cases.values()))
    print(f"board            {fig['board']}")
    print(
        f"size             {fig['size']:g} (mesh_refinement x {fig['size']:g}); "
        f"duration {fig['duration']:g} s; backend {fig['backend']}; "
        f"threads {fig['threads'] or 'default'}; cpu cores {fig.get('cpu_cores', '?')}; "
        f"factorization cache {fig.get('cache_size', 40)}"
        + (
            f" and <= {head['cache_budget_gib']:.1f} GiB (library budget); "
            if head.get("cache_budget_gib")
            else "; "
        )
        + f"MKL threads in force {head.get('mkl_threads') or '?'}; "
        f"TR-BDF2 ladder ratio {fig.get('ladder_ratio', 2.0):g}; "
        f"load average (1 min) at start {fig['load_average']:.2f}, "
        f"at end {fig['load_average_end']:.2f}"
    )
    nodes = head["nodes_2d"] * head["layers_z"]
    kept = head.get("nodes_kept", nodes)
    extra = head["dofs"] - kept
    print(
        f"model            {head['dofs']} DOFs ({head['nodes_2d']} board-plane nodes x "
        f"{head['layers_z']} through-thickness nodes"
        + (f", {kept} of those {nodes} kept" if kept != nodes else "")
        + (f" + {extra} junction-network unknowns" if extra else "")
        + f"); mesh {head['seconds_mesh']:.2f} s, assembly {head['seconds_assembly']:.2f} s"
    )
    for note in fig["notes"]:
        print(f"note             {note}")
    print()
    print(
        f"{'case':24} {'steps':>9} {'rej':>5} {'factor':>7} {'solves':>9} {'factor s':>9} "
        f"{'solve s':>9} {'wall s':>9} {'peak MiB':>8} {'|dTj| K':>10}"
    )
    ref = cases.get("reference")
    for key in ("reference", "refcheck", "trbdf2"):
        if key in cases:
            label = cases[key]["label"]
            print(
                table_row(
                    label, cases[key], None if key == "reference" else peak_error(cases[key], ref)
                )
            )
    for r in fig.get("tr_sweep", []):
        print(table_row(r["label"], r, r["error"]))
    for key in ("be", "be_constant"):
        for r in fig.get(f"{key}_sweep", []):
            print(table_row(r["label"], r, r["error"]))
        for be in fig.get(f"{key}_equal", []):
            if be["extrapolated"]:
                print(table_row(be["label"], be, be["error"], approx=True))
    if "ivp" in cases:
        r = cases["ivp"]
        label = "solve_ivp BDF" + ("" if r["complete"] else " (stopped)")
        row = {**r, "factorizations": r["nlu"], "solves": None}
        print(table_row(label, row, peak_error(r, ref)))
    if "check" in cases:
        print(table_row("run_check (whole)", cases["check"], None))
    for key in ("reference", "trbdf2"):
        r = cases.get(key, {})
        if r.get("precision") == "mixed":
            print(
                f"{r['label']}: factors in single precision, solves refined in double "
                f"({r['refinements']} refinement solves, counted in solve s, not in solves)"
            )
    print()
    print(
        "wall s: stepping only (run_check: the whole check after reading the board file). "
        "peak MiB: peak resident memory of the case's own process, model included"
        + ("; * = whole process incl. meshing" if fig["memory_fallback"] else "")
        + ". |dTj|: max over parts of |peak Tj - reference peak Tj|."
    )
    equal = equal_accuracy_trbdf2(fig)
    if equal is not None:
        print(
            f"TR-BDF2 within {equal['target']:.4g} K: quickest run that meets it is "
            f"{equal['label']} (atol {equal['atol']:g} K), |dTj| {equal['error']:.4f} K"
        )
    for be in fig.get("be_equal", []):
        print(f"backward Euler within {be['target']:.4g} K: {be['how']}")
    for be in fig.get("be_constant_equal", []):
        print(f"backward Euler, constant dt, within {be['target']:.4g} K: {be['how']}")
    if fig.get("be_equal") or fig.get("be_constant_equal"):
        print(
            "backward Euler: 'backward Euler dt' lands on every breakpoint (each gap between "
            "power changes in equal steps <= dt, P at the step's end); 'BE constant dt' steps "
            "t = k dt regardless of them, each step loaded with the parts' mean power over it"
        )
    if "ivp" in cases:
        r = cases["ivp"]
        print(
            f"solve_ivp BDF: restarted at each of {len(ref['stops']) - 1 if ref else '?'} "
            f"breakpoints ({r['intervals']} intervals done), nfev {r['nfev']}, njev {r['njev']} "
            f"(constant sparse Jacobian), nlu {r['nlu']} (SuperLU, default COLAMD), "
            f"rtol {r['rtol']:g}, atol {r['atol']:g} K on the rise (RMS norm)"
            + (
                ""
                if r["complete"]
                else f"; STOPPED by --ivp-budget at t = {r['t_reached']:.4g} s of "
                f"{fig['duration']:g} s: its time is a lower bound"
            )
        )
    for key, r in cases.items():
        for w in r.get("warnings", []):
            print(f"warning [{key}]: {w}")
    print()
    print("ratios (target)")
    for name, (value, target, above, note) in fig["ratios"].items():
        shown = "n/a" if value is None else f"{value:.2f}"
        sign = ">=" if above else "<="
        met = verdict(value, target, above)
        print(f"  {name:52} {shown:>9}   target {sign} {target:g}: {met}{note}")


def ratios(fig: Figures) -> dict[str, tuple[float | None, float, bool, str]]:
    cases = fig["cases"]
    tr = cases.get("trbdf2")
    out: dict[str, tuple[float | None, float, bool, str]] = {}
    if tr is not None:
        busy = tr["seconds_factor"] + tr["seconds_solve"]
        out["stepper overhead wall/(factor+solve)"] = (tr["seconds_wall"] / busy, 1.3, False, "")
    equal = equal_accuracy_trbdf2(fig)
    landing = [(be, "BE") for be in fig.get("be_equal", [])]
    constant = [(be, "BE const dt") for be in fig.get("be_constant_equal", [])]
    for be, who in [*landing, *constant] if tr is not None else []:
        bound = "estimate" if who != "BE" else "at least"
        tag = f" (BE extrapolated, {bound})" if be["extrapolated"] else ""
        # at the issue's 0.1 K both methods run at their cheapest setting that meets it; at a
        # tighter target (TR-BDF2's own accuracy) TR-BDF2 runs at the board's tolerances
        if be["target"] >= fig.get("be_target", EQUAL_ACCURACY) and equal is not None:
            mine, at = equal, f"both within {be['target']:.2g} K"
        elif be["target"] >= fig.get("be_target", EQUAL_ACCURACY):
            mine, at = tr, f"BE within {be['target']:.2g} K, TR-BDF2 at board tol"
        else:
            mine, at = tr, f"both within {be['target']:.2g} K"
        out[f"steps {who} / TR-BDF2, {at}"] = (be["steps"] / mine["steps"], 20.0, True, tag)
        time_ratio = be["seconds_wall"] / mine["seconds_wall"]
        out[f"time {who} / TR-BDF2, {at}"] = (time_ratio, 10.0, True, tag)
    ivp = cases.get("ivp")
    if tr is not None and ivp is not None:
        tag = "" if ivp["complete"] else " (lower bound: stopped by budget)"
        out["time solve_ivp / TR-BDF2"] = (ivp["seconds_wall"] / tr["seconds_wall"], 1.0, True, tag)
    if "check" in cases:
        out["run_check wall s"] = (cases["check"]["seconds_wall"], 10.0, False, "")
    return out


def equal_accuracy_trbdf2(fig: Figures) -> Figures | None:
    """Return the quickest TR-BDF2 run whose peak Tj error meets the target (None if none)."""
    target = fig.get("be_target", EQUAL_ACCURACY)
    ref = fig["cases"].get("reference")
    runs = [fig["cases"]["trbdf2"], *fig.get("tr_sweep", [])] if "trbdf2" in fig["cases"] else []
    scored = [{**r, "error": peak_error(r, ref)} for r in runs]
    meeting = [r for r in scored if r["error"] is not None and r["error"] <= target]
    if not meeting:
        return None
    return {**min(meeting, key=lambda r: r["seconds_wall"]), "target": target}


def write_json(path: Path, fig: Figures) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(fig, indent=2, default=float) + "\n")
    tmp.replace(path)


def _cache_gib(text: str) -> float:
    from boardheat.stepping.solvers import positive_gib  # the rule BOARDHEAT_CACHE_GIB follows

    value = positive_gib(text)
    if value is None:
        raise argparse.ArgumentTypeError(f"{text!r}: expected a number of GiB > 0")
    return value


def parse_args(argv: list[str] | None = None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--board", type=Path, default=DEMO_BOARD, help="board file (TOML)")
    parser.add_argument("--size", type=float, default=1.0, help="mesh_refinement multiplier")
    parser.add_argument("--duration", type=float, help="cut the sequence to this many seconds")
    parser.add_argument(
        "--cases", default="auto", help=f"comma-separated subset of {','.join(ALL_CASES)}"
    )
    parser.add_argument(
        "--only-trbdf2", action="store_true", help="run the adaptive TR-BDF2 case only"
    )
    parser.add_argument(
        "--full-max-dofs",
        type=int,
        default=30_000,
        help="with --cases auto, above this many DOFs only trbdf2 runs",
    )
    parser.add_argument("--backend", default="auto", choices=["auto", "splu", "cholmod", "pardiso"])
    parser.add_argument("--cache-size", type=int, default=40, help="factorizations kept")
    parser.add_argument(
        "--precision",
        default="auto",
        choices=["auto", "double", "mixed"],
        help="factorization precision of the TR-BDF2 cases (StepperOptions.precision)",
    )
    parser.add_argument(
        "--cache-gib",
        type=_cache_gib,
        default=None,
        help="memory the cached factorizations may hold, GiB (sets BOARDHEAT_CACHE_GIB)",
    )
    parser.add_argument(
        "--ladder-ratio", type=float, default=2.0, help="step ladder ratio of the trbdf2 case"
    )
    parser.add_argument("--threads", type=int, help="OMP/MKL threads of every case process")
    parser.add_argument(
        "--be-target", type=float, default=EQUAL_ACCURACY, help="BE peak Tj error to reach, K"
    )
    parser.add_argument("--be-dt0", type=float, default=1.0, help="first backward Euler dt, s")
    parser.add_argument("--be-dt-min", type=float, default=1e-6, help="smallest BE dt tried, s")
    parser.add_argument(
        "--be-budget", type=float, default=600.0, help="stepping seconds for the BE sweep"
    )
    parser.add_argument("--ivp-budget", type=float, default=600.0, help="seconds for solve_ivp")
    parser.add_argument("--json", type=Path, help="write the figures as JSON to this file")
    parser.add_argument("--show", type=Path, help="print the table of a saved --json file and stop")
    parser.add_argument(
        "--in-process",
        action="store_true",
        help="run the cases in this process (quicker start; memory figures then include what "
        "earlier cases left behind)",
    )
    parser.add_argument("--child", help=argparse.SUPPRESS)  # internal: one case as JSON
    parser.add_argument("--child-out", type=Path, help=argparse.SUPPRESS)
    return parser.parse_args(argv)


def main(argv: list[str] | None = None) -> None:
    args = parse_args(argv)
    if args.child:
        write_json(args.child_out, run_child(json.loads(args.child)))
        return
    if args.show:
        report(json.loads(args.show.read_text()))
        return
    if args.cache_gib is not None:
        os.environ["BOARDHEAT_CACHE_GIB"] = repr(args.cache_gib)  # read by every case process
    if args.in_process and args.threads is not None:
        # read when MKL/OpenMP load, which happens with the first case's solver import
        for key in THREAD_VARIABLES:
            os.environ[key] = str(args.threads)
    board = scaled_board({"board": str(args.board), "size": args.size, "duration": args.duration})
    run = board.run
    base = {
        "board": str(args.board),
        "size": args.size,
        "duration": args.duration,
        "backend": args.backend,
        "cache_size": args.cache_size,
        "precision": args.precision,
    }
    fig: Figures = {
        "board": str(args.board),
        "size": args.size,
        "duration": run.duration,
        "backend": args.backend,
        "threads": args.threads,
        "cpu_cores": os.cpu_count(),
        "cache_size": args.cache_size,
        "ladder_ratio": args.ladder_ratio,
        "be_target": args.be_target,
        "load_average": os.getloadavg()[0],
        "cases": {},
        "notes": [],
    }
    cases = fig["cases"]
    tr_spec = {**base, "case": "trbdf2", "label": f"TR-BDF2 rtol {run.rtol:g}", "method": "trbdf2"}
    tr_opts = {"rtol": run.rtol, "atol": run.atol, "ladder_ratio": args.ladder_ratio}
    cases["trbdf2"] = launch({**tr_spec, **tr_opts}, args)
    cases["trbdf2"].update(rtol=run.rtol, atol=run.atol)
    dofs = cases["trbdf2"]["dofs"]
    if args.only_trbdf2:
        wanted = {"trbdf2"}
    elif args.cases == "auto":
        wanted = set(ALL_CASES) if dofs <= args.full_max_dofs else {"trbdf2"}
        if dofs > args.full_max_dofs:
            fig["notes"].append(
                f"{dofs} DOFs > --full-max-dofs {args.full_max_dofs}: only adaptive TR-BDF2 "
                "runs (no reference, backward Euler, solve_ivp or run_check)"
            )
    else:
        wanted = {c.strip() for c in args.cases.split(",") if c.strip()}
        unknown = wanted - set(ALL_CASES)
        if unknown:
            raise SystemExit(f"--cases: unknown {sorted(unknown)}; expected some of {ALL_CASES}")
    if wanted & {"be", "be_constant", "refcheck", "loose"}:
        wanted.add("reference")
    fig["backend"] = cases["trbdf2"]["backend"]
    if "reference" in wanted:
        label = f"reference rtol {REF_RTOL:g}"
        spec = {**tr_spec, "case": "reference", "label": label, "rtol": REF_RTOL, "atol": REF_ATOL}
        cases["reference"] = launch(spec, args)
    if "refcheck" in wanted:
        rtol, atol = 10 * REF_RTOL, 10 * REF_ATOL
        spec = {**tr_spec, "case": "refcheck", "label": f"ref. check rtol {rtol:g}"}
        cases["refcheck"] = launch({**spec, "rtol": rtol, "atol": atol}, args)
    if "loose" in wanted:
        fig["tr_sweep"] = []
        for factor in LOOSEN:
            rtol, atol = run.rtol * factor, run.atol * factor
            spec = {**tr_spec, "label": f"TR-BDF2 rtol {rtol:g}", "case": "loose"}
            r = launch({**spec, **tr_opts, "rtol": rtol, "atol": atol}, args)
            error = peak_error(r, cases.get("reference"))
            r.update(rtol=rtol, atol=atol, error=error, error_vs_reference=error)
            fig["tr_sweep"].append(r)
    if wanted & {"be", "be_constant"}:
        # the issue's criterion, and (when tighter) the accuracy TR-BDF2 actually reached
        targets = [args.be_target]
        tr_error = peak_error(cases["trbdf2"], cases["reference"])
        if tr_error is not None and MIN_TARGET <= tr_error < args.be_target:
            targets.append(tr_error)
        for key, constant in (("be", False), ("be_constant", True)):
            if key in wanted:
                runs, equal = be_sweep(args, base, cases["reference"], targets, constant)
                fig[f"{key}_sweep"], fig[f"{key}_equal"] = runs, equal
    if "ivp" in wanted:
        spec = {**base, "case": "ivp", "label": "solve_ivp BDF", "budget": args.ivp_budget}
        cases["ivp"] = launch({**spec, "rtol": run.rtol, "atol": run.atol}, args)
        cases["ivp"].update(rtol=run.rtol, atol=run.atol)
    if "check" in wanted:
        cases["check"] = launch({**base, "case": "check", "label": "run_check"}, args)
    for key, r in cases.items():
        if "peak_tj" in r:
            r["error_vs_reference"] = peak_error(r, cases.get("reference"))
        if "dofs" in r and r["dofs"] != dofs:
            fig["notes"].append(f"case {key} meshed to {r['dofs']} DOFs, not {dofs}")
    fig["memory_fallback"] = not all(r.get("peak_is_case_only", True) for r in cases.values())
    fig["ratios"] = ratios(fig)
    fig["load_average_end"] = os.getloadavg()[0]
    report(fig)
    if args.json:
        write_json(args.json, fig)


if __name__ == "__main__":
    main()
