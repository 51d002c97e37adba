"""File input and output for synth: clips, pictures and (later) vector fields.

This package lives in the repository's ``io/`` folder and installs as ``synth.io`` (a top-level
package named ``io`` would shadow Python's standard library). It knows files and bytes, nothing
about motion or estimation.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable, Protocol

from synth.errors import FormatError
from synth.picture import ClipInfo, Picture

from .atomic import atomic_output, atomic_write_bytes, atomic_write_text
from .fields import fields_to_csv, read_fields, write_fields
from .video import VideoReader, rgb_to_ycbcr420
from .y4m import Y4MReader, write_y4m

__all__ = [
    "ClipReader",
    "open_clip",
    "write_clip",
    "Y4MReader",
    "VideoReader",
    "write_y4m",
    "rgb_to_ycbcr420",
    "atomic_output",
    "atomic_write_bytes",
    "atomic_write_text",
    # vector-field files (issue 3)
    "write_fields",
    "read_fields",
    "fields_to_csv",
]


class ClipReader(Protocol):
    """What every clip reader offers: metadata, length, random access and iteration."""

    info: ClipInfo

    def __len__(self) -> int: ...
    def read(self, index: int) -> Picture: ...
    def close(self) -> None: ...


def open_clip(path: str | os.PathLike, **options) -> ClipReader:
    """Open a clip for reading, choosing the reader from the file name.

    ``.y4m`` is read as YUV4MPEG2; anything else is handed to OpenCV's decoder (mp4 and the like).
    """
    path = Path(path)
    if not path.exists():
        raise FormatError(f"{path}: no such file")
    suffix = path.suffix.lower()
    if suffix == ".y4m":
        return Y4MReader(path)
    return VideoReader(path, **options)


def write_clip(path: str | os.PathLike, pictures: Iterable[Picture], info: ClipInfo | None = None) -> int:
    """Write pictures to a clip file, atomically; the format follows the file name."""
    path = Path(path)
    if path.suffix.lower() == ".y4m":
        return write_y4m(path, pictures, info)
    raise FormatError(f"{path}: cannot write this kind of file (use .y4m)")
