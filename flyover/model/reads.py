"""What a stage reads of a campaign: declared, enforced, and fingerprinted from the same list.

Each workflow stage declares the parts of the campaign it reads as dotted attribute paths of
:class:`flyover.campaign.Campaign` (``"analysis.window_s"``, ``"passes.{pass}.atmosphere"``,
``"regions"``). The stage then works on :func:`guarded`, a read-only view that refuses any
other read, so a declaration cannot fall behind the code; and the workflow re-runs a stage
exactly when the values at its paths change (:func:`read_values`), whatever the campaign file is
called, where it lies, or in which order its keys are written.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np


class UndeclaredRead(AssertionError):
    """A stage read a part of the campaign that its declaration does not name (a flyover bug)."""


def expand(paths, pass_name: str | None = None) -> tuple[str, ...]:
    """The declared paths with ``{pass}`` replaced by the pass's name."""
    return tuple(p.replace("{pass}", pass_name or "") for p in paths)


def _covered(path: str, allowed) -> bool:
    return any(a == "" or path == a or path.startswith(a + ".") for a in allowed)


def _navigable(path: str, allowed) -> bool:
    return _covered(path, allowed) or any(a.startswith(path + ".") for a in allowed)


class _Guarded:
    """A read-only view of a dataclass or a mapping that checks every read against a list."""

    __slots__ = ("_obj", "_allowed", "_path", "_stage")

    def __init__(self, obj, allowed, path: str, stage: str):
        object.__setattr__(self, "_obj", obj)
        object.__setattr__(self, "_allowed", allowed)
        object.__setattr__(self, "_path", path)
        object.__setattr__(self, "_stage", stage)

    def _refuse(self, path: str):
        raise UndeclaredRead(f"stage '{self._stage}' reads campaign.{path} but does not declare "
                             f"it (declared: {', '.join(self._allowed) or 'nothing'})")

    def _child(self, name: str, value):
        path = f"{self._path}.{name}" if self._path else str(name)
        if dataclasses.is_dataclass(value) or isinstance(value, dict):
            if not _navigable(path, self._allowed):
                self._refuse(path)
            return _Guarded(value, self._allowed, path, self._stage)
        if not _covered(path, self._allowed):
            self._refuse(path)
        return value

    def _whole(self):
        """Reading the object as a whole (a method, a property, an iteration)."""
        if not _covered(self._path, self._allowed):
            self._refuse(self._path or "(everything)")
        return self._obj

    def __getattr__(self, name: str):
        obj = self._obj
        if dataclasses.is_dataclass(obj) and name in {f.name for f in dataclasses.fields(obj)}:
            return self._child(name, getattr(obj, name))
        return getattr(self._whole(), name)

    def __setattr__(self, name, value):
        raise AttributeError("the campaign is read-only")

    def __getitem__(self, key):
        return self._child(key, self._obj[key])

    def __contains__(self, key) -> bool:
        path = f"{self._path}.{key}" if self._path else str(key)
        if not _navigable(path, self._allowed):
            self._refuse(path)
        return key in self._obj

    def __iter__(self):
        return iter(self._whole())

    def __len__(self) -> int:
        return len(self._whole())

    def keys(self):
        return self._whole().keys()

    def values(self):
        return [self[k] for k in self.keys()]

    def items(self):
        return [(k, self[k]) for k in self.keys()]

    def __repr__(self) -> str:
        return f"<campaign.{self._path} as read by stage '{self._stage}'>"


def guarded(campaign, paths, *, stage: str, pass_name: str | None = None):
    """The campaign as a stage may read it: only at or below its declared ``paths``.

    Parameters
    ----------
    campaign : Campaign
    paths : sequence of str
        Dotted attribute paths, ``{pass}`` standing for ``pass_name``; ``""`` is everything.
    stage : str
        For the message of :class:`UndeclaredRead`.
    """
    return _Guarded(campaign, expand(paths, pass_name), "", stage)


def _plain(value):
    """A JSON-ready copy of a campaign value. File paths are left out: the workflow tracks the
    files themselves, and their names must not matter."""
    if isinstance(value, Path):
        return None
    if dataclasses.is_dataclass(value):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)
                if not isinstance(getattr(value, f.name), Path)}
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def read_values(campaign, paths, pass_name: str | None = None) -> dict:
    """The values at the declared paths (file paths left out), for a re-run fingerprint."""
    out = {}
    for path in expand(paths, pass_name):
        node = campaign
        for part in path.split(".") if path else ():
            node = node[part] if isinstance(node, dict) else getattr(node, part)
        out[path] = _plain(node)
    return out
