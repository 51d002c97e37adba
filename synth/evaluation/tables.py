"""Plain-text tables of run results for the terminal (the command layer prints them).

Every table reads a run document (`synth.evaluation.workbench.run_document`: the dict a
``--json`` summary and results.json hold) or a `RunResult`, so text and JSON come from one place.
"""

from __future__ import annotations

from collections.abc import Sequence

from synth.evaluation.workbench import RunResult, overview, run_document

__all__ = ["summary_table", "vector_qp_table", "run_tables", "overview_table", "format_overview"]

_COLS = (
    ("pictures", "pics", "{:d}"),
    ("psnr_yuv", "PSNR-YUV", "{:.2f}"),
    ("psnr_y", "PSNR-Y", "{:.2f}"),
    ("ssim_y", "SSIM-Y", "{:.4f}"),
    ("mae_y", "MAE-Y", "{:.3f}"),
    ("ms_per_picture", "ms/pic", "{:.1f}"),
    ("wins", "wins", "{:d}"),
)


def _doc(run) -> dict:
    return run_document(run, pictures=False) if isinstance(run, RunResult) else run


def _fmt(value, spec: str) -> str:
    return "n/a" if value is None else spec.format(value)


def _grid(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    widths = [max(len(str(c)) for c in col) for col in zip(header, *rows)]
    lines = ["  ".join(h.ljust(w) if i < 2 else h.rjust(w) for i, (h, w) in enumerate(zip(header, widths)))]
    lines.append("  ".join("-" * w for w in widths))
    for r in rows:
        lines.append(
            "  ".join(str(c).ljust(w) if i < 2 else str(c).rjust(w) for i, (c, w) in enumerate(zip(r, widths)))
        )
    return "\n".join(lines)


def summary_table(run) -> str:
    """Per-method means per group (gap or temporal layer) and wins per picture."""
    doc = _doc(run)
    group = "gap" if doc["group_key"] == "gap" else "layer"
    header = [group, "method", *[c[1] for c in _COLS]]
    rows = []
    for r in doc["summary"]:
        rows.append([str(r["group"]), r["method"], *[_fmt(r.get(k), spec) for k, _, spec in _COLS]])
    return _grid(header, rows)


def vector_qp_table(run) -> str:
    """Mean PSNR-YUV of each vector maker per vector QP ('' when fewer than two QPs ran)."""
    doc = _doc(run)
    table = doc["vector_qp_table"]
    if not table:
        return ""
    qps = doc["settings"]["vector_qps"]
    header = ["maker", "", *[f"QP{q}" for q in qps]]
    rows = [[r["predictor"], "", *[_fmt(r[f"qp{q}"], "{:.2f}") for q in qps]] for r in table]
    return _grid(header, rows)


def run_tables(run) -> str:
    """Title line, summary table and (when present) the vector-QP table of one run."""
    doc = _doc(run)
    s = doc["settings"]
    if doc["kind"] == "compare":
        title = f"{doc['clip']}: compare, gaps {', '.join(str(g) for g in s['gaps'])}, {s['pictures_used']} pictures"
    else:
        refs = (
            f"references decoded at QP {s['decoded_refs_qp']}"
            if s.get("decoded_refs_qp") is not None
            else "source references"
        )
        title = f"{doc['clip']}: GOP size {s['gop_size']} ({s['structure']}), {s['gops']} GOP(s), {refs}"
    parts = [title, summary_table(doc)]
    qp = vector_qp_table(doc)
    if qp:
        parts += ["mean PSNR-YUV by vector QP (vector makers):", qp]
    return "\n".join(parts)


def format_overview(ov: dict) -> str:
    """The table of an `overview` dict ('' when it has no rows)."""
    if not ov["rows"]:
        return ""
    header = ["method", "", *ov["columns"], "wins", "ms/pic"]
    rows = [
        [
            r["method"],
            "",
            *[_fmt(r[c], "{:.2f}") for c in ov["columns"]],
            str(r["wins"]),
            _fmt(r["ms_per_picture"], "{:.1f}"),
        ]
        for r in ov["rows"]
    ]
    return _grid(header, rows)


def overview_table(runs: Sequence[RunResult]) -> str:
    """Mean PSNR-YUV per method pooled over several runs (see `synth.evaluation.workbench.overview`)."""
    return format_overview(overview(runs))
