"""``signoff.csv`` and ``signoff.json``: each pass's status, the rules it breaks and its headline
numbers (campaign folder)."""

from __future__ import annotations

from pathlib import Path

from flyover.io.results import TableFile, read_json, write_json

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
    ("lae_shortfall_db", "dB that LAE may miss where it is not (event_metrics.csv)"),
), float_format="%.2f", flags=("metrics_complete",))
SIGNOFF_JSON = "signoff.json"


def write_signoff_json(folder, passes: dict) -> Path:
    """Write ``{pass: {status, label, findings: [...], headline: {...}}}``."""
    return write_json(folder, SIGNOFF_JSON, passes)


def read_signoff_json(folder) -> dict:
    """The sign-off of every pass, as written by :func:`write_signoff_json`."""
    return read_json(folder, SIGNOFF_JSON, "sign-off")


def signoff_statuses(folder) -> dict[str, str]:
    """Each pass's status ('accepted', 'flagged' or 'rejected'): the campaign statistics leave
    rejected passes out and name the flagged ones they include."""
    table = SIGNOFF.read(folder)
    return dict(zip(table["pass"].astype(str), table["status"].astype(str)))
