"""Sampling the references: observations along candidate trajectories and endpoint patches.

Sub-sample positions are interpolated by one of four named filters:

- 'sixtap' (default): the luma reference is first upsampled by two in each direction, the half-sample
  positions computed with the six-tap filter (1, -5, 20, 20, -5, 1) / 32 of ITU-T H.264 clause
  8.4.2.2.1 (separably, so the centre half-sample position is filtered both ways), then positions
  in between are interpolated bilinearly on the upsampled grid (as H.264 derives quarter-sample
  luma positions from integer and half-sample ones). Chroma planes are interpolated bilinearly
  (as H.264 chroma, clause 8.4.2.2.2).
- 'bicubic': cubic convolution with a = -0.75 (R. G. Keys, "Cubic convolution interpolation for
  digital image processing", IEEE TASSP 29(6), 1981, doi:10.1109/TASSP.1981.1163711, with OpenCV's
  coefficient), on float32 samples.
- 'bilinear': the 2x2 linear kernel on float32 samples.
- 'lanczos': the Lanczos windowed sinc with a = 4, an 8x8 kernel (C. E. Duchon, "Lanczos
  filtering in one and two dimensions", J. Applied Meteorology 18(8), 1979,
  doi:10.1175/1520-0450(1979)018<1016:LFIOAT>2.0.CO;2; OpenCV's ``INTER_LANCZOS4``), on float32
  samples. Of the four it keeps the most of the references' detail at fractional positions, which
  is what an encoder using the picture as a reference values: its own motion search can follow a
  shift but cannot undo blur (measured in `tests/benchmarks/results/encoder-value.md`).

All use OpenCV's ``remap`` (positions quantised to 1/32 of its grid). Outside the picture the
nearest edge sample is used (replicated border, as in motion-compensated prediction in ITU-T H.264
and H.265; common practice).
"""

from __future__ import annotations

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.synthesis.project import LandedVectors

__all__ = ["PlaneSampler", "remap_plane", "endpoint_patches", "INTERPOLATION_FLAGS", "SIXTAP"]

INTERPOLATION_FLAGS = {"bicubic": cv2.INTER_CUBIC, "bilinear": cv2.INTER_LINEAR, "lanczos": cv2.INTER_LANCZOS4}
#: Half-sample filter of ITU-T H.264 clause 8.4.2.2.1.
SIXTAP = np.array([1, -5, 20, 20, -5, 1], np.float32) / 32.0


def remap_plane(plane: np.ndarray, map_x: np.ndarray, map_y: np.ndarray | None, *, interpolation: str) -> np.ndarray:
    """Sample a float32 plane at positions (map_x, map_y) (or a 2-channel map_x); float32 result."""
    flag = INTERPOLATION_FLAGS.get(interpolation)
    if flag is None:
        raise ParameterError(f"interpolation must be one of {', '.join(INTERPOLATION_FLAGS)}, got {interpolation!r}")
    return cv2.remap(plane, map_x, map_y, flag, borderMode=cv2.BORDER_REPLICATE)


def _halfpel_upsample(plane: np.ndarray) -> np.ndarray:
    """Plane upsampled by two: even positions are the samples, odd ones six-tap half-samples."""
    h, w = plane.shape
    kernel = SIXTAP
    # value at x + 1/2 uses samples x-2 .. x+3: anchor 2 of the 6 taps
    hor = cv2.filter2D(plane, cv2.CV_32F, kernel[None, :], anchor=(2, 0), borderType=cv2.BORDER_REPLICATE)
    ver = cv2.filter2D(plane, cv2.CV_32F, kernel[:, None], anchor=(0, 2), borderType=cv2.BORDER_REPLICATE)
    dia = cv2.filter2D(hor, cv2.CV_32F, kernel[:, None], anchor=(0, 2), borderType=cv2.BORDER_REPLICATE)
    # interleave: rows (h, 2, w, 2) -> (2h, 2w); cv2.merge writes each pair of planes straight
    # into its (row-strided) half of the result (a copy, several times faster than strided numpy
    # assignment)
    up = np.empty((h, 2, w, 2), np.float32)
    for half, pair in ((0, [plane, hor]), (1, [ver, dia])):
        dst = up[:, half]
        got = cv2.merge(pair, dst=dst)
        if not np.shares_memory(got, up):  # the binding made a new array: copy it in
            dst[...] = got
    return up.reshape(2 * h, 2 * w)


class PlaneSampler:
    """Samples one reference plane at arbitrary positions with a named filter (float32 throughout).

    Parameters
    ----------
    plane : ndarray, 2-D
        Integer or float samples.
    interpolation : {'sixtap', 'bicubic', 'bilinear', 'lanczos'}
    chroma : bool
        With 'sixtap', a chroma plane is interpolated bilinearly (as chroma in ITU-T H.264 clause
        8.4.2.2.2) instead of through the half-sample grid.
    """

    def __init__(self, plane: np.ndarray, *, interpolation: str, chroma: bool = False):
        self.interpolation = interpolation
        f = plane.astype(np.float32)
        if interpolation == "sixtap":
            self.scale = 1.0 if chroma else 2.0
            self._src = f if chroma else _halfpel_upsample(f)
            self._flag = cv2.INTER_LINEAR
        elif interpolation in INTERPOLATION_FLAGS:
            self.scale = 1.0
            self._src = f
            self._flag = INTERPOLATION_FLAGS[interpolation]
        else:
            raise ParameterError(
                f"interpolation must be one of sixtap, {', '.join(INTERPOLATION_FLAGS)}, got {interpolation!r}"
            )

    def sample_xy(self, map_x: np.ndarray, map_y: np.ndarray) -> np.ndarray:
        """Samples at (map_x, map_y) (float32, same 2-D shape), positions *already multiplied by*
        :attr:`scale`; float32 result."""
        return cv2.remap(self._src, map_x, map_y, self._flag, borderMode=cv2.BORDER_REPLICATE)


def endpoint_patches(past: PlaneSampler, future: PlaneSampler, landed: LandedVectors, *, margin: int):
    """Yield ``(index, past_patches, future_patches)`` per block size, patches of shape (n, m).

    The patch of a landed vector is its block's footprint at the target time (grown by ``margin``
    luma samples on each side), moved to the past and to the future endpoint, sampled with the
    samplers' filter.
    """
    if len(landed.bw) == 0:
        return
    # distinct (width, height) pairs in lexicographic order, through one integer key per block
    # (np.unique with axis=0 is several times slower)
    key = np.unique((landed.bw.astype(np.int64) << 32) | landed.bh.astype(np.int64))
    for bw, bh in zip((key >> 32).tolist(), (key & 0xFFFFFFFF).tolist()):
        index = np.flatnonzero((landed.bw == bw) & (landed.bh == bh))
        pw, ph = int(bw) + 2 * margin, int(bh) + 2 * margin
        ox = np.arange(pw, dtype=np.float32) - np.float32((pw - 1) / 2.0)
        oy = np.arange(ph, dtype=np.float32) - np.float32((ph - 1) / 2.0)
        cx = landed.cx[index][:, None, None]
        cy = landed.cy[index][:, None, None]
        out = []
        for dx, dy, sampler in ((landed.past_dx, landed.past_dy, past), (landed.future_dx, landed.future_dy, future)):
            sc = np.float32(sampler.scale)
            mx = ((cx + dx[index][:, None, None]) + ox[None, None, :]) * sc
            my = ((cy + dy[index][:, None, None]) + oy[None, :, None]) * sc
            mx = np.broadcast_to(mx, (len(index), ph, pw)).reshape(len(index) * ph, pw)
            my = np.broadcast_to(my, (len(index), ph, pw)).reshape(len(index) * ph, pw)
            # remap's maps are limited to 32767 rows: sample in chunks
            parts = []
            step = (32000 // ph) * ph
            for r0 in range(0, mx.shape[0], step):
                parts.append(
                    sampler.sample_xy(
                        np.ascontiguousarray(mx[r0 : r0 + step], dtype=np.float32),
                        np.ascontiguousarray(my[r0 : r0 + step], dtype=np.float32),
                    )
                )
            out.append(np.concatenate(parts, axis=0).reshape(len(index), ph * pw))
        yield index, out[0], out[1]
