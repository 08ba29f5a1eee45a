"""Calibration CSV: pascals per recorded unit, one row per channel."""

from __future__ import annotations

import numpy as np

from flyover.io.csvtable import channel_column, numeric_column, pick_columns, read_csv_table
from flyover.io.readers import Reader, register
from flyover.model.errors import FlyoverInputError

CALIBRATION = ["channel", "pa_per_unit"]


def read_calibration(path, channels) -> dict[int, float]:
    """Read ``channel,pa_per_unit`` and check a positive factor exists for every channel used."""
    df = read_csv_table(path, "calibration")
    pick_columns(df, [CALIBRATION], path, "calibration")
    ch = channel_column(df, path)
    k = numeric_column(df, "pa_per_unit", path)
    bad = np.flatnonzero(k <= 0)
    if bad.size:
        i = bad[0]
        raise FlyoverInputError(f"calibration factor of channel {ch[i]} is not positive",
                                f"{path}, row {i + 2}", "pascals per unit > 0", f"{k[i]}")
    table = dict(zip(ch.tolist(), k.tolist()))
    missing = [int(c) for c in channels if int(c) not in table]
    if missing:
        raise FlyoverInputError("calibration is missing channels", str(path),
                                "a pa_per_unit for every layout channel",
                                f"none for channel(s) {missing}")
    return table


register(Reader("calibration", "CSV", (".csv", ".txt"), read_calibration))
