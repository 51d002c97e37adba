"""Smooth motion cells (`synth.synthesis.smooth_motion`).

Outside references: the normalised box filter (moving average) of a step is a linear ramp across the
filter's width (common practice, the convolution of a step with a rectangle); a zoom of scikit-image's
camera photograph made by `skimage.transform.warp` is the truth the cells are checked against.
"""

from __future__ import annotations

import numpy as np
import pytest
from skimage import data
from skimage.transform import AffineTransform, warp

from synth.errors import ParameterError
from synth.field import VectorField
from synth.field_checks import validate_field
from synth.makers import get_maker
from synth.metrics import picture_psnr
from synth.picture import Picture
from synth.synthesis.params import SynthParams
from synth.synthesis.smooth_motion import smooth_cells


def _grid(w, h, block, dx, dy):
    return VectorField.uniform_grid(w, h, block=block, coded_time=8, reference_time=0, dx=dx, dy=dy)


def test_a_uniform_field_keeps_its_vector_in_every_cell():
    f = _grid(64, 32, 16, 6, -3)
    cells = smooth_cells(f, cell=4, smoothing=8)
    assert len(cells) == (64 // 4) * (32 // 4)
    assert set(cells.dx.tolist()) == {6} and set(cells.dy.tolist()) == {-3}
    assert (cells.w == 4).all() and (cells.h == 4).all()


def test_a_step_between_two_blocks_becomes_a_linear_ramp():
    # Two 16-wide columns of blocks, dx 0 and 32 quarter samples: a box of 8 turns the step at x = 16
    # into a ramp from x = 12 to x = 20 (moving average of a step, common practice; OpenCV's even
    # box spans x - 4 .. x + 3).
    dx = np.array([[0, 32]] * 2)
    f = _grid(32, 32, 16, dx, 0)
    cells = smooth_cells(f, cell=1, smoothing=8)
    row = cells.dx[cells.y == 0]
    assert row[:13].tolist() == [0] * 13
    assert row[20:].tolist() == [32] * 12
    assert row[12:21].tolist() == list(range(0, 33, 4))  # 32 / 8 per sample
    # max_change keeps a motion boundary sharp
    sharp = smooth_cells(f, cell=1, smoothing=8, max_change=8).dx[cells.y == 0]
    assert set(sharp.tolist()) == {0, 4, 8, 24, 28, 32}


def test_intra_blocks_stay_intra_and_the_result_validates():
    f = VectorField.from_arrays(
        width=32, height=16, coded_time=8, reference_time=0,
        x=[0, 16], y=[0, 0], w=16, h=16, dx=[4, 0], dy=[0, 0], intra=[False, True],
    )  # fmt: skip
    cells = smooth_cells(f, cell=4, smoothing=8)
    validate_field(cells)
    assert cells.intra[cells.x >= 16].all() and not cells.intra[cells.x < 16].any()
    assert set(cells.dx[cells.x < 16].tolist()) == {4}


@pytest.mark.parametrize("kwargs", [{"cell": 0}, {"cell": 3.0}, {"smoothing": 0}, {"smoothing": True}])
def test_bad_settings_are_named(kwargs):
    with pytest.raises(ParameterError, match=next(iter(kwargs))):
        smooth_cells(_grid(16, 16, 16, 0, 0), **kwargs)


def test_cells_follow_a_zoom_better_than_blocks():
    # A 4 % zoom about the centre between the past and future references of scikit-image's camera
    # photograph; the block field carries the exact zoom at each 16x16 block's centre. The cells
    # interpolate the vectors between the centres, so the picture at t = 0.5 comes closer to the
    # true half zoom than with the blocks' constant vectors.
    img = data.camera()[128:320, 128:384].astype(np.float64) / 255.0
    h, w = img.shape
    c = np.array([w / 2, h / 2])

    def zoom(s):
        t = AffineTransform(translation=-c) + AffineTransform(scale=s) + AffineTransform(translation=c)
        return (warp(img, t.inverse, order=3, mode="edge") * 255).round().astype(np.uint8)

    def pic(y):
        return Picture(y, np.full((h // 2, w // 2), 128, np.uint8), np.full((h // 2, w // 2), 128, np.uint8))

    past, target, future = pic(zoom(1.0)), pic(zoom(1.02)), pic(zoom(1.04))
    block = 16
    gy, gx = np.mgrid[0 : h // block, 0 : w // block]
    cx, cy = gx * block + (block - 1) / 2, gy * block + (block - 1) / 2
    # a point at x on the future picture came from c + (x - c) / 1.04 on the past one
    dx = np.round(((c[0] + (cx - c[0]) / 1.04) - cx) * 4).astype(int)
    dy = np.round(((c[1] + (cy - c[1]) / 1.04) - cy) * 4).astype(int)
    field = _grid(w, h, block, dx, dy)
    maker = get_maker("lmmse")

    def psnr(params):
        pair = maker.prepare(past, future, fields=[field], params=params, past_time=0, future_time=8)
        return picture_psnr(pair.at_time(4).picture, target)["Y"]

    blocks = psnr(SynthParams(motion_cell=0))
    cells = psnr(SynthParams())
    assert cells > blocks + 0.3, (cells, blocks)


def test_the_fields_of_one_pair_are_recut_once_and_give_the_same_cells():
    from synth.synthesis.smooth_motion import smooth_fields

    f = _grid(64, 32, 16, np.array([[0, 8, 16, 24]] * 2), 4)
    first = smooth_fields([f])
    again = smooth_fields([f])
    assert again[0] is first[0]  # reused, not recomputed
    fresh = smooth_cells(f, cell=4, smoothing=8)
    assert np.array_equal(first[0].dx, fresh.dx) and np.array_equal(first[0].dy, fresh.dy)
    assert smooth_fields([f], smoothing=1)[0] is not first[0]  # other settings, other cells
