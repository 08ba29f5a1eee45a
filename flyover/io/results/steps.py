"""Which result files each workflow step writes: the one list that the workflow's rules, the
run's progress and the report take the names from (the files themselves are described in the
modules of this package).

A pass step writes into the pass's folder, a campaign step into the campaign's; the summary
also writes one file into every pass's folder (``SUMMARY_PASS_FILES``), the image step a
folder of map figures (:data:`flyover.io.results.maps.FIGURE_FOLDER`), the listen step a folder
of sound files (:data:`flyover.io.results.listen.FOLDER`) and the hemispheres step a folder per
label (:mod:`flyover.io.results.hemisphere`).
"""

from __future__ import annotations

import re
from pathlib import Path

from flyover.io.results import (alignment, comparison, file_name, maps, pass_page, qc, report,
                                store, track_check, viewer)
from flyover.io.results.campaign_tables import CAMPAIGN_FIGURE, CAMPAIGN_LEVELS, CAMPAIGN_OVERALL
from flyover.io.results.directivity import DIRECTIVITY, DIRECTIVITY_FIGURE
from flyover.io.results.event_metrics import (BAND_HISTORY, EVENT_METRICS, LEVEL_HISTORY,
                                              LEVEL_HISTORY_FIGURE, RECONSTRUCTED)
from flyover.io.results.levels import LEVELS, LEVELS_BY_METHOD
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.io.results.listen import LISTEN
from flyover.io.results.narrowband import NARROWBAND, NARROWBAND_FIGURE
from flyover.io.results.region_angles import REGION_ANGLES
from flyover.io.results.region_power import REGION_POWER
from flyover.io.results.rotor_tones import BAND_PARTS, ROTOR_TONES, ROTOR_TONES_FIGURE
from flyover.io.results.signoff import SIGNOFF, SIGNOFF_JSON
from flyover.io.results.spectra import SPECTRA, SPECTRA_FIGURE
from flyover.io.results.windows import WINDOWS

PASS_STEPS = {
    "align": (alignment.NAME, alignment.TRACK_FIGURE),
    "image": (maps.NAME, WINDOWS, REGION_POWER, REGION_ANGLES),
    "levels": (LEVELS, LEVELS_BY_METHOD, SPECTRA, DIRECTIVITY, SPECTRA_FIGURE,
               DIRECTIVITY_FIGURE),
    "trackcheck": (track_check.NAME,),
    "metrics": (EVENT_METRICS, RECONSTRUCTED, LEVEL_HISTORY, BAND_HISTORY, LEVEL_HISTORY_FIGURE),
    "tones": (ROTOR_TONES, BAND_PARTS, ROTOR_TONES_FIGURE),
    "narrowband": (NARROWBAND, NARROWBAND_FIGURE),
    "listen": (LISTEN,),
    "qc": (qc.TRACK_FIGURE, qc.SPECTROGRAM_FIGURE),
    "page": (pass_page.NAME,),
}
CAMPAIGN_STEPS = {
    "signoff": (SIGNOFF, SIGNOFF_JSON),
    "summary": (CAMPAIGN_LEVELS, CAMPAIGN_OVERALL, CAMPAIGN_FIGURE),
    "viewer": (viewer.NAME,),
    "report": (report.NAME,),
}
SUMMARY_PASS_FILES = (LEVELS_OVERALL,)
# Written by `flyover compare`, not by a workflow step.
COMPARISON_FILES = (comparison.COMPARED_LEVELS, comparison.COMPARED_OVERALL,
                    comparison.COMPARED_METRICS, comparison.COMPARISON_FIGURE)


def output_key(result) -> str:
    """A Python name for a result file (``levels.csv`` -> ``levels_csv``): the key of a rule's
    output."""
    return re.sub(r"\W", "_", file_name(result))


def step_files(step: str) -> dict[str, str]:
    """The files a step writes, by :func:`output_key`: names inside the pass's folder for a
    pass step, the campaign's folder for a campaign step."""
    files = PASS_STEPS[step] if step in PASS_STEPS else CAMPAIGN_STEPS[step]
    return {output_key(f): file_name(f) for f in files}


def describe_all() -> str:
    """Markdown: every step's result files, tables with their columns and units
    (:meth:`TableFile.describe`), figures with what they show. ``docs/result-files.md`` is this
    text (a test keeps it so; ``python -m flyover.io.results.steps > docs/result-files.md``
    writes it)."""
    out = ["# Result files", "",
           "Written by `python -m flyover.io.results.steps` from the files' own descriptions "
           "(`flyover/io/results/`); do not edit by hand.", ""]

    # Files that are not tables: their module's first paragraph says what they hold.
    about = {m.NAME: " ".join(m.__doc__.split("\n\n")[0].split(": ", 1)[1].split())
             for m in (alignment, maps, track_check, pass_page, report, viewer)}
    about[SIGNOFF_JSON] = "each pass's status with every rule's measured value and limit"

    def describe(result, where):
        if isinstance(result, str):
            return f"`{where}{result}`: {about[result]}"
        if hasattr(result, "describe"):
            return result.describe().replace(f"`{result.name}`", f"`{where}{result.name}`", 1)
        return f"`{where}{result.name}`: {result.caption}"

    for title, steps, where in (("Per pass", PASS_STEPS, "PASS/"),
                                ("Per campaign", CAMPAIGN_STEPS, "")):
        out += [f"## {title}", ""]
        for step, files in steps.items():
            out += [f"### Step `{step}`", ""]
            out += [describe(f, where) + "\n" for f in files]
            if step == "summary":
                out += [describe(f, "PASS/") + "\n" for f in SUMMARY_PASS_FILES]
    out += ["## `flyover compare`", ""]
    out += [describe(f, f"{comparison.FOLDER}/A--B/") + "\n" for f in COMPARISON_FILES]
    out += [describe(comparison.MEASURED_MINUS_TRUE,
                     f"{comparison.FOLDER}/{comparison.TRUTH_FOLDER}/") + "\n"]
    out += ["## The columnar store (step `store`)", "",
            " ".join(store.__doc__.split("\n\n")[0].split()).rstrip(":") + ", for example:",
            "", "```sql", store.__doc__.split("\n\n")[1].strip(), "```", ""]
    out += [f"- `STORE/NAME/{t}.parquet`: {what}" for t, what in store.TABLES.items()]
    out += [f"- `STORE/NAME/{store.PROVENANCE}.parquet`: the provenance as rows", ""]
    return "\n".join(out).rstrip("\n") + "\n"


def pass_steps_done(folder) -> bool:
    """Whether every pass step has written its files into a pass's folder."""
    return all((Path(folder) / file_name(f)).exists() for files in PASS_STEPS.values()
               for f in files)


def pass_files() -> list[str]:
    """Every file a finished run leaves in a pass's folder (the map figures' folder apart)."""
    return [file_name(f) for files in PASS_STEPS.values() for f in files] + [
        file_name(f) for f in SUMMARY_PASS_FILES]


if __name__ == "__main__":
    print(describe_all(), end="")
