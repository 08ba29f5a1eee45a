"""Imaging methods, one module each, chosen by name (``analysis.method`` in the campaign file).

A method module builds an :class:`flyover.imaging.window.ImagingMethod` and calls
:func:`register` at import; every module of this package is imported on first look-up, so a new
method is one new module here (and its test) and nothing else changes. A module is named after
its method (``time_domain.py`` registers ``time-domain``; modules starting with ``_`` are
helpers), so that the names are known without importing the methods and their compiled
kernels (:func:`method_names`, which the campaign file's check uses).
"""

from __future__ import annotations

import pkgutil

from flyover.model.plugins import import_all

DEFAULT_METHOD = "time-domain"
_METHODS: dict = {}


def register(method):
    """Add a method to the registry under ``method.name`` (called by each method module)."""
    if method.name in _METHODS:
        raise RuntimeError(f"two imaging methods are named '{method.name}'")
    _METHODS[method.name] = method
    return method


def methods() -> dict:
    """Every imaging method by name (importing this package's modules the first time)."""
    import_all(__name__, __path__)
    return dict(_METHODS)


def method_names() -> list[str]:
    """Every imaging method's name, from its module's name, without importing any."""
    return sorted(info.name.replace("_", "-") for info in pkgutil.iter_modules(__path__)
                  if not info.name.startswith("_"))


def method_named(name: str):
    """The method called ``name``; a :class:`KeyError` lists the valid names."""
    known = methods()
    if name not in known:
        raise KeyError(f"no imaging method '{name}' (known: {', '.join(sorted(known))})")
    return known[name]
