"""What each workflow step last ran with: the campaign values it reads and the code digest.

The same record is a step's re-run fingerprint (a Snakemake param, :mod:`flyover.workflow.plan`)
and, written beside the logs when the step finishes, what `flyover plan` compares against to
name the settings whose change makes a step run again.
"""

from __future__ import annotations

import hashlib
import importlib
import json
from functools import lru_cache
from pathlib import Path

from flyover.io.results import read_json, write_json
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import read_values

FOLDER = Path("logs") / "settings"


@lru_cache(maxsize=1)
def package_digest() -> str:
    """SHA-256 over the package's Python sources and schemas (sorted by path)."""
    root = Path(__file__).resolve().parents[1]
    h = hashlib.sha256()
    for path in sorted(list(root.rglob("*.py")) + list(root.rglob("*.json"))):
        h.update(str(path.relative_to(root)).encode())
        h.update(path.read_bytes())
    return h.hexdigest()[:16]


def stage_settings(campaign, stage: str, pass_name: str | None) -> dict:
    """The values a stage reads of the campaign (its ``READS``), and ``code``: the package
    digest; as JSON reads them back (plain dicts, lists, numbers and strings)."""
    reads = importlib.import_module(f"flyover.pipeline.{stage}").READS
    picked = read_values(campaign, reads, pass_name)
    picked["code"] = package_digest()
    return json.loads(json.dumps(picked, sort_keys=True, default=str))


def _record_name(stage: str, pass_name: str | None) -> tuple[Path, str]:
    folder = FOLDER if pass_name is None else FOLDER / pass_name
    return folder, f"{stage}.json"


def write_settings_record(output: Path, campaign, stage: str, pass_name: str | None) -> None:
    """Record what a finished step ran with (under ``output/logs/settings``)."""
    folder, name = _record_name(stage, pass_name)
    (Path(output) / folder).mkdir(parents=True, exist_ok=True)
    write_json(Path(output) / folder, name, stage_settings(campaign, stage, pass_name))


def changed_settings(output: Path, campaign, stage: str, pass_name: str | None) -> list[str]:
    """The settings (dotted paths, ``code`` for the package) whose values differ from what the
    step last ran with; empty when it has no record."""
    folder, name = _record_name(stage, pass_name)
    try:
        old = read_json(Path(output) / folder, name, stage)
    except FlyoverInputError:
        return []
    return _differences(old, stage_settings(campaign, stage, pass_name))


def _differences(old, new, prefix: str = "") -> list[str]:
    """Dotted paths of the leaves at which two JSON-like values differ."""
    if isinstance(old, dict) and isinstance(new, dict):
        out = []
        for key in sorted(set(old) | set(new), key=str):
            path = f"{prefix}.{key}" if prefix else str(key)
            if key not in old or key not in new:
                out.append(path)
            else:
                out += _differences(old[key], new[key], path)
        return out
    return [] if old == new else [prefix]
