"""One outside-sized pass through the whole workflow: wall time, and the split per step.

The demo's pass-1 (48 microphones, 25.6 kHz, 16.5 s, an autopilot log; or another demo pass with
``--pass``: pass-7 stands on raised microphones, pass-5 is its ground-plate twin) is simulated
alone, then
analysed as an outside campaign would be: a 61 x 51 grid at 0.1 m, windows of 0.5 s
(12800 samples) every 5.5 deg of polar angle (29 windows), the headline method only. Snakemake
runs every step, the campaign's report included, on the cores given; its own timing files give
each job's wall time. The simulation is not timed. Asserts nothing.

Run:  python benchmarks/bench_whole_pass.py [--cores 2] [--pass pass-1] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from flyover.sim.demo import write_campaign  # noqa: E402

def outside_campaign(folder: Path, name: str) -> Path:
    """The demo's pass ``name`` simulated into ``folder`` with an outside campaign's
    analysis."""
    scenario = yaml.safe_load((ROOT / "demo" / "scenario.yaml").read_text())
    scenario["passes"] = {name: scenario["passes"][name]}
    (folder / "data").mkdir(parents=True)
    (folder / "data" / "scenario.yaml").write_text(yaml.safe_dump(scenario))
    write_campaign(folder / "data" / "scenario.yaml", folder / "data",
                   progress=lambda *_: None, workers=1)
    campaign = yaml.safe_load((ROOT / "demo" / "campaign.yaml").read_text())
    campaign["passes"] = {name: campaign["passes"][name]}
    campaign["passes"][name].pop("other_methods", None)     # the headline method alone
    campaign.pop("scenario", None)
    campaign["vehicle"]["grid"] = {"x_m": [-3.0, 3.0], "y_m": [-2.5, 2.5], "spacing_m": 0.1}
    an = campaign["analysis"]
    an.update(window_s=0.5, window_polar_step_deg=5.5, other_methods=[])
    an.pop("comparisons", None)
    path = folder / "campaign.yaml"
    path.write_text(yaml.safe_dump(campaign, sort_keys=False))
    return path


def step_times(results: Path) -> pd.DataFrame:
    """Each job's wall time from the workflow's timing files (their memory is a served job's
    hand-over alone, not its step's: not printed; see warm_start's notes)."""
    rows = []
    for tsv in sorted((results / "benchmarks").rglob("*.tsv")):
        t = pd.read_csv(tsv, sep="\t")
        rows.append({"step": tsv.stem, "wall_s": float(t["s"].iloc[-1])})
    return pd.DataFrame(rows).sort_values("wall_s", ascending=False)


def served_warm(results: Path) -> int:
    """How many jobs ran in a fork of the warm process (flyover.workflow.warm_start)."""
    log = results / "logs" / "warm-start.log"
    return len(log.read_text().splitlines()) if log.exists() else 0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--pass", dest="pass_name", default="pass-1",
                        help="the demo pass to take (default pass-1)")
    parser.add_argument("--keep", type=Path, help="work in this folder and keep it")
    args = parser.parse_args()
    folder = args.keep or Path(tempfile.mkdtemp(prefix="flyover whole pass "))
    try:
        campaign = outside_campaign(folder, args.pass_name)
        env = dict(os.environ, PYTHONPATH=str(ROOT))
        t0 = time.perf_counter()
        res = subprocess.run([sys.executable, "-m", "snakemake", "--snakefile",
                              str(ROOT / "Snakefile"), "--configfile", str(campaign),
                              "--cores", str(args.cores)], cwd=folder, env=env,
                             capture_output=True, text=True)
        wall = time.perf_counter() - t0
        if res.returncode != 0:
            raise SystemExit(res.stderr[-3000:])
        steps = step_times(folder / "results")
        windows = pd.read_csv(folder / "results" / args.pass_name / "windows.csv")
        print(f"one outside-sized pass, demo {args.pass_name} "
              f"({(windows['status'] == 'analysed').sum()} windows of "
              f"0.5 s, 61 x 51 points, 48 microphones) through {len(steps)} jobs on "
              f"{args.cores} cores: {wall:.1f} s of wall time")
        print(f"{served_warm(folder / 'results')} of the jobs served by the warm process; "
              f"jobs' summed wall time {steps['wall_s'].sum():.1f} s; per step:")
        print(steps.to_string(index=False, float_format=lambda v: f"{v:.1f}"))
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
