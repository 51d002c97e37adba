import numpy as np
import pytest

from synth import ParameterError, Picture
from synth.picture import chroma_shape


def test_chroma_shapes_follow_subsampling():
    # 4:2:0 halves both directions, 4:2:2 only the width, odd sizes round up (common practice:
    # ITU-T H.264 / H.265 chroma array sizes, SubWidthC/SubHeightC).
    assert chroma_shape(288, 352, "420") == (144, 176)
    assert chroma_shape(288, 352, "422") == (288, 176)
    assert chroma_shape(288, 352, "444") == (288, 352)
    assert chroma_shape(5, 7, "420") == (3, 4)
    assert chroma_shape(288, 352, "mono") is None


def test_from_float_rounds_half_up_and_clips():
    y = np.array([[-3.0, 0.49, 0.5, 254.5, 300.0, 17.2]], dtype=np.float32)
    pic = Picture.from_float((y,), chroma_format="mono", bit_depth=8)
    assert pic.y.dtype == np.uint8
    assert pic.y.tolist() == [[0, 0, 1, 255, 255, 17]]


def test_ten_bit_uses_uint16_and_rejects_wrong_dtype():
    pic = Picture.blank(8, 4, chroma_format="420", bit_depth=10)
    assert pic.y.dtype == np.uint16 and pic.cb.shape == (2, 4) and pic.y[0, 0] == 512
    with pytest.raises(ParameterError, match="must be uint16"):
        Picture(pic.y.astype(np.uint8), pic.cb, pic.cr, "420", 10)


def test_nan_never_reaches_a_picture():
    with pytest.raises(ParameterError, match="NaN"):
        Picture.from_float((np.full((2, 2), np.nan),), chroma_format="mono", bit_depth=8)
