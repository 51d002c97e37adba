"""`synth compare`: every maker on every picture between references a fixed gap apart."""

from __future__ import annotations

from collections.abc import Sequence

from synth.errors import ParameterError
from synth.evaluation.differences import resolve_baseline
from synth.evaluation.workbench import FrameSource, Job, RunResult, parse_vector_qps, run_jobs

__all__ = ["DEFAULT_GAPS", "compare_jobs", "compare_clip", "compare"]

#: Reference gap of a comparison when none is given (``--gaps``).
DEFAULT_GAPS = (8,)


def compare_jobs(n_pictures: int, gaps: Sequence[int], *, first: int = 0, option: str = "--gaps") -> list[Job]:
    """Jobs for a comparison: for every gap, references at first, first + gap, ... and every
    picture strictly between two consecutive references (t = k / gap).

    Parameters
    ----------
    n_pictures : int
        Pictures in the run, display numbers ``first .. first + n_pictures - 1``.
    gaps : sequence of int
    first : int
        Display number of the first picture.
    option : str
        Option named in error messages.

    Raises
    ------
    ParameterError
        For a gap that is odd or below 2, a repeated gap, or a gap the clip is too short for.
    """
    if not gaps:
        raise ParameterError(f"{option} must list at least one gap")
    seen = set()
    jobs = []
    last = first + n_pictures - 1
    for gap in gaps:
        g = int(gap)
        if g != gap or g < 2 or g % 2:
            raise ParameterError(f"{option} must be even integers of at least 2, got {gap!r}")
        if g in seen:
            raise ParameterError(f"{option} must not repeat a gap, got {g} twice")
        seen.add(g)
        if g >= n_pictures:
            raise ParameterError(f"{option}: gap {g} needs at least {g + 1} pictures, the clip has {n_pictures}")
        for start in range(first, last + 1 - g, g):
            for k in range(1, g):
                jobs.append(Job(start + k, start, start + g, k / g, (("gap", g),)))
    return jobs


def compare_clip(
    frames,
    *,
    gaps: Sequence[int] = DEFAULT_GAPS,
    makers=None,
    vectors=None,
    vector_qps=None,
    params=None,
    pictures=None,
    limit: int | None = None,
    clip_name: str = "clip",
    progress=None,
    baseline: str | None = None,
    highlights: bool = True,
) -> RunResult:
    """Compare makers on a clip: every picture between references `gap` apart, every maker.

    Parameters
    ----------
    frames : sequence of Picture or clip reader
        The clip (a `synth.io` reader or a list of pictures).
    gaps : sequence of int
        Reference distances (even, each at least 2).
    makers : sequence of names or Makers, comma-separated string or None
        None runs every registered maker.
    vectors : VectorSource or str, optional
        Where the vectors come from (``--vectors``; default the built-in estimator).
    vector_qps : sequence of int or '22,32,42', optional
        Vector QPs; vector makers are repeated at each.
    params : SynthParams, optional
        Calibrated synthesis parameters for the vector makers.
    pictures : (first, last), optional
        Display numbers used, both included (``--pictures``).
    limit : int, optional
        Use at most this many pictures.
    clip_name : str
        Name shown in tables and reports.
    progress : callable, optional
        ``progress(done, total, label)``.
    baseline : str, optional
        ``--baseline``: the method every other one is compared with (default
        `synth.evaluation.differences.resolve_baseline`: dis-medium when it ran); recorded in
        the settings.
    highlights : bool
        Keep every method's worst and median picture for the report (default).

    Returns
    -------
    RunResult
        kind 'compare', grouped by gap.
    """
    source = FrameSource(frames, pictures=pictures, limit=limit)
    qps = parse_vector_qps(vector_qps)
    jobs = compare_jobs(len(source), list(gaps), first=source.first)
    methods, records, pairs, highlights = run_jobs(
        jobs,
        source,
        makers=makers,
        vectors=vectors,
        vector_qps=qps,
        params=params,
        progress=progress,
        baseline=baseline,
        keep_highlights=highlights,
    )
    settings = {
        "gaps": [int(g) for g in gaps],
        "pictures_used": len(source),
        "first_picture": source.first,
        "predictors": sorted({r["predictor"] for r in records}, key=[r["predictor"] for r in records].index),
        "vector_qps": qps,
        "baseline": resolve_baseline(methods, baseline),
    }
    if vectors is not None and hasattr(vectors, "describe"):
        settings["vectors"] = vectors.describe()
    return RunResult("compare", clip_name, settings, methods, records, pairs, highlights, group_key="gap")


def compare(
    path,
    *,
    gap=8,
    makers=None,
    predictors=None,
    vectors=None,
    vector_qp=None,
    params=None,
    pictures=None,
    frames: int | None = None,
    progress=None,
) -> RunResult:
    """`compare_clip` on a clip file, with the command line's option names (used by `synth study`).

    Parameters
    ----------
    path : path-like
        Clip file, opened with `synth.io.open_clip`.
    gap : int, '2,4,8' or sequence of int
    makers, vectors, vector_qp, params, pictures
        As ``synth compare --makers/--vectors/--vector-qp/--params/--pictures``.
    predictors : str, optional
        Former name of `makers` (study files written before the makers registry).
    frames : int, optional
        Use only the first `frames` pictures.
    """
    from pathlib import Path

    from synth.commands.options import parse_int_list
    from synth.io import open_clip

    gaps = parse_int_list(gap, option="--gaps")
    reader = open_clip(path)
    return compare_clip(
        reader,
        gaps=gaps,
        makers=makers if makers is not None else predictors,
        vectors=vectors,
        vector_qps=vector_qp,
        params=params,
        pictures=pictures,
        limit=frames,
        clip_name=Path(path).name,
        progress=progress,
        highlights=False,  # a study keeps the rows only
    )
