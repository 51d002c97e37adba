"""The HTML page of `synth predict --report DIR`: one-reference prediction by block MC, OBMC and
the per-pixel LMMSE estimator, compared picture by picture.

:func:`write_predict_page` writes ``report.html`` and the image folder ``img/`` beside it, in the
shared page style (`synth.evaluation.page_style`):

- the summary table: per method PSNR-Y, PSNR-YUV ((6 Y + Cb + Cr) / 8), PSNR-Y over the pixels of
  inter blocks, and the mean paired difference to block MC with its 95 % Student-t interval
  (`synth.evaluation.differences.paired_difference`); every number carries ``data-src``, its path
  in ``results.json``;
- ``psnr_y.png``: PSNR-Y of every predicted picture, one line per method (Okabe-Ito colours);
- ``difference_y.png``: per picture, each method's PSNR-Y minus block MC's;
- for the picture where the estimator (``lmmse``) gains most over block MC and the one where it
  gains least (loses most), the true picture and the absolute luma error of block MC and of the
  estimator side by side on one colour scale (`synth.evaluation.map_images`, WebP).

Nothing is written until the whole page is built: the images go to a staging folder that replaces
``img/`` once complete, and ``report.html`` is written atomically last, so a failure never leaves
a half-written page.
"""

from __future__ import annotations

import html
import math
import os
import shutil
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from synth.evaluation.page_style import (
    Contents,
    ImageFolder,
    html_page,
    legend_outside,
    method_styles,
    number_cell,
    style_axes,
)

__all__ = ["ESTIMATOR", "MAP_WIDTH", "extreme_pictures", "predict_page_html", "write_predict_page"]

#: The method whose gains and losses over the baseline pick the pictures shown.
ESTIMATOR = "lmmse"
#: Error maps wider than this are shown as means over integer-sized blocks (keeps the page small).
MAP_WIDTH = 640
_MAP_QUALITY = 60
_PICTURE_QUALITY = 65


def _finite(v) -> float:
    return float(v) if v is not None and math.isfinite(float(v)) else float("nan")


def extreme_pictures(records: Sequence[dict], *, method: str = ESTIMATOR, baseline: str = "block-mc") -> list[dict]:
    """The pictures where `method` gains most and least over `baseline` in PSNR-Y.

    Parameters
    ----------
    records : sequence of dict
        `synth.evaluation.prediction.compare_predictions` records (``picture``, ``method``,
        ``psnr_y``).

    Returns
    -------
    list of dict
        ``{"label", "picture", "difference"}``: ``label`` ``"largest gain"`` then ``"largest loss"``
        (``"smallest gain"`` when the method never loses); one entry when both are the same
        picture, none when no picture has finite PSNRs for both. Ties go to the earlier picture.
    """
    base = {r["picture"]: _finite(r["psnr_y"]) for r in records if r["method"] == baseline}
    diffs = [
        (r["picture"], _finite(r["psnr_y"]) - base[r["picture"]])
        for r in records
        if r["method"] == method and r["picture"] in base
    ]
    diffs = [(p, d) for p, d in diffs if math.isfinite(d)]
    if not diffs:
        return []
    best = max(diffs, key=lambda pd: (pd[1], -pd[0]))
    worst = min(diffs, key=lambda pd: (pd[1], pd[0]))
    out = [{"label": "largest gain", "picture": best[0], "difference": best[1]}]
    if worst[0] != best[0]:
        out.append({"label": "largest loss" if worst[1] < 0 else "smallest gain", "picture": worst[0],
                    "difference": worst[1]})  # fmt: skip
    return out


def _reduce(plane: np.ndarray, factor: int) -> np.ndarray:
    """Means over ``factor`` x ``factor`` blocks (edge blocks padded by repetition)."""
    a = np.asarray(plane, np.float64)
    if factor == 1:
        return a
    h, w = a.shape
    b = np.pad(a, ((0, -h % factor), (0, -w % factor)), mode="edge")
    return b.reshape(b.shape[0] // factor, factor, b.shape[1] // factor, factor).mean(axis=(1, 3))


def _summary_table(summary: dict) -> str:
    base = summary["baseline"]
    head = (
        '<table><thead><tr><th class="name">method</th><th>pictures</th><th>PSNR-Y dB</th><th>PSNR-YUV dB</th>'
        f"<th>PSNR-Y inter dB</th><th>vs {html.escape(base)} Y dB</th><th>95 % CI low</th><th>95 % CI high</th>"
        f"<th>vs {html.escape(base)} YUV dB</th><th>wins / losses</th></tr></thead><tbody>"
    )
    rows = []
    for i, row in enumerate(summary["summary"]):
        src = f"summary.{i}"
        cells = [
            f'<td class="name">{html.escape(row["method"])}</td>',
            number_cell(row["pictures"], src=f"{src}.pictures"),
        ]
        cells += [number_cell(row.get(k), src=f"{src}.{k}", decimals=3) for k in ("psnr_y", "psnr_yuv", "psnr_y_inter")]
        d = row.get("difference_y")
        if d is None:
            cells.append('<td colspan="5" class="name">baseline</td>')
        else:
            mean = d["mean_difference"]
            cls = None if mean is None or mean == 0 else ("up" if mean > 0 else "down")
            cells.append(number_cell(mean, src=f"{src}.difference_y.mean_difference", decimals=3, signed=True, cls=cls))
            cells.append(number_cell(d["ci_low"], src=f"{src}.difference_y.ci_low", decimals=3, signed=True))
            cells.append(number_cell(d["ci_high"], src=f"{src}.difference_y.ci_high", decimals=3, signed=True))
            dyuv = row["difference_yuv"]["mean_difference"]
            cells.append(number_cell(dyuv, src=f"{src}.difference_yuv.mean_difference", decimals=3, signed=True))
            cells.append(f"<td>{int(d['wins'])} / {int(d['losses'])}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return head + "".join(rows) + "</tbody></table>"


def _per_picture_plots(summary: dict, records: Sequence[dict], images: ImageFolder) -> tuple[str, str]:
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    methods = [row["method"] for row in summary["summary"]]
    base = summary["baseline"]
    styles = method_styles(methods)
    by = {m: {r["picture"]: _finite(r["psnr_y"]) for r in records if r["method"] == m} for m in methods}
    pictures = sorted(by[base])
    marker = "o" if len(pictures) <= 40 else None
    fig = Figure(figsize=(7.2, 3.4))
    ax = fig.add_subplot()
    for m in methods:
        ax.plot(pictures, [by[m].get(p, np.nan) for p in pictures], marker=marker, markersize=3, label=m, **styles[m])
    ax.set_xlabel("picture (display number)")
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_ylabel("PSNR-Y (dB)")
    style_axes(ax)
    legend_outside(ax)
    psnr_tag = images.figure(fig, "psnr_y.png", "PSNR-Y of every predicted picture, one line per method")
    fig = Figure(figsize=(7.2, 3.4))
    ax = fig.add_subplot()
    ax.axhline(0.0, color="#888888", linewidth=0.8)
    for m in methods:
        if m == base:
            continue
        diff = [by[m].get(p, np.nan) - by[base][p] for p in pictures]
        ax.plot(pictures, diff, marker=marker, markersize=3, label=f"{m} \u2212 {base}", **styles[m])
    ax.set_xlabel("picture (display number)")
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_ylabel(f"PSNR-Y difference to {base} (dB)")
    style_axes(ax)
    legend_outside(ax)
    diff_tag = images.figure(fig, "difference_y.png", f"PSNR-Y difference to {base} of every predicted picture")
    return psnr_tag, diff_tag


def _error_section(entry: dict, target, predictions: dict, base: str, images: ImageFolder) -> str:
    """The true picture and the |error| maps of `base` and the estimator for one picture."""
    from synth.evaluation.map_images import error_scale, map_figure
    from synth.evaluation.plots import grey_picture

    k = entry["picture"]
    truth = target.y.astype(np.float64)
    scale = 255.0 / target.max_value  # maps in 8-bit code values, as their unit says
    errors = {m: np.abs(predictions[m].y.astype(np.float64) - truth) * scale for m in (base, ESTIMATOR)}
    factor = max(1, math.ceil(target.y.shape[1] / MAP_WIDTH))
    shown = {m: _reduce(e, factor) for m, e in errors.items()}
    top = error_scale(*shown.values())
    stem = f"p{k}"
    grey = grey_picture(_reduce(target.y, factor).round().astype(target.y.dtype), target.max_value)
    cells = [
        f"<figure>{images.picture(grey, f'{stem}-true.webp', f'true picture {k}', quality=_PICTURE_QUALITY)}"
        f"<figcaption>true picture {k} (Y)</figcaption></figure>"
    ]
    for m in (base, ESTIMATOR):
        mae = float(errors[m].mean())
        fig = map_figure(shown[m], name="abs_error", title=f"|error| of {m}, picture {k}", vmax=top,
                         note=f"mean {mae:.2f} code values (8-bit)")  # fmt: skip
        tag = images.figure(fig, f"{stem}-error-{m}.webp", f"absolute luma error of {m}, picture {k}",
                            quality=_MAP_QUALITY)  # fmt: skip
        cells.append(f"<figure>{tag}<figcaption>|error| of {html.escape(m)}</figcaption></figure>")
    reduced = f" Maps and picture shown as means over {factor}&times;{factor} blocks." if factor > 1 else ""
    return (
        f'<div class="grid c3">{"".join(cells)}</div>'
        f'<p class="note">One colour scale for both maps (99.5th percentile of the two).{reduced}</p>'
    )


def predict_page_html(summary: dict, records: Sequence[dict], images: ImageFolder, *, inspected=()) -> str:
    """The page of a `synth predict` summary; figures and pictures go through `images`.

    Parameters
    ----------
    summary : dict
        `synth.commands.predict.run_predict`'s summary (``summary``, ``baseline``, ``clip``, ...).
    records : sequence of dict
        The per-picture records of `compare_predictions`.
    images : ImageFolder
    inspected : sequence of (dict, Picture, dict)
        For each `extreme_pictures` entry: the entry, the true picture and ``{method: Picture}``
        holding the baseline's and the estimator's predictions.
    """
    from synth import __version__
    from synth.motion.sources import describe_record

    base = summary["baseline"]
    contents = Contents()
    pics = summary["pictures"]
    body = [contents.heading("Summary"), _summary_table(summary)]
    body.append(
        '<p class="note">Mean over the predicted pictures. PSNR-YUV is (6 Y + Cb + Cr) / 8 (common practice); '
        "PSNR-Y inter is over the pixels of inter blocks only (block MC predicts intra ones with zero motion). "
        f"The difference to {html.escape(base)} is the mean of the paired per-picture differences with its 95 % "
        "Student-t interval; wins / losses count the pictures above / below it.</p>"
    )
    psnr_tag, diff_tag = _per_picture_plots(summary, records, images)
    body += [contents.heading("PSNR-Y per picture"), f"<figure>{psnr_tag}</figure>"]
    body += [contents.heading(f"Difference to {base} per picture"), f"<figure>{diff_tag}</figure>"]
    if inspected:
        body.append(contents.heading("Error maps"))
        for entry, target, predictions in inspected:
            title = f"Picture {entry['picture']}: {entry['label']} of {ESTIMATOR} over {base}"
            body.append(contents.heading(title, 3))
            body.append(
                f"<p>{html.escape(ESTIMATOR)} &minus; {html.escape(base)}: "
                f"{entry['difference']:+.3f} dB PSNR-Y on this picture.</p>"
            )
            body.append(_error_section(entry, target, predictions, base, images))
    n_refs = summary.get("references", 1)
    each = "each from the picture before it" if n_refs == 1 else f"each block from the best of the {n_refs} before"
    intro = (
        f'<p class="note">synth {html.escape(__version__)}. Clip <code>{html.escape(str(summary["clip"]))}</code>: '
        f"{len(pics)} inter pictures ({pics[0]}..{pics[-1]}), {each}; vectors "
        f"{html.escape(describe_record(summary['vectors']))}. Numbers are also in <code>results.json</code> and "
        "<code>results.csv</code> beside this page.</p>"
    )
    return html_page("synth predict: one-reference prediction", "\n".join(body), contents=contents, intro=intro)


def write_predict_page(
    directory: str | os.PathLike, summary: dict, records: Sequence[dict], *, inspected=(), beside=None
) -> dict[str, Path]:
    """Write ``report.html`` and its ``img/`` folder into `directory` (which must exist).

    The images are written to a staging folder first; once the page is built, the files of
    `beside` (``{name: text}``, e.g. the results files the page's numbers come from) are written,
    the staging folder replaces ``img/`` and the page is written, each atomically
    (`synth.io.atomic_write_text`): a failure while building leaves the folder as it was. Returns
    the paths by name (``html``, ``images``). Other arguments as `predict_page_html`.
    """
    from synth.io import atomic_write_text

    out = Path(directory)
    staging = out / ".img.tmp"
    if staging.exists():
        shutil.rmtree(staging)
    try:
        images = ImageFolder(out, ".img.tmp")
        page = predict_page_html(summary, records, images, inspected=inspected).replace('src=".img.tmp/', 'src="img/')
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    for name, text in (beside or {}).items():
        atomic_write_text(out / name, text)
    final = out / "img"
    if final.exists():
        shutil.rmtree(final)
    if staging.exists():
        staging.rename(final)
    atomic_write_text(out / "report.html", page)
    return {"html": out / "report.html", "images": final}
