"""One error type for every bad input, so every message has the same shape.

The shape is: what is wrong and where (file, row, column or key), what was expected, what was
found, and a hint. The command line and the workflow print the message alone, never a traceback.
"""

from __future__ import annotations

import difflib
import errno
import shutil
from collections.abc import Iterable
from pathlib import Path


class FlyoverInputError(ValueError):
    """Bad user input: a config value, a file, a row of a file.

    Parameters
    ----------
    what : str
        One line saying what is wrong, e.g. ``"time 09:31:07 has no time zone"``.
    where : str, optional
        The file and, where it helps, the row, column or key: ``"track.csv, row 118"``.
    expected : str, optional
        What a valid input looks like.
    found : str, optional
        What was found instead.
    hint : str, optional
        How to fix it.
    """

    def __init__(self, what: str, where: str = "", expected: str = "", found: str = "",
                 hint: str = ""):
        self.what, self.where, self.expected, self.found, self.hint = (
            what, where, expected, found, hint)
        super().__init__(self.message)

    @property
    def message(self) -> str:
        head = f"flyover: {self.where}: {self.what}" if self.where else f"flyover: {self.what}"
        lines = [head]
        if self.expected:
            lines.append(f"  expected {self.expected}")
        if self.found:
            lines.append(f"  found {self.found}")
        if self.hint:
            lines.append(f"  {self.hint}")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.message


def suggest(name: str, valid: Iterable[str]) -> str:
    """A 'did you mean' hint for a misspelt name, or an empty string."""
    close = difflib.get_close_matches(name, list(valid), n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'?" if close else ""


def require(condition: bool, what: str, where: str = "", expected: str = "", found: str = "",
            hint: str = "") -> None:
    """Raise a :class:`FlyoverInputError` unless ``condition`` holds."""
    if not condition:
        raise FlyoverInputError(what, where, expected, found, hint)


def file_system_message(exc: OSError, need_bytes: int | None = None) -> str:
    """flyover's words for a failed read or write (no traceback): what, where, and for a full
    disk how much room is left and (when known) how much the step's results take."""
    where = exc.filename or "a file"
    lines = [f"flyover: {where}: could not be written or read: {exc.strerror or exc}"]
    if exc.errno == errno.ENOSPC and exc.filename:
        folder = next((p for p in (Path(exc.filename), *Path(exc.filename).parents)
                       if p.exists()), None)
        if folder is not None:
            free = shutil.disk_usage(folder).free
            need = (f"about {need_bytes / 2 ** 20:.0f} MiB" if need_bytes else
                    "room for its maps and figures")
            lines.append(f"  the disk holding {folder} has {free / 2 ** 20:.0f} MiB free; the "
                         f"pass's results need {need}")
    elif exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        lines.append("  the folder is read-only or not writable: choose another output folder")
    return "\n".join(lines)
