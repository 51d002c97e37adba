"""Read-only access to any video OpenCV can decode (mp4 and the like), as 4:2:0 8-bit pictures.

Decoded BGR frames are converted to Y'CbCr with the BT.601 matrix (ITU-R BT.601-7, studio range:
Y' in 16..235, Cb/Cr in 16..240) by default, or BT.709 (ITU-R BT.709-6) on request; chroma is
subsampled 2:1 both ways by averaging each 2x2 block (centre siting, as ``420jpeg``).
"""

from __future__ import annotations

import os
from fractions import Fraction
from pathlib import Path
from typing import Iterator

import cv2
import numpy as np

from synth.errors import FormatError, ParameterError
from synth.picture import ClipInfo, Picture

__all__ = ["VideoReader", "rgb_to_ycbcr420", "MATRICES"]

#: Luma coefficients (Kr, Kb) of the supported matrices.
MATRICES: dict[str, tuple[float, float]] = {"601": (0.299, 0.114), "709": (0.2126, 0.0722)}


def rgb_to_ycbcr420(bgr: np.ndarray, matrix: str = "601") -> Picture:
    """Convert an 8-bit BGR image (OpenCV order) to a 4:2:0 8-bit studio-range picture.

    Parameters
    ----------
    bgr : ndarray of uint8, shape (height, width, 3)
    matrix : {'601', '709'}
        ITU-R BT.601 or BT.709 luma coefficients.
    """
    if matrix not in MATRICES:
        raise ParameterError(f"matrix must be 601 or 709, got {matrix!r}")
    kr, kb = MATRICES[matrix]
    kg = 1.0 - kr - kb
    h, w = bgr.shape[:2]
    if h % 2 or w % 2:
        bgr = bgr[: h - h % 2, : w - w % 2]
    f = bgr.astype(np.float32) / 255.0
    b, g, r = f[..., 0], f[..., 1], f[..., 2]
    y = kr * r + kg * g + kb * b
    cb = (b - y) / (2.0 * (1.0 - kb))
    cr = (r - y) / (2.0 * (1.0 - kr))
    Y = 16.0 + 219.0 * y

    def down(c: np.ndarray) -> np.ndarray:
        c = 128.0 + 224.0 * c
        return 0.25 * (c[0::2, 0::2] + c[1::2, 0::2] + c[0::2, 1::2] + c[1::2, 1::2])

    return Picture.from_float((Y, down(cb), down(cr)), chroma_format="420", bit_depth=8)


class VideoReader:
    """Frames of a compressed video file decoded by OpenCV, converted to 4:2:0 8-bit.

    Random access decodes sequentially from the start (compressed streams rarely allow better);
    decoded pictures are cached per index so repeated access is cheap.
    """

    def __init__(self, path: str | os.PathLike, *, matrix: str = "601"):
        self.path = Path(path)
        if not self.path.exists():
            raise FormatError(f"{self.path}: no such file")
        if matrix not in MATRICES:
            raise ParameterError(f"matrix must be 601 or 709, got {matrix!r}")
        self.matrix = matrix
        cap = cv2.VideoCapture(str(self.path))
        if not cap.isOpened():
            raise FormatError(f"{self.path}: OpenCV cannot decode this file")
        fps = cap.get(cv2.CAP_PROP_FPS) or 25.0
        frames = []
        while True:
            ok, bgr = cap.read()
            if not ok:
                break
            frames.append(bgr)
        cap.release()
        if not frames:
            raise FormatError(f"{self.path}: no decodable frames")
        self._bgr = frames
        h, w = frames[0].shape[:2]
        self.info = ClipInfo(
            width=w - w % 2,
            height=h - h % 2,
            chroma_format="420",
            bit_depth=8,
            frame_count=len(frames),
            frame_rate=Fraction(fps).limit_denominator(1001),
            container=self.path.suffix.lstrip(".") or "video",
            chroma_siting="420jpeg",
        )

    def __len__(self) -> int:
        return len(self._bgr)

    def read(self, index: int) -> Picture:
        n = len(self._bgr)
        if not -n <= index < n:
            raise FormatError(f"{self.path}: frame index {index} out of range (clip has {n} frames)")
        return rgb_to_ycbcr420(self._bgr[index], self.matrix)

    def __iter__(self) -> Iterator[Picture]:
        for i in range(len(self)):
            yield self.read(i)

    def close(self) -> None:
        self._bgr = []

    def __enter__(self) -> "VideoReader":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
