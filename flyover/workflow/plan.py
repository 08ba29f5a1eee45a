"""What the Snakefile needs to know about a campaign: targets, inputs and re-run fingerprints.

No physics here. Each stage's rule carries, as a Snakemake param, a fingerprint of exactly the
campaign values that stage reads (declared beside the stage's code as ``READS`` and enforced
when it runs, :mod:`flyover.model.reads`) plus a digest of the package code, so that editing
one pass's atmosphere re-runs that pass only, and editing flyover re-runs what it computes.
"""

from __future__ import annotations

import hashlib
import importlib
import json
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from flyover.io.config import load_campaign
from flyover.model.campaign import Campaign
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import read_values
from flyover.sim.demo import pass_files


@lru_cache(maxsize=1)
def package_digest() -> str:
    """SHA-256 over the package's Python sources and schemas (sorted by path)."""
    root = Path(__file__).resolve().parents[1]
    h = hashlib.sha256()
    for path in sorted(list(root.rglob("*.py")) + list(root.rglob("*.json"))):
        h.update(str(path.relative_to(root)).encode())
        h.update(path.read_bytes())
    return h.hexdigest()[:16]


@dataclass
class CampaignPlan:
    """A loaded campaign seen from the workflow."""

    path: Path
    campaign: Campaign

    @classmethod
    def load(cls, path) -> "CampaignPlan":
        path = Path(path).resolve()
        plan = cls(path, load_campaign(path))
        if plan.simulation_folder is not None:
            plan.simulated_files()  # refuses a simulated campaign whose paths do not match
        return plan

    @property
    def output(self) -> str:
        return str(self.campaign.output)

    @property
    def passes(self) -> list[str]:
        return list(self.campaign.passes)

    @property
    def simulation_folder(self) -> Path | None:
        """Where the demo's simulated files go: the layout file's folder."""
        return self.campaign.array.layout.parent if self.campaign.scenario else None

    def simulated_files(self) -> list[str]:
        """Every file the simulation writes, checked against the paths the campaign names."""
        folder = self.simulation_folder
        files = [folder / "layout.csv", folder / "truth.csv"]
        for name, spec in self.campaign.passes.items():
            expected = pass_files(folder, name, spec.recording.suffix.lstrip("."))
            named = {"recording": spec.recording, "calibration": spec.calibration,
                     "track": spec.track}
            for key, p in expected.items():
                if Path(named[key]) != p:
                    raise FlyoverInputError(
                        "a simulated campaign's files are where the simulator writes them",
                        f"{self.path}, key passes.{name}.{key}", f"{p}", f"{named[key]}",
                        "drop the 'scenario' key to use files of your own")
            files += list(expected.values())
        return [str(f) for f in files]

    def pass_inputs(self, name: str) -> dict[str, str]:
        spec = self.campaign.passes[name]
        return {"recording": str(spec.recording), "calibration": str(spec.calibration),
                "track": str(spec.track), "layout": str(self.campaign.array.layout)}

    def input_files(self) -> list[str]:
        """Every input file but the campaign file: its content reaches the rules through the
        fingerprints, and its name must not matter."""
        return [str(p) for p in self.campaign.input_files() if p != self.campaign.config_path]

    def campaign_fingerprint(self, stage: str) -> str:
        """Fingerprint of a campaign-level stage (``summary`` or ``report``)."""
        return self._fingerprint(stage, None)

    def fingerprint(self, name: str, stage: str) -> str:
        """Fingerprint of a per-pass stage: the values it reads of the campaign, and the code."""
        return self._fingerprint(stage, name)

    def _fingerprint(self, stage: str, pass_name: str | None) -> str:
        reads = importlib.import_module(f"flyover.pipeline.{stage}").READS
        picked = read_values(self.campaign, reads, pass_name)
        picked["code"] = package_digest()
        return json.dumps(picked, sort_keys=True, default=str)

    def pass_results(self, files) -> list[str]:
        return [f"{self.output}/{p}/{f}" for p in self.passes for f in files]

    def targets(self) -> list[str]:
        return [f"{self.output}/report.html", f"{self.output}/campaign_levels.csv"]


