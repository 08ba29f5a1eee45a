# Shared set-up of the flyover workflow: the campaign, its output folder, the stage command.

import os
import re
import sys
import threading
from pathlib import Path

from flyover.io.results.maps import FIGURE_FOLDER as MAP_FIGURES
from flyover.io.results.steps import SUMMARY_PASS_FILES
from flyover.model.errors import FlyoverInputError
from flyover.workflow.plan import CampaignPlan
from flyover.workflow.warm_start import WarmProcess

# The campaign is the last --configfile, else the demo. It is loaded by flyover (validated),
# never merged with another file, so the demo's passes cannot leak into a user's campaign.
_DEMO = Path(workflow.basedir) / "demo" / "campaign.yaml"
CAMPAIGN_FILE = ([str(Path(f).resolve()) for f in workflow.overwrite_configfiles]
                 or [str(_DEMO)])[-1]
try:
    PLAN = CampaignPlan.load(CAMPAIGN_FILE)
except FlyoverInputError as exc:
    print(exc.message, file=sys.stderr)
    sys.exit(2)

# OUT is a real folder name; OUTP the same as a Snakemake pattern (braces are wildcards there).
OUT = PLAN.output
OUTP = PLAN.output_pattern


def outputs(step):
    """A step's result files (flyover.io.results.steps) as a rule's named outputs, each
    flagged update() (see pass.smk)."""
    return {key: update(path) for key, path in PLAN.step_outputs(step).items()}


def results_of(*steps):
    """The result files of some steps of the same pass, as a rule's named inputs."""
    return {key: path for step in steps for key, path in PLAN.step_outputs(step).items()}


# Snakemake's records and lock live with the results, wherever the run was started from.
workdir: OUT

# The interpreter and the campaign file reach the jobs through the environment, not through the
# command text: Snakemake re-runs a rule whose command text changes, and neither the
# interpreter's path nor the campaign file's name says anything about the results.
os.environ["FLYOVER_PYTHON"] = sys.executable
os.environ["FLYOVER_CAMPAIGN"] = CAMPAIGN_FILE
# Each job's thread pools (numba, BLAS, OpenMP) are limited to the threads it was given.
STAGE = ("OMP_NUM_THREADS={threads} OPENBLAS_NUM_THREADS={threads} MKL_NUM_THREADS={threads} "
         'NUMBA_NUM_THREADS={threads} "$FLYOVER_PYTHON" -m flyover stage')

envvars:
    "FLYOVER_PYTHON",
    "FLYOVER_CAMPAIGN",

# Warm start (flyover/workflow/warm_start.py): while the jobs run on this machine, one process
# imports the steps once and each job's step runs in a fork of it, without the 1-1.5 s of
# start-up and imports. Jobs on a cluster's nodes, or with it switched off, run cold.
WARM = WarmProcess()
WARM_LOGS = Path(OUT) / "logs"
# Started now, while Snakemake reads the rest and plans the jobs; onstart waits until it
# listens. Not for a dry run or a lint (by their command line: Snakemake tells the workflow
# only later), and Snakemake's jobs on a cluster's nodes read the Snakefile too (not the main
# process): neither starts one. One started for nothing ends with its Snakemake.
if workflow.is_main_process and not {"-n", "--dry-run", "--dryrun", "--lint",
                                     "--unlock"} & set(sys.argv):
    WARM.launch(WARM_LOGS, max_threads=workflow.cores or 1)


onstart:
    if workflow.local_exec:
        WARM.start(WARM_LOGS, max_threads=workflow.cores or 1)
    else:
        WARM.stop()


def _run_over():
    """The run is over: stop the warm process, and cancel the re-evaluation timers Snakemake's
    scheduler leaves behind (non-daemon threads of --max-jobs-per-timespan's timespan, 1 s by
    default, which the interpreter waits out before it exits: a second of every run)."""
    WARM.stop()
    for thread in threading.enumerate():
        if isinstance(thread, threading.Timer):
            thread.cancel()


onsuccess:
    _run_over()


onerror:
    _run_over()

# With --use-conda every rule runs in this environment (flyover from PyPI).
CONDA_ENV = str(Path(workflow.current_basedir).parent / "envs" / "flyover.yaml")

wildcard_constraints:
    pass_name="|".join(re.escape(p) for p in PLAN.passes),
