"""Run one flyover stage in its own process and report its wall time and peak memory."""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

# VmHWM starts afresh at exec; ru_maxrss would carry the forking parent's size across it.
PROBE = ("import sys; from flyover.cli import main; rc = main(sys.argv[1:]); "
         "hwm = [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0]; "
         "print('peak_kb', hwm.split()[1]); sys.exit(rc)")


def measured_stage(name: str, campaign: Path, pass_name: str, out: Path,
                   threads: int = 2) -> tuple[float, float]:
    """(wall time in s, peak resident memory in MB) of `flyover stage NAME` for one pass."""
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-c", PROBE, "stage", name, "--campaign", str(campaign),
                          "--pass", pass_name, "--out", str(out), "--threads", str(threads)],
                         capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise SystemExit(res.stderr[-3000:])
    peak = [int(line.split()[1]) for line in res.stdout.splitlines() if line.startswith("peak_kb")]
    return time.perf_counter() - t0, peak[-1] / 1024


def measured_campaign_stage(name: str, campaign: Path) -> tuple[float, float]:
    """(wall time in s, peak resident memory in MB) of `flyover stage-campaign NAME`."""
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-c", PROBE, "stage-campaign", name, "--campaign",
                          str(campaign)], capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise SystemExit(res.stderr[-3000:])
    peak = [int(line.split()[1]) for line in res.stdout.splitlines() if line.startswith("peak_kb")]
    return time.perf_counter() - t0, peak[-1] / 1024
