"""`synth compare`: every predictor on every picture between references a fixed gap apart."""

from __future__ import annotations

from typing import Sequence

from synth.errors import ParameterError
from synth.evaluation.workbench import FrameSource, Job, RunResult, parse_vector_qps, run_jobs

__all__ = ["compare_jobs", "compare_clip", "compare"]


def compare_jobs(n_pictures: int, gaps: Sequence[int]) -> list[Job]:
    """Jobs for a comparison: for every gap, references at 0, gap, 2 gap, ... and every picture
    strictly between two consecutive references (t = k / gap).

    Raises
    ------
    ParameterError
        For a gap below 2, a repeated gap, or a gap the clip is too short for.
    """
    if not gaps:
        raise ParameterError("gap must be given at least once")
    seen = set()
    jobs = []
    for gap in gaps:
        g = int(gap)
        if g != gap or g < 2:
            raise ParameterError(f"gap must be an integer of at least 2, got {gap!r}")
        if g in seen:
            raise ParameterError(f"gap {g} is given twice")
        seen.add(g)
        if g >= n_pictures:
            raise ParameterError(f"gap {g} needs at least {g + 1} pictures, the clip has {n_pictures}")
        for start in range(0, n_pictures - g, g):
            for k in range(1, g):
                jobs.append(Job(start + k, start, start + g, k / g, (("gap", g),)))
    return jobs


def compare_clip(
    frames,
    *,
    gaps: Sequence[int] = (8,),
    predictors=None,
    vector_qps=None,
    limit: int | None = None,
    clip_name: str = "clip",
    estimate_fields=None,
    progress=None,
) -> RunResult:
    """Compare predictors on a clip: every picture between references `gap` apart, every predictor.

    Parameters
    ----------
    frames : sequence of Picture or clip reader
        The clip (a `synth.io` reader or a list of pictures).
    gaps : sequence of int
        Reference distances (each at least 2).
    predictors : sequence of names, comma-separated string or None
        None runs every available predictor.
    vector_qps : sequence of int or '22,32,42', optional
        Vector QPs; vector-based predictors are repeated at each.
    limit : int, optional
        Use only the first `limit` pictures.
    clip_name : str
        Name shown in tables and reports.
    estimate_fields, progress
        See `synth.evaluation.workbench.run_jobs`.

    Returns
    -------
    RunResult
        kind 'compare', grouped by gap.
    """
    source = FrameSource(frames, limit=limit)
    qps = parse_vector_qps(vector_qps)
    jobs = compare_jobs(len(source), list(gaps))
    methods, records, pairs, highlights = run_jobs(
        jobs, source, predictors=predictors, vector_qps=qps, estimate_fields=estimate_fields, progress=progress
    )
    settings = {
        "gaps": [int(g) for g in gaps],
        "pictures_used": len(source),
        "predictors": sorted({r["predictor"] for r in records}, key=[r["predictor"] for r in records].index),
        "vector_qps": qps,
    }
    return RunResult("compare", clip_name, settings, methods, records, pairs, highlights, group_key="gap")


def compare(path, *, gap=8, predictors=None, vector_qp=None, frames: int | None = None, progress=None) -> RunResult:
    """`compare_clip` on a clip file, with the command line's option names (used by `synth study`).

    Parameters
    ----------
    path : path-like
        Clip file, opened with `synth.io.open_clip`.
    gap : int or sequence of int
    predictors, vector_qp, frames
        As ``synth compare --predictors/--vector-qp/--frames``.
    """
    from pathlib import Path

    from synth.io import open_clip

    gaps = [gap] if isinstance(gap, int) else list(gap)
    reader = open_clip(path)
    return compare_clip(reader, gaps=gaps, predictors=predictors, vector_qps=vector_qp, limit=frames, clip_name=Path(path).name, progress=progress)
