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

def _issue5_progress(description: str):
    """A rich progress bar on stderr; returns (context manager, callback(done, total))."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

    bar = Progress(
        TextColumn("[progress.description]{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    task = bar.add_task(description, total=None)

    def update(done: int, total: int) -> None:
        bar.update(task, completed=done, total=total)

    return bar, update


def _issue5_maker(name: str, field_path: Optional[Path] = None):
    from .reference_makers import maker_by_name

    if field_path is None:
        return maker_by_name(name)
    if name != "estimator":
        raise SynthError(f"--field needs --synthesiser estimator, got {name!r}")
    try:
        from synth.io import read_fields  # type: ignore[attr-defined]
    except ImportError:
        raise SynthError("--field: reading vector-field files needs synth.io.read_fields, which this build lacks") from None
    return maker_by_name(name, fields=list(read_fields(field_path)))


@app.command()
def offsets(
    clip: Path = typer.Argument(..., help="Clip file."),
    past: int = typer.Option(..., "--past", help="Picture number of the past reference."),
    future: int = typer.Option(..., "--future", help="Picture number of the future reference."),
    at: int = typer.Option(..., "--at", help="Picture number of the target (strictly between)."),
    output: Path = typer.Option(..., "-o", "--output", help="Offsets file to write (JSON)."),
    field: Optional[Path] = typer.Option(None, "--field", help="Vector field file to synthesise from (default: estimate)."),
    block: int = typer.Option(16, "--block", help="Block size in luma samples (8 or 16 usual)."),
    window: int = typer.Option(2, "--window", help="Search range in whole luma samples each way (quarter-pel steps)."),
    qp: int = typer.Option(27, "--qp", help="QP for lambda (and for estimated vectors)."),
    metric: str = typer.Option("satd", "--metric", help="Distortion: satd or sad."),
    synthesiser: str = typer.Option("estimator", "--synthesiser", help="estimator (the product) or blend (control)."),
    prediction: Optional[Path] = typer.Option(None, "--prediction", help="Also write the corrected prediction (.y4m)."),
    as_json: bool = typer.Option(False, "--json", help="Print the statistics as JSON."),
) -> None:
    """Corrective block offsets of a target picture on its synthetic reference, and their bit cost."""
    from synth.io import atomic_write_text, open_clip, write_y4m

    from .offsets import json_safe, offsets_document, refine_with_offsets

    maker = _issue5_maker(synthesiser, field)
    reader = open_clip(clip)
    try:
        n = len(reader)
        for name, v in (("--past", past), ("--future", future), ("--at", at)):
            if not 0 <= v < n:
                raise SynthError(f"{name} must be a picture number in 0..{n - 1}, got {v}")
        state = maker.prepare(reader.read(past), reader.read(future), past_time=past, future_time=future, qp=qp)
        synthetic = maker.make(state, time=at)
        target = reader.read(at)
        search = refine_with_offsets(target, synthetic, block=block, window=window, metric=metric, qp=qp, time=at)
        doc = offsets_document(
            search,
            extra={"source": str(clip), "past": past, "future": future, "synthesiser": maker.name, "fields": maker.describe(state)},
        )
        atomic_write_text(output, json.dumps(doc, indent=2) + "\n")
        if prediction is not None:
            write_y4m(prediction, [search.prediction], reader.info)
    finally:
        reader.close()
    st = search.stats
    if as_json:
        _print_json(json_safe(st.as_dict()))
        return
    typer.echo(f"blocks          {st.blocks} of {st.block}x{st.block}, window +-{st.window}, {st.metric}, lambda {st.lagrangian:.3f}")
    typer.echo(f"zero offsets    {100 * st.zero_share:.1f} %")
    typer.echo(f"offset bits     {st.bits_total} ({st.bits_per_block:.2f} per block, {st.bits_per_pixel:.4f} per pixel)")
    for plane in st.psnr_before:
        typer.echo(f"PSNR-{plane:<3}       {st.psnr_before[plane]:.2f} -> {st.psnr_after[plane]:.2f} dB")
    typer.echo(f"SAD (luma)      {st.sad_before:.0f} -> {st.sad_after:.0f}")
    typer.echo(f"written         {output}")


@app.command()
def export(
    clip: Path = typer.Argument(..., help="Clip file."),
    gop: int = typer.Option(8, "--gop", help="Dyadic hierarchical GOP size (power of two, 2..64)."),
    output: Path = typer.Option(..., "-o", "--output", help="Output file: .y4m, or raw planar with --raw."),
    raw: bool = typer.Option(False, "--raw", help="Write raw planar samples (no header) instead of Y4M."),
    sidecar: Optional[Path] = typer.Option(None, "--sidecar", help="Sidecar JSON path (default: OUTPUT + .json)."),
    qp: int = typer.Option(27, "--qp", help="QP of the estimated vectors."),
    synthesiser: str = typer.Option("estimator", "--synthesiser", help="estimator (the product) or blend (control)."),
) -> None:
    """Synthetic reference pictures for every non-anchor picture of a hierarchical GOP, in display order."""
    from synth.io import open_clip

    from .export import sidecar_path, write_reference_export

    maker = _issue5_maker(synthesiser)
    reader = open_clip(clip)
    bar, update = _issue5_progress("export")
    try:
        with bar:
            doc = write_reference_export(
                reader, output, gop=gop, maker=maker, qp=qp, raw=raw, sidecar=sidecar, source_name=str(clip), progress=update
            )
    finally:
        reader.close()
    typer.echo(
        f"{len(doc['pictures'])} synthetic pictures ({doc['width']}x{doc['height']} {doc['chroma_format']} "
        f"{doc['bit_depth']}-bit) -> {output}; sidecar {sidecar or sidecar_path(output)}"
    )
    if doc["uncovered"]:
        typer.echo(f"pictures {doc['uncovered'][0]}..{doc['uncovered'][-1]} lie after the last anchor and are not covered")


@app.command()
def rd(
    clips: list[Path] = typer.Argument(..., help="One or more clip files."),
    gap: int = typer.Option(8, "--gap", help="Distance between the two references."),
    qps: str = typer.Option("22,27,32,37", "--qps", help="Comma-separated QPs (four or more)."),
    codec: str = typer.Option("h264", "--codec", help="h264 (x264) or hevc (x265)."),
    synthesiser: str = typer.Option("estimator", "--synthesiser", help="estimator (the product) or blend (control)."),
    refs: str = typer.Option("decoded", "--refs", help="Make the synthetic picture from decoded or source references."),
    extra_qp: int = typer.Option(4, "--extra-qp", help="QP at which the extra reference picture is coded (bits not charged)."),
    preset: str = typer.Option("medium", "--preset", help="Encoder speed preset."),
    with_offsets: bool = typer.Option(False, "--offsets", help="Also run the offset search and measure its corrected picture."),
    block: int = typer.Option(16, "--block", help="Offset block size (with --offsets)."),
    window: int = typer.Option(2, "--window", help="Offset search range in luma samples (with --offsets)."),
    limit: Optional[int] = typer.Option(None, "--limit", help="Only the first N target pictures per clip."),
    report: Optional[Path] = typer.Option(None, "--report", help="Directory for rd.json, rd.csv and RD-curve PNGs."),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON instead of a table."),
) -> None:
    """Bits a synthetic third reference saves a real encoder: BD-rate against the two real references."""
    from synth.io import open_clip

    from .offsets import json_safe
    from .rdmeasure import measure_clip, parse_qps, summarise_clips
    from .rdreport import format_rd_table, write_rd_report

    maker = _issue5_maker(synthesiser)
    qp_list = parse_qps(qps)
    settings = {
        "gap": gap, "qps": qp_list, "codec": codec, "synthesiser": maker.name, "refs": refs,
        "extra_qp": extra_qp, "preset": preset, "offsets": {"block": block, "window": window} if with_offsets else None,
        "limit": limit,
    }
    results = []
    bar, update = _issue5_progress("rd")
    with bar:
        for path in clips:
            reader = open_clip(path)
            try:
                bar.console.print(f"{path}: {len(reader)} pictures", highlight=False)
                results.append(
                    measure_clip(
                        reader.read, len(reader), clip=str(path), gap=gap, qps=qp_list, codec=codec, maker=maker,
                        refs=refs, extra_qp=extra_qp, preset=preset,
                        offsets={"block": block, "window": window} if with_offsets else None,
                        limit=limit, progress=update,
                    )
                )
            finally:
                reader.close()
    summary = summarise_clips(results)
    if report is not None:
        write_rd_report(report, results, summary, settings)
    if as_json:
        _print_json(json_safe({"settings": settings, **summary}))
    else:
        typer.echo(format_rd_table(summary))
        if report is not None:
            typer.echo(f"report: {report}")


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
    out_console = Console(width=None if sys.stdout.isatty() else 160)  # tables are not cut when piped
    for kind in dict.fromkeys(m["kind"] for m in tables.means):
        metrics = tables.metrics.get(kind, [])
        shared = ", ".join(f"{k}={v}" for k, v in tables.fixed.get(kind, {}).items())
        table = Table(title=f"{kind}: mean over clips", title_justify="left", caption=f"every job: {shared}" if shared else None, caption_justify="left")
        from .study import get_kind

        cols = ["setting", *get_kind(kind).group_by, "clips", *metrics]
        for col in cols:
            table.add_column(col, justify="left" if col in ("setting", *get_kind(kind).group_by) else "right")
        for row in format_table([m for m in tables.means if m["kind"] == kind], cols):
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
