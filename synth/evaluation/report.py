"""Reports of compare and GOP runs: ``results.json``, ``results.csv``, ``report.html`` and the
image files the page links (``img/``).

Every report has a baseline (``--baseline``, default `synth.evaluation.differences.DEFAULT_BASELINE`)
and shows, per gap, layer and clip, each method's mean PSNR-YUV difference to it with a 95 %
paired-t confidence interval over the pictures (`synth.evaluation.differences`), the pictures
on which it beats the baseline, and for every method its worst and its median picture by that
difference (true picture, the method's, the baseline's, a zoomed crop of where they differ most,
and their error maps).

results.json
    ``{"format": "synth-results", "schema_version": 2, "synth_version": ..., "baseline": ...,
    "runs": [...]}``; each run holds ``id``, ``kind`` ('compare' or 'gop'), ``clip``, ``settings``,
    ``methods``, ``group_key`` ('gap' or 'layer'), ``baseline`` (the method label compared with),
    ``summary`` (per method and group means; see `synth.evaluation.workbench.summarise`),
    ``differences`` (`synth.evaluation.differences.difference_rows`), ``inspection`` (the pictures
    shown: method, label, target, group, difference, the two PSNR-YUV values and the crop window),
    ``vector_qp_table`` (when several vector QPs ran), ``pairs`` and ``pictures`` (one record per
    picture and method). With several runs, ``overview`` pools them
    (`synth.evaluation.workbench.overview`) and adds ``differences`` (per column) and
    ``clip_differences`` (per clip). Infinite PSNR (identical pictures) is written as null.
results.csv
    The ``pictures`` records of all runs, one line each, columns `CSV_COLUMNS`.
report.html
    A table of contents, the tables (number cells carry ``data-src``, the JSON path of the value
    in results.json, e.g. ``runs.0.differences.3.mean_difference``), figures and pictures as files in ``img/`` loaded lazily; per-run detail collapsible.
    No script, style sheet or font is fetched: the folder opens without a network.
"""

from __future__ import annotations

import csv
import html
import io as _stdio
import os
import re
import shutil
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from synth.evaluation.differences import (
    CONFIDENCE,
    paired_difference,
    paired_values,
    resolve_baseline,
)
from synth.evaluation.differences import difference_rows as _difference_rows
from synth.evaluation.page_style import Contents, ImageFolder, details, html_page, number_cell
from synth.evaluation.workbench import METRIC_KEYS, RunResult, overview, run_document
from synth.io import atomic_write_text
from synth.io.jsonout import dumps_strict, strict_json

__all__ = ["CSV_COLUMNS", "SCHEMA_VERSION", "results_document", "results_csv", "report_html", "write_report"]

#: Version of results.json (2: baseline, differences, inspection, overview differences).
SCHEMA_VERSION = 2

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
#: Side of the zoomed crop, luma samples (smaller pictures: a third of their smaller side).
CROP = 64
#: WebP quality of the pictures and of the error maps (the demo page stays under 3 MB).
PICTURE_QUALITY = 60
MAP_QUALITY = 45
CROP_QUALITY = 90
OVERLAY_QUALITY = 40


# --------------------------------------------------------------------------------------------
# results.json and results.csv
# --------------------------------------------------------------------------------------------


def _run_baseline(run: RunResult, baseline: str | None) -> str:
    return resolve_baseline(run.methods, baseline if baseline is not None else run.settings.get("baseline"))


def _crop_window(h, baseline: str) -> list[int]:
    """[y, x, size] of the crop where the method's and the baseline's absolute errors differ most."""
    from synth.evaluation.plots import largest_difference_window

    truth = h.target.y.astype(np.float32)
    mine = np.abs(h.predictions[h.key_method].picture.y.astype(np.float32) - truth)
    base = np.abs(h.predictions[baseline].picture.y.astype(np.float32) - truth)
    size = int(min(CROP, max(8, min(truth.shape) // 3)))
    y, x = largest_difference_window(mine - base, size)
    return [y, x, size]


def _inspection(run: RunResult, baseline: str) -> list[dict]:
    """The highlighted pictures of a run as JSON-ready entries (their PSNR from the records)."""
    psnr = {}
    for r in run.records:
        psnr[(r["method"], r.get(run.group_key), r.get("gop"), r["target"])] = r["psnr_yuv"]
    out = []
    for h in run.highlights:
        if h.baseline != baseline or baseline not in h.predictions or h.key_method not in h.predictions:
            continue
        tags = dict(h.job.tags)
        group, gop = tags.get(run.group_key), tags.get("gop")
        out.append(
            {
                "method": h.key_method,
                "label": h.label,
                "target": h.job.target,
                "past": h.job.past,
                "future": h.job.future,
                "t": h.job.t,
                "group": group,
                "difference": float(h.key_value),
                "psnr_yuv": psnr.get((h.key_method, group, gop, h.job.target)),
                "baseline_psnr_yuv": psnr.get((baseline, group, gop, h.job.target)),
                "window": _crop_window(h, baseline),
            }
        )
    return out


def _pooled(runs: Sequence[RunResult], baselines: Sequence[str], select) -> dict[str, dict]:
    """Paired differences pooled over runs: `select(run)` gives the records of a run to pool (or
    None); pictures are paired within their run."""
    methods: list[str] = []
    for r in runs:
        methods += [m for m in r.methods if m not in methods]
    out = {}
    for m in methods:
        vals, base = [], []
        for run, b in zip(runs, baselines):
            recs = select(run)
            if recs is None or m == b or m not in run.methods:
                continue
            v, bv, _ = paired_values(recs, m, b, group_key=run.group_key)
            vals += v
            base += bv
        if vals:
            out[m] = paired_difference(vals, base)
    return out


def _overview_differences(runs: Sequence[RunResult], baselines: Sequence[str]) -> tuple[list[dict], list[dict]]:
    """Per overview column (GOP N, gap N) and per clip: every method's pooled paired difference."""
    keep = [(r, b) for r, b in zip(runs, baselines) if len(r.settings.get("vector_qps") or []) < 2]
    runs_k = [r for r, _ in keep]
    base_k = [b for _, b in keep]
    columns: list[tuple[str, object]] = []
    for r in runs_k:
        if r.kind == "gop":
            name = f"GOP {r.settings['gop_size']}"
            if all(c[0] != name for c in columns):
                columns.append((name, ("gop", r.settings["gop_size"])))
    for r in runs_k:
        if r.kind == "compare":
            for g in r.settings["gaps"]:
                name = f"gap {g}"
                if all(c[0] != name for c in columns):
                    columns.append((name, ("gap", g)))
    rows = []
    for name, (kind, value) in columns:

        def select(run, kind=kind, value=value):
            if kind == "gop":
                return run.records if run.kind == "gop" and run.settings["gop_size"] == value else None
            return [x for x in run.records if x.get("gap") == value] if run.kind == "compare" else None

        for m, d in _pooled(runs_k, base_k, select).items():
            rows.append({"column": name, "method": m, **d})
    clip_rows = []
    clips = list(dict.fromkeys(r.clip for r in runs_k))
    for clip in clips:
        for m, d in _pooled(runs_k, base_k, lambda run, clip=clip: run.records if run.clip == clip else None).items():
            clip_rows.append({"clip": clip, "method": m, **d})
    return rows, clip_rows


def results_document(runs: Sequence[RunResult], *, baseline: str | None = None, inspect: bool = True) -> dict:
    """The content of results.json for a list of runs (strict JSON: `synth.io.jsonout.strict_json`).

    Parameters
    ----------
    runs : sequence of RunResult
    baseline : str, optional
        ``--baseline`` (default: each run's recorded baseline, else
        `synth.evaluation.differences.resolve_baseline`).
    inspect : bool
        Describe the highlighted pictures (``inspection``); False leaves the list empty.
    """
    from synth import __version__

    baselines = [_run_baseline(r, baseline) for r in runs]
    doc = {
        "format": "synth-results",
        "schema_version": SCHEMA_VERSION,
        "synth_version": __version__,
        "baseline": baselines[0] if baselines and len(set(baselines)) == 1 else None,
        "confidence": CONFIDENCE,
        "runs": [],
    }
    for i, (run, b) in enumerate(zip(runs, baselines)):
        rdoc = run_document(run, i)
        rdoc["baseline"] = b
        rdoc["differences"] = _difference_rows(run.records, run.methods, baseline=b, group_key=run.group_key)
        rdoc["inspection"] = _inspection(run, b) if inspect else []
        doc["runs"].append(rdoc)
    if len(runs) > 1:
        doc["overview"] = overview(runs)
        doc["overview"]["differences"], doc["overview"]["clip_differences"] = _overview_differences(runs, baselines)
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

_STATISTICS_NOTE = (
    "Differences are paired: for every picture the method's PSNR YUV minus the baseline's on the same "
    "picture; the table gives their mean and its 95 % confidence interval, mean &plusmn; "
    "t<sub>0.975, n&minus;1</sub> &middot; s / &radic;n (Student's t, n pictures, s the standard deviation of "
    "the differences; the paired t interval of Montgomery &amp; Runger, <i>Applied Statistics and "
    "Probability for Engineers</i>). An interval that excludes 0 is a difference larger than "
    "picture-to-picture noise. Wins / losses: pictures on which the method is above / below the baseline."
)


def _span(value, src: str, decimals: int = 2, signed: bool = False) -> str:
    """A number in running text, with its ``data-src`` like a table cell."""
    from synth.evaluation.page_style import format_number

    return f'<span data-src="{html.escape(src)}">{html.escape(format_number(value, decimals, signed=signed))}</span>'


def _difference_table(rows: list[dict], first: str, key: str, src: str, baseline_note: str) -> str:
    """Methods down, one block of columns per group (gap, layer, 'all', clip...): the mean
    difference (coloured when its interval excludes 0), the interval, wins of pictures."""
    groups = list(dict.fromkeys(r[key] for r in rows))
    methods = list(dict.fromkeys(r["method"] for r in rows))
    at = {(r[key], r["method"]): i for i, r in enumerate(rows)}
    head1 = '<tr><th class="name" rowspan="2">method</th>' + "".join(
        f'<th colspan="3" style="text-align:center">{html.escape(first)} {html.escape(str(g))}</th>'
        if first and g != "all" else f'<th colspan="3" style="text-align:center">{html.escape(str(g))}</th>'
        for g in groups
    ) + "</tr>"  # fmt: skip
    head2 = "<tr>" + "<th>&Delta; dB</th><th>95 % CI</th><th>wins</th>" * len(groups) + "</tr>"
    body = []
    for m in methods:
        cells = []
        for g in groups:
            i = at.get((g, m))
            if i is None:
                cells.append("<td></td><td></td><td></td>")
                continue
            r, path = rows[i], f"{src}.{i}"
            cls = ""
            if r.get("ci_low") is not None and r["ci_low"] > 0:
                cls = ' class="up"'
            elif r.get("ci_high") is not None and r["ci_high"] < 0:
                cls = ' class="down"'
            cells.append(
                f"<td{cls}>{_span(r['mean_difference'], f'{path}.mean_difference', signed=True)}</td>"
                f"<td>{_span(r['ci_low'], f'{path}.ci_low', signed=True)} .. "
                f"{_span(r['ci_high'], f'{path}.ci_high', signed=True)}</td>"
                f"<td>{_span(r['wins'], f'{path}.wins')}/{_span(r['pictures'], f'{path}.pictures')}</td>"
            )
        body.append(f'<tr><td class="name">{html.escape(m)}</td>{"".join(cells)}</tr>')
    caption = f"<caption class='note' style='caption-side:bottom;text-align:left'>{baseline_note}</caption>"
    return f'<table class="diff">{caption}{head1}{head2}{"".join(body)}</table>'


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
        best = r.get("psnr_yuv") is not None and r.get("psnr_yuv") == best_by_group.get(r["group"])
        cells = "".join(
            number_cell(r.get(c), src=f"runs.{run_id}.summary.{i}.{c}", decimals=_DECIMALS.get(c, 3)) for c in cols
        )
        rows.append(
            f'<tr{" class=best" if best else ""}><td class="name">{html.escape(str(r["group"]))}</td>'
            f'<td class="name">{html.escape(r["method"])}</td>{cells}</tr>'
        )
    return f"<table>{head}{''.join(rows)}</table>"


def _qp_table(run_id: int, table: list[dict], qps: list[int]) -> str:
    head = '<tr><th class="name">maker</th>' + "".join(f"<th>vector QP {q}</th>" for q in qps) + "</tr>"
    rows = []
    for i, r in enumerate(table):
        cells = "".join(number_cell(r[f"qp{q}"], src=f"runs.{run_id}.vector_qp_table.{i}.qp{q}") for q in qps)
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
        cells = [
            number_cell(
                r[c], src=f"overview.rows.{i}.{c}", cls="best" if r[c] is not None and r[c] == best[c] else None
            )
            for c in cols
        ]
        cells.append(number_cell(r["wins"], src=f"overview.rows.{i}.wins"))
        cells.append(number_cell(r["ms_per_picture"], src=f"overview.rows.{i}.ms_per_picture", decimals=1))
        rows.append(f'<tr><td class="name">{html.escape(r["method"])}</td>{"".join(cells)}</tr>')
    return f"<table>{head}{''.join(rows)}</table>"


def _run_title(run: RunResult) -> str:
    s = run.settings
    if run.kind == "compare":
        gaps = ", ".join(str(g) for g in s.get("gaps", []))
        qps = s.get("vector_qps") or []
        vectors = s.get("vectors")
        source = vectors.get("vectors", "estimate") if isinstance(vectors, dict) else "estimate"
        named = "" if source == "estimate" else f" ({source} vectors)"
        sweep = f", vector QPs {', '.join(str(q) for q in qps)}{named}" if len(qps) > 1 else named
        return f"{run.clip}: comparison at reference gap {gaps}{sweep}"
    refs = (
        f"references decoded at QP {s['decoded_refs_qp']}"
        if s.get("decoded_refs_qp") is not None
        else "source references"
    )
    return f"{run.clip}: GOP of {s.get('gop_size')}, {s.get('structure')} structure, {refs}"


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-")


def _scale_bar(cmap: str, low: str, mid: str, high: str, label: str) -> str:
    """A colour bar drawn by the page itself (the CSS gradient class of the colour map, see
    `synth.evaluation.page_style.PAGE_CSS`) with its scale."""
    return (
        f'<div class="bar cm-{cmap}"></div>'
        f'<div class="scale"><span>{low}</span><span>{mid}</span><span>{high}</span></div>'
        f'<div class="note">{html.escape(label)}</div>'
    )


class _Pictures:
    """Writes the inspection pictures of one run (shared pictures once) and builds their HTML."""

    def __init__(self, images: ImageFolder, run_id: int, run: RunResult, baseline: str):
        self.images, self.run_id, self.run, self.baseline = images, run_id, run, baseline
        self.shared: dict[str, str] = {}
        errors = []
        for h in run.highlights:
            if baseline in h.predictions and h.key_method in h.predictions:
                truth = h.target.y.astype(np.float32)
                for m in (h.key_method, baseline):
                    errors.append(np.abs(h.predictions[m].picture.y.astype(np.float32) - truth).ravel())
        peak = run.highlights[0].target.max_value if run.highlights else 255
        self.top = max(8.0 * peak / 255.0, float(np.percentile(np.concatenate(errors), 99.5))) if errors else 1.0

    def _once(self, key: str, make) -> str:
        if key not in self.shared:
            self.shared[key] = make()
        return self.shared[key]

    def _framed(self, tag: str, window, shape, caption: str) -> str:
        y, x, size = window
        h, w = shape
        box = (
            f'<span style="position:absolute;left:{100 * x / w:.3f}%;top:{100 * y / h:.3f}%;'
            f"width:{100 * size / w:.3f}%;height:{100 * size / h:.3f}%;outline:2px solid #D55E00;"
            'box-sizing:border-box"></span>'
        )
        return (
            f'<figure><div style="position:relative;line-height:0">{tag}{box}</div>'
            f"<figcaption>{caption}</figcaption></figure>"
        )

    def section(self, h, entry: dict, index: int) -> str:
        from synth.evaluation.plots import difference_colours, error_colours, grey_picture

        run_id, base = self.run_id, self.baseline
        j = h.job
        peak = h.target.max_value
        stem = f"run{run_id}-p{j.target}-g{_safe(str(entry['group']))}"
        mstem = f"{stem}-{_safe(h.key_method)}-{h.label}"
        truth = h.target.y
        mine = h.predictions[h.key_method].picture.y
        theirs = h.predictions[base].picture.y
        err_m = np.abs(mine.astype(np.float32) - truth.astype(np.float32))
        err_b = np.abs(theirs.astype(np.float32) - truth.astype(np.float32))
        y, x, size = entry["window"]
        shape = truth.shape
        src = f"runs.{run_id}.inspection.{index}"

        t_tag = self._once(f"{stem}-true", lambda: self.images.picture(grey_picture(truth, peak), f"{stem}-true.webp",
                                                                      f"true picture {j.target}", quality=PICTURE_QUALITY))  # fmt: skip
        b_tag = self._once(f"{stem}-base", lambda: self.images.picture(grey_picture(theirs, peak), f"{stem}-base.webp",
                                                                      f"{base}, picture {j.target}", quality=PICTURE_QUALITY))  # fmt: skip
        m_tag = self.images.picture(
            grey_picture(mine, peak), f"{mstem}.webp", f"{h.key_method}, picture {j.target}", quality=PICTURE_QUALITY
        )
        row1 = (
            self._framed(t_tag, entry["window"], shape, "true picture (Y)")
            + self._framed(m_tag, entry["window"], shape, f"{html.escape(h.key_method)}: "
                           + _span(entry["psnr_yuv"], f"{src}.psnr_yuv") + " dB")
            + self._framed(b_tag, entry["window"], shape, f"{html.escape(base)} (baseline): "
                           + _span(entry["baseline_psnr_yuv"], f"{src}.baseline_psnr_yuv") + " dB")
        )  # fmt: skip
        crops = []
        for name, plane in (("true", truth), (h.key_method, mine), (base, theirs)):
            tag = self.images.picture(
                grey_picture(plane[y : y + size, x : x + size], peak),
                f"{mstem}-crop-{_safe(name)}.webp",
                f"{name}, zoomed crop",
                quality=CROP_QUALITY,
            )
            crops.append(
                f'<figure class="zoom">{tag}<figcaption>{html.escape(name)}, {size}&times;{size} samples zoomed'
                "</figcaption></figure>"
            )
        e_m = self.images.picture(
            error_colours(err_m, self.top), f"{mstem}-error.webp", f"{h.key_method} error map", quality=MAP_QUALITY
        )
        e_b = self._once(f"{stem}-base-error", lambda: self.images.picture(error_colours(err_b, self.top),
                                                                           f"{stem}-base-error.webp",
                                                                           f"{base} error map", quality=MAP_QUALITY))  # fmt: skip
        e_d = self.images.picture(
            difference_colours(err_b - err_m, self.top),
            f"{mstem}-error-difference.webp",
            "error difference map",
            quality=MAP_QUALITY,
        )
        top = f"{self.top:.0f}"
        err_bar = _scale_bar(
            "viridis", "0", f"{self.top / 2:.0f}", f"&ge; {top}", "absolute luma error (sample values)"
        )
        diff_bar = _scale_bar(
            "RdBu", f"&le; &minus;{top}", "0", f"&ge; +{top}",
            f"|error of {base}| minus |error of {h.key_method}|: blue where {h.key_method} is better",
        )  # fmt: skip
        row3 = (
            f"<figure>{e_m}<figcaption>|error| of {html.escape(h.key_method)}</figcaption>{err_bar}</figure>"
            f"<figure>{e_b}<figcaption>|error| of {html.escape(base)}</figcaption>{err_bar}</figure>"
            f"<figure>{e_d}<figcaption>error difference</figcaption>{diff_bar}</figure>"
        )
        head = (
            f"<h4>{h.label.capitalize()} picture of {html.escape(h.key_method)}: picture "
            f"{_span(j.target, f'{src}.target')} ({html.escape(self.run.group_key)} "
            f"{_span(entry['group'], f'{src}.group')}, references {_span(j.past, f'{src}.past')} and "
            f"{_span(j.future, f'{src}.future')}, t = {_span(j.t, f'{src}.t', 3)}), difference to "
            f"{html.escape(base)} {_span(entry['difference'], f'{src}.difference', signed=True)} dB</h4>"
            f'<p class="note">Orange box: the {_span(size, f"{src}.window.2")}&times;{size} window where the two '
            f"errors differ most (top-left at x = {_span(x, f'{src}.window.1')}, y = "
            f"{_span(y, f'{src}.window.0')}), zoomed below.</p>"
        )
        return (
            head
            + f'<div class="grid c3">{row1}</div><div class="grid c3">{"".join(crops)}</div>'
            + f'<div class="grid c3">{row3}</div>'
        )


def _inspection_section(run: RunResult, rdoc: dict, run_id: int, images: ImageFolder, contents: Contents) -> str:
    entries = rdoc["inspection"]
    if not entries:
        return ""
    base = rdoc["baseline"]
    pics = _Pictures(images, run_id, run, base)
    by = {(e["method"], e["label"]): i for i, e in enumerate(entries)}
    parts = [
        contents.heading(f"Pictures to inspect ({run.clip}, run {run_id + 1})", 3, anchor=f"run-{run_id}-pictures")
    ]
    parts.append(
        f'<p class="note">For every method its worst and its median picture by the PSNR YUV difference to '
        f"{html.escape(base)} (not by layer). Error maps share one scale per run.</p>"
    )
    for m in run.methods:
        keys = [(m, label) for label in ("worst", "median") if (m, label) in by]
        if not keys:
            continue
        body = []
        summary = []
        for key in keys:
            i = by[key]
            h = next(
                h
                for h in run.highlights
                if h.key_method == m and h.label == key[1] and h.job.target == entries[i]["target"]
            )
            body.append(pics.section(h, entries[i], i))
            summary.append(
                f"{key[1]} picture {entries[i]['target']} "
                f"({_span(entries[i]['difference'], f'runs.{run_id}.inspection.{i}.difference', signed=True)} dB)"
            )
        parts.append(details(f"{html.escape(m)}: " + ", ".join(summary), "".join(body)))
    return "".join(parts)


def _overlay(run: RunResult, run_id: int, images: ImageFolder) -> str:
    """The vectors of the first highlighted pair, in the overlay style every command shares
    (`synth.motion.overlay`)."""
    from synth.motion.overlay import overlay_figure

    h = next((h for h in run.highlights if h.fields), None)
    if h is None:
        return ""
    f0 = h.fields[0]
    on = h.future if f0.coded_time == float(h.job.future) else h.past
    title = f"vectors coded on picture {f0.coded_time:g} pointing to picture {f0.reference_time:g}"
    tag = images.figure(
        overlay_figure(on, f0, title=title), f"run{run_id}-vectors.webp", "vector overlay", quality=OVERLAY_QUALITY
    )
    return details(html.escape(title.capitalize()), f"<figure>{tag}</figure>")


def _run_section(run: RunResult, rdoc: dict, i: int, images: ImageFolder, contents: Contents) -> str:
    from synth.evaluation import plots

    base = rdoc["baseline"]
    group_title = "gap" if run.group_key == "gap" else "layer"
    s = run.settings
    out = [f'<section id="run-{i}">', contents.heading(_run_title(run), 2, anchor=f"run-{i}")]
    out.append(
        f'<p class="note">pictures used: {_span(s.get("pictures_used"), f"runs.{i}.settings.pictures_used")}; methods: {html.escape(", ".join(run.methods))}; '
        f"baseline: <b>{html.escape(base)}</b>; vector QPs: {html.escape(str(s.get('vector_qps') or 'default'))}.</p>"
    )
    diffs = rdoc["differences"]
    if diffs:
        out.append(
            _difference_table(
                diffs, group_title, "group", f"runs.{i}.differences",
                f"Paired difference to {html.escape(base)} per {group_title}: mean, 95 % interval; blue / orange: "
                "interval above / below 0; wins: pictures above the baseline / pictures.",
            )
        )  # fmt: skip
        groups = list(dict.fromkeys(r["group"] for r in diffs))
        out.append(
            images.figure(
                plots.difference_plot(
                    diffs, run.methods, baseline=base, groups=groups,
                    group_label="reference gap (pictures)" if run.group_key == "gap" else "temporal layer",
                ),
                f"run{i}-differences.png", f"difference to {base} per {group_title}",
            )
        )  # fmt: skip
    levels = [_summary_table(i, rdoc["summary"], group_title)]
    grouped = {r["group"] for r in rdoc["summary"] if r["group"] != "all"}
    if len(grouped) > 1:
        label = "reference gap (pictures)" if run.group_key == "gap" else "temporal layer"
        levels.append(
            images.figure(
                plots.mean_psnr_by_group(rdoc["summary"], run.methods, xlabel=label),
                f"run{i}-levels.png", f"mean PSNR per {group_title}", dpi=80,
            )
        )  # fmt: skip
    out.append(details("Levels: mean PSNR, SSIM, MAE and time per " + group_title, "".join(levels)))
    if run.records and diffs and not rdoc["vector_qp_table"]:  # a QP sweep repeats the comparison's pictures
        out.append(
            details(
                f"Difference to {html.escape(base)} of every picture",
                images.figure(
                    plots.difference_per_picture(
                        run.records, run.methods, baseline=base, group_key=run.group_key, group_label=group_title
                    ),
                    f"run{i}-per-picture.png", "difference per picture", dpi=90,
                ),
            )
        )  # fmt: skip
    if rdoc["vector_qp_table"]:
        qps = list(s["vector_qps"])
        source = (
            (s.get("vectors") or {}).get("vectors", "estimate") if isinstance(s.get("vectors"), dict) else "estimate"
        )
        out.append(
            f"<h3>Vector QP ({html.escape(str(source))} vectors): how the rate constraint on coded vectors "
            "degrades each vector maker</h3>"
        )
        out.append(_qp_table(i, rdoc["vector_qp_table"], qps))
        out.append(
            images.figure(
                plots.vector_qp_degradation(rdoc["vector_qp_table"], qps), f"run{i}-vector-qp.png",
                "PSNR against vector QP",
            )
        )  # fmt: skip
    out.append(_inspection_section(run, rdoc, i, images, contents))
    out.append(_overlay(run, i, images))
    out.append("</section>")
    return "".join(out)


def _overview_section(runs, doc: dict, images: ImageFolder, contents: Contents) -> str:
    from synth.evaluation import plots

    ov = doc["overview"]
    base = doc.get("baseline") or "the baseline"
    methods = [r["method"] for r in ov["rows"]]
    out = ['<section id="overview">', contents.heading("Overview over all runs", 2, anchor="overview")]
    if ov.get("differences"):
        out.append(contents.heading(f"Difference to {base} per GOP size and gap", 3))
        out.append(
            _difference_table(
                ov["differences"], "", "column", "overview.differences",
                "GOP N = every B picture of a dyadic GOP of N from its hierarchy references; gap N = every "
                "picture between references N apart; pictures of every clip pooled (paired within a clip).",
            )
        )  # fmt: skip
        cols = list(dict.fromkeys(r["column"] for r in ov["differences"]))
        rows = [dict(r, group=r["column"]) for r in ov["differences"]]
        out.append(
            images.figure(
                plots.difference_plot(rows, methods, baseline=base, groups=cols, group_label="pictures"),
                "overview-differences.png", f"difference to {base} per GOP size and gap",
            )
        )  # fmt: skip
    if ov.get("clip_differences"):
        out.append(contents.heading(f"Difference to {base} per clip", 3))
        out.append(
            _difference_table(
                ov["clip_differences"], "", "clip", "overview.clip_differences",
                "Every picture of the clip's runs (GOP and comparisons) pooled.",
            )
        )  # fmt: skip
        clips = list(dict.fromkeys(r["clip"] for r in ov["clip_differences"]))
        rows = [dict(r, group=r["clip"]) for r in ov["clip_differences"]]
        out.append(
            images.figure(
                plots.difference_plot(rows, methods, baseline=base, groups=clips, group_label="clip"),
                "overview-clips.png", f"difference to {base} per clip",
            )
        )  # fmt: skip
    if ov["rows"]:
        out.append(contents.heading("Levels: mean PSNR YUV over all runs", 3))
        out.append(
            '<p class="note">Each column pools the pictures of every run that has it. Wins: pictures on which '
            "the method is the best of all methods.</p>"
        )
        out.append(_overview_table(ov))
    out.append("</section>")
    return "".join(out)


def report_html(
    runs: Sequence[RunResult], doc: dict, *, title: str = "synth evaluation report", images: ImageFolder
) -> str:
    """The HTML page of `runs`; `doc` is their `results_document`; figures and pictures are
    written through `images` (the folder beside the page)."""
    from synth import __version__

    contents = Contents()
    body = []
    if doc.get("overview") and doc["overview"]["rows"]:
        body.append(_overview_section(runs, doc, images, contents))
    for i, run in enumerate(runs):
        body.append(_run_section(run, doc["runs"][i], i, images, contents))
    base = doc.get("baseline")
    intro = (
        f'<p class="note">synth {html.escape(__version__)}. Baseline: <b>{html.escape(base or "per run")}</b> '
        "(<code>--baseline</code>). Numbers are also in <code>results.json</code> and <code>results.csv</code> "
        "beside this page. PSNR YUV is (6 Y + Cb + Cr) / 8; SSIM on luma (Wang et al. 2004, 11x11 Gaussian "
        "window, sigma 1.5); MAE on luma; ms/picture excludes vector estimation and includes each picture's "
        f'share of its maker\'s preparation for the reference pair.</p><p class="note">{_STATISTICS_NOTE}</p>'
    )
    return html_page(title, "\n".join(body), contents=contents, intro=intro)


def write_report(
    runs: Sequence[RunResult],
    directory: str | os.PathLike,
    *,
    title: str = "synth evaluation report",
    baseline: str | None = None,
) -> dict[str, Path]:
    """Write results.json, results.csv, report.html and its ``img/`` folder into `directory`
    (created if needed).

    Each file is written atomically; images of an earlier report in the same folder are replaced.
    Returns the paths by name ('json', 'csv', 'html', 'images').

    Parameters
    ----------
    runs : sequence of RunResult
    directory : path
    title : str
    baseline : str, optional
        ``--baseline`` (see `results_document`).
    """
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    doc = results_document(runs, baseline=baseline)
    paths = {
        "json": out / "results.json",
        "csv": out / "results.csv",
        "html": out / "report.html",
        "images": out / "img",
    }
    staging = out / ".img.tmp"
    if staging.exists():
        shutil.rmtree(staging)
    images = ImageFolder(out, ".img.tmp")
    page = report_html(runs, doc, title=title, images=images).replace('src=".img.tmp/', 'src="img/')
    atomic_write_text(paths["json"], dumps_strict(doc, indent=1) + "\n")
    atomic_write_text(paths["csv"], results_csv(runs))
    if paths["images"].exists():
        shutil.rmtree(paths["images"])
    if staging.exists():
        staging.rename(paths["images"])
    atomic_write_text(paths["html"], page)
    return paths
