"""The study report: a page in the style of every synth report (`synth.evaluation.page_style`).

Writes into ``DIR/report/``: ``index.html`` (table of contents; per job kind the means over clips,
a grouped-bar plot per headline metric, the per-clip table collapsed; for kinds that compare
methods, each method's paired difference to a baseline with its 95 % Student-t interval and the
pictures it wins), one PNG per (kind, headline metric) and per difference plot, linked from the
page and loaded lazily, and ``differences.json`` (format ``synth-study-differences``).

Settings are categories: they are shown as grouped bars and tables, never joined by lines.

Every table names the JSON file its numbers come from (``data-file``: ``../study.json`` or
``differences.json``), every row its entry (``data-row``, e.g. ``means.3``) and every header cell
its key (``data-key``), so a test can check each shown number against the file.
"""

from __future__ import annotations

import html
import math
import os
from pathlib import Path

from synth.io import atomic_write_bytes, atomic_write_text
from synth.io.jsonout import dumps_strict, strict_json
from synth.study.aggregate import StudyTables
from synth.study.kinds import get_kind

__all__ = ["write_report", "rewrite_report", "format_table", "study_differences", "DIFFERENCES_SCHEMA_VERSION"]

#: Version of ``report/differences.json``.
DIFFERENCES_SCHEMA_VERSION = 1
#: Metric the differences are taken on (the workbench kinds' headline).
DIFFERENCE_METRIC = "psnr_yuv"
#: Row columns that identify one picture within a job (with the job id).
_PICTURE_KEYS = ("gap", "gop", "layer", "coding_index", "target")


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


def _setting_keys(tables: StudyTables, kind: str) -> list[str]:
    """The parameters named in the kind's setting labels (those that vary within the study)."""
    keys: list[str] = []
    for m in tables.means:
        if m["kind"] == kind and m["setting"] != "all":
            for part in m["setting"].split(" "):
                k = part.split("=", 1)[0]
                if k not in keys:
                    keys.append(k)
    return keys


def study_differences(tables: StudyTables, *, baseline: str | None = None) -> dict:
    """Per job kind that compares methods (rows with ``method`` and ``target``): every method's
    paired difference of `DIFFERENCE_METRIC` to the baseline, per setting (and per value of the
    kind's other ``group_by`` columns, e.g. the layer), pictures of every clip pooled (paired
    within a job). See `synth.evaluation.differences.paired_difference`.

    Returns
    -------
    dict
        ``format`` 'synth-study-differences', ``schema_version``, ``metric``, ``baseline`` and
        ``kinds``: per kind a list of rows ``setting``, the group columns, ``method``,
        ``baseline`` and the keys of `paired_difference`; ``without_baseline`` lists the kinds
        that did not run a given baseline.
    """
    from synth.errors import ParameterError
    from synth.evaluation.differences import paired_difference, resolve_baseline
    from synth.study.aggregate import setting_label

    out = {
        "format": "synth-study-differences",
        "schema_version": DIFFERENCES_SCHEMA_VERSION,
        "metric": DIFFERENCE_METRIC,
        "baseline": None,
        "kinds": {},
    }
    kinds = list(dict.fromkeys(m["kind"] for m in tables.means))
    for kind in kinds:
        rows = [r for r in tables.rows if r["kind"] == kind]
        if not rows or not all("method" in r and "target" in r and DIFFERENCE_METRIC in r for r in rows):
            continue
        methods = list(dict.fromkeys(r["method"] for r in rows))
        try:
            base = resolve_baseline(methods, baseline)
        except ParameterError:  # this kind did not run the baseline: no differences for it
            out.setdefault("without_baseline", []).append(kind)
            continue
        out["baseline"] = base
        keys = _setting_keys(tables, kind)
        split = [g for g in get_kind(kind).group_by if g != "method"]
        groups: dict[tuple, dict[str, dict]] = {}
        for r in rows:
            setting = setting_label({k: r.get(k) for k in keys}, keys)
            gkey = (setting, *[r.get(g) for g in split])
            pic = (r["job"], *[r.get(k) for k in _PICTURE_KEYS])
            groups.setdefault(gkey, {}).setdefault(r["method"], {})[pic] = r.get(DIFFERENCE_METRIC)
        entries = []
        for gkey, by_method in groups.items():
            ref = by_method.get(base, {})
            for m in methods:
                if m == base or m not in by_method:
                    continue
                pics = [p for p in by_method[m] if p in ref]
                if not pics:
                    continue
                d = paired_difference([by_method[m][p] for p in pics], [ref[p] for p in pics])
                entries.append({"setting": gkey[0], **dict(zip(split, gkey[1:])), "method": m, "baseline": base, **d})
        out["kinds"][kind] = entries
    return strict_json(out)


def _bars(tables: StudyTables, kind: str, metric: str):
    """Grouped bars: one group per setting (categories), one bar per clip, the mean over clips as
    a black marker on each group; nothing joins the settings."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    from synth.evaluation.page_style import legend_outside, method_colours, style_axes

    split = get_kind(kind).group_by

    def label(e: dict) -> str:
        return " ".join([e["setting"]] * (e["setting"] != "all") + [f"{g}={e.get(g)}" for g in split]) or "all"

    settings = list(dict.fromkeys(label(m) for m in tables.means if m["kind"] == kind))
    if not settings:
        return None
    clips = sorted({e["clip"] for e in tables.per_clip if e["kind"] == kind})
    colours = method_colours(clips)
    k = max(1, len(clips))
    width = 0.8 / k
    fig, ax = plt.subplots(figsize=(min(16.0, max(6.5, 0.35 * len(settings) * k + 3.0)), 3.8))
    for j, clip in enumerate(clips):
        by = {label(e): e.get(metric, float("nan")) for e in tables.per_clip if e["kind"] == kind and e["clip"] == clip}
        xs = np.arange(len(settings)) - 0.4 + width * (j + 0.5)
        ys = [by.get(s, float("nan")) for s in settings]
        ax.bar(xs, [0.0 if y is None else y for y in ys], width=width * 0.92, color=colours[clip], label=clip)
    means = {label(m): m.get(metric, float("nan")) for m in tables.means if m["kind"] == kind}
    ax.plot(
        range(len(settings)), [means[s] for s in settings], linestyle="none", marker="D", markersize=6,
        color="black", label="mean over clips",
    )  # fmt: skip
    ax.set_xticks(range(len(settings)))
    ax.set_xticklabels(
        settings, rotation=30 if len(settings) > 3 else 0, ha="right" if len(settings) > 3 else "center", fontsize=8
    )
    ax.set_ylabel(metric, fontsize=10)
    ax.set_title(f"{kind}: {metric} per setting", fontsize=10)
    style_axes(ax)
    ax.grid(axis="x", visible=False)
    legend_outside(ax)
    return fig


def _write_png(fig, path: Path) -> None:
    from synth.evaluation.page_style import figure_png

    atomic_write_bytes(path, figure_png(fig))


def _table(entries: list[dict], columns: list[str], *, file: str, section: str, indices: list[int]) -> str:
    head = "".join(f'<th data-key="{html.escape(c)}">{html.escape(c)}</th>' for c in columns)
    body = "".join(
        f'<tr data-row="{html.escape(section)}.{i}">' + "".join(f"<td>{html.escape(v)}</td>" for v in row) + "</tr>"
        for i, row in zip(indices, format_table(entries, columns))
    )
    return f'<table data-file="{html.escape(file)}"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


_EXTRA_CSS = "td:nth-child(-n+3){text-align:left}.failed{color:#a01010}"


def write_report(tables: StudyTables, out_dir: str | os.PathLike, *, header: dict, baseline: str | None = None) -> Path:
    """Write ``report/index.html``, its plots and ``report/differences.json``; returns the page's path.

    Parameters
    ----------
    tables : StudyTables
    out_dir : path-like
        The study folder.
    header : dict
        ``title``, ``description``, ``code_version``, ``jobs`` (counts) as in ``study.json``.
    baseline : str, optional
        ``--baseline``: the method the differences are taken to (default dis-medium when it ran,
        see `synth.evaluation.differences.resolve_baseline`).
    """
    from synth.evaluation import plots
    from synth.evaluation.page_style import Contents, ImageFolder, details, html_page

    report = Path(out_dir) / "report"
    report.mkdir(parents=True, exist_ok=True)
    contents = Contents()
    diffs = study_differences(tables, baseline=baseline)
    parts = []
    if header.get("description"):
        parts.append(f"<p>{html.escape(header['description'])}</p>")
    counts = header.get("jobs", {})
    parts.append(
        f"<p class='note'>jobs: {counts.get('ok', 0)} finished, {counts.get('failed', 0)} failed, "
        f"{counts.get('missing', 0)} not run, of {counts.get('total', 0)}; synth {html.escape(str(header.get('code_version', '')))}. "
        "Machine-readable results: <code>study.csv</code>, <code>study.json</code>, <code>report/differences.json</code>. "
        "Settings are categories: shown as grouped bars (from zero) and tables; small effects show in "
        "the differences to the baseline.</p>"
    )
    kinds = list(dict.fromkeys(m["kind"] for m in tables.means))
    for kind in kinds:
        metrics = tables.metrics.get(kind, [])
        body = [contents.heading(f"{kind}: {get_kind(kind).summary}", 2, anchor=f"kind-{kind}")]
        shared = tables.fixed.get(kind, {})
        if shared:
            text = ", ".join(f"{k} = {v}" for k, v in shared.items())
            body.append(f"<p class='note'>Every {html.escape(kind)} job: {html.escape(text)}.</p>")
        split = list(get_kind(kind).group_by)
        means = [(i, m) for i, m in enumerate(tables.means) if m["kind"] == kind]
        body.append(contents.heading(f"{kind}: mean over clips", 3))
        body.append(
            _table([m for _, m in means], ["setting", *split, "clips", *metrics], file="../study.json",
                   section="means", indices=[i for i, _ in means])
        )  # fmt: skip
        for metric in get_kind(kind).headline:
            if metric not in metrics:
                continue
            fig = _bars(tables, kind, metric)
            if fig is not None:
                name = f"{kind}-{metric}.png"
                _write_png(fig, report / name)
                body.append(ImageFolder.tag(name, f"{kind} {metric} per setting"))
        rows = diffs["kinds"].get(kind)
        if rows:
            base = rows[0]["baseline"]
            body.append(contents.heading(f"{kind}: difference to {base}", 3))
            body.append(
                "<p class='note'>Per setting, every method's PSNR YUV minus the baseline's on the same picture, "
                "pictures of every clip pooled: mean and 95 % interval (mean &plusmn; t<sub>0.975, n&minus;1</sub> s / "
                "&radic;n, the paired t interval of Montgomery &amp; Runger, <i>Applied Statistics and Probability "
                "for Engineers</i>); wins / losses: pictures above / below the baseline.</p>"
            )
            cols = ["setting", *[g for g in split if g != "method"], "method", "pictures", "mean_difference",
                    "ci_low", "ci_high", "wins", "losses"]  # fmt: skip
            body.append(
                _table(rows, cols, file="differences.json", section=f"kinds.{kind}", indices=list(range(len(rows))))
            )
            extra = [g for g in split if g != "method"]
            groups = list(dict.fromkeys(" ".join([r["setting"]] + [f"{g}={r.get(g)}" for g in extra]) for r in rows))
            shown = [dict(r, group=" ".join([r["setting"]] + [f"{g}={r.get(g)}" for g in extra])) for r in rows]
            methods = list(dict.fromkeys(r["method"] for r in rows))
            fig = plots.difference_plot(shown, [*methods, base], baseline=base, groups=groups, group_label="setting")
            if len(groups) > 3:
                for t in fig.axes[0].get_xticklabels():
                    t.set_rotation(30)
                    t.set_ha("right")
            name = f"{kind}-differences.png"
            _write_png(fig, report / name)
            body.append(ImageFolder.tag(name, f"{kind}: difference to {base} per setting"))
        per = [(i, e) for i, e in enumerate(tables.per_clip) if e["kind"] == kind]
        body.append(
            details(
                f"{html.escape(kind)}: per clip",
                _table([e for _, e in per], ["setting", *split, "clip", "rows", *metrics], file="../study.json",
                       section="per_clip", indices=[i for i, _ in per]),
            )
        )  # fmt: skip
        parts.append("<section>" + "".join(body) + "</section>")
    if tables.failures:
        parts.append(contents.heading("Failed jobs", 2, anchor="failed"))
        parts.append(
            _table(tables.failures, ["job", "kind", "clip", "setting", "error"], file="../study.json",
                   section="failures", indices=list(range(len(tables.failures))))
        )  # fmt: skip
    page = html_page(header.get("title", "study"), "\n".join(parts), contents=contents)
    page = page.replace("</style>", _EXTRA_CSS + "</style>", 1)
    atomic_write_text(report / "differences.json", dumps_strict(diffs, indent=1) + "\n")
    path = report / "index.html"
    atomic_write_text(path, page)
    return path


def rewrite_report(tables: StudyTables, out_dir: str | os.PathLike, *, baseline: str | None) -> Path:
    """Write the report again (e.g. with another ``--baseline``), its header read from the
    folder's ``study.json``."""
    import json

    doc = json.loads((Path(out_dir) / "study.json").read_text(encoding="utf-8"))
    header = {k: doc.get(k) for k in ("title", "description", "code_version", "jobs") if doc.get(k) is not None}
    return write_report(tables, out_dir, header=header, baseline=baseline)
