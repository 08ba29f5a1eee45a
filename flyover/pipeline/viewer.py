"""Stage: the interactive view of a campaign (``viewer.html``), gathered from the result files
of every pass (maps, windows, levels, narrowband spectra, rotor tones, listening files) and the
sign-off; the page itself is
:mod:`flyover.io.viewer_page`."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.campaign import Campaign
from flyover.io.atomic import write_text
from flyover.io.results import viewer
from flyover.io.results.levels import LEVELS
from flyover.io.results.listen import LISTEN
from flyover.io.results.maps import read_maps
from flyover.io.results.narrowband import NARROWBAND
from flyover.io.results.rotor_tones import ROTOR_TONES
from flyover.io.results.signoff import SIGNOFF
from flyover.io.results.windows import WINDOWS
from flyover.io.viewer_page import ViewerData, stored_map, viewer_html
from flyover.model.reads import guarded
from flyover.pipeline.context import load_layout

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("site", "geoid_undulation_m", "array", "passes", "config_path", "regions")


def verdicts(levels: pd.DataFrame) -> pd.Series:
    """Per level row: 'resolved' (given, resolved from every other region), 'dominant, not
    resolved' (given as the dominant one), or 'no level' (its note says why)."""
    given = np.isfinite(levels["level_db"].to_numpy(float))
    resolved = levels["resolved"].to_numpy(bool)
    return pd.Series(np.where(~given, "no level", np.where(resolved, "resolved",
                                                           "dominant, not resolved")),
                     index=levels.index)


def _pass_tables(campaign: Campaign, name: str, folder: Path) -> dict[str, pd.DataFrame]:
    windows = WINDOWS.read(folder)
    windows = pd.DataFrame({
        "pass": name, "window": windows["window"].astype(int),
        "polar_angle_deg": windows["polar_angle_deg"].astype(float),
        "time_utc": windows["time_utc"].astype(str).str[:23] + "Z",
        "east_m": windows["east_m"].astype(float), "north_m": windows["north_m"].astype(float),
        "analysed": windows["status"].eq("analysed")})
    maps = read_maps(folder)
    stored = [(int(w), float(b)) + stored_map(maps["diagonal_removed"][i, k])
              for i, w in enumerate(maps["window"]) for k, b in enumerate(maps["band_hz"])]
    map_rows = pd.DataFrame([{"pass": name, "window": w, "band_hz": b, "image": img,
                              "peak_db": peak} for w, b, img, peak in stored],
                            columns=["pass", "window", "band_hz", "image", "peak_db"])
    levels = LEVELS.read(folder)
    levels = levels[levels["region"].isin(list(campaign.regions))]
    levels = pd.DataFrame({
        "pass": name, "window": levels["window"].astype(int),
        "polar_angle_deg": levels["polar_angle_deg"].astype(float),
        "band_hz": levels["band_hz"].astype(float), "region": levels["region"].astype(str),
        **{c: levels[c].astype(float) for c in ("level_db", "ci90_low_db", "ci90_high_db")},
        "verdict": verdicts(levels), "note": levels["note"].fillna("").astype(str)})
    enu = load_layout(campaign, name).enu_m
    microphones = pd.DataFrame({"pass": name, "east_m": enu[:, 0], "north_m": enu[:, 1]})
    dense = NARROWBAND.read(folder)
    narrowband = pd.DataFrame([
        {"pass": name, "window": int(w), "region": str(r),
         "frequency_hz": g["frequency_hz"].to_numpy(np.float32),
         "psd_db": g["psd_db"].to_numpy(np.float32)}
        for (w, r), g in dense.groupby(["window", "region"], sort=False)],
        columns=["pass", "window", "region", "frequency_hz", "psd_db"])
    tones = ROTOR_TONES.read(folder)
    harmonics = pd.DataFrame({"pass": name, "window": tones["window"].astype(int),
                              "rotor": tones["rotor"].astype(str),
                              "frequency_hz": tones["frequency_hz"].astype(float)})
    files = LISTEN.read(folder)
    listening = pd.DataFrame({"pass": name, "region": files["region"].fillna("").astype(str),
                              "file": [f"{name}/{f}" for f in files["file"]]})
    return {"windows": windows, "maps": map_rows, "levels": levels,
            "microphones": microphones, "listening": listening,
            "narrowband": narrowband, "harmonics": harmonics,
            "grid": {"x_m": maps["x_m"], "y_m": maps["y_m"]},
            "bands_hz": list(maps["band_hz"])}


def viewer_data(campaign: Campaign, out_dir: Path) -> ViewerData:
    """Everything the page shows, from the result files in ``out_dir``."""
    out_dir = Path(out_dir)
    signed = SIGNOFF.read(out_dir).set_index("pass")
    per_pass = {name: _pass_tables(campaign, name, out_dir / name) for name in campaign.passes}
    passes = pd.DataFrame([{"pass": n, "label": p.label,
                            "status": str(signed.loc[n, "status"]) if n in signed.index
                            else "not signed"} for n, p in campaign.passes.items()])
    passes["option"] = passes["pass"] + " (" + passes["label"] + ", " + passes["status"] + ")"
    regions = pd.DataFrame([{"region": n, "x0": r.x_m[0], "x1": r.x_m[1], "y0": r.y_m[0],
                             "y1": r.y_m[1]} for n, r in campaign.regions.items()])
    first = next(iter(per_pass.values()))
    return ViewerData(
        title=f"Results of {campaign.config_path.parent.name}/{campaign.config_path.name}",
        passes=passes, regions=regions,
        grid=first["grid"], bands_hz=first["bands_hz"],
        **{k: pd.concat([t[k] for t in per_pass.values()], ignore_index=True)
           for k in ("windows", "maps", "levels", "microphones", "listening", "narrowband",
                     "harmonics")})


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write viewer.html from the results already in ``out_dir``."""
    campaign = guarded(campaign, READS, stage="viewer")
    write_text(Path(out_dir) / viewer.NAME, viewer_html(viewer_data(campaign, out_dir)))
