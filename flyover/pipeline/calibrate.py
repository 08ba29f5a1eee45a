"""Stage: pascals per unit from a calibrator recording, written into a calibration CSV."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.calibration import pa_per_unit_from_calibrator
from flyover.io.csvtable import read_csv_table, write_csv
from flyover.io.readers import read
from flyover.io.readers.calibration_csv import CALIBRATION
from flyover.model.errors import FlyoverInputError


def run(recording: Path, level_db: float, frequency_hz: float, channel: int | None,
        update: Path | None) -> str:
    """Measure one channel (``channel``) or all, merge into ``update`` when given, and report."""
    info = read("recording", recording)
    if channel is not None and not 1 <= channel <= info.n_channels:
        raise FlyoverInputError("channel not in the recording", str(recording),
                                f"a channel from 1 to {info.n_channels}", f"{channel}")
    chans = [channel - 1] if channel is not None else list(range(info.n_channels))
    samples = info.read(0, info.n_frames, chans)
    factors = pa_per_unit_from_calibrator(samples, info.sample_rate_hz, level_db, frequency_hz,
                                          [c + 1 for c in chans])
    new = dict(zip([c + 1 for c in chans], factors.tolist()))
    table = {}
    if update is not None and Path(update).exists():
        old = read_csv_table(update, "calibration")
        if list(old.columns)[:2] != CALIBRATION:
            raise FlyoverInputError("calibration file has the wrong columns", str(update),
                                    ",".join(CALIBRATION), ",".join(old.columns))
        table = dict(zip(old["channel"].astype(int), old["pa_per_unit"].astype(float)))
    table.update(new)
    lines = [f"channel {c}: {k:.6g} Pa per unit" for c, k in new.items()]
    if update is not None:
        ch = np.array(sorted(table))
        write_csv(update, pd.DataFrame({"channel": ch, "pa_per_unit": [table[c] for c in ch]}),
                  float_format="%.9g")
        lines.append(f"updated {update}")
    return "\n".join(lines)
