"""Reports of compare and GOP runs: ``results.json``, ``results.csv`` and a self-contained
``report.html`` (every figure embedded as a base64 PNG; no script, style sheet or font is fetched,
so the page opens without a network).

results.json
    ``{"format": "synth-results", "schema_version": 1, "synth_version": ..., "runs": [...]}``; each
    run holds ``id``, ``kind`` ('compare' or 'gop'), ``clip``, ``settings``, ``methods``,
    ``group_key`` ('gap' or 'layer'), ``summary`` (per method and group means; see
    `synth.evaluation.workbench.summarise`), ``vector_qp_table`` (when several vector QPs ran), ``pairs``
    (vector estimation per reference pair) and ``pictures`` (one record per picture and method;
    ``predictor`` is the maker's registry name, ``method`` its table label).
    With several runs, ``overview`` pools them (`synth.evaluation.workbench.overview`): ``columns`` and per
    method ``rows``. Infinite PSNR (identical pictures) is written as null.
results.csv
    The ``pictures`` records of all runs, one line each, columns `CSV_COLUMNS`.
report.html
    Tables whose number cells carry ``data-src`` (the JSON path of the value in results.json, e.g.
    ``runs.0.summary.3.psnr_yuv``) and ``data-value`` (its exact value), and the figures.
"""

from __future__ import annotations

import base64
import csv
import html
import io as _stdio
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from synth.evaluation.workbench import METRIC_KEYS, RunResult, overview, run_document
from synth.io import atomic_write_text
from synth.io.jsonout import dumps_strict, strict_json

__all__ = ["CSV_COLUMNS", "results_document", "results_csv", "report_html", "write_report"]

CSV_COLUMNS = (
    "run",
    "kind",
    "clip",
    "gap",
    "gop",
    "layer",
    "coding_index",
    "target",
    "past",
    "future",
    "t",
    "method",
    "predictor",
    "vector_qp",
    *METRIC_KEYS,
    "seconds",
)

_COLUMN_TITLES = {
    "pictures": "pictures",
    "psnr_yuv": "PSNR YUV",
    "psnr_y": "PSNR Y",
    "psnr_cb": "PSNR Cb",
    "psnr_cr": "PSNR Cr",
    "ssim_y": "SSIM Y",
    "mae_y": "MAE Y",
    "ms_per_picture": "ms/picture",
    "wins": "wins",
}
_DECIMALS = {"psnr_yuv": 2, "psnr_y": 2, "psnr_cb": 2, "psnr_cr": 2, "ssim_y": 4, "mae_y": 3, "ms_per_picture": 1}


def results_document(runs: Sequence[RunResult]) -> dict:
    """The content of results.json for a list of runs (strict JSON: `synth.io.jsonout.strict_json`)."""
    from synth import __version__

    doc = {
        "format": "synth-results",
        "schema_version": 1,
        "synth_version": __version__,
        "runs": [run_document(run, i) for i, run in enumerate(runs)],
    }
    if len(runs) > 1:
        doc["overview"] = overview(runs)
    return strict_json(doc)


def results_csv(runs: Sequence[RunResult]) -> str:
    """The content of results.csv: every picture record of every run."""
    buf = _stdio.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(CSV_COLUMNS), extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for i, run in enumerate(runs):
        for rec in run.records:
            row = {"run": i, "kind": run.kind, "clip": run.clip}
            for k, v in rec.items():
                row[k] = "" if v is None else (repr(float(v)) if isinstance(v, float) else v)
            writer.writerow(row)
    return buf.getvalue()


# --------------------------------------------------------------------------------------------
# HTML
# --------------------------------------------------------------------------------------------

_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:1.5em auto;max-width:1100px;color:#1d2327;padding:0 1em}
h1{font-size:1.5em}h2{font-size:1.25em;border-bottom:2px solid #3b6ea5;padding-bottom:.2em;margin-top:2em}
h3{font-size:1.05em;margin-top:1.4em}
table{border-collapse:collapse;font-size:.85em;margin:.6em 0}
th,td{padding:.25em .6em;border-bottom:1px solid #d9dee3;text-align:right}
th{background:#eef2f6}td.name,th.name{text-align:left}
tr.best td{font-weight:600}
img{max-width:100%;display:block;margin:.5em 0}
.note{color:#56616b;font-size:.85em}
code{background:#f3f5f7;padding:0 .2em}
"""


def _img(png: bytes, alt: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def _cell(value, key: str, path: str) -> str:
    if value is None:
        text = "n/a"
    elif isinstance(value, float):
        text = f"{value:.{_DECIMALS.get(key, 3)}f}"
    else:
        text = str(value)
    attr_val = "" if value is None else (repr(float(value)) if isinstance(value, float) else str(value))
    return f'<td data-src="{path}" data-value="{html.escape(attr_val)}">{html.escape(text)}</td>'


def _summary_table(run_id: int, summary: list[dict], group_title: str) -> str:
    cols = ["pictures", *[k for k in METRIC_KEYS if any(k in r for r in summary)], "ms_per_picture", "wins"]
    head = (
        f'<tr><th class="name">{html.escape(group_title)}</th><th class="name">method</th>'
        + "".join(f"<th>{_COLUMN_TITLES[c]}</th>" for c in cols)
        + "</tr>"
    )
    best_by_group: dict = {}
    for r in summary:
        v = r.get("psnr_yuv")
        if v is not None and (r["group"] not in best_by_group or v > best_by_group[r["group"]]):
            best_by_group[r["group"]] = v
    rows = []
    for i, r in enumerate(summary):
        cls = (
            ' class="best"'
            if r.get("psnr_yuv") is not None and r.get("psnr_yuv") == best_by_group.get(r["group"])
            else ""
        )
        cells = "".join(_cell(r.get(c), c, f"runs.{run_id}.summary.{i}.{c}") for c in cols)
        rows.append(
            f'<tr{cls}><td class="name">{html.escape(str(r["group"]))}</td>'
            f'<td class="name">{html.escape(r["method"])}</td>{cells}</tr>'
        )
    return f"<table>{head}{''.join(rows)}</table>"


def _qp_table(run_id: int, table: list[dict], qps: list[int]) -> str:
    head = '<tr><th class="name">maker</th>' + "".join(f"<th>vector QP {q}</th>" for q in qps) + "</tr>"
    rows = []
    for i, r in enumerate(table):
        cells = "".join(_cell(r[f"qp{q}"], "psnr_yuv", f"runs.{run_id}.vector_qp_table.{i}.qp{q}") for q in qps)
        rows.append(f'<tr><td class="name">{html.escape(r["predictor"])}</td>{cells}</tr>')
    return f"<table>{head}{''.join(rows)}</table>"


def _overview_table(ov: dict) -> str:
    cols = ov["columns"]
    head = (
        '<tr><th class="name">method</th>'
        + "".join(f"<th>{html.escape(c)}</th>" for c in cols)
        + "<th>wins</th><th>ms/picture</th></tr>"
    )
    best = {c: max((r[c] for r in ov["rows"] if r[c] is not None), default=None) for c in cols}
    rows = []
    for i, r in enumerate(ov["rows"]):
        cells = []
        for c in cols:
            cell = _cell(r[c], "psnr_yuv", f"overview.rows.{i}.{c}")
            if r[c] is not None and r[c] == best[c]:
                cell = cell.replace("<td ", '<td style="font-weight:600" ', 1)
            cells.append(cell)
        cells.append(_cell(r["wins"], "wins", f"overview.rows.{i}.wins"))
        cells.append(_cell(r["ms_per_picture"], "ms_per_picture", f"overview.rows.{i}.ms_per_picture"))
        rows.append(f'<tr><td class="name">{html.escape(r["method"])}</td>{"".join(cells)}</tr>')
    return f"<table>{head}{''.join(rows)}</table>"


def _run_title(run: RunResult) -> str:
    s = run.settings
    if run.kind == "compare":
        gaps = ", ".join(str(g) for g in s.get("gaps", []))
        return f"Comparison on {run.clip}: reference gap {gaps}"
    refs = (
        f"references decoded at QP {s['decoded_refs_qp']}"
        if s.get("decoded_refs_qp") is not None
        else "source references"
    )
    return f"GOP run on {run.clip}: size {s.get('gop_size')}, {s.get('structure')} structure, {refs}"


def _highlight_section(run: RunResult) -> str:
    from synth.evaluation import plots

    parts = []
    for h in run.highlights:
        j = h.job
        where = f"picture {j.target} (references {j.past} and {j.future}, t = {j.t:.3f})"
        value = "inf" if not np.isfinite(h.key_value) else f"{h.key_value:.2f} dB"
        parts.append(f"<h3>{h.label.capitalize()} picture for {html.escape(h.key_method)}: {where}, {value}</h3>")
        preds = {m: p.picture.y for m, p in h.predictions.items()}
        parts.append(
            _img(
                plots.error_maps(h.target.y, preds, title=f"{h.label} picture {j.target}"),
                f"error maps, {h.label} picture",
            )
        )
        weights = None
        source = h.key_method
        if "past_weight" in h.predictions[h.key_method].maps:
            weights = h.predictions[h.key_method].maps["past_weight"]
        else:
            for m, p in h.predictions.items():
                if "past_weight" in p.maps:
                    weights, source = p.maps["past_weight"], m
                    break
        if weights is not None:
            parts.append(
                _img(
                    plots.weight_map(weights, title=f"{source}: weight of the past reference, picture {j.target}"),
                    f"weight map, {h.label} picture",
                )
            )
        if h.fields:
            f0 = h.fields[0]
            on = h.future if f0.coded_time == float(j.future) else h.past
            parts.append(
                _img(
                    plots.vector_overlay(
                        on.y,
                        f0,
                        title=f"vectors coded on picture {f0.coded_time:g} pointing to picture {f0.reference_time:g}",
                    ),
                    f"vector overlay, {h.label} picture",
                )
            )
    return "".join(parts)


def report_html(runs: Sequence[RunResult], doc: dict, *, title: str = "synth evaluation report") -> str:
    """The self-contained HTML report for `runs`; `doc` is their `results_document`."""
    from synth import __version__
    from synth.evaluation import plots

    body = [f"<h1>{html.escape(title)}</h1>"]
    body.append(
        f'<p class="note">synth {html.escape(__version__)}. Numbers are also in <code>results.json</code> and '
        "<code>results.csv</code> beside this page. PSNR YUV is (6 Y + Cb + Cr) / 8; SSIM on luma "
        "(Wang et al. 2004, 11x11 Gaussian window, sigma 1.5); MAE on luma; ms/picture excludes vector "
        "estimation, which is shared by all vector makers, and includes each picture's share of its maker's preparation for the reference pair (e.g. optical flows). A picture is won by the method with "
        "the highest PSNR YUV on it.</p>"
    )
    if doc.get("overview") and doc["overview"]["rows"]:
        body.append('<section id="overview"><h2>Overview: mean PSNR YUV over all runs</h2>')
        body.append(
            '<p class="note">Each column pools the pictures of every run that has it: GOP N = every B picture '
            "of a dyadic GOP of N from its hierarchy references, gap N = every picture between references "
            "N apart. Wins and ms/picture over all those pictures.</p>"
        )
        body.append(_overview_table(doc["overview"]))
        body.append("</section>")
    for i, run in enumerate(runs):
        rdoc = doc["runs"][i]
        group_title = "gap" if run.group_key == "gap" else "layer"
        body.append(f'<section id="run-{i}"><h2>{html.escape(_run_title(run))}</h2>')
        s = run.settings
        body.append(
            f'<p class="note">pictures used: {s.get("pictures_used")}; methods: {html.escape(", ".join(run.methods))}; '
            f"vector QPs: {html.escape(str(s.get('vector_qps') or 'default'))}.</p>"
        )
        body.append(_summary_table(i, rdoc["summary"], group_title))
        if run.records:
            body.append(
                _img(
                    plots.psnr_per_picture(run.records, run.methods, group_key=run.group_key, group_label=group_title),
                    "PSNR per picture",
                )
            )
        groups = {r["group"] for r in rdoc["summary"] if r["group"] != "all"}
        if len(groups) > 1:
            label = "reference gap (pictures)" if run.group_key == "gap" else "temporal layer"
            body.append(
                _img(
                    plots.mean_psnr_by_group(rdoc["summary"], run.methods, xlabel=label), f"mean PSNR per {group_title}"
                )
            )
        if rdoc["vector_qp_table"]:
            qps = list(s["vector_qps"])
            body.append("<h3>Vector QP: how the rate constraint on coded vectors degrades each vector maker</h3>")
            body.append(_qp_table(i, rdoc["vector_qp_table"], qps))
            body.append(_img(plots.vector_qp_degradation(rdoc["vector_qp_table"], qps), "PSNR against vector QP"))
        body.append(_highlight_section(run))
        body.append("</section>")
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style></head><body>"
        + "\n".join(body)
        + "</body></html>\n"
    )


def write_report(
    runs: Sequence[RunResult], directory: str | os.PathLike, *, title: str = "synth evaluation report"
) -> dict[str, Path]:
    """Write results.json, results.csv and report.html into `directory` (created if needed).

    Each file is written atomically. Returns the paths by name ('json', 'csv', 'html').
    """
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    doc = results_document(runs)
    paths = {"json": out / "results.json", "csv": out / "results.csv", "html": out / "report.html"}
    atomic_write_text(paths["json"], dumps_strict(doc, indent=1) + "\n")
    atomic_write_text(paths["csv"], results_csv(runs))
    atomic_write_text(paths["html"], report_html(runs, doc, title=title))
    return paths
