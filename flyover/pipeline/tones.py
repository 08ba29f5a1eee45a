"""Stage: per-rotor tones. For every analysed window and every rotor with a logged speed: the
channels de-Dopplerized to the rotor's hub and summed (the array's gain against noise), every
rotor's blade-passing harmonics fitted along its own shaft angle (:mod:`flyover.acoustics.orders`),
then the band levels split into their tonal part and the broadband rest."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.orders import SEPARATION_CORRELATION, OrderTrack, fit_orders, refine_speeds
from flyover.forward.moving_source import ShaftSpeed
from flyover.io.figures import rotor_tones_figure, save_figure
from flyover.io.results.levels import LEVELS
from flyover.io.results.rotor_tones import BAND_PARTS, ROTOR_TONES, ROTOR_TONES_FIGURE
from flyover.io.results.windows import read_analysed
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.model.constants import TOTAL
from flyover.model.reads import guarded
from flyover.pipeline._span import dedopplerize_span
from flyover.pipeline.context import PassInputs, load_aligned_pass

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("regions", "analysis.rotor_harmonics", "analysis.band_min_hz",
                       "analysis.band_max_hz", "analysis.reference_distance_m",
                       "analysis.reference_atmosphere")
MIN_SNR_DB = 6.0            # a tone standing less above the residual is not given a level
SPEED_FIT_MARGIN_S = 0.25   # logged speeds this far either side of a window shape its speed
NO_SPEEDS = "no rotor speeds in this pass's track (a flight log with motor speeds gives them)"


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write rotor_tones.csv, band_parts.csv and rotor_tones.png for one pass."""
    campaign = guarded(campaign, READS, stage="tones", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    windows = read_analysed(out_dir)
    tones = tone_table(campaign, inputs, windows)
    ROTOR_TONES.write(out_dir, tones)
    BAND_PARTS.write(out_dir, band_parts(LEVELS.read(out_dir), tones, campaign))
    save_figure(rotor_tones_figure(tones, pass_name, NO_SPEEDS if not inputs.rotors else ""),
                ROTOR_TONES_FIGURE.path(out_dir))


def window_speed(rotor, start_s: float, end_s: float) -> ShaftSpeed:
    """The shaft speed over a window: a quadratic fit of the logged speeds within the window
    and ``SPEED_FIT_MARGIN_S`` either side (an ESC's reading scatter would otherwise turn into
    a phase wander of the high orders), sampled at the window's ends and middle."""
    t, rpm = rotor.time_s, rotor.rpm
    near = (t >= start_s - SPEED_FIT_MARGIN_S) & (t <= end_s + SPEED_FIT_MARGIN_S)
    knots = np.array([start_s, 0.5 * (start_s + end_s), end_s])
    if np.sum(near) >= 4:
        poly = np.polyfit(t[near] - knots[1], rpm[near], 2)
        values = np.polyval(poly, knots - knots[1])
    else:   # a sparse log: its own samples, linearly between
        values = np.interp(knots, t, rpm)
    return ShaftSpeed(tuple(knots), tuple(values))


def tone_table(campaign: Campaign, inputs: PassInputs, windows: pd.DataFrame) -> pd.DataFrame:
    """rotor_tones.csv: every rotor's harmonics in every analysed window."""
    cols = ROTOR_TONES.column_names
    if not inputs.rotors or len(windows) == 0:
        return pd.DataFrame(columns=cols)
    an = campaign.analysis
    fs = inputs.sample_rate_hz
    used = inputs.weights > 0
    raised = inputs.array.mounting == "raised"
    ref = an.reference_atmosphere
    rows = []
    for _, w in windows.iterrows():
        n = int(round(float(w["duration_s"]) * fs))
        start = float(w["center_s"]) - 0.5 * (n - 1) / fs
        tau = start + np.arange(n) / fs
        tracks = []
        for rotor in inputs.rotors:
            rev = window_speed(rotor, tau[0], tau[-1]).revolutions(tau)
            tracks += [OrderTrack(rotor.spec.name, k * rotor.spec.blades, k, rev)
                       for k in range(1, an.rotor_harmonics + 1)]
        # Sound reaching the array at angle theta from the flight direction: Doppler factor
        # 1 / (1 - M cos theta) for the frequency in the air (no wind: the absorption's scale).
        doppler = 1.0 / (1.0 - float(w["speed_m_s"]) / inputs.atmosphere.c_m_s
                         * np.cos(np.deg2rad(float(w["polar_angle_deg"]))))
        hubs = {}
        for rotor in inputs.rotors:
            mics = dedopplerize_span(campaign, inputs, start, n, rotor.spec.body_m)
            if mics is not None:
                hubs[rotor.spec.name] = np.average(mics[used].astype(float), axis=0,
                                                   weights=inputs.weights[used])
        tracks, kept = refine_speeds(hubs, tracks)
        for name, hub in hubs.items():
            for fit in fit_orders(hub, tracks, fs):
                if fit.rotor != name:
                    continue
                path_db = inputs.atmosphere.absorption_db_per_m(fit.frequency_hz * doppler) \
                    * float(w["distance_m"])
                l1 = fit.level_db + path_db
                lref = (l1 - 20 * np.log10(an.reference_distance_m)
                        - ref.absorption_db_per_m(fit.frequency_hz) * an.reference_distance_m)
                note = _why_empty(fit, raised)
                heard = note == ""
                rows.append({"window": int(w["window"]), "time_utc": w["time_utc"],
                             "polar_angle_deg": float(w["polar_angle_deg"]),
                             "rotor": fit.rotor, "harmonic": fit.harmonic, "order": fit.order,
                             "frequency_hz": fit.frequency_hz,
                             "level_1m_db": l1 if heard else np.nan,
                             "level_db": lref if heard else np.nan,
                             "uncertainty_db": fit.level_sd_db if heard else np.nan,
                             "phase_deg": np.rad2deg(fit.phase_rad) if heard else np.nan,
                             "snr_db": fit.snr_db, "separable": fit.separable,
                             "column_correlation": fit.correlation,
                             "note": "; ".join(x for x in (note, kept.get(name, "")) if x)})
    return pd.DataFrame(rows, columns=cols)


RAISED_NOTE = ("over raised microphones the tone holds the ground reflection at its own "
               "frequency (up to a notch), which is not taken off: no level")


def _why_empty(fit, raised: bool) -> str:
    """Why a fitted tone gets no level ('' when it gets one)."""
    if not fit.separable:
        return (f"another component's fit column correlates {fit.correlation:.2f} with this "
                f"one's (over {SEPARATION_CORRELATION:g}): not separable")
    if not fit.snr_db >= MIN_SNR_DB:
        return f"not above the noise ({fit.snr_db:.1f} dB, under {MIN_SNR_DB:g} dB)"
    if not fit.amplitude_pa > 0:
        return "no larger than the noise's share of the fit"
    if raised:
        return RAISED_NOTE
    return ""


def band_parts(levels: pd.DataFrame, tones: pd.DataFrame, campaign: Campaign) -> pd.DataFrame:
    """Each region's band levels split into the tonal part of the rotors whose hub lies in the
    region (all rotors for 'total') and the broadband rest."""
    cols = BAND_PARTS.column_names
    if len(levels) == 0:
        return pd.DataFrame(columns=cols)
    bands = third_octave_bands(levels["band_hz"].min(), levels["band_hz"].max())
    out = levels[["window", "polar_angle_deg", "region", "band_hz", "level_1m_db",
                  "level_db"]].copy()
    out["tonal_1m_db"] = np.nan
    out["note"] = ""
    home = {name: [r for r, reg in campaign.regions.items()
                   if reg.contains(np.asarray(spec.body_m)[None, :2])[0]]
            for name, spec in campaign.rotors.items()}
    if len(tones):
        t = tones.assign(band=np.searchsorted(bands.upper_hz, tones["frequency_hz"]))
        t = t[(t["band"] < len(bands)) & (t["frequency_hz"] >= bands.lower_hz[0])]
        t["band_hz"] = bands.nominal_hz[t["band"].to_numpy()]
        cells = dict(list(t.groupby(["window", "band_hz"])))
        for i, row in out.iterrows():
            cell = cells.get((row["window"], row["band_hz"]))
            if cell is None:
                continue
            here = cell[cell["rotor"].map(lambda r: row["region"] == TOTAL
                                          or row["region"] in home.get(r, []))]
            if len(here) == 0:
                continue
            if not here["separable"].astype(bool).all():
                out.loc[i, "note"] = "a rotor harmonic in this band is not separable"
                continue
            if here["note"].astype(str).str.contains(RAISED_NOTE, regex=False).any():
                out.loc[i, "note"] = "the band's tones are not corrected for the ground path"
                continue
            heard = here["level_1m_db"].dropna()   # tones under the noise are part of the rest
            if len(heard):
                out.loc[i, "tonal_1m_db"] = 10 * np.log10(np.sum(10 ** (heard / 10)))
    band = 10 ** (out["level_1m_db"] / 10)
    tonal = np.nan_to_num(10 ** (out["tonal_1m_db"] / 10), nan=0.0)
    rest = band - tonal
    known = out["note"] == ""
    with np.errstate(divide="ignore", invalid="ignore"):
        out["broadband_1m_db"] = np.where(known & (rest > 0.01 * band), 10 * np.log10(rest),
                                          np.nan)
    out.loc[known & np.isfinite(out["level_1m_db"]) & ~(rest > 0.01 * band), "note"] = \
        "the tonal part carries the whole band (within 20 dB)"
    out["broadband_db"] = out["broadband_1m_db"] + (out["level_db"] - out["level_1m_db"])
    return out[cols]
