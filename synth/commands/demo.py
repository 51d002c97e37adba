"""What `synth demo` does: the main job on the bundled demo clips (GOP runs and comparisons), one
report folder, and an overview table."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["DEFAULT_DEMO_REPORT", "run_demo_command", "format_demo"]

#: Report folder of ``synth demo`` when ``--report`` is not given.
DEFAULT_DEMO_REPORT = Path("synth-demo")


def run_demo_command(report: str | os.PathLike | None = None, *, baseline: str | None = None, progress=None) -> dict:
    """Run ``synth demo`` and return its JSON-ready summary.

    Parameters
    ----------
    report : path, optional
        ``--report`` folder; default `DEFAULT_DEMO_REPORT`.
    baseline : str, optional
        ``--baseline``: a maker name; default dis-medium.
    progress : callable, optional
        ``progress(done, total, label)`` over all pictures of all runs.

    Returns
    -------
    dict
        ``format`` ('synth-demo-summary'), ``schema_version``, ``command``, ``clips``,
        ``baseline``, ``overview`` (`synth.evaluation.workbench.overview`, with ``differences``
        per column and ``clip_differences`` per clip as in results.json), ``vector_qp_runs`` (per
        run with several vector QPs: ``clip``, ``gaps``, ``run``, the run document without
        per-picture records) and ``report`` (paths by name); strict JSON.
    """
    from synth.commands.compare import SUMMARY_SCHEMA_VERSION, check_baseline
    from synth.demo.run import demo_plan, run_demo
    from synth.evaluation.report import results_document
    from synth.evaluation.workbench import run_document
    from synth.io.jsonout import strict_json

    check_baseline(baseline, None)
    from synth.commands.outputs import check_output_dir

    out = check_output_dir(report if report is not None else DEFAULT_DEMO_REPORT, option="--report")
    results, paths = run_demo(demo_plan(), out=out, progress=progress, baseline=baseline)
    doc = results_document(results, baseline=baseline, inspect=False)
    clips = sorted({r.clip for r in results}, key=[r.clip for r in results].index)
    sweeps = [
        {
            "clip": r.clip,
            "gaps": r.settings.get("gaps"),
            "vectors": (r.settings.get("vectors") or {}).get("vectors", "estimate"),
            "run": run_document(r, i, pictures=False),
        }
        for i, r in enumerate(results)
        if len(r.settings.get("vector_qps") or []) > 1
    ]
    return strict_json(
        {
            "format": "synth-demo-summary",
            "schema_version": SUMMARY_SCHEMA_VERSION,
            "command": "demo",
            "clips": clips,
            "baseline": doc["baseline"],
            "overview": doc["overview"],
            "vector_qp_runs": sweeps,
            "report": paths,
        }
    )


def format_demo(summary: dict) -> str:
    """The text of ``synth demo``: the overview, the vector-QP tables and the report's paths."""
    from synth.evaluation.tables import format_differences, format_overview, vector_qp_table

    clips = summary["clips"]
    lines = [
        f"Mean PSNR-YUV (dB) of the picture each method predicts, over {len(clips)} demo clips ({', '.join(clips)}):",
        "GOP = every B picture of a dyadic GOP from its hierarchy references; gap N = every picture",
        "between references N apart; wins = pictures on which the method is best.",
        format_overview(summary["overview"]),
    ]
    ov = summary["overview"]
    if ov.get("differences"):
        lines += [
            "",
            f"Difference to {summary['baseline']} (paired per picture; mean and 95% Student-t interval; wins/losses"
            " = pictures above/below it):",
            format_differences(ov["differences"], "pictures", "column"),
            "",
            format_differences(ov["clip_differences"], "clip", "clip"),
        ]
    for sweep in summary["vector_qp_runs"]:
        table = vector_qp_table(sweep["run"])
        if table:
            gaps = ", ".join(str(g) for g in sweep["gaps"] or [])
            source = sweep.get("vectors", "estimate")
            lines += [
                "",
                f"Vector QP on {sweep['clip']} (gap {gaps}, {source} vectors): mean PSNR-YUV of the vector makers",
                table,
            ]
    p = summary["report"]
    lines += [
        "",
        f"report: {p['html']}  (per-clip and per-layer tables, plots, error and weight maps)",
        f"data:   {p['json']}, {p['csv']}",
    ]
    return "\n".join(lines)
