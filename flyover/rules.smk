# The rules of the flyover workflow (included by the top-level Snakefile; `flyover run` uses this
# file directly). Rules call stage entry points and hold no physics.

import sys
from pathlib import Path

from flyover.errors import FlyoverInputError
from flyover.workflow import CampaignPlan

# The campaign is the last --configfile, else the demo. It is loaded by flyover (validated),
# never merged with another file, so the demo's passes cannot leak into a user's campaign.
_DEMO = Path(workflow.basedir) / "demo" / "campaign.yaml"
CAMPAIGN_FILE = ([str(Path(f).resolve()) for f in workflow.overwrite_configfiles]
                 or [str(_DEMO)])[-1]
try:
    PLAN = CampaignPlan.load(CAMPAIGN_FILE)
except FlyoverInputError as exc:
    sys.stderr.write(exc.message + "\n")
    sys.exit(2)

OUT = PLAN.output
PY = sys.executable
STAGE = f'"{PY}" -m flyover stage'

wildcard_constraints:
    pass_name="|".join(PLAN.passes),


rule all:
    input:
        PLAN.targets(),


localrules: all


# The demo's data are simulated when missing, and only then: once they exist they are plain
# inputs, so nothing (not even an edit of this file) regenerates them behind the user's back.
if PLAN.simulation_folder is not None and not all(Path(f).exists()
                                                  for f in PLAN.simulated_files()):

    rule simulate_demo:
        input:
            scenario=str(PLAN.campaign.scenario),
        output:
            PLAN.simulated_files(),
        log:
            f"{OUT}/logs/simulate_demo.log",
        benchmark:
            f"{OUT}/benchmarks/simulate_demo.tsv"
        resources:
            mem_mb=4000,
        shell:
            f'"{PY}" -m flyover simulate {{input.scenario}} --out "{PLAN.simulation_folder}" '
            "> {log} 2>&1"


rule align:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
    output:
        json=f"{OUT}/{{pass_name}}/alignment.json",
        png=f"{OUT}/{{pass_name}}/track.png",
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "align"),
    log:
        f"{OUT}/logs/{{pass_name}}/align.log",
    benchmark:
        f"{OUT}/benchmarks/{{pass_name}}/align.tsv"
    resources:
        mem_mb=1000,
    shell:
        f'{STAGE} align --campaign "{CAMPAIGN_FILE}" --pass {{wildcards.pass_name}} '
        f'--out "{OUT}/{{wildcards.pass_name}}" > {{log}} 2>&1'



rule image:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        alignment=f"{OUT}/{{pass_name}}/alignment.json",
    output:
        maps=f"{OUT}/{{pass_name}}/maps.npz",
        windows=f"{OUT}/{{pass_name}}/windows.csv",
        regions=f"{OUT}/{{pass_name}}/region_power.csv",
        figures=directory(f"{OUT}/{{pass_name}}/maps"),
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "image"),
    log:
        f"{OUT}/logs/{{pass_name}}/image.log",
    benchmark:
        f"{OUT}/benchmarks/{{pass_name}}/image.tsv"
    threads: 2
    resources:
        mem_mb=3000,
        runtime=60,
    shell:
        f'{STAGE} image --campaign "{CAMPAIGN_FILE}" --pass {{wildcards.pass_name}} '
        f'--out "{OUT}/{{wildcards.pass_name}}" --threads {{threads}} > {{log}} 2>&1'


rule levels:
    input:
        windows=f"{OUT}/{{pass_name}}/windows.csv",
        regions=f"{OUT}/{{pass_name}}/region_power.csv",
    output:
        levels=f"{OUT}/{{pass_name}}/levels.csv",
        overall=f"{OUT}/{{pass_name}}/levels_overall.csv",
        spectra=f"{OUT}/{{pass_name}}/spectra.csv",
        directivity=f"{OUT}/{{pass_name}}/directivity.csv",
        spectra_png=f"{OUT}/{{pass_name}}/spectra.png",
        directivity_png=f"{OUT}/{{pass_name}}/directivity.png",
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "levels"),
    log:
        f"{OUT}/logs/{{pass_name}}/levels.log",
    benchmark:
        f"{OUT}/benchmarks/{{pass_name}}/levels.tsv"
    group:
        "pass_light"
    resources:
        mem_mb=1000,
    shell:
        f'{STAGE} levels --campaign "{CAMPAIGN_FILE}" --pass {{wildcards.pass_name}} '
        f'--out "{OUT}/{{wildcards.pass_name}}" > {{log}} 2>&1'


rule qc:
    input:
        unpack(lambda w: PLAN.pass_inputs(w.pass_name)),
        alignment=f"{OUT}/{{pass_name}}/alignment.json",
        windows=f"{OUT}/{{pass_name}}/windows.csv",
    output:
        track=f"{OUT}/{{pass_name}}/qc_track.png",
        spectrogram=f"{OUT}/{{pass_name}}/qc_spectrogram.png",
    params:
        fingerprint=lambda w: PLAN.fingerprint(w.pass_name, "qc"),
    log:
        f"{OUT}/logs/{{pass_name}}/qc.log",
    benchmark:
        f"{OUT}/benchmarks/{{pass_name}}/qc.tsv"
    group:
        "pass_light"
    resources:
        mem_mb=2000,
    shell:
        f'{STAGE} qc --campaign "{CAMPAIGN_FILE}" --pass {{wildcards.pass_name}} '
        f'--out "{OUT}/{{wildcards.pass_name}}" > {{log}} 2>&1'


rule campaign_summary:
    input:
        PLAN.pass_results(("levels.csv", "levels_overall.csv")),
    output:
        levels=f"{OUT}/campaign_levels.csv",
        overall=f"{OUT}/campaign_overall.csv",
        figure=f"{OUT}/campaign_overall.png",
    params:
        fingerprint=PLAN.campaign_fingerprint("summary"),
    log:
        f"{OUT}/logs/campaign_summary.log",
    benchmark:
        f"{OUT}/benchmarks/campaign_summary.tsv"
    resources:
        mem_mb=1000,
    shell:
        f'"{PY}" -m flyover stage-campaign summary --campaign "{CAMPAIGN_FILE}" > {{log}} 2>&1'


rule report:
    input:
        rules.campaign_summary.output,
        PLAN.pass_results(("alignment.json", "windows.csv", "qc_track.png", "qc_spectrogram.png",
                           "spectra.png", "directivity.png")),
        [str(p) for p in PLAN.campaign.input_files()],
    output:
        f"{OUT}/report.html",
    params:
        fingerprint=PLAN.campaign_fingerprint("report"),
    log:
        f"{OUT}/logs/report.log",
    benchmark:
        f"{OUT}/benchmarks/report.tsv"
    resources:
        mem_mb=1000,
    shell:
        f'"{PY}" -m flyover stage-campaign report --campaign "{CAMPAIGN_FILE}" > {{log}} 2>&1'
