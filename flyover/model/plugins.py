"""Registries filled by the modules themselves: a seam gets a new member by a new module alone."""

from __future__ import annotations

import importlib
import pkgutil


def import_all(package: str, path) -> None:
    """Import every module of a package (``__name__``, ``__path__``), so that each registers
    itself; modules already imported are not imported again."""
    for info in pkgutil.iter_modules(path):
        importlib.import_module(f"{package}.{info.name}")
