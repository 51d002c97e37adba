"""Reach and regularisation of the coarse-to-fine search, on a real photograph.

Outside references: scikit-image's bundled photograph (`skimage.data.astronaut`, public domain NASA
image); integer translations are exact by construction (crops of the same photograph).
"""

import cv2
import numpy as np

from synth import Picture, estimate_field


def _gray_photo() -> np.ndarray:
    from skimage import data

    return cv2.cvtColor(data.astronaut(), cv2.COLOR_RGB2GRAY)


def _mono(a: np.ndarray) -> Picture:
    return Picture(np.ascontiguousarray(a), None, None, "mono", 8)


def test_translation_of_100_samples_is_found_on_textured_blocks():
    img = _gray_photo()
    sx, sy = -100, 40  # content of cod at (x, y) is at (x + sx, y + sy) on ref
    ref = img[150:406, 150:450]
    cod = img[150 + sy : 406 + sy, 150 + sx : 450 + sx]
    f = estimate_field(
        _mono(cod), _mono(ref), coded_time=8, reference_time=0, qp=22, search_range=128, block_sizes=(16,)
    )
    tex = np.array([cod[y : y + 16, x : x + 16].std() > 12 for x, y in zip(f.x, f.y)])
    # blocks whose content is inside the reference, away from its edge
    inner = (f.x + sx >= 8) & (f.y + sy + 16 <= ref.shape[0] - 8) & (f.x + sx + 16 <= ref.shape[1] - 8)
    sel = tex & inner & ~f.intra
    assert sel.sum() > 40
    hit = (f.dx[sel] == 4 * sx) & (f.dy[sel] == 4 * sy)
    assert hit.mean() > 0.95


def test_coarse_range_is_validated():
    import pytest

    from synth import ParameterError

    a = _mono(np.zeros((32, 32), np.uint8))
    with pytest.raises(ParameterError, match="coarse_range"):
        estimate_field(a, a, coded_time=1, reference_time=0, coarse_range=0)
