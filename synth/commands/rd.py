"""What `synth rd` does: the encoder-in-the-loop measurement of one or more clips, a summary table
and optionally a report folder.

See :mod:`synth.codec.rdmeasure` for what is measured and :mod:`synth.codec.rdreport` for the outputs.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path

__all__ = ["DEFAULT_RD_MAKERS", "run_rd", "rd_warnings", "measure_rd_file", "format_rd"]

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
    target_picture,
    gop_size,
    at,
) -> dict:
    return {
        "target_picture": target_picture,
        "gop_size": gop_size,
        "map_at": at,
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


def rd_warnings(*, qps="22,27,32,37") -> list[str]:
    """One-line warnings about the options, printed before the run (none for values `run_rd` refuses)."""
    from synth.codec.rdmeasure import parse_qps, qps_warning
    from synth.errors import ParameterError

    try:
        return [w for w in [qps_warning(parse_qps(qps))] if w]
    except ParameterError:
        return []


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
    target_picture: str = "B",
    gop_size: int | None = None,
    at: int | None = None,
    report: str | os.PathLike | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """Measure what an extra reference saves x264 / x265 on every clip and gap (and hierarchy).

    Parameters
    ----------
    clips : sequence of path
        Clip files (`synth.io.open_clip`).
    gaps : str or sequence of int
        ``--gaps``: reference distances, e.g. ``"8"`` or ``"4,8"``.
    qps : str or sequence of int
        ``--qps``: two or more encoder QPs (BD figures need four; fewer give null BD figures and
        a warning in ``warnings``).
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
        ``--limit``: only N target pictures per clip and gap (or hierarchy), middle layer first.
    target_picture : {'B', 'P'}
        ``--target-picture``: the target as a B picture between its references (default) or as a
        P picture with forward references only.
    gop_size : int, optional
        ``--gop-size``: also measure the B pictures of dyadic GOPs of this size, each between its
        own hierarchy references (per-layer and whole-GOP figures).
    at : int, optional
        ``--at``: the target whose per-block reference choice the report page maps (default: the
        middle picture of the first reference pair).
    report : path, optional
        ``--report``: folder for report.html, rd.json, rd.csv and the page's PNGs.
    progress : callable, optional
        ``progress(done, total, label)`` over every clip.

    Returns
    -------
    dict
        ``settings``, the summary of `synth.codec.rdmeasure.summarise_clips` (``clips``,
        ``synthetic``, ``average``, ``gaps``, ``hierarchy``), ``warnings`` (one-line texts) and
        ``report`` (the paths written, or None).

    Notes
    -----
    BD-rate after G. Bjontegaard, VCEG-M33 (2001); encoders x264 / x265 through PyAV.
    """
    from synth.codec.rdmeasure import (
        TARGET_PICTURES,
        hierarchy_targets,
        parse_gaps,
        parse_qps,
        qps_warning,
        rd_targets,
        summarise_clips,
    )
    from synth.codec.rdreport import write_rd_report
    from synth.commands.compare import load_params
    from synth.errors import ParameterError
    from synth.io import open_clip
    from synth.makers import resolve_makers
    from synth.motion.sources import parse_vector_source

    gap_list = parse_gaps(gaps)
    if report is not None:
        from synth.commands.outputs import check_output_dir

        check_output_dir(report, option="--report")  # before the run: a missing parent is an error
    qp_list = parse_qps(qps)
    maker_list = resolve_makers(makers if makers is not None else DEFAULT_RD_MAKERS, option="--makers")
    vector_qp = _check_int(vector_qp, "--vector-qp", 0, 51)
    extra_qp = _check_int(extra_qp, "--extra-qp", 0, 51)
    limit = _check_int(limit, "--limit", 1)
    at = _check_int(at, "--at", 0)
    if target_picture not in TARGET_PICTURES:
        raise ParameterError(f"--target-picture must be B or P, got {target_picture!r}")
    if gop_size is not None:
        from synth.hierarchy import check_gop_size

        try:
            gop_size = check_gop_size(gop_size)
        except ParameterError:
            raise ParameterError(f"--gop-size must be a power of two from 2 to 64, got {gop_size!r}") from None
    if target_picture == "B" and codec == "h264":
        from synth.codec.bpicture import x264_qp_plan

        for q in qp_list:
            x264_qp_plan(q, extra_qp, ("extra",))
    warnings = [w for w in [qps_warning(qp_list)] if w]
    source = parse_vector_source(vectors, qp=27 if vector_qp is None else vector_qp, name="--vectors")
    syn_params = load_params(params)
    settings = _settings(
        gaps=gap_list, qps=qp_list, codec=codec, makers=maker_list, source=source, vector_qp=vector_qp, params=params,
        refs=refs, extra_qp=extra_qp, preset=preset, offsets=offsets, offset_block=offset_block,
        offset_window=offset_window, limit=limit, target_picture=target_picture, gop_size=gop_size, at=at,
    )  # fmt: skip
    # the work ahead, so progress counts over every clip and gap
    plan = []
    for path in clips:
        with open_clip(path) as reader:
            n = len(reader)
        for g in gap_list:
            count = len(rd_targets(n, g))
            plan.append((path, g, None, min(count, limit) if limit else count))
        if gop_size is not None:
            count = len(hierarchy_targets(n, gop_size))
            plan.append((path, None, gop_size, min(count, limit) if limit else count))
    total = sum(c for *_, c in plan) * len(qp_list)
    map_at = at if at is not None else gap_list[0] // 2
    results = []
    base = 0
    mapped = set()
    for path, g, size, count in plan:

        def step(done, _total, label, _base=base):
            if progress is not None:
                progress(_base + done, total, label)

        results.append(
            measure_rd_file(
                path,
                gap=g if g is not None else gap_list[0],
                gop_size=size,
                target_picture=target_picture,
                map_target=None if path in mapped else map_at,
                qps=qp_list,
                codec=codec,
                makers=maker_list,
                source=source.with_clip(path),
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
        if results[-1].maps:
            mapped.add(path)
    summary = summarise_clips(results)
    summary["warnings"] = warnings
    written = write_rd_report(report, results, summary, settings) if report is not None else None
    return {
        "format": "synth-rd-summary",
        "schema_version": 1,
        "settings": settings,
        **summary,
        "report": None if written is None else [str(p) for p in written],
    }


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
    target_picture: str = "B",
    gop_size: int | None = None,
    map_target: int | None = None,
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
            target_picture=target_picture,
            gop_size=gop_size,
            map_target=map_target,
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
