"""What the Snakefile needs to know about a campaign: targets, inputs and rerun fingerprints.

No physics here. Each stage's rule carries, as a Snakemake param, a fingerprint of exactly the
config values that stage uses plus a digest of the package code, so that editing one pass's
atmosphere re-runs that pass only, and editing flyover re-runs what it computes.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from .campaign import Campaign
from .errors import FlyoverInputError
from .io.config import campaign_from_mapping, read_yaml
from .stages.simulate import pass_files


@lru_cache(maxsize=1)
def package_digest() -> str:
    """SHA-256 over the package's Python sources and schemas (sorted by path)."""
    root = Path(__file__).resolve().parent
    h = hashlib.sha256()
    for path in sorted(list(root.rglob("*.py")) + list(root.rglob("*.json"))):
        h.update(str(path.relative_to(root)).encode())
        h.update(path.read_bytes())
    return h.hexdigest()[:16]


# The config values each stage reads, as dotted paths ("pass" is the stage's own pass entry).
# Keep these in step with the stage code: they decide what a config edit re-runs.
_REFERENCE = ("analysis.reference_distance_m", "analysis.reference_atmosphere")
_STAGE_KEYS = {
    "align": ("site", "array", "atmosphere", "pass"),
    "image": ("site", "array", "atmosphere", "pass", "vehicle", "analysis.window_s",
              "analysis.hop_s", "analysis.band_min_hz", "analysis.band_max_hz",
              "analysis.interpolation", "analysis.diagonal_removal",
              "analysis.max_polar_offset_deg", "analysis.map_dynamic_range_db"),
    "levels": ("vehicle.regions", "analysis.spectra_polar_deg") + _REFERENCE,
    "qc": ("site", "array", "atmosphere", "pass", "vehicle.regions", "analysis.band_min_hz",
           "analysis.band_max_hz"),
}


def _pick(mapping: dict, dotted: str):
    node = mapping
    for part in dotted.split("."):
        if not isinstance(node, dict) or part not in node:
            return None
        node = node[part]
    return node


@dataclass
class CampaignPlan:
    """A loaded campaign seen from the workflow."""

    path: Path
    mapping: dict
    campaign: Campaign

    @classmethod
    def load(cls, path) -> "CampaignPlan":
        path = Path(path).resolve()
        mapping = read_yaml(path)
        plan = cls(path, mapping, campaign_from_mapping(mapping, path))
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

    def campaign_fingerprint(self, stage: str) -> str:
        """Fingerprint of a campaign-level stage: labels for the summary, all for the report."""
        if stage == "summary":
            picked = {"labels": {n: p.get("label", "") for n, p in self.mapping["passes"].items()}}
        else:
            picked = {"config": self.mapping}
        picked["code"] = package_digest()
        return json.dumps(picked, sort_keys=True, default=str)

    def fingerprint(self, name: str, stage: str) -> str:
        """The config values a stage uses for one pass, and the code digest, as JSON text."""
        # A pass's label only groups passes in the summary: it changes no per-pass result.
        own = {k: v for k, v in self.mapping["passes"][name].items() if k != "label"}
        picked = {k: (own if k == "pass" else _pick(self.mapping, k)) for k in _STAGE_KEYS[stage]}
        picked["code"] = package_digest()
        return json.dumps(picked, sort_keys=True, default=str)

    def pass_results(self, files) -> list[str]:
        return [f"{self.output}/{p}/{f}" for p in self.passes for f in files]

    def targets(self) -> list[str]:
        return [f"{self.output}/report.html", f"{self.output}/campaign_levels.csv"]


def parse_dry_run(text: str) -> list[dict]:
    """Jobs of a ``snakemake --dry-run --reason`` listing: rule, pass (if any) and reason."""
    jobs, job = [], None
    for line in text.splitlines():
        stripped = line.strip()
        # Grouped jobs are indented under their group: look at the stripped line.
        if stripped.split(" ")[0] in ("rule", "localrule") and stripped.endswith(":"):
            job = {"rule": stripped.split()[1].rstrip(":"), "pass": "", "reason": ""}
            jobs.append(job)
        elif job is not None and stripped.startswith("reason:"):
            job["reason"] = stripped[len("reason:"):].strip()
        elif job is not None and stripped.startswith("wildcards:"):
            for part in stripped[len("wildcards:"):].split(","):
                key, _, value = part.strip().partition("=")
                if key == "pass_name":
                    job["pass"] = value
    return [j for j in jobs if j["rule"] != "all"]


def format_plan(jobs: list[dict]) -> str:
    """Readable text of a dry run: per pass the steps to redo and why, then campaign steps."""
    if not jobs:
        return "nothing to redo: every result is up to date"
    lines = [f"{len(jobs)} step(s) to run:"]
    passes = sorted({j["pass"] for j in jobs if j["pass"]})
    for p in passes:
        lines.append(f"  pass {p}:")
        for j in (j for j in jobs if j["pass"] == p):
            lines.append(f"    {j['rule']:<16} {_short_reason(j['reason'])}")
    rest = [j for j in jobs if not j["pass"]]
    if rest:
        lines.append("  campaign:")
        for j in rest:
            lines.append(f"    {j['rule']:<16} {_short_reason(j['reason'])}")
    return "\n".join(lines)


def _short_reason(reason: str) -> str:
    table = (("Missing output files", "results missing"),
             ("Params have changed", "config values it uses changed"),
             ("Input files updated by another job", "an earlier step re-runs"),
             ("Updated input files", "an input file changed"),
             ("Code has changed", "the rule changed"),
             ("Set of input files has changed", "the set of inputs changed"))
    found = [short for key, short in table if key in reason]
    return "; ".join(found) if found else reason[:100]
