"""The real Snakemake on a tiny campaign (slow: a run of it takes up to two minutes)."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import ROOT, edit_campaign, planned, snakemake, snakemake_command




DIGESTS_BEFORE: dict = {}


def input_digests(folder) -> dict:
    from flyover.io.config import load_campaign
    from flyover.io.digest import file_digest
    return {str(f): file_digest(f) for f in load_campaign(folder / "campaign.yaml").input_files()}


@pytest.fixture(scope="module")
def finished_run(tiny_campaign_dir, tmp_path_factory):
    """The tiny campaign run to completion once (reused by the re-run checks, copied each time)."""
    folder = tmp_path_factory.mktemp("run") / "campaign"
    shutil.copytree(tiny_campaign_dir, folder)
    DIGESTS_BEFORE.update(input_digests(folder))
    res = snakemake("--configfile", str(folder / "campaign.yaml"), cwd=folder)
    assert res.returncode == 0, res.stderr[-3000:]
    return folder


@pytest.fixture
def run_copy(finished_run, tmp_path):
    """A copy of the finished run (file times kept) for checks that change input files."""
    dest = tmp_path / "campaign"
    shutil.copytree(finished_run, dest, symlinks=True)
    return dest


@contextmanager
def edited_config(folder, change):
    """Edit the finished run's campaign file in place, then put it back (text and time).

    Snakemake keeps its records per absolute output path, so a check on parameters must use
    the folder that was run, not a copy.
    """
    path = folder / "campaign.yaml"
    text, stat = path.read_text(), path.stat()
    data = yaml.safe_load(text)
    change(data)
    path.write_text(yaml.safe_dump(data))
    try:
        yield
    finally:
        path.write_text(text)
        os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns))


@pytest.mark.slow
def test_user_campaign_runs_alone(finished_run):
    # --configfile selects the user's campaign; the demo's passes never appear.
    log = "\n".join(p.read_text() for p in (finished_run / ".snakemake" / "log").glob("*.log"))
    assert "pass-1" not in log and "simulate_demo" not in log
    # Every pass folder holds exactly the files the steps declare (flyover.io.results.steps):
    # the rules, the run's progress and the report take their names from that one list.
    from flyover.io.results import listen, maps
    from flyover.io.results.steps import pass_files
    expected = set(pass_files()) | {maps.FIGURE_FOLDER, listen.FOLDER}
    for p in ("p1", "p2"):
        held = {f.name for f in (finished_run / "results" / p).iterdir()}
        assert held == expected, held ^ expected
        assert (finished_run / "results" / "logs" / p / "image.log").exists()
        assert (finished_run / "results" / "benchmarks" / p / "image.tsv").exists()
    assert (finished_run / "results" / "report.html").exists()
    assert planned(finished_run) == set()
    # Run on this machine, every step ran in a fork of the warm process, and succeeded
    # (flyover.workflow.warm_start; the Slurm run, cold, gives the same files).
    from flyover.pipeline import stages
    from flyover.workflow.warm_start import available
    if available():
        served = (finished_run / "results" / "logs" / "warm-start.log").read_text()
        steps = [f"stage {s} --pass {p}" for s in stages("pass") for p in ("p1", "p2")]
        steps += ["stage-campaign signoff", "stage-campaign report"]
        for step in steps:
            assert re.search(rf"status 0 .* {re.escape(step)}( |$)", served, flags=re.M), step


@pytest.mark.slow
def test_inputs_unchanged_by_runs_good_or_failing(finished_run, run_copy):
    # Inputs are opened read-only and never rewritten: digests before and after a full run,
    # and after a run that fails in its imaging (a calibration with a channel missing).
    assert input_digests(finished_run) == DIGESTS_BEFORE
    cal = run_copy / "p2" / "calibration.csv"
    cal.write_text("\n".join(cal.read_text().splitlines()[:-1]) + "\n")
    (run_copy / "p2" / "track.csv").touch()
    before = input_digests(run_copy)
    res = snakemake("--configfile", str(run_copy / "campaign.yaml"), cwd=run_copy)
    assert res.returncode != 0
    assert "calibration is missing channels" in (run_copy / "results" / "logs" / "p2" /
                                                 "align.log").read_text()
    assert input_digests(run_copy) == before
    # The failed step kept its previous outputs (Snakemake's update() flag: restored on failure).
    assert result_digests(run_copy) == result_digests(finished_run)


def result_digests(folder) -> dict:
    """Digest of every result file, logs and benchmarks aside (they record the runs)."""
    from flyover.io.digest import file_digest
    out = folder / "results"
    return {str(p.relative_to(out)): file_digest(p) for p in sorted(out.rglob("*"))
            if p.is_file() and p.parts[len(out.parts)] not in ("logs", "benchmarks", ".snakemake")}


@pytest.mark.slow
def test_revised_track_reruns_that_pass_only(run_copy):
    track = run_copy / "p1" / "track.csv"
    lines = track.read_text().splitlines()
    # A revised (post-processed) track: the same fixes, heights 2 cm higher.
    head, rows = lines[0], lines[1:]
    cols = head.split(",")
    k = cols.index("height_m")
    revised = [",".join(f"{float(v) + 0.02:.9f}" if i == k else v
                        for i, v in enumerate(r.split(","))) for r in rows]
    track.write_text("\n".join([head] + revised) + "\n")
    assert planned(run_copy) == {("align", "p1"), ("image", "p1"), ("levels", "p1"),
                                 ("qc", "p1"), ("metrics", "p1"), ("tones", "p1"),
                                 ("trackcheck", "p1"), ("narrowband", "p1"),
                                 ("listen", "p1"), ("page", "p1"),
                                 ("campaign_summary", ""),
                                 ("hemispheres", ""), ("signoff", ""), ("viewer", ""),
                                 ("store", ""), ("report", "")}


@pytest.mark.slow
def test_reference_distance_reruns_levels_not_imaging(finished_run):
    with edited_config(finished_run,
                       lambda d: d["analysis"].update(reference_distance_m=100.0)):
        # The reconstructed metrics use the reference flight's default height: they follow.
        assert planned(finished_run) == {("levels", "p1"), ("levels", "p2"), ("metrics", "p1"),
                                         ("metrics", "p2"), ("tones", "p1"), ("tones", "p2"),
                                         ("trackcheck", "p1"), ("trackcheck", "p2"),
                                         # its figure marks the tones' frequencies
                                         ("narrowband", "p1"), ("narrowband", "p2"),
                                         ("page", "p1"), ("page", "p2"),
                                         ("campaign_summary", ""),
                                         ("hemispheres", ""), ("signoff", ""), ("viewer", ""),
                                         ("store", ""), ("report", "")}


@pytest.mark.slow
def test_one_pass_atmosphere_reruns_that_pass(finished_run):
    with edited_config(finished_run,
                       lambda d: d["passes"]["p2"]["atmosphere"].update(temperature_c=16.0)):
        assert planned(finished_run) == {("align", "p2"), ("image", "p2"), ("levels", "p2"),
                                         ("qc", "p2"), ("metrics", "p2"), ("tones", "p2"),
                                         ("trackcheck", "p2"), ("narrowband", "p2"),
                                         ("listen", "p2"), ("page", "p2"),
                                         ("campaign_summary", ""),
                                         ("hemispheres", ""), ("signoff", ""), ("viewer", ""),
                                         ("store", ""), ("report", "")}


@pytest.mark.slow
def test_added_pass_runs_alone_then_summary(finished_run):
    with edited_config(finished_run,
                       lambda d: d["passes"].update(p3=dict(d["passes"]["p2"], label="b"))):
        assert planned(finished_run) == {("align", "p3"), ("image", "p3"), ("levels", "p3"),
                                         ("qc", "p3"), ("metrics", "p3"), ("tones", "p3"),
                                         ("trackcheck", "p3"), ("narrowband", "p3"),
                                         ("listen", "p3"), ("page", "p3"),
                                         ("campaign_summary", ""),
                                         ("hemispheres", ""), ("signoff", ""), ("viewer", ""),
                                         ("store", ""), ("report", "")}


@pytest.mark.slow
def test_band_range_reruns_the_alignment(finished_run):
    # The alignment's channel checks use the band range: a changed range must re-run it, not
    # only the imaging (the stale exclusions would otherwise be used).
    with edited_config(finished_run, lambda d: d["analysis"].update(band_min_hz=400)):
        assert {("align", "p1"), ("align", "p2")} <= planned(finished_run)


def flyover_plan(folder, campaign: str, python: str = sys.executable) -> str:
    res = subprocess.run([python, "-m", "flyover", "plan", campaign], cwd=folder,
                         capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    return res.stdout


@pytest.mark.slow
def test_reruns_depend_on_content_only(finished_run, tmp_path):
    # Not on the interpreter's path, the campaign file's name or folder, the working folder, or
    # the order of keys in the file.
    python3 = Path(sys.executable).with_name("python3")
    assert "nothing to redo" in flyover_plan(finished_run, "campaign.yaml")
    assert "nothing to redo" in flyover_plan(tmp_path, str(finished_run / "campaign.yaml"),
                                             str(python3))
    original = finished_run / "campaign.yaml"
    data = yaml.safe_load(original.read_text())
    copies = {"copy of campaign.yaml": original.read_text(),
              "renamed.yaml": original.read_text(),
              "reordered.yaml": yaml.safe_dump(dict(reversed(list(data.items()))),
                                               sort_keys=False)}
    try:
        for name, text in copies.items():
            (finished_run / name).write_text(text)
            assert "nothing to redo" in flyover_plan(finished_run, name), name
    finally:
        for name in copies:
            (finished_run / name).unlink(missing_ok=True)


@pytest.mark.slow
def test_bad_campaign_stops_with_message(tiny_copy):
    path = tiny_copy / "campaign.yaml"
    path.write_text(path.read_text().replace("window_s", "windowsize_s"))
    res = snakemake("--configfile", str(path), "-n", cwd=tiny_copy)
    assert res.returncode != 0
    assert "unknown key 'analysis.windowsize_s'" in res.stderr
    assert "Traceback" not in res.stderr


@pytest.mark.slow
def test_slurm_profile_dry_run(finished_run):
    # The documented SLURM profile resolves (snakemake-executor-plugin-slurm; no cluster needed
    # for a dry-run).
    pytest.importorskip("snakemake_executor_plugin_slurm")
    path = finished_run / "campaign.yaml"
    res = snakemake("--profile", str(ROOT / "config" / "profiles" / "slurm"), "--configfile",
                    str(path), "-n", "--forceall", cwd=finished_run)
    assert res.returncode == 0, res.stderr[-2000:]
    assert re.search(r"image\s+2", res.stdout + res.stderr)


@pytest.mark.slow
def test_report_is_self_contained(finished_run):
    results = finished_run / "results"
    text = (results / "report.html").read_text()
    # The report links to each pass's page; the pages hold the pass's details.
    pages = {p: (results / p / "pass.html").read_text() for p in ("p1", "p2")}
    for page in (text, *pages.values()):
        assert not re.search(r"""(src|href)\s*=\s*["'](https?:|//)""", page)
        assert "<script" not in page and "<link" not in page
        assert "certification standards" in page and page.count("aviation rules") == 1
        assert str(finished_run) not in page
        # No number reads 'nan'; every declared figure was found under its declared name.
        assert not re.search(r"\bnan\b", page, re.IGNORECASE)
        assert "not available)" not in page
    assert 'href="p1/pass.html"' in text and 'href="p2/pass.html"' in text
    assert 'id="campaign-summary"' in text and "<table>" in text
    # The summary's numbers per pass and label, and file paths relative to the campaign file.
    for fragment in ("LASmax measured", "reference LASmax / LAE", "overall A at 90 deg"):
        assert fragment in text, fragment
    for name, page in pages.items():
        assert page.count('class="pass"') == 1 and f'data-pass="{name}"' in page
        for fragment in ("Recorders and clocks", "Reconstructed per component",
                         "Source maps", "Rotor tones", "../report.html#signoff"):
            assert fragment in page, fragment
    # Every pass has a status in the sign-off table and beside its link.
    assert 'id="signoff"' in text and text.count('data-status="') == 2
    from flyover.io.results.signoff import read_signoff_json
    assert set(read_signoff_json(finished_run / "results")) == {"p1", "p2"}
    signed = pd.read_csv(finished_run / "results" / "signoff.csv")
    assert set(signed["status"]) <= {"accepted", "flagged", "rejected"} and len(signed) == 2


# Without the background services, Chromium's connections are refused by a closed network.
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update",
                  "--disable-sync"]


@pytest.mark.slow
def test_report_opens_in_headless_chromium(finished_run, tmp_path):
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("Chromium is not installed (Debian package 'chromium'; .ci/run installs it)")
    report = finished_run / "results" / "report.html"
    res = subprocess.run([browser, "--headless", *CHROMIUM_FLAGS,
                          f"--user-data-dir={tmp_path / 'profile'}", "--dump-dom",
                          report.as_uri()], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr[-2000:]
    assert "Campaign summary" in res.stdout and 'data-pass="p2"' in res.stdout



@pytest.mark.slow
def test_viewer_in_headless_chromium(finished_run, tmp_path):
    # The results viewer in a real browser: it loads without a console error, asks for
    # nothing outside the results folder, the window slider changes the map, and a click on a
    # region shows its spectrum, its directivity and its sound.
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("Chromium is not installed (Debian package 'chromium'; .ci/run installs it)")
    from playwright.sync_api import sync_playwright
    results = finished_run / "results"
    errors, requests = [], []
    with sync_playwright() as play:
        chromium = play.chromium.launch(executable_path=browser, args=CHROMIUM_FLAGS)
        page = chromium.new_page(viewport={"width": 1100, "height": 1000})
        page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.on("request", lambda r: requests.append(r.url))
        page.goto((results / "viewer.html").as_uri())
        page.wait_for_function("() => window.Bokeh && Bokeh.documents.length > 0")
        model = "name => Bokeh.documents[0].get_model_by_name(name)"
        page.wait_for_function(f"() => ({model})('window_slider').title.includes('polar')")
        before = page.evaluate(f"() => Array.from(({model})('map_source').data.image[0])")
        title = page.evaluate(f"() => ({model})('window_slider').title")
        # Step one window on with the keyboard, as a user would.
        page.locator(".noUi-handle").first.focus()
        page.keyboard.press("ArrowRight")
        page.wait_for_function(f"t => ({model})('window_slider').title !== t", arg=title)
        after = page.evaluate(f"() => Array.from(({model})('map_source').data.image[0])")
        assert after != before
        # Click the front region's centre on the map.
        x, y = page.evaluate(f"""() => {{
            const view = Bokeh.index.find_one(({model})('map_plot'));
            const box = view.canvas_view.el.getBoundingClientRect();
            return [box.left + view.frame.x_scale.compute(1.0),
                    box.top + view.frame.y_scale.compute(0.0)];
        }}""")
        page.mouse.click(x, y)
        page.wait_for_function(f"() => ({model})('spectrum_plot').title.text.startsWith('front')")
        spectrum = page.evaluate(f"() => ({model})('spectrum').data.level_db.length")
        directivity = page.evaluate(f"() => ({model})('directivity').data.level_db.length")
        dense = page.evaluate(f"() => ({model})('dense_line').data.psd_db.length")
        sounds = page.evaluate(f"() => ({model})('audio').text")
        # The region's sound plays from the page's folder (the browser decodes the WAV file).
        duration_s = page.locator("audio").first.evaluate(
            "el => new Promise(done => { el.onloadedmetadata = () => done(el.duration); "
            "el.load(); })")
        page.screenshot(path=str(tmp_path / "viewer.png"), full_page=True)
        chromium.close()
    assert spectrum >= 1 and directivity >= 2
    narrowband = pd.read_csv(results / "p1" / "narrowband.csv")
    assert dense == len(narrowband) // narrowband.groupby(["window", "region"]).ngroups
    assert "listen/region-01-front.wav" in sounds and "center-microphone.wav" in sounds
    listened = pd.read_csv(results / "p1" / "listen.csv").set_index("region")
    assert duration_s == pytest.approx(listened.loc["front", "duration_s"], abs=1e-3)
    assert not errors, errors
    outside = [u for u in requests if not u.startswith(results.as_uri() + "/")]
    assert not outside, outside



@pytest.mark.slow
def test_compare_against_the_scenarios_truth(finished_run):
    # The tiny campaign against what its simulated sources emit (their band power at 1 m):
    # over the resolved levels, measured minus true is unbiased within 0.5 dB and the 90 %
    # intervals hold the truth about nine times in ten (at least 80 % of some 140 levels:
    # a binomial 90 % falls below that less than once in ten thousand).
    from flyover.io.results.comparison import MEASURED_MINUS_TRUE
    from flyover.pipeline._truth import truth_summary
    res = subprocess.run([sys.executable, "-m", "flyover", "compare", "campaign.yaml",
                          "--truth", "scenario.yaml"], cwd=finished_run, capture_output=True,
                         text=True)
    assert res.returncode == 0, res.stderr
    assert "the 90 % interval holds the truth for" in res.stdout
    table = MEASURED_MINUS_TRUE.read(finished_run / "results" / "comparisons" / "truth")
    # The rear region has a source but no level given in this campaign: no row of it.
    assert set(table["region"]) == {"front", "total"}
    summary = truth_summary(table)
    assert summary["n"] >= 100
    assert abs(summary["mean_db"]) < 0.5 and summary["within"] >= 0.8, summary
    # Labels and --truth do not go together; without either there is nothing to compare.
    res = subprocess.run([sys.executable, "-m", "flyover", "compare", "campaign.yaml"],
                         cwd=finished_run, capture_output=True, text=True)
    assert res.returncode == 2 and "nothing to compare" in res.stderr


def _tables(folder):
    out = folder / "results"
    names = ["campaign_levels.csv", "campaign_overall.csv"] + [
        f"{p}/{f}" for p in ("p1", "p2")
        for f in ("levels.csv", "levels_overall.csv", "windows.csv", "region_power.csv",
                  "spectra.csv", "directivity.csv")]
    return {n: (out / n).read_bytes() for n in names}


def inputs_only(finished_run, dest):
    """A copy of the run's inputs without its results or Snakemake records."""
    shutil.copytree(finished_run, dest, symlinks=True,
                    ignore=shutil.ignore_patterns("results", ".snakemake"))
    return dest


@pytest.mark.slow
def test_rerun_is_byte_identical(finished_run, tmp_path):
    # Identical inputs and config give byte-identical tables (fixed seeds, fixed float formats,
    # no timestamps in data files).
    again = inputs_only(finished_run, tmp_path / "again")
    res = snakemake("--configfile", str(again / "campaign.yaml"), cwd=again)
    assert res.returncode == 0, res.stderr[-2000:]
    assert _tables(again) == _tables(finished_run)


@pytest.mark.slow
def test_killed_run_resumes_to_the_same_results(finished_run, tmp_path):
    # Kill the workflow while it images, then resume: the resumed run completes, and its
    # results equal those of the uninterrupted run. Every output is written to a temporary
    # name and renamed, so a kill leaves no half-written file behind.
    import signal
    import time
    folder = inputs_only(finished_run, tmp_path / "killed")
    cmd = snakemake_command("--configfile", str(folder / "campaign.yaml"))
    proc = subprocess.Popen(cmd, cwd=folder, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and not list((folder / "results").rglob("maps/window-*.png")):
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    assert not (folder / "results" / "report.html").exists()
    leftovers = [p for p in (folder / "results").rglob("*") if ".part" in p.name]
    for p in leftovers:  # a killed rename-in-progress leaves only a hidden temporary
        assert p.name.startswith(".")
    # A hard kill leaves Snakemake's lock and incomplete outputs behind: `flyover run` clears
    # what is stale and resumes in one go.
    res = subprocess.run([sys.executable, "-m", "flyover", "run", "campaign.yaml"], cwd=folder,
                         capture_output=True, text=True)
    assert res.returncode == 0, res.stderr[-2000:]
    assert "passes done: 2 of 2" in res.stderr
    assert _tables(folder) == _tables(finished_run)


@pytest.mark.slow
def test_flyover_plan_explains_reruns(finished_run, monkeypatch, capsys):
    from flyover.cli import main
    monkeypatch.chdir(finished_run)
    assert main(["plan", str(finished_run / "campaign.yaml")]) == 0
    assert "nothing to redo" in capsys.readouterr().out
    with edited_config(finished_run,
                       lambda d: d["analysis"].update(reference_distance_m=150.0)):
        assert main(["plan", str(finished_run / "campaign.yaml")]) == 0
        out = capsys.readouterr().out
    # Each step records the settings it ran with: the plan names the one that changed.
    assert "pass p1:" in out and "levels           changed: analysis.reference_distance_m" in out
    assert "image" not in out


@pytest.mark.slow
def test_any_legal_output_path_works(tiny_campaign_dir, tmp_path):
    # Spaces, brackets, quotes and non-ASCII letters in the folder names; `flyover run` ends
    # with its summary, and Snakemake's records live with the results.
    folder = tmp_path / "run (2) it's \"q\" Ærø"
    shutil.copytree(tiny_campaign_dir, folder)
    edit_campaign(folder, lambda d: d.update(output="my results [v1]"))
    res = subprocess.run([sys.executable, "-m", "flyover", "run", "campaign.yaml"], cwd=folder,
                         capture_output=True, text=True)
    assert res.returncode == 0, res.stderr[-3000:]
    out = folder / "my results [v1]"
    assert (out / "report.html").exists() and (out / "p2" / "levels.csv").exists()
    assert (out / ".snakemake" / "metadata").is_dir()
    for line in ("passes done: 2 of 2", "  p1: done", f"report: {out / 'report.html'}",
                 "wall time:"):
        assert line in res.stderr
    assert "Traceback" not in res.stderr
    strays = {p.name for p in folder.iterdir()} - {p.name for p in tiny_campaign_dir.iterdir()}
    assert strays <= {"my results [v1]"}


# The single-node test cluster of .ci/slurm-up: 2 cores, no account database (job states from
# squeue), quick status checks. Everything else comes from the project's SLURM profile.
SLURM_TEST_ARGS = ["--slurm-status-command", "squeue", "--slurm-no-account",
                   "--slurm-init-seconds-before-status-checks", "2",
                   "--seconds-between-status-checks", "3", "--set-threads", "image=2"]


@pytest.fixture(scope="module")
def slurm_cluster():
    """Skip, saying why, unless a SLURM node takes jobs (.ci/run starts one)."""
    if shutil.which("sbatch") is None or shutil.which("sinfo") is None:
        pytest.skip("SLURM is not installed: .ci/run installs and starts a single-node cluster "
                    "with .ci/slurm-up (Debian's slurm-wlm and munge, as root)")
    states = subprocess.run(["sinfo", "-h", "-o", "%t"], capture_output=True, text=True)
    if not re.search(r"idle|mix|alloc", states.stdout):
        pytest.skip("no SLURM node is up: run .ci/slurm-up (as root) first")


def flyover_run_on_slurm(folder, *extra):
    return subprocess.run([sys.executable, "-m", "flyover", "run", "campaign.yaml", "--profile",
                           str(ROOT / "config" / "profiles" / "slurm"), "--",
                           *SLURM_TEST_ARGS, *extra], cwd=folder, capture_output=True,
                          text=True, timeout=1500)


def completed_on_slurm(work_dir) -> set[str]:
    """SLURM job ids that Slurm itself records as finished in a folder (the job-completion
    file of the test cluster; empty when the cluster keeps no such file)."""
    config = subprocess.run(["scontrol", "show", "config"], capture_output=True, text=True).stdout
    where = re.search(r"JobCompLoc\s*=\s*(\S+)", config)
    if "jobcomp/filetxt" not in config or where is None or not Path(where.group(1)).exists():
        return set()
    return set(re.findall(rf"JobId=(\d+) .*WorkDir={re.escape(str(work_dir))} ",
                          Path(where.group(1)).read_text()))


@pytest.mark.slow
def test_campaign_on_slurm_equals_the_local_run(slurm_cluster, finished_run, tmp_path):
    folder = inputs_only(finished_run, tmp_path / "on slurm")
    res = flyover_run_on_slurm(folder)
    assert res.returncode == 0, res.stderr[-3000:]
    out = folder / "results"
    log = (out / "logs" / "workflow.log").read_text()
    # Every job but the final target went through sbatch (one submission per job or group of
    # jobs), and Slurm recorded each one.
    submitted = re.findall(r"has been submitted with SLURM jobid (\d+)", log)
    jobs = len(re.findall(r"^rule \w+:$", log, flags=re.M)) + log.count("] Group job ")
    assert len(submitted) == jobs >= 5
    assert not re.search(r"^localrule (?!all:)", log, flags=re.M)
    recorded = completed_on_slurm(out)
    if recorded:
        assert set(submitted) <= recorded
    # The results equal the local run's, to the byte.
    assert _tables(folder) == _tables(finished_run)
    from flyover.io.results.maps import read_maps
    for p in ("p1", "p2"):
        a, b = read_maps(out / p), read_maps(finished_run / "results" / p)
        assert all(np.array_equal(a[k], b[k]) for k in a)
    # A second run submits nothing.
    again = flyover_run_on_slurm(folder)
    assert again.returncode == 0, again.stderr[-2000:]
    log = (out / "logs" / "workflow.log").read_text()
    assert "has been submitted" not in log and "Nothing to be done" in log


@pytest.mark.slow
def test_job_over_its_memory_limit_is_reported_as_such(slurm_cluster, finished_run, tmp_path):
    folder = inputs_only(finished_run, tmp_path / "small memory")
    res = flyover_run_on_slurm(folder, "--set-resources", "image:mem_mb=60", "--retries", "0")
    assert res.returncode == 1
    assert re.search(r"step image of pass p[12] was stopped by the scheduler: it needed more "
                     r"than its memory limit of 60 MiB", res.stderr), res.stderr[-2000:]
    assert "set-resources: image: mem_mb" in res.stderr and "Traceback" not in res.stderr


@pytest.mark.slow
def test_compare_command_on_a_finished_run(finished_run, tmp_path):
    # The command end to end: label 'a' of the finished run against itself named through a
    # second campaign file. Every difference is zero and no interval excludes it; the tables
    # and the figure are where the command says.
    from flyover.io.results.comparison import COMPARED_LEVELS, COMPARED_OVERALL
    other = finished_run / "same-again.yaml"
    shutil.copy(finished_run / "campaign.yaml", other)
    try:
        res = subprocess.run([sys.executable, "-m", "flyover", "compare", "campaign.yaml",
                              other.name, "--labels", "a", "a"], cwd=finished_run,
                             capture_output=True, text=True)
    finally:
        other.unlink()
    assert res.returncode == 0, res.stderr[-2000:]
    folder = Path(res.stdout.strip().splitlines()[-1].split(": ", 1)[1])
    assert folder.parent.name == "comparisons"
    for table in (COMPARED_LEVELS.read(folder), COMPARED_OVERALL.read(folder)):
        given = table[np.isfinite(table["difference_db"])]
        assert len(given) and np.allclose(given["difference_db"], 0.0, atol=1e-9)
        assert not table["differs"].any()
    assert "A-weighted at 90 deg: +0.0 dB" in res.stdout


@pytest.mark.slow
def test_a_requested_comparison_runs_as_its_own_step(finished_run):
    # p2 relabelled 'b' and 'b' against 'a' asked for: the comparison step runs, then what
    # groups passes by label, p2's page (it names its label) and the report; no pass is
    # re-imaged. The step's files land
    # under comparisons/a--b with one pass a side, so differences without intervals.
    from flyover.io.results.comparison import COMPARED_OVERALL

    def ask(d):
        d["passes"]["p2"]["label"] = "b"
        d["analysis"]["comparisons"] = [["a", "b"]]
    with edited_config(finished_run, ask):
        assert planned(finished_run) == {("compare", ""), ("campaign_summary", ""),
                                         ("hemispheres", ""), ("signoff", ""), ("viewer", ""),
                                         ("store", ""), ("report", ""), ("page", "p2")}
        res = subprocess.run([sys.executable, "-m", "flyover", "stage-campaign", "compare",
                              "--campaign", "campaign.yaml"], cwd=finished_run,
                             capture_output=True, text=True)
        assert res.returncode == 0, res.stderr[-2000:]
    table = COMPARED_OVERALL.read(finished_run / "results" / "comparisons" / "a--b")
    assert len(table) and table["ci90_low_db"].isna().all() and not table["differs"].any()
    assert (table["passes_a"] == "p1").all() and (table["passes_b"] == "p2").all()
