"""Stage: the campaign into the columnar store (:mod:`flyover.io.results.store`): every pass's
levels, overall levels and single-event metrics, with its pass and label, and the sign-off, as
Parquet files in the campaign's folder of the store, its provenance beside them."""

from __future__ import annotations

import platform
from pathlib import Path

import pandas as pd

from flyover import __version__
from flyover.campaign import Campaign
from flyover.io.digest import file_digest
from flyover.io.results import store
from flyover.io.results.event_metrics import EVENT_METRICS
from flyover.io.results.levels import LEVELS
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.io.results.signoff import SIGNOFF
from flyover.model.reads import guarded

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("passes", "store", "config_path", "analysis.uncertainty.calibration_shared_db",
         "analysis.reference_distance_m", "analysis.reference_atmosphere")

# Per-pass result files and the store's table of each.
PASS_TABLES = {"levels": LEVELS, "overall": LEVELS_OVERALL, "metrics": EVENT_METRICS}


def provenance(campaign: Campaign) -> dict:
    """What the stored rows were made from and with (no time stamp: a re-run from the same
    inputs writes the same bytes)."""
    a = campaign.analysis
    atmosphere = a.reference_atmosphere
    return {"campaign": campaign.store.name,
            "campaign_file": campaign.config_path.name,
            "campaign_file_sha256": file_digest(campaign.config_path),
            "flyover_version": __version__, "python_version": platform.python_version(),
            "calibration_shared_db": a.uncertainty.calibration_shared_db,
            "reference_distance_m": a.reference_distance_m,
            "reference_atmosphere": f"{atmosphere.temperature_c:g} degC, "
                                    f"{atmosphere.relative_humidity_pct:g} %RH, "
                                    f"{atmosphere.pressure_kpa:g} kPa"}


def campaign_tables(campaign: Campaign, out_dir: Path) -> dict[str, pd.DataFrame]:
    """The store's tables of a campaign from its results folder."""
    out = Path(out_dir)
    tables = {}
    for table, result in PASS_TABLES.items():
        frames = [result.read(out / name).assign(**{"pass": name, "label": spec.label})
                  for name, spec in campaign.passes.items()]
        tables[table] = pd.concat(frames, ignore_index=True)
    tables["signoff"] = SIGNOFF.read(out)
    return tables


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write the campaign's folder of the store."""
    campaign = guarded(campaign, READS, stage="store")
    store.write_campaign(campaign.store.folder, campaign.store.name,
                         campaign_tables(campaign, out_dir), provenance(campaign))
