"""The ``synth`` command line: the only module that imports typer.

Each command parses its options, calls one library function and formats the result. Library
errors (`synth.errors.SynthError`, a `ValueError`) become one line on stderr and exit code 2;
unexpected failures become one line too (set ``SYNTH_DEBUG=1`` for the traceback), exit code 3.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path
from typing import Optional

import typer
from typer.core import TyperGroup
from typer.exceptions import TyperException

from .errors import SynthError

EXIT_INPUT_ERROR = 2
EXIT_INTERNAL_ERROR = 3


class _OneLineErrors(TyperGroup):
    """Turns exceptions raised by a command into one line on stderr and a non-zero exit."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except (typer.Exit, typer.Abort, TyperException):
            raise
        except SynthError as exc:
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except (OSError, ValueError) as exc:
            if os.environ.get("SYNTH_DEBUG"):
                raise
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except KeyboardInterrupt:
            typer.echo("synth: interrupted", err=True)
            raise typer.Exit(130) from None
        except Exception as exc:  # noqa: BLE001 - last line of defence: never a traceback
            if os.environ.get("SYNTH_DEBUG"):
                raise
            typer.echo(f"synth: internal error: {type(exc).__name__}: {exc} (set SYNTH_DEBUG=1 for details)", err=True)
            raise typer.Exit(EXIT_INTERNAL_ERROR) from None


app = typer.Typer(
    cls=_OneLineErrors,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    help="Interpolated reference frames from coded motion vectors, for video-coding research.",
)


@app.callback()
def _root() -> None:
    """Interpolated reference frames from coded motion vectors, for video-coding research."""


def _print_json(obj) -> None:
    typer.echo(json.dumps(obj, indent=2, sort_keys=False, default=str))


# =============================================================================================
# Clips: info  (issue 2)
# =============================================================================================


@app.command()
def info(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    frame: int = typer.Option(0, "--frame", "-f", help="Frame whose plane statistics are shown."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of a table."),
) -> None:
    """Show a clip's format, size, frame count and one frame's plane statistics."""
    from .clipinfo import describe_clip

    desc = describe_clip(clip, frame=frame)
    if as_json:
        _print_json(desc)
        return
    for key, value in desc.items():
        if key == "planes":
            for name, st in value.items():
                typer.echo(f"  {name:<3} min {st['min']:>6}  max {st['max']:>6}  mean {st['mean']:10.3f}")
        else:
            typer.echo(f"{key:<14} {value}")


# =============================================================================================
# Coded motion: vectors  (issue 3)
# =============================================================================================


# =============================================================================================
# Synthesis: frame, calibrate  (issue 4)
# =============================================================================================


# =============================================================================================
# Encoder side: export, rd  (issue 5)
# =============================================================================================


# =============================================================================================
# Evaluation workbench: compare, gop, demo  (issue 6)
# =============================================================================================


# =============================================================================================
# Studies at scale: study  (issue 7)
# =============================================================================================

EXIT_JOBS_FAILED = 1


@app.command()
def study(
    manifest: Path = typer.Argument(..., help="Study manifest (TOML; see README 'Studies')."),
    out: Path = typer.Option(..., "--out", "-o", help="Study folder: job records, study.csv/json, report/. Reuse it to resume."),
    workers: Optional[int] = typer.Option(None, "--workers", "-w", help="Local worker processes (default: CPU count; 1 runs in this process)."),
    cluster: Optional[str] = typer.Option(None, "--cluster", help="Run on a Dask distributed scheduler, e.g. tcp://HOST:8786 (extra 'cluster')."),
    keep_failed: bool = typer.Option(False, "--keep-failed", help="Do not retry jobs recorded as failed."),
    plan: bool = typer.Option(False, "--plan", help="Validate, list the jobs and how many are done; run nothing."),
) -> None:
    """Run a whole study: every job kind on every clip over every parameter setting, resumably."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn
    from rich.table import Table

    from .study import load_manifest, make_executor, plan_study, run_study
    from .study.report import format_table
    from .study.runner import load_records

    spec = load_manifest(manifest)  # validation errors: one line, exit 2, before anything runs
    console = Console(stderr=True)
    if plan:
        jobs = plan_study(spec, out)
        ids = {j.id for j in jobs}
        records = load_records(out, ids)
        ok = sum(1 for r in records.values() if r.get("status") == "ok")
        failed = sum(1 for r in records.values() if r.get("status") != "ok")
        for j in jobs:
            state = records.get(j.id, {}).get("status", "to do")
            typer.echo(f"{j.id}  {state:<6} {j.kind:<8} {j.clip:<20} " + " ".join(f"{k}={v}" for k, v in sorted(j.params.items()) if k != "raw"))
        typer.echo(f"{len(ids)} jobs: {ok} done, {failed} failed, {len(ids) - ok - failed} to do")
        return

    executor = make_executor(workers=workers, cluster=cluster)
    with executor, Progress(
        TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TextColumn("{task.fields[note]}"),
        TimeElapsedColumn(), TimeRemainingColumn(), console=console, transient=False,
    ) as bar:
        tasks: dict[str, int] = {}

        def progress(ev) -> None:
            if ev.phase not in tasks:
                label = {"hash": "hashing clips", "run": f"jobs ({executor.describe()})", "report": "report"}[ev.phase]
                tasks[ev.phase] = bar.add_task(label, total=ev.total, note="")
            note = f"{ev.skipped} skipped" + (f", {ev.failed} failed" if ev.failed else "") if ev.phase == "run" else ""
            bar.update(tasks[ev.phase], completed=ev.done, total=ev.total, note=note)

        outcome = run_study(spec, out, executor=executor, retry_failed=not keep_failed, progress=progress)

    tables = outcome.tables
    total = len({j.id for j in outcome.jobs})
    rate = f", {outcome.jobs_per_second:.2f} jobs/s" if outcome.ran else ""
    typer.echo(
        f"{total} jobs: ran {outcome.ran} in {outcome.seconds:.1f} s on {outcome.executor}{rate}; "
        f"{outcome.skipped} already done; {len(outcome.failed)} failed"
    )
    out_console = Console()
    for kind in dict.fromkeys(m["kind"] for m in tables.means):
        metrics = tables.metrics.get(kind, [])
        table = Table(title=f"{kind}: mean over clips", title_justify="left")
        for col in ["setting", "clips", *metrics]:
            table.add_column(col, justify="left" if col == "setting" else "right")
        for row in format_table([m for m in tables.means if m["kind"] == kind], ["setting", "clips", *metrics]):
            table.add_row(*row)
        out_console.print(table)
    for f in tables.failures:
        typer.echo(f"failed: {f['job']} {f['kind']} {f['clip']} {f['setting']}: {f['error']}", err=True)
    typer.echo(f"results: {outcome.paths['csv']}, {outcome.paths['json']}; report: {outcome.paths['report']}")
    if tables.failures:
        raise typer.Exit(EXIT_JOBS_FAILED)



def main() -> None:
    """Console-script entry point."""
    app()


if __name__ == "__main__":
    main()
