"""What `synth study` does: plan a study (list its jobs and their states) or run it, and the text
of both (`synth.study` is the library)."""

from __future__ import annotations

import io
import os
from collections.abc import Callable

__all__ = ["PHASES", "plan_rows", "run_study_command", "format_study"]

#: Description of each phase of a run, shown by its progress bar ('{executor}' is filled in).
PHASES = {"hash": "hashing clips", "run": "jobs ({executor})", "report": "report"}


def _manifest(manifest):
    from synth.study import Manifest, load_manifest

    return manifest if isinstance(manifest, Manifest) else load_manifest(manifest)


def plan_rows(manifest, output: str | os.PathLike) -> dict:
    """The jobs of a study and how far the study folder has got, running nothing.

    Parameters
    ----------
    manifest : path or Manifest
        The study manifest (validated first: errors before anything else).
    output : path
        The study folder (``-o/--output``).

    Returns
    -------
    dict
        ``plan`` (True), ``jobs`` (one dict per job in manifest order: ``id``, ``state`` ('ok',
        'failed' or 'to do'), ``kind``, ``clip``, ``params`` without the raw-clip options),
        ``total`` (distinct jobs), ``done``, ``failed``, ``to_do``.
    """
    from synth.commands.outputs import check_output_dir
    from synth.study import plan_study
    from synth.study.runner import load_records

    spec = _manifest(manifest)
    output = check_output_dir(output, option="--output")
    jobs = plan_study(spec, output)
    ids = {j.id for j in jobs}
    records = load_records(output, ids)
    ok = sum(1 for r in records.values() if r.get("status") == "ok")
    failed = sum(1 for r in records.values() if r.get("status") != "ok")
    rows = [
        {
            "id": j.id,
            "state": records.get(j.id, {}).get("status", "to do"),
            "kind": j.kind,
            "clip": j.clip,
            "params": {k: v for k, v in sorted(j.params.items()) if k != "raw"},
        }
        for j in jobs
    ]
    return {
        "format": "synth-study-plan",
        "schema_version": 1,
        "plan": True,
        "jobs": rows,
        "total": len(ids),
        "done": ok,
        "failed": failed,
        "to_do": len(ids) - ok - failed,
    }


class _Phases:
    """Adapts the study's `StudyProgress` events to one ``(done, total, label)`` progress per phase."""

    def __init__(self, factory, executor: str):
        self.factory = factory
        self.executor = executor
        self.phase = None
        self.current = None

    def __call__(self, ev) -> None:
        if self.factory is None:
            return
        if ev.phase != self.phase:
            self.close()
            self.phase = ev.phase
            self.current = self.factory(PHASES.get(ev.phase, ev.phase).format(executor=self.executor))
        note = ""
        if ev.phase == "run":
            note = f"{ev.skipped} skipped" + (f", {ev.failed} failed" if ev.failed else "")
        self.current(ev.done, ev.total, note)

    def close(self) -> None:
        if self.current is not None and hasattr(self.current, "close"):
            self.current.close()
        self.current = None


def run_study_command(
    manifest,
    output: str | os.PathLike,
    *,
    workers: int | None = None,
    cluster: str | None = None,
    keep_failed: bool = False,
    progress: Callable[[str], Callable[[int, int, str], None]] | None = None,
    baseline: str | None = None,
) -> dict:
    """Run every job of a study that is not done yet, then aggregate and report.

    Parameters
    ----------
    manifest : path or Manifest
    output : path
        The study folder (``-o/--output``); reuse it to resume.
    workers : int, optional
        ``--workers``: local worker processes (default: CPU count; 1 runs in this process).
    cluster : str, optional
        ``--cluster``: a Dask scheduler address.
    keep_failed : bool
        ``--keep-failed``: do not retry jobs recorded as failed.
    progress : callable, optional
        A factory ``progress(description) -> callback(done, total, label)`` (e.g.
        `synth.commands.progress.Progress`): one callback per phase (hashing, jobs, report), each
        closed (``close()``, when it has one) as the next phase starts.
    baseline : str, optional
        ``--baseline``: the maker the report's differences are taken to (default dis-medium when
        run); the report is written again with it after the run.

    Returns
    -------
    dict
        ``plan`` (False), ``total``, ``ran``, ``skipped``, ``failed`` (counts), ``seconds``,
        ``executor``, ``jobs_per_second``, ``notes`` (executor notes), ``tables`` (per job kind:
        ``columns``, ``fixed`` parameters, ``rows`` = the means over clips), ``failures`` (``job``,
        ``kind``, ``clip``, ``setting``, ``error``), ``differences`` (per kind that compares
        methods: `synth.study.report.study_differences` rows), ``baseline``, ``paths`` (csv, json,
        report); ``format`` 'synth-study-summary' and ``schema_version``.
    """
    from synth.commands.outputs import check_output_dir
    from synth.study import get_kind, make_executor, run_study

    spec = _manifest(manifest)  # validation errors before anything runs
    output = check_output_dir(output, option="--output")
    if baseline is not None:
        from synth.makers import get_maker

        get_maker(baseline, option="--baseline")
    executor = make_executor(workers=workers, cluster=cluster)
    phases = _Phases(progress, executor.describe())
    try:
        with executor:
            outcome = run_study(spec, output, executor=executor, retry_failed=not keep_failed, progress=phases)
    finally:
        phases.close()
    tables = outcome.tables
    from synth.study.report import rewrite_report, study_differences

    if baseline is not None:
        rewrite_report(tables, output, baseline=baseline)
    diffs = study_differences(tables, baseline=baseline)
    per_kind = {}
    for kind in dict.fromkeys(m["kind"] for m in tables.means):
        group = list(get_kind(kind).group_by)
        per_kind[kind] = {
            "columns": ["setting", *group, "clips", *tables.metrics.get(kind, [])],
            "group_by": group,
            "fixed": dict(tables.fixed.get(kind, {})),
            "rows": [m for m in tables.means if m["kind"] == kind],
        }
    return {
        "format": "synth-study-summary",
        "schema_version": 1,
        "plan": False,
        "total": len({j.id for j in outcome.jobs}),
        "ran": outcome.ran,
        "skipped": outcome.skipped,
        "failed": len(outcome.failed),
        "seconds": outcome.seconds,
        "executor": outcome.executor,
        "jobs_per_second": outcome.jobs_per_second,
        "notes": list(executor.warnings) + list(outcome.notes),
        "tables": per_kind,
        "failures": list(tables.failures),
        "baseline": diffs["baseline"],
        "differences": diffs["kinds"],
        "paths": {k: str(v) for k, v in outcome.paths.items()},
    }


def _format_plan(summary: dict) -> str:
    lines = []
    for j in summary["jobs"]:
        params = " ".join(f"{k}={v}" for k, v in j["params"].items())
        lines.append(f"{j['id']}  {j['state']:<6} {j['kind']:<8} {j['clip']:<20} " + params)
    lines.append(
        f"{summary['total']} jobs: {summary['done']} done, {summary['failed']} failed, {summary['to_do']} to do"
    )
    return "\n".join(lines)


def format_study(summary: dict, *, width: int | None = None) -> str:
    """The text `synth study` prints (stdout): the job list of a plan, or for a run one line of
    counts, a table of means over clips per job kind and where the results are.

    Parameters
    ----------
    summary : dict
        From `plan_rows` or `run_study_command`.
    width : int, optional
        Width of the tables (default 160, so they are not cut when piped).
    """
    if summary.get("plan"):
        return _format_plan(summary)
    from rich.console import Console
    from rich.table import Table

    from synth.study.report import format_table

    rate = f", {summary['jobs_per_second']:.2f} jobs/s" if summary["ran"] else ""
    lines = [
        f"{summary['total']} jobs: ran {summary['ran']} in {summary['seconds']:.1f} s on {summary['executor']}{rate}; "
        f"{summary['skipped']} already done; {summary['failed']} failed"
    ]
    buf = io.StringIO()
    console = Console(file=buf, width=width or 160, force_terminal=False, color_system=None)
    for kind, t in summary["tables"].items():
        shared = ", ".join(f"{k}={v}" for k, v in t["fixed"].items())
        table = Table(
            title=f"{kind}: mean over clips",
            title_justify="left",
            caption=f"every job: {shared}" if shared else None,
            caption_justify="left",
        )
        for col in t["columns"]:
            table.add_column(col, justify="left" if col in ("setting", *t["group_by"]) else "right")
        for row in format_table(t["rows"], t["columns"]):
            table.add_row(*row)
        console.print(table)
    text = buf.getvalue().rstrip("\n")
    if text:
        lines.append(text)
    paths = summary["paths"]
    lines.append(f"results: {paths.get('csv')}, {paths.get('json')}; report: {paths.get('report')}")
    return "\n".join(lines)
