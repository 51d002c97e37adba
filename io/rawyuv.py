"""Raw planar Y'CbCr files (``.yuv``): frames of samples back to back, no header.

The layout is `synth.io.planar`'s (Y, Cb, Cr planes; 16-bit little-endian above 8 bits). Having
no header, a raw file needs its geometry from the caller, or from its name: the first ``WxH``
(e.g. ``1920x1080``) gives the size, a number right after it (``_50``, ``_29.97``, ``_60fps``)
the frame rate, a token such as ``10bit`` or ``p10`` (``yuv420p10le``) the bit depth, and a token
``420``/``422``/``444``/``400``/``mono``/``gray`` (alone or as ``yuv420p``) the chroma format.
What neither gives defaults to 4:2:0, 8-bit, 25 frames/s. Example:
``parcels_1920x1080_50_10bit_422.yuv``.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from fractions import Fraction
from pathlib import Path

from synth.errors import FormatError, ParameterError
from synth.io.atomic import atomic_output
from synth.io.planar import (
    PositionalFile,
    ReaderMixin,
    check_geometry,
    check_sample_range,
    frame_index,
    pack_picture,
    unpack_frame,
)
from synth.picture import ClipInfo, Picture

__all__ = ["RawYUVReader", "write_yuv", "parse_size", "geometry_from_name"]

_SIZE_IN_NAME = re.compile(r"(?<![0-9])([1-9][0-9]{0,5})[xX]([1-9][0-9]{0,5})(?![0-9])")
_RATE_AFTER_SIZE = re.compile(r"[_\-.]([0-9]{1,3}(?:\.[0-9]{1,3})?)(?:fps|hz)?(?=[_\-.]|$)", re.I)
_DEPTH_IN_NAME = re.compile(
    r"(?:(?<![0-9])(8|9|10|12|14|16)[_\-]?bits?(?![a-z])|p(9|10|12|14|16)(?:le)?(?![0-9]))", re.I
)
_CHROMA_IN_NAME = re.compile(r"(?:^|[_\-.])(?:yuv)?(420|422|444|400|mono|gray)p?(?=[_\-.]|p[0-9]|$)", re.I)


def parse_size(text) -> tuple[int, int]:
    """Parse ``'WxH'`` (or a (width, height) pair) into positive integers.

    Raises
    ------
    ParameterError
        Anything else.
    """
    if isinstance(text, (tuple, list)) and len(text) == 2:
        w, h = text
    else:
        m = re.fullmatch(r"\s*([0-9]{1,6})\s*[xX]\s*([0-9]{1,6})\s*", str(text))
        if not m:
            raise ParameterError(f"size must be WIDTHxHEIGHT, e.g. 1920x1080, got {text!r}")
        w, h = m.groups()
    try:
        w, h = int(w), int(h)
    except (TypeError, ValueError):
        raise ParameterError(f"size must be two integers, got {text!r}") from None
    if w <= 0 or h <= 0:
        raise ParameterError(f"size must be positive, got {w}x{h}")
    return w, h


def _nominal_rate(rate: Fraction) -> Fraction:
    """29.97 -> 30000/1001 and the like (NTSC-family rates, common practice); others unchanged."""
    for base in (24, 30, 48, 60, 120):
        ntsc = Fraction(base * 1000, 1001)
        if rate != base and abs(rate - ntsc) < Fraction(1, 100):
            return ntsc
    return rate


def geometry_from_name(name: str) -> dict:
    """Geometry hints found in a raw file's name: width, height, frame_rate, bit_depth, chroma_format.

    Only the keys found are returned (see the module docstring for the patterns).
    """
    stem = Path(name).name
    stem = stem[: -len(".yuv")] if stem.lower().endswith(".yuv") else stem
    out: dict = {}
    m = _SIZE_IN_NAME.search(stem)
    if m:
        out["width"], out["height"] = int(m.group(1)), int(m.group(2))
        r = _RATE_AFTER_SIZE.match(stem, m.end())
        if r and 0 < float(r.group(1)) <= 300:
            out["frame_rate"] = _nominal_rate(Fraction(r.group(1)))
    d = _DEPTH_IN_NAME.search(stem)
    if d:
        out["bit_depth"] = int(d.group(1) or d.group(2))
    c = _CHROMA_IN_NAME.search(stem)
    if c:
        v = c.group(1).lower()
        out["chroma_format"] = "mono" if v in ("400", "mono", "gray") else v
    return out


class RawYUVReader(ReaderMixin):
    """Random-access reader of a raw planar ``.yuv`` file; one frame in memory at a time.

    Parameters
    ----------
    path : path-like
    width, height : int, optional, keyword-only
        Luma size; ``size='WxH'`` is the same. Taken from the file name when not given.
    chroma_format : {'420', '422', '444', 'mono'}, optional, keyword-only
    bit_depth : int, optional, keyword-only
        8..16; above 8 the samples are 16-bit little-endian.
    frame_rate : number or Fraction, optional, keyword-only
        Only metadata (a raw file has none of its own).
    check_range : bool, keyword-only
        Refuse 9..15-bit frames holding samples above the bit depth's maximum.

    Raises
    ------
    FormatError
        Missing or empty file, no size given or found in the name, a size or format the layout
        cannot hold, a file size that is not a whole number of frames.
    ParameterError
        Malformed `size`.
    """

    def __init__(
        self,
        path: str | os.PathLike,
        *,
        width: int | None = None,
        height: int | None = None,
        size=None,
        chroma_format: str | None = None,
        bit_depth: int | None = None,
        frame_rate=None,
        check_range: bool = True,
    ):
        self.path = Path(path)
        src = str(self.path)
        if size is not None:
            width, height = parse_size(size)
        hints = geometry_from_name(self.path.name)
        width = width if width is not None else hints.get("width")
        height = height if height is not None else hints.get("height")
        if width is None or height is None:
            raise FormatError(
                f"{src}: a raw .yuv file needs its size: give it (--size WxH) or put WxH in the file name"
            )
        chroma_format = str(chroma_format) if chroma_format is not None else hints.get("chroma_format", "420")
        if chroma_format == "400":
            chroma_format = "mono"
        bit_depth = int(bit_depth) if bit_depth is not None else hints.get("bit_depth", 8)
        check_geometry(int(width), int(height), chroma_format, bit_depth, source=src)
        rate = frame_rate if frame_rate is not None else hints.get("frame_rate", Fraction(25))
        try:
            rate = Fraction(rate).limit_denominator(1001) if not isinstance(rate, Fraction) else rate
        except (TypeError, ValueError):
            raise ParameterError(f"frame_rate must be a number, got {frame_rate!r}") from None
        if rate <= 0:
            raise ParameterError(f"frame_rate must be positive, got {frame_rate!r}")
        self.check_range = bool(check_range)
        self._file = PositionalFile(self.path, source=src)
        try:
            self.info = ClipInfo(
                width=int(width),
                height=int(height),
                chroma_format=chroma_format,
                bit_depth=bit_depth,
                frame_rate=rate,
                container="yuv",
                chroma_siting="420jpeg" if chroma_format == "420" else None,
            )
            self._frame_bytes = self.info.frame_bytes
            total = self._file.size
            if total == 0:
                raise FormatError(f"{src}: file is empty")
            count, rest = divmod(total, self._frame_bytes)
            if rest:
                raise FormatError(
                    f"{src}: file size {total} bytes is not a multiple of the frame size {self._frame_bytes} bytes "
                    f"({width}x{height} {chroma_format} {bit_depth}-bit): {count} whole frames and {rest} bytes "
                    f"left over (wrong size, chroma format or bit depth?)"
                )
            self.info.frame_count = count
        except BaseException:
            self._file.close()
            raise

    def __len__(self) -> int:
        return self.info.frame_count

    def read(self, index: int) -> Picture:
        """Read frame `index` (0-based; negative counts from the end)."""
        src = str(self.path)
        i = frame_index(index, self.info.frame_count, source=src)
        raw = self._file.read_at(i * self._frame_bytes, self._frame_bytes)
        if len(raw) != self._frame_bytes:
            raise FormatError(f"{src}: frame {i} is truncated: expected {self._frame_bytes} bytes, got {len(raw)}")
        pic = unpack_frame(raw, self.info)
        if self.check_range:
            check_sample_range(pic, source=src, index=i)
        return pic

    def close(self) -> None:
        self._file.close()


def write_yuv(path: str | os.PathLike, pictures: Iterable[Picture], info: ClipInfo | None = None) -> int:
    """Write pictures to a raw planar ``.yuv`` file atomically; returns the number of frames written.

    All pictures must share size, chroma format and bit depth (`info` is accepted for symmetry with
    `write_y4m` and ignored: a raw file carries no metadata).

    Raises
    ------
    FormatError
        No pictures, or pictures of differing formats. Nothing is left at `path` then.
    """
    count = 0
    with atomic_output(path, "wb") as fh:
        first = None
        for pic in pictures:
            if not isinstance(pic, Picture):
                raise FormatError(f"{path}: item {count} is a {type(pic).__name__}, not a Picture")
            if first is None:
                first = pic
                check_geometry(pic.width, pic.height, pic.chroma_format, pic.bit_depth, source=str(path))
            elif not pic.same_format(first):
                raise FormatError(
                    f"{path}: picture {count} is {pic.width}x{pic.height} {pic.chroma_format} {pic.bit_depth}-bit, "
                    f"but the clip is {first.width}x{first.height} {first.chroma_format} {first.bit_depth}-bit"
                )
            fh.write(pack_picture(pic))
            count += 1
        if first is None:
            raise FormatError(f"{path}: no pictures to write")
    return count
