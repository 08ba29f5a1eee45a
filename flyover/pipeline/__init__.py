"""Thin entry points, one per workflow step: load inputs, call the core, write outputs."""

from __future__ import annotations

import importlib
import inspect
import pkgutil


def stages(scope: str) -> list[str]:
    """The workflow steps that run per pass (``scope='pass'``) or once per campaign
    (``'campaign'``): the modules of this package that declare what they read (``READS``), told
    apart by whether their ``run`` takes a pass name."""
    names = []
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{__name__}.{info.name}")
        if hasattr(module, "READS") and callable(getattr(module, "run", None)):
            per_pass = "pass_name" in inspect.signature(module.run).parameters
            if per_pass == (scope == "pass"):
                names.append(info.name)
    return sorted(names)
