"""Where a pass step's time goes, phase by phase: the interpreter's start, the imports, reading
the campaign file, loading the pass and earlier results, numba's first calls (its cache or a
compile), computing, writing result files, and drawing figures.

Each step of one demo pass runs cold, in a process of its own, as a job on a cluster node runs
it; the phases are timed by wrapping the functions that make them (the outermost phase takes
the time: a kernel's first call inside loading counts as loading). The demo must have run
(`snakemake --cores 2`): the steps read its data and a copy of its results. Asserts nothing.

Run:  python benchmarks/bench_step_phases.py [--pass pass-1]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
PHASES = ("interpreter", "imports", "campaign file", "loading", "numba first calls",
          "computing", "writing", "figures")

# Runs in the step's process: wraps the phases' functions before the step's module is imported
# (the steps bind the names at import), runs the step and prints the phases' times as JSON.
PROBE = r'''
import sys, time, json, functools, contextlib, importlib.abc
t0 = time.perf_counter()
totals = {}
active = [None]

def timed(phase, fn):
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        if active[0] is not None:
            return fn(*args, **kwargs)
        active[0] = phase
        start = time.perf_counter()
        try:
            return fn(*args, **kwargs)
        finally:
            totals[phase] = totals.get(phase, 0.0) + time.perf_counter() - start
            active[0] = None
    return wrapper

def patch_atomic(atomic):
    plain = atomic.atomic_path

    @contextlib.contextmanager
    def timed_atomic(path):
        outer = active[0] is None
        if outer:
            active[0] = "writing"
            start = time.perf_counter()
        try:
            with plain(path) as tmp:
                yield tmp
        finally:
            if outer:
                totals["writing"] = totals.get("writing", 0.0) + time.perf_counter() - start
                active[0] = None

    atomic.atomic_path = timed_atomic


def patch_figures(figures):
    for name in dir(figures):
        if name == "save_figure" or name.endswith("_figure"):
            setattr(figures, name, timed("figures", getattr(figures, name)))


def patch_context(context):
    for name in ("load_pass", "load_aligned_pass"):
        setattr(context, name, timed("loading", getattr(context, name)))


def patch_results(results):
    results.TableFile.read = timed("loading", results.TableFile.read)


def patch_numba(dispatcher):
    dispatcher.Dispatcher._compile_for_args = timed("numba first calls",
                                                    dispatcher.Dispatcher._compile_for_args)


# Each module is wrapped as it finishes loading, before any importer binds its names, and
# only if the step imports it: the imports column stays the step's own.
PATCH = {"flyover.io.atomic": patch_atomic, "flyover.io.figures": patch_figures,
         "flyover.pipeline.context": patch_context, "flyover.io.results": patch_results,
         "numba.core.dispatcher": patch_numba}


class Wrapping(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path, target=None):
        if name not in PATCH:
            return None
        for finder in sys.meta_path:
            if finder is self or not hasattr(finder, "find_spec"):
                continue
            spec = finder.find_spec(name, path, target)
            if spec is not None:
                break
        else:
            return None
        plain_exec = spec.loader.exec_module

        def exec_module(module):
            plain_exec(module)
            PATCH[name](module)

        spec.loader.exec_module = exec_module
        return spec


sys.meta_path.insert(0, Wrapping())
from flyover.pipeline import stage_module
from flyover.io.config import load_campaign
step, campaign_file, pass_name, out = sys.argv[1:5]
module = stage_module(step, "pass")
t1 = time.perf_counter()
campaign = load_campaign(campaign_file)
t2 = time.perf_counter()
options = {"threads": 2} if step == "image" else {}
module.run(campaign, pass_name, out, **options)
t3 = time.perf_counter()
totals.update({"imports": t1 - t0, "campaign file": t2 - t1})
totals["computing"] = (t3 - t2) - sum(totals.get(p, 0.0) for p in
                                      ("loading", "numba first calls", "writing", "figures"))
totals["in process"] = t3 - t0
print("PHASES " + json.dumps(totals))
'''


def demo_copy(folder: Path, pass_name: str) -> tuple[Path, Path]:
    """The demo's campaign file with its output in ``folder``, the pass's results copied there
    (so that the demo's own results are not rewritten); the campaign file and the pass's
    results folder."""
    demo = ROOT / "demo"
    if not (demo / "results" / pass_name / "levels.csv").exists():
        raise SystemExit("run the demo first (snakemake --cores 2): its data and results are "
                         "read")
    campaign = yaml.safe_load((demo / "campaign.yaml").read_text())
    campaign.pop("scenario", None)
    campaign["output"] = "results"
    (folder / "data").symlink_to(demo / "data")
    path = folder / "campaign.yaml"
    path.write_text(yaml.safe_dump(campaign, sort_keys=False))
    shutil.copytree(demo / "results" / pass_name, folder / "results" / pass_name)
    return path, folder / "results" / pass_name


def step_phases(step: str, campaign: Path, pass_name: str, out: Path) -> dict:
    """Wall time of the step's process and its phases (s)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT), NUMBA_NUM_THREADS="2",
               OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1")
    env.pop("FLYOVER_WARM_SOCKET", None)
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-c", PROBE, step, str(campaign), pass_name, str(out)],
                         capture_output=True, text=True, env=env, cwd=out.parent)
    wall = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(res.stderr[-3000:])
    line = next(x for x in res.stdout.splitlines() if x.startswith("PHASES "))
    phases = json.loads(line[len("PHASES "):])
    phases["interpreter"] = wall - phases.pop("in process")
    phases["wall"] = wall
    return phases


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pass", dest="pass_name", default="pass-1")
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
    from flyover.io.results.steps import PASS_STEPS
    folder = Path(tempfile.mkdtemp(prefix="flyover phases "))
    try:
        campaign, out = demo_copy(folder, args.pass_name)
        print(f"demo {args.pass_name}, each step cold in its own process; seconds")
        print(f"{'step':11s} {'wall':>6s} " + " ".join(f"{p[:10]:>10s}" for p in PHASES))
        for step in PASS_STEPS:
            ph = step_phases(step, campaign, args.pass_name, out)
            print(f"{step:11s} {ph['wall']:6.2f} "
                  + " ".join(f"{ph.get(p, 0.0):10.2f}" for p in PHASES))
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
