"""Running one job where a worker lives: the function every executor calls.

`execute_job` takes the job as a plain dict (cheap to send to a process or a cluster worker; the
clip travels as a path, never as pictures) and returns the job record. A job that fails returns a
record with status ``failed`` and its error rather than raising, so one bad clip never stops a study.
"""

from __future__ import annotations

import os
import socket
import time
import traceback
from datetime import UTC, datetime

from synth.io.jsonout import strict_json
from synth.study.jobs import code_version
from synth.study.kinds import get_kind

__all__ = ["execute_job"]


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


def execute_job(job: dict, *, run_id: str = "", progress=None) -> dict:
    """Run one job and return its record (status ``ok`` with rows, or ``failed`` with the error).

    Parameters
    ----------
    job : dict
        `synth.study.jobs.Job.to_dict()`.
    run_id : str
        Identifier of the study run that submitted the job (kept in the record).
    progress : callable, optional
        Passed to the job kind's function.

    Returns
    -------
    dict
        The record: the job's fields plus ``status``, ``rows``, ``error``, ``traceback``,
        ``started``, ``finished``, ``seconds``, ``worker`` and ``run``.

    Notes
    -----
    A worker whose installed synth differs from the coordinator's (another code version) refuses the
    job: its results would be filed under an identity they do not match.
    """
    record = dict(job)
    record.update(
        status="failed",
        rows=[],
        error=None,
        traceback=None,
        run=run_id,
        worker=f"{socket.gethostname()}:{os.getpid()}",
        started=_now(),
    )
    t0 = time.perf_counter()
    try:
        here = code_version()
        if here != job["code_version"]:
            raise RuntimeError(f"this worker runs synth {here}, the study was planned with {job['code_version']}")
        kind = get_kind(job["kind"])
        rows = kind.run(job["clip_path"], dict(job["params"]), progress=progress)
        if not isinstance(rows, list) or not all(isinstance(r, dict) for r in rows):
            raise TypeError(f"job kind {job['kind']!r} returned {type(rows).__name__}, not a list of row dicts")
        record["rows"] = strict_json(rows)  # non-finite numbers (PSNR of equal pictures) -> null
        record["status"] = "ok"
    except Exception as exc:  # noqa: BLE001 - a failing job is recorded, never fatal to the study
        record["error"] = f"{type(exc).__name__}: {exc}".splitlines()[0] if str(exc) else type(exc).__name__
        record["traceback"] = "".join(traceback.format_exception(exc)[-6:])
    record["finished"] = _now()
    record["seconds"] = round(time.perf_counter() - t0, 6)
    return record
