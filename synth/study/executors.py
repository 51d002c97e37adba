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
from collections.abc import Iterator

from synth.errors import ParameterError
from synth.study.worker import execute_job

__all__ = ["Executor", "LocalExecutor", "DaskExecutor", "make_executor"]


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


def _quiet_worker() -> None:
    # One job per process: keep OpenCV from starting its own thread pool in every worker.
    try:
        import cv2

        cv2.setNumThreads(1)
    except Exception:  # noqa: BLE001 - only a tuning hint
        pass


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
        self._pool = cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=ctx, initializer=_quiet_worker)
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
    """What a Dask worker reports about itself (run on every worker by `DaskExecutor`)."""
    from synth.study.jobs import code_version

    return {"code_version": code_version(), "malloc_trim_threshold": os.environ.get("MALLOC_TRIM_THRESHOLD_")}


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
    run several times slower (measured 1.4 s -> 5.0 s for one ``synthesise`` job). The executor does
    not change the workers; it adds a note to `warnings` when it finds the setting.
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
        trimmed = sorted(w for w, env in found.items() if env.get("malloc_trim_threshold"))
        if trimmed:
            self.warnings.append(
                f"{len(trimmed)} of {len(found)} Dask workers run with MALLOC_TRIM_THRESHOLD_="
                f"{found[trimmed[0]]['malloc_trim_threshold']} (Dask's default), which makes synth's array work "
                "several times slower; start workers without a nanny (dask worker --no-nanny) or unset it "
                "(README, 'Where jobs run')"
            )

    def describe(self) -> str:
        return f"Dask cluster {self.address} ({self.workers} worker threads)"

    def run(self, jobs: list[dict], *, run_id: str) -> Iterator[dict]:
        from distributed import as_completed

        keys = [f"synth-job-{job['id']}-{run_id}" for job in jobs]
        self._futures = self._client.map(execute_job, jobs, key=keys, pure=False, run_id=run_id)
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
