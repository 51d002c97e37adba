"""Plain-text tables of run results for the terminal (the command layer prints them).

Every table reads a run document (`synth.evaluation.workbench.run_document`: the dict a
``--json`` summary and results.json hold) or a `RunResult`, so text and JSON come from one place.
"""

from __future__ import annotations

from collections.abc import Sequence

from synth.evaluation.workbench import RunResult, overview, run_document

__all__ = [
    "summary_table",
    "difference_table",
    "format_differences",
    "vector_qp_table",
    "run_tables",
    "overview_table",
    "format_overview",
]

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


def format_differences(rows: Sequence[dict], first: str, key: str) -> str:
    """Paired differences to the baseline (`synth.evaluation.differences.difference_rows` or
    pooled rows): mean PSNR-YUV difference, its 95 % interval, wins and losses ('' without rows)."""
    if not rows:
        return ""
    header = [first, "method", "pics", "dPSNR-YUV", "95% CI", "wins", "losses"]
    body = []
    for r in rows:
        ci = "n/a" if r["ci_low"] is None else f"{r['ci_low']:+.2f} .. {r['ci_high']:+.2f}"
        body.append(
            [str(r[key]), r["method"], str(r["pictures"]), _fmt(r["mean_difference"], "{:+.2f}"), ci,
             str(r["wins"]), str(r["losses"])]
        )  # fmt: skip
    return _grid(header, body)


def difference_table(run) -> str:
    """Each method's paired PSNR-YUV difference to the run's baseline per group ('' when the run
    document has no ``differences``)."""
    doc = run if isinstance(run, dict) else None
    if doc is None:
        from synth.evaluation.differences import difference_rows, resolve_baseline

        base = resolve_baseline(run.methods, run.settings.get("baseline"))
        rows = difference_rows(run.records, run.methods, baseline=base, group_key=run.group_key)
        group = "gap" if run.group_key == "gap" else "layer"
    else:
        rows = doc.get("differences") or []
        group = "gap" if doc["group_key"] == "gap" else "layer"
    return format_differences(rows, group, "group")


def vector_qp_table(run) -> str:
    """Mean PSNR-YUV of each vector maker per vector QP ('' when fewer than two QPs ran)."""
    doc = _doc(run)
    table = doc["vector_qp_table"]
    if not table:
        return ""
    qps = doc["settings"]["vector_qps"]
    header = ["maker", "", *[f"QP{q}" for q in qps]]
    rows = [[r["predictor"], "", *[_fmt(r[f"qp{q}"], "{:.2f}") for q in qps]] for r in table]
    stats = {r["vector_qp"]: r for r in doc.get("vector_statistics") or []}
    if stats:  # what the vectors were like at each QP (mean over reference pairs)
        share = [None if stats.get(q, {}).get("intra_share") is None else 100 * stats[q]["intra_share"] for q in qps]
        rows.append(["intra %", "", *[_fmt(v, "{:.1f}") for v in share]])
        rows.append(["mean |v|", "", *[_fmt(stats.get(q, {}).get("mean_vector_length"), "{:.2f}") for q in qps]])
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
    vectors = s.get("vectors") or {}
    if vectors.get("vectors") in ("x264", "stream"):  # coded vectors: say which, and any assumption
        from synth.motion.sources import describe_record

        swept = s.get("vector_qps") or []
        if len(swept) > 1:
            vectors = {**vectors, "vector_qp": ", ".join(str(q) for q in swept)}
        parts.insert(1, f"vectors: {describe_record(vectors)}")
    diff = difference_table(run if isinstance(run, RunResult) else doc)
    if diff:
        base = doc.get("baseline") or doc["settings"].get("baseline")
        parts += [
            f"difference to {base} (paired, mean over pictures with its 95% Student-t interval; wins = pictures above it):",
            diff,
        ]
    qp = vector_qp_table(doc)
    if qp:
        parts += ["mean PSNR-YUV by vector QP (vector makers; intra % and mean |v| in samples of the vectors):", qp]
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
