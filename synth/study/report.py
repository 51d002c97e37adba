"""The study report: per-clip and mean tables, PNG plots and a small self-contained HTML page.

Writes into ``DIR/report/``: one PNG per (job kind, headline metric) showing the metric for every
parameter setting, one line per clip and the mean over clips in bold, and ``index.html`` with the
tables and the plots embedded (it opens without a network and without the PNG files beside it).
"""

from __future__ import annotations

import base64
import html
import math
import os
from pathlib import Path

from synth.io import atomic_write_bytes, atomic_write_text
from synth.study.aggregate import StudyTables
from synth.study.kinds import get_kind

__all__ = ["write_report", "format_table"]


def _fmt(value) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        if math.isnan(value):
            return "-"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return f"{value:.3f}" if abs(value) < 1e5 else f"{value:.4g}"
    return str(value)


def format_table(entries: list[dict], columns: list[str]) -> list[list[str]]:
    """Rows of strings for a table (numbers with three decimals, NaN as '-')."""
    return [[_fmt(e.get(c, "")) for c in columns] for e in entries]


def _plot(tables: StudyTables, kind: str, metric: str, path: Path) -> bool:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    split = get_kind(kind).group_by

    def label(e: dict) -> str:
        return " ".join([e["setting"]] * (e["setting"] != "all") + [f"{g}={e.get(g)}" for g in split]) or "all"

    settings = [label(m) for m in tables.means if m["kind"] == kind]
    if not settings:
        return False
    xs = range(len(settings))
    clips = sorted({e["clip"] for e in tables.per_clip if e["kind"] == kind})
    fig, ax = plt.subplots(figsize=(min(16.0, max(5.0, 0.6 * len(settings) + 2.5)), 3.8), dpi=100)
    for clip in clips:
        by = {label(e): e.get(metric, float("nan")) for e in tables.per_clip if e["kind"] == kind and e["clip"] == clip}
        ax.plot(xs, [by.get(s, float("nan")) for s in settings], marker="o", linewidth=1.0, alpha=0.75, label=clip)
    means = {label(m): m.get(metric, float("nan")) for m in tables.means if m["kind"] == kind}
    ax.plot(xs, [means[s] for s in settings], marker="s", color="black", linewidth=2.2, label="mean over clips")
    ax.set_xticks(list(xs))
    ax.set_xticklabels(settings, rotation=30, ha="right", fontsize=8)
    ax.set_ylabel(metric)
    ax.set_title(f"{kind}: {metric} per setting", fontsize=10)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="best")
    fig.tight_layout()
    tmp = path.with_name(f".{path.name}.tmp.png")
    fig.savefig(tmp, format="png", metadata={"Software": None})
    plt.close(fig)
    atomic_write_bytes(path, tmp.read_bytes())
    os.unlink(tmp)
    return True


def _html_table(entries: list[dict], columns: list[str]) -> str:
    head = "".join(f"<th>{html.escape(c)}</th>" for c in columns)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(v)}</td>" for v in row) + "</tr>" for row in format_table(entries, columns)
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


_STYLE = """
body { font-family: sans-serif; margin: 1.5em auto; max-width: 70em; color: #222; }
h1 { font-size: 1.4em; } h2 { font-size: 1.15em; margin-top: 1.6em; border-bottom: 1px solid #bbb; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.6em; text-align: right; }
th { background: #eef2f5; } td:nth-child(-n+3) { text-align: left; }
.note { color: #555; font-size: 0.9em; } img { max-width: 100%; border: 1px solid #ddd; margin: 0.4em 0; }
.failed { color: #a01010; }
"""


def write_report(tables: StudyTables, out_dir: str | os.PathLike, *, header: dict) -> Path:
    """Write the plots and ``report/index.html``; returns the page's path.

    Parameters
    ----------
    tables : StudyTables
    out_dir : path-like
        The study folder.
    header : dict
        ``title``, ``description``, ``code_version``, ``jobs`` (counts) as in ``study.json``.
    """
    report = Path(out_dir) / "report"
    report.mkdir(parents=True, exist_ok=True)
    parts = [f"<h1>{html.escape(header.get('title', 'study'))}</h1>"]
    if header.get("description"):
        parts.append(f"<p>{html.escape(header['description'])}</p>")
    counts = header.get("jobs", {})
    parts.append(
        f"<p class='note'>jobs: {counts.get('ok', 0)} finished, {counts.get('failed', 0)} failed, "
        f"{counts.get('missing', 0)} not run, of {counts.get('total', 0)}; synth {html.escape(str(header.get('code_version', '')))}. "
        "Machine-readable results: <code>study.csv</code>, <code>study.json</code>.</p>"
    )
    kinds = list(dict.fromkeys(m["kind"] for m in tables.means))
    for kind in kinds:
        metrics = tables.metrics.get(kind, [])
        parts.append(f"<h2>{html.escape(kind)}: {html.escape(get_kind(kind).summary)}</h2>")
        shared = tables.fixed.get(kind, {})
        if shared:
            text = ", ".join(f"{k} = {v}" for k, v in shared.items())
            parts.append(f"<p class='note'>Every {html.escape(kind)} job: {html.escape(text)}.</p>")
        split = list(get_kind(kind).group_by)
        parts.append("<h3>Mean over clips</h3>")
        parts.append(
            _html_table([m for m in tables.means if m["kind"] == kind], ["setting", *split, "clips", *metrics])
        )
        parts.append("<h3>Per clip</h3>")
        parts.append(
            _html_table(
                [e for e in tables.per_clip if e["kind"] == kind], ["setting", *split, "clip", "rows", *metrics]
            )
        )
        for metric in get_kind(kind).headline:
            if metric not in metrics:
                continue
            png = report / f"{kind}-{metric}.png"
            if _plot(tables, kind, metric, png):
                data = base64.b64encode(png.read_bytes()).decode("ascii")
                parts.append(
                    f"<img alt='{html.escape(kind)} {html.escape(metric)}' src='data:image/png;base64,{data}'>"
                )
    if tables.failures:
        parts.append("<h2 class='failed'>Failed jobs</h2>")
        parts.append(_html_table(tables.failures, ["job", "kind", "clip", "setting", "error"]))
    page = (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>{html.escape(header.get('title', 'study'))}</title><style>{_STYLE}</style></head><body>"
        + "\n".join(parts)
        + "</body></html>\n"
    )
    path = report / "index.html"
    atomic_write_text(path, page)
    return path
