"""Outputs are written whole or not at all: to a temporary name, then renamed into place."""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from pathlib import Path


@contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; on success it replaces ``path`` atomically.

    On an error the temporary file is removed and any previous ``path`` is left untouched.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part" + path.suffix,
                               dir=path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp creates 0600; outputs get ordinary permissions
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise


def write_text(path, text: str) -> None:
    """Write a text file atomically (UTF-8)."""
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
