"""What `synth demo` does: the main job on the bundled demo clips (GOP runs and comparisons), one
report folder, and an overview table."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["DEFAULT_DEMO_REPORT", "run_demo_command", "format_demo"]

#: Report folder of ``synth demo`` when ``--report`` is not given.
DEFAULT_DEMO_REPORT = Path("synth-demo")


def run_demo_command(report: str | os.PathLike | None = None, *, progress=None) -> dict:
    """Run ``synth demo`` and return its JSON-ready summary.

    Parameters
    ----------
    report : path, optional
        ``--report`` folder; default `DEFAULT_DEMO_REPORT`.
    progress : callable, optional
        ``progress(done, total, label)`` over all pictures of all runs.

    Returns
    -------
    dict
        ``command``, ``clips``, ``overview`` (`synth.evaluation.workbench.overview`),
        ``vector_qp_runs`` (per run with several vector QPs: ``clip``, ``gaps``, ``run``, the run
        document without per-picture records) and ``report`` (paths by name); strict JSON.
    """
    from synth.demo.run import demo_plan, run_demo
    from synth.evaluation.workbench import overview, run_document
    from synth.io.jsonout import strict_json

    out = Path(report) if report is not None else DEFAULT_DEMO_REPORT
    results, paths = run_demo(demo_plan(), out=out, progress=progress)
    clips = sorted({r.clip for r in results}, key=[r.clip for r in results].index)
    sweeps = [
        {"clip": r.clip, "gaps": r.settings.get("gaps"), "run": run_document(r, i, pictures=False)}
        for i, r in enumerate(results)
        if len(r.settings.get("vector_qps") or []) > 1
    ]
    return strict_json(
        {"command": "demo", "clips": clips, "overview": overview(results), "vector_qp_runs": sweeps, "report": paths}
    )


def format_demo(summary: dict) -> str:
    """The text of ``synth demo``: the overview, the vector-QP tables and the report's paths."""
    from synth.evaluation.tables import format_overview, vector_qp_table

    clips = summary["clips"]
    lines = [
        f"Mean PSNR-YUV (dB) of the picture each method predicts, over {len(clips)} demo clips ({', '.join(clips)}):",
        "GOP = every B picture of a dyadic GOP from its hierarchy references; gap N = every picture",
        "between references N apart; wins = pictures on which the method is best.",
        format_overview(summary["overview"]),
    ]
    for sweep in summary["vector_qp_runs"]:
        table = vector_qp_table(sweep["run"])
        if table:
            gaps = ", ".join(str(g) for g in sweep["gaps"] or [])
            lines += ["", f"Vector QP on {sweep['clip']} (gap {gaps}): mean PSNR-YUV of the vector makers", table]
    p = summary["report"]
    lines += [
        "",
        f"report: {p['html']}  (per-clip and per-layer tables, plots, error and weight maps)",
        f"data:   {p['json']}, {p['csv']}",
    ]
    return "\n".join(lines)
