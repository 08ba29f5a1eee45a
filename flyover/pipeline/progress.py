"""Progress of long steps: a bar on a terminal, one short line per step in logs.

The per-step lines let ``flyover run`` show how far a running step is (it reads the step's log).
"""

from __future__ import annotations

import sys
import time


class Progress:
    """Count steps of a long job.

    On a terminal (the stream is a TTY) a bar is redrawn in place; otherwise each step writes one
    line ``<label>: <done>/<total> <note>``. :meth:`close` writes the closing line.
    """

    def __init__(self, total: int, label: str, stream=None):
        self.total, self.label, self.done = max(int(total), 0), label, 0
        self.stream = stream if stream is not None else sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.start = time.perf_counter()

    def step(self, note: str = "") -> None:
        self.done += 1
        if self.tty:
            width = 28
            filled = int(width * self.done / max(self.total, 1))
            self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] "
                              f"{self.done}/{self.total} {note[:40]:<40}")
        else:
            self.stream.write(f"{self.label}: {self.done}/{self.total} {note}\n")
        self.stream.flush()

    def close(self) -> None:
        elapsed = time.perf_counter() - self.start
        end = "\n" if self.tty else ""
        self.stream.write(f"{end}{self.label}: {self.done}/{self.total} done in {elapsed:.1f} s\n")
        self.stream.flush()
