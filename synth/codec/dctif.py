"""Quarter-pel luma interpolation with the H.265 / HEVC 8-tap DCT-based interpolation filter.

The fractional sample at horizontal phase ``p/4`` (p = 0..3) is ``sum_k f_p[k] * s[x + k - 3] / 64``
with the luma filter coefficients ``fL`` of ITU-T H.265, fractional sample interpolation process
(clause 8.5.3.3.3; clause number from memory, coefficients are the well-known DCT-IF taps):

====  ===================================
p     f_p[0..7]
====  ===================================
0     0, 0, 0, 64, 0, 0, 0, 0
1     -1, 4, -10, 58, 17, -5, 1, 0
2     -1, 4, -11, 40, 40, -11, 4, -1
3     0, 1, -5, 17, 58, -10, 4, -1
====  ===================================

It is applied separably, horizontally then vertically. Unlike the standard we keep the
intermediate values in float32 instead of shifting them to 14-bit integers, so the result differs
from a conforming decoder's by rounding only. Samples outside the plane repeat the nearest edge
sample (reference picture padding, as in H.264 / H.265 motion compensation).
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError

__all__ = ["LUMA_FILTER", "quarter_pel_phases", "shifted_view"]

#: H.265 luma interpolation filter taps per quarter-sample phase (sum 64), taps at offsets -3..+4.
LUMA_FILTER: np.ndarray = np.array(
    [
        [0, 0, 0, 64, 0, 0, 0, 0],
        [-1, 4, -10, 58, 17, -5, 1, 0],
        [-1, 4, -11, 40, 40, -11, 4, -1],
        [0, 1, -5, 17, 58, -10, 4, -1],
    ],
    dtype=np.float32,
)

_TAP_LO = 3  # taps reach 3 samples before ...
_TAP_HI = 4  # ... and 4 samples after the integer position


def _filter_axis(a: np.ndarray, axis: int, phase: int, out_len: int) -> np.ndarray:
    """Apply the phase's taps along `axis`; `a` carries _TAP_LO/_TAP_HI extra samples there."""
    taps = LUMA_FILTER[phase] / np.float32(64.0)
    acc = None
    for k in range(8):
        if taps[k] == 0.0:
            continue
        sl = [slice(None)] * a.ndim
        sl[axis] = slice(k, k + out_len)
        term = taps[k] * a[tuple(sl)]
        acc = term if acc is None else acc + term
    return acc


def quarter_pel_phases(plane: np.ndarray, *, pad: int) -> np.ndarray:
    """All 16 quarter-sample phases of a plane, each padded by `pad` samples on every side.

    Parameters
    ----------
    plane : ndarray, shape (height, width)
        Integer or float samples.
    pad : int >= 0
        Border (in whole samples) to provide around the picture, for displaced reads.

    Returns
    -------
    ndarray of float32, shape (4, 4, height + 2 pad, width + 2 pad)
        ``out[fy, fx, y, x]`` is the interpolated sample at position
        ``(x - pad + fx / 4, y - pad + fy / 4)`` of the plane.

    Notes
    -----
    Implements the separable H.265 luma filter (ITU-T H.265 clause 8.5.3.3.3), in float32.
    """
    if pad < 0:
        raise ParameterError(f"pad must be >= 0, got {pad}")
    p = np.asarray(plane, dtype=np.float32)
    if p.ndim != 2:
        raise ParameterError(f"plane must be 2-D, got shape {p.shape}")
    h, w = p.shape
    big = np.pad(p, ((pad + _TAP_LO, pad + _TAP_HI), (pad + _TAP_LO, pad + _TAP_HI)), mode="edge")
    oh, ow = h + 2 * pad, w + 2 * pad
    out = np.empty((4, 4, oh, ow), dtype=np.float32)
    for fx in range(4):
        horiz = _filter_axis(big, 1, fx, ow)  # rows still carry the vertical margin
        for fy in range(4):
            out[fy, fx] = _filter_axis(horiz, 0, fy, oh)
    return out


def shifted_view(phases: np.ndarray, ox: int, oy: int, *, pad: int, height: int, width: int) -> np.ndarray:
    """The plane displaced by a quarter-pel offset: sample (x, y) is the plane at (x + ox/4, y + oy/4).

    `phases` comes from :func:`quarter_pel_phases` with the same `pad`; the integer part of the
    offset must stay within the pad.
    """
    ix, fx = ox >> 2, ox & 3
    iy, fy = oy >> 2, oy & 3
    if abs(ix) > pad or abs(iy) > pad:
        raise ParameterError(f"offset ({ox}, {oy}) quarter-pel reaches past the padding of {pad} samples")
    return phases[fy, fx, pad + iy : pad + iy + height, pad + ix : pad + ix + width]
