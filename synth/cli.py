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
        except SynthError as exc:
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except (OSError, ValueError) as exc:
            if os.environ.get("SYNTH_DEBUG"):
                raise
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except BrokenPipeError:  # output piped into a reader that stopped (e.g. head): end quietly
            try:
                sys.stdout = open(os.devnull, "w")
            except OSError:
                pass
            raise typer.Exit(0) from None
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
    from synth.io.jsonout import dumps_strict

    typer.echo(dumps_strict(obj))


# =============================================================================================
# Clips: info  (issue 2)
# =============================================================================================


_INFO_LABELS = {
    "file": "file",
    "format": "format",
    "width": "width",
    "height": "height",
    "frames": "frames",
    "chroma_format": "chroma",
    "bit_depth": "bit depth",
    "frame_rate": "frame rate",
    "interlacing": "interlacing",
    "chroma_siting": "chroma siting",
    "pixel_aspect": "pixel aspect",
}


@app.command()
def info(
    clip: Path = typer.Argument(
        ..., help="Clip: .y4m, raw .yuv, image pattern (frame_%03d.png) or any video OpenCV decodes."
    ),
    frame: int = typer.Option(0, "--frame", "-f", help="Frame whose plane statistics are shown (negative: from the end)."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of a table."),
    size: Optional[str] = typer.Option(None, "--size", help="Raw .yuv only: WIDTHxHEIGHT (else taken from the file name)."),
    chroma: Optional[str] = typer.Option(None, "--chroma", help="Raw .yuv / images: 420, 422, 444 or mono."),
    bit_depth: Optional[int] = typer.Option(None, "--bit-depth", help="Raw .yuv / images: bits per sample, 8..16."),
    fps: Optional[float] = typer.Option(None, "--fps", help="Raw .yuv / images: frame rate to report."),
    matrix: Optional[str] = typer.Option(None, "--matrix", help="Images / compressed video: R'G'B' to Y'CbCr matrix, 601 (default) or 709."),
) -> None:
    """Show a clip's format, size, frame count, sample format, frame rate and one frame's plane statistics."""
    from synth.commands.info import CHROMA_NAMES, describe_clip

    desc = describe_clip(
        clip, frame=frame, size=size, chroma_format=chroma, bit_depth=bit_depth, frame_rate=fps, matrix=matrix
    )
    if as_json:
        _print_json(desc)
        return
    for key, label in _INFO_LABELS.items():
        value = desc[key]
        if value is None:
            continue
        if key == "chroma_format":
            value = CHROMA_NAMES.get(value, value)
        elif key == "frame_rate" and desc["frame_rate_value"] is not None:
            value = f"{value} ({desc['frame_rate_value']:g}/s)"
        typer.echo(f"{label:<14} {value}")
    for k, v in desc["extra"].items():
        typer.echo(f"{'X tag':<14} {k}={v}" if v else f"{'X tag':<14} {k}")
    typer.echo(f"plane statistics of frame {desc['frame']}:")
    for name, st in desc["planes"].items():
        typer.echo(f"  {name:<3} min {st['min']:>6}  max {st['max']:>6}  mean {st['mean']:10.3f}")


# =============================================================================================
# Coded motion: vectors  (issue 3)
# =============================================================================================


@app.command()
def vectors(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    coded: int = typer.Option(..., "--coded", help="Picture number whose blocks get vectors."),
    ref: int = typer.Option(..., "--ref", help="Picture number the vectors point to."),
    output: Path = typer.Option(..., "--output", "-o", help="Field file: .json, .npz, or .csv (export)."),
    search_range: int = typer.Option(64, "--range", help="Largest vector component, luma samples."),
    blocks: str = typer.Option("64,32,16,8", "--blocks", help="Block sizes the quadtree may use."),
    qp: int = typer.Option(27, "--qp", help="QP setting the rate weight (0..51); higher = cheaper, smoother field."),
    overlay: Optional[Path] = typer.Option(None, "--overlay", help="PNG with block outlines and arrows."),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON."),
) -> None:
    """Estimate codec-like block vectors from one picture of a clip to another."""
    from synth.commands.vectors import parse_block_sizes, run_vectors

    summary = run_vectors(
        clip, coded=coded, reference=ref, output=output, qp=qp, search_range=search_range,
        block_sizes=parse_block_sizes(blocks), overlay=overlay,
    )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    sizes = ", ".join(f"{k}: {v}" for k, v in summary["blocks_by_size"].items())
    typer.echo(f"field          picture {coded} -> picture {ref}, written to {summary['output']}")
    typer.echo(f"blocks         {summary['blocks']} ({sizes})")
    typer.echo(f"intra share    {100 * summary['intra_share']:.1f} % of the area")
    typer.echo(f"mean |v|       {summary['mean_vector_length']:.2f} luma samples")
    typer.echo(f"vector bits    {summary['vector_bits']}")
    typer.echo(
        f"prediction     {summary['mc_psnr_y']:.2f} dB luma PSNR with the field, "
        f"{summary['zero_motion_psnr_y']:.2f} dB with zero motion"
    )
    typer.echo(f"time           {summary['seconds']:.2f} s (QP {qp}, range +-{search_range})")
    if summary["overlay"]:
        typer.echo(f"overlay        {summary['overlay']}")


# =============================================================================================
# Synthesis: frame, calibrate  (issue 4)
# =============================================================================================


@app.command()
def frame(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    past: int = typer.Option(..., "--past", help="Picture number of the past reference."),
    future: int = typer.Option(..., "--future", help="Picture number of the future reference."),
    at: Optional[int] = typer.Option(None, "--at", help="Picture number to synthesise (its true picture is measured against)."),
    t: Optional[float] = typer.Option(None, "--t", help="Fraction in (0, 1) from past to future, when no true picture exists."),
    output: Path = typer.Option(..., "--output", "-o", help="Synthesised picture, 1-frame .y4m."),
    field: Optional[Path] = typer.Option(None, "--field", help="Vector fields (.json/.npz) instead of estimating them."),
    params: Optional[Path] = typer.Option(None, "--params", help="Synthesis parameter file (JSON)."),
    maps: Optional[Path] = typer.Option(None, "--maps", help="Directory for PNG maps."),
    method: Optional[str] = typer.Option(None, "--method", help="lmmse (default), distance_weighted or nearest."),
    qp: int = typer.Option(27, "--qp", help="QP of the motion estimator when vectors are estimated."),
    two_way: bool = typer.Option(False, "--two-way", help="Estimate vectors in both coding directions."),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON."),
    # issue 5: corrective offsets on the synthesised picture
    offsets_out: Optional[Path] = typer.Option(None, "--offsets", help="Also search corrective block offsets against picture --at and write them (JSON)."),
    offset_block: int = typer.Option(16, "--block", help="Offset block size in luma samples (with --offsets)."),
    offset_window: int = typer.Option(2, "--window", help="Offset search range in luma samples, quarter-pel steps (with --offsets)."),
) -> None:
    """Synthesise one picture between two pictures of a clip from the vectors coded between them."""
    from synth.commands.frame import run_frame
    from synth.synthesis.params import SynthParams

    if offsets_out is not None and at is None:  # issue 5
        raise SynthError("--offsets needs --at (the true picture is the target of the offset search)")
    p = SynthParams.load(params) if params is not None else None
    summary = run_frame(
        clip, past=past, future=future, at=at, t=t, output=output, field_path=field, params=p,
        maps_dir=maps, qp=qp, two_way=two_way, method=method,
    )  # fmt: skip
    if offsets_out is not None:  # issue 5
        from synth.commands.offsets import offsets_for_frame

        summary["offsets"] = offsets_for_frame(
            clip, at=at, synthetic_path=output, output=offsets_out, past=past, future=future,
            block=offset_block, window=offset_window, qp=qp,
        )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    target = f"picture {at}" if at is not None else f"t = {summary['t']:.4g}"
    typer.echo(f"synthesised    {target} from pictures {past} and {future} ({summary['size']}, {summary['format']})")
    typer.echo(f"vectors        {summary['vectors']}, {summary['fields']} field(s)")
    typer.echo(f"estimator      {summary['method']}, K = {summary['candidates']}, mean confidence {summary['mean_confidence']:.3f}")
    if summary["psnr"] is not None:
        ps = summary["psnr"]
        typer.echo("PSNR           " + "  ".join(f"{k} {v:.2f} dB" for k, v in ps.items()))
        if summary["ssim_y"] is not None:
            typer.echo(f"SSIM (Y)       {summary['ssim_y']:.4f}")
    typer.echo(f"time           vectors {summary['vector_seconds']:.2f} s, synthesis {summary['synthesis_seconds']:.2f} s")
    typer.echo(f"written        {summary['output']}")
    for m in summary["maps"]:
        typer.echo(f"map            {m}")
    if summary.get("offsets"):  # issue 5
        o = summary["offsets"]
        typer.echo(
            f"offsets        {o['blocks']} blocks of {o['block']}, {100 * o['zero_share']:.0f} % zero, {o['bits_total']} bits "
            f"({o['bits_per_block']:.2f}/block); PSNR-Y {o['psnr_before']['Y']:.2f} -> {o['psnr_after']['Y']:.2f} dB"
        )
        typer.echo(f"written        {o['output']}")


@app.command()
def calibrate(
    clips: list[Path] = typer.Argument(..., help="Training clips (.y4m, or any video OpenCV decodes)."),
    output: Path = typer.Option(..., "--output", "-o", help="Parameter file to write (JSON)."),
    gaps: str = typer.Option("2,4,8", "--gaps", help="Reference distances, even, comma-separated."),
    frames: int = typer.Option(33, "--frames", help="Pictures of each clip used (from --start)."),
    start: int = typer.Option(0, "--start", help="First picture of each clip used."),
    per_gap: int = typer.Option(3, "--per-gap", help="Target pictures per clip and reference distance."),
    qp: int = typer.Option(27, "--qp", help="QP of the motion estimator that supplies the vectors."),
    params: Optional[Path] = typer.Option(None, "--params", help="Starting parameter file (default: built-in values)."),
    refine: bool = typer.Option(True, "--refine/--no-refine", help="Refine by maximising prediction PSNR."),
    evaluations: int = typer.Option(24, "--evaluations", help="Most parameter sets the refinement tries."),
    as_json: bool = typer.Option(False, "--json", help="Print the fit record as JSON."),
) -> None:
    """Fit the synthesis parameters and the learned reliability on training clips."""
    from synth.synthesis.calibrate import calibrate as run_calibration, training_cases
    from synth.io import atomic_write_text
    from synth.synthesis.params import SynthParams

    try:
        gap_list = [int(v) for v in gaps.split(",") if v.strip()]
    except ValueError:
        raise SynthError(f"--gaps must be comma-separated even integers, got {gaps!r}") from None
    if not gap_list:
        raise SynthError(f"--gaps must name at least one reference distance, got {gaps!r}")
    if frames < 3:
        raise SynthError(f"--frames must be at least 3, got {frames}")
    if evaluations < 1:
        raise SynthError(f"--evaluations must be at least 1, got {evaluations}")
    for clip in clips:
        if not clip.is_file():
            raise SynthError(f"{clip}: no such clip")
    start_params = SynthParams.load(params) if params is not None else SynthParams()
    cases = []
    for clip in clips:
        typer.echo(f"reading {clip} (pictures {start}..{start + frames - 1}, distances {gap_list})", err=True)
        cases += training_cases(clip, gaps=gap_list, start=start, frames=frames, per_gap=per_gap, qp=qp)
    result = run_calibration(
        cases, params=start_params, refine=refine, evaluations=evaluations,
        progress=lambda msg: typer.echo(msg, err=True),
    )  # fmt: skip
    atomic_write_text(output, result.to_json())
    rec = result.record
    if as_json:
        _print_json(rec)
        return
    p = result.params
    m = rec["measured"]
    typer.echo(f"cases          {len(cases)} from {len(clips)} clip(s)")
    typer.echo(
        f"measured       spatial_correlation {m['spatial_correlation']:.3f}, innovation_nugget "
        f"{m['innovation_nugget']:.3f}, reliability_scale {m['reliability_scale']:.1f}"
    )
    if "refinement" in rec:
        r = rec["refinement"]
        typer.echo(
            f"refined        spatial_correlation {p.spatial_correlation:.3f}, reliability_scale "
            f"{p.reliability_scale:.1f} (mean PSNR-Y {r['before']:.2f} -> {r['after']:.2f} dB, {r['evaluations']} evaluations)"
        )
    lr = rec["learned"]
    typer.echo(f"learned        {len(p.reliability_coefficients)} coefficients, {lr['samples']} samples, R^2 {lr['r2']:.3f}")
    for name, v in rec["psnr"].items():
        typer.echo(f"PSNR-Y         {name}: {v['before']:.2f} -> {v['after']:.2f} dB ({v['cases']} pictures)")
    typer.echo(f"written        {output}")


# =============================================================================================
# Encoder side: export, rd  (issue 5)
# =============================================================================================

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
    synthesiser: str = typer.Option("estimator", "--synthesiser", help="estimator (the product), blend (control) or a workbench predictor name."),
    prediction: Optional[Path] = typer.Option(None, "--prediction", help="Also write the corrected prediction (.y4m)."),
    as_json: bool = typer.Option(False, "--json", help="Print the statistics as JSON."),
) -> None:
    """Corrective block offsets of a target picture on its synthetic reference, and their bit cost."""
    from synth.io import open_clip, write_y4m
    from synth.io.offsets_file import write_offsets

    from synth.codec.offsets import json_safe, refine_with_offsets

    reader = open_clip(clip)
    try:
        n = len(reader)
        for name, v in (("--past", past), ("--future", future), ("--at", at)):
            if not 0 <= v < n:
                raise SynthError(f"{name} must be a picture number in 0..{n - 1}, got {v}")
        maker = _issue5_maker(synthesiser, field, size=(reader.info.width, reader.info.height))
        state = maker.prepare(reader.read(past), reader.read(future), past_time=past, future_time=future, qp=qp)
        synthetic = maker.make(state, time=at)
        target = reader.read(at)
        search = refine_with_offsets(target, synthetic, block=block, window=window, metric=metric, qp=qp, time=at)
        extra = {"source": str(clip), "past": past, "future": future, "synthesiser": maker.name, "fields": maker.describe(state)}
        write_offsets(output, search, extra=extra)
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
    synthesiser: str = typer.Option("estimator", "--synthesiser", help="estimator (the product), blend (control) or a workbench predictor name."),
) -> None:
    """Synthetic reference pictures for every non-anchor picture of a hierarchical GOP, in display order."""
    from synth.io import open_clip

    from synth.codec.export import sidecar_path, write_reference_export

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
    synthesiser: str = typer.Option("estimator", "--synthesiser", help="estimator (the product), blend (control) or a workbench predictor name."),
    refs: str = typer.Option("decoded", "--refs", help="Make the synthetic picture from decoded or source references."),
    extra_qp: int = typer.Option(4, "--extra-qp", help="QP at which the extra reference picture is coded (bits not charged)."),
    preset: str = typer.Option("medium", "--preset", help="Encoder speed preset."),
    with_offsets: bool = typer.Option(False, "--offsets", help="Also run the offset search and measure its corrected picture."),
    also: str = typer.Option("dis-medium", "--also", help="Other makers measured as the third reference (d), comma-separated; 'none' for none."),
    block: int = typer.Option(16, "--block", help="Offset block size (with --offsets)."),
    window: int = typer.Option(2, "--window", help="Offset search range in luma samples (with --offsets)."),
    limit: Optional[int] = typer.Option(None, "--limit", help="Only the first N target pictures per clip."),
    report: Optional[Path] = typer.Option(None, "--report", help="Directory for rd.json, rd.csv and RD-curve PNGs."),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON instead of a table."),
) -> None:
    """Bits a synthetic third reference saves a real encoder: BD-rate against the two real references."""
    from synth.codec.offsets import json_safe
    from synth.commands.rd import rd as measure_rd
    from synth.codec.rdmeasure import parse_qps, summarise_clips
    from synth.codec.rdreport import format_rd_table, write_rd_report
    from synth.makers.reference_makers import maker_by_name

    maker_by_name(synthesiser)  # fail early when the synthesiser is not available
    qp_list = parse_qps(qps)
    settings = {
        "gap": gap, "qps": qp_list, "codec": codec, "synthesiser": synthesiser, "refs": refs,
        "extra_qp": extra_qp, "preset": preset, "offsets": {"block": block, "window": window} if with_offsets else None,
        "also": also, "limit": limit,
    }
    results = []
    bar, update = _issue5_progress("rd")
    with bar:
        for path in clips:
            bar.console.print(f"measuring {path}", highlight=False)
            results.append(
                measure_rd(
                    path, gap=gap, qps=qp_list, codec=codec, synthesiser=synthesiser, refs=refs, extra_qp=extra_qp,
                    preset=preset, offsets=with_offsets, block=block, window=window, also=also, limit=limit, name=str(path),
                    progress=update,
                )
            )
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


@app.command()
def compare(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    gap: list[int] = typer.Option([8], "--gap", "-g", help="Distance between the references; repeat for several gaps."),
    predictors: Optional[str] = typer.Option(None, "--predictors", "-p", help="Comma-separated predictor names (default: all available)."),
    vector_qp: Optional[str] = typer.Option(None, "--vector-qp", help="Comma-separated QPs to estimate vectors at, e.g. 22,32,42."),
    two_way: bool = typer.Option(False, "--two-way", help="Estimate vectors in both coding directions (default: future coded against past)."),
    report: Optional[Path] = typer.Option(None, "--report", "-r", help="Directory for report.html, results.json and results.csv."),
    frames: Optional[int] = typer.Option(None, "--frames", "-n", help="Use only the first N pictures of the clip."),
) -> None:
    """Predict every picture between references GAP apart with every predictor and compare."""
    from synth.evaluation.compare import compare_clip
    from synth.evaluation.tables import run_tables

    reader = _open_for_run(clip)
    with Progress(f"compare {clip.name}") as bar:
        result = compare_clip(
            reader, gaps=gap, predictors=predictors, vector_qps=vector_qp, limit=frames, clip_name=clip.name, progress=bar,
            estimate_fields=_field_estimator(two_way),
        )
    typer.echo(run_tables(result))
    if report is not None:
        from synth.evaluation.report import write_report

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
    two_way: bool = typer.Option(False, "--two-way", help="Estimate vectors in both coding directions (default: future coded against past)."),
    report: Optional[Path] = typer.Option(None, "--report", "-r", help="Directory for report.html, results.json and results.csv."),
    export: Optional[Path] = typer.Option(None, "--export", help="Write the synthetic pictures (display order, no anchors) to this .y4m file, with a JSON sidecar."),
    export_method: Optional[str] = typer.Option(None, "--export-method", help="Method whose pictures --export writes (default: lmmse, else the first predictor)."),
    frames: Optional[int] = typer.Option(None, "--frames", "-n", help="Use only the first N pictures of the clip."),
) -> None:
    """Synthesise every B picture of a dyadic hierarchical GOP from its references; statistics per layer."""
    from synth.errors import ParameterError
    from synth.evaluation.gop import run_gop
    from synth.makers import resolve_predictors
    from synth.evaluation.tables import run_tables

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
    with Progress(f"gop {clip.name}") as bar:
        result = run_gop(
            reader,
            size=size,
            flat=flat,
            decoded_refs_qp=decoded_refs,
            predictors=predictors,
            vector_qps=vector_qp,
            estimate_fields=_field_estimator(two_way),
            limit=frames,
            clip_name=clip.name,
            export_method=method,
            frame_rate=reader.info.frame_rate,
            progress=bar,
        )
    typer.echo(run_tables(result))
    if export is not None:
        from synth.codec.export import sidecar_path
        from synth.evaluation.gop import write_gop_export

        info = reader.info
        if not info.frame_count:
            from dataclasses import replace

            info = replace(info, frame_count=len(reader))
        write_gop_export(result, export, info=info, source_name=str(clip))
        typer.echo(f"exported {len(result.synthetic)} synthetic pictures ({method}) to {export}; sidecar {sidecar_path(export)}")
    if report is not None:
        from synth.evaluation.report import write_report

        paths = write_report([result], report, title=f"synth gop: {clip.name}")
        typer.echo(f"report: {paths['html']}")


@app.command()
def demo(
    out: Path = typer.Option(Path("synth-demo"), "--out", "-o", help="Directory for the report."),
) -> None:
    """Run the main job on the bundled demo clips: GOP run and comparison, with a report."""
    from synth.demo.run import demo_plan, run_demo
    from synth.evaluation.tables import overview_table, vector_qp_table

    plan = demo_plan()
    with Progress("demo") as bar:
        results, paths = run_demo(plan, out=out, progress=bar)
    clips = sorted({r.clip for r in results}, key=[r.clip for r in results].index)
    typer.echo(f"Mean PSNR-YUV (dB) of the picture each method predicts, over {len(clips)} demo clips ({', '.join(clips)}):")
    typer.echo("GOP = every B picture of a dyadic GOP from its hierarchy references; gap N = every picture")
    typer.echo("between references N apart; wins = pictures on which the method is best.")
    typer.echo(overview_table(results))
    for r in results:
        table = vector_qp_table(r)
        if table:
            typer.echo("")
            typer.echo(f"Vector QP on {r.clip} (gap {', '.join(str(g) for g in r.settings['gaps'])}): mean PSNR-YUV of the vector-based methods")
            typer.echo(table)
    typer.echo("")
    typer.echo(f"report: {paths['html']}  (per-clip and per-layer tables, plots, error and weight maps)")
    typer.echo(f"data:   {paths['json']}, {paths['csv']}")


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

    from synth.study import load_manifest, make_executor, plan_study, run_study
    from synth.study.report import format_table
    from synth.study.runner import load_records

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
    for note in executor.warnings:
        typer.echo(f"synth: note: {note}", err=True)
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
        from synth.study import get_kind

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
