"""What `synth rd` does: the encoder-in-the-loop measurement of one or more clips, a summary table
and optionally a report folder.

See :mod:`synth.codec.rdmeasure` for what is measured and :mod:`synth.codec.rdreport` for the outputs.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path

__all__ = ["DEFAULT_RD_MAKERS", "run_rd", "measure_rd_file", "format_rd"]

#: ``--makers`` of `synth rd`: the product's picture (b, c) and optical-flow interpolation (d).
DEFAULT_RD_MAKERS = "lmmse,dis-medium"


def _settings(
    *,
    gaps,
    qps,
    codec,
    makers,
    source,
    vector_qp,
    params,
    refs,
    extra_qp,
    preset,
    offsets,
    offset_block,
    offset_window,
    limit,
) -> dict:
    return {
        "gaps": gaps,
        "qps": qps,
        "codec": codec,
        "makers": [m.name for m in makers],
        "vectors": source.label,
        "vector_qp": vector_qp,  # None: each point's encoder QP
        "params": None if params is None else str(params),
        "refs": refs,
        "extra_qp": extra_qp,
        "preset": preset,
        "offsets": {"block": offset_block, "window": offset_window} if offsets else None,
        "limit": limit,
    }


def _check_int(value, option: str, lo: int, hi: int | None = None):
    from synth.errors import ParameterError

    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < lo or (hi is not None and value > hi):
        rule = f"an integer {lo}..{hi}" if hi is not None else f"an integer >= {lo}"
        raise ParameterError(f"{option} must be {rule}, got {value!r}")
    return value


def run_rd(
    clips: Sequence[str | os.PathLike],
    *,
    gaps="8",
    qps="22,27,32,37",
    codec: str = "h264",
    makers: str | Sequence[str] = DEFAULT_RD_MAKERS,
    vectors: str | os.PathLike | None = None,
    vector_qp: int | None = None,
    params: str | os.PathLike | None = None,
    refs: str = "decoded",
    extra_qp: int = 4,
    preset: str = "medium",
    offsets: bool = False,
    offset_block: int = 16,
    offset_window: int = 2,
    limit: int | None = None,
    report: str | os.PathLike | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """Measure what an extra reference saves x264 / x265 on every clip and gap.

    Parameters
    ----------
    clips : sequence of path
        Clip files (`synth.io.open_clip`).
    gaps : str or sequence of int
        ``--gaps``: reference distances, e.g. ``"8"`` or ``"4,8"``.
    qps : str or sequence of int
        ``--qps``: four or more encoder QPs.
    codec : {'h264', 'hevc'}
    makers : str or sequence of str
        ``--makers``: one extra-reference configuration per maker; the first is the synthetic one
        ((b), (c), offsets), the others give (d).
    vectors, vector_qp, params
        ``--vectors``, ``--vector-qp`` (None: each point's encoder QP), ``--params``.
    refs, extra_qp, preset
        As in :func:`synth.codec.rdmeasure.measure_clip`.
    offsets, offset_block, offset_window
        ``--offsets``: also run the offset search (block size and search range in luma samples).
    limit : int, optional
        ``--limit``: only the first N target pictures per clip and gap.
    report : path, optional
        ``--report``: folder for rd.json, rd.csv and RD-curve PNGs.
    progress : callable, optional
        ``progress(done, total, label)`` over every clip.

    Returns
    -------
    dict
        ``settings``, the summary of `synth.codec.rdmeasure.summarise_clips` (``clips``,
        ``synthetic``, ``average``, ``gaps``) and ``report`` (the paths written, or None).

    Notes
    -----
    BD-rate after G. Bjontegaard, VCEG-M33 (2001); encoders x264 / x265 through PyAV.
    """
    from synth.codec.rdmeasure import parse_gaps, parse_qps, rd_targets, summarise_clips
    from synth.codec.rdreport import write_rd_report
    from synth.commands.compare import load_params
    from synth.io import open_clip
    from synth.makers import resolve_makers
    from synth.motion.sources import parse_vector_source

    gap_list = parse_gaps(gaps)
    qp_list = parse_qps(qps)
    maker_list = resolve_makers(makers if makers is not None else DEFAULT_RD_MAKERS, option="--makers")
    vector_qp = _check_int(vector_qp, "--vector-qp", 0, 51)
    extra_qp = _check_int(extra_qp, "--extra-qp", 0, 51)
    limit = _check_int(limit, "--limit", 1)
    source = parse_vector_source(vectors, qp=27 if vector_qp is None else vector_qp, name="--vectors")
    syn_params = load_params(params)
    settings = _settings(
        gaps=gap_list, qps=qp_list, codec=codec, makers=maker_list, source=source, vector_qp=vector_qp, params=params,
        refs=refs, extra_qp=extra_qp, preset=preset, offsets=offsets, offset_block=offset_block,
        offset_window=offset_window, limit=limit,
    )  # fmt: skip
    # the work ahead, so progress counts over every clip and gap
    plan = []
    for path in clips:
        with open_clip(path) as reader:
            n = len(reader)
        for g in gap_list:
            count = len(rd_targets(n, g))
            plan.append((path, g, min(count, limit) if limit else count))
    total = sum(c for _, _, c in plan) * len(qp_list)
    results = []
    base = 0
    for path, g, count in plan:

        def step(done, _total, label, _base=base):
            if progress is not None:
                progress(_base + done, total, label)

        results.append(
            measure_rd_file(
                path,
                gap=g,
                qps=qp_list,
                codec=codec,
                makers=maker_list,
                source=source,
                params=syn_params,
                vector_qp=vector_qp,
                refs=refs,
                extra_qp=extra_qp,
                preset=preset,
                offsets=offsets,
                offset_block=offset_block,
                offset_window=offset_window,
                limit=limit,
                name=str(path),
                progress=step,
            )  # fmt: skip
        )
        base += count * len(qp_list)
    summary = summarise_clips(results)
    written = write_rd_report(report, results, summary, settings) if report is not None else None
    return {"settings": settings, **summary, "report": None if written is None else [str(p) for p in written]}


def measure_rd_file(
    clip_path: str | os.PathLike,
    *,
    gap: int,
    qps,
    codec: str,
    makers,
    source=None,
    params=None,
    vector_qp: int | None = None,
    refs: str = "decoded",
    extra_qp: int = 4,
    preset: str = "medium",
    offsets: bool = False,
    offset_block: int = 16,
    offset_window: int = 2,
    limit: int | None = None,
    name: str | None = None,
    progress=None,
):
    """`synth.codec.rdmeasure.measure_clip` on a clip file (`makers` as Maker objects).

    Returns
    -------
    ClipRD
    """
    from synth.codec.rdmeasure import measure_clip, parse_qps
    from synth.io import open_clip

    reader = open_clip(clip_path)
    try:
        return measure_clip(
            reader.read,
            len(reader),
            clip=name if name is not None else Path(clip_path).name,
            gap=int(gap),
            qps=parse_qps(qps, bit_depth=reader.info.bit_depth),
            codec=codec,
            makers=makers,
            source=source,
            params=params,
            vector_qp=vector_qp,
            refs=refs,
            extra_qp=int(extra_qp),
            preset=preset,
            offsets={"block": int(offset_block), "window": int(offset_window)} if offsets else None,
            limit=limit,
            progress=progress,
        )
    finally:
        reader.close()


def format_rd(summary: dict) -> str:
    """The text `synth rd` prints: the BD table, then where the report went."""
    from synth.codec.rdreport import format_rd_table

    text = format_rd_table(summary)
    if summary.get("report"):
        text += f"\nreport: {Path(summary['report'][0]).parent}"
    return text
