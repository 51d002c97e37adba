"""What `synth export` does: the synthetic picture of every non-anchor picture of a hierarchical
GOP, written in display order with a JSON sidecar (`synth.codec.export`)."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["run_export", "format_export"]


def run_export(
    clip: str | os.PathLike,
    *,
    output: str | os.PathLike,
    gop_size: int = 8,
    raw: bool = False,
    sidecar: str | os.PathLike | None = None,
    maker: str = "lmmse",
    vectors: str | os.PathLike | None = None,
    vector_qp: int | None = None,
    params: str | os.PathLike | None = None,
    progress=None,
) -> dict:
    """Write the synthetic references of a clip and their sidecar.

    Parameters
    ----------
    clip : path
        Any clip `synth.io.open_clip` reads.
    output : path
        ``.y4m``, or raw planar samples with `raw`.
    gop_size : int
        ``--gop-size``: dyadic GOP size, a power of two from 2 to 64.
    raw : bool
        ``--raw``: headerless planar samples.
    sidecar : path, optional
        ``--sidecar``: where the JSON sidecar goes (default: OUTPUT + ``.json``).
    maker : str
        ``--maker``: registry name of the maker (`synth.makers`).
    vectors : str or path, optional
        ``--vectors``: ``estimate`` (default), ``x264``, ``stream`` or a field file.
    vector_qp : int, optional
        ``--vector-qp``: QP of estimated vectors (default 27).
    params : path, optional
        ``--params``: synthesis parameter file.
    progress : callable, optional
        ``progress(done, total, label)``.

    Returns
    -------
    dict
        ``format`` ('synth-export-summary'), ``schema_version``, ``output``, ``sidecar``,
        ``pictures`` (count), ``width``, ``height``, ``chroma_format``, ``bit_depth``,
        ``gop_size``, ``maker``, ``vectors`` (the source's record), ``uncovered``.

    Raises
    ------
    ParameterError
        For an unknown maker, a bad GOP size or vector QP, a clip shorter than one GOP, or a field
        file without the fields a pair needs.
    """
    from synth.codec.export import sidecar_path, write_reference_export
    from synth.commands.compare import load_params
    from synth.commands.outputs import check_distinct, check_output_file
    from synth.io import open_clip
    from synth.makers import get_maker
    from synth.motion.sources import DEFAULT_VECTOR_QP, parse_vector_source

    raw = _check_output_format(output, raw)
    if sidecar is not None:
        check_output_file(sidecar, (".json",), option="--sidecar")
    check_distinct(
        {"--output": output, "--sidecar": sidecar if sidecar is not None else sidecar_path(output)},
        {"clip": clip, "--vectors": vectors, "--params": params},
    )
    the_maker = get_maker(maker, option="--maker")
    qp = _check_vector_qp(DEFAULT_VECTOR_QP if vector_qp is None else vector_qp)
    source = parse_vector_source(vectors, qp=qp, name="--vectors", clip=clip).with_hierarchy(int(gop_size))
    syn_params = load_params(params)
    side = Path(sidecar) if sidecar is not None else sidecar_path(output)
    reader = open_clip(clip)
    try:
        doc = write_reference_export(
            reader,
            output,
            gop=int(gop_size),
            maker=the_maker,
            source=source,
            params=syn_params,
            raw=raw,
            sidecar=side,
            source_name=str(clip),
            progress=progress,
        )
    finally:
        reader.close()
    return {
        "format": "synth-export-summary",
        "schema_version": 1,
        "output": str(output),
        "sidecar": str(side),
        "pictures": len(doc["pictures"]),
        "width": doc["width"],
        "height": doc["height"],
        "chroma_format": doc["chroma_format"],
        "bit_depth": doc["bit_depth"],
        "gop_size": doc["gop"],
        "maker": the_maker.name,
        "vectors": source.describe() if the_maker.needs_vectors else None,
        "uncovered": doc["uncovered"],
    }


def _check_vector_qp(qp) -> int:
    from synth.errors import ParameterError

    if isinstance(qp, bool) or not isinstance(qp, int) or not 0 <= qp <= 51:
        raise ParameterError(f"--vector-qp must be an integer 0..51, got {qp!r}")
    return qp


def format_export(summary: dict) -> str:
    """The text `synth export` prints: what was written, and the pictures left uncovered."""
    lines = [
        f"{summary['pictures']} synthetic pictures ({summary['width']}x{summary['height']} {summary['chroma_format']} "
        f"{summary['bit_depth']}-bit) -> {summary['output']}; sidecar {summary['sidecar']}"
    ]
    record = summary.get("vectors") or {}
    if record.get("vectors") in ("x264", "stream"):
        from synth.motion.sources import describe_record

        lines.append(f"vectors: {describe_record(record)}")
    if summary["uncovered"]:
        lines.append(
            f"pictures {summary['uncovered'][0]}..{summary['uncovered'][-1]} lie after the last anchor and are not covered"
        )
    return "\n".join(lines)


def _check_output_format(output, raw: bool) -> bool:
    """The format written is the one the file name says: ``.y4m`` is YUV4MPEG2, ``.yuv`` raw
    planar samples (``--raw`` may say so too); anything else, or ``--raw`` with ``.y4m``, is refused
    before anything is computed.

    Raises
    ------
    ParameterError
    """
    from synth.commands.outputs import check_output_file
    from synth.errors import ParameterError

    suffix = Path(output).suffix.lower()
    if suffix in (".y4m", ".yuv"):
        check_output_file(output, (".y4m", ".yuv"), option="--output")  # the folder must exist
    if suffix == ".y4m" and not raw:
        return False
    if suffix == ".yuv":
        return True
    if suffix == ".y4m":
        raise ParameterError(f"--raw writes headerless samples: name the output .yuv, got {str(output)!r}")
    raise ParameterError(f"--output must end in .y4m (YUV4MPEG2) or .yuv (raw planar), got {str(output)!r}")
