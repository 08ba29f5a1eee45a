"""Stage: region powers -> levels at the reference distance and atmosphere, spectra, directivity."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.atmosphere import band_absorption_db
from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.reference import level_1m_db, reference_level_db
from flyover.acoustics.uncertainty import (Z90, InputUncertainty, band_level_uncertainty_db,
                                          ground_correction_spread_db, position_loss_db)
from flyover.io.figures import directivity_figure, save_figure, spectra_figure
from flyover.io.results.directivity import DIRECTIVITY, DIRECTIVITY_FIGURE
from flyover.io.results.alignment import clock_uncertainty_s, read_alignment
from flyover.io.results.levels import LEVELS, LEVELS_BY_METHOD
from flyover.io.results.region_angles import REGION_ANGLES
from flyover.io.results.region_power import REGION_POWER
from flyover.io.results.spectra import SPECTRA, SPECTRA_FIGURE
from flyover.io.results.windows import read_analysed
from flyover.campaign import ArraySpec, Campaign, pass_array
from flyover.model.constants import TOTAL
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import guarded

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("regions", "array.plate_correction_db", "array.mounting", "array.ground",
         "passes.{pass}.array",
         "analysis.reference_distance_m",
         "analysis.reference_atmosphere", "analysis.band_absorption", "analysis.method",
         "passes.{pass}.other_methods",
         "analysis.spectra_polar_deg", "analysis.uncertainty")



def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write levels.csv, spectra.csv, directivity.csv and their figures (the overall levels
    follow in the campaign summary, over the band range of the pass's label)."""
    campaign = guarded(campaign, READS, stage="levels", pass_name=pass_name)
    out_dir = Path(out_dir)
    windows = read_analysed(out_dir).set_index("window")
    powers = REGION_POWER.read(out_dir)
    angles = REGION_ANGLES.read(out_dir)
    alignment = read_alignment(out_dir)
    per_method = {}
    for method in (campaign.analysis.method, *campaign.passes[pass_name].other_methods):
        mine = powers[powers["method"].astype(str) == method].drop(columns="method")
        per_method[method] = with_uncertainty(level_table(mine, windows, angles, campaign,
                                                          pass_name),
                                              alignment, campaign.analysis.uncertainty,
                                              array=pass_array(campaign, pass_name))
    levels = per_method[campaign.analysis.method]
    LEVELS.write(out_dir, levels)
    LEVELS_BY_METHOD.write(out_dir, pd.concat(
        [t.assign(method=m) for m, t in per_method.items()], ignore_index=True)[
        LEVELS_BY_METHOD.column_names])
    spectra = spectra_table(levels, campaign.analysis.spectra_polar_deg)
    SPECTRA.write(out_dir, spectra)
    DIRECTIVITY.write(out_dir, directivity_table(levels))
    save_figure(spectra_figure(spectra, pass_name), SPECTRA_FIGURE.path(out_dir))
    save_figure(directivity_figure(levels, pass_name), DIRECTIVITY_FIGURE.path(out_dir))


def level_table(powers: pd.DataFrame, windows: pd.DataFrame, angles: pd.DataFrame,
                campaign: Campaign, pass_name: str) -> pd.DataFrame:
    """One row per window, band and region (plus the 'total' of all regions), with each
    region's emission angles towards the array centre, in body axes and in the moving air
    (``angles``: region_angles.csv's rows, as the image step computed them).

    The level of a region whose sources are not monopoles (``convective_exponent`` n) is
    corrected by ``20 (n - 2) lg(1 - M_r)`` (the chain assumes n = 2); ``plate_correction_db``
    is subtracted; ``convective_amplification_db`` (``-20 n lg(1 - M_r)``) is what the motion
    adds at the array, kept apart so that ``level_as_heard_db`` can be given for metrics.
    """
    an = campaign.analysis
    cols = LEVELS.column_names
    if len(powers) == 0:
        return pd.DataFrame(columns=cols)
    p = powers.copy()
    p["window"] = p["window"].astype(int)
    p["band_hz"] = p["band_hz"].astype(float)
    p["power_1m_pa2"] = pd.to_numeric(p["power_1m_pa2"], errors="coerce")
    p["region_note"] = p["region_note"].astype(object).fillna("")
    p["band_note"] = p["band_note"].astype(object).fillna("")
    unknown = sorted(set(p["region"]) - set(campaign.regions) - {TOTAL})
    if unknown:
        raise FlyoverInputError("region powers name regions the campaign does not have",
                                REGION_POWER.name, f"regions {sorted(campaign.regions)}",
                                f"{unknown}", "the imaging is stale: re-run the workflow")
    w = windows.loc[p["window"]]
    for c in ("time_utc", "polar_angle_deg", "height_m", "speed_m_s", "distance_m"):
        p[c] = w[c].to_numpy()
    p = _add_angles(p, angles, campaign)
    bands = third_octave_bands(p["band_hz"].min(), p["band_hz"].max())
    band_index = {b: k for k, b in enumerate(bands.nominal_hz)}
    k = p["band_hz"].map(band_index).to_numpy()
    plate = pass_array(campaign, pass_name).plate_correction_db
    p["plate_correction_db"] = p["band_hz"].map(lambda b: plate.get(b, 0.0)).astype(float)
    one_minus = 1.0 - p["mach_r"].to_numpy(float)
    source_type = 20.0 * (p["convective_exponent"].to_numpy(float) - 2.0) * np.log10(one_minus)
    l1 = (level_1m_db(p["power_1m_pa2"].to_numpy()) + source_type
          - p["plate_correction_db"].to_numpy(float))
    lref = reference_level_db(np.zeros(len(bands)), bands, an.reference_distance_m,
                              an.reference_atmosphere)[k] + l1
    # The reference path's absorption integrated over each band (after SAE ARP 5534) minus the
    # pure tone's at the exact midband: reported, and used when the campaign asks for it.
    ref = an.reference_atmosphere
    band_minus_tone = (band_absorption_db(lambda f: ref.absorption_db_per_m(f)
                                          * an.reference_distance_m, bands)
                       - ref.absorption_db_per_m(bands.center_hz) * an.reference_distance_m)
    p["band_absorption_difference_db"] = band_minus_tone[k]
    if an.band_absorption == "band":
        lref = lref - band_minus_tone[k]
    ok = p["region_valid"] & p["band_valid"]
    # A level that cannot be separated or measured is not given at any distance.
    p["level_1m_db"] = np.where(ok, l1, np.nan)
    p["level_db"] = np.where(ok, lref, np.nan)
    p["convective_amplification_db"] = (-20.0 * p["convective_exponent"].to_numpy(float)
                                        * np.log10(one_minus))
    p["level_as_heard_db"] = p["level_db"] + p["convective_amplification_db"]
    p["note"] = np.where(~p["band_valid"], p["band_note"], p["region_note"])
    order = {name: i for i, name in enumerate(list(campaign.regions) + [TOTAL])}
    p = p.assign(_o=p["region"].map(order)).sort_values(["window", "_o", "band_hz"])
    for name in ("uncertainty_db", "ci90_low_db", "ci90_high_db", "ground_db",
                 "position_bias_db"):
        p[name] = np.nan
    # The stability test's change where the level is given (a total has none).
    p["leakage_db"] = np.where(p["region"] == TOTAL, 0.0,
                               pd.to_numeric(p["stability_db"], errors="coerce"))
    p.loc[~np.isfinite(p["level_db"]), "leakage_db"] = np.nan
    return p[cols].reset_index(drop=True)


def _add_angles(p: pd.DataFrame, angles: pd.DataFrame, campaign: Campaign) -> pd.DataFrame:
    """Per row: its region's angles in the window (region_angles.csv) and the region's
    convective exponent."""
    keyed = angles.assign(window=angles["window"].astype(int)).set_index(["window", "region"])
    at = keyed.reindex(pd.MultiIndex.from_arrays([p["window"], p["region"]]))
    for name in keyed.columns:
        p[name] = at[name].to_numpy(float)
    p["convective_exponent"] = [float(campaign.regions[r].convective_exponent)
                                if r in campaign.regions else 2.0 for r in p["region"]]
    return p


# The window scatter of an isolated level in a pass where no level has a neighbour: a stated
# conservative value, above the 0.5-1 dB scatter of the demo's supported levels (measured).
UNSUPPORTED_SCATTER_DB = 1.5
ISOLATED_NOTE = "isolated: window scatter taken from its band over the pass"


def window_scatter_db(levels: pd.DataFrame) -> pd.Series:
    """Per region and band, the rms difference of consecutive windows' levels over sqrt(2):
    one window's scatter about the pass's smooth trend (NaN without two consecutive levels)."""
    def scatter(v):
        d = np.diff(v.to_numpy(float))
        d = d[np.isfinite(d)]
        return float(np.sqrt(np.mean(d ** 2) / 2.0)) if len(d) else np.nan
    ordered = levels.sort_values("window")
    return ordered.groupby(["region", "band_hz"])["level_1m_db"].apply(scatter)


def scatter_where_unsupported_db(scatter: pd.Series) -> pd.Series:
    """The conservative window scatter of a level whose own scatter cannot be estimated (no
    consecutive window of its region and band has a level): per band, the largest scatter of any
    region in that band over the pass; for a band with none, the largest of the pass; for a pass
    with none, ``UNSUPPORTED_SCATTER_DB``. Indexed by band (nominal Hz)."""
    by_band = scatter.groupby(level="band_hz").max()
    fallback = float(scatter.max()) if scatter.notna().any() else UNSUPPORTED_SCATTER_DB
    by_band.index = by_band.index.astype(float)
    return by_band.fillna(fallback)


def with_uncertainty(levels: pd.DataFrame, alignment: dict, inputs: InputUncertainty, *,
                     array: ArraySpec | None = None) -> pd.DataFrame:
    """Add each level's standard uncertainty and 90 % interval
    (:func:`flyover.acoustics.uncertainty.band_level_uncertainty_db`).

    ``array`` is the pass's (its ground enters the budget under raised microphones); the
    positions' one-sided loss raises the interval's upper end (``position_bias_db``).
    A level's window scatter comes from its consecutive windows. Where it cannot (an isolated
    level), less data must not mean a tighter interval: the scatter is the band's largest over
    the pass (:func:`scatter_where_unsupported_db`), the uncertainty at least the median of the
    band's supported levels, and the note says so."""
    out = levels.copy()
    if len(out) == 0:
        return out
    scatter = window_scatter_db(out)
    key = pd.MultiIndex.from_arrays([out["region"], out["band_hz"].astype(float)])
    band_scatter = scatter.reindex(key).to_numpy(float, copy=True)
    isolated = ~np.isfinite(band_scatter)
    fallback = scatter_where_unsupported_db(scatter)
    band_scatter[isolated] = (out["band_hz"].astype(float)[isolated].map(fallback)
                              .fillna(UNSUPPORTED_SCATTER_DB).to_numpy(float))
    bands = third_octave_bands(out["band_hz"].min(), out["band_hz"].max())
    centre = dict(zip(bands.nominal_hz, bands.center_hz))
    at = out["band_hz"].map(centre).to_numpy(float)
    aperture_m, c_m_s = float(alignment["array_aperture_m"]), float(alignment["speed_of_sound_m_s"])
    temperature_c = float(alignment["atmosphere"]["temperature_c"])
    out["ground_db"] = _ground_spread_db(out, bands, alignment, array,
                                         inputs.flow_resistivity_factor)
    u = band_level_uncertainty_db(
        at, distance_m=out["distance_m"].to_numpy(float),
        polar_deg=out["polar_angle_deg"].to_numpy(float), n_mics=int(alignment["channels_used"]),
        aperture_m=aperture_m, c_m_s=c_m_s, temperature_c=temperature_c,
        speed_m_s=float(alignment["speed_m_s"]),
        track_m=float(alignment["track_noise_estimate_m"]),
        clock_s=clock_uncertainty_s(alignment, inputs.clock_s), inputs=inputs,
        scatter_db=band_scatter,
        leakage_db=np.nan_to_num(out["leakage_db"].to_numpy(float), posinf=0.0)
        if "leakage_db" in out else 0.0, ground_db=out["ground_db"].to_numpy(float))
    has = np.isfinite(out["level_db"].to_numpy(float))
    supported = pd.Series(np.where(has & ~isolated, u, np.nan), index=out.index)
    band_median = supported.groupby(out["band_hz"]).transform("median").to_numpy(float)
    floor = isolated & has & np.isfinite(band_median)
    u = np.where(floor, np.fmax(u, band_median), u)
    out["uncertainty_db"] = np.where(has, u, np.nan)
    # The position errors' loss is one-sided: it raises the interval's upper end only.
    out["position_bias_db"] = np.where(has, position_loss_db(
        at, aperture_m=aperture_m, c_m_s=c_m_s, temperature_c=temperature_c, inputs=inputs),
        np.nan)
    out["ci90_low_db"] = out["level_db"] - Z90 * out["uncertainty_db"]
    out["ci90_high_db"] = (out["level_db"] + Z90 * out["uncertainty_db"]
                           + out["position_bias_db"])
    note = out["note"].fillna("").astype(str)
    out["note"] = np.where(isolated & has, np.where(note == "", ISOLATED_NOTE,
                                                     note + "; " + ISOLATED_NOTE), note)
    return out[LEVELS.column_names]


def _ground_spread_db(levels: pd.DataFrame, bands, alignment: dict, array, factor: float):
    """Per row, the ground correction's spread over the flow resistivity's factor
    (:func:`flyover.acoustics.uncertainty.ground_correction_spread_db`) at its window's distance
    and angle; 0 off raised microphones or over hard ground."""
    out = np.zeros(len(levels))
    if array is None or array.mounting != "raised" or array.ground is None:
        return out
    height = float(np.mean(alignment["array"]["mic_height_m"]))
    index = {f: i for i, f in enumerate(bands.nominal_hz)}
    for _, rows in levels.groupby("window").groups.items():
        first = levels.loc[rows[0]]
        spread = ground_correction_spread_db(
            bands, distance_m=float(first["distance_m"]), polar_deg=float(first["polar_angle_deg"]),
            mic_height_m=height, aperture_m=float(alignment["array_aperture_m"]),
            c_m_s=float(alignment["speed_of_sound_m_s"]), ground=array.ground, factor=factor)
        out[levels.index.get_indexer(rows)] = spread[levels.loc[rows, "band_hz"].map(index)]
    return out


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
