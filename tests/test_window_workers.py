"""The image step's windows in forked workers (flyover.pipeline._forks): the same results as one
window at a time, byte for byte, in order, with a worker's error raised in the step, and no
worker outliving a step that is killed.

Each check runs in a fresh interpreter: a test session that has already run a parallel kernel
cannot fork (GNU OpenMP), and the step then images one window at a time.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from flyover.io.config import load_campaign
from flyover.pipeline import align

ROOT = Path(__file__).resolve().parents[1]


def python(code: str, **kwargs) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                          text=True, env=env, **kwargs)


def test_forked_items_come_back_in_order_from_other_processes():
    res = python("""
        import os
        from flyover.pipeline._forks import can_fork, forked_map
        assert can_fork()
        out = list(forked_map(lambda k: (k * k, os.getpid()), list(range(9)), processes=2))
        assert [v for v, _ in out] == [k * k for k in range(9)], out
        assert os.getpid() not in {p for _, p in out}
        assert list(forked_map(lambda k: -k, [1, 2], processes=1)) == [-1, -2]
        print("ok")
    """)
    assert res.returncode == 0 and res.stdout.strip() == "ok", res.stderr


def test_a_workers_error_is_raised_in_the_step():
    res = python("""
        from flyover.model.errors import FlyoverInputError
        from flyover.pipeline._forks import forked_map
        def fail(k):
            if k == 3:
                raise FlyoverInputError("window 3 cannot be read", "rec.wav, frame 12")
            return k
        try:
            list(forked_map(fail, list(range(6)), processes=2))
        except FlyoverInputError as e:
            print(str(e).splitlines()[0])
    """, timeout=60)
    assert res.stdout.strip() == "flyover: rec.wav, frame 12: window 3 cannot be read", res.stderr


def test_no_worker_outlives_a_killed_step():
    # Snakemake stops a job with a signal the step cannot act on: its workers must go with it.
    proc = subprocess.Popen([sys.executable, "-c", textwrap.dedent("""
        import os, sys, time
        from flyover.pipeline._forks import forked_map
        def slow(k):
            os.write(1, f"{os.getpid()}\\n".encode())     # one write: the lines stay whole
            time.sleep(60)
        list(forked_map(slow, [0, 1, 2, 3], processes=2))
    """)], stdout=subprocess.PIPE, text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    workers = {int(proc.stdout.readline()), int(proc.stdout.readline())}
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    deadline = time.monotonic() + 10
    while workers and time.monotonic() < deadline:
        workers = {p for p in workers if _running(p)}
        time.sleep(0.1)
    assert not workers


def _running(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split(") ")[1][0] != "Z"
    except FileNotFoundError:
        return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="workers are Linux forks")
def test_windows_at_a_time_give_the_same_bytes(tiny_copy):
    # The image step on two threads (two windows at a time, one thread each) and on one thread
    # (one window at a time): every result file byte for byte (figures aside: PNG metadata).
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    out = tiny_copy / "results"
    for threads in (1, 2):
        align.run(campaign, "p1", out / str(threads))
    logs = {}
    for threads in (1, 2):
        res = subprocess.run([sys.executable, "-m", "flyover", "stage", "image", "--campaign",
                              "campaign.yaml", "--pass", "p1", "--out", str(out / str(threads)),
                              "--threads", str(threads)], cwd=tiny_copy, capture_output=True,
                             text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
        assert res.returncode == 0, res.stderr
        logs[threads] = res.stderr
    assert "2 windows at a time" in logs[2] and "at a time" not in logs[1]
    for name in ("maps.npz", "region_power.csv", "windows.csv", "region_angles.csv"):
        assert (out / "1" / name).read_bytes() == (out / "2" / name).read_bytes(), name


@pytest.mark.parametrize("keep", [False, True])
def test_freed_memory_is_reused_without_new_page_faults(keep):
    # glibc's malloc (mallopt): after keep_freed_memory a freed 64 MB array's pages serve the
    # next one (no new minor faults: the kernel zeroes no page again); by default they go back
    # to the system and every page faults anew: 16384 pages of 4 kB, or at least 32 of 2 MB
    # where numpy asks for transparent huge pages.
    res = python(f"""
        import resource
        import numpy as np
        from flyover.pipeline._forks import keep_freed_memory
        if {keep}:
            keep_freed_memory()
        def faults():
            return resource.getrusage(resource.RUSAGE_SELF).ru_minflt
        np.ones(2 ** 23)                 # 64 MB, written, then freed
        before = faults()
        np.ones(2 ** 23)
        print(faults() - before)
    """)
    assert res.returncode == 0, res.stderr
    new = int(res.stdout)
    assert (new < 16) if keep else (new >= 32), new
