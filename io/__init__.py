"""File input and output for synth: clips, pictures and vector fields.

This package lives in the repository's ``io/`` folder and installs as ``synth.io`` (a top-level
package named ``io`` would shadow Python's standard library). It knows files and bytes, nothing
about motion or estimation.

Formats (chosen from the file name by `open_clip` and `write_clip`):

- ``*.y4m``: YUV4MPEG2, any chroma format and bit depth (`Y4MReader`, `write_y4m`);
- ``*.yuv``: raw planar, geometry from the caller or the file name (`RawYUVReader`, `write_yuv`);
- ``*.png`` or a pattern such as ``frame_%03d.png``: image sequence, PNG 8/16-bit and other stills,
  BT.601 or BT.709 conversion (`ImageSequenceReader`, `write_images`);
- anything else: any video OpenCV decodes, read only, 4:2:0 8-bit (`VideoReader`).

Vector fields: ``*.json`` (versioned, readable) and ``*.npz`` through `write_fields` / `read_fields`,
CSV export with `fields_to_csv` (see :mod:`synth.io.fields`). Corrective block offsets:
``synth-offsets`` JSON through `write_offsets` / `read_offsets` (see :mod:`synth.io.offsets_file`).
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Protocol

from synth.errors import FormatError, ParameterError
from synth.lazy import lazy_exports

if TYPE_CHECKING:  # the readers are imported on first use (start-up stays cheap)
    from synth.picture import ClipInfo, Picture

_EXPORTS = {
    **dict.fromkeys(("atomic_output", "atomic_write_bytes", "atomic_write_text"), "synth.io.atomic"),
    **dict.fromkeys(("MATRICES", "picture_to_rgb", "rgb_to_picture", "rgb_to_ycbcr420"), "synth.io.colour"),
    **dict.fromkeys(("fields_to_csv", "read_fields", "write_fields"), "synth.io.fields"),
    **dict.fromkeys(("ImageSequenceReader", "is_image_pattern", "write_images"), "synth.io.images"),
    **dict.fromkeys(("read_offsets", "write_offsets"), "synth.io.offsets_file"),
    **dict.fromkeys(("RawYUVReader", "geometry_from_name", "parse_size", "write_yuv"), "synth.io.rawyuv"),
    "VideoReader": "synth.io.video",
    **dict.fromkeys(("Y4MReader", "format_y4m_header", "parse_y4m_header", "write_y4m"), "synth.io.y4m"),
    "read_sidecar": "synth.io.sidecar",
}
__getattr__, _lazy_dir = lazy_exports(__name__, _EXPORTS)

__all__ = [
    "ClipReader",
    "open_clip",
    "write_clip",
    "clip_kind",
    "describe_kind",
    "Y4MReader",
    "RawYUVReader",
    "ImageSequenceReader",
    "VideoReader",
    "write_y4m",
    "write_yuv",
    "write_images",
    "parse_y4m_header",
    "format_y4m_header",
    "parse_size",
    "geometry_from_name",
    "rgb_to_picture",
    "picture_to_rgb",
    "rgb_to_ycbcr420",
    "MATRICES",
    "atomic_output",
    "atomic_write_bytes",
    "atomic_write_text",
    # vector-field files (issue 3)
    "write_fields",
    "read_fields",
    "fields_to_csv",
    # corrective block offsets (synth.offset_field)
    "write_offsets",
    "read_offsets",
    # export sidecars (synth export)
    "read_sidecar",
]


def __dir__() -> list[str]:
    return sorted(set(__all__) | set(globals()))


class ClipReader(Protocol):
    """What every clip reader offers: metadata, length, random access, iteration, closing."""

    info: ClipInfo

    def __len__(self) -> int: ...
    def read(self, index: int) -> Picture: ...
    def close(self) -> None: ...
    def __enter__(self): ...
    def __exit__(self, *exc) -> None: ...


#: Options each kind of reader accepts through `open_clip`.
_OPTIONS = {
    "y4m": {"check_range"},
    "yuv": {"width", "height", "size", "chroma_format", "bit_depth", "frame_rate", "check_range"},
    "images": {"matrix", "chroma_format", "bit_depth", "frame_rate"},
    "video": {"matrix", "cache_frames"},
}
_DESCRIPTIONS = {
    "y4m": "YUV4MPEG2",
    "yuv": "raw planar YUV",
    "images": "image sequence",
    "video": "compressed video (OpenCV decode)",
}


def clip_kind(path: str | os.PathLike) -> str:
    """The kind of clip a file name names: 'y4m', 'yuv', 'images' or 'video'."""
    suffix = Path(str(path)).suffix.lower()
    if suffix == ".y4m":
        return "y4m"
    if suffix == ".yuv":
        return "yuv"
    from synth.io.images import is_image_pattern

    if is_image_pattern(path):
        return "images"
    return "video"


def describe_kind(kind: str) -> str:
    """Human name of a clip kind."""
    return _DESCRIPTIONS[kind]


def open_clip(path: str | os.PathLike, **options) -> ClipReader:
    """Open a clip for reading, choosing the reader from the file name.

    Parameters
    ----------
    path : path-like
        ``.y4m`` (YUV4MPEG2), ``.yuv`` (raw planar), an image file or printf-style image pattern
        (``frame_%03d.png``), or any video OpenCV decodes.
    **options
        Passed to the reader. Options that do not apply to the reader (e.g. ``size`` for a
        ``.y4m``) raise `ParameterError`; options given as None are dropped, so a command line
        can pass all of its options through.

    Returns
    -------
    ClipReader
        Use it as a context manager, or call ``close()``.

    Raises
    ------
    FormatError
        Missing, empty or malformed file (see each reader).
    ParameterError
        Options the reader does not take, or bad option values.
    """
    options = {k: v for k, v in options.items() if v is not None}
    kind = clip_kind(path)
    unknown = sorted(set(options) - _OPTIONS[kind])
    if unknown:
        raise ParameterError(f"{path}: {', '.join(unknown)} does not apply to a {_DESCRIPTIONS[kind]} file")
    if kind == "images":
        from synth.io.images import ImageSequenceReader

        return ImageSequenceReader(path, **options)
    p = Path(path)
    if not p.exists():
        raise FormatError(f"{p}: no such file")
    if kind == "y4m":
        from synth.io.y4m import Y4MReader

        return Y4MReader(p, **options)
    if kind == "yuv":
        from synth.io.rawyuv import RawYUVReader

        return RawYUVReader(p, **options)
    from synth.io.video import VideoReader

    return VideoReader(p, **options)


def write_clip(path: str | os.PathLike, pictures: Iterable[Picture], info: ClipInfo | None = None, **options) -> int:
    """Write pictures to a clip file, atomically; the format follows the file name.

    ``.y4m`` (`write_y4m`), ``.yuv`` (`write_yuv`) or a ``.png`` pattern with a ``%d`` field
    (`write_images`; takes ``matrix`` and ``start``). Returns the number of pictures written.

    Raises
    ------
    FormatError
        A kind of file that cannot be written, or pictures the format cannot hold.
    """
    kind = clip_kind(path)
    if kind == "images":
        from synth.io.images import write_images

        return write_images(path, pictures, info, **options)
    if options:
        raise ParameterError(
            f"{path}: writing {_DESCRIPTIONS.get(kind, kind)} takes no options, got {', '.join(options)}"
        )
    if kind == "y4m":
        from synth.io.y4m import write_y4m

        return write_y4m(path, pictures, info)
    if kind == "yuv":
        from synth.io.rawyuv import write_yuv

        return write_yuv(path, pictures, info)
    raise FormatError(f"{path}: cannot write this kind of file (use .y4m, .yuv or a .png pattern such as f_%04d.png)")
