"""Sampling the references: observations along candidate trajectories and endpoint patches.

Sub-sample positions are interpolated with OpenCV's ``remap``: 'bicubic' is the cubic convolution
kernel with a = -0.75 (R. G. Keys, "Cubic convolution interpolation for digital image processing",
IEEE TASSP 29(6), 1981, doi:10.1109/TASSP.1981.1163711, with OpenCV's coefficient), 'bilinear' the
2x2 linear kernel; positions are quantised to 1/32 sample by OpenCV. Outside the picture the
nearest edge sample is used (replicated border, as in motion-compensated prediction in ITU-T H.264
and H.265; common practice).
"""

from __future__ import annotations

import cv2
import numpy as np

from .errors import ParameterError
from .project import LandedVectors

__all__ = ["remap_plane", "endpoint_patches", "INTERPOLATION_FLAGS"]

INTERPOLATION_FLAGS = {"bicubic": cv2.INTER_CUBIC, "bilinear": cv2.INTER_LINEAR}


def remap_plane(plane: np.ndarray, map_x: np.ndarray, map_y: np.ndarray, *, interpolation: str) -> np.ndarray:
    """Sample a float32 plane at positions (map_x, map_y); result float32 of the maps' shape."""
    flag = INTERPOLATION_FLAGS.get(interpolation)
    if flag is None:
        raise ParameterError(f"interpolation must be one of {', '.join(INTERPOLATION_FLAGS)}, got {interpolation!r}")
    return cv2.remap(plane, map_x, map_y, flag, borderMode=cv2.BORDER_REPLICATE)


def endpoint_patches(
    past: np.ndarray, future: np.ndarray, landed: LandedVectors, *, margin: int, interpolation: str
):
    """Yield ``(index, past_patches, future_patches)`` per block size, patches of shape (n, m).

    The patch of a landed vector is its block's footprint at the target time (grown by ``margin``
    luma samples on each side), moved to the past and to the future endpoint.
    """
    sizes = np.stack([landed.bw, landed.bh], axis=1)
    if len(sizes) == 0:
        return
    uniq = np.unique(sizes, axis=0)
    for bw, bh in uniq:
        index = np.flatnonzero((landed.bw == bw) & (landed.bh == bh))
        pw, ph = int(bw) + 2 * margin, int(bh) + 2 * margin
        ox = np.arange(pw, dtype=np.float32) - np.float32((pw - 1) / 2.0)
        oy = np.arange(ph, dtype=np.float32) - np.float32((ph - 1) / 2.0)
        cx = landed.cx[index][:, None, None]
        cy = landed.cy[index][:, None, None]
        out = []
        for dx, dy, plane in (
            (landed.past_dx, landed.past_dy, past),
            (landed.future_dx, landed.future_dy, future),
        ):
            mx = (cx + dx[index][:, None, None]) + ox[None, None, :]
            my = (cy + dy[index][:, None, None]) + oy[None, :, None]
            mx = np.broadcast_to(mx, (len(index), ph, pw)).reshape(len(index) * ph, pw)
            my = np.broadcast_to(my, (len(index), ph, pw)).reshape(len(index) * ph, pw)
            # remap's maps are limited to 32767 rows: sample in chunks
            parts = []
            step = (32000 // ph) * ph
            for r0 in range(0, mx.shape[0], step):
                parts.append(
                    remap_plane(
                        plane,
                        np.ascontiguousarray(mx[r0 : r0 + step], dtype=np.float32),
                        np.ascontiguousarray(my[r0 : r0 + step], dtype=np.float32),
                        interpolation=interpolation,
                    )
                )
            out.append(np.concatenate(parts, axis=0).reshape(len(index), ph * pw))
        yield index, out[0], out[1]
