"""Stripe processing gives bit-identical results to whole-picture processing.

Until the synthesiser's ``rows=`` lands, the striping logic is checked on stand-in functions whose
output rows depend only on input rows within a known reach: a separable 9-tap filter from SciPy
(`scipy.ndimage.correlate1d`, nearest-edge extension) and OpenCV's bilinear `cv2.remap` with
vertical displacements bounded by the reach (motion-compensated sampling, replicated border).
The pictures are real photographs from scikit-image's data (reference data set).
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from scipy import ndimage

from synth.errors import ParameterError
from synth.study.stripes import plan_stripes, run_striped


@pytest.fixture(scope="module")
def photo() -> np.ndarray:
    from skimage import data

    return data.astronaut()[..., 1].astype(np.float32)  # 512x512, green channel


def test_plan_covers_every_row_once_on_the_chroma_grid():
    for height, rows, align in [(2160, 256, 2), (288, 100, 2), (17, 4, 1), (10, 64, 2), (2, 1, 2)]:
        stripes = plan_stripes(height, stripe_rows=rows, align=align)
        covered = np.concatenate([np.arange(a, b) for a, b in stripes])
        assert np.array_equal(covered, np.arange(height))
        assert all(a % align == 0 for a, _ in stripes)
    with pytest.raises(ParameterError, match="stripe_rows"):
        plan_stripes(100, stripe_rows=0)


def _filter(x: np.ndarray) -> np.ndarray:
    k = np.array([1, -3, 6, 14, 20, 14, 6, -3, 1], np.float32) / 56.0  # reach 4 rows
    return ndimage.correlate1d(ndimage.correlate1d(x, k, axis=0, mode="nearest"), k, axis=1, mode="nearest")


@pytest.mark.parametrize("stripe_rows", [1, 7, 64, 100, 511, 512, 4096])
def test_striped_filter_is_bit_identical(photo, stripe_rows):
    whole = _filter(photo)
    striped = run_striped(lambda a0, a1: _filter(photo[a0:a1]), photo.shape[0], stripe_rows=stripe_rows, halo=4)
    assert striped.dtype == whole.dtype and np.array_equal(striped, whole)


def test_too_small_halo_is_not_identical(photo):
    # The check can fail: with less overlap than the filter's reach, stripe seams differ.
    whole = _filter(photo)
    striped = run_striped(lambda a0, a1: _filter(photo[a0:a1]), photo.shape[0], stripe_rows=64, halo=2)
    assert not np.array_equal(striped, whole)


def test_striped_motion_compensated_sampling_is_bit_identical(photo):
    h, w = photo.shape
    rng = np.random.default_rng(7)
    reach = 6
    # Smooth vertical and horizontal displacements, |dy| <= reach - 1 (bilinear taps reach one more row).
    dy = cv2.resize(
        rng.uniform(-(reach - 1), reach - 1, (8, 8)).astype(np.float32), (w, h), interpolation=cv2.INTER_CUBIC
    )
    dy = np.clip(dy, -(reach - 1), reach - 1)
    dx = cv2.resize(rng.uniform(-9, 9, (8, 8)).astype(np.float32), (w, h), interpolation=cv2.INTER_CUBIC)
    gx = np.arange(w, dtype=np.float32)[None, :] + dx
    gy = np.arange(h, dtype=np.float32)[:, None] + dy

    def sample(a0: int, a1: int) -> np.ndarray:
        return cv2.remap(
            photo[a0:a1], gx[a0:a1], gy[a0:a1] - np.float32(a0), cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE
        )

    whole = sample(0, h)
    for rows in (16, 50, 128):
        assert np.array_equal(run_striped(sample, h, stripe_rows=rows, halo=reach), whole)


# --- the synthesiser itself (synth.synthesise with rows=) ---------------------------------------


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """Two pictures 4 apart of a demo clip (or of real footage), cropped, with an estimated field."""
    from study_support import study_clip_files

    from synth import estimate_field
    from synth.io import open_clip
    from synth.study.clipsource import ClipView

    clip = study_clip_files(tmp_path_factory.mktemp("clips"))[0]
    view = ClipView(open_clip(clip), window=[0, 0, 160, 144])
    past, future, truth = view.read(0), view.read(4), view.read(2)
    field = estimate_field(future, past, coded_time=4, reference_time=0, qp=27)
    return past, future, truth, field


@pytest.mark.parametrize("stripe_rows", [2, 30, 64, 100])
def test_synthesise_striped_is_bit_identical_to_the_whole_picture(pair, stripe_rows):
    from synth import synthesise
    from synth.study import synthesise_striped

    past, future, _, field = pair
    whole = synthesise(past, future, [field], t=0.5)
    striped = synthesise_striped(past, future, [field], t=0.5, stripe_rows=stripe_rows)
    for a, b in zip(whole.planes, striped.planes):
        assert a.dtype == b.dtype and np.array_equal(a, b)
