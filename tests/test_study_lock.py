"""One study run per folder, stale locks of killed runs, and worker processes that end with their
coordinator (SIGKILL included).

Outside references: the lock's liveness test follows POSIX ``kill(pid, 0)`` semantics (ESRCH for no
such process, common practice) and Linux ``/proc/PID/stat`` field 22, the process start time
(proc(5)); worker death follows Linux ``prctl(PR_SET_PDEATHSIG)`` (prctl(2)), checked by looking for
the worker pids in ``/proc`` after the coordinator is killed.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from study_support import study_clip_files, write_manifest
from typer.testing import CliRunner

from synth.cli import app
from synth.errors import ParameterError
from synth.study import LocalExecutor, load_manifest, run_study
from synth.study.lock import LOCK_NAME, StudyLock, _process_start, read_lock

GRID = '{ gap = [2], method = ["linear", "past"] }'

# A process that holds a study folder's lock until it is killed.
_HOLDER = textwrap.dedent(
    """
    import sys, time
    from synth.study.lock import StudyLock
    lock = StudyLock(sys.argv[1]).acquire()
    print("holding", flush=True)
    time.sleep(60)
    """
)


@pytest.fixture(scope="module")
def manifest(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("lock")
    clips = study_clip_files(folder / "clips")[:1]
    return write_manifest(folder / "study.toml", clips, grid=GRID)


def _hold(folder: Path) -> subprocess.Popen:
    folder.mkdir(parents=True, exist_ok=True)
    proc = subprocess.Popen([sys.executable, "-c", _HOLDER, str(folder)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "holding"
    return proc


def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_second_run_is_refused_naming_the_holder_and_plan_still_works(manifest, tmp_path):
    out = tmp_path / "out"
    holder = _hold(out)
    try:
        lock = read_lock(out / LOCK_NAME)
        assert lock["pid"] == holder.pid and lock["host"] == socket.gethostname()
        with pytest.raises(ParameterError, match=rf"another study run is using this folder \(pid {holder.pid} on "):
            run_study(load_manifest(manifest), out, executor=LocalExecutor(1))
        assert not (out / "jobs").exists()  # nothing ran
        result = CliRunner().invoke(app, ["study", str(manifest), "-o", str(out), "--workers", "1"])
        assert result.exit_code == 2
        assert result.stderr.count("\n") == 1 and f"pid {holder.pid}" in result.stderr
        plan = CliRunner().invoke(app, ["study", str(manifest), "-o", str(out), "--plan", "--json"])
        assert plan.exit_code == 0, plan.output
        assert json.loads(plan.stdout)["to_do"] == 2  # two blend settings on one clip
    finally:
        holder.kill()
        holder.wait()
    # The holder was killed (SIGKILL: its lock stays): the next run takes the folder over.
    assert read_lock(out / LOCK_NAME)["pid"] == holder.pid
    outcome = run_study(load_manifest(manifest), out, executor=LocalExecutor(1))
    assert outcome.ran == 2
    assert any(f"pid {holder.pid}" in n and "took over" in n for n in outcome.notes)
    assert not (out / LOCK_NAME).exists()  # released at the end of the run


def test_stale_lock_of_a_dead_pid_is_taken_over(tmp_path):
    pid = _dead_pid()
    (tmp_path / LOCK_NAME).write_text(json.dumps({"pid": pid, "host": socket.gethostname()}))
    with StudyLock(tmp_path) as lock:
        assert lock.took_over["pid"] == pid
        assert read_lock(tmp_path / LOCK_NAME)["pid"] == os.getpid()
    assert not (tmp_path / LOCK_NAME).exists()


@pytest.mark.skipif(_process_start(os.getpid()) is None, reason="needs Linux /proc")
def test_a_recycled_pid_does_not_hold_the_folder(tmp_path):
    # The lock names a live pid (this process) with another start time: its holder is gone.
    me = os.getpid()
    stale = {"pid": me, "host": socket.gethostname(), "process_start": _process_start(me) - 1}
    (tmp_path / LOCK_NAME).write_text(json.dumps(stale))
    with StudyLock(tmp_path) as lock:
        assert lock.took_over["process_start"] == stale["process_start"]


def test_lock_of_another_host_is_never_taken_over(tmp_path):
    (tmp_path / LOCK_NAME).write_text(json.dumps({"pid": 1, "host": "elsewhere.invalid"}))
    with pytest.raises(ParameterError, match=r"pid 1 on elsewhere\.invalid"):
        StudyLock(tmp_path).acquire()


def test_one_of_two_racing_runs_gets_the_folder(tmp_path):
    # Two locks taken at once from this process: the first wins, the second sees a live holder.
    first = StudyLock(tmp_path).acquire()
    try:
        with pytest.raises(ParameterError, match=rf"pid {os.getpid()} "):
            StudyLock(tmp_path).acquire()
    finally:
        first.release()
    assert not (tmp_path / LOCK_NAME).exists()


# A coordinator with a pool of two local workers (as LocalExecutor starts it) that sleep in a job.
_COORDINATOR = textwrap.dedent(
    """
    import concurrent.futures as cf, multiprocessing, os, time
    from synth.study.executors import _quiet_worker
    ctx = multiprocessing.get_context("forkserver")
    pool = cf.ProcessPoolExecutor(2, mp_context=ctx, initializer=_quiet_worker, initargs=(os.getpid(),))
    futures = [pool.submit(time.sleep, 60) for _ in range(2)]
    deadline = time.monotonic() + 30
    while len(pool._processes) < 2 and time.monotonic() < deadline:
        time.sleep(0.05)
    time.sleep(0.5)  # the initializers have run
    print(" ".join(str(p) for p in pool._processes), flush=True)
    time.sleep(60)
    """
)


def _running(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state not in ("Z", "X")


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="PR_SET_PDEATHSIG is Linux's")
def test_workers_end_when_the_coordinator_is_killed(tmp_path):
    proc = subprocess.Popen([sys.executable, "-c", _COORDINATOR], stdout=subprocess.PIPE, text=True)
    try:
        workers = [int(p) for p in proc.stdout.readline().split()]
        assert len(workers) == 2 and all(_running(p) for p in workers)
        # Their parent is the fork server (proc(5): field 4 of /proc/PID/stat is the parent pid).
        servers = {int(Path(f"/proc/{w}/stat").read_text().rsplit(")", 1)[1].split()[1]) for w in workers}
        assert proc.pid not in servers
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    deadline = time.monotonic() + 5
    while time.monotonic() < deadline and any(_running(p) for p in [*workers, *servers]):
        time.sleep(0.05)
    assert not any(_running(p) for p in workers), "worker processes outlived their coordinator"
    assert not any(_running(p) for p in servers), "the fork server outlived its coordinator"


def test_watchdog_sees_a_dead_coordinator():
    from synth.study.executors import _coordinator_gone

    assert _coordinator_gone(_dead_pid(), os.getppid()) is True
    assert _coordinator_gone(os.getpid(), os.getppid()) is False
    assert _coordinator_gone(os.getpid(), os.getppid() + 1) is True  # reparented


# Allocates and touches 1 MiB arrays 100 times under the nanny's environment; prints its page faults.
_ALLOCATE = textwrap.dedent(
    """
    import resource, sys
    import numpy as np
    from synth.study.executors import tune_allocator
    if sys.argv[1] == "tune":
        assert tune_allocator()
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(100):
        a = np.ones(1 << 17)  # 1 MiB, every page touched (below numpy's 4 MiB huge-page advice)
        del a
    print(resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before)
    """
)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt")
def test_tuned_allocator_reuses_memory_under_the_nannys_malloc_setting():
    # glibc mallopt(3): setting M_TRIM_THRESHOLD (here through MALLOC_TRIM_THRESHOLD_, as Dask's nanny
    # does) disables the dynamic mmap threshold, so every block above 128 KiB is mmap'd afresh and its
    # pages faulted in again (256 faults per MiB with 4 KiB pages); with M_MMAP_THRESHOLD at 32 MiB
    # the block is reused from the heap.
    env = {k: v for k, v in os.environ.items() if k != "SYNTH_KEEP_MALLOC"}
    env["MALLOC_TRIM_THRESHOLD_"] = "65536"

    def faults(mode):
        out = subprocess.run([sys.executable, "-c", _ALLOCATE, mode], env=env, capture_output=True, text=True)
        assert out.returncode == 0, out.stderr
        return int(out.stdout)

    plain, tuned = faults("plain"), faults("tune")
    assert plain > 100 * 200  # about 256 per array: mapped afresh every time
    assert tuned < plain / 10
