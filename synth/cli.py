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
            try:
                sys.stdout = open(os.devnull, "w")
            except OSError:
                pass
            raise typer.Exit(0) from None
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


# The options of the vocabulary shared by several commands (DEVELOPERS.md), declared once.
_JSON = typer.Option(False, "--json", help="Print the result as strict JSON (non-finite numbers as null).")
_VECTORS_TO_CONVERT = typer.Option(
    None,
    "--vectors",
    help="Vector input: 'estimate' (default) or a field file (.json/.npz) to re-summarise or convert.",
)
_PAST = typer.Option(..., "--past", help="Picture number of the past reference.")
_FUTURE = typer.Option(..., "--future", help="Picture number of the future reference.")
_TWO_WAY = typer.Option(False, "--two-way", help="Estimate vectors in both coding directions.")
_PARAMS = typer.Option(None, "--params", help="Synthesis parameter file (JSON).")
_TRAINING_PICTURES = typer.Option(
    "0:32",
    "--pictures",
    help="Pictures of each clip used, FIRST:LAST (display numbers, both included; ':32', '8:').",
)
_RD_MAKERS = typer.Option(
    "lmmse,dis-medium",
    "--makers",
    help="Comma-separated makers, one extra-reference configuration each; the first is the synthetic one (b, c, offsets): lmmse, projection, weighted, obmc, average, dis-fast, dis-medium, farneback.",
)
_VECTORS = typer.Option(None, "--vectors", help="Vector input: 'estimate' (default) or a field file (.json/.npz).")
_MAKER = typer.Option(
    "lmmse",
    "--maker",
    help="Picture maker: lmmse, projection, weighted, obmc, average, dis-fast, dis-medium, farneback.",
)
_MAKERS = typer.Option(
    None,
    "--makers",
    help="Comma-separated makers: lmmse, projection, weighted, obmc, average, dis-fast, dis-medium, farneback (default: every maker).",
)
_VECTOR_QPS = typer.Option(
    None,
    "--vector-qp",
    help="QP of the estimated vectors, 0..51, or a comma list for a sweep, e.g. 22,32,42 (default: 27).",
)
_PICTURES = typer.Option(
    None,
    "--pictures",
    help="Pictures used, FIRST:LAST (display numbers, both included; ':32', '8:'). Default: the whole clip.",
)
_REPORT = typer.Option(None, "--report", help="Folder for report.html, results.json and results.csv.")


@app.callback()
def _root() -> None:
    """Interpolated reference frames from coded motion vectors, for video-coding research."""


def _print_json(obj) -> None:
    from synth.io.jsonout import dumps_strict

    typer.echo(dumps_strict(obj))


@app.command()
def info(
    clip: Path = typer.Argument(
        ..., help="Clip: .y4m, raw .yuv, image pattern (frame_%03d.png) or any video OpenCV decodes."
    ),
    frame: int = typer.Option(
        0, "--frame", "-f", help="Frame whose plane statistics are shown (negative: from the end)."
    ),
    as_json: bool = _JSON,
    size: str | None = typer.Option(
        None, "--size", help="Raw .yuv only: WIDTHxHEIGHT (else taken from the file name)."
    ),
    chroma: str | None = typer.Option(None, "--chroma", help="Raw .yuv / images: 420, 422, 444 or mono."),
    bit_depth: int | None = typer.Option(None, "--bit-depth", help="Raw .yuv / images: bits per sample, 8..16."),
    fps: float | None = typer.Option(None, "--fps", help="Raw .yuv / images: frame rate to report."),
    matrix: str | None = typer.Option(
        None, "--matrix", help="Images / compressed video: R'G'B' to Y'CbCr matrix, 601 (default) or 709."
    ),
) -> None:
    """Show a clip's format, size, frame count, sample format, frame rate and one frame's plane statistics."""
    from synth.commands.info import describe_clip, format_info

    summary = describe_clip(
        clip, frame=frame, size=size, chroma_format=chroma, bit_depth=bit_depth, frame_rate=fps, matrix=matrix
    )
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_info(summary))


@app.command()
def vectors(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    coded: int = typer.Option(..., "--coded", help="Picture number whose blocks get vectors."),
    ref: int = typer.Option(..., "--ref", help="Picture number the vectors point to."),
    output: Path = typer.Option(..., "--output", "-o", help="Field file: .json, .npz, or .csv (export)."),
    vectors: str | None = _VECTORS_TO_CONVERT,
    vector_qp: int = typer.Option(
        27, "--vector-qp", help="QP of the estimated vectors, 0..51: higher = cheaper, smoother field."
    ),
    search_range: int = typer.Option(64, "--range", help="Largest vector component of the estimator, luma samples."),
    blocks: str = typer.Option(
        "64,32,16,8", "--blocks", help="Block sizes the estimator's quadtree may use, comma-separated."
    ),
    overlay: Path | None = typer.Option(None, "--overlay", help="PNG with block outlines and arrows."),
    as_json: bool = _JSON,
) -> None:
    """Block vectors from one picture of a clip to another: estimated (or read from a field file), written and described."""
    from synth.commands.vectors import format_vectors, parse_block_sizes, run_vectors

    summary = run_vectors(
        clip, coded=coded, reference=ref, output=output, vectors=vectors, vector_qp=vector_qp,
        search_range=search_range, block_sizes=parse_block_sizes(blocks), overlay=overlay,
    )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_vectors(summary))


@app.command()
def frame(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    past: int = _PAST,
    future: int = _FUTURE,
    at: int | None = typer.Option(None, "--at", help="Picture number to make (its true picture is measured against)."),
    t: float | None = typer.Option(
        None, "--t", help="Fraction strictly in (0, 1) from past to future, when no true picture exists."
    ),
    output: Path = typer.Option(..., "--output", "-o", help="The picture made, 1-frame .y4m."),
    vectors: str | None = _VECTORS,
    vector_qp: int = typer.Option(
        27, "--vector-qp", help="QP of the estimated vectors, 0..51 (also sets the offsets' lambda)."
    ),
    two_way: bool = _TWO_WAY,
    params: Path | None = _PARAMS,
    maker: str = _MAKER,
    maps: Path | None = typer.Option(None, "--maps", help="Directory for PNG maps (created when missing)."),
    as_json: bool = _JSON,
    offsets: Path | None = typer.Option(
        None, "--offsets", help="Also search corrective block offsets against picture --at and write them (.json)."
    ),
    offset_block: int = typer.Option(16, "--offset-block", help="Offset block size in luma samples (with --offsets)."),
    offset_window: int = typer.Option(
        2, "--offset-window", help="Offset search range in luma samples, quarter-pel steps (with --offsets)."
    ),
) -> None:
    """Make one picture between two pictures of a clip (default: from the vectors coded between them)."""
    from synth.commands.frame import format_frame, run_frame

    summary = run_frame(
        clip, past=past, future=future, at=at, t=t, output=output, vectors=vectors, vector_qp=vector_qp,
        two_way=two_way, params=params, maker=maker, maps=maps, offsets=offsets, offset_block=offset_block,
        offset_window=offset_window,
    )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_frame(summary))


@app.command()
def calibrate(
    clips: list[Path] = typer.Argument(..., help="Training clips (.y4m, or any video OpenCV decodes)."),
    output: Path = typer.Option(..., "--output", "-o", help="Parameter file to write (.json)."),
    gaps: str = typer.Option("2,4,8", "--gaps", help="Reference gaps, comma-separated even integers."),
    pictures: str = _TRAINING_PICTURES,
    per_gap: int = typer.Option(3, "--per-gap", help="Target pictures per clip and reference gap."),
    vector_qp: int = typer.Option(27, "--vector-qp", help="QP of the estimated vectors, 0..51."),
    params: Path | None = typer.Option(
        None, "--params", help="Starting synthesis parameter file (default: built-in values)."
    ),
    refine: bool = typer.Option(True, "--refine/--no-refine", help="Refine by maximising prediction PSNR."),
    evaluations: int = typer.Option(24, "--evaluations", help="Most parameter sets the refinement tries."),
    as_json: bool = _JSON,
) -> None:
    """Fit the synthesis parameters and the learned reliability on training clips."""
    from synth.commands.calibrate import format_calibrate, run_calibrate

    with Progress("calibrate") as bar:
        summary = run_calibrate(
            clips, output=output, gaps=gaps, pictures=pictures, per_gap=per_gap, vector_qp=vector_qp, params=params,
            refine=refine, evaluations=evaluations, progress=bar,
        )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_calibrate(summary))


@app.command()
def offsets(
    clip: Path = typer.Argument(..., help="Clip file."),
    past: int = _PAST,
    future: int = _FUTURE,
    at: int = typer.Option(..., "--at", help="Picture number of the target (strictly between)."),
    output: Path = typer.Option(..., "--output", "-o", help="Offsets file to write (.json)."),
    vectors: str | None = _VECTORS,
    maker: str = _MAKER,
    vector_qp: int = typer.Option(
        27, "--vector-qp", help="QP of the estimated vectors, 0..51, and of the offsets' lambda."
    ),
    params: Path | None = _PARAMS,
    offset_block: int = typer.Option(
        16, "--offset-block", help="Offset block size in luma samples (4, 8, 16, 32 or 64)."
    ),
    offset_window: int = typer.Option(
        2, "--offset-window", help="Offset search range in luma samples each way, 0..8 (quarter-pel steps)."
    ),
    metric: str = typer.Option("satd", "--metric", help="Distortion: satd or sad."),
    prediction: Path | None = typer.Option(None, "--prediction", help="Also write the corrected prediction (.y4m)."),
    as_json: bool = _JSON,
) -> None:
    """Corrective block offsets of a target picture on the picture a maker makes for it, and their bit cost."""
    from synth.commands.offsets import format_offsets, run_offsets

    summary = run_offsets(
        clip, past=past, future=future, at=at, output=output, vectors=vectors, maker=maker, vector_qp=vector_qp,
        params=params, offset_block=offset_block, offset_window=offset_window, metric=metric, prediction=prediction,
    )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_offsets(summary))


@app.command()
def export(
    clip: Path = typer.Argument(..., help="Clip file."),
    gop_size: int = typer.Option(8, "--gop-size", help="Dyadic hierarchical GOP size: a power of two from 2 to 64."),
    output: Path = typer.Option(..., "-o", "--output", help="Output file: .y4m, or raw planar with --raw."),
    raw: bool = typer.Option(False, "--raw", help="Write raw planar samples (no header) instead of Y4M."),
    sidecar: Path | None = typer.Option(None, "--sidecar", help="Sidecar JSON path (default: OUTPUT + .json)."),
    maker: str = typer.Option(
        "lmmse", "--maker", help="Maker: lmmse, projection, weighted, obmc, average, dis-fast, dis-medium, farneback."
    ),
    vectors: str | None = _VECTORS,
    vector_qp: int | None = typer.Option(None, "--vector-qp", help="QP of the estimated vectors, 0..51 (default: 27)."),
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
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_export(summary))


@app.command()
def rd(
    clips: list[Path] = typer.Argument(..., help="One or more clip files."),
    gaps: str = typer.Option("8", "--gaps", help="Comma-separated distances between the two references, e.g. 4,8."),
    qps: str = typer.Option("22,27,32,37", "--qps", help="Comma-separated encoder QPs (four or more)."),
    codec: str = typer.Option("h264", "--codec", help="h264 (x264) or hevc (x265)."),
    makers: str = _RD_MAKERS,
    vectors: str | None = _VECTORS,
    vector_qp: int | None = typer.Option(
        None, "--vector-qp", help="QP of the estimated vectors, 0..51 (default: each point's encoder QP)."
    ),
    params: Path | None = _PARAMS,
    refs: str = typer.Option("decoded", "--refs", help="Make the extra references from decoded or source references."),
    extra_qp: int = typer.Option(
        4, "--extra-qp", help="QP at which the extra reference picture is coded (bits not charged)."
    ),
    preset: str = typer.Option("medium", "--preset", help="Encoder speed preset."),
    offsets: bool = typer.Option(
        False, "--offsets", help="Also run the offset search and measure its corrected picture."
    ),
    offset_block: int = typer.Option(16, "--offset-block", help="Offset block size in luma samples (with --offsets)."),
    offset_window: int = typer.Option(
        2, "--offset-window", help="Offset search range in luma samples (with --offsets)."
    ),
    limit: int | None = typer.Option(None, "--limit", help="Only the first N target pictures per clip and gap."),
    report: Path | None = typer.Option(None, "--report", help="Folder for rd.json, rd.csv and RD-curve PNGs."),
    as_json: bool = _JSON,
) -> None:
    """Bits an extra reference saves a real encoder: BD-rate against the two real references."""
    from synth.commands.rd import format_rd, run_rd

    with Progress("rd") as bar:
        summary = run_rd(
            clips, gaps=gaps, qps=qps, codec=codec, makers=makers, vectors=vectors, vector_qp=vector_qp, params=params,
            refs=refs, extra_qp=extra_qp, preset=preset, offsets=offsets, offset_block=offset_block,
            offset_window=offset_window, limit=limit, report=report, progress=bar,
        )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_rd(summary))


@app.command()
def compare(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    gaps: str | None = typer.Option(None, "--gaps", help="Comma-separated reference gaps, even integers (default: 8)."),
    makers: str | None = _MAKERS,
    vectors: str | None = _VECTORS,
    vector_qp: str | None = _VECTOR_QPS,
    two_way: bool = _TWO_WAY,
    params: Path | None = _PARAMS,
    pictures: str | None = _PICTURES,
    report: Path | None = _REPORT,
    as_json: bool = _JSON,
) -> None:
    """Make every picture between references a gap apart with every maker and compare them."""
    from synth.commands.compare import format_compare, run_compare

    with Progress(f"compare {clip.name}") as bar:
        summary = run_compare(
            clip, gaps=gaps, makers=makers, vectors=vectors, vector_qp=vector_qp, two_way=two_way, params=params,
            pictures=pictures, report=report, progress=bar,
        )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_compare(summary))


@app.command()
def gop(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    gop_size: int = typer.Option(8, "--gop-size", help="GOP size: a power of two from 2 to 64."),
    flat: bool = typer.Option(False, "--flat", help="Make every picture straight from the two anchors (t = k/size)."),
    decoded_refs: int | None = typer.Option(
        None, "--decoded-refs", help="Take references from an H.264 encode/decode at this QP (0..51)."
    ),
    makers: str | None = _MAKERS,
    vectors: str | None = _VECTORS,
    vector_qp: str | None = _VECTOR_QPS,
    two_way: bool = _TWO_WAY,
    params: Path | None = _PARAMS,
    pictures: str | None = _PICTURES,
    report: Path | None = _REPORT,
    export: Path | None = typer.Option(
        None,
        "--export",
        help="Write the synthetic pictures (display order, no anchors) to this .y4m file, with a JSON sidecar.",
    ),
    export_maker: str | None = typer.Option(
        None,
        "--export-maker",
        help="Maker whose pictures --export writes (default: lmmse when run, else the first maker).",
    ),
    as_json: bool = _JSON,
) -> None:
    """Synthesise every B picture of a dyadic hierarchical GOP from its references; statistics per layer."""
    from synth.commands.gop import format_gop, run_gop_command

    with Progress(f"gop {clip.name}") as bar:
        summary = run_gop_command(
            clip, gop_size=gop_size, flat=flat, decoded_refs=decoded_refs, makers=makers, vectors=vectors,
            vector_qp=vector_qp, two_way=two_way, params=params, pictures=pictures, report=report, export=export,
            export_maker=export_maker, progress=bar,
        )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_gop(summary))


@app.command()
def demo(
    report: Path = typer.Option(
        Path("synth-demo"), "--report", "-o", help="Folder for report.html, results.json and results.csv."
    ),
    as_json: bool = _JSON,
) -> None:
    """Run the main job on the bundled demo clips: GOP runs and comparisons, with a report."""
    from synth.commands.demo import format_demo, run_demo_command

    with Progress("demo") as bar:
        summary = run_demo_command(report, progress=bar)
    if as_json:
        _print_json(summary)
        return
    typer.echo(format_demo(summary))


@app.command()
def study(
    manifest: Path = typer.Argument(..., help="Study manifest (TOML; see README 'Studies')."),
    output: Path = typer.Option(
        ..., "--output", "-o", help="Study folder: job records, study.csv/json, report/. Reuse it to resume."
    ),
    workers: int | None = typer.Option(
        None, "--workers", "-w", help="Local worker processes (default: CPU count; 1 runs in this process)."
    ),
    cluster: str | None = typer.Option(
        None, "--cluster", help="Run on a Dask distributed scheduler, e.g. tcp://HOST:8786 (extra 'cluster')."
    ),
    keep_failed: bool = typer.Option(False, "--keep-failed", help="Do not retry jobs recorded as failed."),
    plan: bool = typer.Option(False, "--plan", help="Validate, list the jobs and how many are done; run nothing."),
    as_json: bool = _JSON,
) -> None:
    """Run a whole study: every job kind on every clip over every parameter setting, resumably."""
    import shutil

    from synth.commands.study import format_study, plan_rows, run_study_command

    if plan:
        summary = plan_rows(manifest, output)
    else:
        summary = run_study_command(
            manifest, output, workers=workers, cluster=cluster, keep_failed=keep_failed, progress=Progress
        )
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


def main() -> None:
    """Console-script entry point."""
    app()


if __name__ == "__main__":
    main()
