"""ISO 8601 timestamps with a zone, to integer nanoseconds UTC."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from flyover.model.errors import FlyoverInputError

_ZONE = re.compile(r"(Z|[+-]\d\d(:?\d\d)?)$")


def parse_utc_ns(text: str) -> int:
    """One ISO 8601 time with a zone ('Z' or an offset) to ns since the Unix epoch (UTC)."""
    return int(parse_utc_ns_array([text])[0])


def parse_utc_ns_array(texts, where: str = "", first_row: int = 1) -> np.ndarray:
    """ISO 8601 times with zones to int64 ns UTC; a time without a zone is an error.

    ``first_row`` is the file row of the first entry, for the message.
    """
    values = [str(t).strip() for t in texts]
    for i, v in enumerate(values):
        if not _ZONE.search(v):
            row = f"{where}, row {first_row + i}" if where else where
            raise FlyoverInputError(f"time {v} has no time zone", row,
                                    "an ISO 8601 time with a zone",
                                    hint=f"write it as {v}Z (UTC) or with an offset such as +02:00")
    try:
        parsed = pd.to_datetime(pd.Series(values), utc=True, format="ISO8601")
    except (ValueError, TypeError) as exc:
        bad = _first_unparsable(values)
        row = f"{where}, row {first_row + bad}" if where else where
        raise FlyoverInputError(f"time '{values[bad]}' is not an ISO 8601 time", row,
                                "a time such as 2026-05-14T09:31:07.300Z",
                                hint=str(exc).split("\n")[0]) from None
    # pandas may parse at microsecond resolution: fix the unit before taking integers.
    try:
        return parsed.dt.as_unit("ns").astype("int64").to_numpy()
    except (pd.errors.OutOfBoundsDatetime, OverflowError):
        bad = _first_out_of_range(parsed)
        row = f"{where}, row {first_row + bad}" if where else where
        raise FlyoverInputError(f"time '{values[bad]}' is outside the years 1678 to 2261", row,
                                "a time such as 2026-05-14T09:31:07.300Z",
                                hint="check the year (a date cut short or mistyped?)") from None


def _first_out_of_range(parsed: pd.Series) -> int:
    """Index of the first time beyond what int64 nanoseconds hold (years 1678 to 2261)."""
    lo, hi = pd.Timestamp.min.tz_localize("UTC"), pd.Timestamp.max.tz_localize("UTC")
    for i, t in enumerate(parsed):
        if not lo <= t <= hi:
            return i
    return 0


def _first_unparsable(values) -> int:
    for i, v in enumerate(values):
        try:
            pd.Timestamp(v)
        except (ValueError, TypeError):
            return i
    return 0
