"""R'G'B' <-> Y'CbCr conversion for images and compressed video, with chroma subsampling.

Matrices: ITU-R BT.601-7 (Kr = 0.299, Kb = 0.114) and ITU-R BT.709-6 (Kr = 0.2126, Kb = 0.0722).
Quantisation is studio ("limited") range at n bits, as in BT.709-6 part 1, item 4.6 / BT.601-7
clause 2.5.3: ``Y' = round((219 E'Y + 16) 2^(n-8))``, ``C = round((224 E'C + 128) 2^(n-8))``, with
R'G'B' full range in [0, 1]. Chroma is subsampled by averaging each block of samples it covers (for
4:2:0, each 2x2 block), which sites chroma at the block centre (as ``420jpeg``); upsampling for
writing is bilinear on the same siting. Rounding is half up, then clipping to the n-bit range.
"""

from __future__ import annotations

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture, chroma_factors

__all__ = ["MATRICES", "check_matrix", "rgb_to_picture", "picture_to_rgb", "rgb_to_ycbcr420"]

#: Luma coefficients (Kr, Kb) of the supported matrices.
MATRICES: dict[str, tuple[float, float]] = {"601": (0.299, 0.114), "709": (0.2126, 0.0722)}


def check_matrix(matrix) -> str:
    """Return the matrix name as a string ('601' or '709'), or raise `ParameterError`."""
    m = str(matrix)
    if m not in MATRICES:
        raise ParameterError(f"matrix must be 601 or 709, got {matrix!r}")
    return m


def _subsample(c: np.ndarray, fx: int, fy: int) -> np.ndarray:
    if fx == 1 and fy == 1:
        return c
    h, w = c.shape
    return c.reshape(h // fy, fy, w // fx, fx).mean(axis=(1, 3))


def rgb_to_picture(rgb: np.ndarray, *, matrix: str = "601", chroma_format: str = "420", bit_depth: int = 8) -> Picture:
    """Convert full-range R'G'B' in [0, 1] to a studio-range Y'CbCr picture.

    Parameters
    ----------
    rgb : ndarray of float, shape (height, width, 3), R, G, B order
        Sizes must suit the chroma format (even for 4:2:0); callers crop first.
    matrix : {'601', '709'}, keyword-only
        ITU-R BT.601-7 or BT.709-6 luma coefficients.
    chroma_format : {'420', '422', '444', 'mono'}, keyword-only
    bit_depth : int, keyword-only
        8..16.

    Returns
    -------
    Picture

    Raises
    ------
    ParameterError
        Unknown matrix, bad bit depth, sizes the chroma format cannot hold.
    """
    kr, kb = MATRICES[check_matrix(matrix)]
    if not 8 <= int(bit_depth) <= 16:
        raise ParameterError(f"bit_depth must be 8..16, got {bit_depth!r}")
    fx, fy = chroma_factors(chroma_format)
    h, w = rgb.shape[:2]
    if h % fy or w % fx:
        raise ParameterError(f"a {chroma_format} picture needs sizes divisible by {fx}x{fy}, got {w}x{h}")
    rgb = rgb.astype(np.float32, copy=False)
    r, g, b = rgb[..., 0], rgb[..., 1], rgb[..., 2]
    ey = kr * r + (1.0 - kr - kb) * g + kb * b
    scale = float(1 << (int(bit_depth) - 8))
    y = (219.0 * ey + 16.0) * scale
    if chroma_format == "mono":
        return Picture.from_float((y,), chroma_format="mono", bit_depth=int(bit_depth))
    ecb = (b - ey) / (2.0 * (1.0 - kb))
    ecr = (r - ey) / (2.0 * (1.0 - kr))
    cb = (224.0 * _subsample(ecb, fx, fy) + 128.0) * scale
    cr = (224.0 * _subsample(ecr, fx, fy) + 128.0) * scale
    return Picture.from_float((y, cb, cr), chroma_format=chroma_format, bit_depth=int(bit_depth))


def picture_to_rgb(picture: Picture, *, matrix: str = "601") -> np.ndarray:
    """Convert a studio-range Y'CbCr picture to full-range R'G'B' in [0, 1] (float32, clipped).

    The inverse of `rgb_to_picture`'s matrix; chroma is upsampled bilinearly (centre siting).
    Monochrome pictures give grey.
    """
    kr, kb = MATRICES[check_matrix(matrix)]
    kg = 1.0 - kr - kb
    scale = float(1 << (picture.bit_depth - 8))
    ey = (picture.y.astype(np.float32) / scale - 16.0) / 219.0
    if picture.chroma_format == "mono":
        rgb = np.repeat(ey[..., None], 3, axis=2)
        return np.clip(rgb, 0.0, 1.0)
    h, w = picture.height, picture.width

    def up(c: np.ndarray) -> np.ndarray:
        c = (c.astype(np.float32) / scale - 128.0) / 224.0
        if c.shape != (h, w):
            c = cv2.resize(c, (w, h), interpolation=cv2.INTER_LINEAR)
        return c

    ecb, ecr = up(picture.cb), up(picture.cr)
    r = ey + 2.0 * (1.0 - kr) * ecr
    b = ey + 2.0 * (1.0 - kb) * ecb
    g = (ey - kr * r - kb * b) / kg
    return np.clip(np.stack([r, g, b], axis=-1), 0.0, 1.0)


def rgb_to_ycbcr420(bgr: np.ndarray, matrix: str = "601") -> Picture:
    """Convert an 8-bit BGR image (OpenCV order) to a 4:2:0 8-bit picture, cropping odd sizes to even."""
    h, w = bgr.shape[:2]
    bgr = bgr[: h - h % 2, : w - w % 2]
    rgb = bgr[..., ::-1].astype(np.float32) / 255.0
    return rgb_to_picture(rgb, matrix=matrix, chroma_format="420", bit_depth=8)
