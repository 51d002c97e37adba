"""The HTML page of `synth rd --report DIR`: RD curves, bits per temporal layer, reference maps.

:func:`write_rd_page` writes ``report.html`` and the PNG files it links (each its own compressed
file, loaded lazily):

- ``rd_<entry>.png``: PSNR-Y over bits (per target picture; per GOP for a hierarchy), one curve per
  configuration, the BD-rate / BD-PSNR against (a) in the legend;
- ``layers_<entry>.png``: mean bits per target picture of each temporal layer and configuration at
  the middle QP (every QP in the table beside it);
- ``map_<entry>.png``: for the chosen target (``--at``), which reference every block of the B
  picture predicts from, per extra-reference configuration
  (:func:`synth.codec.bpicture.reference_usage`).

Colours are the Okabe-Ito palette (M. Okabe and K. Ito, "Color Universal Design", 2002/2008),
distinguishable with the common forms of colour-vision deficiency; legends sit outside the data.
"""

from __future__ import annotations

import html
import io as _stdio
import os
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from synth.codec.bpicture import USAGE_CLASSES
from synth.codec.rdmeasure import ANCHOR, ClipRD
from synth.codec.rdreport import config_label, config_order
from synth.evaluation.page_style import OKABE_ITO, PAGE_CSS

__all__ = ["OKABE_ITO", "write_rd_page", "plot_rd_curves", "plot_layer_bits", "plot_reference_maps"]

#: Colour of each reference-use class on the maps.
USAGE_COLOURS = {0: "#000000", 1: "#E69F00", 2: "#0072B2", 3: "#F0E442", 4: "#D55E00", 5: "#56B4E9"}

_MARKERS = "osD^vP*X"


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _png(fig) -> bytes:
    plt = _plt()
    buf = _stdio.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight", pil_kwargs={"optimize": True})
    plt.close(fig)
    return buf.getvalue()


def _colour(i: int) -> str:
    return OKABE_ITO[i % len(OKABE_ITO)]


def _bd_text(bd: dict | None) -> str:
    if not bd:
        return ""
    if bd.get("bd_rate") is None:
        return ": BD n/a"
    return f": BD-rate {bd['bd_rate']:+.2f} %, BD-PSNR {bd['bd_psnr']:+.3f} dB"


def plot_rd_curves(curves: dict, bd: dict, *, synthetic: str | None, title: str, rate_label: str) -> bytes:
    """PNG of PSNR-Y over bits (log axis), one curve per configuration, BD figures in the legend."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    items = sorted(curves.items(), key=lambda kv: config_order(kv[0], synthetic))
    for i, (cfg, pts) in enumerate(items):
        label = config_label(cfg, synthetic) + ("" if cfg == ANCHOR else _bd_text(bd.get(cfg)))
        ax.plot(
            [p["bits"] for p in pts],
            [p["psnr_y"] for p in pts],
            marker=_MARKERS[i % len(_MARKERS)],
            color=_colour(i),
            label=label,
        )
        if i == 0:
            for p in pts:
                ax.annotate(
                    f"QP {p['qp']}", (p["bits"], p["psnr_y"]), textcoords="offset points", xytext=(4, -10), fontsize=7
                )
    ax.set_xscale("log")
    ax.set_xlabel(rate_label)
    ax.set_ylabel("PSNR-Y (dB, mean)")
    ax.set_title(title)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return _png(fig)


def plot_layer_bits(layers: dict, *, synthetic: str | None, qp: int, title: str) -> bytes:
    """PNG of grouped bars: mean bits per target picture per temporal layer and configuration at `qp`."""
    plt = _plt()
    names = sorted(layers, key=int)
    configs = sorted({c for v in layers.values() for c in v["curves"]}, key=lambda c: config_order(c, synthetic))
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    width = 0.8 / max(len(configs), 1)
    x = np.arange(len(names))
    for i, cfg in enumerate(configs):
        vals = []
        for k in names:
            pts = [p for p in layers[k]["curves"].get(cfg, []) if p["qp"] == qp]
            vals.append(pts[0]["bits"] if pts else np.nan)
        ax.bar(
            x + (i - (len(configs) - 1) / 2) * width, vals, width, color=_colour(i), label=config_label(cfg, synthetic)
        )
    ax.set_xticks(x, [f"layer {k}" for k in names])
    ax.set_ylabel(f"bits per target picture at QP {qp}")
    ax.set_title(title)
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return _png(fig)


def plot_reference_maps(maps: Sequence[dict], *, synthetic: str | None, title: str) -> bytes:
    """PNG: the target (luma) and, per configuration, the reference each block predicts from."""
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    plt = _plt()
    n = len(maps) + 1
    h, w = maps[0]["classes"].shape
    fig, axes = plt.subplots(1, n, figsize=(2.6 * n * max(w / h, 0.6), 2.9), squeeze=False)
    axes = axes[0]
    axes[0].imshow(maps[0]["picture"], cmap="gray", interpolation="nearest")
    axes[0].set_title(f"target {maps[0]['target']}", fontsize=8)
    cmap = ListedColormap([USAGE_COLOURS[k] for k in sorted(USAGE_CLASSES)])
    for ax, m in zip(axes[1:], maps):
        ax.imshow(m["classes"], cmap=cmap, vmin=-0.5, vmax=len(USAGE_CLASSES) - 0.5, interpolation="nearest")
        ax.set_title(config_label(m["config"], synthetic), fontsize=8)
    for ax in axes:
        ax.set_xticks([])
        ax.set_yticks([])
    handles = [Patch(color=USAGE_COLOURS[k], label=label) for k, label in USAGE_CLASSES.items()]
    fig.legend(handles=handles, fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 0.9))
    fig.suptitle(title, fontsize=9)
    return _png(fig)


def _slug(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", Path(name).stem) or "clip"


def _entry_stem(clip: ClipRD, several_gaps: bool) -> str:
    base = _slug(clip.clip)
    if clip.gop_size is not None:
        return f"{base}_gop{clip.gop_size}"
    return base + (f"_gap{clip.gap}" if several_gaps else "")


def _entry_title(clip: ClipRD) -> str:
    name = Path(clip.clip).name
    if clip.gop_size is not None:
        return f"{name}, dyadic GOP of {clip.gop_size}"
    return f"{name}, gap {clip.gap}"


def _table(head: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    th = "".join(f"<th>{html.escape(h)}</th>" for h in head)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(v))}</td>" for v in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"


def _fmt(v, spec: str) -> str:
    return "n/a" if v is None else format(v, spec)


def _img(name: str, alt: str) -> str:
    return f'<p><img src="{html.escape(name)}" alt="{html.escape(alt)}" loading="lazy"></p>'


def write_rd_page(directory: str | os.PathLike, clips: Sequence[ClipRD], summary: dict, settings: dict) -> list[Path]:
    """Write report.html and its PNGs into `directory` (atomically); return the paths written.

    Parameters
    ----------
    directory : path
    clips : sequence of ClipRD
        The measured entries (per clip and gap, per clip and GOP size).
    summary : dict
        `synth.codec.rdmeasure.summarise_clips` of `clips`.
    settings : dict
        The run's settings (shown in a table).
    """
    from synth.io import atomic_write_bytes, atomic_write_text

    d = Path(directory)
    syn = summary.get("synthetic")
    written: list[Path] = []
    several_gaps = len({c.gap for c in clips if c.gop_size is None}) > 1
    toc, parts, used = [], [], set()
    for clip, entry in zip(clips, summary["clips"]):
        stem = _entry_stem(clip, several_gaps)
        while stem in used:
            stem += "_"
        used.add(stem)
        title = _entry_title(clip)
        anchor = "e-" + stem
        toc.append(f'<li><a href="#{anchor}">{html.escape(title)}</a></li>')
        sec = [f'<h2 id="{anchor}">{html.escape(title)}</h2>']
        whole = clip.gop_size is not None
        curves = entry["gop_curves"] if whole else entry["curves"]
        rate_label = "bits per GOP (sum over its pictures)" if whole else "bits per target picture (mean)"
        name = f"rd_{stem}.png"
        atomic_write_bytes(
            d / name, plot_rd_curves(curves, entry["bd"], synthetic=syn, title=title, rate_label=rate_label)
        )
        written.append(d / name)
        sec.append(_img(name, f"RD curves, {title}"))
        rows = [
            [config_label(k, syn), _fmt(v.get("bd_rate"), "+.2f"), _fmt(v.get("bd_psnr"), "+.3f"),
             _fmt(entry["synthesis_psnr_y"].get(k), ".2f")]
            for k, v in sorted(entry["bd"].items(), key=lambda kv: config_order(kv[0], syn))
        ]  # fmt: skip
        sec.append(_table(["configuration", "BD-rate %", "BD-PSNR dB", "extra ref PSNR-Y dB"], rows))
        sec.append(
            f"<p>{entry['targets']} target pictures; reference mismatches {entry['reference_mismatches']}, "
            f"QP mismatches {entry.get('qp_mismatches', 0)} (expected 0).</p>"
        )
        layers = entry.get("layers") or {}
        if len(layers) > 1:
            qps = sorted({p["qp"] for v in layers.values() for pts in v["curves"].values() for p in pts})
            mid = qps[(len(qps) - 1) // 2]
            name = f"layers_{stem}.png"
            atomic_write_bytes(
                d / name, plot_layer_bits(layers, synthetic=syn, qp=mid, title=f"bits per layer, {title}")
            )
            written.append(d / name)
            sec.append("<h3>Bits per temporal layer</h3>")
            sec.append(_img(name, f"bits per temporal layer, {title}"))
            configs = sorted({c for v in layers.values() for c in v["curves"]}, key=lambda c: config_order(c, syn))
            rows = []
            for k in sorted(layers, key=int):
                for cfg in configs:
                    pts = {p["qp"]: p for p in layers[k]["curves"].get(cfg, [])}
                    bd = layers[k]["bd"].get(cfg, {})
                    rows.append(
                        [f"layer {k}", config_label(cfg, syn)]
                        + [_fmt(pts[q]["bits"] if q in pts else None, ".0f") for q in qps]
                        + ["" if cfg == ANCHOR else _fmt(bd.get("bd_rate"), "+.2f")]
                    )
            sec.append(_table(["layer", "configuration"] + [f"bits QP {q}" for q in qps] + ["BD-rate %"], rows))
        if clip.maps:
            name = f"map_{stem}.png"
            m0 = clip.maps[0]
            title_map = f"reference of every block, target {m0['target']} (references {m0['past']}, {m0['future']}), QP {m0['qp']}"
            atomic_write_bytes(d / name, plot_reference_maps(clip.maps, synthetic=syn, title=title_map))
            written.append(d / name)
            sec.append("<h3>Reference choice per block</h3>")
            sec.append(_img(name, title_map))
            rows = [
                [config_label(m["config"], syn)]
                + [f"{100 * m['shares'][label]:.1f}" for label in USAGE_CLASSES.values()]
                for m in clip.maps
            ]
            sec.append(_table(["configuration"] + [f"{label} %" for label in USAGE_CLASSES.values()], rows))
            sec.append(
                "<p>Found by swapping the extra picture's coded data for that of a clearly different picture and "
                "decoding again: the target's samples change exactly where its prediction used the extra picture.</p>"
            )
        elif entry is summary["clips"][0] and not any(c.maps for c in clips):
            why = (
                "the reference map is made for B targets coded with x264 (FFmpeg exports no vectors for HEVC)"
                if settings.get("codec") != "h264" or settings.get("target_picture") != "B"
                else "the chosen target (--at) is not among the measured targets"
            )
            sec.append(f"<p>No reference map: {html.escape(why)}.</p>")
        parts.append("\n".join(sec))
    means = []
    for label, avg in [("mean over clips", summary.get("average") or {})] + [
        (f"mean, GOP {n}", v) for n, v in (summary.get("hierarchy") or {}).items()
    ]:
        for k, v in sorted(avg.items(), key=lambda kv: config_order(kv[0], syn)):
            means.append([label, config_label(k, syn), _fmt(v.get("bd_rate"), "+.2f"), _fmt(v.get("bd_psnr"), "+.3f")])
            label = ""
    settings_rows = [[k, "" if v is None else str(v)] for k, v in settings.items()]
    warn = "".join(f"<p><strong>{html.escape(w)}</strong></p>" for w in summary.get("warnings") or [])
    doc = (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        "<title>synth rd: encoder in the loop</title>"
        f"<style>{PAGE_CSS}</style></head><body>\n"
        "<h1>Encoder in the loop: bits an extra reference saves</h1>\n"
        f'{warn}<nav id="contents"><h2>Contents</h2><ul><li><a href="#summary">Summary</a></li>{"".join(toc)}'
        '<li><a href="#settings">Settings</a></li></ul></nav>\n'
        '<h2 id="summary">Summary</h2>'
        + _table(["", "configuration", "BD-rate %", "BD-PSNR dB"], means)
        + "<p>BD-rate and BD-PSNR against (a), the two real references (G. Bjontegaard, VCEG-M33, 2001); "
        "negative BD-rate means fewer bits for the same PSNR-Y.</p>\n"
        + "\n".join(parts)
        + '\n<h2 id="settings">Settings</h2>'
        + _table(["setting", "value"], settings_rows)
        + "\n</body></html>\n"
    )
    atomic_write_text(d / "report.html", doc)
    written.insert(0, d / "report.html")
    return written
