"""Report output files: the report stage's error class and all-or-nothing file writes.

Every report file is written under a hidden temporary name in its own folder and renamed over
the target with :func:`os.replace` only once it is complete, so a reader (a CI job, a 3D viewer)
sees either the previous file or the new one, never a half-written one. A writer that fails
removes its temporary file and the target is left untouched.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from boardheat.errors import BoardheatError

#: suffix of every temporary file; tests look for it to prove nothing was left behind
TEMP_SUFFIX = ".part"


class ReportError(BoardheatError):
    """A report could not be written or read; the message names the file and the problem."""


def temp_name(target: Path) -> Path:
    """Return an unused hidden temporary path next to ``target`` (the file is not created).

    >>> temp_name(Path("out/report.md")).name.startswith(".report.md.")
    True
    """
    return target.with_name(f".{target.name}.{os.getpid()}.{secrets.token_hex(4)}{TEMP_SUFFIX}")


@contextmanager
def atomic_path(target: Path) -> Iterator[Path]:
    """Yield a temporary path to write ``target`` to; rename it over ``target`` on success.

    The caller creates the temporary file (so it gets the usual permissions). If the block
    raises, the temporary file is removed and the exception propagates; an :class:`OSError`
    is re-raised as :class:`ReportError` naming ``target``.
    """
    tmp = temp_name(target)
    try:
        yield tmp
        os.replace(tmp, target)
    except OSError as err:
        tmp.unlink(missing_ok=True)
        reason = err.strerror or str(err)
        raise ReportError(f"{target}: could not write the file ({reason})") from err
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def write_text(target: Path, text: str) -> Path:
    """Write ``text`` (UTF-8, newline line ends) to ``target`` atomically and return ``target``."""
    with atomic_path(target) as tmp, open(tmp, "x", encoding="utf-8", newline="\n") as fh:
        fh.write(text)
    return target


def write_bytes(target: Path, data: bytes) -> Path:
    """Write ``data`` to ``target`` atomically and return ``target``."""
    with atomic_path(target) as tmp, open(tmp, "xb") as fh:
        fh.write(data)
    return target


def ensure_dir(folder: Path) -> Path:
    """Create ``folder`` (and its parents) if needed; raise :class:`ReportError` if impossible."""
    if folder.exists() and not folder.is_dir():
        raise ReportError(f"{folder}: found a file, expected a folder for the report files")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        reason = err.strerror or str(err)
        raise ReportError(f"{folder}: could not create the report folder ({reason})") from err
    return folder
