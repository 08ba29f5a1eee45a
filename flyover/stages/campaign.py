"""Stage: the campaign summary: per label, region, band and polar bin, the mean over passes."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..campaign import Campaign
from ..io.tables import write_csv
from ..plots import campaign_figure, save_figure
from ..stats import WIDE_INTERVAL_DB, energetic_mean_db, mean_and_interval, polar_bin_deg

POLAR_BIN_DEG = 10.0


def pass_bins(levels: pd.DataFrame, value: str, keys: list[str]) -> pd.DataFrame:
    """Energetic mean of a pass's windows within each polar bin."""
    if len(levels) == 0:
        return pd.DataFrame(columns=keys + ["polar_bin_deg", value])
    d = levels.assign(polar_bin_deg=polar_bin_deg(levels["polar_angle_deg"], POLAR_BIN_DEG))
    return (d.groupby(keys + ["polar_bin_deg"])[value].apply(energetic_mean_db)
            .reset_index())


def summarise(per_pass: dict[str, pd.DataFrame], labels: dict[str, str], value: str,
              keys: list[str]) -> pd.DataFrame:
    """Mean over the passes of each label, with spread, count and 90 % interval."""
    rows = []
    frames = []
    for name, table in per_pass.items():
        b = pass_bins(table, value, keys)
        b["label"] = labels[name] or "unlabelled"
        b["pass"] = name
        frames.append(b)
    if not frames:
        return pd.DataFrame()
    allb = pd.concat(frames, ignore_index=True)
    for key, g in allb.groupby(["label"] + keys + ["polar_bin_deg"], sort=True):
        s = mean_and_interval(g[value])
        row = dict(zip(["label"] + keys + ["polar_bin_deg"], key))
        row.update(s)
        row["passes"] = " ".join(sorted(g.loc[np.isfinite(g[value]), "pass"]))
        row["wide_interval"] = bool(np.isfinite(s["ci_half_width_db"])
                                    and s["ci_half_width_db"] > WIDE_INTERVAL_DB)
        rows.append(row)
    out = pd.DataFrame(rows).rename(columns={"n": "n_passes"})
    return out


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write campaign_levels.csv (bands), campaign_overall.csv (overall, A-weighted) and
    campaign_overall.png."""
    out_dir = Path(out_dir)
    labels = {n: p.label for n, p in campaign.passes.items()}
    bands = {n: pd.read_csv(out_dir / n / "levels.csv") for n in campaign.passes}
    overall = {n: pd.read_csv(out_dir / n / "levels_overall.csv") for n in campaign.passes}
    table = summarise(bands, labels, "level_db", ["region", "band_hz"])
    write_csv(out_dir / "campaign_levels.csv", table, float_format="%.3f")
    parts = []
    for value in ("overall_db", "a_weighted_db"):
        s = summarise(overall, labels, value, ["region"])
        s.insert(2, "quantity", "overall" if value == "overall_db" else "A-weighted")
        parts.append(s)
    overall_table = pd.concat(parts, ignore_index=True)
    write_csv(out_dir / "campaign_overall.csv", overall_table, float_format="%.3f")
    save_figure(campaign_figure(overall_table), out_dir / "campaign_overall.png")
