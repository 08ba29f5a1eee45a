"""Coverage of the stated 90 % intervals of band levels, on simulated passes with known input
errors.

Twenty simulated passes (16 microphones, two sources 2 m apart, 5 s each, different noise and
geometry) are analysed with inputs that are wrong the way a campaign's are: calibrations off by
0.2 dB per microphone and by 0.15 dB shared by all microphones of a pass (the calibrator's and
the capsule type's part, drawn per pass so that the passes sample it), microphone positions off
by 5 mm per coordinate, the temperature off by 0.5 K and the clock offset off by 1 ms (standard
deviations, the defaults of the campaign file's ``analysis.uncertainty``). Every fourth pass is
flown over microphones on 1.2 m stands over grass whose flow resistivity the campaign file
states off by up to a factor 2 either way (log-uniform). Every band level the chain gives
(resolved regions and the total) is compared with the simulator's truth at 1 m; inside means
within its interval as stated (level - 1.645 u to level + 1.645 u + the positions' one-sided
bias). The benchmark prints the fraction inside, overall, per band, over raised microphones and
for the worst region and band (the target is 80-97 %, and no region-band under 70 %).

Run: ``python benchmarks/bench_uncertainty_coverage.py [n_passes]`` (about 8 minutes for 20).
"""

from __future__ import annotations

import copy
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from conftest import TINY_SCENARIO  # noqa: E402

from flyover.io.config import load_campaign  # noqa: E402
from flyover.io.results.levels import LEVELS  # noqa: E402
from flyover.pipeline import align, image, levels  # noqa: E402
from flyover.sim.demo import write_campaign  # noqa: E402

CAL_DB, CAL_SHARED_DB, POSITION_M, TEMPERATURE_K, CLOCK_S = 0.2, 0.15, 0.005, 0.5, 0.001
GRASS = {"surface": "soft", "flow_resistivity_pa_s_m2": 200e3}
FLOW_RESISTIVITY_FACTOR = 2.0
RAISED_EVERY = 4


def scenario(n_passes: int, rng) -> dict:
    s = copy.deepcopy(TINY_SCENARIO)
    s["recording"]["calibration_spread_db"] = 0.0
    base = s["passes"]["p1"]
    s["passes"] = {}
    for k in range(n_passes):
        s["passes"][f"p{k + 1:02d}"] = dict(
            base, duration_s=5.0, seed=100 + 7 * k, height_m=float(rng.uniform(25, 40)),
            speed_m_s=float(rng.uniform(16, 24)), heading_deg=float(rng.choice([90, 270])),
            recording_start_utc=f"2026-06-01T10:{k:02d}:00.000Z")
        if k % RAISED_EVERY == RAISED_EVERY - 1:
            s["passes"][f"p{k + 1:02d}"].update(mic_height_m=1.2, ground=dict(GRASS))
    s["campaign"]["analysis"]["max_polar_offset_deg"] = 60.0
    return s


def perturb_inputs(folder: Path, rng) -> None:
    """Make the inputs wrong by the stated standard uncertainties."""
    cal = {}
    for path in folder.glob("p*/calibration.csv"):
        t = pd.read_csv(path)
        t["pa_per_unit"] *= 10 ** ((rng.normal(0, CAL_DB, len(t))
                                    + rng.normal(0, CAL_SHARED_DB)) / 20)
        t.to_csv(path, index=False, float_format="%.9g")
        cal[path.parent.name] = t
    layout = pd.read_csv(folder / "layout.csv")
    metres_per_deg = 111_320.0
    layout["lat_deg"] += rng.normal(0, POSITION_M, len(layout)) / metres_per_deg
    layout["lon_deg"] += rng.normal(0, POSITION_M, len(layout)) / (
        metres_per_deg * np.cos(np.deg2rad(layout["lat_deg"])))
    layout["height_m"] += rng.normal(0, POSITION_M, len(layout))
    layout.to_csv(folder / "layout.csv", index=False, float_format="%.9f")
    data = yaml.safe_load((folder / "campaign.yaml").read_text())
    for p in data["passes"].values():
        p["atmosphere"]["temperature_c"] += float(rng.normal(0, TEMPERATURE_K))
        p["clock_offset_s"] += float(rng.normal(0, CLOCK_S))
        if "array" in p:
            p["array"]["ground"]["flow_resistivity_pa_s_m2"] = float(
                GRASS["flow_resistivity_pa_s_m2"]
                * FLOW_RESISTIVITY_FACTOR ** rng.uniform(-1.0, 1.0))
    (folder / "campaign.yaml").write_text(yaml.safe_dump(data))


def main(n_passes: int = 20) -> None:
    rng = np.random.default_rng(2026)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "scenario.yaml").write_text(yaml.safe_dump(scenario(n_passes, rng)))
        write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
        perturb_inputs(folder, rng)
        campaign = load_campaign(folder / "campaign.yaml")
        truth = pd.read_csv(folder / "truth.csv")
        rows = []
        t0 = time.perf_counter()
        for name in campaign.passes:
            out = folder / "results" / name
            align.run(campaign, name, out)
            image.run(campaign, name, out, quiet=True)
            levels.run(campaign, name, out)
            table = LEVELS.read(out)
            table = table[np.isfinite(table["level_1m_db"])]
            own = campaign.passes[name].array
            raised = own is not None and own.mounting == "raised"
            tp = truth[truth["pass"] == name].pivot_table(index="band_hz", columns="source",
                                                          values="level_1m_db")
            tp["total"] = 10 * np.log10((10 ** (tp / 10)).sum(axis=1))
            for _, r in table.iterrows():
                if r["band_hz"] in tp.index and r["region"] in tp.columns:
                    rows.append({"band_hz": r["band_hz"], "region": r["region"],
                                 "error_db": r["level_1m_db"] - tp.loc[r["band_hz"], r["region"]],
                                 "u_db": r["uncertainty_db"],
                                 "bias_db": r["position_bias_db"],
                                 "raised": raised})
        elapsed = time.perf_counter() - t0
    d = pd.DataFrame(rows)
    d["inside"] = ((d["error_db"] <= 1.6449 * d["u_db"])
                   & (-d["error_db"] <= 1.6449 * d["u_db"] + d["bias_db"]))
    print(f"{n_passes} simulated passes analysed in {elapsed:.0f} s; {len(d)} band levels")
    print(f"coverage of the stated 90 % intervals: {d['inside'].mean():.1%} "
          "(target 80-97 %)")
    print("per band: coverage, mean error (dB), mean stated uncertainty (dB)")
    for band, g in d.groupby("band_hz"):
        print(f"  {band:6.0f} Hz  {g['inside'].mean():6.1%}  {g['error_db'].mean():+6.2f}  "
              f"{g['u_db'].mean():5.2f}  ({len(g)} levels)")
    for region, g in d.groupby("region"):
        print(f"  {region:>6}: {g['inside'].mean():6.1%} of {len(g)}")
    for raised, g in d.groupby("raised"):
        print(f"  {'raised over grass' if raised else 'ground plates':>18}: "
              f"{g['inside'].mean():6.1%} of {len(g)}")
    worst = d.groupby(["region", "band_hz"])["inside"].agg(["mean", "size"])
    worst = worst[worst["size"] >= 10].sort_values("mean").iloc[0]
    print(f"worst region-band (10 levels or more): {worst.name[0]} {worst.name[1]:g} Hz, "
          f"{worst['mean']:.1%} of {int(worst['size'])} (goal: not below 70 %)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 20)
