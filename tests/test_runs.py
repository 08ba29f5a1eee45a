"""Runs a user can trust: `flyover run` checks first, one run per results folder, stages read
only what they declare, and the declarations are the re-run fingerprints."""

from __future__ import annotations

import pandas as pd
import pytest
from conftest import edit_campaign

from flyover.cli import main
from flyover.io.config import load_campaign
from flyover.io.results.steps import pass_files
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import UndeclaredRead, guarded, read_values
from flyover.pipeline import align, image, levels
from flyover.workflow.plan import CampaignPlan, JobSizes, job_memory_mb, job_runtime_min
from flyover.workflow.settings_record import write_settings_record
from flyover.workflow.runner import (RunState, _RunLock, job_message, pass_warnings,
                                     scheduler_stop)


def test_run_stops_on_bad_input_before_any_job(tiny_copy, capsys):
    # A layout one microphone short of the recording: `flyover run` says so in flyover's words
    # and exits 2 before Snakemake starts (no results folder, no traceback).
    layout = tiny_copy / "layout.csv"
    layout.write_text("\n".join(layout.read_text().splitlines()[:-1]) + "\n")
    assert main(["run", str(tiny_copy / "campaign.yaml")]) == 2
    err = capsys.readouterr().err
    assert "layout and recording disagree on the channels" in err
    assert "Traceback" not in err and "CalledProcessError" not in err
    assert not (tiny_copy / "results").exists()


def test_second_run_of_the_same_results_is_refused(tiny_copy, capsys):
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    with _RunLock(campaign.output):
        assert main(["run", str(tiny_copy / "campaign.yaml")]) == 2
    assert "another flyover run is working on this campaign's results" in capsys.readouterr().err


def test_stages_read_only_what_they_declare(tiny_campaign_dir):
    # Every stage works on a guarded view of the campaign: a read outside its declaration is
    # refused with the stage and the path named. (Every stage runs through its view in
    # test_levels.py::test_stages_on_the_tiny_campaign and in the workflow tests.)
    campaign = load_campaign(tiny_campaign_dir / "campaign.yaml")
    view = guarded(campaign, levels.READS, stage="levels", pass_name="p1")
    with pytest.raises(UndeclaredRead, match="stage 'levels' reads campaign.analysis.window_s"):
        view.analysis.window_s
    with pytest.raises(UndeclaredRead, match="campaign.passes.p1.label"):
        guarded(campaign, align.READS, stage="align", pass_name="p1").passes["p1"].label


def test_fingerprints_follow_the_declared_reads(tiny_copy):
    # The band range is read by the alignment (channel coherence) and so re-runs it; the
    # reference distance is read by the levels only; a label re-runs no per-pass stage.
    path = tiny_copy / "campaign.yaml"
    stages = ("align", "image", "levels", "qc", "metrics")

    def rerun_by(change) -> set[str]:
        before = {s: CampaignPlan.load(path).fingerprint("p1", s) for s in stages}
        edit_campaign(tiny_copy, change)
        return {s for s in stages if CampaignPlan.load(path).fingerprint("p1", s) != before[s]}

    # The metrics compare the measurement with its reconstruction in the analysed bands, and
    # reconstruct for a reference flight at the reference distance.
    assert rerun_by(lambda d: d["analysis"].update(band_min_hz=400)) == {"align", "image", "qc",
                                                                          "metrics"}
    assert rerun_by(lambda d: d["analysis"].update(reference_distance_m=80.0)) == {"levels",
                                                                                   "metrics"}
    assert rerun_by(lambda d: d["passes"]["p1"].update(label="other")) == set()
    # File paths are not part of a fingerprint (the workflow tracks the files themselves).
    values = read_values(load_campaign(path), align.READS, "p1")
    assert values["passes.p1.recorders"][0]["files"] == [None] and values["config_path"] is None


def test_methods_compared_per_pass(tiny_copy):
    # A pass's own other_methods replaces the analysis's for that pass alone ([] leaves the
    # headline alone), and re-runs only its image and levels steps.
    path = tiny_copy / "campaign.yaml"
    edit_campaign(tiny_copy, lambda d: d["analysis"].update(other_methods=["clean-sc"]))
    stages = ("align", "image", "levels", "qc", "metrics", "trackcheck")
    before = {(p, s): CampaignPlan.load(path).fingerprint(p, s) for p in ("p1", "p2")
              for s in stages}
    edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(
        other_methods=["frequency-domain", "time-domain"]))
    campaign = load_campaign(path)
    assert campaign.passes["p1"].other_methods == ("frequency-domain",)   # never the headline
    assert campaign.passes["p2"].other_methods == ("clean-sc",)
    after = {(p, s): CampaignPlan.load(path).fingerprint(p, s) for p in ("p1", "p2")
             for s in stages}
    assert {k for k in before if before[k] != after[k]} == {("p1", "image"), ("p1", "levels")}
    edit_campaign(tiny_copy, lambda d: d["passes"]["p2"].update(other_methods=[]))
    assert load_campaign(path).passes["p2"].other_methods == ()
    edit_campaign(tiny_copy, lambda d: d["passes"]["p2"].update(other_methods=["clean-c"]))
    with pytest.raises(FlyoverInputError, match="unknown imaging method 'clean-c'") as err:
        load_campaign(path)
    assert "key passes.p2.other_methods" in str(err.value)


def test_run_progress_and_failure_reading(tmp_path):
    # The lines `flyover run` reads from Snakemake's log (Snakemake 9 wording).
    log = tmp_path / "align.log"
    log.write_text("loading\nflyover: cal.csv: calibration is missing channels\n  expected x\n")
    state = RunState()
    for line in ("[Wed Dec  2 11:51:43 2026]", "localrule image:", "    log: /x/image.log",
                 "    jobid: 4", "    wildcards: pass_name=p1", "Finished jobid: 4 (Rule: image)",
                 "1 of 11 steps (9%) done", "Error in rule align:", f"    log: {log} (check log "
                 "file(s) for error details)", "    wildcards: pass_name=p2"):
        state.feed(line)
    assert state.done_steps == 1 and state.total_steps == 11 and not state.running
    assert [(j.rule, j.pass_name, j.log) for j in state.failed] == [("align", "p2", str(log))]
    assert job_message(str(log)).splitlines() == ["flyover: cal.csv: calibration is missing "
                                                  "channels", "  expected x"]
    crash = tmp_path / "crash.log"
    crash.write_text("Traceback (most recent call last):\n  File x\nValueError: bad thing\n")
    assert job_message(str(crash)) == "ValueError: bad thing"


def test_pass_without_any_window_says_why(tiny_copy):
    # No window fits (windows longer than the 3 s recording): the stages still succeed, write
    # empty tables, and the run's summary says why.
    edit_campaign(tiny_copy, lambda d: d["analysis"].update(window_s=3.5))
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    out = tiny_copy / "results" / "p1"
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, quiet=True)
    levels.run(campaign, "p1", out)
    assert (out / "maps").is_dir() and len(pd.read_csv(out / "windows.csv")) == 0
    assert len(pd.read_csv(out / "levels.csv")) == 0
    assert any(w.startswith("no window could be planned") for w in pass_warnings(out))


def test_job_resources_scale_with_the_campaign():
    # Memory grows with grid points x microphones x window samples, runtime with the work of
    # every window; both have floors. The demo's imaging peaked at 561 MB (benchmarks): its
    # request must hold that with room to spare.
    tiny = JobSizes(n_grid=45, n_mics=16, window_samples=2000, n_bands=7, n_windows=13)
    demo = JobSizes(n_grid=775, n_mics=48, window_samples=6400, n_bands=13, n_windows=19)
    large = JobSizes(n_grid=3111, n_mics=48, window_samples=12800, n_bands=12, n_windows=29)
    assert job_memory_mb("image", tiny) == job_memory_mb("levels", large) == 1000
    assert job_memory_mb("image", demo) >= 1.4 * 561
    assert job_memory_mb("image", large) > job_memory_mb("image", demo)
    # Two windows imaged at a time (forked workers) hold two windows' chains.
    assert job_memory_mb("image", large, windows_at_once=2) > 1.5 * job_memory_mb("image", large)
    assert job_runtime_min("image", tiny) == job_runtime_min("qc", large) == 10
    assert job_runtime_min("image", large) > job_runtime_min("image", demo)
    # Each method the pass runs beside the headline costs about another headline's time.
    compared = JobSizes(n_grid=3111, n_mics=48, window_samples=12800, n_bands=12, n_windows=29,
                        n_methods=3)
    assert job_runtime_min("image", compared) >= 2.9 * job_runtime_min("image", large)


def test_scheduler_stops_are_told_apart(tmp_path):
    # slurmstepd's words when it stops a job (Slurm 22.05, as seen on the test cluster).
    memory = tmp_path / "12.log"
    memory.write_text("slurmstepd-vm: error: StepId=12.batch exceeded memory limit "
                      "(157552640 > 62914560), being killed\n")
    job = RunState()
    for line in ("rule image:", "    jobid: 4", "    wildcards: pass_name=p1",
                 "    resources: tmpdir=/tmp, mem_mb=60, runtime=1", "Error in rule image:",
                 "    jobid: 4", f"    log: /x/image.log, {memory} (check log file(s))"):
        job.feed(line)
    stop = scheduler_stop(job.failed[0])
    assert stop.startswith("step image of pass p1 was stopped by the scheduler: it needed more "
                           "than its memory limit of 60 MiB (150 MiB when stopped)")
    assert "set-resources: image: mem_mb: 300" in stop
    memory.write_text("slurmstepd: error: *** JOB 12 ON vm CANCELLED AT 2026-12-02T12:24:40 DUE "
                      "TO TIME LIMIT ***\n")
    assert "at its time limit (1 min)" in scheduler_stop(job.failed[0])


def test_live_status_shows_the_windows_of_a_running_imaging(tmp_path):
    # The image stage logs one line per window; `flyover run` shows the latest on a terminal.
    log = tmp_path / "image.log"
    log.write_text("p1 imaging: 1/16 window 3 at 61 deg\np1 imaging: 2/16 window 4 at 66 deg\n")
    state = RunState()
    for line in ("rule image:", f"    log: {log}", "    jobid: 4", "    wildcards: pass_name=p1",
                 "2 of 11 steps (18%) done"):
        state.feed(line)
    assert state.status(["p1", "p2"], tmp_path) == ("2/11 steps | running: image p1 "
                                                    "(window 2/16) | passes done 0/2")
    # p1's results appear and its imaging finishes: done; its metrics step then starts and the
    # count stays (it only goes forward). Six steps of eleven in 60 s: about 50 s left.
    (tmp_path / "p1").mkdir()
    for name in pass_files():
        (tmp_path / "p1" / name).write_text("x")
    for line in ("Finished jobid: 4 (Rule: image)", "6 of 11 steps (55%) done"):
        state.feed(line)
    assert state.status(["p1", "p2"], tmp_path).endswith("passes done 1/2")
    for line in ("rule metrics:", "    jobid: 7", "    wildcards: pass_name=p1"):
        state.feed(line)
    assert state.status(["p1", "p2"], tmp_path, elapsed_s=60.0) == (
        "6/11 steps | running: metrics p1 | passes done 1/2 | about 50 s left")


def test_time_left_weighs_each_rule_by_its_own_duration():
    # Snakemake's job stats: one simulation, two imagings and two level steps, two jobs at a
    # time. The simulation took 300 s and one imaging 60 s; the other imaging has run its
    # expected 60 s already; no level step has finished, so each counts the median of what
    # did (180 s): (0 + 2 x 180) / 2 = 180 s left. The plain pace of steps (2 of 5 in 360 s)
    # would say 540 s.
    state = RunState()
    lines = [(0, "Job stats:"), (0, "job          count"), (0, "---------  -------"),
             (0, "simulate         1"), (0, "image            2"), (0, "levels           2"),
             (0, "all              1"), (0, "total            6"),
             (0, "rule simulate:"), (0, "    jobid: 1"),
             (300, "Finished jobid: 1 (Rule: simulate)"),
             (300, "rule image:"), (300, "    jobid: 2"), (300, "    wildcards: pass_name=p1"),
             (300, "rule image:"), (300, "    jobid: 3"), (300, "    wildcards: pass_name=p2"),
             (360, "Finished jobid: 2 (Rule: image)"), (360, "2 of 5 steps (40%) done")]
    for t, line in lines:
        state.feed(line, now_s=float(t))
    # At 360 s the second imaging has run 60 s of its expected 60 s.
    assert state.time_left_s(360.0, now_s=360.0) == pytest.approx((0 + 2 * 180.0) / 2)


def test_image_threads_keep_every_core_busy(tiny_copy):
    # Scheduling, not physics: while at least as many passes as cores are still to be imaged,
    # each image job takes one thread (its figures and Python work are serial, so two jobs of
    # one thread keep two cores busier than one of two); a lone pass takes every core; a
    # pass whose maps were made with other code or settings is still to be imaged; a
    # cluster's job keeps two unless its profile says otherwise.
    plan = CampaignPlan.load(tiny_copy / "campaign.yaml")
    passes = plan.passes
    assert len(passes) >= 2
    assert plan.image_threads(2, local=True) == 1
    assert plan.image_threads(2 * len(passes), local=True) == 2
    for name in passes[1:]:         # all but the first imaged
        folder = plan.campaign.output / name
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "maps.npz").write_bytes(b"")
    assert plan.image_threads(2, local=True) == 2
    assert plan.image_threads(4, local=True) == 4
    assert plan.image_threads(None, local=True) == plan.image_threads(16, local=False) == 2
    (plan.campaign.output / passes[0]).mkdir(parents=True, exist_ok=True)
    (plan.campaign.output / passes[0] / "maps.npz").write_bytes(b"")
    for name in passes:             # every pass imaged with this code and these settings
        write_settings_record(plan.campaign.output, plan.campaign, "image", name)
    assert plan.image_threads(2, local=True) == 2
    for name in passes:             # ... and after an upgrade of the code
        record = plan.campaign.output / "logs" / "settings" / name / "image.json"
        record.write_text(record.read_text().replace('"code": "', '"code": "old-'))
    assert plan.image_threads(2, local=True) == 1


def test_windows_at_once_fit_the_memory(tiny_copy, monkeypatch):
    # One window per thread, as many as fit in half the machine's memory, at least one.
    from flyover.pipeline import _resources
    from flyover.pipeline.context import load_pass
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    inputs = load_pass(campaign, "p1")
    need = _resources._window_need_bytes(campaign, inputs)
    monkeypatch.setattr(_resources, "_memory_bytes", lambda: 100 * need)
    assert _resources.windows_at_once(campaign, inputs, 4) == 4
    monkeypatch.setattr(_resources, "_memory_bytes", lambda: 5 * need)
    assert _resources.windows_at_once(campaign, inputs, 4) == 2
    monkeypatch.setattr(_resources, "_memory_bytes", lambda: 1.5 * need)
    assert _resources.windows_at_once(campaign, inputs, 4) == 1


def test_reading_the_workflow_leaves_pyplot_for_the_first_figure():
    # Snakemake's reading of the Snakefile imports every step (for its reads and settings):
    # matplotlib.pyplot (0.3 s) waits for the first figure a step draws.
    import subprocess
    import sys
    code = ("import sys\n"
            "from flyover.pipeline import stages\n"
            "from flyover.workflow import plan\n"
            "assert stages('pass') and stages('campaign')\n"
            "print('matplotlib.pyplot' in sys.modules)\n"
            "from flyover.io.figures import pyplot\n"
            "print(pyplot().get_backend().lower())")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["False", "agg"]
