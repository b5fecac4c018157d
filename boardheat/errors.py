"""Exception and warning classes shared by every stage of boardheat.

This is the one module that is not a stage of the data flow. Every message says where the
problem is, what was found, and what was expected.
"""

from __future__ import annotations


class BoardheatError(Exception):
    """Base class of every error boardheat raises on purpose."""


class BoardFileError(BoardheatError, ValueError):
    """The board file (or a file it refers to) is invalid; the message names file and field."""


class SettingError(BoardheatError, ValueError):
    """A setting outside the board file is invalid (an environment variable); names it."""


class GeometryError(BoardheatError):
    """The board geometry is invalid (self-crossing outline, part off the board, ...)."""


class MeshingError(BoardheatError):
    """gmsh failed to mesh the board."""


class SolverError(BoardheatError):
    """A linear solve or the time integration failed."""


class BoardheatWarning(UserWarning):
    """A concern that leaves the result valid; the report lists every one."""


class SanityWarning(BoardheatWarning):
    """A lumped-capacitance sanity check disagrees with the field solution."""


class StepperWarning(BoardheatWarning):
    """The time stepper hit a limit (step-size floor, many rejections) but finished."""


class MeshWarning(BoardheatWarning):
    """The board mesh has elements whose shape lowers the accuracy locally."""
