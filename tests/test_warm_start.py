"""Warm start of workflow steps: a step run in a fork of the warm process behaves as the same
command run cold (status, streams, working folder, environment), a job falls back to a cold run
wherever no warm process serves it, and the warm process ends with the Snakemake run it
belongs to."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from flyover.workflow import warm_start
from flyover.workflow.warm_start import (SOCKET_ENV, SWITCH_ENV, WarmProcess, _listening,
                                         run_warm)

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="Linux only")


def _wait_listening(path: str, timeout_s: float = 60.0) -> None:
    end = time.monotonic() + timeout_s
    while not _listening(path):
        assert time.monotonic() < end, "the warm process never listened"
        time.sleep(0.2)


@pytest.fixture
def warm(tmp_path, monkeypatch):
    monkeypatch.delenv(SWITCH_ENV, raising=False)
    process = WarmProcess()
    assert process.start(tmp_path / "logs", max_threads=1)
    path = os.environ[SOCKET_ENV]             # set once it listens
    monkeypatch.setenv(SOCKET_ENV, path)      # restored after the test
    assert _listening(path)
    yield tmp_path / "logs" / "warm-start.log"
    process.stop()
    assert not os.path.exists(path)


def _flyover(args, cwd, env):
    return subprocess.run([sys.executable, "-m", "flyover", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


def test_a_served_step_answers_as_the_cold_one(warm, tmp_path):
    # A campaign file that is not there, in a folder with a space, named relative to the job's
    # own working folder: the answer shows that folder, the environment and both streams
    # reached the fork, and the status came back.
    folder = tmp_path / "job folder"
    folder.mkdir()
    env = dict(os.environ, FLYOVER_CAMPAIGN="missing campaign.yaml")
    served = _flyover(["stage-campaign", "summary"], folder, env)
    cold = _flyover(["stage-campaign", "summary"], folder, {**env, SWITCH_ENV: "0"})
    assert served.returncode == cold.returncode == 2
    assert "missing campaign.yaml" in served.stderr
    assert (served.stdout, served.stderr) == (cold.stdout, cold.stderr)
    # The warm process logged it, with its status; the cold run is not there.
    lines = warm.read_text().splitlines()
    assert len(lines) == 1 and "status 2" in lines[0] and "stage-campaign summary" in lines[0]
    # A command line the parser refuses: argparse's own exit status and message.
    served = _flyover(["stage", "no-such-step", "--pass", "p"], folder, env)
    cold = _flyover(["stage", "no-such-step", "--pass", "p"], folder, {**env, SWITCH_ENV: "0"})
    assert served.returncode == cold.returncode != 0
    assert served.stderr == cold.stderr


def test_without_a_warm_process_a_job_runs_cold(tmp_path, monkeypatch):
    monkeypatch.delenv(SWITCH_ENV, raising=False)
    monkeypatch.setenv(SOCKET_ENV, str(tmp_path / "no socket"))
    assert run_warm(["stage-campaign", "summary"]) is None
    monkeypatch.delenv(SOCKET_ENV)
    assert run_warm(["stage-campaign", "summary"]) is None
    # Other commands are never served (simulate, run, check: they start their own work).
    assert run_warm(["simulate", "x.yaml"]) is None
    monkeypatch.setenv(SWITCH_ENV, "0")
    assert not WarmProcess().start(tmp_path / "logs", max_threads=1)


def test_another_interpreter_or_package_runs_cold(warm, monkeypatch):
    # A job in another environment (Snakemake's --use-conda) must not run this one's code.
    monkeypatch.setattr(warm_start, "_identity", lambda: {"executable": "/elsewhere/python",
                                                          "package": "/elsewhere/flyover"})
    assert run_warm(["stage-campaign", "summary"]) is None
    assert not warm.exists() or warm.read_text() == ""


def test_the_warm_process_ends_with_its_snakemake(tmp_path, monkeypatch):
    # Snakemake killed outright runs no onerror: the warm process must notice on its own.
    monkeypatch.delenv(SWITCH_ENV, raising=False)
    snakemake = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(3)"])
    path = str(tmp_path / "s")
    server = subprocess.Popen([sys.executable, "-m", "flyover.workflow.warm_start", path,
                               str(snakemake.pid), str(tmp_path / "log")])
    _wait_listening(path)
    snakemake.wait()
    assert server.wait(timeout=30) == 0
    # It served no job (a dry run's): no log written, its socket gone, the folder it was
    # given kept (only a folder of WarmProcess's own making goes with it).
    assert not (tmp_path / "log").exists() and not os.path.exists(path) and tmp_path.is_dir()


def test_a_warm_process_launched_early_serves_from_the_first_job(tmp_path, monkeypatch):
    # The Snakefile launches it while Snakemake reads the workflow; onstart then waits for it.
    # Launched and stopped without a job, it leaves no log and no folder of its own behind.
    monkeypatch.delenv(SWITCH_ENV, raising=False)
    monkeypatch.delenv(SOCKET_ENV, raising=False)
    process = WarmProcess()
    process.launch(tmp_path / "logs", max_threads=1)
    folder = process._folder
    assert os.path.isdir(folder) and not (tmp_path / "logs").exists()
    assert process.start(tmp_path / "logs", max_threads=1)
    assert _listening(os.environ[SOCKET_ENV])
    process.stop()
    assert not os.path.exists(folder) and SOCKET_ENV not in os.environ


def test_a_long_temporary_folder_or_no_log_folder(tmp_path, monkeypatch):
    # A socket's path holds about 100 bytes: a long TMPDIR (Snakemake sets one per job, a
    # cluster's may be deep) must not stop warm start; a log folder that cannot be made leaves
    # the jobs cold, never the run failed.
    import tempfile
    monkeypatch.delenv(SWITCH_ENV, raising=False)
    monkeypatch.delenv(SOCKET_ENV, raising=False)
    deep = tmp_path / ("t" * 90)
    deep.mkdir()
    monkeypatch.setenv("TMPDIR", str(deep))
    monkeypatch.setattr(tempfile, "tempdir", None)
    process = WarmProcess()
    assert process.start(tmp_path / "logs", max_threads=1)
    assert len(os.environ[SOCKET_ENV]) < 100
    process.stop()
    assert SOCKET_ENV not in os.environ
    (tmp_path / "a file").write_text("")
    assert not WarmProcess().start(tmp_path / "a file" / "logs", max_threads=1)
    assert SOCKET_ENV not in os.environ


def test_the_warm_process_loads_the_attitude_kernel_the_tracks_call():
    # The warm process loads the track's attitude kernel once for its forks: it must be the
    # very specialization (argument types and layouts) a fitted track calls, or each fork
    # would still load its own.
    from flyover.geometry.attitude import load_compiled
    from flyover.geometry._attitude_kernel import slerp_quaternions
    from flyover.geometry.track import straight_track

    load_compiled()
    loaded = set(slerp_quaternions.signatures)
    track, *_ = straight_track(20.0, 30.0, 90.0, 2.0, -3.0, 6.0, pitch_deg=3.0, roll_deg=-2.0)
    track.rotation(np.linspace(0.0, 1.0, 7))
    track.attitude_deg(1.5)
    track.body_points_enu(np.zeros((1, 3)), np.linspace(-1.0, 1.0, 5)[::2])
    assert loaded and set(slerp_quaternions.signatures) == loaded


def test_a_warm_process_stopped_outright_removes_its_folder(tmp_path, monkeypatch):
    # A Snakemake stopped with its process group (Ctrl-C, a test's timeout) signals the warm
    # process directly: it still removes its socket and the folder made for it.
    monkeypatch.delenv(SWITCH_ENV, raising=False)
    monkeypatch.delenv(SOCKET_ENV, raising=False)
    process = WarmProcess()
    assert process.start(tmp_path / "logs", max_threads=1)
    folder = process._folder
    process._process.send_signal(signal.SIGTERM)
    assert process._process.wait(timeout=30) == 0
    assert not os.path.exists(folder)
    process.stop()
