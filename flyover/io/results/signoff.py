"""``signoff.csv`` and ``signoff.json``: each pass's status, the rules it breaks and its headline
numbers (campaign folder)."""

from __future__ import annotations

import json
from pathlib import Path

from flyover.io.atomic import write_text
from flyover.io.results import TableFile
from flyover.model.errors import FlyoverInputError

SIGNOFF = TableFile("signoff.csv", (
    ("pass", "pass name"),
    ("label", "configuration label"),
    ("status", "'accepted', 'flagged' (a limit broken: read the reasons) or 'rejected' (no "
               "number of the pass should be signed)"),
    ("reasons", "every rule broken: rule, measured value and limit; '; '-separated"),
    ("height_m", "m above the array centre at the closest approach"),
    ("speed_m_s", "m/s over ground there"),
    ("closest_distance_m", "m, body origin to the array centre"),
    ("lasmax_db", "dB(A), measured at the metrics microphone (event_metrics.csv)"),
    ("lae_db", "dB(A) re 1 s, over the 10 dB-down interval"),
    ("metrics_complete", "the 10 dB-down interval lies inside the recording"),
), float_format="%.2f")
SIGNOFF_JSON = "signoff.json"


def write_signoff_json(folder, passes: dict) -> Path:
    """Write ``{pass: {status, label, findings: [...], headline: {...}}}`` (sorted keys)."""
    path = Path(folder) / SIGNOFF_JSON
    write_text(path, json.dumps(passes, indent=2, sort_keys=True) + "\n")
    return path


def read_signoff_json(folder) -> dict:
    """The sign-off of every pass, as written by :func:`write_signoff_json`."""
    path = Path(folder) / SIGNOFF_JSON
    if not path.is_file():
        raise FlyoverInputError(f"result file {SIGNOFF_JSON} is missing", str(path),
                                hint="run the sign-off step (flyover run)")
    return json.loads(path.read_text(encoding="utf-8"))
