"""The quick look after each pass: its wall time (a process of its own, as on the field) and its
verdict beside the full sign-off's, on every pass of the demo campaign.

Needs the demo run once (its data and signoff.csv: `flyover run demo/campaign.yaml`). The quick
looks are written to a temporary folder, never into the demo's results.

Run:  python benchmarks/bench_quick_look.py [--passes pass-1 pass-3]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo" / "campaign.yaml"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--passes", nargs="*", help="demo passes (default: all)")
    args = parser.parse_args()
    signed = pd.read_csv(ROOT / "demo" / "results" / "signoff.csv").set_index("pass")
    names = args.passes or list(signed.index)
    print(f"{'pass':8} {'wall s':>7} {'quick look':>11} {'sign-off':>9}  agree")
    agree = 0
    with tempfile.TemporaryDirectory() as tmp:
        for name in names:
            out = Path(tmp) / name
            t0 = time.perf_counter()
            res = subprocess.run([sys.executable, "-m", "flyover", "quick-look", str(DEMO), name,
                                  "--out", str(out)], capture_output=True, text=True, cwd=ROOT)
            wall = time.perf_counter() - t0
            if res.returncode != 0:
                raise SystemExit(res.stderr[-3000:])
            look = json.loads((out / "quick-look.json").read_text())
            full = signed.loc[name, "status"]
            agree += look["status"] == full
            print(f"{name:8} {wall:7.1f} {look['status']:>11} {full:>9}  "
                  f"{'yes' if look['status'] == full else 'NO'}")
    print(f"verdicts agree on {agree} of {len(names)} passes")


if __name__ == "__main__":
    main()
