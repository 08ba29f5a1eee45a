"""What the Snakefile needs to know about a campaign: targets, inputs and re-run fingerprints.

No physics here. Each stage's rule carries, as a Snakemake param, a fingerprint of exactly the
campaign values that stage reads (declared beside the stage's code as ``READS`` and enforced
when it runs, :mod:`flyover.model.reads`) plus a digest of the package code, so that editing
one pass's atmosphere re-runs that pass only, and editing flyover re-runs what it computes.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.imaging.chain import ChainSettings, window_memory_bytes
from flyover.io.config import load_campaign
from flyover.io.readers import read
from flyover.io.results import comparison, file_name, hemisphere, steps, store
from flyover.io.results.campaign_tables import CAMPAIGN_LEVELS
from flyover.sim.scenario_file import load_scenario
from flyover.campaign import Campaign, pass_array
from flyover.model.errors import FlyoverInputError
from flyover.sim.demo import WEATHER_FILE, pass_files
from flyover.workflow.settings_record import changed_settings, stage_settings


@dataclass(frozen=True)
class JobSizes:
    """What a job's memory and time scale with."""

    n_grid: int
    n_mics: int
    window_samples: int
    n_bands: int
    n_windows: int
    n_methods: int = 1          # the imaging methods run on the pass (the headline and others)


# Measured on this project's benchmark machine (2 cores; benchmarks/bench_imaging.py and a
# 16-microphone test campaign): peak resident memory of each stage beyond the chain itself, the
# chain's temporaries per byte of `window_memory_bytes`, and the whole image stage's throughput.
_BASE_MB = {"align": 320, "image": 330, "levels": 260, "qc": 380, "metrics": 300, "tones": 380,
            "campaign_summary": 300, "hemispheres": 400, "signoff": 300, "trackcheck": 380,
            "report": 300}
_CHAIN_FACTOR = 1.7            # image: 561 MB at 142 MiB of chain (demo), 332 MB at 12 MiB
# mic * grid point * sample per second, whole image stage with its unit sources, 2 threads:
# demo pass-1, 48 mics x 775 points x 6400 samples x 16 windows in 50.6 s; taken per imaging
# method (each other method costs about a headline's time).
_IMAGE_RATE = 7.5e7
_MARGIN = 1.5
_FLOOR_MB = 1000
_FLOOR_MIN = 10


def job_memory_mb(stage: str, sizes: JobSizes, *, windows_at_once: int = 1) -> int:
    """Memory (MB) of one job: the measured base of its stage plus, for the stages that run the
    imaging chain, the chain's own peak for these sizes (once per window imaged at a time);
    times a margin, at least a floor."""
    need = _BASE_MB.get(stage, 300)
    if stage == "image":
        settings = ChainSettings(third_octave_bands(1000, 1000), np.ones(1), 1.0)
        chain = window_memory_bytes(sizes.n_grid, sizes.n_mics, sizes.window_samples,
                                    sizes.n_bands, settings) / 2 ** 20
        need += windows_at_once * _CHAIN_FACTOR * chain
    return int(max(_FLOOR_MB, np.ceil(_MARGIN * need)))


def job_runtime_min(stage: str, sizes: JobSizes) -> int:
    """Wall time (minutes) of one job: every window at the imaging's measured whole-stage rate
    (unit sources included) for each method the pass runs, three times over; the other stages
    take seconds."""
    if stage != "image":
        return _FLOOR_MIN
    work = (sizes.n_mics * sizes.n_grid * sizes.window_samples * sizes.n_windows
            * sizes.n_methods)
    seconds = work / _IMAGE_RATE
    return int(max(_FLOOR_MIN, np.ceil(3 * seconds / 60)))


@dataclass
class CampaignPlan:
    """A loaded campaign seen from the workflow."""

    path: Path
    campaign: Campaign
    _sizes_of: dict = field(default_factory=dict, repr=False)  # per pass: one header read

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
        scenario, _, raw = load_scenario(self.campaign.scenario)
        fmt = raw["recording"].get("format", "wav")
        files = [folder / "layout.csv", folder / "truth.csv"]
        if scenario.weather is not None:
            files.append(folder / WEATHER_FILE)
            named = self.campaign.weather.path if self.campaign.weather else None
            if named != folder / WEATHER_FILE:
                raise FlyoverInputError(
                    "a simulated campaign's weather file is where the simulator writes it",
                    f"{self.path}, key weather", str(folder / WEATHER_FILE), str(named),
                    "drop the 'scenario' key to use files of your own")
        for ps in scenario.passes:
            spec = self.campaign.passes.get(ps.name)
            expected = pass_files(folder, ps, fmt, scenario.sample_rate_hz)
            recordings = ([expected["recording"]] if "recording" in expected else
                          [f for fs in expected["recorders"].values() for f in fs])
            named = {"recording": spec.recording_files if spec else [],
                     "calibration": [spec.calibration] if spec else [],
                     "track": [spec.track] if spec else [],
                     "array.layout": [spec.array.layout] if spec and spec.array else []}
            checks = [("recording", recordings), ("calibration", [expected["calibration"]]),
                      ("track", [expected["track"]])]
            if "layout" in expected:
                checks.append(("array.layout", [expected["layout"]]))
                files.append(expected["layout"])
            for key, want in checks:
                if [Path(p) for p in named[key]] != want:
                    raise FlyoverInputError(
                        "a simulated campaign's files are where the simulator writes them",
                        f"{self.path}, key passes.{ps.name}.{key}",
                        ", ".join(str(p) for p in want),
                        ", ".join(str(p) for p in named[key]) or "no such pass",
                        "drop the 'scenario' key to use files of your own")
            files += recordings + [expected["calibration"], expected["track"]]
        return [str(f) for f in files]

    def pass_inputs(self, name: str) -> dict:
        spec = self.campaign.passes[name]
        weather = [self.campaign.weather.path] if self.campaign.weather else []
        return {"files": [str(p) for p in spec.input_files() + weather],
                "layout": str(pass_array(self.campaign, name).layout)}

    def memory_mb(self, name: str | None, stage: str, *, threads: int = 1) -> int:
        """Memory to ask a scheduler for: the stage's measured peak scaled to this campaign's
        sizes, with a margin and a floor (see :func:`job_memory_mb`); the image step on
        ``threads`` images that many windows at once."""
        return job_memory_mb(stage, self._sizes(name),
                             windows_at_once=threads if stage == "image" else 1)

    def runtime_min(self, name: str | None, stage: str) -> int:
        """Minutes to ask a scheduler for (see :func:`job_runtime_min`)."""
        return job_runtime_min(stage, self._sizes(name))

    def _sizes(self, name: str | None) -> JobSizes:
        if name not in self._sizes_of:
            self._sizes_of[name] = self._read_sizes(name)
        return self._sizes_of[name]

    def _read_sizes(self, name: str | None) -> JobSizes:
        camp = self.campaign
        spec = camp.passes[name] if name is not None else next(iter(camp.passes.values()))
        try:
            heads = [[read("recording", f) for f in r.files] for r in spec.recorders]
            channels = sum(h[0].n_channels for h in heads)
            fs = heads[0][0].sample_rate_hz
            duration = sum(h.n_frames for h in heads[0]) / fs
        except FlyoverInputError:  # not there yet (a simulated campaign): typical field sizes
            channels, fs, duration = 64, 51200.0, 60.0
        an = camp.analysis
        return JobSizes(n_grid=int(np.prod(camp.grid.shape)), n_mics=channels,
                        window_samples=int(an.window_s * fs),
                        n_bands=len(third_octave_bands(an.band_min_hz, an.band_max_hz)),
                        n_windows=an.window_count_bound(duration),
                        n_methods=1 + len(spec.other_methods))

    def image_threads(self, cores: int | None, *, local: bool) -> int:
        """Threads of each image job.

        An image job keeps about 1.5 of two threads busy: its map figures and its Python work
        are serial (demo pass-1: 15.3 s of wall time on two threads, 18.4 s on one, the same
        results byte for byte). So on this machine, while at least as many passes as cores
        are still to be imaged, each image job takes one thread and the scheduler keeps every
        core busy with two of them, or one beside the light steps; fewer passes to image (a
        re-imaged pass, a small campaign) share the cores among them. "Still to be imaged"
        (the jobs Snakemake will run are not known yet) is a pass without maps, or whose image
        step last ran with other settings or code than now (its settings record): a changed
        setting of every pass or a new flyover counts them all. A pass re-imaged for a revised
        input file alone is not counted. A cluster's job gets two unless the profile sets more
        (``set-threads``).

        Parameters
        ----------
        cores : int or None
            The run's ``--cores`` (None: not given).
        local : bool
            Whether the jobs run on this machine.
        """
        if not local or not cores:
            return 2
        maps = steps.step_files("image")["maps_npz"]
        to_image = sum(not (self.campaign.output / p / maps).exists()
                       or bool(changed_settings(self.campaign.output, self.campaign, "image", p))
                       for p in self.passes)
        return max(1, cores // max(1, to_image))

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
        return json.dumps(stage_settings(self.campaign, stage, pass_name), sort_keys=True)

    @property
    def output_pattern(self) -> str:
        """The output folder as a Snakemake pattern (braces doubled: they mark wildcards)."""
        return self.output.replace("{", "{{").replace("}", "}}")

    def step_outputs(self, step: str) -> dict[str, str]:
        """A step's result files as patterns, by output key (:mod:`flyover.io.results.steps`):
        a pass step's under the ``{pass_name}`` wildcard."""
        where = (f"{self.output_pattern}/{{pass_name}}" if step in steps.PASS_STEPS
                 else self.output_pattern)
        return {key: f"{where}/{name}" for key, name in steps.step_files(step).items()}

    def pass_results(self, files) -> list[str]:
        """Some result files (names or descriptors) of every pass, as patterns."""
        return [f"{self.output_pattern}/{p}/{file_name(f)}" for p in self.passes for f in files]

    def pass_step_results(self, *names: str) -> list[str]:
        """Everything some pass steps write, for every pass, as patterns."""
        return self.pass_results([f for n in names for f in steps.step_files(n).values()])

    def hemisphere_files(self) -> list[str]:
        """Every label's hemisphere files (:mod:`flyover.io.results.hemisphere`)."""
        labels = (p.label for p in self.campaign.passes.values())
        return [f"{self.output_pattern}/{hemisphere.FOLDER}/{folder}/{f}"
                for folder in hemisphere.label_folders(labels).values()
                for f in hemisphere.FILES]

    def comparison_files(self) -> list[str]:
        """Every comparison's files (``analysis.comparisons``; :mod:`flyover.io.results.steps`)."""
        return [f"{self.output_pattern}/{comparison.FOLDER}/{comparison.pair_folder(a, b)}/"
                f"{file_name(f)}" for a, b in self.campaign.analysis.comparisons
                for f in steps.COMPARISON_FILES]

    def store_files(self) -> list[str]:
        """The campaign's files in the columnar store (:mod:`flyover.io.results.store`)."""
        spec = self.campaign.store
        return [str(p).replace("{", "{{").replace("}", "}}")
                for p in store.campaign_files(spec.folder, spec.name)]

    def targets(self) -> list[str]:
        """The whole campaign: the report, the campaign tables and the store's files."""
        return list(self.step_outputs("report").values()) + [
            f"{self.output_pattern}/{CAMPAIGN_LEVELS.name}"] + self.comparison_files() + \
            self.store_files()


