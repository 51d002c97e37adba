"""One-call entry to the encoder-in-the-loop measurement of a clip file (used by ``synth study``).

See :mod:`synth.codec.rdmeasure` for what is measured and :mod:`synth.codec.rdreport` for the outputs.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Callable

from synth.codec.rdmeasure import ClipRD, measure_clip, parse_qps
from synth.makers.reference_makers import maker_by_name

__all__ = ["rd"]


def rd(
    clip_path: str | os.PathLike,
    *,
    gap: int = 8,
    qps="22,27,32,37",
    codec: str = "h264",
    synthesiser: str = "estimator",
    refs: str = "decoded",
    extra_qp: int = 4,
    preset: str = "medium",
    offsets: bool = False,
    block: int = 16,
    window: int = 2,
    only_extra: bool = True,
    also: str | list[str] = "dis-medium",
    limit: int | None = None,
    name: str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> ClipRD:
    """Measure what a synthetic third reference saves x264 / x265 on one clip.

    Parameters
    ----------
    clip_path : path
        Any clip `synth.io.open_clip` reads.
    gap, codec, refs, extra_qp, preset, only_extra, limit, progress
        As in :func:`synth.codec.rdmeasure.measure_clip`.
    qps : str or sequence of int
        QPs, e.g. ``"22,27,32,37"`` (at least four).
    synthesiser : {'estimator', 'blend'}
        How the synthetic picture is made (`synth.makers.reference_makers`).
    offsets : bool
        Also run the offset search (`block`, `window`) and measure the corrected picture.
    also : str or list of str
        Further makers whose picture is measured as the third reference instead (configuration
        ``real+<name>``, (d)); default optical-flow interpolation with OpenCV's DIS medium preset.
        Comma-separated text, a list, or "" / "none" for none.
    name : str, optional
        Clip name in the rows (default: the file name).

    Returns
    -------
    ClipRD
        ``.rows`` has one dict per target picture, configuration and QP (``bits``, ``psnr_y`` ...);
        ``.curves()``, ``.bd()`` and ``.offsets_summary()`` summarise them.

    Notes
    -----
    BD-rate after G. Bjontegaard, VCEG-M33 (2001); encoders x264 / x265 through PyAV.
    """
    from synth.io import open_clip

    if isinstance(also, str):
        also = [] if also.strip().lower() in ("", "none") else [a.strip() for a in also.split(",") if a.strip()]
    others = {n: maker_by_name(n) for n in also}
    reader = open_clip(clip_path)
    try:
        qp_list = parse_qps(qps, bit_depth=reader.info.bit_depth)
        return measure_clip(
            reader.read,
            len(reader),
            clip=name if name is not None else Path(clip_path).name,
            gap=int(gap),
            qps=qp_list,
            codec=codec,
            maker=maker_by_name(synthesiser),
            others=others,
            refs=refs,
            extra_qp=int(extra_qp),
            preset=preset,
            offsets={"block": int(block), "window": int(window)} if offsets else None,
            only_extra=bool(only_extra),
            limit=limit,
            progress=progress,
        )
    finally:
        reader.close()
