"""``track_check.json``: the acoustic check of a pass's track (JSON object).

Keys: ``anchor_body_m`` and ``anchor`` (the body point focused on), ``region_half_extent_m``
(per axis: how far the anchor may lie from the true source), ``windows`` (planned near
overhead), and ``axes``: per axis (height, along-track, lateral) ``offset_m`` (the shift of the
track, up, forward or to the right, of best focus), ``uncertainty_m`` (null when the scan cannot
decide), ``at_edge``, ``decided``, ``peak_focus``, ``reach_m`` and the coarse scan.
"""

from __future__ import annotations

from flyover.io.results import read_json

NAME = "track_check.json"


def read_track_check(folder) -> dict:
    return read_json(folder, NAME, "track check")
