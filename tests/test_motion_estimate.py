"""The motion estimator against known global translations of a real photograph.

Outside references: scikit-image's bundled photograph (`skimage.data.astronaut`, public domain
NASA image); integer shifts are exact by construction (crops), fractional shifts are the ideal
band-limited translation (Fourier shift theorem, textbook); OpenCV's `cv2.phaseCorrelate`
(Kuglin & Hines phase correlation) measures the same global shift independently.
"""

import cv2
import numpy as np
import pytest

from synth import ParameterError, Picture, estimate_field


def _gray_photo() -> np.ndarray:
    from skimage import data

    return cv2.cvtColor(data.astronaut(), cv2.COLOR_RGB2GRAY)


def _mono(a: np.ndarray) -> Picture:
    return Picture(np.ascontiguousarray(a), None, None, "mono", 8)


def _textured(field, picture, *, min_std=12.0):
    """Blocks whose samples vary enough to pin a vector down (flat sky/background excluded)."""
    out = np.zeros(len(field), dtype=bool)
    for i, (x, y, w, h) in enumerate(zip(field.x, field.y, field.w, field.h)):
        out[i] = picture[y : y + h, x : x + w].std() > min_std
    return out


@pytest.mark.parametrize("shift,sizes", [((7, -5), (16,)), ((-12, 3), (64, 32, 16, 8)), ((0, 9), (32, 16, 8))])
def test_integer_translation_found_exactly(shift, sizes):
    img = _gray_photo()
    sx, sy = shift
    ref = img[40:296, 60:380]
    cod = img[40 + sy : 296 + sy, 60 + sx : 380 + sx]  # content of cod at (x, y) is at (x+sx, y+sy) on ref
    f = estimate_field(
        _mono(cod), _mono(ref), coded_time=1, reference_time=0, qp=22, search_range=16, block_sizes=sizes
    )
    tex = _textured(f, cod)
    # away from the picture edge, where the content left the reference
    inner = (f.x >= 16) & (f.y >= 16) & (f.x + f.w <= cod.shape[1] - 16) & (f.y + f.h <= cod.shape[0] - 16)
    sel = tex & inner & ~f.intra
    assert (f.w * f.h)[sel].sum() > 0.25 * cod.size
    assert np.all(f.dx[sel] == 4 * sx) and np.all(f.dy[sel] == 4 * sy)


def _fourier_shift(a: np.ndarray, sx: float, sy: float) -> np.ndarray:
    """b(x, y) = a(x + sx, y + sy) for a periodic band-limited picture (shift theorem)."""
    fy = np.fft.fftfreq(a.shape[0])[:, None]
    fx = np.fft.fftfreq(a.shape[1])[None, :]
    return np.real(np.fft.ifft2(np.fft.fft2(a) * np.exp(2j * np.pi * (fx * sx + fy * sy))))


def _corner_strength(field, picture):
    """Mean minimum eigenvalue of the structure tensor per block (Shi & Tomasi 1994, via OpenCV)."""
    e = cv2.cornerMinEigenVal(picture, 3)
    return np.array([e[y : y + h, x : x + w].mean() for x, y, w, h in zip(field.x, field.y, field.w, field.h)])


def _phase_shift(ref: np.ndarray, cod: np.ndarray) -> np.ndarray:
    (sx, sy), _ = cv2.phaseCorrelate(ref.astype(np.float64), cod.astype(np.float64))
    # phaseCorrelate reports how far cod is moved from ref: cod(x) = ref(x - s); our vectors point
    # from cod to ref, so they are the negated shift
    return -np.array([sx, sy])


@pytest.mark.parametrize("quarter_shift", [(1, 0), (2, 3), (-3, 5), (7, -6), (-5, -1)])
def test_quarter_sample_translation(quarter_shift):
    kx, ky = quarter_shift
    g = cv2.GaussianBlur(_gray_photo().astype(np.float64), (0, 0), 0.6)
    ref = np.clip(g[100:292, 100:356] + 0.5, 0, 255).astype(np.uint8)
    cod = np.clip(_fourier_shift(g, kx / 4, ky / 4)[100:292, 100:356] + 0.5, 0, 255).astype(np.uint8)
    f = estimate_field(_mono(cod), _mono(ref), coded_time=1, reference_time=0, qp=22, search_range=8, block_sizes=(16,))
    inner = (f.x >= 8) & (f.y >= 8) & (f.x + f.w <= cod.shape[1] - 8) & (f.y + f.h <= cod.shape[0] - 8)
    strength = _corner_strength(f, cod)
    textured = inner & ~f.intra & (strength >= np.quantile(strength[inner], 0.8))
    exact = (f.dx == kx) & (f.dy == ky)
    assert textured.sum() >= 25
    # the H.264 filter is not the ideal interpolator: a few blocks may land one quarter away
    assert exact[textured].mean() >= 0.85
    assert np.all(np.abs(f.dx[textured] - kx) <= 1) and np.all(np.abs(f.dy[textured] - ky) <= 1)
    assert np.median(f.dx[textured]) == kx and np.median(f.dy[textured]) == ky
    # the independent global estimate agrees within a quarter sample (phase correlation's sub-sample
    # peak fit is biased towards whole samples, so it is the coarser of the two)
    ps = _phase_shift(ref, cod)
    assert np.all(np.abs(ps - np.array([kx, ky]) / 4) <= 0.25)
    assert np.all(np.abs(ps - np.array([np.median(f.dx[textured]), np.median(f.dy[textured])]) / 4) <= 0.25)


def test_integer_shift_agrees_with_phase_correlation():
    img = _gray_photo()
    ref, cod = img[60:316, 100:356], img[60 - 11 : 316 - 11, 100 + 6 : 356 + 6]
    f = estimate_field(_mono(cod), _mono(ref), coded_time=1, reference_time=0, qp=27, search_range=32)
    inter = ~f.intra
    area = (f.w * f.h)[inter]
    vx = np.average(f.dx[inter], weights=area) / 4
    vy = np.average(f.dy[inter], weights=area) / 4
    ps = _phase_shift(ref, cod)
    assert np.allclose(ps, [6, -11], atol=0.1)
    assert np.median(f.dx[inter]) == 24 and np.median(f.dy[inter]) == -44
    assert abs(vx - ps[0]) < 0.5 and abs(vy - ps[1]) < 0.5


def test_picture_size_not_a_multiple_of_the_block_is_covered():
    img = _gray_photo()
    ref, cod = img[:101, :90], img[2:103, 1:91]
    f = estimate_field(_mono(cod), _mono(ref), coded_time=0, reference_time=1, qp=27, search_range=8)
    cover = np.zeros(ref.shape, dtype=int)
    for x, y, w, h in zip(f.x, f.y, f.w, f.h):
        assert x + w <= 90 and y + h <= 101
        cover[y : y + h, x : x + w] += 1
    assert cover.max() == 1
    assert f.gaps_allowed and cover[:100, :88].min() == 1  # 101 and 90 are not multiples of 4


def test_estimate_field_rejects_mismatched_pictures():
    a = Picture.blank(64, 48, chroma_format="mono")
    b = Picture.blank(64, 32, chroma_format="mono")
    with pytest.raises(ParameterError, match="differ in size"):
        estimate_field(a, b, coded_time=0, reference_time=1)
    with pytest.raises(ParameterError, match="qp must be"):
        estimate_field(a, a, coded_time=0, reference_time=1, qp=60)
    with pytest.raises(ParameterError, match="block sizes must be powers of two from 4 to 128, got 24"):
        estimate_field(a, a, coded_time=0, reference_time=1, block_sizes=(32, 24))
    with pytest.raises(ParameterError, match="search_range must be an integer in 1..1024"):
        estimate_field(a, a, coded_time=0, reference_time=1, search_range=0)
    with pytest.raises(ParameterError, match="coded_time and reference_time must differ"):
        estimate_field(a, a, coded_time=3, reference_time=3)
    with pytest.raises(ParameterError, match="coded must be a Picture"):
        estimate_field(a.y, a, coded_time=0, reference_time=1)


def test_estimated_field_passes_the_file_rules_and_round_trips(tmp_path):
    from synth.field_checks import validate_field
    from synth.io import read_fields, write_fields

    img = _gray_photo()
    ref, cod = img[:101, :90], img[3:104, 2:92]
    f = estimate_field(_mono(cod), _mono(ref), coded_time=2, reference_time=0, qp=32, search_range=8)
    validate_field(f)
    write_fields(tmp_path / "f.npz", f)
    (back,) = read_fields(tmp_path / "f.npz", width=90, height=101)
    assert np.array_equal(back.dx, f.dx) and np.array_equal(back.w, f.w) and back.gaps_allowed


def test_reach_of_64_samples():
    # the reach: +-64 luma samples between references 8 pictures apart
    big = cv2.resize(_gray_photo(), (1024, 1024), interpolation=cv2.INTER_CUBIC)
    sx, sy = -64, 61
    ref = big[200:456, 300:684]
    cod = big[200 + sy : 456 + sy, 300 + sx : 684 + sx]
    f = estimate_field(_mono(cod), _mono(ref), coded_time=8, reference_time=0, qp=27, search_range=64)
    # blocks whose content is inside the reference
    inside = (f.x + sx >= 0) & (f.y + sy + f.h <= ref.shape[0])
    area = (f.w * f.h).astype(float)
    exact = (f.dx == 4 * sx) & (f.dy == 4 * sy)
    assert area[inside & exact].sum() >= 0.95 * area[inside].sum()


def test_ten_bit_pictures():
    img = _gray_photo().astype(np.uint16) * 4
    ref, cod = img[40:168, 60:220], img[45:173, 57:217]
    pic = lambda a: Picture(np.ascontiguousarray(a), None, None, "mono", 10)  # noqa: E731
    f = estimate_field(pic(cod), pic(ref), coded_time=1, reference_time=0, search_range=16)
    assert np.median(f.dx) == -12 and np.median(f.dy) == 20
