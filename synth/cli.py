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


class _ProgressBar:
    """A rich progress bar on stderr, used as the library's ``progress(done, total, label)`` callback."""

    def __init__(self, description: str):
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

        self._progress = Progress(
            TextColumn("{task.description}"),
            BarColumn(),
            MofNCompleteColumn(),
            TimeElapsedColumn(),
            TimeRemainingColumn(),
            TextColumn("{task.fields[label]}"),
            console=Console(stderr=True),
            transient=True,
        )
        self._description = description
        self._task = None

    def __enter__(self) -> "_ProgressBar":
        return self

    def __exit__(self, *exc) -> None:
        if self._task is not None:
            self._progress.stop()

    def __call__(self, done: int, total: int, label: str) -> None:
        if self._task is None:  # started on the first report, so an early error prints one line only
            self._progress.start()
            self._task = self._progress.add_task(self._description, total=total, label="")
        self._progress.update(self._task, completed=done, total=total, label=label)


def _open_for_run(clip: Path):
    from .io import open_clip

    return open_clip(clip)


@app.command()
def compare(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    gap: list[int] = typer.Option([8], "--gap", "-g", help="Distance between the references; repeat for several gaps."),
    predictors: Optional[str] = typer.Option(None, "--predictors", "-p", help="Comma-separated predictor names (default: all available)."),
    vector_qp: Optional[str] = typer.Option(None, "--vector-qp", help="Comma-separated QPs to estimate vectors at, e.g. 22,32,42."),
    report: Optional[Path] = typer.Option(None, "--report", "-r", help="Directory for report.html, results.json and results.csv."),
    frames: Optional[int] = typer.Option(None, "--frames", "-n", help="Use only the first N pictures of the clip."),
) -> None:
    """Predict every picture between references GAP apart with every predictor and compare."""
    from .compare import compare_clip
    from .tables import run_tables

    reader = _open_for_run(clip)
    with _ProgressBar(f"compare {clip.name}") as bar:
        result = compare_clip(
            reader, gaps=gap, predictors=predictors, vector_qps=vector_qp, limit=frames, clip_name=clip.name, progress=bar
        )
    typer.echo(run_tables(result))
    if report is not None:
        from .report import write_report

        paths = write_report([result], report, title=f"synth compare: {clip.name}")
        typer.echo(f"report: {paths['html']}")


@app.command()
def gop(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    size: int = typer.Option(16, "--size", "-s", help="GOP size: a power of two from 2 to 64."),
    flat: bool = typer.Option(False, "--flat", help="Predict every picture straight from the two anchors (t = k/size)."),
    decoded_refs: Optional[int] = typer.Option(None, "--decoded-refs", help="Take references from an H.264 encode/decode at this QP."),
    predictors: Optional[str] = typer.Option(None, "--predictors", "-p", help="Comma-separated predictor names (default: all available)."),
    vector_qp: Optional[str] = typer.Option(None, "--vector-qp", help="Comma-separated QPs to estimate vectors at, e.g. 22,32,42."),
    report: Optional[Path] = typer.Option(None, "--report", "-r", help="Directory for report.html, results.json and results.csv."),
    export: Optional[Path] = typer.Option(None, "--export", help="Write the synthetic pictures (anchors = references) to this .y4m file."),
    export_method: Optional[str] = typer.Option(None, "--export-method", help="Method whose pictures --export writes (default: lmmse, else the first predictor)."),
    frames: Optional[int] = typer.Option(None, "--frames", "-n", help="Use only the first N pictures of the clip."),
) -> None:
    """Synthesise every B picture of a dyadic hierarchical GOP from its references; statistics per layer."""
    from .errors import ParameterError
    from .gop import run_gop
    from .predictors import resolve_predictors
    from .tables import run_tables

    if export is not None and export.suffix.lower() != ".y4m":
        raise ParameterError(f"--export must name a .y4m file, got {str(export)!r}")
    method = export_method
    if export is not None and method is None:
        names = [p.name for p in resolve_predictors(predictors)]
        method = "lmmse" if "lmmse" in names else names[0]
        qps = [q for q in (vector_qp or "").split(",") if q.strip()]
        if len(qps) > 1 and resolve_predictors([method])[0].needs_fields:
            method = f"{method}@qp{int(qps[0])}"
    if export is None and export_method is not None:
        raise ParameterError("--export-method needs --export")
    reader = _open_for_run(clip)
    with _ProgressBar(f"gop {clip.name}") as bar:
        result = run_gop(
            reader,
            size=size,
            flat=flat,
            decoded_refs_qp=decoded_refs,
            predictors=predictors,
            vector_qps=vector_qp,
            limit=frames,
            clip_name=clip.name,
            export_method=method,
            frame_rate=reader.info.frame_rate,
            progress=bar,
        )
    typer.echo(run_tables(result))
    if export is not None:
        from dataclasses import replace

        from .io import write_clip

        info = replace(reader.info, frame_count=len(result.synthetic))
        write_clip(export, result.synthetic, info)
        typer.echo(f"exported {len(result.synthetic)} pictures ({method}) to {export}")
    if report is not None:
        from .report import write_report

        paths = write_report([result], report, title=f"synth gop: {clip.name}")
        typer.echo(f"report: {paths['html']}")


@app.command()
def demo(
    out: Path = typer.Option(Path("synth-demo"), "--out", "-o", help="Directory for the report."),
) -> None:
    """Run the main job on the bundled demo clips: GOP run and comparison, with a report."""
    from .demo import demo_plan, run_demo
    from .tables import run_tables

    plan = demo_plan()
    with _ProgressBar("demo") as bar:
        results, paths = run_demo(plan, out=out, progress=bar)
    for r in results:
        typer.echo(run_tables(r))
        typer.echo("")
    typer.echo(f"report: {paths['html']}")
    typer.echo(f"data:   {paths['json']}, {paths['csv']}")


# =============================================================================================
# Studies at scale: study  (issue 7)
# =============================================================================================


def main() -> None:
    """Console-script entry point."""
    app()


if __name__ == "__main__":
    main()
