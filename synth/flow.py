"""Dense flow fields: the one layout used in synth, and warping with it.

Layout: a flow is a float32 array of shape ``(height, width, 2)``; ``flow[..., 0]`` is the horizontal
and ``flow[..., 1]`` the vertical displacement in luma samples (OpenCV's x-first layout, so OpenCV's
optical-flow results need no conversion). ``flow`` lives on picture A and points from each pixel of A
to where its content is on picture B: content of A at (x, y) is at (x + fx, y + fy) on B.
"""

from __future__ import annotations

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["check_flow", "dis_flow", "luma8", "sample_with_flow", "scale_flow_to_plane"]

_INTERPOLATION = {"nearest": cv2.INTER_NEAREST, "bilinear": cv2.INTER_LINEAR, "bicubic": cv2.INTER_CUBIC}


def check_flow(flow: np.ndarray, height: int, width: int) -> np.ndarray:
    """Validate a flow against a picture size and return it as float32."""
    flow = np.asarray(flow)
    if flow.shape != (height, width, 2):
        raise ParameterError(f"flow must have shape ({height}, {width}, 2), got {flow.shape}")
    if not np.all(np.isfinite(flow)):
        raise ParameterError("flow holds NaN or infinite displacements")
    return flow.astype(np.float32, copy=False)


def sample_with_flow(plane: np.ndarray, flow: np.ndarray, *, interpolation: str = "bicubic") -> np.ndarray:
    """Sample `plane` at (x + fx, y + fy) for every pixel (x, y) of the flow's grid.

    Returns a float32 array of the flow's height and width; positions outside the plane take the
    nearest edge sample (replicated border, as in motion-compensated prediction in ITU-T H.264 /
    H.265, common practice).
    """
    if interpolation not in _INTERPOLATION:
        raise ParameterError(f"interpolation must be one of {', '.join(_INTERPOLATION)}, got {interpolation!r}")
    h, w = flow.shape[:2]
    gx = np.arange(w, dtype=np.float32)[None, :] + flow[..., 0]
    gy = np.arange(h, dtype=np.float32)[:, None] + flow[..., 1]
    return cv2.remap(
        plane.astype(np.float32, copy=False), gx, gy, _INTERPOLATION[interpolation], borderMode=cv2.BORDER_REPLICATE
    )


def scale_flow_to_plane(flow: np.ndarray, factor_x: int, factor_y: int) -> np.ndarray:
    """Flow for a chroma plane subsampled by (factor_x, factor_y): sampled at the chroma grid, scaled."""
    if factor_x == 1 and factor_y == 1:
        return flow
    sub = flow[::factor_y, ::factor_x].astype(np.float32)
    return np.stack([sub[..., 0] / factor_x, sub[..., 1] / factor_y], axis=-1)


def luma8(picture: Picture) -> np.ndarray:
    """The luma plane of `picture` as 8-bit samples (deeper samples rounded to the nearest 8-bit value)."""
    y = picture.y
    if picture.bit_depth == 8:
        return np.ascontiguousarray(y)
    shift = picture.bit_depth - 8
    return np.clip((y.astype(np.uint32) + (1 << (shift - 1))) >> shift, 0, 255).astype(np.uint8)


def dis_flow(a: np.ndarray, b: np.ndarray, *, preset: str = "medium") -> np.ndarray:
    """Dense flow on 8-bit plane `a` pointing to `b` with OpenCV's DIS ('ultrafast', 'fast', 'medium')."""
    presets = {
        "ultrafast": cv2.DISOPTICAL_FLOW_PRESET_ULTRAFAST,
        "fast": cv2.DISOPTICAL_FLOW_PRESET_FAST,
        "medium": cv2.DISOPTICAL_FLOW_PRESET_MEDIUM,
    }
    dis = cv2.DISOpticalFlow_create(presets[preset])
    return dis.calc(a, b, None).astype(np.float32)
