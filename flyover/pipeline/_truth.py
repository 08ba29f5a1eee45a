"""A simulated campaign's measured levels against the truth of its scenario
(:mod:`flyover.sim.truth`): per pass, window, region and band, the measured level at 1 m minus
the true one, and whether the level's 90 % interval holds the truth."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.campaign import Campaign
from flyover.io.results.comparison import FOLDER, MEASURED_MINUS_TRUE, TRUTH_FOLDER
from flyover.io.results.levels import LEVELS
from flyover.io.results.signoff import SIGNOFF, signoff_statuses
from flyover.model.errors import FlyoverInputError
from flyover.sim.scenario_file import load_scenario
from flyover.sim.truth import region_sources, true_levels_db


def measured_minus_true(campaign: Campaign, results, scenario_path) -> pd.DataFrame:
    """The measured-minus-true table of every pass the scenario simulated (rejected passes
    left out) whose levels are given."""
    scenario = load_scenario(scenario_path)[0]
    simulated = {p.name for p in scenario.passes}
    missing = [n for n in campaign.passes if n not in simulated]
    if missing:
        raise FlyoverInputError("passes the scenario did not simulate", str(scenario_path),
                                "every pass of the campaign", "no " + ", ".join(missing))
    out = Path(results)
    statuses = signoff_statuses(out) if SIGNOFF.path(out).exists() else {}
    inside = region_sources(scenario, campaign.regions)
    frames = []
    for name, spec in campaign.passes.items():
        if statuses.get(name) == "rejected":
            continue
        levels = LEVELS.read(out / name)
        levels = levels[np.isfinite(levels["level_1m_db"].astype(float))]
        true = true_levels_db(scenario, name, levels, campaign.regions)
        measured = levels["level_1m_db"].to_numpy(float)
        to_1m = measured - levels["level_db"].to_numpy(float)
        low = levels["ci90_low_db"].to_numpy(float) + to_1m - true
        high = levels["ci90_high_db"].to_numpy(float) + to_1m - true
        frames.append(pd.DataFrame({
            "pass": name, "label": spec.label, "window": levels["window"].to_numpy(),
            "polar_angle_deg": levels["polar_angle_deg"].to_numpy(float),
            "region": levels["region"].to_numpy(), "band_hz": levels["band_hz"].to_numpy(float),
            "sources": [" ".join(inside.get(r, [])) for r in levels["region"]],
            "measured_1m_db": measured, "true_1m_db": true, "difference_db": measured - true,
            "ci90_low_db": low, "ci90_high_db": high, "within_interval": (low <= 0) & (high >= 0),
            "resolved": levels["resolved"].to_numpy(bool)}))
    table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
        columns=MEASURED_MINUS_TRUE.column_names)
    # A region without a simulated source has no truth to be measured against.
    return table[np.isfinite(table["true_1m_db"].astype(float))].reset_index(drop=True)


def truth_summary(table: pd.DataFrame) -> dict:
    """Over the resolved levels: how many, the mean and spread of measured minus true, and
    the share whose 90 % interval holds the truth."""
    resolved = table[table["resolved"].astype(bool)]
    d = resolved["difference_db"].to_numpy(float)
    return {"n": len(d), "mean_db": float(np.mean(d)) if len(d) else float("nan"),
            "std_db": float(np.std(d, ddof=1)) if len(d) > 1 else float("nan"),
            "within": float(np.mean(resolved["within_interval"].astype(bool)))
            if len(d) else float("nan")}


def write_truth_comparison(campaign: Campaign, results, scenario_path) -> Path:
    """Write the table into ``results/comparisons/truth/``; its path is returned."""
    table = measured_minus_true(campaign, results, scenario_path)
    return MEASURED_MINUS_TRUE.write(Path(results) / FOLDER / TRUTH_FOLDER, table)
