"""What `synth vectors` does: the field between two pictures of a clip (estimated, coded by x264,
read from the clip's own stream, or taken from a field file), saved (``.json`` / ``.npz``, or ``.csv`` for a spreadsheet) and described."""

from __future__ import annotations

import os
import time
from pathlib import Path

from synth.errors import FormatError, ParameterError

__all__ = ["parse_block_sizes", "run_vectors", "format_vectors", "check_vector_qp"]


def parse_block_sizes(text) -> tuple[int, ...]:
    """Parse ``'64,32,16,8'`` into block sizes; each a power of two from 4 to 128.

    Raises
    ------
    ParameterError
        Naming ``--blocks``.
    """
    try:
        sizes = tuple(int(t) for t in str(text).replace(" ", "").split(",") if t)
    except ValueError:
        sizes = ()
    if not sizes or any(s < 4 or s > 128 or s & (s - 1) for s in sizes):
        raise ParameterError(f"--blocks must list powers of two from 4 to 128 separated by commas, got {text!r}")
    return sizes


def check_vector_qp(qp, *, option: str = "--vector-qp") -> int:
    """A vector QP: an integer in 0..51 (the H.264 / H.265 QP range).

    Raises
    ------
    ParameterError
    """
    if isinstance(qp, bool) or not isinstance(qp, int) or not 0 <= qp <= 51:
        raise ParameterError(f"{option} must be an integer in 0..51, got {qp!r}")
    return int(qp)


def run_vectors(
    clip: str | os.PathLike,
    *,
    coded: int,
    reference: int,
    output: str | os.PathLike,
    vectors: str | os.PathLike | None = None,
    vector_qp: int = 27,
    search_range: int = 64,
    block_sizes=(64, 32, 16, 8),
    overlay: str | os.PathLike | None = None,
) -> dict:
    """The field of picture `coded` against picture `reference` of `clip`, written and described.

    Parameters
    ----------
    clip : path-like
        Any clip :func:`synth.io.open_clip` reads.
    coded, reference : int
        Picture numbers (display order, from 0); they are the field's times.
    output : path-like
        ``.json`` or ``.npz`` field file, or ``.csv`` for a spreadsheet export.
    vectors : str or path-like, optional
        ``estimate`` (default: `synth.motion.estimate_field` with `vector_qp`, `search_range`,
        `block_sizes`), ``x264`` (the pictures between the two coded by x264 at `vector_qp` as
        one hierarchy anchored on them, `synth.motion.sources`), ``stream`` (the vectors coded in
        `clip` itself) or a field file holding the field coded at `coded` against `reference`
        (re-summarised, and converted to the format of `output`).
    vector_qp, search_range, block_sizes
        Settings of the estimator (`block_sizes` a tuple or ``'64,32,16,8'``).
    overlay : path-like, optional
        PNG of the field drawn over the coded picture.

    Returns
    -------
    dict
        Strict-JSON: :func:`synth.motion.summary.summarize_field` figures plus the settings,
        ``seconds``, ``output`` and ``overlay``.

    Raises
    ------
    ParameterError
        Picture numbers outside the clip or equal, bad settings, a field file without that field.
    FormatError
        Unreadable clip or field file, unknown output suffix.
    """
    from synth.io import atomic_write_bytes, fields_to_csv, open_clip, write_fields
    from synth.io.jsonout import strict_json
    from synth.motion.sources import ESTIMATE, parse_vector_source
    from synth.motion.summary import summarize_field
    from synth.timebase import check_picture_number

    output = Path(output)
    if output.suffix.lower() not in (".json", ".npz", ".csv"):
        raise FormatError(f"--output {output}: the field file must end in .json, .npz or .csv")
    if overlay is not None and Path(overlay).suffix.lower() != ".png":
        raise FormatError(f"--overlay {overlay}: the overlay is written as PNG and must end in .png")
    from synth.commands.outputs import check_distinct, check_output_file

    check_output_file(output, (".json", ".npz", ".csv"), option="--output")  # its folder must exist
    if overlay is not None:
        check_output_file(overlay, (".png",), option="--overlay")
    check_distinct({"--output": output, "--overlay": overlay}, {"clip": clip, "--vectors": vectors})
    vector_qp = check_vector_qp(vector_qp)
    if isinstance(search_range, bool) or not isinstance(search_range, int) or not 1 <= search_range <= 1024:
        raise ParameterError(f"--range must be an integer in 1..1024 (luma samples), got {search_range!r}")
    if not isinstance(block_sizes, tuple):
        block_sizes = parse_block_sizes(block_sizes)
    source = parse_vector_source(vectors, qp=vector_qp, clip=clip)
    with open_clip(clip) as reader:
        n = len(reader)
        coded = check_picture_number(coded, count=n, name="--coded")
        reference = check_picture_number(reference, count=n, name="--ref")
        if coded == reference:
            raise ParameterError(f"--coded and --ref must name different pictures, both are {coded}")
        cur = reader.read(coded)
        ref = reader.read(reference)
    t0 = time.perf_counter()
    if source.kind == ESTIMATE:
        from synth.motion.estimator import estimate_field

        field = estimate_field(
            cur, ref, coded_time=coded, reference_time=reference, qp=vector_qp, search_range=search_range,
            block_sizes=block_sizes,
        )  # fmt: skip
    else:
        field = _field_of_source(source, cur, ref, coded=coded, reference=reference)
    seconds = time.perf_counter() - t0
    if output.suffix.lower() == ".csv":
        fields_to_csv(output, [field])
    else:
        write_fields(output, [field])
    if overlay is not None:
        from synth.motion.overlay import overlay_png

        title = f"Vectors of picture {coded} against picture {reference}, {Path(str(clip)).name}"
        atomic_write_bytes(overlay, overlay_png(cur, field, title=title))
    summary = summarize_field(field, coded=cur, reference=ref)
    estimated = source.kind == ESTIMATE
    return strict_json({
        "format": "synth-vectors-summary",
        "schema_version": 1,
        "clip": str(clip),
        "coded": coded,
        "reference": reference,
        "vectors": source.label,
        "vector_qp": vector_qp if source.qp_matters else None,
        "reference_assumption": source.reference_assumption,
        "search_range": search_range if estimated else None,
        "block_sizes": list(block_sizes) if estimated else None,
        **summary,
        "seconds": round(seconds, 3),
        "output": str(output),
        "overlay": None if overlay is None else str(overlay),
    })  # fmt: skip


def _field_of_source(source, cur, ref, *, coded: int, reference: int):
    """The field coded at `coded` against `reference` from a field file or a coded source.

    Raises
    ------
    ParameterError
        When the source holds no such field (naming what it holds).
    """
    if source.kind == "file":
        from synth.io import read_fields

        every = read_fields(source.path, width=cur.width, height=cur.height)
        where = "the file holds"
    else:
        past, future = (ref, cur) if reference < coded else (cur, ref)
        every = source.fields_for(
            past, future, past_time=min(coded, reference), future_time=max(coded, reference)
        )  # refuses a pair without fields, naming what the source holds
        where = "between the two it holds"
    for f in every:
        if (float(f.coded_time), float(f.reference_time)) == (float(coded), float(reference)):
            return f
    held = ", ".join(f"{f.coded_time:g}->{f.reference_time:g}" for f in every) or "none"
    raise ParameterError(
        f"--vectors {source.label}: no field coded at picture {coded} against picture {reference} ({where} {held})"
    )


def format_vectors(summary: dict) -> str:
    """The text `synth vectors` prints for a `run_vectors` summary."""
    s = summary
    sizes = ", ".join(f"{k}: {v}" for k, v in s["blocks_by_size"].items())
    mc = s.get("mc_psnr_y")
    zero = s.get("zero_motion_psnr_y")
    db = lambda v: "inf" if v is None else f"{v:.2f}"  # noqa: E731
    if s["vectors"] == "estimate":
        how = f"estimated in {s['seconds']:.2f} s (QP {s['vector_qp']}, range +-{s['search_range']})"
    elif s["vectors"] == "x264":
        how = f"coded by x264 at QP {s['vector_qp']} and read back in {s['seconds']:.2f} s"
    elif s["vectors"] == "stream":
        how = f"read from the clip's own stream ({s['reference_assumption']})"
    else:
        how = f"read from {s['vectors']}"
    lines = [
        f"field          picture {s['coded']} -> picture {s['reference']}, written to {s['output']}",
        f"blocks         {s['blocks']} ({sizes})",
        f"intra share    {100 * s['intra_share']:.1f} % of the area",
        f"mean |v|       {s['mean_vector_length']:.2f} luma samples",
        f"vector bits    {s['vector_bits']}",
        f"prediction     {db(mc)} dB luma PSNR with the field, {db(zero)} dB with zero motion",
        f"vectors        {how}",
    ]
    if s["overlay"]:
        lines.append(f"overlay        {s['overlay']}")
    return "\n".join(lines)
