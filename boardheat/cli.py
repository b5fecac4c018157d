"""Command line: parse, call the library, map the outcome to an exit code.

Exit codes: 0 every part and the laminate within limits; 1 a limit exceeded (or NEAR with
``--strict``); 2 invalid input or usage; 3 solver or meshing failure. Errors are one line on
stderr; ``--debug`` shows the traceback (without local variables).
"""

from __future__ import annotations

import json
import logging
import os
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any, TypeVar

import typer
from rich.console import Console
from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

from boardheat import __version__
from boardheat.errors import BoardFileError, BoardheatError, GeometryError, SettingError

app = typer.Typer(
    name="boardheat",
    help="Transient junction-temperature check of a printed circuit board "
    "(3D finite elements over the board's real power sequence).",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    # plain click messages: usage errors stay one greppable line, as ours do
    rich_markup_mode=None,
)
err_console = Console(stderr=True, highlight=False)


def _out_console() -> Console:
    """Return the stdout console: terminal width on a terminal, 120 columns in logs and CI."""
    return Console(highlight=False, width=None if sys.stdout.isatty() else 120)


T = TypeVar("T")

EXIT_OK, EXIT_LIMIT, EXIT_INPUT, EXIT_SOLVER = 0, 1, 2, 3


class Backend(StrEnum):
    """Linear solver backends."""

    auto = "auto"
    splu = "splu"
    cholmod = "cholmod"
    pardiso = "pardiso"


BoardPath = Annotated[
    Path,
    typer.Argument(
        exists=True,
        dir_okay=False,
        readable=True,
        help="board file (TOML)",
        show_default=False,
        metavar="BOARD_FILE",
    ),
]
DebugOpt = Annotated[bool, typer.Option("--debug", help="show tracebacks of errors")]
VerboseOpt = Annotated[bool, typer.Option("--verbose", "-v", help="show gmsh and stage logs")]


def _interactive() -> bool:
    return sys.stderr.isatty() and not os.environ.get("CI")


def _guard(debug: bool, action: Callable[[], T]) -> T:
    """Run ``action``; turn our errors into one stderr line and the right exit code."""
    try:
        return action()
    except (BoardFileError, GeometryError, SettingError) as err:
        if debug:
            err_console.print_exception(show_locals=False)
        err_console.print(f"error: {err}", markup=False)
        raise typer.Exit(EXIT_INPUT) from None
    except BoardheatError as err:
        if debug:
            err_console.print_exception(show_locals=False)
        err_console.print(f"solver error: {err}", markup=False)
        raise typer.Exit(EXIT_SOLVER) from None
    except MemoryError:
        err_console.print("solver error: out of memory; coarsen the mesh (run.mesh_refinement)")
        raise typer.Exit(EXIT_SOLVER) from None


@contextmanager
def _progress(label: str, quiet: bool) -> Iterator[Callable[[float, int], None] | None]:
    """Yield a progress callback that shows simulated time and steps on a terminal only."""
    if quiet or not _interactive():
        yield None
        return
    columns = (SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn())
    with Progress(*columns, console=err_console, transient=True) as bar:
        task = bar.add_task(label)
        last = [0.0]

        def update(t: float, steps: int) -> None:
            now = time.monotonic()
            if now - last[0] > 0.1:
                last[0] = now
                bar.update(task, description=f"{label}: t = {t:.4g} s, {steps} steps")

        yield update


def _setup_logging(verbose: bool) -> None:
    logging.basicConfig(
        level=logging.INFO if verbose else logging.WARNING,
        format="%(levelname)s %(name)s: %(message)s",
        stream=sys.stderr,
    )


@app.command()
def check(
    board_file: BoardPath,
    out: Annotated[
        Path | None,
        typer.Option("--out", "-o", file_okay=False, help="write the report files here"),
    ] = None,
    variant: Annotated[str | None, typer.Option(help="apply this [[variant]]")] = None,
    steady: Annotated[bool, typer.Option("--steady", help="solve steady state only")] = False,
    margin: Annotated[
        float | None, typer.Option(min=0, help="NEAR band below each limit, K")
    ] = None,
    strict: Annotated[bool, typer.Option("--strict", help="NEAR also fails (exit 1)")] = False,
    rtol: Annotated[float | None, typer.Option(min=1e-8, max=0.5, help="stepper rtol")] = None,
    backend: Annotated[Backend, typer.Option(help="linear solver")] = Backend.auto,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="verdict line only")] = False,
    verbose: VerboseOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Check every part's junction temperature over the board's power sequence."""
    from boardheat.board import load_board
    from boardheat.report import render_terminal, write_report
    from boardheat.run import RunOptions, run_check

    _setup_logging(verbose)
    board = _guard(debug, lambda: load_board(board_file, variant))
    options = RunOptions(
        steady=steady, verbose=verbose, backend=backend.value, margin=margin, rtol=rtol
    )
    with _progress(f"solving {board.name}", quiet) as progress:
        result = _guard(debug, lambda: run_check(board, options, progress))
    console = _out_console()
    if quiet:
        console.print(f"{board.name}: {result.verdict}", markup=False)
    else:
        render_terminal(result, console)
    if out is not None:
        written = _guard(debug, lambda: write_report(result, board, out, strict=strict))
        if not quiet:
            console.print(f"report written to {out}/ ({', '.join(sorted(written))})", markup=False)
    failed = result.verdict == "FAIL" or (strict and result.verdict == "NEAR")
    raise typer.Exit(EXIT_LIMIT if failed else EXIT_OK)


@app.command()
def schema() -> None:
    """Print the JSON Schema of the board file format."""
    from boardheat.board import json_schema

    typer.echo(json.dumps(json_schema(), indent=2))


@app.command()
def schedule(
    board_file: BoardPath,
    out: Annotated[Path, typer.Option("--out", "-o", dir_okay=False, help="PNG to write")] = Path(
        "schedule.png"
    ),
    variant: Annotated[str | None, typer.Option(help="apply this [[variant]]")] = None,
    debug: DebugOpt = False,
) -> None:
    """Plot every part's power against time (check the sequence before solving)."""
    from boardheat.board import load_board
    from boardheat.report import plot_schedules

    board = _guard(debug, lambda: load_board(board_file, variant))
    path = _guard(debug, lambda: plot_schedules(board, out))
    for part in board.parts:
        typer.echo(f"{part.refdes:>8}: {part.schedule.describe(board.run.duration)}")
    for name, t in sorted(board.events.items(), key=lambda kv: kv[1]):
        typer.echo(f"event {name} at {t:.6g} s")
    typer.echo(f"power schedules plotted to {path}")


@app.command()
def compare(
    board_file: BoardPath,
    out: Annotated[
        Path | None, typer.Option("--out", "-o", file_okay=False, help="write compare files")
    ] = None,
    jobs: Annotated[int, typer.Option(min=1, max=64, help="parallel worker processes")] = 2,
    steady: Annotated[bool, typer.Option("--steady", help="steady state only")] = False,
    strict: Annotated[bool, typer.Option("--strict", help="NEAR also fails")] = False,
    verbose: VerboseOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Solve the base board and every [[variant]] and compare them side by side."""
    from boardheat.report import render_compare, write_compare
    from boardheat.run import RunOptions
    from boardheat.variants import run_variants

    _setup_logging(verbose)
    options = RunOptions(steady=steady, verbose=verbose)
    results, boards = _guard(debug, lambda: run_variants(board_file, options, jobs=jobs))
    console = _out_console()
    render_compare(results, console)
    if out is not None:
        _guard(debug, lambda: write_compare(results, boards[0], out))
        console.print(f"comparison written to {out}/", markup=False)
    base = results[0]
    failed = base.verdict == "FAIL" or (strict and base.verdict == "NEAR")
    raise typer.Exit(EXIT_LIMIT if failed else EXIT_OK)


@app.command()
def packages() -> None:
    """List the package outlines in the geometry library."""
    from boardheat.board import list_packages
    from boardheat.board.load import load_package

    for name in list_packages():
        data: dict[str, Any] = load_package(name, "geometry/packages")
        body = "x".join(f"{v:g}" for v in data["body_mm"])
        typer.echo(f"{name:<20} body {body} mm  theta_jb {data.get('theta_jb_k_per_w', '-')} K/W")


@app.callback(invoke_without_command=True)
def main(
    version: Annotated[bool, typer.Option("--version", help="print the version")] = False,
) -> None:
    """Boardheat: junction temperatures over a board's real power sequence."""
    if version:
        typer.echo(f"boardheat {__version__}")
        raise typer.Exit(EXIT_OK)


def run() -> None:
    """Entry point that maps usage errors to exit code 2 (typer's default)."""
    app()
