"""YUV4MPEG2 (``.y4m``) reading and writing.

The stream is a header line ``YUV4MPEG2`` followed by tags separated by single spaces, then for
every frame a ``FRAME`` line (optionally with parameters after a space) and the planar samples: Y,
then Cb, then Cr; samples above 8 bits are 16-bit little-endian.

Header tags: ``W`` width and ``H`` height (required, positive integers); ``F`` frame rate ``N:D``
(``0:0`` unknown; default 25:1 when absent); ``I`` interlacing ``p``/``t``/``b``/``m``/``?``;
``A`` pixel aspect ``N:D`` (``0:0`` unknown); ``C`` chroma and sample format (default ``420jpeg``);
``X`` extensions, kept verbatim. ``C`` values read: ``420jpeg``, ``420mpeg2``, ``420paldv``, ``420``,
``422``, ``444``, ``mono`` and the high-bit-depth forms ``420p9``..``420p16``, ``422pN``, ``444pN``,
``monoN`` (N = 9, 10, 12, 14, 16). ``411`` and ``444alpha`` are recognised and refused.

Reading is streaming and random access: opening walks the ``FRAME`` lines with seeks past the
sample data (reading no samples), then frame ``i`` is read alone, straight into its own buffer.

References
----------
.. [1] The YUV4MPEG2 format of the mjpegtools ``yuv4mpeg`` library (``yuv4mpeg.h``) and FFmpeg's
   ``yuv4mpegdec.c`` / ``yuv4mpegenc.c`` (high-bit-depth ``C`` tags, little-endian samples).
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from fractions import Fraction
from pathlib import Path

from synth.errors import FormatError
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

__all__ = ["Y4MReader", "write_y4m", "parse_y4m_header", "format_y4m_header", "pack_picture", "C_TAGS"]

MAGIC = b"YUV4MPEG2"
_BARE_FRAME = b"FRAME\n"
_MAX_HEADER = 4096
_MAX_FRAME_LINE = 4096
_RATIO = re.compile(r"(\d{1,10}):(\d{1,10})")
_SIZE = re.compile(r"\d{1,9}")
_XTAG = re.compile(r"[\x21-\x7e]*")  # printable ASCII without spaces

#: C tag value -> (chroma format, bit depth, siting). Chroma formats other than
#: 420/422/444/mono are recognised so that they get a precise "not supported" error.
C_TAGS: dict[str, tuple[str, int, str | None]] = {
    "420jpeg": ("420", 8, "420jpeg"),
    "420mpeg2": ("420", 8, "420mpeg2"),
    "420paldv": ("420", 8, "420paldv"),
    "420": ("420", 8, "420"),
    "411": ("411", 8, None),
    "422": ("422", 8, None),
    "444": ("444", 8, None),
    "444alpha": ("444alpha", 8, None),
    "mono": ("mono", 8, None),
}
for _depth in (9, 10, 12, 14, 16):
    C_TAGS[f"420p{_depth}"] = ("420", _depth, None)
    C_TAGS[f"422p{_depth}"] = ("422", _depth, None)
    C_TAGS[f"444p{_depth}"] = ("444", _depth, None)
    C_TAGS[f"mono{_depth}"] = ("mono", _depth, None)
_SUPPORTED_CHROMA = {"420", "422", "444", "mono"}
_DEPTHS = {8, 9, 10, 12, 14, 16}


def _ratio(value: str, tag: str, source: str) -> Fraction | None:
    m = _RATIO.fullmatch(value)
    if not m:
        raise FormatError(f"{source}: header tag {tag} must be N:D with non-negative integers, got {value[:24]!r}")
    n, d = int(m.group(1)), int(m.group(2))
    if d == 0:
        if n == 0:
            return None  # 0:0 means unknown
        raise FormatError(f"{source}: header tag {tag} has a zero denominator: {value!r}")
    return Fraction(n, d)


def parse_y4m_header(line: bytes, source: str = "stream") -> ClipInfo:
    """Parse a YUV4MPEG2 stream header line (without its newline) into a `ClipInfo`.

    Parameters
    ----------
    line : bytes
        The header line, starting with ``YUV4MPEG2``.
    source : str
        Name used in error messages (usually the file name).

    Returns
    -------
    ClipInfo
        ``frame_count`` is 0 (the header does not say); ``frame_rate`` is 0 when the header says
        ``F0:0`` (unknown); ``extra`` holds X tags (``XKEY=VALUE`` -> ``{'KEY': 'VALUE'}``).

    Raises
    ------
    FormatError
        Wrong magic, non-ASCII header, empty tag (double space), unknown tag, missing or bad
        W / H, malformed F / A / I, unknown or unsupported C tag, sizes the chroma format cannot hold.

    Notes
    -----
    Tag grammar of the mjpegtools ``yuv4mpeg`` library and FFmpeg's YUV4MPEG2 demuxer; a tag
    given twice takes its last value, as there.
    """
    if not isinstance(line, (bytes, bytearray)):
        raise FormatError(f"{source}: header must be bytes")
    try:
        text = bytes(line).decode("ascii")
    except UnicodeDecodeError:
        raise FormatError(f"{source}: header line is not ASCII") from None
    parts = text.split(" ")
    if parts[0] != "YUV4MPEG2":
        raise FormatError(f"{source}: not a YUV4MPEG2 file (header starts {parts[0][:16]!r})")
    width = height = None
    frame_rate: Fraction | None = Fraction(25)
    interlacing = "p"
    aspect = None
    c_value = "420jpeg"
    extra: dict[str, str] = {}
    for token in parts[1:]:
        if not token:
            raise FormatError(f"{source}: header has an empty tag (two spaces in a row, or a trailing space)")
        tag, value = token[0], token[1:]
        if tag in "WH":
            if not _SIZE.fullmatch(value) or int(value) <= 0:
                raise FormatError(f"{source}: header tag {tag} must be a positive integer, got {value[:24]!r}")
            if tag == "W":
                width = int(value)
            else:
                height = int(value)
        elif tag == "F":
            frame_rate = _ratio(value, "F", source)
        elif tag == "I":
            if value not in ("p", "t", "b", "m", "?"):
                raise FormatError(f"{source}: header tag I must be p, t, b, m or ?, got {value[:24]!r}")
            interlacing = value
        elif tag == "A":
            aspect = _ratio(value, "A", source)
        elif tag == "C":
            c_value = value
        elif tag == "X":
            key, _, val = value.partition("=")
            extra[key] = val
        else:
            raise FormatError(f"{source}: unknown header tag {token[:16]!r} (known: W H F I A C X)")
    if width is None or height is None:
        raise FormatError(f"{source}: header lacks the {'W' if width is None else 'H'} tag")
    if c_value not in C_TAGS:
        raise FormatError(f"{source}: unknown chroma tag C{c_value[:24]}")
    chroma_format, depth, siting = C_TAGS[c_value]
    if chroma_format not in _SUPPORTED_CHROMA:
        raise FormatError(f"{source}: chroma tag C{c_value} is not supported (use 420, 422, 444 or mono)")
    check_geometry(width, height, chroma_format, depth, source=source)
    return ClipInfo(
        width=width,
        height=height,
        chroma_format=chroma_format,
        bit_depth=depth,
        frame_rate=frame_rate if frame_rate is not None else Fraction(0),
        interlacing=interlacing,
        pixel_aspect=aspect,
        container="y4m",
        chroma_siting=siting,
        extra=extra,
    )


def _c_tag(info: ClipInfo) -> str:
    if info.bit_depth not in _DEPTHS:
        raise FormatError(f"YUV4MPEG2 has no C tag for {info.bit_depth}-bit samples (8, 9, 10, 12, 14 or 16)")
    if info.chroma_format not in _SUPPORTED_CHROMA:
        raise FormatError(f"YUV4MPEG2 writing supports 420, 422, 444 and mono, got {info.chroma_format!r}")
    if info.chroma_format == "420" and info.bit_depth == 8:
        siting = info.chroma_siting
        return siting if siting in ("420jpeg", "420mpeg2", "420paldv", "420") else "420jpeg"
    if info.bit_depth == 8:
        return info.chroma_format
    if info.chroma_format == "mono":
        return f"mono{info.bit_depth}"
    return f"{info.chroma_format}p{info.bit_depth}"


def format_y4m_header(info: ClipInfo) -> bytes:
    """The header line (with its newline) for a clip described by `info`.

    Raises
    ------
    FormatError
        A format YUV4MPEG2 cannot express, or X tags holding spaces or non-printable characters.
    """
    check_geometry(info.width, info.height, info.chroma_format, info.bit_depth, source="YUV4MPEG2 header")
    fr = Fraction(info.frame_rate)
    if fr < 0:
        raise FormatError(f"YUV4MPEG2 frame rate must not be negative, got {fr}")
    rate = "0:0" if fr == 0 else f"{fr.numerator}:{fr.denominator}"
    interlacing = info.interlacing or "p"
    if interlacing not in ("p", "t", "b", "m", "?"):
        raise FormatError(f"YUV4MPEG2 interlacing must be p, t, b, m or ?, got {interlacing!r}")
    tags = [f"W{info.width}", f"H{info.height}", f"F{rate}", f"I{interlacing}"]
    if info.pixel_aspect is not None:
        a = Fraction(info.pixel_aspect)
        tags.append(f"A{a.numerator}:{a.denominator}")
    tags.append(f"C{_c_tag(info)}")
    for k, v in info.extra.items():
        tag = f"X{k}={v}" if v else f"X{k}"
        if not _XTAG.fullmatch(tag) or not k:
            raise FormatError(f"YUV4MPEG2 X tag {tag[:24]!r} must be printable ASCII without spaces")
        tags.append(tag)
    return ("YUV4MPEG2 " + " ".join(tags) + "\n").encode("ascii")


class Y4MReader(ReaderMixin):
    """Random-access reader of a YUV4MPEG2 file; one frame in memory at a time.

    Parameters
    ----------
    path : path-like
    check_range : bool, keyword-only
        For 9..15-bit clips, refuse frames holding samples above the bit depth's maximum (a sign of
        a wrong header or byte order). Costs one pass over the frame.

    Raises
    ------
    FormatError
        Missing, empty or unreadable file; bad header (see `parse_y4m_header`); a frame that does
        not start with a ``FRAME`` line; a truncated frame (checked on opening, for every frame).

    Notes
    -----
    When the file size is a whole number of bare ``FRAME`` lines plus frames, and the first and
    last ``FRAME`` lines sit where that says, frame offsets are computed (two small reads on
    opening); otherwise opening walks the ``FRAME`` lines (they may carry parameters, so their
    lengths can differ) with one small read per frame. No samples are read until asked, and
    each read checks its own ``FRAME`` line. Pictures returned by `read`
    own their buffer: later reads do not change them.
    """

    def __init__(self, path: str | os.PathLike, *, check_range: bool = True):
        self.path = Path(path)
        self.check_range = bool(check_range)
        self._plain = False
        src = str(self.path)
        self._file = PositionalFile(self.path, source=src)
        try:
            size = self._file.size
            if size == 0:
                raise FormatError(f"{src}: file is empty")
            head = bytes(self._file.read_at(0, min(size, _MAX_HEADER)))
            if not head.startswith(MAGIC) or (len(head) > len(MAGIC) and head[len(MAGIC)] not in b" \n"):
                raise FormatError(f"{src}: not a YUV4MPEG2 file (it does not start with 'YUV4MPEG2 ')")
            end = head.find(b"\n")
            if end < 0:
                raise FormatError(f"{src}: header line is not terminated within {_MAX_HEADER} bytes")
            self.info = parse_y4m_header(head[:end], src)
            self._frame_bytes = self.info.frame_bytes
            self._data_start = end + 1
            self._offsets, self._params = self._plain_index(size) or self._index(self._data_start, size)
            self.info.frame_count = len(self._offsets)
        except BaseException:
            self._file.close()
            raise

    def _plain_index(self, size: int):
        """Offsets computed, not walked, when every FRAME line looks bare (``FRAME\\n``).

        Taken when the file holds a whole number of bare frames and the first and last ``FRAME``
        lines are where that puts them; every read then checks its own ``FRAME`` line and falls
        back to walking the file if one carries parameters after all.
        """
        stride = len(_BARE_FRAME) + self._frame_bytes
        body = size - self._data_start
        if body <= 0 or body % stride:
            return None
        for pos in (self._data_start, size - stride):
            if bytes(self._file.read_at(pos, len(_BARE_FRAME))) != _BARE_FRAME:
                return None
        self._plain = True
        return range(self._data_start + len(_BARE_FRAME), size, stride), {}

    def _index(self, pos: int, size: int) -> tuple[list[int], dict[int, str]]:
        offsets: list[int] = []
        params: dict[int, str] = {}
        src = str(self.path)
        while pos < size:
            k = len(offsets)
            line = bytes(self._file.read_at(pos, min(_MAX_FRAME_LINE, size - pos)))
            nl = line.find(b"\n")
            if not line.startswith(b"FRAME"):
                if b"FRAME".startswith(line):
                    raise FormatError(f"{src}: frame {k} is truncated: the file ends inside its FRAME line")
                raise FormatError(f"{src}: frame {k} does not start with a FRAME line (byte offset {pos})")
            if nl < 0:
                if pos + len(line) >= size:
                    raise FormatError(f"{src}: frame {k} is truncated: the file ends inside its FRAME line")
                raise FormatError(f"{src}: frame {k}'s FRAME line is longer than {_MAX_FRAME_LINE} bytes")
            if nl > 5 and line[5:6] != b" ":
                raise FormatError(f"{src}: frame {k} does not start with a FRAME line (byte offset {pos})")
            if nl > 5:
                try:
                    params[k] = line[6:nl].decode("ascii")
                except UnicodeDecodeError:
                    raise FormatError(f"{src}: frame {k} has a non-ASCII FRAME line") from None
            data = pos + nl + 1
            if data + self._frame_bytes > size:
                raise FormatError(
                    f"{src}: frame {k} is truncated: expected {self._frame_bytes} bytes of samples, "
                    f"the file holds {size - data}"
                )
            offsets.append(data)
            pos = data + self._frame_bytes
        return offsets, params

    def __len__(self) -> int:
        return len(self._offsets)

    def frame_parameters(self, index: int) -> str:
        """The parameters on frame `index`'s ``FRAME`` line ('' when none)."""
        i = frame_index(index, len(self._offsets), source=str(self.path))
        return self._params.get(i, "")

    def read(self, index: int) -> Picture:
        """Read frame `index` (0-based; negative counts from the end).

        Raises
        ------
        FormatError
            Index out of range; file shrunk since opening; samples above the bit depth's range.
        """
        src = str(self.path)
        i = frame_index(index, len(self._offsets), source=src)
        skip = len(_BARE_FRAME) if self._plain else 0
        raw = self._file.read_at(self._offsets[i] - skip, self._frame_bytes + skip)
        if skip and bytes(raw[:skip]) != _BARE_FRAME:
            # a FRAME line with parameters after all: index the file the slow way and retry
            self._plain = False
            self._offsets, self._params = self._index(self._data_start, self._file.size)
            self.info.frame_count = len(self._offsets)
            return self.read(index)
        if len(raw) != self._frame_bytes + skip:
            raise FormatError(
                f"{src}: frame {i} is truncated: expected {self._frame_bytes} bytes, got {len(raw) - skip}"
            )
        pic = unpack_frame(raw, self.info, offset=skip)
        if self.check_range:
            check_sample_range(pic, source=src, index=i)
        return pic

    def close(self) -> None:
        self._file.close()


def write_y4m(path: str | os.PathLike, pictures: Iterable[Picture], info: ClipInfo | None = None) -> int:
    """Write pictures to a YUV4MPEG2 file atomically; returns the number of frames written.

    Parameters
    ----------
    path : path-like
    pictures : iterable of Picture
        Consumed one at a time (a generator keeps memory flat). All must share size, chroma
        format and bit depth.
    info : ClipInfo, optional
        Frame rate, interlacing, pixel aspect, 4:2:0 siting and X tags for the header; size and
        sample format always come from the pictures.

    Returns
    -------
    int
        Frames written.

    Raises
    ------
    FormatError
        No pictures, pictures of differing formats, or a format YUV4MPEG2 cannot hold (odd 4:2:0
        sizes, 11-bit samples...). Nothing is left at `path` then.
    """
    count = 0
    with atomic_output(path, "wb") as fh:
        first = None
        for pic in pictures:
            if not isinstance(pic, Picture):
                raise FormatError(f"{path}: item {count} is a {type(pic).__name__}, not a Picture")
            if first is None:
                first = pic
                hdr = ClipInfo(pic.width, pic.height, pic.chroma_format, pic.bit_depth)
                if info is not None:
                    hdr.frame_rate = info.frame_rate
                    hdr.interlacing = info.interlacing
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
