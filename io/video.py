"""Read-only access to any video OpenCV can decode (mp4 and the like), as 4:2:0 8-bit pictures.

Decoded frames are converted from R'G'B' to studio-range Y'CbCr with the ITU-R BT.601-7 matrix by
default, or ITU-R BT.709-6 on request, and chroma is subsampled 2:1 both ways by averaging each
2x2 block (centre siting, as ``420jpeg``); see `synth.io.colour`. Odd sizes are cropped to even.

Compressed streams decode forwards: the reader keeps one decoder open and a small cache of
converted pictures, so sequential reads decode each frame once and nearby random reads are cheap;
reading an earlier frame than the decoder's position restarts decoding from the first frame.
"""

from __future__ import annotations

import operator
import os
from collections import OrderedDict
from collections.abc import Iterator
from fractions import Fraction
from pathlib import Path

import cv2

from synth.errors import FormatError, ParameterError
from synth.io.colour import MATRICES, check_matrix, rgb_to_ycbcr420
from synth.io.limits import MAX_PICTURE_SIDE
from synth.io.planar import ReaderMixin, frame_index
from synth.picture import ClipInfo, Picture

__all__ = ["VideoReader", "rgb_to_ycbcr420", "MATRICES"]


class VideoReader(ReaderMixin):
    """Frames of a compressed video file decoded by OpenCV, converted to 4:2:0 8-bit.

    Parameters
    ----------
    path : path-like
    matrix : {'601', '709'}, keyword-only
        Conversion matrix (ITU-R BT.601-7 or BT.709-6).
    cache_frames : int, keyword-only
        Converted pictures kept for repeated access (least recently used dropped first).

    Raises
    ------
    FormatError
        Missing file, or one OpenCV cannot open or decode a single frame of.

    Notes
    -----
    The frame count is found by decoding the stream once (container counts are often wrong);
    it is done lazily, on the first `len()`.
    """

    def __init__(self, path: str | os.PathLike, *, matrix: str = "601", cache_frames: int = 16):
        self.path = Path(path)
        if not self.path.exists():
            raise FormatError(f"{self.path}: no such file")
        if self.path.is_dir():
            raise FormatError(f"{self.path}: is a directory, not a clip")
        if self.path.stat().st_size == 0:
            raise FormatError(f"{self.path}: file is empty")
        self.matrix = check_matrix(matrix)
        if int(cache_frames) < 1:
            raise ParameterError(f"cache_frames must be >= 1, got {cache_frames!r}")
        self._cache_size = int(cache_frames)
        self._cache: OrderedDict[int, Picture] = OrderedDict()
        self._cap = None
        self._pos = 0  # index of the frame the open decoder returns next
        self._count: int | None = None
        self._open()
        declared = (
            int(self._cap.get(cv2.CAP_PROP_FRAME_WIDTH) or 0),
            int(self._cap.get(cv2.CAP_PROP_FRAME_HEIGHT) or 0),
        )
        if max(declared) > MAX_PICTURE_SIDE:
            self.close()
            raise FormatError(
                f"{self.path}: {declared[0]}x{declared[1]} video is beyond the largest side synth reads "
                f"({MAX_PICTURE_SIDE} samples)"
            )
        first = self._next_bgr()
        if first is None:
            self.close()
            raise FormatError(f"{self.path}: OpenCV decodes no frame of this file")
        self._remember(0, rgb_to_ycbcr420(first, self.matrix))
        fps = self._cap.get(cv2.CAP_PROP_FPS) or 25.0
        h, w = first.shape[:2]
        self.info = ClipInfo(
            width=w - w % 2,
            height=h - h % 2,
            chroma_format="420",
            bit_depth=8,
            frame_count=0,
            frame_rate=Fraction(fps).limit_denominator(1001),
            container=self.path.suffix.lstrip(".").lower() or "video",
            chroma_siting="420jpeg",
        )

    # -- decoder ---------------------------------------------------------------------------------
    def _open(self) -> None:
        if self._cap is not None:
            self._cap.release()
        try:
            cap = cv2.VideoCapture(str(self.path))
        except cv2.error as exc:
            raise FormatError(
                f"{self.path}: OpenCV cannot open this file as a video ({str(exc).strip()[-80:]})"
            ) from None
        if not cap.isOpened():
            cap.release()
            raise FormatError(f"{self.path}: OpenCV cannot open this file as a video")
        self._cap = cap
        self._pos = 0

    def _next_bgr(self):
        try:
            ok, bgr = self._cap.read()
        except cv2.error as exc:
            raise FormatError(f"{self.path}: frame {self._pos} cannot be decoded ({str(exc).strip()[-80:]})") from None
        if not ok:
            return None
        self._pos += 1
        return bgr

    def _remember(self, index: int, pic: Picture) -> None:
        self._cache[index] = pic
        self._cache.move_to_end(index)
        while len(self._cache) > self._cache_size:
            self._cache.popitem(last=False)

    # -- public ----------------------------------------------------------------------------------
    def __len__(self) -> int:
        if self._count is None:
            cap = cv2.VideoCapture(str(self.path))
            n = 0
            while cap.grab():
                n += 1
            cap.release()
            self._count = n
            self.info.frame_count = n
        return self._count

    def read(self, index: int) -> Picture:
        """Frame `index` (negative counts from the end, which needs the frame count)."""
        try:
            i = operator.index(index)
        except TypeError:
            raise ParameterError(f"{self.path}: frame index must be an integer, got {index!r}") from None
        if i < 0 or self._count is not None:
            i = frame_index(i, len(self), source=str(self.path))
        if i in self._cache:
            self._cache.move_to_end(i)
            return self._cache[i]
        if self._cap is None:
            raise FormatError(f"{self.path}: reader is closed")
        if i < self._pos:
            self._open()
        while self._pos <= i:
            at = self._pos
            bgr = self._next_bgr()
            if bgr is None:
                self._count = at if self._count is None else self._count
                self.info.frame_count = self._count
                raise FormatError(f"{self.path}: frame index {i} out of range (clip has {self._count} frames)")
            if at == i:
                pic = rgb_to_ycbcr420(bgr, self.matrix)
                if (pic.width, pic.height) != (self.info.width, self.info.height):
                    raise FormatError(f"{self.path}: frame {at} is {pic.width}x{pic.height}, unlike frame 0")
                self._remember(at, pic)
        return self._cache[i]

    def __iter__(self) -> Iterator[Picture]:
        i = 0
        while True:
            if self._count is not None and i >= self._count:
                return
            try:
                pic = self.read(i)
            except FormatError:
                if self._count is not None and i >= self._count:
                    return
                raise
            yield pic
            i += 1

    def close(self) -> None:
        if self._cap is not None:
            self._cap.release()
            self._cap = None
        self._cache.clear()
