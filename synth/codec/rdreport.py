"""Reports of the encoder-in-the-loop measurement: a text table, JSON, CSV and RD-curve plots.

Files written by :func:`write_rd_report` into a directory:

- ``rd.json``: settings, per clip the curves (mean bits per target picture and mean PSNR per QP and
  configuration), BD-rate / BD-PSNR of each configuration against ``real``, mean PSNR-Y of the
  extra pictures before coding, offset statistics per QP, and the average over clips;
- ``rd.csv``: one row per clip, target picture, configuration and QP;
- ``report.html`` and its PNGs (:mod:`synth.codec.rdpage`): RD curves with the BD figures in the
  legend (``rd_<clip>.png``), bits per temporal layer, per-block reference maps.
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
]

#: ``schema_version`` of the rd.json this module writes.
RD_SCHEMA_VERSION = 2

CSV_COLUMNS = (
    "clip",
    "gap",
    "layer",
    "picture_type",
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
    several = len(gaps) > 1 or bool(summary.get("hierarchy"))
    for c in summary["clips"]:
        name = f"{Path(c['clip']).name}{_entry_name(c, several)} ({c['targets']} targets)"
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
    flat = [c for c in summary["clips"] if c.get("structure", "gap") == "gap"]
    means = [(f"mean of {len(flat)} clip(s)", summary["average"])] if flat else []
    if len(gaps) > 1:
        means = [(f"mean, gap {g}", avg) for g, avg in gaps.items()] + [
            (f"mean of all {len(flat)}", summary["average"])
        ]
    means += [(f"mean, GOP {n} (whole GOP)", avg) for n, avg in (summary.get("hierarchy") or {}).items()]
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
    kinds = {c.get("target_picture") for c in summary["clips"]} - {None}
    if kinds:
        out.append("target coded as " + " and ".join(f"a {k} picture" for k in sorted(kinds)))
    for c in summary["clips"]:
        if c.get("structure") == "hierarchy":
            for layer, figures in sorted(c.get("layers", {}).items(), key=lambda kv: int(kv[0])):
                parts = []
                anchor = figures["curves"].get(ANCHOR, [])
                if anchor:
                    parts.append("(a) " + "/".join(f"{p['bits']:.0f}" for p in anchor) + " bits")
                for k in sorted(figures["bd"], key=order):
                    parts.append(f"{k} {_fmt(figures['bd'][k].get('bd_rate'), '+.2f')} %")
                out.append(f"{Path(c['clip']).name} GOP {c['gop_size']} layer {layer}: " + ", ".join(parts))
        bad = c.get("reference_mismatches", 0) + c.get("qp_mismatches", 0)
        if bad:
            out.append(
                f"{Path(c['clip']).name}{_entry_name(c, True)}: {c.get('reference_mismatches', 0)} reference mismatches, "
                f"{c.get('qp_mismatches', 0)} QP mismatches (expected 0)"
            )
    for c in summary["clips"]:
        gap = _entry_name(c, len(gaps) > 1)
        for o in c.get("offsets", []):
            out.append(
                f"offsets {Path(c['clip']).name}{gap} QP {o['qp']}: PSNR-Y {o['psnr_before_y']:.2f} -> {o['psnr_after_y']:.2f} dB "
                f"({o['psnr_gain_y']:+.2f}), {o['bits_per_picture']:.0f} bits/picture, {o['bits_per_block']:.2f} bits/block, "
                f"{100 * o['zero_share']:.0f} % zero"
            )
    return "\n".join(out)


def _entry_name(entry: dict, several: bool) -> str:
    """`` gap 8`` / `` GOP 8`` after a clip's name when the run measured more than one structure."""
    if entry.get("structure") == "hierarchy":
        return f" GOP {entry['gop_size']}"
    return f" gap {entry['gap']}" if several and entry.get("gap") is not None else ""


def _slug(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", Path(name).stem) or "clip"


def write_rd_report(directory: str | os.PathLike, clips: Sequence[ClipRD], summary: dict, settings: dict) -> list[Path]:
    """Write rd.json, rd.csv and the report page with its PNGs (atomically); return the paths.

    The RD-curve PNG of a clip is ``rd_<clip>.png`` when one gap was measured, ``rd_<clip>_gap<G>.png``
    when several were (``rd_<clip>_gop<N>.png`` for a hierarchy); see :mod:`synth.codec.rdpage`.
    """
    from synth.io import atomic_write_text
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
    from synth.codec.rdpage import write_rd_page

    written += write_rd_page(d, clips, summary, settings)
    return written
