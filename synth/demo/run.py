"""`synth demo`: the main job on the bundled demo clips, with no arguments.

For every demo clip (generated scenes of our own, see ``demo_clips/``): a dyadic hierarchical GOP
run (`synth.evaluation.gop.run_gop`) and a comparison of every maker at several reference gaps
(`synth.evaluation.compare.compare_clip`); then, on the first clip, the comparison at the widest gap repeated
with vectors estimated at several QPs. One report for all of them.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from synth.errors import FormatError
from synth.evaluation.compare import compare_clip, compare_jobs
from synth.evaluation.gop import gop_jobs, run_gop
from synth.evaluation.report import write_report
from synth.evaluation.workbench import RunResult

__all__ = ["DEMO_CLIPS", "DemoStep", "demo_clip_dir", "demo_plan", "run_demo"]

#: The bundled demo clips, in report order.
DEMO_CLIPS = ("parcels_pan.y4m", "turntable_zoom.y4m", "cart_accelerate.y4m")
#: GOP size of the demo's GOP runs (the clips hold one GOP of 16 plus its closing anchor), the
#: gaps of its comparisons and the vector QPs of the vector-QP run.
DEMO_GOP_SIZE = 16  # passed explicitly: the GOP runs' default (--gop-size) is 8
DEMO_GAPS = (2, 4, 8)
DEMO_VECTOR_QPS = (22, 32, 42)
#: Pictures of each clip the demo uses.
DEMO_PICTURES = 17


@dataclass
class DemoStep:
    """One run of the demo: 'gop' or 'compare' on one clip."""

    kind: str
    clip: str
    path: Path | None  # None: render the scene with synth.demo.scenes
    options: dict = field(default_factory=dict)

    def jobs(self, n_pictures: int) -> int:
        n = min(n_pictures, self.options.get("limit") or n_pictures)
        if self.kind == "gop":
            return len(gop_jobs(n, self.options["size"]))
        return len(compare_jobs(n, self.options["gaps"]))


def demo_clip_dir() -> Path | None:
    """The folder holding the bundled demo clips (``$SYNTH_DEMO_CLIPS``, else ``demo_clips/`` of
    the source tree), or None when neither holds all of `DEMO_CLIPS` (an installed package
    without the source tree: the demo then renders the same scenes with `synth.demo.scenes`)."""
    candidates = [Path(os.environ["SYNTH_DEMO_CLIPS"])] if os.environ.get("SYNTH_DEMO_CLIPS") else []
    candidates.append(Path(__file__).resolve().parents[2] / "demo_clips")
    for d in candidates:
        if all((d / name).is_file() for name in DEMO_CLIPS):
            return d
    return None


def demo_plan(directory: Path | None = None) -> list[DemoStep]:
    """The demo's runs: per clip a GOP run (size `DEMO_GOP_SIZE`) and a comparison at `DEMO_GAPS`;
    on the first clip a comparison at the widest gap with vectors at `DEMO_VECTOR_QPS`, from the
    built-in estimator and (when the clip files are there to code) from x264. Only the
    comparisons keep pictures to inspect (the GOP runs and the sweep make the same pictures again),
    which keeps the report folder small.

    Steps read the clip files of `directory` (default `demo_clip_dir()`); with no folder found
    their path is None and the clips are rendered in memory.
    """
    found = Path(directory) if directory is not None else demo_clip_dir()
    d = found if found is not None else Path("<rendered>")
    steps = []
    for name in DEMO_CLIPS:
        steps.append(
            DemoStep("gop", name, d / name, {"size": DEMO_GOP_SIZE, "limit": DEMO_PICTURES, "highlights": False})
        )
    for name in DEMO_CLIPS:
        steps.append(DemoStep("compare", name, d / name, {"gaps": list(DEMO_GAPS), "limit": DEMO_PICTURES}))

    def sweep(**extra) -> DemoStep:
        options = {"gaps": [max(DEMO_GAPS)], "limit": DEMO_PICTURES, "vector_qps": list(DEMO_VECTOR_QPS)}
        return DemoStep("compare", DEMO_CLIPS[0], d / DEMO_CLIPS[0], {**options, "highlights": False, **extra})

    steps.append(sweep())
    if found is not None:
        # the same sweep with x264's coded vectors (the clip coded as a hierarchy at each QP): the
        # rate constraint of a real encoder next to the estimator's
        steps.append(sweep(vectors="x264"))
    else:
        for step in steps:
            step.path = None
    return steps


def run_demo(
    plan: list[DemoStep],
    *,
    out: str | os.PathLike,
    progress: Callable[[int, int, str], None] | None = None,
    makers=None,
    vectors=None,
    baseline: str | None = None,
) -> tuple[list[RunResult], dict[str, Path]]:
    """Run every step of `plan` and write one report into `out`.

    Parameters
    ----------
    plan : list of DemoStep
    out : path
        Report directory (report.html, results.json, results.csv).
    progress : callable, optional
        ``progress(done, total, label)`` over all pictures of all steps.
    makers, vectors
        Passed to the runs (defaults: every registered maker, vectors from the built-in estimator).
    baseline : str, optional
        ``--baseline``: the method the report compares every other one with (default dis-medium).

    Returns
    -------
    (results, paths)
    """
    from synth.io import open_clip

    readers = {}
    for s in plan:
        if s.clip in readers:
            continue
        if s.path is not None:
            readers[s.clip] = open_clip(s.path)
        else:
            from synth.demo.scenes import render_scene

            readers[s.clip] = render_scene(Path(s.clip).stem, frames=DEMO_PICTURES)
    totals = [s.jobs(len(readers[s.clip])) for s in plan]
    grand = sum(totals)
    results: list[RunResult] = []
    offset = 0
    for step, count in zip(plan, totals):
        base = offset

        def step_progress(done: int, total: int, label: str, base=base, step=step) -> None:
            if progress is not None:
                progress(base + done, grand, f"{step.kind} {step.clip}: {label}")

        opts = dict(step.options, baseline=baseline)
        vectors_for_step = vectors
        own = opts.pop("vectors", None)
        if own is not None:  # a step with its own vector source (the x264 sweep)
            from synth.motion.sources import parse_vector_source

            vectors_for_step = parse_vector_source(own, clip=step.path)
        if step.kind == "gop":
            r = run_gop(
                readers[step.clip],
                clip_name=step.clip,
                makers=makers,
                vectors=vectors_for_step,
                progress=step_progress,
                **opts,
            )
        elif step.kind == "compare":
            r = compare_clip(
                readers[step.clip],
                clip_name=step.clip,
                makers=makers,
                vectors=vectors_for_step,
                progress=step_progress,
                **opts,
            )
        else:
            raise FormatError(f"unknown demo step kind {step.kind!r}")
        results.append(r)
        offset += count
    paths = write_report(
        results, out, title="synth demo: interpolated reference frames on the demo clips", baseline=baseline
    )
    return results, paths
