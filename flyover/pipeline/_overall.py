"""Shared by stages: overall levels summed over one band range per label and region."""

from __future__ import annotations

import numpy as np
import pandas as pd

from flyover.acoustics.bands import a_weighting_db, third_octave_bands
from flyover.acoustics.reference import overall_db
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.campaign import Campaign
from flyover.model.constants import MIN_OVERALL_BANDS


# The default band range of a label's overall levels (stated in docs/outputs.md): the windows within
# NEAR_OVERHEAD_DEG of overhead decide, where the array resolves the vehicle best and every pass
# has windows; a band counts where a region has a level in at least SUPPORT_FRACTION of them in
# every pass; the widest run of such bands is the range, and a run of fewer than
# MIN_OVERALL_BANDS bands (flyover.model.constants) is no overall at all.
NEAR_OVERHEAD_DEG = 30.0
SUPPORT_FRACTION = 0.75
NO_RANGE_NOTE = (f"no run of {MIN_OVERALL_BANDS} or more bands with a level in "
                 f"{SUPPORT_FRACTION:.0%} of the windows within {NEAR_OVERHEAD_DEG:g} deg of "
                 "overhead of every pass of the label; set analysis.overall_band_range_hz")


def common_band_range(tables) -> dict[str, tuple[float, float] | None]:
    """Per region, the band range of a label's overall levels: the widest run of consecutive
    bands that every table (a pass of the label) supports near overhead (see
    ``NEAR_OVERHEAD_DEG``), None where no run of ``MIN_OVERALL_BANDS`` bands is supported."""
    frames = [t.assign(_table=i) for i, t in enumerate(tables) if len(t)]
    if not frames:
        return {}
    levels = pd.concat(frames, ignore_index=True)
    near = (levels["polar_angle_deg"].astype(float) - 90.0).abs() <= NEAR_OVERHEAD_DEG
    out = {}
    for region, g in levels.groupby("region", sort=False):
        bands = third_octave_bands(g["band_hz"].min(), g["band_hz"].max()).nominal_hz
        close = g[near.loc[g.index]]
        share = (close.assign(ok=np.isfinite(close["level_db"].astype(float)))
                 .groupby(["_table", "band_hz"])["ok"].mean())
        supported = (share >= SUPPORT_FRACTION).groupby(level="band_hz").all() if len(
            share) else pd.Series(dtype=bool)
        ok = supported.reindex(bands, fill_value=False).to_numpy()
        best, run = None, None
        for k, good in enumerate(ok):
            run = (run if run is not None else k) if good else None
            if run is not None and (best is None or k - run > best[1] - best[0]):
                best = (run, k)
        wide_enough = best is not None and best[1] - best[0] + 1 >= MIN_OVERALL_BANDS
        out[region] = (float(bands[best[0]]), float(bands[best[1]])) if wide_enough else None
    return out


def overall_table(levels: pd.DataFrame, band_range: dict, *, shared_db: float = 0.0
                  ) -> pd.DataFrame:
    """Overall and A-weighted sums per window and region over one band range per region
    (``band_range[region]``, nominal band limits, or None): a window missing a band of the
    range gets no overall (with a note), never a sum over fewer bands. ``shared_db`` is the
    part of every band's uncertainty common to all bands (the calibration's shared term):
    the sum does not average it away."""
    rows = []
    for (window, region), g in levels.groupby(["window", "region"], sort=False):
        overall = a_weighted = u_overall = np.nan
        limits = band_range.get(region)
        note, summed, text = NO_RANGE_NOTE, 0, ""
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
                    # Each band's share w of the A-weighted sum carries its uncertainty, first
                    # order: the independent parts in quadrature, the shared part whole
                    # (sum w = 1).
                    share = 10 ** ((by_band.to_numpy() + a_weighting_db(bands.center_hz)) / 10)
                    w = share / share.sum()
                    own = np.fmax(u ** 2 - shared_db ** 2, 0.0)
                    u_overall = float(np.sqrt(np.sum(w ** 2 * own) + shared_db ** 2))
        rows.append({"window": window, "time_utc": g["time_utc"].iloc[0],
                     "polar_angle_deg": g["polar_angle_deg"].iloc[0], "region": region,
                     "overall_db": overall, "a_weighted_db": a_weighted,
                     "bands_summed": summed, "band_range_hz": text, "note": note,
                     "uncertainty_db": u_overall})
    return pd.DataFrame(rows, columns=LEVELS_OVERALL.column_names)


def label_band_ranges(campaign: Campaign, tables) -> dict:
    """The band range of the overall levels per region for the passes of one label: the
    campaign's ``analysis.overall_band_range_hz``, else :func:`common_band_range`."""
    chosen = campaign.analysis.overall_band_range_hz
    found = common_band_range(tables)
    if chosen is None:
        return found
    nominal = third_octave_bands(*chosen).nominal_hz
    return {r: (float(nominal[0]), float(nominal[-1])) for r in found}
