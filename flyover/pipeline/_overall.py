"""Shared by stages: overall levels summed over one band range per label and region."""

from __future__ import annotations

import numpy as np
import pandas as pd

from flyover.acoustics.bands import a_weighting_db, third_octave_bands
from flyover.acoustics.reference import overall_db
from flyover.io.results.levels import LEVELS
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.model.campaign import Campaign


def common_band_range(tables) -> dict[str, tuple[float, float] | None]:
    """Per region, the widest run of consecutive bands with a level in every analysed window of
    every table (the passes of one label), or None where no band has one everywhere."""
    levels = pd.concat([t for t in tables if len(t)], ignore_index=True) if any(
        len(t) for t in tables) else pd.DataFrame(columns=LEVELS.column_names)
    out = {}
    for region, g in levels.groupby("region", sort=False):
        everywhere = g.assign(ok=np.isfinite(g["level_db"].astype(float))).groupby(
            "band_hz")["ok"].all()
        bands = third_octave_bands(everywhere.index.min(), everywhere.index.max()).nominal_hz
        ok = everywhere.reindex(bands, fill_value=False).to_numpy()
        best, run = None, None
        for k, good in enumerate(ok):
            run = (run if run is not None else k) if good else None
            if run is not None and (best is None or k - run > best[1] - best[0]):
                best = (run, k)
        out[region] = None if best is None else (float(bands[best[0]]), float(bands[best[1]]))
    return out


def overall_table(levels: pd.DataFrame, band_range: dict) -> pd.DataFrame:
    """Overall and A-weighted sums per window and region over one band range per region
    (``band_range[region]``, nominal band limits, or None): a window missing a band of the
    range gets no overall (with a note), never a sum over fewer bands."""
    rows = []
    for (window, region), g in levels.groupby(["window", "region"], sort=False):
        overall = a_weighted = u_overall = np.nan
        limits = band_range.get(region)
        note, summed, text = "no band range with a level in every window of the label", 0, ""
        if limits is not None:
            bands = third_octave_bands(*limits)
            text = f"{limits[0]:g}-{limits[1]:g}"
            by_band = (g.set_index("band_hz")["level_db"].astype(float)
                       .reindex(bands.nominal_hz))
            missing = by_band.index[~np.isfinite(by_band.to_numpy())]
            if len(missing):
                note = ("no level in band(s) " + ", ".join(f"{b:g}" for b in missing)
                        + " Hz of the range: not summed over fewer bands")
            else:
                overall, a_weighted = overall_db(by_band.to_numpy(), bands)
                note, summed = "", len(bands)
                if "uncertainty_db" in g:
                    u = (g.set_index("band_hz")["uncertainty_db"].astype(float)
                         .reindex(bands.nominal_hz).to_numpy())
                    # Each band's share of the A-weighted sum carries its uncertainty
                    # (independent bands, first order).
                    share = 10 ** ((by_band.to_numpy() + a_weighting_db(bands.center_hz)) / 10)
                    u_overall = float(np.sqrt(np.sum((share / share.sum() * u) ** 2)))
        rows.append({"window": window, "time_utc": g["time_utc"].iloc[0],
                     "polar_angle_deg": g["polar_angle_deg"].iloc[0], "region": region,
                     "overall_db": overall, "a_weighted_db": a_weighted,
                     "bands_summed": summed, "band_range_hz": text, "note": note,
                     "uncertainty_db": u_overall})
    return pd.DataFrame(rows, columns=LEVELS_OVERALL.column_names)


def label_band_ranges(campaign: Campaign, tables) -> dict:
    """The band range of the overall levels per region for the passes of one label: the
    campaign's ``analysis.overall_band_range_hz``, else the bands with a level in every
    analysed window of every one of these passes."""
    chosen = campaign.analysis.overall_band_range_hz
    found = common_band_range(tables)
    if chosen is None:
        return found
    nominal = third_octave_bands(*chosen).nominal_hz
    return {r: (float(nominal[0]), float(nominal[-1])) for r in found}
