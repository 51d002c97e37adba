"""Reports of the encoder-in-the-loop measurement: a text table, JSON, CSV and RD-curve plots.

Files written by :func:`write_rd_report` into a directory:

- ``rd.json``: settings, per clip the curves (mean bits per target picture and mean PSNR per QP and
  configuration), BD-rate / BD-PSNR of each configuration against ``real``, mean PSNR-Y of the
  extra pictures before coding, offset statistics per QP, and the average over clips;
- ``rd.csv``: one row per clip, target picture, configuration and QP;
- ``rd_<clip>.png``: PSNR-Y over bits per target picture, one curve per configuration.
"""

from __future__ import annotations

import csv
import io as _stdio
import os
import re
from collections.abc import Sequence
from pathlib import Path

from synth.codec.rdmeasure import ANCHOR, ClipRD, config_names

__all__ = [
    "CSV_COLUMNS",
    "RD_SCHEMA_VERSION",
    "config_order",
    "config_label",
    "format_rd_table",
    "write_rd_report",
    "plot_rd_curves",
]

#: ``schema_version`` of the rd.json this module writes.
RD_SCHEMA_VERSION = 1

CSV_COLUMNS = (
    "clip",
    "gap",
    "past",
    "future",
    "target",
    "t",
    "config",
    "qp",
    "bits",
    "target_bits",
    "side_bits",
    "psnr_y",
    "psnr_cb",
    "psnr_cr",
    "reference_psnr_y",
    "extra_psnr_y",
)

_FLOW = ("dis-fast", "dis-medium", "farneback")


def config_order(config: str, synthetic: str | None = None) -> tuple:
    """Sort key: (a), (b), (c), (b') of the synthetic maker, then the others by name."""
    fixed = [ANCHOR]
    if synthetic:
        names = config_names(synthetic)
        fixed += [names["b"], names["c"], names["corrected"]]
    return (fixed.index(config), "") if config in fixed else (len(fixed), config)


def config_label(config: str, synthetic: str | None = None) -> str:
    """Readable label of a configuration, e.g. ``'(b) + lmmse reference (synthetic)'``."""
    if config == ANCHOR:
        return "(a) two real references"
    if synthetic:
        names = config_names(synthetic)
        if config == names["b"]:
            return f"(b) + {synthetic} reference (synthetic)"
        if config == names["c"]:
            return f"(c) {synthetic} reference only"
        if config == names["corrected"]:
            return f"(b') + {synthetic} with offsets, offset bits charged"
    if config.startswith("real+"):
        name = config[5:]
        kind = "optical-flow " if name in _FLOW else ""
        return f"(d) + {kind}{name} reference"
    return config


def _fmt(v, spec: str) -> str:
    return "n/a" if v is None else format(v, spec)


def format_rd_table(summary: dict) -> str:
    """A plain-text table, one row per clip and configuration: BD-rate and BD-PSNR against (a), and
    the mean PSNR-Y of the extra reference picture against the target before coding; then the mean
    over clips and, when measured, the offsets' figures per QP."""
    syn = summary.get("synthetic")
    order = lambda k: config_order(k, syn)  # noqa: E731
    head = ["clip", "configuration", "BD-rate %", "BD-PSNR dB", "extra ref PSNR-Y dB"]
    rows = []
    gaps = summary.get("gaps") or {}
    for c in summary["clips"]:
        gap = f" gap {c['gap']}" if len(gaps) > 1 and "gap" in c else ""
        name = f"{Path(c['clip']).name}{gap} ({c['targets']} targets)"
        for k in sorted(c["bd"], key=order):
            bd = c["bd"][k]
            rows.append(
                [
                    name,
                    config_label(k, syn),
                    _fmt(bd.get("bd_rate"), "+.2f"),
                    _fmt(bd.get("bd_psnr"), "+.3f"),
                    _fmt(c["synthesis_psnr_y"].get(k), ".2f"),
                ]
            )
            name = ""
    means = [(f"mean of {len(summary['clips'])} clip(s)", summary["average"])]
    if len(gaps) > 1:
        means = [(f"mean, gap {g}", avg) for g, avg in gaps.items()] + [
            (f"mean of all {len(summary['clips'])}", summary["average"])
        ]
    for name, avg in means:
        for k in sorted(avg, key=order):
            a = avg[k]
            rows.append([name, config_label(k, syn), _fmt(a["bd_rate"], "+.2f"), _fmt(a["bd_psnr"], "+.3f"), ""])
            name = ""
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(head)]

    def line(vals):
        return "  ".join(v.ljust(w) if i < 2 else v.rjust(w) for i, (v, w) in enumerate(zip(vals, widths))).rstrip()

    out = [line(head), line(["-" * w for w in widths])] + [line(r) for r in rows]
    out.append(
        f"BD-rate/BD-PSNR against {config_label(ANCHOR)!r} (VCEG-M33 cubic fit); negative BD-rate = fewer bits for the same PSNR-Y."
    )
    for c in summary["clips"]:
        gap = f" gap {c['gap']}" if len(gaps) > 1 and "gap" in c else ""
        for o in c.get("offsets", []):
            out.append(
                f"offsets {Path(c['clip']).name}{gap} QP {o['qp']}: PSNR-Y {o['psnr_before_y']:.2f} -> {o['psnr_after_y']:.2f} dB "
                f"({o['psnr_gain_y']:+.2f}), {o['bits_per_picture']:.0f} bits/picture, {o['bits_per_block']:.2f} bits/block, "
                f"{100 * o['zero_share']:.0f} % zero"
            )
    return "\n".join(out)


def _slug(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", Path(name).stem) or "clip"


def plot_rd_curves(clip: ClipRD, title: str | None = None) -> bytes:
    """PNG bytes of the clip's RD curves: PSNR-Y over mean bits per target picture (log axis)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    curves = clip.curves()
    fig, ax = plt.subplots(figsize=(6.4, 4.4), dpi=100)
    markers = "osD^vx*"
    for i, (cfg, pts) in enumerate(sorted(curves.items(), key=lambda kv: config_order(kv[0], clip.synthetic))):
        ax.plot(
            [p["bits"] for p in pts],
            [p["psnr_y"] for p in pts],
            marker=markers[i % len(markers)],
            label=config_label(cfg, clip.synthetic),
        )
        if i == 0:
            for p in pts:
                ax.annotate(
                    f"QP {p['qp']}", (p["bits"], p["psnr_y"]), textcoords="offset points", xytext=(4, -10), fontsize=7
                )
    ax.set_xscale("log")
    ax.set_xlabel("bits per target picture (mean)")
    ax.set_ylabel("PSNR-Y of the target (dB, mean)")
    ax.set_title(title or f"{Path(clip.clip).name}, gap {clip.gap}")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    buf = _stdio.BytesIO()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return buf.getvalue()


def write_rd_report(directory: str | os.PathLike, clips: Sequence[ClipRD], summary: dict, settings: dict) -> list[Path]:
    """Write rd.json, rd.csv and one rd_<clip>.png per clip and gap (atomically); return the paths.

    The PNG of a clip is ``rd_<clip>.png`` when one gap was measured, ``rd_<clip>_gap<G>.png`` when
    several were.
    """
    from synth.io import atomic_write_bytes, atomic_write_text
    from synth.io.jsonout import dumps_strict

    d = Path(directory)
    d.mkdir(parents=True, exist_ok=True)
    written = []
    doc = {"format": "synth-rd", "schema_version": RD_SCHEMA_VERSION, "settings": settings, **summary}
    atomic_write_text(d / "rd.json", dumps_strict(doc, indent=2) + "\n")
    written.append(d / "rd.json")
    buf = _stdio.StringIO()
    w = csv.DictWriter(buf, fieldnames=CSV_COLUMNS, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for c in clips:
        for r in c.rows:
            w.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in CSV_COLUMNS})
    atomic_write_text(d / "rd.csv", buf.getvalue())
    written.append(d / "rd.csv")
    used = set()
    several_gaps = len({c.gap for c in clips}) > 1
    for c in clips:
        name = _slug(c.clip) + (f"_gap{c.gap}" if several_gaps else "")
        while name in used:
            name += "_"
        used.add(name)
        p = d / f"rd_{name}.png"
        atomic_write_bytes(p, plot_rd_curves(c))
        written.append(p)
    return written
