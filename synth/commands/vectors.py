"""What `synth vectors` does: estimate a field between two pictures of a clip, save and describe it."""

from __future__ import annotations

import os
import time
from pathlib import Path

import cv2

from synth.io import atomic_write_bytes, fields_to_csv, open_clip, write_fields

from synth.errors import FormatError, ParameterError
from synth.motion.overlay import draw_field_overlay
from synth.motion.summary import summarize_field
from synth.motion.estimator import estimate_field

__all__ = ["parse_block_sizes", "run_vectors"]


def parse_block_sizes(text: str) -> tuple[int, ...]:
    """Parse '64,32,16,8' into block sizes; each a power of two from 4 to 128."""
    try:
        sizes = tuple(int(t) for t in str(text).replace(" ", "").split(",") if t)
    except ValueError:
        sizes = ()
    if not sizes or any(s < 4 or s > 128 or s & (s - 1) for s in sizes):
        raise ParameterError(f"--blocks must list powers of two from 4 to 128 separated by commas, got {text!r}")
    return sizes


def run_vectors(
    clip: str | os.PathLike,
    *,
    coded: int,
    reference: int,
    output: str | os.PathLike,
    qp: int = 27,
    search_range: int = 64,
    block_sizes: tuple[int, ...] = (64, 32, 16, 8),
    overlay: str | os.PathLike | None = None,
) -> dict:
    """Estimate the field of picture `coded` against picture `reference` of `clip` and write it.

    Parameters
    ----------
    clip : path-like
        Any clip :func:`synth.io.open_clip` reads.
    coded, reference : int
        Picture numbers (display order, from 0); they become the field's times.
    output : path-like
        ``.json`` or ``.npz`` field file, or ``.csv`` for a spreadsheet export.
    qp, search_range, block_sizes
        See :func:`synth.motion.estimate_field`.
    overlay : path-like, optional
        PNG of the field drawn over the coded picture.

    Returns
    -------
    dict
        :func:`synth.motion.summary.summarize_field` figures plus ``seconds``, ``output`` and the
        settings used.

    Raises
    ------
    ParameterError
        Picture numbers outside the clip or equal.
    FormatError
        Unreadable clip, unknown output suffix.
    """
    output = Path(output)
    if output.suffix.lower() not in (".json", ".npz", ".csv"):
        raise FormatError(f"{output}: the field file must end in .json, .npz or .csv")
    if overlay is not None and Path(overlay).suffix.lower() != ".png":
        raise FormatError(f"{overlay}: the overlay is written as PNG and must end in .png")
    reader = open_clip(clip)
    try:
        n = len(reader)
        for name, idx in (("--coded", coded), ("--ref", reference)):
            if not 0 <= idx < n:
                raise ParameterError(f"{name} must be a picture number in 0..{n - 1} of {clip}, got {idx}")
        if coded == reference:
            raise ParameterError(f"--coded and --ref must name different pictures, both are {coded}")
        cur = reader.read(coded)
        ref = reader.read(reference)
    finally:
        reader.close()
    t0 = time.perf_counter()
    field = estimate_field(
        cur, ref, coded_time=coded, reference_time=reference, qp=qp, search_range=search_range, block_sizes=block_sizes
    )
    seconds = time.perf_counter() - t0
    if output.suffix.lower() == ".csv":
        fields_to_csv(output, [field])
    else:
        write_fields(output, [field])
    if overlay is not None:
        img = draw_field_overlay(cur, field, scale=2 if cur.width < 640 else 1)
        ok, png = cv2.imencode(".png", img)
        if not ok:
            raise FormatError(f"{overlay}: PNG encoding failed")
        atomic_write_bytes(overlay, png.tobytes())
    summary = summarize_field(field, coded=cur, reference=ref)
    return {
        "clip": str(clip),
        "coded": coded,
        "reference": reference,
        "qp": qp,
        "search_range": search_range,
        "block_sizes": list(block_sizes),
        **summary,
        "seconds": round(seconds, 3),
        "output": str(output),
        "overlay": None if overlay is None else str(overlay),
    }
