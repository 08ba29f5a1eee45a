"""Readers of field files, one module per format, behind one registry keyed by kind and format.

Kinds: ``recording`` (returns an object with the :class:`Recording` interface), ``layout``,
``calibration`` and ``track``. A reader module builds a :class:`Reader` and calls
:func:`register` at import; every module of this package is imported on the first look-up, so a
new format is one new module here (and its test) and nothing else changes. A file is given to
the first reader whose ``sniff`` accepts its content, else to the reader of its extension.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Protocol

import numpy as np

from flyover.model.errors import FlyoverInputError
from flyover.model.plugins import import_all

KINDS = ("recording", "layout", "calibration", "track", "weather")


class Recording(Protocol):
    """An opened multichannel recording: its header facts and span-by-span reading."""

    path: Path
    sample_rate_hz: float
    n_channels: int
    n_frames: int
    format: str

    def read(self, start_frame: int, n_frames: int, channels=None) -> np.ndarray:
        """float32 (n_channels, n_frames) in recorded units; ``channels`` 0-based. The file
        is opened for each read: the image step's forked workers read at the same time, and a
        file handle opened before the fork would share its position between them."""


@dataclass(frozen=True)
class Reader:
    """One file format of one kind.

    Attributes
    ----------
    kind : str
        One of :data:`KINDS`.
    format : str
        Its name, for messages and ``flyover check``.
    suffixes : tuple of str
        Lower-case file extensions it takes, e.g. ``(".wav", ".flac")``.
    read : callable
        ``read(path, **options)``: the parsed content (what the kind promises).
    sniff : callable, optional
        ``sniff(path) -> bool`` from the first bytes: takes files whatever their extension.
    """

    kind: str
    format: str
    suffixes: tuple[str, ...]
    read: Callable
    sniff: Callable[[Path], bool] | None = None


_READERS: list[Reader] = []


def register(reader: Reader) -> Reader:
    """Add a reader (called by each reader module at import)."""
    if reader.kind not in KINDS:
        raise RuntimeError(f"reader kind '{reader.kind}' is not one of {KINDS}")
    _READERS.append(reader)
    return reader


def readers(kind: str) -> list[Reader]:
    """The readers of one kind (importing this package's modules the first time)."""
    import_all(__name__, __path__)
    return [r for r in _READERS if r.kind == kind]


def reader_for(kind: str, path) -> Reader:
    """The reader of a file: by content first, then by extension."""
    path = Path(path)
    candidates = readers(kind)
    if path.is_file():
        for r in candidates:
            if r.sniff is not None and r.sniff(path):
                return r
    for r in candidates:
        if path.suffix.lower() in r.suffixes:
            return r
    known = sorted({s for r in candidates for s in r.suffixes})
    raise FlyoverInputError(f"no {kind} reader for this file", str(path),
                            f"one of the formats {', '.join(r.format for r in candidates)} "
                            f"(extensions {', '.join(known)})", f"'{path.suffix or path.name}'")


def read(kind: str, path, **options):
    """Read a file of a kind with the reader that takes it."""
    reader = reader_for(kind, path)
    try:
        return reader.read(path, **options)
    except OSError as exc:  # unreadable (permissions, a folder, a device error)
        raise FlyoverInputError(f"the {kind} file cannot be read", str(path),
                                f"a readable {reader.format} file",
                                exc.strerror or str(exc), "check the path and its permissions"
                                ) from None
