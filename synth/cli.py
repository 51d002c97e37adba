"""The ``synth`` command line: the only module that imports typer.

Each command parses its options, calls one library function and formats the result. Library
errors (`synth.errors.SynthError`, a `ValueError`) become one line on stderr and exit code 2;
unexpected failures become one line too (set ``SYNTH_DEBUG=1`` for the traceback), exit code 3.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import typer
from typer.core import TyperGroup
from typer.exceptions import TyperException

from synth.commands.help_texts import HELP
from synth.commands.progress import Progress
from synth.errors import SynthError

EXIT_INPUT_ERROR = 2
EXIT_INTERNAL_ERROR = 3


class _OneLineErrors(TyperGroup):
    """Turns exceptions raised by a command into one line on stderr and a non-zero exit."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except (typer.Exit, typer.Abort, TyperException):
            raise
        except BrokenPipeError:  # output piped into a reader that stopped (e.g. head): end quietly
            _silence_stdout()
            raise typer.Exit(0) from None
        except SynthError as exc:
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except (OSError, ValueError) as exc:
            if os.environ.get("SYNTH_DEBUG"):
                raise
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except KeyboardInterrupt as exc:  # SIGINT; SIGTERM/SIGHUP too (synth.io.atomic.TerminatedBySignal)
            signum = getattr(exc, "signum", 2)
            typer.echo("synth: interrupted" if signum == 2 else f"synth: {exc}", err=True)
            raise typer.Exit(128 + signum) from None
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


# The options of the vocabulary shared by several commands (DEVELOPERS.md), declared once.
_JSON = typer.Option(False, "--json", help=HELP["shared.json"])
_VECTORS_TO_CONVERT = typer.Option(None, "--vectors", help=HELP["shared.vectors_to_convert"])
_PAST = typer.Option(..., "--past", help=HELP["shared.past"])
_FUTURE = typer.Option(..., "--future", help=HELP["shared.future"])
_TWO_WAY = typer.Option(False, "--two-way", help=HELP["shared.two_way"])
_PARAMS = typer.Option(None, "--params", help=HELP["shared.params"])
_TRAINING_PICTURES = typer.Option("0:32", "--pictures", help=HELP["shared.training_pictures"])
_RD_MAKERS = typer.Option("lmmse,dis-medium", "--makers", help=HELP["shared.rd_makers"])
_VECTORS = typer.Option(None, "--vectors", help=HELP["shared.vectors"])
_MAKER = typer.Option("lmmse", "--maker", help=HELP["shared.maker"])
_MAKERS = typer.Option(None, "--makers", help=HELP["shared.makers"])
_VECTOR_QPS = typer.Option(None, "--vector-qp", help=HELP["shared.vector_qps"])
_PICTURES = typer.Option(None, "--pictures", help=HELP["shared.pictures"])
_REPORT = typer.Option(None, "--report", help=HELP["shared.report"])
_BASELINE = typer.Option(None, "--baseline", help=HELP["shared.baseline"])


@app.callback()
def _root() -> None:
    """Interpolated reference frames from coded motion vectors, for video-coding research."""


def _print_json(obj) -> None:
    from synth.io.jsonout import dumps_strict

    typer.echo(dumps_strict(obj))


def _emit(summary: dict, as_json: bool, formatter) -> None:
    """Print a command's summary: strict JSON with ``--json``, else its text formatter's table."""
    if as_json:
        _print_json(summary)
    else:
        typer.echo(formatter(summary))


@app.command()
def info(
    clip: Path = typer.Argument(..., help=HELP["info.clip"]),
    frame: int = typer.Option(0, "--frame", "-f", help=HELP["info.frame"]),
    as_json: bool = _JSON,
    size: str | None = typer.Option(None, "--size", help=HELP["info.size"]),
    chroma: str | None = typer.Option(None, "--chroma", help=HELP["info.chroma"]),
    bit_depth: int | None = typer.Option(None, "--bit-depth", help=HELP["info.bit_depth"]),
    fps: float | None = typer.Option(None, "--fps", help=HELP["info.fps"]),
    matrix: str | None = typer.Option(None, "--matrix", help=HELP["info.matrix"]),
) -> None:
    """Show a clip's format, size, frame count, sample format, frame rate and one frame's plane statistics."""
    from synth.commands.info import describe_clip, format_info

    summary = describe_clip(
        clip, frame=frame, size=size, chroma_format=chroma, bit_depth=bit_depth, frame_rate=fps, matrix=matrix
    )
    _emit(summary, as_json, format_info)


@app.command()
def vectors(
    clip: Path = typer.Argument(..., help=HELP["vectors.clip"]),
    coded: int = typer.Option(..., "--coded", help=HELP["vectors.coded"]),
    ref: int = typer.Option(..., "--ref", help=HELP["vectors.ref"]),
    output: Path = typer.Option(..., "--output", "-o", help=HELP["vectors.output"]),
    vectors: str | None = _VECTORS_TO_CONVERT,
    vector_qp: int = typer.Option(27, "--vector-qp", help=HELP["vectors.vector_qp"]),
    search_range: int = typer.Option(64, "--range", help=HELP["vectors.search_range"]),
    blocks: str = typer.Option("64,32,16,8", "--blocks", help=HELP["vectors.blocks"]),
    overlay: Path | None = typer.Option(None, "--overlay", help=HELP["vectors.overlay"]),
    as_json: bool = _JSON,
) -> None:
    """Block vectors from one picture of a clip to another: estimated (or read from a field file), written and described."""
    from synth.commands.vectors import format_vectors, parse_block_sizes, run_vectors

    summary = run_vectors(
        clip, coded=coded, reference=ref, output=output, vectors=vectors, vector_qp=vector_qp,
        search_range=search_range, block_sizes=parse_block_sizes(blocks), overlay=overlay,
    )  # fmt: skip
    _emit(summary, as_json, format_vectors)


@app.command()
def frame(
    clip: Path = typer.Argument(..., help=HELP["frame.clip"]),
    past: int = _PAST,
    future: int = _FUTURE,
    at: int | None = typer.Option(None, "--at", help=HELP["frame.at"]),
    t: float | None = typer.Option(None, "--t", help=HELP["frame.t"]),
    output: Path = typer.Option(..., "--output", "-o", help=HELP["frame.output"]),
    vectors: str | None = _VECTORS,
    vector_qp: int = typer.Option(27, "--vector-qp", help=HELP["frame.vector_qp"]),
    two_way: bool = _TWO_WAY,
    params: Path | None = _PARAMS,
    maker: str = _MAKER,
    maps: Path | None = typer.Option(None, "--maps", help=HELP["frame.maps"]),
    as_json: bool = _JSON,
    offsets: Path | None = typer.Option(None, "--offsets", help=HELP["frame.offsets"]),
    offset_block: int = typer.Option(16, "--offset-block", help=HELP["frame.offset_block"]),
    offset_window: int = typer.Option(2, "--offset-window", help=HELP["frame.offset_window"]),
) -> None:
    """Make one picture between two pictures of a clip (default: from the vectors coded between them)."""
    from synth.commands.frame import format_frame, run_frame

    summary = run_frame(
        clip, past=past, future=future, at=at, t=t, output=output, vectors=vectors, vector_qp=vector_qp,
        two_way=two_way, params=params, maker=maker, maps=maps, offsets=offsets, offset_block=offset_block,
        offset_window=offset_window,
    )  # fmt: skip
    _emit(summary, as_json, format_frame)


@app.command()
def calibrate(
    clips: list[Path] = typer.Argument(..., help=HELP["calibrate.clips"]),
    output: Path = typer.Option(..., "--output", "-o", help=HELP["calibrate.output"]),
    gaps: str = typer.Option("2,4,8", "--gaps", help=HELP["calibrate.gaps"]),
    pictures: str = _TRAINING_PICTURES,
    per_gap: int = typer.Option(3, "--per-gap", help=HELP["calibrate.per_gap"]),
    vector_qp: int = typer.Option(27, "--vector-qp", help=HELP["calibrate.vector_qp"]),
    params: Path | None = typer.Option(None, "--params", help=HELP["calibrate.params"]),
    refine: bool = typer.Option(True, "--refine/--no-refine", help=HELP["calibrate.refine"]),
    evaluations: int = typer.Option(24, "--evaluations", help=HELP["calibrate.evaluations"]),
    model: str = typer.Option("interpolation", "--model", help=HELP["calibrate.model"]),
    as_json: bool = _JSON,
) -> None:
    """Fit the parameters of one model (the synthesis, or the one-reference predictor) on training clips."""
    from synth.commands.calibrate import format_calibrate, run_calibrate

    with Progress("calibrate") as bar:
        summary = run_calibrate(
            clips, output=output, gaps=gaps, pictures=pictures, per_gap=per_gap, vector_qp=vector_qp, params=params,
            refine=refine, evaluations=evaluations, model=model, progress=bar,
        )  # fmt: skip
    _emit(summary, as_json, format_calibrate)


@app.command()
def offsets(
    clip: Path = typer.Argument(..., help=HELP["offsets.clip"]),
    past: int = _PAST,
    future: int = _FUTURE,
    at: int = typer.Option(..., "--at", help=HELP["offsets.at"]),
    output: Path = typer.Option(..., "--output", "-o", help=HELP["offsets.output"]),
    vectors: str | None = _VECTORS,
    maker: str = _MAKER,
    vector_qp: int = typer.Option(27, "--vector-qp", help=HELP["offsets.vector_qp"]),
    params: Path | None = _PARAMS,
    offset_block: int = typer.Option(16, "--offset-block", help=HELP["offsets.offset_block"]),
    offset_window: int = typer.Option(2, "--offset-window", help=HELP["offsets.offset_window"]),
    metric: str = typer.Option("satd", "--metric", help=HELP["offsets.metric"]),
    prediction: Path | None = typer.Option(None, "--prediction", help=HELP["offsets.prediction"]),
    as_json: bool = _JSON,
) -> None:
    """Corrective block offsets of a target picture on the picture a maker makes for it, and their bit cost."""
    from synth.commands.offsets import format_offsets, run_offsets

    summary = run_offsets(
        clip, past=past, future=future, at=at, output=output, vectors=vectors, maker=maker, vector_qp=vector_qp,
        params=params, offset_block=offset_block, offset_window=offset_window, metric=metric, prediction=prediction,
    )  # fmt: skip
    _emit(summary, as_json, format_offsets)


@app.command()
def export(
    clip: Path = typer.Argument(..., help=HELP["export.clip"]),
    gop_size: int = typer.Option(8, "--gop-size", help=HELP["export.gop_size"]),
    output: Path = typer.Option(..., "-o", "--output", help=HELP["export.output"]),
    raw: bool = typer.Option(False, "--raw", help=HELP["export.raw"]),
    sidecar: Path | None = typer.Option(None, "--sidecar", help=HELP["export.sidecar"]),
    maker: str = typer.Option("lmmse", "--maker", help=HELP["export.maker"]),
    vectors: str | None = _VECTORS,
    vector_qp: int | None = typer.Option(None, "--vector-qp", help=HELP["export.vector_qp"]),
    params: Path | None = _PARAMS,
    as_json: bool = _JSON,
) -> None:
    """Synthetic reference pictures for every non-anchor picture of a hierarchical GOP, in display order."""
    from synth.commands.export import format_export, run_export

    with Progress(f"export {clip.name}") as bar:
        summary = run_export(
            clip, output=output, gop_size=gop_size, raw=raw, sidecar=sidecar, maker=maker, vectors=vectors,
            vector_qp=vector_qp, params=params, progress=bar,
        )  # fmt: skip
    _emit(summary, as_json, format_export)


@app.command()
def rd(
    clips: list[Path] = typer.Argument(..., help=HELP["rd.clips"]),
    gaps: str = typer.Option("8", "--gaps", help=HELP["rd.gaps"]),
    qps: str = typer.Option("22,27,32,37", "--qps", help=HELP["rd.qps"]),
    codec: str = typer.Option("h264", "--codec", help=HELP["rd.codec"]),
    makers: str = _RD_MAKERS,
    vectors: str | None = _VECTORS,
    vector_qp: int | None = typer.Option(None, "--vector-qp", help=HELP["rd.vector_qp"]),
    params: Path | None = _PARAMS,
    refs: str = typer.Option("decoded", "--refs", help=HELP["rd.refs"]),
    extra_qp: int = typer.Option(4, "--extra-qp", help=HELP["rd.extra_qp"]),
    preset: str = typer.Option("medium", "--preset", help=HELP["rd.preset"]),
    offsets: bool = typer.Option(False, "--offsets", help=HELP["rd.offsets"]),
    offset_block: int = typer.Option(16, "--offset-block", help=HELP["rd.offset_block"]),
    offset_window: int = typer.Option(2, "--offset-window", help=HELP["rd.offset_window"]),
    limit: int | None = typer.Option(None, "--limit", help=HELP["rd.limit"]),
    target_picture: str = typer.Option("B", "--target-picture", help=HELP["rd.target_picture"]),
    gop_size: int | None = typer.Option(None, "--gop-size", help=HELP["rd.gop_size"]),
    at: int | None = typer.Option(None, "--at", help=HELP["rd.at"]),
    report: Path | None = typer.Option(None, "--report", help=HELP["rd.report"]),
    as_json: bool = _JSON,
) -> None:
    """Bits an extra reference saves a real encoder: BD-rate against the two real references."""
    from synth.commands.rd import format_rd, rd_warnings, run_rd

    for line in rd_warnings(qps=qps):
        typer.echo(line, err=True)
    with Progress("rd") as bar:
        summary = run_rd(
            clips, gaps=gaps, qps=qps, codec=codec, makers=makers, vectors=vectors, vector_qp=vector_qp, params=params,
            refs=refs, extra_qp=extra_qp, preset=preset, offsets=offsets, offset_block=offset_block,
            offset_window=offset_window, limit=limit, target_picture=target_picture, gop_size=gop_size, at=at,
            report=report, progress=bar,
        )  # fmt: skip
    _emit(summary, as_json, format_rd)


@app.command()
def compare(
    clip: Path = typer.Argument(..., help=HELP["compare.clip"]),
    gaps: str | None = typer.Option(None, "--gaps", help=HELP["compare.gaps"]),
    makers: str | None = _MAKERS,
    vectors: str | None = _VECTORS,
    vector_qp: str | None = _VECTOR_QPS,
    two_way: bool = _TWO_WAY,
    params: Path | None = _PARAMS,
    pictures: str | None = _PICTURES,
    report: Path | None = _REPORT,
    baseline: str | None = _BASELINE,
    as_json: bool = _JSON,
) -> None:
    """Make every picture between references a gap apart with every maker and compare them."""
    from synth.commands.compare import format_compare, run_compare

    with Progress(f"compare {clip.name}") as bar:
        summary = run_compare(
            clip, gaps=gaps, makers=makers, vectors=vectors, vector_qp=vector_qp, two_way=two_way, params=params,
            pictures=pictures, report=report, baseline=baseline, progress=bar,
        )  # fmt: skip
    _emit(summary, as_json, format_compare)


@app.command()
def gop(
    clip: Path = typer.Argument(..., help=HELP["gop.clip"]),
    gop_size: int = typer.Option(8, "--gop-size", help=HELP["gop.gop_size"]),
    flat: bool = typer.Option(False, "--flat", help=HELP["gop.flat"]),
    decoded_refs: int | None = typer.Option(None, "--decoded-refs", help=HELP["gop.decoded_refs"]),
    makers: str | None = _MAKERS,
    vectors: str | None = _VECTORS,
    vector_qp: str | None = _VECTOR_QPS,
    two_way: bool = _TWO_WAY,
    params: Path | None = _PARAMS,
    pictures: str | None = _PICTURES,
    report: Path | None = _REPORT,
    export: Path | None = typer.Option(None, "--export", help=HELP["gop.export"]),
    export_maker: str | None = typer.Option(None, "--export-maker", help=HELP["gop.export_maker"]),
    baseline: str | None = _BASELINE,
    as_json: bool = _JSON,
) -> None:
    """Synthesise every B picture of a dyadic hierarchical GOP from its references; statistics per layer."""
    from synth.commands.gop import format_gop, run_gop_command

    with Progress(f"gop {clip.name}") as bar:
        summary = run_gop_command(
            clip, gop_size=gop_size, flat=flat, decoded_refs=decoded_refs, makers=makers, vectors=vectors,
            vector_qp=vector_qp, two_way=two_way, params=params, pictures=pictures, report=report, export=export,
            export_maker=export_maker, baseline=baseline, progress=bar,
        )  # fmt: skip
    _emit(summary, as_json, format_gop)


@app.command()
def predict(
    clip: Path = typer.Argument(..., help=HELP["predict.clip"]),
    pictures: str | None = typer.Option(None, "--pictures", help=HELP["predict.pictures"]),
    vectors: str | None = typer.Option(None, "--vectors", help=HELP["predict.vectors"]),
    vector_qp: int | None = typer.Option(None, "--vector-qp", help=HELP["predict.vector_qp"]),
    params: Path | None = typer.Option(None, "--params", help=HELP["predict.params"]),
    report: Path | None = typer.Option(None, "--report", help=HELP["predict.report"]),
    output: Path | None = typer.Option(None, "--output", "-o", help=HELP["predict.output"]),
    references: int = typer.Option(1, "--references", help=HELP["predict.references"]),
    as_json: bool = _JSON,
) -> None:
    """Predict inter pictures from their reference with their own vectors: block MC, OBMC and the LMMSE estimator."""
    from synth.commands.predict import format_predict, run_predict

    with Progress(f"predict {clip.name}") as bar:
        summary = run_predict(
            clip, pictures=pictures, vectors=vectors, vector_qp=vector_qp, params=params, report=report,
            output=output, references=references, progress=bar,
        )  # fmt: skip
    _emit(summary, as_json, format_predict)


@app.command()
def demo(
    report: Path = typer.Option(Path("synth-demo"), "--report", "-o", help=HELP["demo.report"]),
    baseline: str | None = _BASELINE,
    as_json: bool = _JSON,
) -> None:
    """Run the main job on the bundled demo clips: GOP runs and comparisons, with a report."""
    from synth.commands.demo import format_demo, run_demo_command

    with Progress("demo") as bar:
        summary = run_demo_command(report, baseline=baseline, progress=bar)
    _emit(summary, as_json, format_demo)


@app.command()
def study(
    manifest: Path = typer.Argument(..., help=HELP["study.manifest"]),
    output: Path = typer.Option(..., "--output", "-o", help=HELP["study.output"]),
    workers: int | None = typer.Option(None, "--workers", "-w", help=HELP["study.workers"]),
    cluster: str | None = typer.Option(None, "--cluster", help=HELP["study.cluster"]),
    keep_failed: bool = typer.Option(False, "--keep-failed", help=HELP["study.keep_failed"]),
    plan: bool = typer.Option(False, "--plan", help=HELP["study.plan"]),
    baseline: str | None = _BASELINE,
    as_json: bool = _JSON,
) -> None:
    """Run a whole study: every job kind on every clip over every parameter setting, resumably."""
    import shutil

    from synth.commands.study import format_study, plan_rows, run_study_command

    if plan:
        summary = plan_rows(manifest, output)
    else:
        summary = run_study_command(
            manifest, output, workers=workers, cluster=cluster, keep_failed=keep_failed, progress=Progress,
            baseline=baseline,
        )  # fmt: skip
        for note in summary["notes"]:
            typer.echo(f"synth: note: {note}", err=True)
        for f in summary["failures"]:
            typer.echo(f"failed: {f['job']} {f['kind']} {f['clip']} {f['setting']}: {f['error']}", err=True)
    if as_json:
        _print_json(summary)
    else:
        typer.echo(format_study(summary, width=shutil.get_terminal_size().columns if sys.stdout.isatty() else None))
    if summary.get("failures"):
        raise typer.Exit(1)  # some jobs failed (their records say why); the others finished


def _silence_stdout() -> None:
    """Point stdout at the null device, so no later write or the flush at exit reports a closed pipe."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):
        pass


def main() -> None:
    """Console-script entry point: SIGTERM/SIGHUP clean up like Ctrl-C (temporary files removed), a
    closed stdout ends quietly, and stale temporary files removed on the way are noted on stderr."""
    from synth.io.atomic import install_signal_cleanup, take_stale_notes

    install_signal_cleanup()
    try:
        app()
    finally:
        for note in take_stale_notes():
            try:
                typer.echo(f"synth: note: {note}", err=True)
            except OSError:
                pass
        try:
            sys.stdout.flush()
        except BrokenPipeError:
            _silence_stdout()
        except (OSError, ValueError):
            pass


if __name__ == "__main__":
    main()
