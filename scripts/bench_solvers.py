"""Time sparse direct factorizations of a layered-board-like matrix M/dt + K.

The test matrix is a finite-volume analogue of the P1 x through-thickness assembly: a uniform
5-point grid in the board plane times a stack of layers (copper foils and FR-4 dielectric with
strongly contrasting conductivities), convection on both faces, and DOFs numbered with the
through-thickness index fastest. Every solver case runs in its own subprocess so that the peak
resident memory (``resource.getrusage(...).ru_maxrss``, which also sees C allocations) belongs
to that case alone.

Usage::

    python scripts/bench_solvers.py --dofs 50000 --dofs 100000
    python scripts/bench_solvers.py --dofs 20000 --solvers splu-mmd,splu-colamd

Material values: copper k = 390 W/(m K), rho*c = 3.44 MJ/(m^3 K); FR-4 k_xy = 0.8, k_z = 0.3
W/(m K), rho*c = 2.0 MJ/(m^3 K) (handbook ranges quoted in DESIGN.md); h = 10 W/(m^2 K) on both
faces (common practice for natural convection).
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import time

import numpy as np
import scipy.sparse as sp

# (thickness m, k_xy W/(m K), k_z W/(m K), rho*c J/(m^3 K)) from top to bottom: 4-layer stackup
COPPER = (35e-6, 390.0, 390.0, 3.44e6)
PREPREG = (0.2e-3, 0.8, 0.3, 2.0e6)
CORE = (0.5e-3, 0.8, 0.3, 2.0e6)
STACKUP = [COPPER, PREPREG, PREPREG, COPPER, CORE, CORE, COPPER, PREPREG, PREPREG, COPPER]
H_FACE = 10.0  # W/(m^2 K)
SOLVERS = ("splu-mmd", "splu-colamd", "cholmod", "pardiso")


def layered_board(n_dofs: int, pitch: float = 1e-3, dt: float = 1e-2):
    """Return (K, M) for about n_dofs unknowns: K in W/K (CSC), M diagonal in J/K."""
    nz = len(STACKUP)
    side = max(2, round(math.sqrt(n_dofs / nz)))
    nx = ny = side
    dz = np.array([layer[0] for layer in STACKUP])
    kxy = np.array([layer[1] for layer in STACKUP])
    kz = np.array([layer[2] for layer in STACKUP])
    rc = np.array([layer[3] for layer in STACKUP])
    area = pitch * pitch
    index = np.arange(nx * ny * nz).reshape(nx, ny, nz)  # through-thickness index fastest
    rows, cols, vals = [], [], []

    def couple(a, b, g):
        a, b, g = a.ravel(), b.ravel(), np.broadcast_to(g, a.shape).ravel()
        rows.extend([a, b, a, b])
        cols.extend([a, b, b, a])
        vals.extend([g, g, -g, -g])

    g_plane = kxy * dz  # k * (dz * pitch) / pitch
    couple(index[1:, :, :], index[:-1, :, :], g_plane)
    couple(index[:, 1:, :], index[:, :-1, :], g_plane)
    g_through = area / (dz[:-1] / (2 * kz[:-1]) + dz[1:] / (2 * kz[1:]))
    couple(index[:, :, 1:], index[:, :, :-1], g_through)
    faces = np.concatenate([index[:, :, 0].ravel(), index[:, :, -1].ravel()])
    rows.append(faces)
    cols.append(faces)
    vals.append(np.full(faces.size, H_FACE * area))
    n = nx * ny * nz
    K = sp.coo_array(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
    ).tocsc()
    capacity = np.broadcast_to(rc * dz * area, (nx, ny, nz)).ravel()
    M = sp.diags_array(capacity).tocsc()
    return (M / dt + K).tocsc(), K, M


def run_case(solver: str, n_dofs: int) -> dict[str, float | int | str]:
    """Build the matrix, factor it once, solve once, and report times and peak memory."""
    matrix, _, _ = layered_board(n_dofs)
    rss_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    rhs = np.ones(matrix.shape[0])
    start = time.perf_counter()
    if solver.startswith("splu"):
        from scipy.sparse.linalg import splu

        spec = "MMD_AT_PLUS_A" if solver == "splu-mmd" else "COLAMD"
        opts = {"SymmetricMode": True} if solver == "splu-mmd" else None
        lu = splu(matrix, permc_spec=spec, diag_pivot_thresh=0.0 if opts else None, options=opts)
        factored = time.perf_counter()
        x = lu.solve(rhs)
        fill = int(lu.L.nnz + lu.U.nnz)
    elif solver == "cholmod":
        from sksparse.cholmod import cholesky

        factor = cholesky(sp.csc_matrix(matrix))
        factored = time.perf_counter()
        x = factor(rhs)
        fill = int(factor.L().nnz)
    else:
        import pypardiso

        csr = sp.csr_matrix(matrix)
        pardiso = pypardiso.PyPardisoSolver()
        pardiso.factorize(csr)
        factored = time.perf_counter()
        x = pardiso.solve(csr, rhs)
        fill = -1
    solved = time.perf_counter()
    residual = float(np.linalg.norm(matrix @ x - rhs) / np.linalg.norm(rhs))
    return {
        "solver": solver,
        "dofs": int(matrix.shape[0]),
        "nnz": int(matrix.nnz),
        "factor_s": factored - start,
        "solve_s": solved - factored,
        "fill_nnz": fill,
        "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
        "rss_before_mb": rss_before / 1024.0,
        "residual": residual,
    }


def installed(solver: str) -> bool:
    module = {"cholmod": "sksparse.cholmod", "pardiso": "pypardiso"}.get(solver)
    if module is None:
        return True
    try:
        __import__(module)
    except (ImportError, OSError):
        return False
    return True


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dofs", type=int, action="append", help="DOF count (repeatable)")
    parser.add_argument("--solvers", default=",".join(SOLVERS), help="comma-separated list")
    parser.add_argument("--case", help=argparse.SUPPRESS)  # internal: run one case, print JSON
    args = parser.parse_args()
    if args.case:
        solver, n_dofs = args.case.split(":")
        print(json.dumps(run_case(solver, int(n_dofs))))
        return
    header = f"{'solver':12} {'dofs':>8} {'nnz':>9} {'factor s':>9} {'solve s':>8} "
    print(header + f"{'fill nnz':>11} {'peak MB':>8} {'residual':>9}")
    for n_dofs in args.dofs or [50_000]:
        for solver in args.solvers.split(","):
            if not installed(solver):
                print(f"{solver:12} {n_dofs:>8} not installed")
                continue
            out = subprocess.run(
                [sys.executable, __file__, "--case", f"{solver}:{n_dofs}"],
                check=True,
                capture_output=True,
                text=True,
            )
            r = json.loads(out.stdout)
            print(
                f"{r['solver']:12} {r['dofs']:>8} {r['nnz']:>9} {r['factor_s']:>9.3f} "
                f"{r['solve_s']:>8.4f} {r['fill_nnz']:>11} {r['peak_rss_mb']:>8.0f} "
                f"{r['residual']:>9.1e}"
            )


if __name__ == "__main__":
    main()
