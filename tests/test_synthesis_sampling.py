"""The reference sampler (synth.synthesis.sampling) against independent interpolation.

References:
- bilinear: scipy.ndimage.map_coordinates with order=1 (linear spline) and mode='nearest' (edge
  replication);
- six-tap: the half-sample equations of ITU-T H.264 clause 8.4.2.2.1, written out here:
  b1 = E - 5F + 20G + 20H - 5I + J along a row, h1 the same down a column, j1 the same filter applied
  to b1 down a column; the standard rounds b = Clip1((b1 + 16) >> 5) and j = Clip1((j1 + 512) >> 10),
  the sampler keeps the unrounded b1 / 32 and j1 / 1024 (float32), so it lies within 1/2 of the
  standard's sample. Sample coordinates are clamped to the picture (Clip3), i.e. edge replication.
"""

import numpy as np
import pytest
import skimage.data
from scipy.ndimage import map_coordinates

from synth import ParameterError
from synth.synthesis.sampling import PlaneSampler

TAPS = (1, -5, 20, 20, -5, 1)


def _photo():
    return skimage.data.camera()[100:164, 200:280]  # a real photograph (scikit-image), 64 x 80


def _half_samples(plane):
    """H.264 clause 8.4.2.2.1 intermediate values b1 (x + 1/2), h1 (y + 1/2), j1 (both), int64."""
    g = np.pad(plane.astype(np.int64), 5, mode="edge")
    h, w = plane.shape

    def filt(a, axis, n):
        # value between i and i + 1 uses samples i - 2 .. i + 3
        return sum(c * np.take(a, np.arange(n) + 5 + k, axis=axis) for k, c in zip(range(-2, 4), TAPS))

    b1_all = filt(g, 1, w)  # rows still padded
    b1 = b1_all[5 : 5 + h]
    h1 = filt(g, 0, h)[:, 5 : 5 + w]
    j1 = filt(b1_all, 0, h)
    return b1, h1, j1


def test_integer_positions_return_the_samples():
    plane = _photo()
    yy, xx = np.mgrid[0:64, 0:80].astype(np.float32)
    for name in ("sixtap", "bicubic", "bilinear"):
        s = PlaneSampler(plane, interpolation=name)
        np.testing.assert_array_equal(s.sample_xy(xx * s.scale, yy * s.scale), plane.astype(np.float32))


def test_bilinear_matches_scipy_linear_interpolation():
    plane = _photo()
    rng = np.random.default_rng(1)
    # quarter- and eighth-sample positions (OpenCV's remap quantises to 1/32), some outside the picture
    x = (rng.integers(-16, 80 * 8 + 16, (40, 50)) / 8.0).astype(np.float32)
    y = (rng.integers(-16, 64 * 8 + 16, (40, 50)) / 8.0).astype(np.float32)
    got = PlaneSampler(plane, interpolation="bilinear").sample_xy(x, y)
    want = map_coordinates(plane.astype(np.float64), [y, x], order=1, mode="nearest")
    np.testing.assert_allclose(got, want, atol=2e-3)
    # chroma under 'sixtap' is bilinear too (H.264 clause 8.4.2.2.2)
    chroma = PlaneSampler(plane, interpolation="sixtap", chroma=True)
    assert chroma.scale == 1.0
    np.testing.assert_allclose(chroma.sample_xy(x, y), want, atol=2e-3)


def test_sixtap_half_samples_follow_h264_equations():
    plane = _photo()
    b1, h1, j1 = _half_samples(plane)
    s = PlaneSampler(plane, interpolation="sixtap")
    assert s.scale == 2.0
    yy, xx = np.mgrid[0:64, 0:80].astype(np.float32)
    got_b = s.sample_xy(2 * xx + 1, 2 * yy)  # (x + 1/2, y)
    got_h = s.sample_xy(2 * xx, 2 * yy + 1)  # (x, y + 1/2)
    got_j = s.sample_xy(2 * xx + 1, 2 * yy + 1)  # (x + 1/2, y + 1/2)
    np.testing.assert_allclose(got_b, b1 / 32.0, atol=1e-3)
    np.testing.assert_allclose(got_h, h1 / 32.0, atol=1e-3)
    np.testing.assert_allclose(got_j, j1 / 1024.0, atol=1e-3)
    # the standard's rounded and clipped samples are within 1/2 of the unrounded ones
    std_b = np.clip((b1 + 16) >> 5, 0, 255)
    std_j = np.clip((j1 + 512) >> 10, 0, 255)
    inside = (b1 >= 0) & (b1 <= 255 * 32)
    assert np.abs(got_b - std_b)[inside].max() <= 0.5 + 1e-4
    inside = (j1 >= 0) & (j1 <= 255 * 1024)
    assert np.abs(got_j - std_j)[inside].max() <= 0.5 + 1e-4
    # a quarter position is the mean of its two neighbours on the half-sample grid: a = (G + b) / 2
    # (H.264 derives it as (G + b + 1) >> 1)
    got_a = s.sample_xy(2 * xx + 0.5, 2 * yy)
    np.testing.assert_allclose(got_a, (plane + b1 / 32.0) / 2.0, atol=1e-3)


def test_unknown_filter_is_refused():
    with pytest.raises(ParameterError, match="interpolation"):
        PlaneSampler(_photo(), interpolation="nearest-neighbour")
