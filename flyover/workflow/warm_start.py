"""Warm start of the workflow's steps on the machine that runs Snakemake.

A step's job is a process of its own, and a light step spent half of its 2-3 s starting the
interpreter and importing numpy, pandas, matplotlib, scipy, pyproj and numba (benchmarks/
README.md). While Snakemake runs jobs locally, one process (launched while Snakemake reads the
workflow, waited for in ``onstart``, stopped by ``onsuccess``/``onerror``) imports every step
once and forks a copy of
itself per job: the job's command, ``python -m flyover stage ...``, hands its arguments, working
folder, environment and standard streams over a Unix socket to a fresh fork and exits with the
fork's exit status. Every fork starts from the same state, with nothing of a campaign loaded,
so a step computes what it computes cold, byte for byte.

Nothing depends on it: a job that finds no warm process (a cluster node, ``--use-conda``, a
machine without ``fork``, ``FLYOVER_WARM_START=0``, a server not yet listening) runs cold, as
before. A job stopped by Snakemake stops its fork: the fork ends when the job's end of the
socket closes. Each served job is logged with its status and wall time in the output's
``logs/warm-start.log``. Snakemake's benchmark files then time a served step, but its memory is
the fork's, which they do not see: measure memory with ``FLYOVER_WARM_START=0`` or with
``benchmarks/``.

This module is imported by every job's command before anything else: it imports the standard
library alone.
"""

from __future__ import annotations

import json
import os
import socket
import struct
import sys
import time

SOCKET_ENV = "FLYOVER_WARM_SOCKET"   # where the jobs find the warm process
SWITCH_ENV = "FLYOVER_WARM_START"    # "0" turns warm start off
SERVED_COMMANDS = ("stage", "stage-campaign")
_STATUS = struct.Struct("!i")
_NOT_SERVED = -1000                  # the fork declined (another interpreter): run cold
_POLL_S = 1.0                        # how often the server checks that Snakemake still runs
LOG_FILE = "warm-start.log"          # in the run's logs: a line per job served
OUTPUT_FILE = "output.txt"           # the warm process's own output, in its socket's folder
_FOLDER_PREFIX = "flyover-warm-"     # that folder's, made by WarmProcess


def available() -> bool:
    """Whether warm start can run here: on Linux (fork, and Unix sockets whose forks the
    imported libraries survive; macOS's system libraries do not promise it) and not switched
    off."""
    return sys.platform.startswith("linux") and os.environ.get(SWITCH_ENV, "1") != "0"


def _identity() -> dict:
    """What a job and the warm process must share to be interchangeable."""
    return {"executable": os.path.realpath(sys.executable),
            "package": os.path.dirname(os.path.realpath(__file__))}


# ---- the job's side --------------------------------------------------------------------------

def run_warm(argv: list[str]) -> int | None:
    """Run ``flyover`` with ``argv`` in a fork of the warm process, if one serves: its exit
    status, or None when none does (the caller runs cold)."""
    path = os.environ.get(SOCKET_ENV)
    if not path or not argv or argv[0] not in SERVED_COMMANDS or not available():
        return None
    conn = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    try:
        conn.connect(path)
    except OSError:
        conn.close()
        return None
    with conn:
        request = json.dumps({"argv": list(argv), "cwd": os.getcwd(), "env": dict(os.environ),
                              "identity": _identity()}).encode()
        socket.send_fds(conn, [_STATUS.pack(len(request))], [0, 1, 2])
        conn.sendall(request)
        reply = _receive(conn, _STATUS.size)
    if reply is None:
        print("flyover: the step's warm process ended without an exit status (see "
              "logs/warm-start.log); run with FLYOVER_WARM_START=0 to run it cold",
              file=sys.stderr)
        return 1
    status = _STATUS.unpack(reply)[0]
    return None if status == _NOT_SERVED else status


def _listening(path: str) -> bool:
    """Whether a warm process accepts on ``path`` (the probe sends nothing: the fork that
    takes it exits quietly)."""
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as probe:
        try:
            probe.connect(path)
        except OSError:
            return False
    return True


def _receive(conn, n: int) -> bytes | None:
    data = b""
    while len(data) < n:
        chunk = conn.recv(n - len(data))
        if not chunk:
            return None
        data += chunk
    return data


# ---- the warm process ------------------------------------------------------------------------

def serve(path: str, watched_pid: int, log_path: str) -> None:
    """Import every step, then fork one copy per connection on ``path`` until ``watched_pid``
    (Snakemake) has gone or the process is terminated."""
    import signal

    import flyover.cli  # noqa: F401  (the command line the forks run)
    from flyover.geometry.attitude import load_compiled
    from flyover.imaging.methods import methods
    from flyover.io.figures import pyplot
    from flyover.io.readers import KINDS, readers
    from flyover.pipeline import stages
    for scope in ("pass", "campaign"):
        stages(scope)                  # imports each step's module
    pyplot()                           # which the steps' figures import at their first
    # The registries import their modules at the first look-up: here once, not in every fork.
    methods()
    readers(KINDS[0])
    # The track's attitude kernel, which every pass step calls, compiled code loaded once.
    load_compiled()
    listener = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    listener.bind(path)
    listener.listen(64)
    listener.settimeout(_POLL_S)
    # Stopped by the workflow (SIGTERM) or with it from the terminal (Ctrl-C): end quietly and
    # at once. It holds nothing to clean up (its log is written a line at a time, the workflow
    # removes the socket's folder), and an interpreter's shutdown after every step's imports
    # can take long enough for the workflow to wait out its 10 s and kill it.
    signal.signal(signal.SIGTERM, lambda *_: (_remove_own_files(path), os._exit(0)))
    signal.signal(signal.SIGINT, lambda *_: (_remove_own_files(path), os._exit(0)))
    signal.signal(signal.SIGCHLD, signal.SIG_IGN)      # forks are reaped by the system
    try:
        while _alive(watched_pid):
            try:
                conn, _ = listener.accept()
            except TimeoutError:
                continue
            sys.stdout.flush()
            sys.stderr.flush()
            if os.fork() == 0:
                listener.close()
                _serve_one(conn, log_path)       # never returns
            conn.close()
    finally:
        listener.close()
        _remove_own_files(path)


def _remove_own_files(path: str) -> None:
    """The socket, and the folder WarmProcess made for it unless its output holds something
    to keep (WarmProcess.stop copies it into the run's log): a dry run's Snakemake, or one
    stopped outright, ends without stopping the warm process."""
    folder = os.path.dirname(path)
    output = os.path.join(folder, OUTPUT_FILE)
    try:
        os.unlink(path)
        if os.path.basename(folder).startswith(_FOLDER_PREFIX):
            if os.path.getsize(output) == 0:
                os.unlink(output)
            os.rmdir(folder)
    except OSError:
        pass


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _serve_one(conn, log_path: str) -> None:
    """In the fork: take over the job's streams, folder and environment, run the command, send
    its exit status, exit."""
    import signal
    import threading

    status = 1
    argv = []
    started = time.perf_counter()
    try:
        # A cold interpreter's signal handling.
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        signal.signal(signal.SIGCHLD, signal.SIG_DFL)
        signal.signal(signal.SIGINT, signal.default_int_handler)
        header, fds, _, _ = socket.recv_fds(conn, _STATUS.size, 3)
        body = _receive(conn, _STATUS.unpack(header)[0]) if len(header) == _STATUS.size else None
        request = json.loads(body) if body else None
        if request is None or request["identity"] != _identity() or len(fds) != 3:
            # A connection that asked nothing (a probe), or a job of another environment.
            status = _NOT_SERVED
            return
        argv = request["argv"]
        for target, fd in zip((0, 1, 2), fds):
            os.dup2(fd, target)
            os.close(fd)
        os.chdir(request["cwd"])
        os.environ.clear()
        os.environ.update(request["env"])
        _apply_thread_limits(sets_own_threads="--threads" in argv)
        # The job gone (stopped by Snakemake), its fork goes too: the job sends nothing more,
        # so the socket reads empty only when the job's end closes.
        threading.Thread(target=lambda: conn.recv(1) or os._exit(1), daemon=True).start()
        status = _run(argv)
    except BaseException:  # noqa: BLE001  (the job must get a status whatever happened)
        import traceback
        traceback.print_exc()
        status = 1
    finally:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):
                pass
        if status != _NOT_SERVED:
            # Opened here, by the job's fork: a warm process that served no job (a dry run's)
            # leaves no log.
            try:
                with open(log_path, "a") as log:
                    log.write(f"{time.strftime('%Y-%m-%dT%H:%M:%S')} status {status} "
                              f"{time.perf_counter() - started:.2f} s  {' '.join(argv)}\n")
            except OSError:
                pass
        try:
            conn.sendall(_STATUS.pack(status))
        finally:
            os._exit(status if 0 <= status < 256 else 1)


def _apply_thread_limits(*, sets_own_threads: bool = False) -> None:
    """The job's thread counts, which the libraries read when the warm process imported them:
    numba's pool keeps the size it was imported with (numba re-reads NUMBA_NUM_THREADS from
    the environment at each compile and refuses a change once its threads run, so the
    environment keeps the pool's size) and the job's count becomes ``set_num_threads``, unless
    the step ``sets_own_threads`` (told them with ``--threads``: the image step, whose forked
    workers need numba's threads not started before them); tempfile's folder is found afresh
    (Snakemake sets TMPDIR per job)."""
    import tempfile
    tempfile.tempdir = None
    wanted = os.environ.get("NUMBA_NUM_THREADS")
    if "numba" in sys.modules:
        import numba
        pool = numba.config.NUMBA_NUM_THREADS
        os.environ["NUMBA_NUM_THREADS"] = str(pool)
        if wanted and not sets_own_threads:
            numba.set_num_threads(max(1, min(int(wanted), pool)))


def _run(argv: list[str]) -> int:
    from flyover.cli import main
    sys.argv = ["flyover", *argv]
    try:
        return int(main(argv) or 0)
    except SystemExit as exc:
        code = exc.code
        if code is None:
            return 0
        if isinstance(code, int):
            return code
        print(code, file=sys.stderr)
        return 1


# ---- the workflow's side ---------------------------------------------------------------------

class WarmProcess:
    """The warm process of one Snakemake run: :meth:`launch` as the Snakefile is read,
    :meth:`start` in ``onstart``, :meth:`stop` in ``onsuccess`` and ``onerror``."""

    def __init__(self):
        self._process = None
        self._folder = None
        self._path = None
        self._log_folder = None

    def launch(self, log_folder, *, max_threads: int) -> None:
        """Start the warm process without waiting for it (a no-op where :func:`available` is
        False, or when it runs): the Snakefile calls it while Snakemake reads the workflow, so
        that it imports while Snakemake plans the jobs (1.2 s of imports; the outside pass's
        workflow started its first job 2.2 s after Snakemake). It writes nothing in
        ``log_folder`` before its first job."""
        if not available() or self._process is not None:
            return
        self._log_folder = log_folder
        try:
            self._path = self._launch(log_folder, max_threads)
        except OSError:           # no folder for the socket: the jobs run cold
            self.stop()

    def start(self, log_folder, *, max_threads: int, wait_s: float = 60.0) -> bool:
        """Start serving (:meth:`launch`, unless done) and wait until it listens, so that the
        first jobs are served too; False if it did not come up (the jobs run cold, its log
        says why). The jobs find it through :data:`SOCKET_ENV`, set here in Snakemake's own
        environment, which they inherit."""
        self.launch(log_folder, max_threads=max_threads)
        if self._process is None:
            return False
        try:
            os.makedirs(log_folder, exist_ok=True)
        except OSError:           # no log: the jobs run cold
            self.stop()
            return False
        deadline = time.monotonic() + wait_s
        while not _listening(self._path):
            if self._process.poll() is not None or time.monotonic() > deadline:
                self.stop()                # (its output, why, kept in the log)
                return False
            time.sleep(0.05)
        os.environ[SOCKET_ENV] = self._path
        return True

    def _keep_output(self, log_folder) -> None:
        """The warm process's own output, if any (why it did not come up, an error of its
        own), into the run's log."""
        try:
            with open(os.path.join(self._folder, OUTPUT_FILE)) as out:
                text = out.read()
            if text:
                with open(os.path.join(os.fspath(log_folder), LOG_FILE), "a") as log:
                    log.write(text)
        except OSError:
            pass

    def _launch(self, log_folder, max_threads: int) -> str:
        """Start the warm process; the socket's path."""
        import subprocess
        import tempfile
        # A short folder of its own: a socket's path is limited to about 100 bytes.
        self._folder = tempfile.mkdtemp(prefix=_FOLDER_PREFIX)
        if len(self._folder) > 80:
            os.rmdir(self._folder)
            self._folder = tempfile.mkdtemp(prefix=_FOLDER_PREFIX, dir="/tmp")
        path = os.path.join(self._folder, "socket")
        env = dict(os.environ)
        # The steps limit their own BLAS use; numba's pool may grow to the most a job is given.
        env.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1",
                   NUMBA_NUM_THREADS=str(max(1, int(max_threads))))
        env.pop(SOCKET_ENV, None)
        log_path = os.path.abspath(os.path.join(os.fspath(log_folder), LOG_FILE))
        # Started in the socket's folder: a working folder that holds a flyover source tree
        # (a checkout) would otherwise put it before the installed one, and the jobs, which
        # run in the output folder, would find the warm process another flyover's (and run
        # cold).
        with open(os.path.join(self._folder, OUTPUT_FILE), "w") as log:
            self._process = subprocess.Popen(
                [sys.executable, "-m", "flyover.workflow.warm_start", path, str(os.getpid()),
                 log_path], stdin=subprocess.DEVNULL, stdout=log, stderr=log, env=env,
                cwd=self._folder)
        return path

    def stop(self) -> None:
        """Stop serving and remove the socket's folder."""
        import shutil
        os.environ.pop(SOCKET_ENV, None)
        if self._process is not None:
            self._process.terminate()
            try:
                self._process.wait(timeout=10)
            except Exception:  # noqa: BLE001  (still running after 10 s: it must go)
                self._process.kill()
            self._process = None
        if self._folder is not None:
            if self._log_folder is not None and os.path.isdir(self._log_folder):
                self._keep_output(self._log_folder)
            shutil.rmtree(self._folder, ignore_errors=True)
            self._folder = None


if __name__ == "__main__":
    serve(sys.argv[1], int(sys.argv[2]), sys.argv[3])
