"""Fractional-sample interpolation of reference pictures, as ITU-T H.264 specifies it.

Luma: the quarter-sample interpolation of ITU-T H.264 clause 8.4.2.2.1. Half-sample positions come
from the 6-tap filter (1, -5, 20, 20, -5, 1) / 32 (the centre position from the unrounded
intermediate values, / 1024); quarter-sample positions are the rounded-up average of the two nearest
integer or half-sample values. All in integer arithmetic, so results are bit-exact.

Chroma: the bilinear interpolation of clause 8.4.2.2.2 at 1/8 chroma sample for 4:2:0 (generally at
1 / (4 * subsampling factor)), weights ((D - xF)(D - yF), ...) with rounding.

Pictures are padded by replicating their edge samples before filtering: the standard's clamping of
sample coordinates to the picture (Clip3 in clause 8.4.2.2.1) is the same thing.
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError

__all__ = ["SIX_TAP", "luma_phases", "QuarterPelReference", "chroma_bilinear"]

#: The H.264 luma half-sample filter taps (clause 8.4.2.2.1, equation 8-241).
SIX_TAP = (1, -5, 20, 20, -5, 1)


def _six_tap(a: np.ndarray, axis: int) -> np.ndarray:
    """Unnormalised 6-tap half-sample value between positions i and i+1 along `axis`.

    Output position i is the half-sample between input samples i+2 and i+3 (the input carries 2
    samples of margin before and 3 after).
    """
    n = a.shape[axis] - 5

    def sl(k: int) -> np.ndarray:
        idx = [slice(None)] * a.ndim
        idx[axis] = slice(k, k + n)
        return a[tuple(idx)]

    return sl(0) - 5 * sl(1) + 20 * sl(2) + 20 * sl(3) - 5 * sl(4) + sl(5)


def luma_phases(plane: np.ndarray, *, pad: int, bit_depth: int = 8) -> np.ndarray:
    """All 16 quarter-sample phases of a luma plane, padded by `pad` samples on every side.

    Parameters
    ----------
    plane : ndarray of uint8 or uint16, shape (height, width)
    pad : int
        Samples of edge replication added on each side of the output.
    bit_depth : int

    Returns
    -------
    ndarray, shape (4, 4, height + 2 pad, width + 2 pad), dtype of `plane`
        ``phases[yFrac, xFrac][r, c]`` is the sample at position (c - pad + xFrac/4, r - pad + yFrac/4)
        of the picture.

    Notes
    -----
    ITU-T H.264 clause 8.4.2.2.1 (equations 8-241 .. 8-261 and Table 8-12). With G the integer sample,
    b/h the horizontal/vertical half samples, j the centre, m and s the half samples right of / below
    them, the quarter samples are a=(G+b+1)>>1, c=(H+b+1)>>1, d=(G+h+1)>>1, n=(M+h+1)>>1,
    f=(b+j+1)>>1, i=(h+j+1)>>1, k=(j+m+1)>>1, q=(j+s+1)>>1, e=(b+h+1)>>1, g=(b+m+1)>>1,
    p=(h+s+1)>>1, r=(m+s+1)>>1.
    """
    if plane.ndim != 2:
        raise ParameterError(f"luma plane must be 2-D, got shape {plane.shape}")
    if pad < 0:
        raise ParameterError(f"pad must be >= 0, got {pad}")
    top = (1 << bit_depth) - 1
    # margin: 2 before and 3 after for the 6 taps, plus 1 after for the m/s neighbours
    m0, m1 = 2, 4
    g = np.pad(plane.astype(np.int32), ((pad + m0, pad + m1), (pad + m0, pad + m1)), mode="edge")
    hp, wp = plane.shape[0] + 2 * pad, plane.shape[1] + 2 * pad
    # intermediate unrounded values on the grid shifted by the margin
    b1 = _six_tap(g, axis=1)  # rows: all (hp+6), cols: wp+1 half positions (i between i, i+1)
    h1 = _six_tap(g, axis=0)  # rows: hp+1, cols: all
    j1 = _six_tap(b1, axis=0)  # rows hp+1, cols wp+1

    def clip(v: np.ndarray) -> np.ndarray:
        return np.clip(v, 0, top)

    # after clipping every value fits the sample range: continue in a narrower type (faster)
    small = np.int16 if bit_depth <= 14 else np.int32
    G_full = g[m0 : m0 + hp + 1, m0 : m0 + wp + 1].astype(small)
    b_full = clip((b1[m0 : m0 + hp + 1, :] + 16) >> 5).astype(small)  # half sample right of G
    h_full = clip((h1[:, m0 : m0 + wp + 1] + 16) >> 5).astype(small)  # half sample below G
    j_full = clip((j1 + 512) >> 10).astype(small)

    G = G_full[:hp, :wp]
    H = G_full[:hp, 1 : wp + 1]
    M = G_full[1 : hp + 1, :wp]
    b = b_full[:hp, :wp]
    s = b_full[1 : hp + 1, :wp]
    h = h_full[:hp, :wp]
    m = h_full[:hp, 1 : wp + 1]
    j = j_full[:hp, :wp]

    def avg(u: np.ndarray, v: np.ndarray) -> np.ndarray:
        return (u + v + 1) >> 1

    out = np.empty((4, 4, hp, wp), dtype=plane.dtype)
    table = {
        (0, 0): G, (0, 1): avg(G, b), (0, 2): b, (0, 3): avg(H, b),
        (1, 0): avg(G, h), (1, 1): avg(b, h), (1, 2): avg(b, j), (1, 3): avg(b, m),
        (2, 0): h, (2, 1): avg(h, j), (2, 2): j, (2, 3): avg(j, m),
        (3, 0): avg(M, h), (3, 1): avg(h, s), (3, 2): avg(j, s), (3, 3): avg(m, s),
    }  # fmt: skip
    for (yf, xf), v in table.items():
        out[yf, xf] = v
    return out


class QuarterPelReference:
    """A reference luma plane prepared for quarter-sample block fetches.

    Holds the 16 H.264 phases (:func:`luma_phases`) flattened, so a block at integer position and
    quarter-sample vector is one ``numpy.take``.

    Parameters
    ----------
    plane : ndarray, shape (height, width)
    pad : int
        Margin of replicated samples; fetched blocks must stay inside it.
    bit_depth : int
    """

    def __init__(self, plane: np.ndarray, *, pad: int, bit_depth: int = 8, dtype=np.int16):
        self.height, self.width = plane.shape
        self.pad = int(pad)
        phases = luma_phases(plane, pad=pad, bit_depth=bit_depth)
        self.stride = phases.shape[3]
        self.plane_size = phases.shape[2] * phases.shape[3]
        self.flat = phases.reshape(-1).astype(dtype)

    def start_index(self, x: np.ndarray, y: np.ndarray, qx: np.ndarray, qy: np.ndarray) -> np.ndarray:
        """Flat index of the top-left sample of blocks at (x, y) displaced by quarter-sample (qx, qy)."""
        qx = np.asarray(qx, dtype=np.int64)
        qy = np.asarray(qy, dtype=np.int64)
        phase = (qy & 3) * 4 + (qx & 3)
        row = np.asarray(y, np.int64) + self.pad + (qy >> 2)
        col = np.asarray(x, np.int64) + self.pad + (qx >> 2)
        return phase * self.plane_size + row * self.stride + col

    def offsets(self, w: int, h: int) -> np.ndarray:
        """Flat offsets of a w x h block's samples from its top-left sample."""
        oy, ox = np.mgrid[0:h, 0:w]
        return (oy * self.stride + ox).ravel()

    def fetch(self, x, y, qx, qy, w: int, h: int) -> np.ndarray:
        """Blocks of size w x h at (x, y) displaced by (qx, qy) quarter samples, shape (n, h*w)."""
        idx = self.start_index(x, y, qx, qy)[:, None] + self.offsets(w, h)[None, :]
        return self.flat.take(idx)


def chroma_bilinear(
    plane: np.ndarray, vx: np.ndarray, vy: np.ndarray, *, den_x: int, den_y: int, bit_depth: int = 8
) -> np.ndarray:
    """Predict every sample of a chroma plane from itself displaced by per-sample fractional vectors.

    Parameters
    ----------
    plane : ndarray, shape (h, w)
        Reference chroma plane.
    vx, vy : ndarray of int, shape (h, w)
        Displacement of each output sample in units of 1/den_x and 1/den_y chroma samples.
    den_x, den_y : int
        Vector denominators (8 and 8 for 4:2:0, as H.264 clause 8.4.1.4 / 8.4.2.2.2).

    Returns
    -------
    ndarray of the plane's dtype, shape (h, w)

    Notes
    -----
    ITU-T H.264 clause 8.4.2.2.2, equation 8-266:
    ((D-xF)(D-yF) A + xF (D-yF) B + (D-xF) yF C + xF yF D' + round) / (Dx Dy), with sample
    coordinates clamped to the picture (edge replication).
    """
    h, w = plane.shape
    vx = np.asarray(vx, dtype=np.int64)
    vy = np.asarray(vy, dtype=np.int64)
    xs = np.arange(w, dtype=np.int64)[None, :] + np.floor_divide(vx, den_x)
    ys = np.arange(h, dtype=np.int64)[:, None] + np.floor_divide(vy, den_y)
    xf = np.mod(vx, den_x)
    yf = np.mod(vy, den_y)
    x0 = np.clip(xs, 0, w - 1)
    x1 = np.clip(xs + 1, 0, w - 1)
    y0 = np.clip(ys, 0, h - 1)
    y1 = np.clip(ys + 1, 0, h - 1)
    p = plane.astype(np.int64)
    acc = (
        (den_x - xf) * (den_y - yf) * p[y0, x0]
        + xf * (den_y - yf) * p[y0, x1]
        + (den_x - xf) * yf * p[y1, x0]
        + xf * yf * p[y1, x1]
    )
    total = den_x * den_y
    out = (acc + total // 2) // total
    return np.clip(out, 0, (1 << bit_depth) - 1).astype(plane.dtype)
