"""Opening a study's clip inside a job: raw-YUV geometry, a picture range and a window.

A manifest's clip entry may carry three options that travel to every job as parameters (they are
part of the job's identity):

``raw``
    geometry of a headerless planar ``.yuv`` file: ``{width, height, chroma, bit_depth, rate}``,
    completed from the file name (``dock_1280x720_10bit.yuv``) and defaults when the manifest loads,
    so a job's identity always holds the whole geometry; read with `synth.io.open_clip`.
``pictures``
    ``[first, last]``: only pictures ``first..last`` (inclusive, 0-based) are used; they are
    renumbered from 0.
``window``
    ``[x, y, width, height]``: only this luma rectangle is used (even values for 4:2:0).

Workers open clips by path (shared storage), never receive pictures from the coordinator.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from fractions import Fraction
from pathlib import Path
from typing import Any

from synth.errors import ParameterError
from synth.io import open_clip, write_y4m
from synth.picture import ClipInfo, Picture, chroma_factors

__all__ = ["ClipView", "open_job_clip", "clip_as_y4m", "check_raw_geometry", "raw_geometry_for"]


def check_raw_geometry(raw: dict[str, Any], *, where: str = "raw") -> dict[str, Any]:
    """Validate a raw-YUV geometry table and return it with defaults filled in.

    Raises
    ------
    ParameterError
        Naming ``where.<key>`` for an unknown key, a missing size or a bad value.
    """
    allowed = {"width", "height", "chroma", "bit_depth", "rate"}
    for key in raw:
        if key not in allowed:
            raise ParameterError(f"{where}.{key}: unknown key (allowed: {', '.join(sorted(allowed))})")
    out: dict[str, Any] = {}
    for key in ("width", "height"):
        if key not in raw:
            raise ParameterError(
                f"{where}.{key}: missing (a raw .yuv file needs its width and height, here or as WxH in its name)"
            )
        value = raw[key]
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            raise ParameterError(f"{where}.{key}: expected a positive integer, got {value!r}")
        out[key] = value
    chroma = raw.get("chroma", "420")
    if chroma not in ("420", "422", "444", "mono"):
        raise ParameterError(f"{where}.chroma: expected one of 420, 422, 444, mono, got {chroma!r}")
    out["chroma"] = chroma
    depth = raw.get("bit_depth", 8)
    if isinstance(depth, bool) or not isinstance(depth, int) or not 8 <= depth <= 16:
        raise ParameterError(f"{where}.bit_depth: expected an integer 8..16, got {depth!r}")
    out["bit_depth"] = depth
    rate = raw.get("rate", "25/1")
    try:
        fr = Fraction(str(rate))
    except (ValueError, ZeroDivisionError):
        raise ParameterError(f'{where}.rate: expected a frame rate such as "25/1" or 50, got {rate!r}') from None
    if fr <= 0:
        raise ParameterError(f"{where}.rate: must be positive, got {rate!r}")
    out["rate"] = f"{fr.numerator}/{fr.denominator}"
    fx, fy = chroma_factors(chroma if chroma != "mono" else "444")
    if out["width"] % fx or out["height"] % fy:
        raise ParameterError(
            f"{where}: {chroma} needs sizes divisible by ({fx}, {fy}), got {out['width']}x{out['height']}"
        )
    return out


def raw_geometry_for(path: str | os.PathLike, given: dict[str, Any] | None, *, where: str = "raw") -> dict[str, Any]:
    """The full geometry of a raw ``.yuv`` file: the manifest's `given` keys, else what the file name
    says (``WxH``, rate after the size, ``10bit``, ``422``...; see `synth.io.rawyuv`), else defaults
    (4:2:0, 8-bit, 25/1).

    Raises
    ------
    ParameterError
        When neither the manifest nor the name gives the size, or a value is bad.
    """
    from synth.io.rawyuv import geometry_from_name

    hints = geometry_from_name(Path(path).name)
    merged: dict[str, Any] = {}
    for ours, theirs in (
        ("width", "width"),
        ("height", "height"),
        ("chroma", "chroma_format"),
        ("bit_depth", "bit_depth"),
        ("rate", "frame_rate"),
    ):
        if theirs in hints:
            merged[ours] = hints[theirs] if ours != "rate" else str(Fraction(hints[theirs]))
    merged.update(given or {})
    return check_raw_geometry(merged, where=where)


class ClipView:
    """A clip seen through a picture range and a luma window (both optional)."""

    def __init__(self, reader, *, pictures: list[int] | None = None, window: list[int] | None = None):
        self.reader = reader
        total = len(reader)
        first, last = (0, total - 1) if pictures is None else (int(pictures[0]), int(pictures[1]))
        if not 0 <= first <= last < total:
            raise ParameterError(f"pictures: range [{first}, {last}] does not fit a clip of {total} pictures")
        self.first, self.count = first, last - first + 1
        src = reader.info
        if window is not None:
            x, y, w, h = (int(v) for v in window)
            if x < 0 or y < 0 or w <= 0 or h <= 0 or x + w > src.width or y + h > src.height:
                raise ParameterError(f"window: [{x}, {y}, {w}, {h}] does not fit a {src.width}x{src.height} clip")
            fx, fy = chroma_factors(src.chroma_format)
            if x % fx or w % fx or y % fy or h % fy:
                raise ParameterError(
                    f"window: [{x}, {y}, {w}, {h}] must be aligned to the {src.chroma_format} chroma grid ({fx}, {fy})"
                )
            self.window = (x, y, w, h)
        else:
            self.window = None
        w_, h_ = (src.width, src.height) if self.window is None else self.window[2:]
        self.info = ClipInfo(
            w_,
            h_,
            src.chroma_format,
            src.bit_depth,
            self.count,
            src.frame_rate,
            src.interlacing,
            src.pixel_aspect,
            src.container,
            src.chroma_siting,
            dict(src.extra),
        )

    def __len__(self) -> int:
        return self.count

    def read(self, index: int) -> Picture:
        if not 0 <= index < self.count:
            raise ParameterError(f"picture index {index} out of range (the study uses {self.count} pictures)")
        pic = self.reader.read(self.first + index)
        if self.window is None:
            return pic
        x, y, w, h = self.window
        fx, fy = pic.chroma_factors
        planes = [pic.y[y : y + h, x : x + w].copy()]
        if pic.chroma_format != "mono":
            for p in (pic.cb, pic.cr):
                planes.append(p[y // fy : (y + h) // fy, x // fx : (x + w) // fx].copy())
        else:
            planes += [None, None]
        return Picture(planes[0], planes[1], planes[2], pic.chroma_format, pic.bit_depth)

    def __iter__(self) -> Iterator[Picture]:
        for i in range(self.count):
            yield self.read(i)

    def close(self) -> None:
        self.reader.close()

    def __enter__(self) -> ClipView:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_job_clip(clip_path: str | os.PathLike, params: dict[str, Any]) -> ClipView:
    """Open the clip of a job, applying the clip options found in `params` (raw, pictures, window)."""
    raw = params.get("raw")
    if raw:
        reader = open_clip(
            clip_path,
            width=raw["width"],
            height=raw["height"],
            chroma_format=raw["chroma"],
            bit_depth=raw["bit_depth"],
            frame_rate=Fraction(raw["rate"]),
        )
    else:
        reader = open_clip(clip_path)
    try:
        return ClipView(reader, pictures=params.get("pictures"), window=params.get("window"))
    except BaseException:
        reader.close()
        raise


@contextlib.contextmanager
def clip_as_y4m(clip_path: str | os.PathLike, params: dict[str, Any]) -> Iterator[Path]:
    """A path to the job's clip as a file the workbench commands read.

    When the manifest sets no clip option, that is the clip itself. Otherwise the selected pictures
    and window are written to a temporary ``.y4m`` on the worker's local disk, removed on exit.
    """
    if not any(params.get(k) for k in ("raw", "pictures", "window")):
        yield Path(clip_path)
        return
    with open_job_clip(clip_path, params) as view, tempfile.TemporaryDirectory(prefix="synth-study-") as tmp:
        out = Path(tmp) / (Path(clip_path).stem + ".y4m")
        write_y4m(out, iter(view), view.info)
        yield out
