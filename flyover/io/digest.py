"""File digests for provenance: what exactly a result was made from."""

from __future__ import annotations

import hashlib
from pathlib import Path

FULL_DIGEST_BYTES = 1 << 30  # files above this get a partial digest (head, tail and size)


def file_digest(path: Path) -> str:
    """SHA-256 of a file; for files over 1 GiB, of its size, first and last 16 MiB ('partial')."""
    path = Path(path)
    h = hashlib.sha256()
    size = path.stat().st_size
    with open(path, "rb") as fh:
        if size <= FULL_DIGEST_BYTES:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
            return h.hexdigest()
        h.update(str(size).encode())
        h.update(fh.read(16 << 20))
        fh.seek(-(16 << 20), 2)
        h.update(fh.read())
    return "partial:" + h.hexdigest()
