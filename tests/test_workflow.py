"""The real Snakemake on a tiny campaign (slow: each call costs seconds)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def snakemake(*args, cwd):
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(ROOT / "Snakefile"),
           "--cores", "2", *args]
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)


@pytest.mark.slow
def test_user_campaign_runs_alone(tiny_copy):
    # --configfile selects the user's campaign; the demo's passes must not appear.
    res = snakemake("--configfile", str(tiny_copy / "campaign.yaml"), "-n", cwd=tiny_copy)
    assert res.returncode == 0, res.stderr
    text = res.stdout + res.stderr
    assert "p1" in text and "p2" in text
    assert "pass-1" not in text and "simulate_demo" not in text
    res = snakemake("--configfile", str(tiny_copy / "campaign.yaml"), cwd=tiny_copy)
    assert res.returncode == 0, res.stderr
    for p in ("p1", "p2"):
        assert (tiny_copy / "results" / p / "alignment.json").exists()
        assert (tiny_copy / "results" / p / "track.png").exists()
        assert (tiny_copy / "results" / "logs" / p / "align.log").exists()
    again = snakemake("--configfile", str(tiny_copy / "campaign.yaml"), "-n", cwd=tiny_copy)
    assert "Nothing to be done" in again.stdout + again.stderr


@pytest.mark.slow
def test_bad_campaign_stops_with_message(tiny_copy):
    path = tiny_copy / "campaign.yaml"
    path.write_text(path.read_text().replace("window_s", "windowsize_s"))
    res = snakemake("--configfile", str(path), "-n", cwd=tiny_copy)
    assert res.returncode != 0
    assert "unknown key 'analysis.windowsize_s'" in res.stderr
