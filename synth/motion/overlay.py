"""Drawing a vector field over its coded picture: block outlines and arrows (OpenCV drawing).

Colours (BGR): outlines of inter blocks in amber, intra blocks outlined and tinted in violet,
arrows in cyan with a dark under-stroke so they read on light and dark pictures. Arrows start at
the block centre and end where the block's content lies on the reference picture (the sign
convention of :mod:`synth.field`).
"""

from __future__ import annotations

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = ["draw_field_overlay"]

_OUTLINE = (40, 170, 250)
_INTRA = (200, 60, 170)
_ARROW = (240, 230, 40)
_SHADOW = (30, 30, 30)


def draw_field_overlay(picture: Picture, field: VectorField, *, scale: int = 1) -> np.ndarray:
    """Render `field` over the luma of `picture` as an 8-bit BGR image.

    Parameters
    ----------
    picture : Picture
        The coded picture of the field.
    field : VectorField
    scale : int
        Magnification 1..8 (small pictures read better at 2 or 3).

    Returns
    -------
    ndarray of uint8, shape (height * scale, width * scale, 3)

    Raises
    ------
    ParameterError
        Field and picture sizes differ, or `scale` is out of range.
    """
    if (field.width, field.height) != (picture.width, picture.height):
        raise ParameterError(
            f"field is for {field.width}x{field.height} pictures, the picture is {picture.width}x{picture.height}"
        )
    if isinstance(scale, bool) or not isinstance(scale, (int, np.integer)) or not 1 <= scale <= 8:
        raise ParameterError(f"scale must be an integer in 1..8, got {scale!r}")
    y = picture.y.astype(np.float32) * (255.0 / picture.max_value)
    gray = np.clip(y + 0.5, 0, 255).astype(np.uint8)
    if scale > 1:
        gray = cv2.resize(gray, None, fx=scale, fy=scale, interpolation=cv2.INTER_NEAREST)
    img = cv2.cvtColor(gray, cv2.COLOR_GRAY2BGR)
    tint = img.copy()
    for x, yy, w, h, intra in zip(
        field.x.tolist(), field.y.tolist(), field.w.tolist(), field.h.tolist(), field.intra.tolist()
    ):
        if intra:
            cv2.rectangle(tint, (x * scale, yy * scale), ((x + w) * scale - 1, (yy + h) * scale - 1), _INTRA, -1)
    img = cv2.addWeighted(img, 0.7, tint, 0.3, 0)
    for x, yy, w, h, intra in zip(
        field.x.tolist(), field.y.tolist(), field.w.tolist(), field.h.tolist(), field.intra.tolist()
    ):
        cv2.rectangle(
            img, (x * scale, yy * scale), ((x + w) * scale - 1, (yy + h) * scale - 1), _INTRA if intra else _OUTLINE, 1
        )
    rows = zip(field.x.tolist(), field.y.tolist(), field.w.tolist(), field.h.tolist(),
               field.dx.tolist(), field.dy.tolist(), field.intra.tolist())  # fmt: skip
    for x, yy, w, h, dx, dy, intra in rows:
        if intra or (dx == 0 and dy == 0):
            continue
        cx, cy = (x + w / 2) * scale, (yy + h / 2) * scale
        ex, ey = cx + dx / 4 * scale, cy + dy / 4 * scale
        p0 = (int(round(cx)), int(round(cy)))
        p1 = (int(round(ex)), int(round(ey)))
        length = float(np.hypot(ex - cx, ey - cy))
        tip = min(0.4, 6.0 / length) if length > 0 else 0.3
        cv2.arrowedLine(img, p0, p1, _SHADOW, 3, cv2.LINE_AA, tipLength=tip)
        cv2.arrowedLine(img, p0, p1, _ARROW, 1, cv2.LINE_AA, tipLength=tip)
    return img
