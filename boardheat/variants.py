"""Design variants: solve the base board and every ``[[variant]]``, sharing meshes.

Input: a board file with ``[[variant]]`` sections. Output: one
:class:`~boardheat.checks.CheckResult` per board (base first). Variants whose mesh would equal
another's (same outline, footprints, pours, via fields, contacts and element sizes) reuse it;
copper weights, fills, heat transfer coefficients and powers then change only the assembled
matrices. Variants are solved in parallel worker processes.
"""

from __future__ import annotations

import hashlib
import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

from boardheat.board import Board, load_variants
from boardheat.checks import CheckResult
from boardheat.meshing import Mesh, build_mesh, element_sizes
from boardheat.run import RunOptions, build_model, run_check


def geometry_key(board: Board) -> str:
    """Return a digest of everything the 2D mesh depends on.

    That is the outline and holes, every embedded region (name and polygon, in the order the
    mesher adds them) and the element sizes. The sizes are hashed as computed by
    :func:`~boardheat.meshing.element_sizes`, because besides the geometry they follow from
    the stackup's in-plane conductance and the faces' heat transfer coefficients: a variant
    that changes those may need a different mesh than the base.
    """
    h = hashlib.sha256()
    arrays = [board.outline, *board.holes]
    arrays += [np.concatenate([p.footprint_polygon().ravel(), p.footprint]) for p in board.parts]
    arrays += [p.region.polygon for p in board.pours]
    arrays += [v.region.polygon for v in board.via_fields]
    arrays += [m.region.polygon for m in board.mounts]
    for a in arrays:
        h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
        h.update(b"|")
    # region names as the mesh carries them: a pour and a via field may not swap a name
    names = [f"part:{p.refdes}" for p in board.parts] + [f"pour:{p.name}" for p in board.pours]
    names += [f"via:{v.name}" for v in board.via_fields] + [f"mount:{m.name}" for m in board.mounts]
    # the board thickness and run.mesh_refinement act on the mesh only through the sizes
    h.update(repr((names, sorted(element_sizes(board).items()))).encode())
    return h.hexdigest()


def _solve(board: Board, mesh: Mesh, options: RunOptions) -> CheckResult:
    return run_check(board, options, model=build_model(board, mesh=mesh))


def run_variants(
    path: str | Path, options: RunOptions | None = None, jobs: int = 2
) -> tuple[list[CheckResult], list[Board]]:
    """Solve the base board and each variant; return results and boards, base first."""
    options = options or RunOptions()
    boards = load_variants(path)
    meshes: dict[str, Mesh] = {}
    for board in boards:
        key = geometry_key(board)
        if key not in meshes:
            meshes[key] = build_mesh(board, verbose=options.verbose)
    work = [(b, meshes[geometry_key(b)]) for b in boards]
    if jobs <= 1 or len(work) <= 1:
        return [_solve(b, m, options) for b, m in work], boards
    # the workers share the cores: one solver thread each (spawned workers inherit this)
    previous = os.environ.get("BOARDHEAT_THREADS")
    os.environ["BOARDHEAT_THREADS"] = "1"
    try:
        context = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(max_workers=min(jobs, len(work)), mp_context=context) as pool:
            futures = [pool.submit(_solve, b, m, options) for b, m in work]
            results = [f.result() for f in futures]
    finally:
        if previous is None:
            os.environ.pop("BOARDHEAT_THREADS", None)
        else:
            os.environ["BOARDHEAT_THREADS"] = previous
    return results, boards
