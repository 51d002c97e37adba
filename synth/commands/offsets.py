"""What `synth offsets` does (and `synth frame --offsets`): corrective block offsets of a target
picture on the picture a maker made for its time, their bit cost, written as a ``synth-offsets``
file (`synth.io.offsets_file`).

The search is :func:`synth.codec.offsets.refine_with_offsets`; lambda follows the vector QP.
"""

from __future__ import annotations

import os

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["run_offsets", "format_offsets", "search_and_write", "check_offset_options", "OFFSET_BLOCKS"]

#: Offset block sizes the search takes (luma samples).
OFFSET_BLOCKS = (4, 8, 16, 32, 64)
#: Largest offset window (luma samples each way).
MAX_OFFSET_WINDOW = 8


def check_offset_options(block, window, metric: str = "satd") -> None:
    """``--offset-block``, ``--offset-window`` and ``--metric`` values, checked.

    Raises
    ------
    ParameterError
        Naming the option, the rule and the value.
    """
    from synth.codec.offsets import METRICS

    if isinstance(block, bool) or block not in OFFSET_BLOCKS:
        raise ParameterError(f"--offset-block must be one of {', '.join(map(str, OFFSET_BLOCKS))}, got {block!r}")
    if isinstance(window, bool) or not isinstance(window, int) or not 0 <= window <= MAX_OFFSET_WINDOW:
        raise ParameterError(
            f"--offset-window must be an integer in 0..{MAX_OFFSET_WINDOW} (luma samples), got {window!r}"
        )
    if metric not in METRICS:
        raise ParameterError(f"--metric must be one of {', '.join(METRICS)}, got {metric!r}")


def search_and_write(
    target: Picture,
    synthetic: Picture,
    *,
    output: str | os.PathLike,
    block: int = 16,
    window: int = 2,
    metric: str = "satd",
    qp: int = 27,
    time: float = 0.0,
    extra: dict | None = None,
):
    """Search the offsets of `target` on `synthetic` and write them to `output`.

    Returns
    -------
    (OffsetSearch, dict)
        The search and its statistics (strict JSON, with ``output``).
    """
    from synth.codec.offsets import refine_with_offsets
    from synth.io.jsonout import strict_json
    from synth.io.offsets_file import write_offsets

    search = refine_with_offsets(target, synthetic, block=block, window=window, metric=metric, qp=qp, time=time)
    write_offsets(output, search.field, statistics=search.stats, extra=extra)
    stats = strict_json(search.stats.as_dict())
    stats["output"] = str(output)
    return search, stats


def run_offsets(
    clip: str | os.PathLike,
    *,
    past: int,
    future: int,
    at: int,
    output: str | os.PathLike,
    vectors: str | os.PathLike | None = None,
    maker: str = "lmmse",
    vector_qp: int = 27,
    params: str | os.PathLike | None = None,
    offset_block: int = 16,
    offset_window: int = 2,
    metric: str = "satd",
    prediction: str | os.PathLike | None = None,
) -> dict:
    """Corrective offsets of picture `at` of a clip on the picture `maker` makes for it.

    Parameters
    ----------
    clip : path-like
        Any clip `synth.io.open_clip` reads.
    past, future, at : int
        Picture numbers of the references and of the target (strictly between).
    output : path-like
        Offsets file (``.json``), written atomically.
    vectors : str or path-like, optional
        ``estimate`` (default), ``x264``, ``stream`` or a field file (`synth.motion.sources.parse_vector_source`).
    maker : str
        A registered maker (`synth.makers`), default ``lmmse``.
    vector_qp : int
        Rate constraint of estimated vectors, and the QP lambda is derived from.
    params : path-like, optional
        Synthesis parameter file.
    offset_block, offset_window : int
        Block size and search range in luma samples (quarter-pel steps).
    metric : {'satd', 'sad'}
    prediction : path-like, optional
        Also write the corrected prediction (``.y4m``, or raw planar ``.yuv``).

    Returns
    -------
    dict
        Strict-JSON summary: the statistics (`synth.offset_field.OffsetStatistics`), the clip,
        picture numbers, maker, vectors and the written paths.

    Raises
    ------
    ParameterError, FormatError
        Any bad option, before anything is computed.
    """
    from synth.commands.frame import check_output_suffix, read_pair
    from synth.commands.outputs import PICTURE_FORMATS, check_distinct
    from synth.io import open_clip, write_clip
    from synth.io.jsonout import strict_json
    from synth.makers import get_maker
    from synth.motion.sources import parse_vector_source
    from synth.synthesis.params import SynthParams

    output = check_output_suffix(output, (".json",), option="--output")
    if prediction is not None:
        prediction = check_output_suffix(prediction, PICTURE_FORMATS, option="--prediction")
    check_offset_options(offset_block, offset_window, metric)
    check_distinct(
        {"--output": output, "--prediction": prediction},
        {"clip": clip, "--vectors": vectors, "--params": params},
    )
    the_maker = get_maker(maker, option="--maker")
    source = parse_vector_source(vectors, qp=vector_qp, clip=clip)
    p = SynthParams.load(params) if params is not None else None
    with open_clip(clip) as reader:
        p_pic, f_pic, target = read_pair(reader, past=past, future=future, at=at)
        info = reader.info
    fields = source.fields_for(p_pic, f_pic, past_time=past, future_time=future) if the_maker.needs_vectors else []
    pair = the_maker.prepare(p_pic, f_pic, fields=fields, params=p, past_time=past, future_time=future)
    synthetic = pair.at_time(at).picture
    vec = source.describe() if the_maker.needs_vectors else None
    extra = {"source": str(clip), "past": past, "future": future, "maker": the_maker.name, "vectors": vec}
    search, stats = search_and_write(
        target, synthetic, output=output, block=offset_block, window=offset_window, metric=metric, qp=vector_qp,
        time=at, extra=extra,
    )  # fmt: skip
    if prediction is not None:
        write_clip(prediction, [search.prediction], info)
    return strict_json({
        "format": "synth-offsets-summary", "schema_version": 1,
        "clip": str(clip), "past": past, "future": future, "at": at, "maker": the_maker.name, "vectors": vec,
        **stats, "prediction": None if prediction is None else str(prediction),
    })  # fmt: skip


def _db(value) -> str:
    return "inf" if value is None else f"{value:.2f}"


def _coded_vectors_line(record) -> list[str]:
    """The vectors line, for coded vectors (x264 or the clip's stream, with its assumption)."""
    if not record or record.get("vectors") not in ("x264", "stream"):
        return []
    from synth.motion.sources import describe_record

    return [f"vectors         {describe_record(record)}"]


def format_offsets(summary: dict) -> str:
    """The text `synth offsets` prints for a `run_offsets` summary."""
    s = summary
    lines = [
        f"blocks          {s['blocks']} of {s['block']}x{s['block']}, window +-{s['window']}, {s['metric']}, "
        f"lambda {s['lagrangian']:.3f}",
        f"maker           {s['maker']}, picture {s['at']} from pictures {s['past']} and {s['future']}",
        *_coded_vectors_line(s.get("vectors")),
        f"zero offsets    {100 * s['zero_share']:.1f} %",
        f"offset bits     {s['bits_total']} ({s['bits_per_block']:.2f} per block, {s['bits_per_pixel']:.4f} per pixel)",
    ]
    for plane in s["psnr_before"]:
        lines.append(f"PSNR-{plane:<3}       {_db(s['psnr_before'][plane])} -> {_db(s['psnr_after'][plane])} dB")
    lines.append(f"SAD (luma)      {s['sad_before']:.0f} -> {s['sad_after']:.0f}")
    lines.append(f"written         {s['output']}")
    if s.get("prediction"):
        lines.append(f"written         {s['prediction']}")
    return "\n".join(lines)
