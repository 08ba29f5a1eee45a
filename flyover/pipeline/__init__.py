"""Thin entry points, one per workflow step: load inputs, call the core, write outputs."""

from __future__ import annotations

import importlib
import inspect
import pkgutil


def stages(scope: str) -> list[str]:
    """The workflow steps that run per pass (``scope='pass'``) or once per campaign
    (``'campaign'``): the modules of this package that declare what they read (``READS``), told
    apart by whether their ``run`` takes a pass name."""
    return sorted(info.name for info in pkgutil.iter_modules(__path__)
                  if not info.name.startswith("_") and stage_module(info.name, scope))


def stage_module(name: str, scope: str):
    """The module of one workflow step of that scope, or None: a job imports its own step
    alone (importing every step cost each job a second)."""
    if name.startswith("_") or not any(i.name == name for i in pkgutil.iter_modules(__path__)):
        return None
    module = importlib.import_module(f"{__name__}.{name}")
    if not (hasattr(module, "READS") and callable(getattr(module, "run", None))):
        return None
    per_pass = "pass_name" in inspect.signature(module.run).parameters
    return module if per_pass == (scope == "pass") else None
