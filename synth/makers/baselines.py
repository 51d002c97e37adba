"""Baselines the synthesiser is measured against (luma and chroma, no coded vectors needed).

- :func:`reference_average`: the mean of the two references (no motion at all).
- :func:`dis_interpolate`: optical-flow interpolation with OpenCV's DIS optical flow, medium preset
  (T. Kroeger et al., "Fast optical flow using dense inverse search", ECCV 2016,
  doi:10.1007/978-3-319-46493-0_29): the flow is computed both ways between the references, the
  flows from the target time to each reference are approximated from them as in H. Jiang et al.,
  "Super SloMo: high quality estimation of multiple intermediate frames for video interpolation",
  CVPR 2018 (equation 4), each reference is warped to the target time (bilinear, replicated border)
  and the two are averaged with weights (1 - t) and t.
"""

from __future__ import annotations

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["reference_average", "dis_interpolate", "dis_flows"]


def _check(past: Picture, future: Picture, t: float) -> None:
    if not past.same_format(future):
        raise ParameterError("past and future pictures differ in size, chroma format or bit depth")
    if not 0.0 < float(t) < 1.0:
        raise ParameterError(f"t must lie strictly between 0 and 1, got {t!r}")


def reference_average(past: Picture, future: Picture, *, t: float = 0.5) -> Picture:
    """Co-located mean of the two references, weighted (1 - t) and t."""
    _check(past, future, t)
    planes = [
        (1.0 - t) * a.astype(np.float32) + t * b.astype(np.float32) for a, b in zip(past.planes, future.planes)
    ]
    return Picture.from_float(planes, chroma_format=past.chroma_format, bit_depth=past.bit_depth)


def _as8(plane: np.ndarray, bit_depth: int) -> np.ndarray:
    if bit_depth == 8:
        return np.ascontiguousarray(plane)
    return np.ascontiguousarray((plane >> (bit_depth - 8)).astype(np.uint8))


def dis_flows(past: Picture, future: Picture) -> tuple[np.ndarray, np.ndarray]:
    """DIS (medium preset) flows past->future and future->past, float32 (H, W, 2)."""
    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM)
    a, b = _as8(past.y, past.bit_depth), _as8(future.y, future.bit_depth)
    return dis.calc(a, b, None), dis.calc(b, a, None)


def dis_interpolate(past: Picture, future: Picture, *, t: float = 0.5, flows=None) -> Picture:
    """Optical-flow interpolation at time ``t`` (see the module docstring).

    Parameters
    ----------
    past, future : Picture
    t : float
        Target time in (0, 1).
    flows : (ndarray, ndarray), optional
        Precomputed :func:`dis_flows` (to time the flow and the warp separately, or reuse the flows
        for several ``t``).

    Returns
    -------
    Picture
    """
    _check(past, future, t)
    f01, f10 = dis_flows(past, future) if flows is None else flows
    ft0 = -(1 - t) * t * f01 + t * t * f10
    ft1 = (1 - t) ** 2 * f01 - t * (1 - t) * f10
    fx, fy = (1, 1) if past.chroma_format == "mono" else past.chroma_factors
    out = []
    for i, (p, q) in enumerate(zip(past.planes, future.planes)):
        if i == 0:
            g0, g1 = ft0, ft1
        else:
            g0 = np.stack([ft0[::fy, ::fx, 0] / fx, ft0[::fy, ::fx, 1] / fy], -1)
            g1 = np.stack([ft1[::fy, ::fx, 0] / fx, ft1[::fy, ::fx, 1] / fy], -1)
            g0, g1 = g0[: p.shape[0], : p.shape[1]], g1[: p.shape[0], : p.shape[1]]
        h, w = p.shape
        gx, gy = np.meshgrid(np.arange(w, dtype=np.float32), np.arange(h, dtype=np.float32))
        wp = cv2.remap(p.astype(np.float32), gx + g0[..., 0], gy + g0[..., 1], cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
        wf = cv2.remap(q.astype(np.float32), gx + g1[..., 0], gy + g1[..., 1], cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
        out.append((1.0 - t) * wp + t * wf)
    return Picture.from_float(out, chroma_format=past.chroma_format, bit_depth=past.bit_depth)
