"""Temporary stand-in for the coded-motion estimator (to be replaced by `synth.motion.estimate_field`).

A block field from OpenCV's DIS optical flow (T. Kroeger et al., "Fast optical flow using dense
inverse search", ECCV 2016, doi:10.1007/978-3-319-46493-0_29): the median flow over each block,
rounded to quarter-pel. Private: only used until the coded-motion estimator is merged.
"""

from __future__ import annotations

import cv2
import numpy as np

from .field import VectorField
from .picture import Picture


def dis_block_field(
    coded: Picture, reference: Picture, *, coded_time: float, reference_time: float, block: int = 16
) -> VectorField:
    """Block field on `coded` pointing to `reference` (median DIS flow per block, quarter-pel)."""
    a = coded.y if coded.bit_depth == 8 else (coded.y >> (coded.bit_depth - 8)).astype(np.uint8)
    b = reference.y if reference.bit_depth == 8 else (reference.y >> (reference.bit_depth - 8)).astype(np.uint8)
    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM)
    flow = dis.calc(np.ascontiguousarray(a), np.ascontiguousarray(b), None)
    H, W = a.shape
    xs, ys, ws, hs, dxs, dys = [], [], [], [], [], []
    for y in range(0, H, block):
        for x in range(0, W, block):
            h, w = min(block, H - y), min(block, W - x)
            f = flow[y : y + h, x : x + w].reshape(-1, 2)
            m = np.median(f, axis=0)
            xs.append(x)
            ys.append(y)
            ws.append(w)
            hs.append(h)
            dxs.append(int(np.round(m[0] * 4)))
            dys.append(int(np.round(m[1] * 4)))
    return VectorField.from_arrays(
        width=W, height=H, coded_time=coded_time, reference_time=reference_time, x=xs, y=ys, w=ws, h=hs, dx=dxs, dy=dys
    )
