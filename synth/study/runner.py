"""Running a study: expand, skip what is done, execute the rest, record, aggregate, report.

Study folder layout (``--out DIR``)::

    DIR/jobs/<id>.json        one record per finished job (written atomically, never rewritten
                              once ``ok``); a re-run skips these jobs
    DIR/runs/<run>.jsonl      what each run did: its executor, the jobs it submitted and finished
    DIR/cache/clip-hashes.json  clip content hashes, reused while size and mtime are unchanged
    DIR/study.csv, study.json aggregated results (independent of executor and run history)
    DIR/report/index.html     tables and plots (PNG files beside it)
    DIR/study.lock            while a run is going: its pid and host (`synth.study.lock`); a second
                              run into the folder is refused, a lock left by a killed run taken over

A run that is killed loses only the jobs in flight: every finished job is already on disk, and the
next run submits only the jobs without a record (and, by default, the failed ones again).
"""

from __future__ import annotations

import json
import os
import secrets
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from synth.errors import FormatError
from synth.io import atomic_write_text
from synth.study.aggregate import StudyTables, aggregate, to_csv, to_json
from synth.study.executors import Executor, LocalExecutor
from synth.study.jobs import (
    ClipHasher,
    Job,
    code_version,
    make_jobs,
    read_record,
    records_dir,
    write_record,
)
from synth.study.lock import StudyLock
from synth.study.manifest import Manifest
from synth.study.report import write_report

__all__ = ["StudyProgress", "StudyOutcome", "plan_study", "run_study", "load_records"]


@dataclass
class StudyProgress:
    """What a progress callback receives.

    Attributes
    ----------
    phase : {'hash', 'run', 'report'}
    done, total : int
        Clips hashed / jobs finished (skipped ones included) out of the total.
    skipped, failed : int
        Jobs skipped because a record exists, jobs failed in this run.
    record : dict or None
        The record just written (phase 'run').
    """

    phase: str
    done: int
    total: int
    skipped: int = 0
    failed: int = 0
    record: dict | None = None


@dataclass
class StudyOutcome:
    """Result of `run_study`."""

    out_dir: Path
    run_id: str
    executor: str
    jobs: list[Job]
    ran: int
    skipped: int
    failed: list[dict]
    seconds: float
    tables: StudyTables
    report: Path | None = None
    paths: dict[str, Path] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    @property
    def jobs_per_second(self) -> float:
        """Jobs run in this invocation per second of execution (0 when none ran)."""
        return self.ran / self.seconds if self.ran and self.seconds > 0 else 0.0


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


def load_records(out_dir: str | os.PathLike, ids) -> dict[str, dict]:
    """Records of the given job ids found in the study folder (damaged files are ignored: those
    jobs count as not run)."""
    folder = records_dir(out_dir)
    out = {}
    for jid in ids:
        path = folder / f"{jid}.json"
        if path.is_file():
            try:
                rec = read_record(path)
            except FormatError:
                continue
            if rec.get("id") == jid:
                out[jid] = rec
    return out


def plan_study(manifest: Manifest, out_dir: str | os.PathLike, *, progress: Callable | None = None) -> list[Job]:
    """Expand the manifest into identified jobs (hashing each clip once, with the folder's cache)."""
    hasher = ClipHasher(Path(out_dir) / "cache" / "clip-hashes.json")

    def hashed(done: int, total: int) -> None:
        if progress is not None:
            progress(StudyProgress("hash", done, total))

    jobs = make_jobs(manifest.expand(), hasher, progress=hashed)
    hasher.save()
    return jobs


class _RunLog:
    """Append-only JSON-lines log of one run (diagnostics; results never depend on it)."""

    def __init__(self, path: Path):
        path.parent.mkdir(parents=True, exist_ok=True)
        self._fh = open(path, "a", encoding="utf-8")

    def write(self, event: str, **data) -> None:
        self._fh.write(json.dumps({"event": event, "at": _now(), **data}) + "\n")
        self._fh.flush()

    def close(self) -> None:
        self._fh.close()


def _header(manifest: Manifest, jobs: list[Job], tables: StudyTables) -> dict:
    unique = {j.id for j in jobs}
    failed = {f["job"] for f in tables.failures}
    missing = set(tables.missing)
    return {
        "title": manifest.title,
        "description": manifest.description,
        "manifest": manifest.path.name,
        "code_version": code_version(),
        "jobs": {
            "total": len(unique),
            "ok": len(unique - failed - missing),
            "failed": len(failed),
            "missing": len(missing),
        },
    }


def write_outputs(
    manifest: Manifest, jobs: list[Job], out_dir: str | os.PathLike
) -> tuple[StudyTables, dict[str, Path]]:
    """Aggregate the records of `jobs` into ``study.csv``, ``study.json`` and the report."""
    out_dir = Path(out_dir)
    tables = aggregate(jobs, load_records(out_dir, {j.id for j in jobs}))
    header = _header(manifest, jobs, tables)
    paths = {"csv": out_dir / "study.csv", "json": out_dir / "study.json"}
    atomic_write_text(paths["csv"], to_csv(tables))
    atomic_write_text(paths["json"], to_json(tables, header=header))
    paths["report"] = write_report(tables, out_dir, header=header)
    return tables, paths


def run_study(
    manifest: Manifest,
    out_dir: str | os.PathLike,
    *,
    executor: Executor | None = None,
    retry_failed: bool = True,
    progress: Callable[[StudyProgress], None] | None = None,
    lock_option: str = "--output",
) -> StudyOutcome:
    """Run every job of a study that has no record yet, then aggregate and report.

    Parameters
    ----------
    manifest : Manifest
        From `synth.study.manifest.load_manifest`.
    out_dir : path-like
        The study folder (created when missing; reused to resume).
    executor : Executor, optional
        Where jobs run; default `LocalExecutor(1)` (in this process).
    retry_failed : bool
        Run jobs recorded as failed again (default); False keeps their failure records.
    progress : callable, optional
        Called with a `StudyProgress` after each clip hashed and each job finished.
    lock_option : str
        How the folder is named in the refusal when another run holds it.

    Returns
    -------
    StudyOutcome

    Raises
    ------
    ParameterError
        When another run is using the folder (`synth.study.lock.StudyLock`: the message names its
        pid and host); a lock left by a killed run is taken over (noted in `StudyOutcome.notes`).

    Notes
    -----
    Jobs with a record are never submitted again; each record is written atomically as soon as its
    job finishes, so an interruption at any point loses at most the jobs in flight. A job that
    raises is recorded with its error and the others go on.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    with StudyLock(out_dir, option=lock_option) as lock:
        outcome = _run_locked(manifest, out_dir, executor=executor, retry_failed=retry_failed, progress=progress)
    if lock.took_over is not None:
        outcome.notes.append(
            f"took over the lock of a run that is gone (pid {lock.took_over.get('pid', '?')} on "
            f"{lock.took_over.get('host', '?')}); its finished jobs are kept, its jobs in flight run again"
        )
    return outcome


def _run_locked(
    manifest: Manifest,
    out_dir: Path,
    *,
    executor: Executor | None,
    retry_failed: bool,
    progress: Callable[[StudyProgress], None] | None,
) -> StudyOutcome:
    executor = executor or LocalExecutor(1)
    jobs = plan_study(manifest, out_dir, progress=progress)
    unique: dict[str, Job] = {}
    for job in jobs:
        unique.setdefault(job.id, job)
    existing = load_records(out_dir, unique)
    done = {jid for jid, rec in existing.items() if rec.get("status") == "ok" or not retry_failed}
    pending = [job for jid, job in unique.items() if jid not in done]

    run_id = datetime.now(UTC).strftime("%Y%m%dT%H%M%S%fZ") + "-" + secrets.token_hex(3)
    log = _RunLog(out_dir / "runs" / f"{run_id}.jsonl")
    log.write(
        "start",
        executor=executor.describe(),
        total=len(unique),
        skipped=len(done),
        code_version=code_version(),
        warnings=list(executor.warnings),
    )
    log.write("submit", jobs=[j.id for j in pending])
    skipped, failed, ran = len(done), [], 0
    if progress is not None:
        progress(StudyProgress("run", skipped, len(unique), skipped=skipped))
    t0 = time.perf_counter()
    try:
        for record in executor.run([j.to_dict() for j in pending], run_id=run_id):
            write_record(out_dir, record)
            ran += 1
            if record["status"] != "ok":
                failed.append(record)
            log.write("finish", job=record["id"], status=record["status"], seconds=record.get("seconds"))
            if progress is not None:
                progress(
                    StudyProgress("run", skipped + ran, len(unique), skipped=skipped, failed=len(failed), record=record)
                )
    except BaseException as exc:
        log.write("stop", reason=type(exc).__name__, finished=ran)
        log.close()
        raise
    seconds = time.perf_counter() - t0
    log.write("end", finished=ran, failed=len(failed), seconds=round(seconds, 3))
    log.close()
    if progress is not None:
        progress(StudyProgress("report", len(unique), len(unique), skipped=skipped, failed=len(failed)))
    tables, paths = write_outputs(manifest, jobs, out_dir)
    return StudyOutcome(
        out_dir, run_id, executor.describe(), jobs, ran, skipped, failed, seconds, tables, paths.get("report"), paths
    )
