"""Metrics against scikit-image's reference implementations and textbook identities."""

import numpy as np
import pytest
import skimage.data
from skimage.metrics import peak_signal_noise_ratio, structural_similarity

from synth import ParameterError, Picture
from synth.metrics import mean_absolute_error, picture_metrics, picture_psnr, plane_psnr, ssim, weighted_psnr


def _photos():
    # Real photographs shipped with scikit-image (skimage.data).
    return {
        "camera": skimage.data.camera(),
        "astronaut_green": skimage.data.astronaut()[..., 1],
        "coins": skimage.data.coins(),
    }


def _distorted(plane, seed, top=255):
    rng = np.random.default_rng(seed)
    noisy = plane.astype(np.float64) + rng.normal(0, 0.03 * top, plane.shape) + 0.02 * top
    return np.clip(np.round(noisy), 0, top).astype(plane.dtype)


@pytest.mark.parametrize("name", ["camera", "astronaut_green", "coins"])
def test_psnr_and_ssim_match_scikit_image_on_photographs(name):
    ref = _photos()[name][:160, :200]
    test = _distorted(ref, seed=1)
    # Reference: scikit-image's peak_signal_noise_ratio and structural_similarity configured as
    # Wang et al. 2004 (Gaussian 11x11 window, sigma 1.5, population covariance, K1 0.01, K2 0.03).
    want_psnr = peak_signal_noise_ratio(ref, test, data_range=255)
    want_ssim = structural_similarity(
        ref, test, gaussian_weights=True, sigma=1.5, use_sample_covariance=False, data_range=255
    )
    assert abs(plane_psnr(test, ref, bit_depth=8) - want_psnr) < 1e-6
    assert abs(ssim(test, ref, bit_depth=8) - want_ssim) < 1e-6
    assert 0.3 < want_ssim < 0.99  # a real distortion, not a degenerate case


@pytest.mark.parametrize("bit_depth,shape", [(8, (37, 53)), (10, (64, 48)), (16, (11, 11))])
def test_psnr_and_ssim_match_scikit_image_on_random_planes(bit_depth, shape):
    rng = np.random.default_rng(bit_depth)
    top = (1 << bit_depth) - 1
    dtype = np.uint8 if bit_depth == 8 else np.uint16
    ref = rng.integers(0, top + 1, shape).astype(dtype)
    test = _distorted(ref, seed=7, top=top)
    want_psnr = peak_signal_noise_ratio(ref, test, data_range=top)  # scikit-image reference
    want_ssim = structural_similarity(
        ref, test, gaussian_weights=True, sigma=1.5, use_sample_covariance=False, data_range=top
    )
    assert abs(plane_psnr(test, ref, bit_depth=bit_depth) - want_psnr) < 1e-6
    assert abs(ssim(test, ref, bit_depth=bit_depth) - want_ssim) < 1e-6


def test_weighted_psnr_and_mae_definitions():
    # (6 Y + Cb + Cr) / 8, common practice in codec comparisons (e.g. JVET CTC reporting).
    assert weighted_psnr({"Y": 40.0, "Cb": 48.0, "Cr": 32.0}) == pytest.approx(40.0)
    assert weighted_psnr({"Y": 30.0, "Cb": 38.0, "Cr": 38.0}) == pytest.approx(32.0)
    assert weighted_psnr({"Y": 33.0}) == 33.0
    a = np.full((16, 16), 100, np.uint8)
    b = a.copy()
    b[:8] += 4  # half the samples off by 4 -> MAE 2, MSE 8 (textbook definitions)
    assert mean_absolute_error(b, a) == 2.0
    assert plane_psnr(b, a) == pytest.approx(10 * np.log10(255**2 / 8.0))


def test_picture_metrics_keys_and_identity():
    rng = np.random.default_rng(3)
    y = rng.integers(0, 256, (32, 32)).astype(np.uint8)
    c = rng.integers(0, 256, (16, 16)).astype(np.uint8)
    pic = Picture(y, c, c.copy(), "420", 8)
    m = picture_metrics(pic, pic)
    assert m["psnr_y"] == float("inf") and m["ssim_y"] == 1.0 and m["mae_y"] == 0.0
    assert set(m) == {"psnr_y", "psnr_cb", "psnr_cr", "psnr_yuv", "ssim_y", "mae_y"}
    with pytest.raises(ParameterError, match="differ"):
        picture_psnr(pic, Picture.blank(16, 16))
    with pytest.raises(ParameterError, match="at least 11x11"):
        ssim(y[:8, :8], y[:8, :8])


@pytest.mark.parametrize("bit_depth", [8, 10])
@pytest.mark.parametrize("name", ["camera", "astronaut_green"])
def test_ssim_matches_scikit_image_on_whole_photographs_8_and_10_bit(name, bit_depth):
    # Whole 512x512 photographs (skimage.data); the 10-bit planes are the 8-bit ones times 4 plus
    # noise. Reference: scikit-image's structural_similarity configured as Wang et al. 2004.
    top = (1 << bit_depth) - 1
    plane = _photos()[name].astype(np.uint16) << (bit_depth - 8)
    ref = plane.astype(np.uint8 if bit_depth == 8 else np.uint16)
    test = _distorted(ref, seed=bit_depth, top=top)
    want = structural_similarity(
        ref, test, gaussian_weights=True, sigma=1.5, use_sample_covariance=False, data_range=top
    )
    assert abs(ssim(test, ref, bit_depth=bit_depth) - want) < 1e-4
    assert 0.3 < want < 0.99


def test_importing_metrics_loads_neither_opencv_nor_scipy():
    # Start-up cost: OpenCV is imported when SSIM is first computed, scipy not at all.
    import subprocess
    import sys

    code = "import sys, synth.metrics; print('cv2' in sys.modules, 'scipy' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]
