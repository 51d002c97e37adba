"""YUV4MPEG2 (``.y4m``) reading and writing.

The stream is a header line ``YUV4MPEG2`` followed by space-separated tags (W, H, F, I, A, C, X),
then for every frame a ``FRAME`` line (with optional parameters) and the planar samples: Y, then
Cb, then Cr; samples above 8 bits are 16-bit little-endian. Reading is streaming and random access:
frame offsets are computed from the header, so frame ``i`` is read without touching frames before it.

References
----------
.. [1] The YUV4MPEG2 format as implemented by the mjpegtools ``yuv4mpeg`` library and FFmpeg's
   ``yuv4mpegdec``/``yuv4mpegenc`` (tags W, H, F, I, A, C, X; ``C`` values such as ``420jpeg``,
   ``420mpeg2``, ``420paldv``, ``422``, ``444``, ``mono``, ``420p10``).
"""

from __future__ import annotations

import os
from fractions import Fraction
from pathlib import Path
from typing import Iterable, Iterator

import numpy as np

from synth.errors import FormatError
from synth.picture import ClipInfo, Picture, chroma_shape

from .atomic import atomic_output

__all__ = ["Y4MReader", "write_y4m", "parse_y4m_header", "format_y4m_header"]

MAGIC = b"YUV4MPEG2"
_MAX_HEADER = 4096

# C tag value -> (chroma format, bit depth, siting)
_C_TAGS: dict[str, tuple[str, int, str | None]] = {
    "420jpeg": ("420", 8, "420jpeg"),
    "420mpeg2": ("420", 8, "420mpeg2"),
    "420paldv": ("420", 8, "420paldv"),
    "420": ("420", 8, None),
    "411": ("411", 8, None),
    "422": ("422", 8, None),
    "444": ("444", 8, None),
    "444alpha": ("444alpha", 8, None),
    "mono": ("mono", 8, None),
}
for _depth in (9, 10, 12, 14, 16):
    _C_TAGS[f"420p{_depth}"] = ("420", _depth, None)
    _C_TAGS[f"422p{_depth}"] = ("422", _depth, None)
    _C_TAGS[f"444p{_depth}"] = ("444", _depth, None)
    _C_TAGS[f"mono{_depth}"] = ("mono", _depth, None)
_SUPPORTED_CHROMA = {"420", "422", "444", "mono"}


def _ratio(value: str, tag: str, source: str) -> Fraction:
    try:
        num, den = value.split(":")
        n, d = int(num), int(den)
    except ValueError:
        raise FormatError(f"{source}: header tag {tag} must be N:D, got {value!r}") from None
    if n < 0 or d < 0:
        raise FormatError(f"{source}: header tag {tag} must not be negative, got {value!r}")
    if d == 0:
        if n == 0:
            return Fraction(0)  # 0:0 means unknown
        raise FormatError(f"{source}: header tag {tag} has a zero denominator: {value!r}")
    return Fraction(n, d)


def parse_y4m_header(line: bytes, source: str = "stream") -> ClipInfo:
    """Parse a YUV4MPEG2 stream header line (without its newline) into a `ClipInfo`.

    Raises
    ------
    FormatError
        On a wrong magic, a missing W or H tag, an unknown tag or an unsupported chroma tag.
    """
    try:
        text = line.decode("ascii")
    except UnicodeDecodeError:
        raise FormatError(f"{source}: header is not ASCII") from None
    parts = text.split(" ")
    if parts[0] != "YUV4MPEG2":
        raise FormatError(f"{source}: not a YUV4MPEG2 file (magic {parts[0][:16]!r})")
    width = height = None
    frame_rate = Fraction(25)
    interlacing = "p"
    aspect = None
    c_value = "420jpeg"
    extra: dict[str, str] = {}
    for token in parts[1:]:
        if not token:
            raise FormatError(f"{source}: header has an empty tag (double space?)")
        tag, value = token[0], token[1:]
        if tag in "WH":
            if not value.isdigit() or int(value) <= 0:
                raise FormatError(f"{source}: header tag {tag} must be a positive integer, got {value!r}")
            if tag == "W":
                width = int(value)
            else:
                height = int(value)
        elif tag == "F":
            frame_rate = _ratio(value, "F", source)
        elif tag == "I":
            if value not in ("p", "t", "b", "m", "?"):
                raise FormatError(f"{source}: header tag I must be p, t, b, m or ?, got {value!r}")
            interlacing = value
        elif tag == "A":
            aspect = _ratio(value, "A", source)
        elif tag == "C":
            c_value = value
        elif tag == "X":
            key, _, val = value.partition("=")
            extra[key] = val
        else:
            raise FormatError(f"{source}: unknown header tag {token[:16]!r}")
    if width is None or height is None:
        raise FormatError(f"{source}: header lacks the {'W' if width is None else 'H'} tag")
    if c_value not in _C_TAGS:
        raise FormatError(f"{source}: unknown chroma tag C{c_value}")
    chroma_format, depth, siting = _C_TAGS[c_value]
    if chroma_format not in _SUPPORTED_CHROMA:
        raise FormatError(f"{source}: chroma tag C{c_value} is not supported (use 420, 422, 444 or mono)")
    if chroma_format == "420" and depth == 8 and siting is None:
        siting = "420"
    if chroma_format in ("420",) and (width % 2 or height % 2):
        raise FormatError(f"{source}: 4:2:0 needs even sizes, got {width}x{height}")
    if chroma_format == "422" and width % 2:
        raise FormatError(f"{source}: 4:2:2 needs an even width, got {width}")
    return ClipInfo(
        width=width,
        height=height,
        chroma_format=chroma_format,
        bit_depth=depth,
        frame_rate=frame_rate,
        interlacing=interlacing,
        pixel_aspect=aspect,
        container="y4m",
        chroma_siting=siting,
        extra=extra,
    )


def format_y4m_header(info: ClipInfo) -> bytes:
    """The header line (with newline) for a clip."""
    fr = Fraction(info.frame_rate)
    if info.chroma_format == "420" and info.bit_depth == 8:
        c = info.chroma_siting if info.chroma_siting in ("420jpeg", "420mpeg2", "420paldv") else "420jpeg"
    elif info.bit_depth == 8:
        c = info.chroma_format
    else:
        c = f"{info.chroma_format}p{info.bit_depth}" if info.chroma_format != "mono" else f"mono{info.bit_depth}"
    tags = [f"W{info.width}", f"H{info.height}", f"F{fr.numerator}:{fr.denominator}", f"I{info.interlacing}"]
    if info.pixel_aspect is not None:
        a = Fraction(info.pixel_aspect)
        tags.append(f"A{a.numerator}:{a.denominator}")
    tags.append(f"C{c}")
    tags.extend(f"X{k}={v}" if v else f"X{k}" for k, v in info.extra.items())
    return ("YUV4MPEG2 " + " ".join(tags) + "\n").encode("ascii")


class Y4MReader:
    """Random-access reader of a YUV4MPEG2 file; one frame in memory at a time.

    Frame offsets are found by walking the ``FRAME`` lines once (they may carry parameters, so
    their lengths can differ) with seeks past the sample data; no samples are read until asked.
    """

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        if not self.path.exists():
            raise FormatError(f"{self.path}: no such file")
        if self.path.is_dir():
            raise FormatError(f"{self.path}: is a directory, not a clip")
        size = self.path.stat().st_size
        if size == 0:
            raise FormatError(f"{self.path}: file is empty")
        self._fh = open(self.path, "rb")
        head = self._fh.read(_MAX_HEADER)
        end = head.find(b"\n")
        if not head.startswith(MAGIC):
            self._fh.close()
            raise FormatError(f"{self.path}: not a YUV4MPEG2 file (wrong magic)")
        if end < 0:
            self._fh.close()
            raise FormatError(f"{self.path}: header line is not terminated")
        try:
            self.info = parse_y4m_header(head[:end], str(self.path))
        except FormatError:
            self._fh.close()
            raise
        self._frame_bytes = self.info.frame_bytes
        self._offsets = self._index(end + 1, size)
        self.info.frame_count = len(self._offsets)

    def _index(self, pos: int, size: int) -> list[int]:
        offsets = []
        fh = self._fh
        while pos < size:
            fh.seek(pos)
            line = fh.read(256)
            nl = line.find(b"\n")
            if not line.startswith(b"FRAME") or nl < 0 or (nl > 5 and line[5:6] != b" "):
                raise FormatError(
                    f"{self.path}: frame {len(offsets)} does not start with a FRAME line (offset {pos})"
                )
            data = pos + nl + 1
            if data + self._frame_bytes > size:
                raise FormatError(
                    f"{self.path}: frame {len(offsets)} is truncated: expected {self._frame_bytes} bytes, "
                    f"got {size - data}"
                )
            offsets.append(data)
            pos = data + self._frame_bytes
        return offsets

    def __len__(self) -> int:
        return len(self._offsets)

    def read(self, index: int) -> Picture:
        """Read frame `index` (0-based; negative counts from the end)."""
        n = len(self._offsets)
        if not -n <= index < n:
            raise FormatError(f"{self.path}: frame index {index} out of range (clip has {n} frames)")
        self._fh.seek(self._offsets[index])
        raw = self._fh.read(self._frame_bytes)
        if len(raw) != self._frame_bytes:
            raise FormatError(
                f"{self.path}: frame {index} is truncated: expected {self._frame_bytes} bytes, got {len(raw)}"
            )
        return _unpack(raw, self.info)

    def __iter__(self) -> Iterator[Picture]:
        for i in range(len(self)):
            yield self.read(i)

    def close(self) -> None:
        self._fh.close()

    def __enter__(self) -> "Y4MReader":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _unpack(raw: bytes, info: ClipInfo) -> Picture:
    dtype = np.dtype("<u2") if info.bit_depth > 8 else np.dtype(np.uint8)
    buf = np.frombuffer(raw, dtype=dtype)
    h, w = info.height, info.width
    y = buf[: h * w].reshape(h, w)
    cs = chroma_shape(h, w, info.chroma_format)
    if cs is None:
        planes = [y, None, None]
    else:
        n = cs[0] * cs[1]
        cb = buf[h * w : h * w + n].reshape(cs)
        cr = buf[h * w + n : h * w + 2 * n].reshape(cs)
        planes = [y, cb, cr]
    native = np.uint16 if info.bit_depth > 8 else np.uint8
    planes = [None if p is None else p.astype(native, copy=True) for p in planes]
    return Picture(planes[0], planes[1], planes[2], info.chroma_format, info.bit_depth)


def pack_picture(picture: Picture) -> bytes:
    """Planar bytes of a picture (16-bit little-endian above 8 bits)."""
    dtype = np.dtype("<u2") if picture.bit_depth > 8 else np.dtype(np.uint8)
    return b"".join(np.ascontiguousarray(p, dtype=dtype).tobytes() for p in picture.planes)


def write_y4m(path: str | os.PathLike, pictures: Iterable[Picture], info: ClipInfo | None = None) -> int:
    """Write pictures to a YUV4MPEG2 file atomically; returns the number of frames written.

    `info` gives frame rate, interlacing, aspect and X tags; size and format come from the pictures
    and must agree across them.
    """
    count = 0
    with atomic_output(path, "wb") as fh:
        first = None
        for pic in pictures:
            if first is None:
                first = pic
                hdr = ClipInfo(pic.width, pic.height, pic.chroma_format, pic.bit_depth)
                if info is not None:
                    hdr.frame_rate = info.frame_rate
                    hdr.interlacing = info.interlacing if info.interlacing != "?" else "p"
                    hdr.pixel_aspect = info.pixel_aspect
                    hdr.extra = dict(info.extra)
                    if info.chroma_format == pic.chroma_format:
                        hdr.chroma_siting = info.chroma_siting
                fh.write(format_y4m_header(hdr))
            elif not pic.same_format(first):
                raise FormatError(
                    f"{path}: picture {count} is {pic.width}x{pic.height} {pic.chroma_format} {pic.bit_depth}-bit, "
                    f"but the clip is {first.width}x{first.height} {first.chroma_format} {first.bit_depth}-bit"
                )
            fh.write(b"FRAME\n")
            fh.write(pack_picture(pic))
            count += 1
        if first is None:
            raise FormatError(f"{path}: no pictures to write")
    return count
