"""Describe a clip: what `synth info` prints."""

from __future__ import annotations

import os
from fractions import Fraction

import numpy as np

from synth.io import clip_kind, describe_kind, open_clip

__all__ = ["describe_clip", "format_info", "CHROMA_NAMES"]

#: How chroma formats are shown to people.
CHROMA_NAMES = {"420": "4:2:0", "422": "4:2:2", "444": "4:4:4", "mono": "4:0:0 (monochrome)"}


#: Keys of `describe_clip` shown by `format_info`, with their labels.
_LABELS = {
    "file": "file",
    "clip_format": "format",
    "width": "width",
    "height": "height",
    "frames": "frames",
    "chroma_format": "chroma",
    "bit_depth": "bit depth",
    "frame_rate": "frame rate",
    "interlacing": "interlacing",
    "chroma_siting": "chroma siting",
    "pixel_aspect": "pixel aspect",
}


def _ratio(value: Fraction | None) -> str | None:
    if value is None:
        return None
    value = Fraction(value)
    return f"{value.numerator}/{value.denominator}"


def describe_clip(path: str | os.PathLike, *, frame: int = 0, **options) -> dict:
    """Format, geometry, timing and per-plane min/max/mean of one frame of a clip.

    Parameters
    ----------
    path : path-like
        Any clip `synth.io.open_clip` reads.
    frame : int, keyword-only
        Frame whose plane statistics are given (negative counts from the end).
    **options
        Passed to `synth.io.open_clip` (raw geometry, conversion matrix...).

    Returns
    -------
    dict
        JSON-ready: ``file, format, container, width, height, frames, chroma_format, bit_depth,
        frame_rate, frame_rate_value, interlacing, chroma_siting, pixel_aspect, extra, frame, planes``;
        ``planes`` maps 'Y', 'Cb', 'Cr' to ``{'min', 'max', 'mean'}`` (mean accumulated in float64).

    Raises
    ------
    FormatError, ParameterError
        From the reader.
    """
    with open_clip(path, **options) as reader:
        info = reader.info
        count = len(reader)
        pic = reader.read(frame)
        names = ("Y", "Cb", "Cr")
        planes = {
            names[i]: {"min": int(p.min()), "max": int(p.max()), "mean": round(float(np.mean(p, dtype=np.float64)), 4)}
            for i, p in enumerate(pic.planes)
        }
        kind = clip_kind(path)
        return {
            "format": "synth-info-summary",
            "schema_version": 2,
            "file": str(path),
            "clip_format": describe_kind(kind),
            "container": info.container,
            "width": info.width,
            "height": info.height,
            "frames": count,
            "chroma_format": info.chroma_format,
            "bit_depth": info.bit_depth,
            "frame_rate": _ratio(info.frame_rate) if info.frame_rate else "unknown",
            "frame_rate_value": round(float(info.frame_rate), 6) if info.frame_rate else None,
            "interlacing": info.interlacing,
            "chroma_siting": info.chroma_siting,
            "pixel_aspect": _ratio(info.pixel_aspect),
            "extra": dict(info.extra),
            "frame": frame if frame >= 0 else count + frame,
            "planes": planes,
        }


def format_info(desc: dict) -> str:
    """The table `synth info` prints for a `describe_clip` result."""
    lines = []
    for key, label in _LABELS.items():
        value = desc[key]
        if value is None:
            continue
        if key == "chroma_format":
            value = CHROMA_NAMES.get(value, value)
        elif key == "frame_rate" and desc["frame_rate_value"] is not None:
            value = f"{value} ({desc['frame_rate_value']:g}/s)"
        lines.append(f"{label:<14} {value}")
    for k, v in desc["extra"].items():
        lines.append(f"{'X tag':<14} {k}={v}" if v else f"{'X tag':<14} {k}")
    lines.append(f"plane statistics of frame {desc['frame']}:")
    for name, st in desc["planes"].items():
        lines.append(f"  {name:<3} min {st['min']:>6}  max {st['max']:>6}  mean {st['mean']:10.3f}")
    return "\n".join(lines)
