"""Stage: the campaign summary: per label, region, band and polar bin, the mean over passes."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.statistics import WIDE_INTERVAL_DB, mean_and_interval
from flyover.io.figures import campaign_figure, save_figure
from flyover.io.results.campaign_tables import CAMPAIGN_FIGURE, CAMPAIGN_LEVELS, CAMPAIGN_OVERALL
from flyover.io.results.levels import LEVELS
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.io.results.signoff import signoff_statuses
from flyover.campaign import Campaign
from flyover.model.reads import guarded
from flyover.pipeline._bins import pass_bins
from flyover.pipeline._overall import label_band_ranges, overall_table


# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("passes", "analysis.overall_band_range_hz", "analysis.uncertainty")


def summarise(per_pass: dict[str, pd.DataFrame], labels: dict[str, str], value: str,
              keys: list[str], *, shared_db: float = 0.0, flagged=()) -> pd.DataFrame:
    """Mean over the passes of each label, with spread, count and 90 % interval
    (``shared_db``: the part of the levels' uncertainty every pass shares; ``flagged``: passes
    the sign-off flagged, named in each row that includes them)."""
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
        s = mean_and_interval(g[value], uncertainty_db=g["uncertainty_db"],
                              shared_db=shared_db, bias_db=g["position_bias_db"])
        row = dict(zip(["label"] + keys + ["polar_bin_deg"], key))
        row.update(s)
        used = sorted(g.loc[np.isfinite(g[value]), "pass"])
        row["passes"] = " ".join(used)
        row["passes_flagged"] = " ".join(n for n in used if n in flagged)
        row["wide_interval"] = bool(np.isfinite(s["ci_half_width_db"])
                                    and s["ci_half_width_db"] > WIDE_INTERVAL_DB)
        rows.append(row)
    out = pd.DataFrame(rows).rename(columns={"n": "n_passes"})
    return out


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write every pass's levels_overall.csv (over its label's band range), then
    campaign_levels.csv (bands), campaign_overall.csv (overall, A-weighted) and
    campaign_overall.png. Passes the sign-off rejected keep their own tables but are left out
    of the label's band range and statistics (each row names the passes it includes)."""
    campaign = guarded(campaign, READS, stage="summary")
    out_dir = Path(out_dir)
    labels = {n: p.label for n, p in campaign.passes.items()}
    bands = {n: LEVELS.read(out_dir / n) for n in campaign.passes}
    statuses = signoff_statuses(out_dir)
    rejected = {n for n, s in statuses.items() if s == "rejected"}
    flagged = {n for n, s in statuses.items() if s == "flagged"}
    shared = campaign.analysis.uncertainty.calibration_shared_db
    overall = {}
    for label in dict.fromkeys(labels.values()):
        names = [n for n in campaign.passes if labels[n] == label]
        ranges = label_band_ranges(campaign, [bands[n] for n in names if n not in rejected]
                                   or [bands[n] for n in names])
        for n in names:
            overall[n] = overall_table(bands[n], ranges, shared_db=shared)
            LEVELS_OVERALL.write(out_dir / n, overall[n])
    signed = {n: t for n, t in bands.items() if n not in rejected}
    table = summarise(signed, labels, "level_db", ["region", "band_hz"], shared_db=shared,
                      flagged=flagged)
    CAMPAIGN_LEVELS.write(out_dir, table)
    parts = []
    for value in ("overall_db", "a_weighted_db"):
        s = summarise({n: t for n, t in overall.items() if n not in rejected}, labels, value,
                      ["region", "band_range_hz"], shared_db=shared, flagged=flagged)
        s.insert(3, "quantity", "overall" if value == "overall_db" else "A-weighted")
        parts.append(s)
    overall_summary = pd.concat(parts, ignore_index=True)
    CAMPAIGN_OVERALL.write(out_dir, overall_summary)
    save_figure(campaign_figure(overall_summary), CAMPAIGN_FIGURE.path(out_dir))
