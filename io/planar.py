"""Planar sample layout shared by the YUV4MPEG2 and raw ``.yuv`` readers and writers.

One frame is the Y plane, then Cb, then Cr (none for monochrome), each row-major; samples are one
byte up to 8 bits and two bytes little-endian above (as FFmpeg's ``yuv420p10le`` and friends).
Chroma plane sizes follow `synth.picture.chroma_shape`.
"""

from __future__ import annotations

import operator
import os
import sys
import threading

import numpy as np

from synth.errors import FormatError, ParameterError
from synth.io.limits import MAX_PICTURE_SIDE
from synth.picture import CHROMA_FORMATS, ClipInfo, Picture, chroma_shape

__all__ = [
    "ReaderMixin",
    "check_geometry",
    "frame_size",
    "unpack_frame",
    "pack_picture",
    "check_sample_range",
    "PositionalFile",
    "frame_index",
]

_LITTLE = sys.byteorder == "little"


def check_geometry(width: int, height: int, chroma_format: str, bit_depth: int, *, source: str) -> None:
    """Reject sizes and formats a planar file cannot hold.

    Raises
    ------
    FormatError
        Non-positive sizes or sides above `synth.io.limits.MAX_PICTURE_SIDE`, unknown chroma format,
        bit depth outside 8..16, odd width or height for 4:2:0, odd width for 4:2:2.
    """
    if chroma_format not in CHROMA_FORMATS:
        raise FormatError(f"{source}: chroma format must be one of {', '.join(CHROMA_FORMATS)}, got {chroma_format!r}")
    if isinstance(bit_depth, bool) or not isinstance(bit_depth, (int, np.integer)) or not 8 <= bit_depth <= 16:
        raise FormatError(f"{source}: bit depth must be an integer 8..16, got {bit_depth!r}")
    if width <= 0 or height <= 0:
        raise FormatError(f"{source}: width and height must be positive, got {width}x{height}")
    if width > MAX_PICTURE_SIDE or height > MAX_PICTURE_SIDE:
        raise FormatError(
            f"{source}: {width}x{height} pictures are beyond the largest side synth reads ({MAX_PICTURE_SIDE} samples)"
        )
    if chroma_format == "420" and (width % 2 or height % 2):
        raise FormatError(f"{source}: 4:2:0 needs an even width and height, got {width}x{height}")
    if chroma_format == "422" and width % 2:
        raise FormatError(f"{source}: 4:2:2 needs an even width, got {width}")


def frame_size(info: ClipInfo) -> int:
    """Bytes of one frame's samples."""
    return info.frame_bytes


def unpack_frame(buf, info: ClipInfo, *, offset: int = 0) -> Picture:
    """Picture whose planes view `buf` from byte `offset` on (no copy when `buf` is writable and
    the host little-endian)."""
    wide = info.bit_depth > 8
    dtype = np.dtype("<u2") if wide else np.dtype(np.uint8)
    data = np.frombuffer(buf, dtype=dtype, count=info.frame_bytes // dtype.itemsize, offset=offset)
    if wide and not _LITTLE:
        data = data.astype(np.uint16)
    elif wide:
        data = data.view(np.uint16)
    if not data.flags.writeable:
        data = data.copy()
    h, w = info.height, info.width
    y = data[: h * w].reshape(h, w)
    cs = chroma_shape(h, w, info.chroma_format)
    if cs is None:
        return Picture(y, None, None, "mono", info.bit_depth)
    n = cs[0] * cs[1]
    cb = data[h * w : h * w + n].reshape(cs)
    cr = data[h * w + n : h * w + 2 * n].reshape(cs)
    return Picture(y, cb, cr, info.chroma_format, info.bit_depth)


def pack_picture(picture: Picture) -> bytes:
    """Planar bytes of a picture (16-bit little-endian above 8 bits)."""
    dtype = np.dtype("<u2") if picture.bit_depth > 8 else np.dtype(np.uint8)
    return b"".join(np.ascontiguousarray(p, dtype=dtype).tobytes() for p in picture.planes)


def check_sample_range(picture: Picture, *, source: str, index: int) -> None:
    """Raise when a 9..15-bit picture holds samples above its range (wrong bit depth or byte order)."""
    if 8 < picture.bit_depth < 16:
        top = max(int(p.max()) for p in picture.planes)
        if top > picture.max_value:
            raise FormatError(
                f"{source}: frame {index} holds sample value {top}, above the {picture.bit_depth}-bit maximum "
                f"{picture.max_value} (wrong bit depth, or big-endian samples?)"
            )


def frame_index(index, count: int, *, source: str) -> int:
    """Validate a frame index (negative counts from the end) and return it as 0..count-1."""
    try:
        i = operator.index(index)
    except TypeError:
        raise ParameterError(f"{source}: frame index must be an integer, got {index!r}") from None
    if count == 0:
        raise FormatError(f"{source}: frame index {i} out of range (the clip has no frames)")
    if not -count <= i < count:
        raise FormatError(f"{source}: frame index {i} out of range (clip has {count} frames: 0..{count - 1})")
    return i + count if i < 0 else i


class PositionalFile:
    """A read-only file read at explicit offsets (thread-safe), straight into preallocated buffers."""

    def __init__(self, path: str | os.PathLike, *, source: str):
        self.source = source
        try:
            self._fh = open(path, "rb", buffering=0)
        except FileNotFoundError:
            raise FormatError(f"{source}: no such file") from None
        except IsADirectoryError:
            raise FormatError(f"{source}: is a directory, not a clip") from None
        except OSError as exc:
            raise FormatError(f"{source}: cannot open: {exc.strerror or exc}") from None
        self._lock = threading.Lock()
        self.size = os.fstat(self._fh.fileno()).st_size

    def read_at(self, offset: int, size: int) -> np.ndarray:
        """Exactly `size` bytes from `offset` as a fresh uint8 array, or fewer at the end of the file.

        The array is not zero-filled first (the read overwrites it), and each call returns a new
        one, so pictures built on it own their samples.
        """
        buf = np.empty(size, np.uint8)
        view = memoryview(buf)
        got = 0
        with self._lock:
            self._fh.seek(offset)
            while got < size:
                n = self._fh.readinto(view[got:])
                if not n:
                    break
                got += n
        view.release()
        return buf if got == size else buf[:got]

    def close(self) -> None:
        self._fh.close()

    @property
    def closed(self) -> bool:
        return self._fh.closed


class ReaderMixin:
    """Iteration and context management shared by the clip readers.

    A reader defines ``__len__``, ``read(index) -> Picture`` and ``close()``; this mixin adds
    ``for picture in reader`` (in display order) and ``with reader: ...`` (closing it).
    """

    def __iter__(self):
        for i in range(len(self)):
            yield self.read(i)

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()
