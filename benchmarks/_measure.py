"""Run one flyover stage in its own process and report its wall time and peak memory."""

from __future__ import annotations

import os
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


def measured_warm_stage(name: str, campaign: Path, pass_name: str, out: Path,
                        threads: int = 2) -> float:
    """Wall time (s) of `flyover stage NAME` for one pass as a workflow job on this machine runs
    it: served by a warm process (flyover.workflow.warm_start), which must be started."""
    from flyover.workflow.warm_start import SOCKET_ENV
    if not os.environ.get(SOCKET_ENV):
        raise SystemExit("start a WarmProcess first")
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-m", "flyover", "stage", name, "--campaign",
                          str(campaign), "--pass", pass_name, "--out", str(out), "--threads",
                          str(threads)], capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise SystemExit(res.stderr[-3000:])
    return time.perf_counter() - t0


# What a step costs before its own work: the interpreter, the package's imports for the step,
# and reading the campaign file.
STARTUP = ("import sys; from flyover.pipeline import stage_module; "
           "from flyover.io.config import load_campaign; "
           "stage_module(sys.argv[1], sys.argv[2]); load_campaign(sys.argv[3])")


def measured_startup(name: str, campaign: Path, scope: str = "pass") -> float:
    """Wall time (s) of a process that starts a step (imports it, reads the campaign file)
    and does nothing else."""
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-c", STARTUP, name, scope, str(campaign)],
                         capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise SystemExit(res.stderr[-3000:])
    return time.perf_counter() - t0
