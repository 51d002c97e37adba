"""Corrective offsets after `synth frame`: search them on the synthesised picture and write them.

Used by ``synth frame ... --at T --offsets OFFSETS.json [--block 16] [--window 2]``: the picture
`synth frame` wrote (a lossless 1-frame Y4M) is read back and the true picture ``T`` of the clip is
the target of :func:`synth.codec.offsets.refine_with_offsets`.
"""

from __future__ import annotations

import os

from synth.errors import ParameterError
from synth.codec.offsets import json_safe, refine_with_offsets

__all__ = ["offsets_for_frame"]


def offsets_for_frame(
    clip: str | os.PathLike,
    *,
    at: int,
    synthetic_path: str | os.PathLike,
    output: str | os.PathLike,
    past: int | None = None,
    future: int | None = None,
    block: int = 16,
    window: int = 2,
    qp: int = 27,
    metric: str = "satd",
) -> dict:
    """Search offsets of picture `at` of a clip on the synthetic picture in `synthetic_path`.

    Parameters
    ----------
    clip : path
        The clip; picture `at` is the target.
    at : int
        Picture number of the target.
    synthetic_path : path
        One-picture Y4M with the synthetic picture (what `synth frame` wrote).
    output : path
        Offsets file (JSON, `synth.io.offsets_file`), written atomically.
    block, window, qp, metric
        As in :func:`synth.codec.offsets.refine_with_offsets` (lambda from `qp`).

    Returns
    -------
    dict
        The offsets' statistics (``OffsetStatistics.as_dict``, JSON-safe) and ``output``.

    Raises
    ------
    ParameterError
        When `at` is missing or out of range, or the pictures differ in format.
    """
    from synth.io import open_clip
    from synth.io.offsets_file import write_offsets

    if at is None:
        raise ParameterError("--offsets needs --at (the true picture is the target of the offset search)")
    with open_clip(clip) as reader:
        if not 0 <= at < len(reader):
            raise ParameterError(f"--at must be a picture number in 0..{len(reader) - 1}, got {at}")
        target = reader.read(at)
    with open_clip(synthetic_path) as syn:
        synthetic = syn.read(0)
    search = refine_with_offsets(target, synthetic, block=block, window=window, metric=metric, qp=qp, time=at)
    extra = {"source": str(clip), "past": past, "future": future, "synthesiser": "synth frame", "synthetic": str(synthetic_path)}
    write_offsets(output, search, extra=extra)
    stats = json_safe(search.stats.as_dict())
    stats["output"] = str(output)
    return stats
