"""Image sequences: numbered picture files named by a printf-style pattern such as ``frame_%03d.png``.

Reading accepts the still-image formats OpenCV decodes (PNG 8/16-bit, TIFF, BMP, JPEG, PPM/PGM);
grey images become neutral-chroma pictures, an alpha channel is dropped. R'G'B' is converted to
studio-range Y'CbCr with the BT.601 matrix by default or BT.709 (`synth.io.colour`), then
subsampled to the chosen chroma format (4:2:0 by default; odd sizes are cropped to even for 4:2:0,
width only for 4:2:2). Writing makes PNG files, 8-bit for 8-bit pictures and 16-bit above, each
written atomically.

Pattern grammar: one ``%d`` or ``%0Nd`` (N = 1..9) in the file name, ``%%`` for a literal percent
sign. A name without ``%`` is a one-picture sequence. The frames are the existing files whose
numbers form an unbroken run from the smallest one found.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np

from synth.errors import FormatError, ParameterError
from synth.io.atomic import atomic_write_bytes
from synth.io.colour import check_matrix, picture_to_rgb, rgb_to_picture
from synth.io.limits import MAX_PICTURE_SIDE
from synth.io.planar import ReaderMixin, frame_index
from synth.picture import ClipInfo, Picture, chroma_factors

__all__ = ["ImageSequenceReader", "write_images", "is_image_pattern", "IMAGE_SUFFIXES"]

#: Still-image suffixes read through OpenCV.
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".bmp", ".jpg", ".jpeg", ".ppm", ".pgm", ".pnm")


def is_image_pattern(path: str | os.PathLike) -> bool:
    """True when `path` names an image file or a printf-style image sequence."""
    p = str(path)
    return Path(p).suffix.lower() in IMAGE_SUFFIXES


def _split_pattern(pattern: str) -> tuple[str, str, int] | None:
    """(prefix, suffix, min digits) of a pattern's one number field, None when it has none."""
    name = Path(pattern).name
    if "%" in str(Path(pattern).parent):
        raise ParameterError(f"image pattern {pattern!r} must have its %d field in the file name, not the folder")
    fields = [m for m in re.finditer(r"%%|%(0[1-9])?d|%", name)]
    numbered = [m for m in fields if m.group(0) not in ("%%",)]
    bad = [m for m in numbered if m.group(0) == "%"]
    if bad or len(numbered) > 1:
        raise ParameterError(f"image pattern {pattern!r} must hold exactly one %d or %0Nd field (and %% for '%')")
    if not numbered:
        return None
    m = numbered[0]
    digits = int(m.group(1)) if m.group(1) else 1
    return name[: m.start()].replace("%%", "%"), name[m.end() :].replace("%%", "%"), digits


def _name_for(pattern: str, number: int) -> Path:
    parts = _split_pattern(pattern)
    p = Path(pattern)
    if parts is None:
        return p
    prefix, suffix, digits = parts
    return p.parent / f"{prefix}{number:0{digits}d}{suffix}"


_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def _check_png_size(path: Path) -> None:
    """Refuse a PNG whose header declares a side above the ceiling, before it is decoded."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(24)
    except OSError as exc:
        raise FormatError(f"{path}: cannot read this image: {exc.strerror or exc}") from None
    if len(head) == 24 and head[:8] == _PNG_MAGIC and head[12:16] == b"IHDR":
        w, h = int.from_bytes(head[16:20], "big"), int.from_bytes(head[20:24], "big")
        if w > MAX_PICTURE_SIDE or h > MAX_PICTURE_SIDE:
            raise FormatError(
                f"{path}: a {w}x{h} image is beyond the largest side synth reads ({MAX_PICTURE_SIDE} samples)"
            )


class ImageSequenceReader(ReaderMixin):
    """Pictures from numbered image files, converted to Y'CbCr.

    Parameters
    ----------
    pattern : str or path-like
        ``frame_%03d.png`` and the like (see the module docstring), or one image file.
    matrix : {'601', '709'}, keyword-only
        ITU-R BT.601-7 (default) or BT.709-6 conversion matrix, studio range.
    chroma_format : {'420', '422', '444', 'mono'}, keyword-only
    bit_depth : int, optional, keyword-only
        Output bit depth; default 8 for 8-bit images and 16 for 16-bit images.
    frame_rate : number, keyword-only
        Metadata only (default 25).

    Raises
    ------
    FormatError
        No file matches; a gap in the numbering is not an error (the run stops there) but files
        that OpenCV cannot decode, or whose size or depth differ from the first, are.
    ParameterError
        Bad pattern, matrix, chroma format or bit depth.
    """

    def __init__(
        self,
        pattern: str | os.PathLike,
        *,
        matrix: str = "601",
        chroma_format: str = "420",
        bit_depth: int | None = None,
        frame_rate=25,
    ):
        self.pattern = str(pattern)
        self.matrix = check_matrix(matrix)
        chroma_factors(chroma_format)
        self.chroma_format = chroma_format
        if bit_depth is not None and not 8 <= int(bit_depth) <= 16:
            raise ParameterError(f"bit_depth must be 8..16, got {bit_depth!r}")
        self._files = self._find()
        first = self._load(self._files[0], 0)
        self._shape = first.shape[:2]
        self._dtype = first.dtype
        self.bit_depth = int(bit_depth) if bit_depth is not None else (8 if first.dtype == np.uint8 else 16)
        h, w = self._shape
        fx, fy = chroma_factors(chroma_format)
        try:
            rate = Fraction(frame_rate).limit_denominator(1001)
        except (TypeError, ValueError):
            raise ParameterError(f"frame_rate must be a number, got {frame_rate!r}") from None
        self.info = ClipInfo(
            width=w - w % fx,
            height=h - h % fy,
            chroma_format=chroma_format,
            bit_depth=self.bit_depth,
            frame_count=len(self._files),
            frame_rate=rate,
            container=Path(self._files[0]).suffix.lstrip(".").lower(),
            chroma_siting="420jpeg" if chroma_format == "420" else None,
        )
        if self.info.width == 0 or self.info.height == 0:
            raise FormatError(f"{self._files[0]}: image of {w}x{h} is too small for {chroma_format}")

    def _find(self) -> list[Path]:
        parts = _split_pattern(self.pattern)
        p = Path(self.pattern)
        if parts is None:
            if not p.is_file():
                raise FormatError(f"{p}: no such file")
            return [p]
        prefix, suffix, digits = parts
        folder = p.parent
        if not folder.is_dir():
            raise FormatError(f"{self.pattern}: no such folder {folder}")
        rx = re.compile(re.escape(prefix) + r"([0-9]+)" + re.escape(suffix) + r"\Z")
        numbers = []
        for entry in os.scandir(folder):
            m = rx.match(entry.name)
            if m and entry.is_file() and entry.name == f"{prefix}{int(m.group(1)):0{digits}d}{suffix}":
                numbers.append(int(m.group(1)))
        if not numbers:
            raise FormatError(f"{self.pattern}: no file matches this pattern")
        numbers.sort()
        run = [numbers[0]]
        for n in numbers[1:]:
            if n != run[-1] + 1:
                break
            run.append(n)
        self.first_number = run[0]
        return [_name_for(self.pattern, n) for n in run]

    def _load(self, path: Path, index: int) -> np.ndarray:
        _check_png_size(path)
        try:
            img = cv2.imread(str(path), cv2.IMREAD_UNCHANGED)
        except cv2.error as exc:
            raise FormatError(
                f"{path}: OpenCV cannot decode this image (frame {index}): {str(exc).strip()[-80:]}"
            ) from None
        if img is None:
            raise FormatError(f"{path}: OpenCV cannot decode this image (frame {index})")
        if img.dtype not in (np.uint8, np.uint16):
            raise FormatError(f"{path}: samples of type {img.dtype} are not supported (8- or 16-bit images only)")
        if img.ndim == 3 and img.shape[2] == 4:
            img = img[..., :3]
        elif img.ndim == 3 and img.shape[2] == 1:
            img = img[..., 0]
        if img.ndim not in (2, 3):
            raise FormatError(f"{path}: unsupported image layout {img.shape}")
        return img

    def __len__(self) -> int:
        return len(self._files)

    def read(self, index: int) -> Picture:
        """Read and convert frame `index` (0-based from the first file of the run)."""
        i = frame_index(index, len(self._files), source=self.pattern)
        img = self._load(self._files[i], i)
        if img.shape[:2] != self._shape or img.dtype != self._dtype:
            raise FormatError(
                f"{self._files[i]}: {img.shape[1]}x{img.shape[0]} {img.dtype} differs from the first image "
                f"({self._shape[1]}x{self._shape[0]} {self._dtype})"
            )
        top = 255.0 if img.dtype == np.uint8 else 65535.0
        f = img.astype(np.float32) / top
        rgb = np.repeat(f[..., None], 3, axis=2) if f.ndim == 2 else f[..., ::-1]
        rgb = rgb[: self.info.height, : self.info.width]
        return rgb_to_picture(rgb, matrix=self.matrix, chroma_format=self.chroma_format, bit_depth=self.bit_depth)

    def close(self) -> None:
        pass


def write_images(
    pattern: str | os.PathLike,
    pictures: Iterable[Picture],
    info: ClipInfo | None = None,
    *,
    matrix: str = "601",
    start: int = 0,
) -> int:
    """Write pictures as numbered PNG files, each atomically; returns the number written.

    Parameters
    ----------
    pattern : str or path-like
        Printf-style pattern ending in ``.png``, e.g. ``out/frame_%04d.png``.
    pictures : iterable of Picture
    info : ClipInfo, optional
        Ignored (PNG files carry no frame rate); accepted for symmetry with the other writers.
    matrix : {'601', '709'}, keyword-only
        Y'CbCr to R'G'B' matrix (inverse of the reading conversion).
    start : int, keyword-only
        Number of the first file.

    Raises
    ------
    ParameterError
        Pattern without one number field, or not ending in ``.png``.
    """
    pattern = str(pattern)
    matrix = check_matrix(matrix)
    if Path(pattern).suffix.lower() != ".png":
        raise ParameterError(f"image output pattern must end in .png, got {pattern!r}")
    if _split_pattern(pattern) is None:
        raise ParameterError(f"image output pattern needs a %d or %0Nd field, got {pattern!r}")
    count = 0
    for pic in pictures:
        if not isinstance(pic, Picture):
            raise FormatError(f"{pattern}: item {count} is a {type(pic).__name__}, not a Picture")
        rgb = picture_to_rgb(pic, matrix=matrix)
        if pic.bit_depth <= 8:
            img = np.floor(rgb * 255.0 + 0.5).astype(np.uint8)
        else:
            img = np.floor(rgb * 65535.0 + 0.5).astype(np.uint16)
        ok, data = cv2.imencode(".png", np.ascontiguousarray(img[..., ::-1]))
        if not ok:
            raise FormatError(f"{pattern}: PNG encoding failed for picture {count}")
        atomic_write_bytes(_name_for(pattern, start + count), data.tobytes())
        count += 1
    if count == 0:
        raise FormatError(f"{pattern}: no pictures to write")
    return count
