"""Stage: region powers -> levels at the reference distance and atmosphere, spectra, directivity."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.reference import level_1m_db, reference_level_db
from flyover.imaging.window import TOTAL
from flyover.io.figures import directivity_figure, save_figure, spectra_figure
from flyover.io.results.directivity import DIRECTIVITY
from flyover.io.results.levels import LEVELS
from flyover.io.results.region_power import REGION_POWER
from flyover.io.results.spectra import SPECTRA
from flyover.io.results.windows import read_analysed
from flyover.model.campaign import Campaign
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import guarded

UNRESOLVED = "not separable: region centres closer than one main-lobe width"

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("regions", "analysis.reference_distance_m", "analysis.reference_atmosphere",
         "analysis.spectra_polar_deg")



def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write levels.csv, spectra.csv, directivity.csv and their figures (the overall levels
    follow in the campaign summary, over the band range of the pass's label)."""
    campaign = guarded(campaign, READS, stage="levels", pass_name=pass_name)
    out_dir = Path(out_dir)
    windows = read_analysed(out_dir).set_index("window")
    powers = REGION_POWER.read(out_dir)
    levels = level_table(powers, windows, campaign)
    LEVELS.write(out_dir, levels)
    spectra = spectra_table(levels, campaign.analysis.spectra_polar_deg)
    SPECTRA.write(out_dir, spectra)
    DIRECTIVITY.write(out_dir, directivity_table(levels))
    save_figure(spectra_figure(spectra, pass_name), out_dir / "spectra.png")
    save_figure(directivity_figure(levels, pass_name), out_dir / "directivity.png")


def level_table(powers: pd.DataFrame, windows: pd.DataFrame, campaign: Campaign) -> pd.DataFrame:
    """One row per window, band and region (plus the 'total' of all regions)."""
    an = campaign.analysis
    cols = LEVELS.column_names
    if len(powers) == 0:
        return pd.DataFrame(columns=cols)
    p = powers.copy()
    p["window"] = p["window"].astype(int)
    p["band_hz"] = p["band_hz"].astype(float)
    p["power_1m_pa2"] = pd.to_numeric(p["power_1m_pa2"], errors="coerce")
    p["resolved"] = p["resolved"].astype(str).str.lower() == "true"
    p["band_valid"] = p["band_valid"].astype(str).str.lower() == "true"
    p["band_note"] = p["band_note"].astype(object).fillna("")
    unknown = sorted(set(p["region"]) - set(campaign.regions) - {TOTAL})
    if unknown:
        raise FlyoverInputError("region powers name regions the campaign does not have",
                                "region_power.csv", f"regions {sorted(campaign.regions)}",
                                f"{unknown}", "the imaging is stale: re-run the workflow")
    bands = third_octave_bands(p["band_hz"].min(), p["band_hz"].max())
    band_index = {b: k for k, b in enumerate(bands.nominal_hz)}
    k = p["band_hz"].map(band_index).to_numpy()
    l1 = level_1m_db(p["power_1m_pa2"].to_numpy())
    lref = reference_level_db(np.zeros(len(bands)), bands, an.reference_distance_m,
                              an.reference_atmosphere)[k] + l1
    ok = p["resolved"] & p["band_valid"]
    # A level that cannot be separated or measured is not given at any distance.
    p["level_1m_db"] = np.where(ok, l1, np.nan)
    p["level_db"] = np.where(ok, lref, np.nan)
    p["note"] = np.where(~p["band_valid"], p["band_note"],
                         np.where(p["resolved"], "", UNRESOLVED))
    w = windows.loc[p["window"]]
    for c in ("time_utc", "polar_angle_deg", "height_m", "speed_m_s", "distance_m"):
        p[c] = w[c].to_numpy()
    order = {name: i for i, name in enumerate(list(campaign.regions) + [TOTAL])}
    p = p.assign(_o=p["region"].map(order)).sort_values(["window", "_o", "band_hz"])
    return p[cols].reset_index(drop=True)


def spectra_table(levels: pd.DataFrame, polar_deg,
                  tolerance_deg: float = 5.0) -> pd.DataFrame:
    """Region spectra of the windows nearest to chosen polar angles (within a tolerance)."""
    out = []
    if len(levels) == 0:
        return pd.DataFrame(columns=["target_polar_deg", *levels.columns])
    per_window = levels.groupby("window")["polar_angle_deg"].first()
    for target in polar_deg:
        gap = (per_window - target).abs()
        if gap.min() > tolerance_deg:
            continue
        w = gap.idxmin()
        sel = levels[levels["window"] == w].copy()
        sel.insert(0, "target_polar_deg", target)
        out.append(sel)
    return pd.concat(out, ignore_index=True) if out else pd.DataFrame(
        columns=["target_polar_deg", *levels.columns])


def directivity_table(levels: pd.DataFrame) -> pd.DataFrame:
    """Level against polar angle: one row per region and window, one column per band."""
    if len(levels) == 0:
        return pd.DataFrame(columns=["region", "window", "polar_angle_deg"])
    wide = levels.pivot_table(index=["region", "window", "polar_angle_deg"], columns="band_hz",
                              values="level_db", aggfunc="first", dropna=False)
    wide.columns = [f"{c:g}_hz" for c in wide.columns]
    return wide.reset_index().sort_values(["region", "polar_angle_deg"])
