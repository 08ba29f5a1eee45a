"""How the campaign steps grow with the number of passes: time, peak memory and output size of
signoff, summary, hemispheres, compare, store, viewer and report for campaigns of N passes.

One small pass is simulated (16 microphones, 8 kHz, 3 s) and run through every pass step (their
times printed too); a campaign of N passes is then made cheaply by giving every pass the same
input files and a hard-linked copy of those results, under four labels, and each campaign step
runs in its own process. Asserts nothing.

Run:  python benchmarks/bench_campaign_steps.py [--passes 10 30 100]
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from _measure import (measured_campaign_stage, measured_stage, measured_startup,  # noqa: E402
                      measured_warm_stage)

from flyover.io.results.steps import PASS_STEPS  # noqa: E402  (in dependency order)
from flyover.workflow.warm_start import WarmProcess  # noqa: E402

LABELS = ("cruise-a", "cruise-b", "climb", "descent")
CAMPAIGN_STEPS = ("signoff", "summary", "hemispheres", "compare", "store", "viewer", "report")
SCENARIO = {
    "name": "campaign-step benchmark",
    "site": {"origin_lat_deg": 46.0, "origin_lon_deg": 7.0, "origin_height_m": 500.0},
    "array": {"arms": 4, "per_arm": 4, "r_min_m": 0.5, "r_max_m": 4.0, "mounting": "ground-plate"},
    "recording": {"sample_rate_hz": 8000, "subtype": "FLOAT", "noise_spl_db": 30,
                  "pa_per_unit": 20.0, "calibration_spread_db": 0.2},
    "gnss": {"rate_hz": 10, "noise_m": 0.02},
    "sources": [
        {"name": "nose", "body_m": [1.0, 0.0, 0.0], "seed": 5,
         "tones": [{"frequency_hz": 400.0, "level_db": 95.0}],
         "broadband": {"level_1khz_db": 80.0, "min_hz": 100, "max_hz": 3000}},
        {"name": "tail", "body_m": [-1.0, 0.0, 0.0], "seed": 6,
         "broadband": {"level_1khz_db": 78.0, "min_hz": 100, "max_hz": 3000}}],
    "passes": {"one": {"label": LABELS[0], "speed_m_s": 20.0, "height_m": 30.0,
                       "heading_deg": 90.0, "duration_s": 3.0,
                       "recording_start_utc": "2026-06-01T10:00:00.000Z",
                       "clock_offset_s": 0.1,
                       "atmosphere": {"temperature_c": 15.0, "relative_humidity_pct": 70.0}}},
    "campaign": {
        "vehicle": {"grid": {"x_m": [-2.0, 2.0], "y_m": [-1.0, 1.0], "spacing_m": 0.5},
                    "regions": {"nose": {"x_m": [0.5, 1.5], "y_m": [-0.5, 0.5]},
                                "tail": {"x_m": [-1.5, -0.5], "y_m": [-0.5, 0.5]}}},
        "analysis": {"window_s": 0.25, "hop_s": 0.25, "band_min_hz": 200, "band_max_hz": 800,
                     "reference_distance_m": 50.0,
                     "reference_atmosphere": {"temperature_c": 25.0,
                                              "relative_humidity_pct": 70.0}},
        "output": "results"},
}


def one_pass(folder: Path) -> Path:
    """The simulated pass run through every pass step; its results folder."""
    from flyover.sim.demo import write_campaign
    (folder / "scenario.yaml").write_text(yaml.safe_dump(SCENARIO))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    out = folder / "results" / "one"
    total = warm_total = 0.0
    warm = WarmProcess()
    warm.start(folder / "warm-logs", max_threads=2)
    try:
        for step in PASS_STEPS:
            wall, mb = measured_stage(step, folder / "campaign.yaml", "one", out)
            start = measured_startup(step, folder / "campaign.yaml")
            served = measured_warm_stage(step, folder / "campaign.yaml", "one", out)
            total += wall
            warm_total += served
            print(f"pass step {step:11s} {wall:6.2f} s  peak {mb:5.0f} MB  start-up {start:4.2f} s "
                  f"(interpreter, imports, campaign file)  warm {served:5.2f} s")
    finally:
        warm.stop()
    print(f"pass steps together {total:.1f} s (each a process of its own), {warm_total:.1f} s "
          "served warm as a workflow on this machine runs them")
    return out


def campaign_of(folder: Path, one: Path, n: int) -> Path:
    """A campaign of n copies of the pass (same inputs, hard-linked results) under LABELS."""
    data = yaml.safe_load((folder / "campaign.yaml").read_text())
    spec = data["passes"]["one"]
    names = [f"p{k:03d}" for k in range(n)]
    data["passes"] = {name: dict(spec, label=LABELS[k % len(LABELS)])
                      for k, name in enumerate(names)}
    data["analysis"]["comparisons"] = [[LABELS[0], LABELS[1]]]
    data["output"] = f"results-{n}"
    path = folder / f"campaign-{n}.yaml"
    path.write_text(yaml.safe_dump(data))
    for name in names:
        shutil.copytree(one, folder / f"results-{n}" / name, copy_function=os.link)
    return path


def size_mb(path: Path) -> float:
    files = [path] if path.is_file() else [p for p in path.rglob("*") if p.is_file()]
    return sum(p.stat().st_size for p in files) / 1e6


def main(counts) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        one = one_pass(folder)
        print(f"\n{'passes':>6}  {'step':11s} {'time s':>7} {'peak MB':>8} {'output MB':>9}")
        for n in counts:
            campaign = campaign_of(folder, one, n)
            out = folder / f"results-{n}"
            outputs = {"signoff": out / "signoff.csv", "summary": out / "campaign_levels.csv",
                       "hemispheres": out / "hemispheres", "compare": out / "comparisons",
                       "store": out / "store", "viewer": out / "viewer.html",
                       "report": out / "report.html"}
            for step in CAMPAIGN_STEPS:
                wall, mb = measured_campaign_stage(step, campaign)
                print(f"{n:6d}  {step:11s} {wall:7.2f} {mb:8.0f} {size_mb(outputs[step]):9.2f}")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--passes", type=int, nargs="+", default=[10, 30, 100])
    main(ap.parse_args().passes)
