"""Stage: the label comparisons the campaign asks for (``analysis.comparisons``), each B minus A
per region, band and polar bin and for the overall levels (:mod:`flyover.pipeline._compare`)."""

from __future__ import annotations

from pathlib import Path

from flyover.campaign import Campaign
from flyover.model.reads import guarded
from flyover.pipeline._compare import label_side, write_comparison

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("passes", "analysis.comparisons", "analysis.uncertainty")


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write ``comparisons/A--B/`` for every pair of ``analysis.comparisons``."""
    campaign = guarded(campaign, READS, stage="compare")
    for label_a, label_b in campaign.analysis.comparisons:
        write_comparison(out_dir, label_side(campaign, label_a, out_dir),
                         label_side(campaign, label_b, out_dir))
