"""Shared fixtures: a tiny simulated campaign written to a temporary folder."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

TINY_SCENARIO = {
    "name": "tiny test campaign",
    "site": {"origin_lat_deg": 47.0, "origin_lon_deg": 8.0, "origin_height_m": 400.0},
    "array": {"arms": 4, "per_arm": 4, "r_min_m": 0.5, "r_max_m": 4.0, "mounting": "ground-plate"},
    "recording": {"sample_rate_hz": 8000, "subtype": "FLOAT", "noise_spl_db": 30,
                  "pa_per_unit": 20.0, "calibration_spread_db": 0.2},
    "gnss": {"rate_hz": 10, "noise_m": 0.02},
    "sources": [
        {"name": "front", "body_m": [1.0, 0.0, 0.0], "seed": 5,
         "tones": [{"frequency_hz": 400.0, "level_db": 95.0}],
         "broadband": {"level_1khz_db": 80.0, "min_hz": 100, "max_hz": 3000}},
        {"name": "rear", "body_m": [-1.0, 0.0, 0.0], "seed": 6,
         "broadband": {"level_1khz_db": 78.0, "min_hz": 100, "max_hz": 3000}},
    ],
    "passes": {
        "p1": {"label": "a", "speed_m_s": 20.0, "height_m": 30.0, "heading_deg": 90.0,
               "duration_s": 3.0, "recording_start_utc": "2026-06-01T10:00:00.000Z",
               "clock_offset_s": 0.1,
               "atmosphere": {"temperature_c": 15.0, "relative_humidity_pct": 70.0}},
        "p2": {"label": "a", "speed_m_s": 20.0, "height_m": 30.0, "heading_deg": 270.0,
               "duration_s": 3.0, "recording_start_utc": "2026-06-01T10:05:00.000Z",
               "clock_offset_s": 0.2,
               "atmosphere": {"temperature_c": 15.0, "relative_humidity_pct": 70.0}},
    },
    "campaign": {
        "vehicle": {"grid": {"x_m": [-2.0, 2.0], "y_m": [-1.0, 1.0], "spacing_m": 0.5},
                    "regions": {"front": {"x_m": [0.5, 1.5], "y_m": [-0.5, 0.5]},
                                "rear": {"x_m": [-1.5, -0.5], "y_m": [-0.5, 0.5]}}},
        "analysis": {"window_s": 0.25, "hop_s": 0.25, "band_min_hz": 200,
                     "band_max_hz": 800, "reference_distance_m": 50.0,
                     "reference_atmosphere": {"temperature_c": 25.0,
                                              "relative_humidity_pct": 70.0}},
        "output": "results",
    },
}


ROOT = Path(__file__).resolve().parents[1]


def snakemake_command(*args) -> list[str]:
    return [sys.executable, "-m", "snakemake", "--snakefile", str(ROOT / "Snakefile"),
            "--cores", "2", *args]


def snakemake(*args, cwd):
    return subprocess.run(snakemake_command(*args), cwd=cwd, capture_output=True, text=True)


def planned(folder) -> set[tuple[str, str]]:
    """(rule, pass) pairs a dry-run of the workflow would execute."""
    from flyover.workflow.dryrun import parse_dry_run
    res = snakemake("--configfile", str(folder / "campaign.yaml"), "-n", cwd=folder)
    assert res.returncode == 0, res.stderr
    return {(j["rule"], j["pass"]) for j in parse_dry_run(res.stdout + res.stderr)
            if j["rule"] != "campaign"}


def edit_campaign(folder: Path, change) -> Path:
    """Apply ``change`` to the parsed campaign.yaml of a folder and write it back."""
    path = folder / "campaign.yaml"
    data = yaml.safe_load(path.read_text())
    change(data)
    path.write_text(yaml.safe_dump(data))
    return path


@pytest.fixture(scope="session")
def tiny_campaign_dir(tmp_path_factory) -> Path:
    """A simulated two-pass campaign (16 microphones, 8 kHz, 3 s) with its campaign.yaml."""
    from flyover.sim.demo import write_campaign
    folder = tmp_path_factory.mktemp("tiny")
    (folder / "scenario.yaml").write_text(yaml.safe_dump(TINY_SCENARIO))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    return folder


@pytest.fixture
def tiny_copy(tiny_campaign_dir, tmp_path) -> Path:
    """A private copy of the tiny campaign that a test may damage."""
    dest = tmp_path / "campaign"
    shutil.copytree(tiny_campaign_dir, dest)
    return dest


def assert_same_maps(got, ref, points, sources) -> None:
    """Two chains' band powers of one window: the full maps within 1e-3 of each band's peak,
    the diagonal-removed ones within 1 %, and the sum within 0.8 m of each source within
    0.05 dB."""
    import numpy as np
    peak = ref.full.max(axis=0)
    assert np.all(np.abs(got.full - ref.full) <= 1e-3 * peak)
    assert np.all(np.abs(got.diagonal_removed - ref.diagonal_removed) <= 0.01 * peak)
    for src in sources:
        near = np.hypot(*(points[:, :2] - np.asarray(src.body_m)[:2]).T) < 0.8
        change = 10 * np.log10(got.diagonal_removed[near].sum(0)
                               / ref.diagonal_removed[near].sum(0))
        assert np.all(np.abs(change) < 0.05), change
