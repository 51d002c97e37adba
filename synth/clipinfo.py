"""Describe a clip: what `synth info` prints."""

from __future__ import annotations

import os

import numpy as np

from synth.io import open_clip

__all__ = ["describe_clip"]


def describe_clip(path: str | os.PathLike, *, frame: int = 0) -> dict:
    """Format, geometry, timing and per-plane min/max/mean of one frame of a clip."""
    reader = open_clip(path)
    try:
        info = reader.info
        pic = reader.read(frame)
        names = ("Y", "Cb", "Cr")
        planes = {
            names[i]: {
                "min": int(p.min()),
                "max": int(p.max()),
                "mean": float(np.mean(p, dtype=np.float64)),
            }
            for i, p in enumerate(pic.planes)
        }
        return {
            "file": str(path),
            "container": info.container,
            "width": info.width,
            "height": info.height,
            "frames": len(reader),
            "chroma_format": info.chroma_format,
            "bit_depth": info.bit_depth,
            "frame_rate": f"{info.frame_rate.numerator}/{info.frame_rate.denominator}",
            "interlacing": info.interlacing,
            "frame": frame,
            "planes": planes,
        }
    finally:
        reader.close()
