"""The motion estimator against known global translations of a real photograph.

Outside reference: scikit-image's bundled photograph (`skimage.data.astronaut`, public domain
NASA image); the shifts are exact by construction (integer crops).
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
    f = estimate_field(_mono(cod), _mono(ref), coded_time=1, reference_time=0, qp=22, search_range=16, block_sizes=sizes)
    tex = _textured(f, cod)
    # away from the picture edge, where the content left the reference
    inner = (f.x >= 16) & (f.y >= 16) & (f.x + f.w <= cod.shape[1] - 16) & (f.y + f.h <= cod.shape[0] - 16)
    sel = tex & inner & ~f.intra
    assert (f.w * f.h)[sel].sum() > 0.25 * cod.size
    assert np.all(f.dx[sel] == 4 * sx) and np.all(f.dy[sel] == 4 * sy)


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
