"""boardheat: transient junction-temperature check of printed circuit boards.

Reads a board file, meshes the board with gmsh, assembles a 3D orthotropic finite-element
model ``C T' + K T = f(t)``, integrates it with an adaptive implicit stepper over the board's
power sequence and reports every part's junction temperature against its limit.

Results are engineering estimates from a model; confirm them by measurement on hardware.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

if TYPE_CHECKING:
    from boardheat.board import load_board
    from boardheat.run import run_check

__all__ = ["__version__", "load_board", "run_check"]


def __getattr__(name: str) -> Any:
    # lazy: `boardheat --help` and `boardheat schema` should not import gmsh or scipy
    if name == "load_board":
        from boardheat.board import load_board

        return load_board
    if name == "run_check":
        from boardheat.run import run_check

        return run_check
    raise AttributeError(f"module 'boardheat' has no attribute {name!r}")
