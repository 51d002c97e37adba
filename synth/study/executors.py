"""Executors: where a study's jobs run.

Every executor takes the same job dicts and yields the same job records (`synth.study.worker.
execute_job` runs each job wherever it lands), in completion order:

`LocalExecutor`
    ``workers=1`` runs the jobs one after another in this process; ``workers=N`` uses a pool of N
    local processes (`concurrent.futures.ProcessPoolExecutor`, started with the ``forkserver``
    method where available, so no thread of the coordinator is inherited).
`DaskExecutor`
    A Dask distributed cluster reached at ``tcp://HOST:PORT`` (the optional extra ``cluster``;
    `distributed` is imported only here). Workers read clips by path, so the clips and the synth
    installation must be visible to every worker under the same paths (shared storage).

An executor is a context manager; leaving it early (an interruption) cancels the jobs not started.
"""

from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import os
import signal
import sys
import threading
import time
from collections.abc import Iterator

from synth.errors import ParameterError
from synth.study.worker import execute_job

__all__ = ["Executor", "LocalExecutor", "DaskExecutor", "make_executor", "tune_allocator", "execute_job_tuned"]


def _failure(job: dict, run_id: str, exc: BaseException, where: str) -> dict:
    record = dict(job)
    record.update(
        status="failed",
        rows=[],
        error=f"{where}: {type(exc).__name__}: {exc}".splitlines()[0],
        traceback=None,
        run=run_id,
        worker=where,
        started=None,
        finished=None,
        seconds=None,
    )
    return record


class Executor:
    """Base class: `run(jobs, run_id=...)` yields one record per job, as jobs finish."""

    name = "executor"
    workers = 1
    #: Notes for the user about the executor's set-up (printed by the CLI, kept in the run log).
    warnings: list[str] = []

    def run(self, jobs: list[dict], *, run_id: str) -> Iterator[dict]:  # pragma: no cover - interface
        raise NotImplementedError

    def close(self) -> None:
        pass

    def describe(self) -> str:
        return self.name

    def __enter__(self) -> Executor:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


#: glibc ``mallopt`` parameters (``<malloc.h>``).
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
#: The thresholds a job runs with: glibc's dynamic mmap threshold settles at its ceiling (32 MiB on
#: 64-bit systems, ``DEFAULT_MMAP_THRESHOLD_MAX``) and the trim threshold at twice that, which is
#: what a plain process reaches after its first large arrays; fixing them there gives every worker
#: that steady state from the first job, whatever its environment says.
MMAP_THRESHOLD_BYTES = 32 << 20
TRIM_THRESHOLD_BYTES = 64 << 20
_ALLOCATOR_TUNED = False


def tune_allocator() -> bool:
    """Give this process glibc's steady-state malloc thresholds (once); True when they are set.

    Dask's nanny starts workers with ``MALLOC_TRIM_THRESHOLD_=65536``. Setting any threshold through
    the environment switches off glibc's dynamic mmap threshold, so every numpy temporary above
    128 KiB is mapped and unmapped afresh, its pages faulted in and zeroed each time: one
    ``synthesise`` job took 4.3 s of CPU time (1.1 million page faults) in a nanny's worker against
    1.5 s (5 to 40 thousand) without the nanny, and 1.5 s (1 to 17 thousand) tuned; whole studies
    in tests/benchmarks/cluster_speed.py. Fixing the mmap
    threshold at 32 MiB and the trim threshold at 64 MiB with ``mallopt`` puts the process where a
    plain one ends up. A no-op (False) without glibc or with ``SYNTH_KEEP_MALLOC=1``.
    """
    global _ALLOCATOR_TUNED
    if _ALLOCATOR_TUNED:
        return True
    if os.environ.get("SYNTH_KEEP_MALLOC") == "1" or not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None)
        mallopt = libc.mallopt
    except (OSError, AttributeError):  # not glibc (musl has no mallopt)
        return False
    mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
    mallopt.restype = ctypes.c_int
    ok = mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES) == 1
    ok = mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES) == 1 and ok
    _ALLOCATOR_TUNED = ok
    return ok


_PR_SET_PDEATHSIG = 1
#: Seconds between two checks of the coordinator by a local worker's watchdog thread.
WATCHDOG_SECONDS = 0.5


def _ask_kernel_to_kill_me_with_parent() -> None:
    """Linux: SIGKILL this process when the process that forked it ends (``prctl(PR_SET_PDEATHSIG)``)."""
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
    except (OSError, AttributeError):
        pass


def _coordinator_gone(coordinator: int, parent: int) -> bool:
    if os.getppid() != parent:  # reparented: the forking process (pool or fork server) ended
        return True
    try:
        os.kill(coordinator, 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False
    return False


def _watch_coordinator(coordinator: int, parent: int) -> None:
    while True:
        if _coordinator_gone(coordinator, parent):
            os._exit(1)  # the coordinator is gone: nobody will read this job's result
        time.sleep(WATCHDOG_SECONDS)


_WORKER_PREPARED = False


def _prepare_worker_process() -> None:
    """What every worker process gets once, local or on Dask: steady-state malloc thresholds
    (`tune_allocator`) and one OpenCV thread (one job per process: no OpenCV pool per worker)."""
    global _WORKER_PREPARED
    if _WORKER_PREPARED:
        return
    _WORKER_PREPARED = True
    tune_allocator()
    try:
        import cv2

        cv2.setNumThreads(1)
    except Exception:  # noqa: BLE001 - only a tuning hint
        pass


def _quiet_worker(coordinator: int | None = None) -> None:
    """Initializer of a local worker process: end with the coordinator (SIGKILL included), then
    `_prepare_worker_process`."""
    if coordinator is not None:
        parent = os.getppid()
        _ask_kernel_to_kill_me_with_parent()
        if _coordinator_gone(coordinator, parent):  # died before prctl took effect
            os._exit(1)
        threading.Thread(target=_watch_coordinator, args=(coordinator, parent), daemon=True).start()
    _prepare_worker_process()


def execute_job_tuned(job: dict, *, run_id: str = "") -> dict:
    """`execute_job` in a prepared worker process (`_prepare_worker_process`): what a Dask worker
    runs, so that it runs jobs as a local worker process does whatever its environment says."""
    _prepare_worker_process()
    return execute_job(job, run_id=run_id)


class LocalExecutor(Executor):
    """Jobs in this process (``workers=1``) or in a pool of local worker processes.

    Parameters
    ----------
    workers : int
        Number of processes, at least 1.
    """

    name = "local"

    def __init__(self, workers: int = 1):
        if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
            raise ParameterError(f"workers: expected an integer >= 1, got {workers!r}")
        self.workers = workers
        self._pool: cf.ProcessPoolExecutor | None = None

    def describe(self) -> str:
        return "in-process" if self.workers == 1 else f"{self.workers} local processes"

    def run(self, jobs: list[dict], *, run_id: str) -> Iterator[dict]:
        if self.workers == 1:
            for job in jobs:
                yield execute_job(job, run_id=run_id)
            return
        methods = multiprocessing.get_all_start_methods()
        ctx = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
        if ctx.get_start_method() == "forkserver":
            # Workers fork from a server that has imported synth once, instead of each importing it.
            ctx.set_forkserver_preload(["synth.study.worker", "synth.study.builtin_kinds"])
        self._pool = cf.ProcessPoolExecutor(
            max_workers=self.workers, mp_context=ctx, initializer=_quiet_worker, initargs=(os.getpid(),)
        )
        futures = {self._pool.submit(execute_job, job, run_id=run_id): job for job in jobs}
        try:
            for fut in cf.as_completed(futures):
                try:
                    yield fut.result()
                except cf.process.BrokenProcessPool as exc:
                    yield _failure(futures[fut], run_id, exc, "local worker process")
        finally:
            self.close()

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


def _worker_environment() -> dict:
    """What a Dask worker reports about itself (run on every worker by `DaskExecutor`); tunes its
    allocator on the way (`tune_allocator`)."""
    from synth.study.jobs import code_version

    return {
        "code_version": code_version(),
        "malloc_trim_threshold": os.environ.get("MALLOC_TRIM_THRESHOLD_"),
        "allocator_tuned": tune_allocator(),
    }


class DaskExecutor(Executor):
    """Jobs on a Dask distributed cluster.

    Parameters
    ----------
    address : str
        The scheduler's address, ``tcp://HOST:PORT`` (or any address `distributed.Client` takes).
    timeout : float
        Seconds to wait for the connection.

    Raises
    ------
    ParameterError
        When the ``cluster`` extra is not installed, the scheduler cannot be reached, or a worker
        cannot import synth or runs another synth code version.

    Notes
    -----
    Dask's nanny starts workers with ``MALLOC_TRIM_THRESHOLD_=65536`` by default; that fixes glibc's
    mmap threshold, so every large numpy temporary is mapped and unmapped afresh, and synth's jobs
    ran several times slower. Every job therefore runs through `execute_job_tuned`, which first gives
    its worker process glibc's steady-state thresholds (`tune_allocator`), nanny or not; a note goes
    to `warnings` only when a worker could not be tuned (no glibc, or ``SYNTH_KEEP_MALLOC=1``).
    """

    name = "dask"

    def __init__(self, address: str, *, timeout: float = 20.0):
        try:
            import distributed
        except ImportError:
            raise ParameterError(
                "cluster: running on a Dask cluster needs the optional extra 'cluster' "
                "(pip install 'synth[cluster]'): the package 'distributed' is not installed"
            ) from None
        if not isinstance(address, str) or "://" not in address:
            raise ParameterError(f"cluster: expected a scheduler address such as tcp://HOST:8786, got {address!r}")
        self.address = address
        try:
            self._client = distributed.Client(address, timeout=timeout, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise ParameterError(
                f"cluster: cannot reach the Dask scheduler at {address} ({type(exc).__name__}: {exc})"
            ) from None
        self._futures: list = []
        info = self._client.scheduler_info()
        self.workers = max(1, sum(int(w.get("nthreads", 1)) for w in info.get("workers", {}).values()))
        self.warnings: list[str] = []
        try:
            self._check_workers()
        except BaseException:
            self._client.close()
            raise

    def _check_workers(self) -> None:
        """Refuse workers that cannot run synth's jobs; note settings that slow them down."""
        from synth.study.jobs import code_version

        try:
            found = self._client.run(_worker_environment)
        except Exception as exc:  # noqa: BLE001 - e.g. ModuleNotFoundError on a worker without synth
            raise ParameterError(
                f"cluster: the workers at {self.address} cannot run synth jobs ({type(exc).__name__}: {exc}); "
                "install the same synth on every worker"
            ) from None
        here = code_version()
        for worker, env in sorted(found.items()):
            if env["code_version"] != here:
                raise ParameterError(
                    f"cluster: worker {worker} runs synth {env['code_version']}, this study needs {here}; "
                    "install the same synth on every worker"
                )
        trimmed = sorted(
            w for w, env in found.items() if env.get("malloc_trim_threshold") and not env.get("allocator_tuned")
        )
        if trimmed:
            self.warnings.append(
                f"{len(trimmed)} of {len(found)} Dask workers run with MALLOC_TRIM_THRESHOLD_="
                f"{found[trimmed[0]]['malloc_trim_threshold']} (Dask's default) and synth could not reset the "
                "malloc thresholds there (no glibc, or SYNTH_KEEP_MALLOC=1), which makes its array work several "
                "times slower; start workers without a nanny (dask worker --no-nanny) or unset it "
                "(README, 'Where jobs run')"
            )

    def describe(self) -> str:
        return f"Dask cluster {self.address} ({self.workers} worker threads)"

    def run(self, jobs: list[dict], *, run_id: str) -> Iterator[dict]:
        from distributed import as_completed

        keys = [f"synth-job-{job['id']}-{run_id}" for job in jobs]
        self._futures = self._client.map(execute_job_tuned, jobs, key=keys, pure=False, run_id=run_id)
        by_key = dict(zip(keys, jobs))
        try:
            for fut in as_completed(self._futures, loop=self._client.loop):
                try:
                    yield fut.result()
                except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: record it, go on
                    yield _failure(by_key[fut.key], run_id, exc, "dask worker")
        finally:
            self._cancel()

    def _cancel(self) -> None:
        if self._futures:
            self._client.cancel(self._futures)
            self._futures = []

    def close(self) -> None:
        self._cancel()
        self._client.close()


def make_executor(*, workers: int | None = None, cluster: str | None = None) -> Executor:
    """The executor for the CLI's ``--workers`` / ``--cluster`` options.

    Raises
    ------
    ParameterError
        When both are given, or either is invalid.
    """
    if cluster:
        if workers is not None:
            raise ParameterError(
                "workers: --workers applies to local runs; a Dask cluster has its own workers (drop --workers or --cluster)"
            )
        return DaskExecutor(cluster)
    return LocalExecutor(workers if workers is not None else max(1, os.cpu_count() or 1))
