"""`flyover run`: check the campaign, run the workflow with live progress, end with a summary.

Snakemake runs in the campaign's output folder (its records and lock live with the results), its
own log goes to ``<output>/logs/workflow.log``, and what the user sees is flyover's: the step
running, passes done, windows done within imaging, and at the end the passes, their warnings,
the report's path and the wall time. A failing job is reported with its own message (the end of
its log, without a traceback) and the log's path.
"""

from __future__ import annotations

import fcntl
import queue
import re
import shutil
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from flyover.io.results.alignment import read_alignment
from flyover.io.results.levels import LEVELS
from flyover.io.results.signoff import SIGNOFF
from flyover.io.results.windows import NO_WINDOW, WINDOWS
from flyover.io.results import report as report_file
from flyover.io.results.steps import pass_steps_done
from flyover.campaign import Campaign
from flyover.model.errors import FlyoverInputError

RULES = Path(__file__).resolve().parent / "rules" / "main.smk"
LOG_NAME = "workflow.log"
_STEPS = re.compile(r"^(\d+) of (\d+) steps")
_JOB = re.compile(r"^(?:local)?rule (\w+):$")
_FINISHED = re.compile(r"^Finished jobid: (\d+) \(Rule: (\w+)\)")
_ERROR = re.compile(r"^Error in rule (\w+):$")
_WINDOWS = re.compile(r"imaging: (\d+)/(\d+)")
_JOB_COUNT = re.compile(r"^(\w+)\s+(\d+)$")


def snakemake_command(campaign_file: Path, *extra: str) -> list[str]:
    """The Snakemake call of a campaign (flyover's own rules, this interpreter)."""
    return [sys.executable, "-m", "snakemake", "--snakefile", str(RULES), "--configfile",
            str(Path(campaign_file).resolve()), *extra]


@dataclass
class _Job:
    rule: str
    pass_name: str = ""
    logs: list = field(default_factory=list)     # the step's log, then a scheduler's log
    resources: dict = field(default_factory=dict)
    message: str = ""

    @property
    def log(self) -> str:
        return self.logs[0] if self.logs else ""


@dataclass
class RunState:
    """What the Snakemake log has said so far."""

    jobs: dict = field(default_factory=dict)        # jobid -> _Job, running or finished
    running: set = field(default_factory=set)
    done_steps: int = 0
    total_steps: int = 0
    failed: list = field(default_factory=list)      # _Job
    passes_done: set = field(default_factory=set)
    planned: dict = field(default_factory=dict)     # rule -> jobs (Snakemake's job stats)
    durations: dict = field(default_factory=dict)   # rule -> seconds of its finished jobs
    started_s: dict = field(default_factory=dict)   # jobid -> when it started
    most_running: int = 1
    _current: _Job | None = None
    _current_id: str = ""
    _in_stats: bool = False

    def feed(self, line: str, now_s: float | None = None) -> None:
        """Take one line of Snakemake's log (``now_s``: when it came, monotonic seconds)."""
        now_s = time.monotonic() if now_s is None else now_s
        text = line.strip()
        if text == "Job stats:":
            self._in_stats = True
        elif self._in_stats and (m := _JOB_COUNT.match(text)):
            if m.group(1) == "total":
                self._in_stats = False
            elif m.group(1) != "all":
                self.planned[m.group(1)] = int(m.group(2))
        elif m := _JOB.match(text):
            self._current = _Job(m.group(1))
            self._current_id = ""
        elif m := _ERROR.match(text):
            self._current = _Job(m.group(1))
            self.failed.append(self._current)
        elif self._current is not None and text.startswith("jobid:"):
            self._current_id = text.split(":", 1)[1].strip()
            if self._current not in self.failed:
                self.jobs[self._current_id] = self._current
                self.running.add(self._current_id)
                self.started_s[self._current_id] = now_s
                self.most_running = max(self.most_running, len(self.running))
            elif self._current_id in self.jobs:  # an error block: what the job was started with
                started = self.jobs[self._current_id]
                self._current.resources = started.resources
                self._current.pass_name = self._current.pass_name or started.pass_name
                self.running.discard(self._current_id)
        elif self._current is not None and text.startswith("resources:"):
            for part in text[len("resources:"):].split(","):
                key, _, value = part.strip().partition("=")
                self._current.resources[key] = value
        elif self._current is not None and text.startswith("message:"):
            self._current.message = text[len("message:"):].strip()
        elif self._current is not None and text.startswith("wildcards:"):
            for part in text[len("wildcards:"):].split(","):
                key, _, value = part.strip().partition("=")
                if key == "pass_name":
                    self._current.pass_name = value
        elif self._current is not None and text.startswith("log:"):
            self._current.logs = [p.strip() for p in
                                  text[4:].split(" (check log")[0].split(", ") if p.strip()]
        elif m := _FINISHED.match(text):
            self.running.discard(m.group(1))
            if m.group(1) in self.started_s:
                self.durations.setdefault(m.group(2), []).append(
                    now_s - self.started_s[m.group(1)])
        elif m := _STEPS.match(text):
            self.done_steps, self.total_steps = int(m.group(1)), int(m.group(2))

    def status(self, passes: list[str], out: Path, elapsed_s: float | None = None,
               now_s: float | None = None) -> str:
        """One line: steps, the running steps (windows done within imaging), passes done and,
        ``elapsed_s`` into the run, an estimate of the time left."""
        parts = []
        for jid in sorted(self.running):
            job = self.jobs[jid]
            text = f"{job.rule} {job.pass_name}".strip()
            if job.rule == "image" and job.log:
                text += _windows_done(Path(job.log))
            parts.append(text)
        finished = {j.pass_name for k, j in self.jobs.items() if k not in self.running}
        busy = {self.jobs[k].pass_name for k in self.running}
        # A pass once done stays counted: a later step of it (a check, the metrics) does not
        # take the count back.
        self.passes_done |= {p for p in passes if p in finished and p not in busy
                             and pass_steps_done(out / p)}
        steps = f"{self.done_steps}/{self.total_steps} steps" if self.total_steps else "starting"
        text = (f"{steps} | running: {', '.join(parts) or '-'} | passes done "
                f"{len(self.passes_done & set(passes))}/{len(passes)}")
        left = self.time_left_s(elapsed_s, now_s)
        return text if left is None else f"{text} | {_duration_text(left)} left"

    def time_left_s(self, elapsed_s: float | None, now_s: float | None = None) -> float | None:
        """The time left: each job still to run at its rule's mean duration so far (the mean
        of all rules' where its own has none finished yet), running ones less their time
        already spent, shared over as many jobs as have run at once. Before Snakemake's job
        stats are seen, the steps left at the pace of the steps done (None before the first)."""
        if elapsed_s is None or not self.done_steps or not self.total_steps:
            return None
        observed = [d for v in self.durations.values() for d in v]
        if not self.planned or not observed:
            return elapsed_s / self.done_steps * (self.total_steps - self.done_steps)
        now_s = time.monotonic() if now_s is None else now_s
        typical = float(np.median(observed))

        def expected(rule):
            own = self.durations.get(rule)
            return float(np.mean(own)) if own else typical

        left = 0.0
        for rule, count in self.planned.items():
            running = [j for j in self.running if self.jobs[j].rule == rule]
            waiting = count - len(self.durations.get(rule, [])) - len(running)
            left += max(waiting, 0) * expected(rule)
            left += sum(max(expected(rule) - (now_s - self.started_s.get(j, now_s)), 0.0)
                        for j in running)
        return left / self.most_running


def _duration_text(seconds: float) -> str:
    """'about 40 s' below two minutes, else 'about 7 min'."""
    if seconds < 120:
        return f"about {max(5, int(round(seconds / 5)) * 5)} s"
    return f"about {int(round(seconds / 60))} min"


def _windows_done(log: Path) -> str:
    try:
        tail = log.read_text(errors="replace").splitlines()[-3:]
    except OSError:
        return ""
    for line in reversed(tail):
        if m := _WINDOWS.search(line):
            return f" (window {m.group(1)}/{m.group(2)})"
    return ""


_OVER_MEMORY = re.compile(r"exceeded memory limit \((\d+) > (\d+)\)")


def scheduler_stop(job: _Job) -> str:
    """Why a scheduler stopped a job (its memory or time limit), in flyover's words, or ""."""
    texts = [job.message]
    for log in job.logs[1:]:
        try:
            texts.append(Path(log).read_text(errors="replace"))
        except OSError:
            continue
    text = "\n".join(texts)
    where = f"step {job.rule}" + (f" of pass {job.pass_name}" if job.pass_name else "")
    if m := _OVER_MEMORY.search(text):
        used, limit = (int(v) / 2 ** 20 for v in m.groups())
        return (f"{where} was stopped by the scheduler: it needed more than its memory limit of "
                f"{limit:.0f} MiB ({used:.0f} MiB when stopped)\n  raise it in the profile: "
                f"set-resources: {job.rule}: mem_mb: {int(2 * used)}")
    if "OUT_OF_MEMORY" in text or "oom-kill" in text.lower():
        limit = job.resources.get("mem_mb", "?")
        return (f"{where} was stopped by the scheduler for its memory limit ({limit} MB)\n"
                f"  raise it in the profile: set-resources: {job.rule}: mem_mb")
    if "DUE TO TIME LIMIT" in text or "TIMEOUT" in text:
        limit = job.resources.get("runtime", "?")
        return (f"{where} was stopped by the scheduler at its time limit ({limit} min)\n"
                f"  raise it in the profile: set-resources: {job.rule}: runtime")
    return ""


def job_message(log_path: str, max_lines: int = 12) -> str:
    """A failed job's own words: flyover's message, or the last line of a traceback."""
    try:
        lines = Path(log_path).read_text(errors="replace").rstrip().splitlines()
    except OSError:
        return "(its log is empty or missing)"
    for i, line in enumerate(lines):
        if line.startswith("flyover:"):
            return "\n".join(lines[i:i + max_lines])
    if any(line.startswith("Traceback") for line in lines):
        return lines[-1] if lines else ""
    return "\n".join(lines[-max_lines:])


class _RunLock:
    """One `flyover run` per output folder at a time (an OS lock, released even on a kill)."""

    def __init__(self, out: Path):
        self.path = out / ".snakemake" / "flyover-run.lock"

    def __enter__(self):
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self.fh = open(self.path, "w")
        try:
            fcntl.flock(self.fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            self.fh.close()
            raise FlyoverInputError(
                "another flyover run is working on this campaign's results",
                str(self.path.parent.parent), "one run at a time per output folder",
                hint="wait for it to finish, or give the campaign another output folder") from None
        return self

    def __exit__(self, *exc):
        fcntl.flock(self.fh, fcntl.LOCK_UN)
        self.fh.close()


def _clear_leftovers(out: Path, campaign_file: Path) -> None:
    """After a killed run: Snakemake's lock and backups are stale (this run holds the OS lock),
    so remove them; incomplete outputs are redone with --rerun-incomplete."""
    records = out / ".snakemake"
    if records.joinpath("locks").is_dir() and any(records.joinpath("locks").iterdir()):
        subprocess.run(snakemake_command(campaign_file, "--unlock", "--cores", "1"), cwd=out,
                       capture_output=True, text=True)
    shutil.rmtree(records / "backups", ignore_errors=True)


def run_campaign(campaign: Campaign, campaign_file: Path, snakemake_args: list[str], *,
                 verbose: bool = False, stream=None) -> int:
    """Run the workflow; return 0 when all is well, 1 when a step failed, 2 for bad input."""
    stream = stream if stream is not None else sys.stderr
    tty = hasattr(stream, "isatty") and stream.isatty()
    out = Path(campaign.output)
    out.mkdir(parents=True, exist_ok=True)
    passes = list(campaign.passes)
    start = time.perf_counter()
    state = RunState()
    (out / "logs").mkdir(exist_ok=True)
    log_path = out / "logs" / LOG_NAME
    with _RunLock(out):
        _clear_leftovers(out, campaign_file)
        cmd = snakemake_command(campaign_file, "--rerun-incomplete", *snakemake_args)
        with open(log_path, "w", encoding="utf-8") as log:
            proc = subprocess.Popen(cmd, cwd=out, stdout=subprocess.PIPE,
                                    stderr=subprocess.STDOUT, text=True, bufsize=1)
            # Snakemake is quiet while a step runs: a reader thread hands over its lines, so the
            # status line (windows done within imaging) is redrawn every second meanwhile.
            lines: queue.Queue = queue.Queue()
            threading.Thread(target=lambda: [lines.put(x) for x in proc.stdout] + [lines.put(None)],
                             daemon=True).start()
            shown = ""
            while True:
                try:
                    line = lines.get(timeout=1.0)
                except queue.Empty:
                    line = ""
                if line is None:
                    break
                if line:
                    log.write(line)
                    state.feed(line)
                if verbose:
                    stream.write(line)
                elif tty:
                    status = state.status(passes, out, time.perf_counter() - start)
                    if status != shown:
                        stream.write("\r\033[K" + status[:150])
                        stream.flush()
                        shown = status
                elif finished := _FINISHED.match(line.strip()):
                    job = state.jobs.get(finished.group(1))
                    if job is not None:
                        left = state.time_left_s(time.perf_counter() - start)
                        pace = (f" ({state.done_steps}/{state.total_steps} steps, "
                                f"{_duration_text(left)} left)" if left is not None else "")
                        stream.write(f"done: {job.rule} {job.pass_name}".rstrip() + pace
                                     + "\n")
            code = proc.wait()
    if tty and not verbose:
        stream.write("\r\033[K")
    failed_input = False
    for job in state.failed:
        stopped = scheduler_stop(job)
        if stopped:
            stream.write(f"{stopped}\n  (logs: {', '.join(job.logs)})\n")
            continue
        message = job_message(job.log) if job.log else job.message
        failed_input |= message.startswith("flyover:")
        where = f" of pass {job.pass_name}" if job.pass_name else ""
        stream.write(f"step {job.rule}{where} failed:\n{message}\n  (log: {job.log})\n")
    if code != 0 and not state.failed:
        stream.write(f"the workflow stopped: see {log_path}\n" + _tail(log_path))
    stream.write(summary_text(campaign, time.perf_counter() - start, log_path) + "\n")
    if code == 0:
        return 0
    return 2 if failed_input else 1


def _tail(path: Path, n: int = 8) -> str:
    lines = path.read_text(errors="replace").rstrip().splitlines()
    keep = [line for line in lines if line.strip() and not line.startswith(" ")]
    return "\n".join(keep[-n:]) + "\n"


def pass_warnings(folder: Path) -> list[str]:
    """The data-quality warnings of one pass's results: channels left out, windows skipped,
    bands not separable."""
    warnings = []
    try:
        al = read_alignment(folder)
    except FlyoverInputError:
        return ["not aligned"]
    if al.get("quality_excluded_channels"):
        warnings.append(f"channels left out by the quality checks: "
                        f"{al['quality_excluded_channels']}")
    try:
        windows = WINDOWS.read(folder)
        levels = LEVELS.read(folder)
    except FlyoverInputError:
        return warnings + ["not imaged"]
    skipped = windows[windows["status"] != "analysed"]
    if len(windows) == 0:
        warnings.append(NO_WINDOW)
    elif len(skipped) == len(windows):
        reasons = "; ".join(sorted(set(skipped["reason"].astype(str))))
        warnings.append(f"no window analysed: {reasons}")
    elif len(skipped):
        warnings.append(f"{len(skipped)} of {len(windows)} windows skipped")
    notes = levels[(levels["region"] != "total") & levels["note"].astype(str).str.startswith(
        "not separable")] if len(levels) else levels
    if len(notes):
        bands = sorted(set(notes["band_hz"].astype(float)))
        warnings.append(f"bands not separable between regions: {bands[0]:g}-{bands[-1]:g} Hz "
                        f"({len(bands)} bands) in some windows")
    return warnings


def summary_text(campaign: Campaign, wall_s: float, log_path: Path) -> str:
    """The closing summary of a run."""
    out = Path(campaign.output)
    lines = []
    done = 0
    try:
        signed = SIGNOFF.read(out).fillna({"reasons": ""}).set_index("pass")
    except FlyoverInputError:
        signed = None
    for name in campaign.passes:
        folder = out / name
        complete = pass_steps_done(folder)
        done += complete
        status = ""
        if signed is not None and name in signed.index:
            status = f", {signed.loc[name, 'status']}"
            reasons = [r for r in str(signed.loc[name, "reasons"]).split("; ") if r]
        else:
            reasons = []
        lines.append(f"  {name}: {'done' if complete else 'not complete'}{status}")
        lines += [f"    {w}" for w in reasons]
        lines += [f"    warning: {w}" for w in pass_warnings(folder)]
    report = out / report_file.NAME
    head = f"passes done: {done} of {len(campaign.passes)}"
    tail = [f"report: {report}" if report.exists() else "report: not written",
            f"workflow log: {log_path}", f"wall time: {_duration(wall_s)}"]
    return "\n".join([head] + lines + tail)


def _duration(seconds: float) -> str:
    m, s = divmod(int(round(seconds)), 60)
    return f"{m} min {s} s" if m else f"{s} s"
