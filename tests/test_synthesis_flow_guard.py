"""Optical-flow guard on motion cells (`synth.synthesis.flow_guard`).

Outside references: scikit-image's camera photograph translated by an exact sub-sample shift with
`scipy.ndimage.fourier_shift` (the shift theorem of the Fourier transform, common practice) is the
truth; OpenCV's DIS optical flow (Kroeger et al., ECCV 2016, the reference implementation from the
opencv-python package) is the flow the guard trusts, and it must find that translation.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage
from skimage import data

from synth.errors import ParameterError
from synth.field import VectorField
from synth.field_checks import validate_field
from synth.makers import get_maker
from synth.picture import Picture
from synth.synthesis.flow_guard import guard_cells, guard_fields
from synth.synthesis.params import SynthParams
from synth.synthesis.smooth_motion import smooth_cells

CAMERA = data.camera()[128:256, 128:320].astype(np.float64)


def _mono(y: np.ndarray) -> Picture:
    return Picture.from_float([np.clip(y, 0, 255)], chroma_format="mono", bit_depth=8)


def _shifted(sx: float, sy: float) -> Picture:
    """The camera crop moved by (sx, sy) samples: its content at p is at p + (sx, sy)."""
    return _mono(np.real(np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(CAMERA), (sy, sx)))))


def _block(x, y):
    return (x >= 96) & (x < 128) & (y >= 48) & (y < 80)


def _cells(dx_block: int, *, intra_right: bool = False) -> VectorField:
    """4x4 cells of vector (8, 4) (2 and 1 samples) but for one 32x32 block carrying (dx_block, 4)."""
    base = smooth_cells(
        VectorField.uniform_grid(192, 128, block=16, coded_time=8, reference_time=0, dx=0, dy=0), cell=4, smoothing=1
    )
    intra = (base.x >= 160) if intra_right else base.intra
    return VectorField.from_arrays(
        width=192, height=128, coded_time=8, reference_time=0, x=base.x, y=base.y, w=base.w, h=base.h,
        dx=np.where(_block(base.x, base.y), dx_block, 8), dy=np.full(base.x.shape, 4), intra=intra,
    )  # fmt: skip


def test_far_off_cells_take_the_flow_and_the_others_keep_their_vectors():
    # The reference is the coded picture moved by (2, 1): the true vector is (8, 4) quarter samples.
    # A 32x32 block 12 samples off must come back to within half a sample of the truth; every other
    # cell is within the guard's distance and keeps its vector exactly.
    coded, reference = _shifted(0, 0), _shifted(2, 1)
    cells = _cells(8 + 48)
    block = _block(cells.x, cells.y)
    for preset in ("medium", "fast"):
        out = guard_cells(cells, coded, reference, distance=8.0, preset=preset)
        validate_field(out)
        assert np.abs(out.dx[block] - 8).max() <= 2 and np.abs(out.dy[block] - 4).max() <= 2, preset
        assert (out.dx[~block] == 8).all() and (out.dy[~block] == 4).all()
    # 4 samples off is within a distance of 8: kept as it is
    near = guard_cells(_cells(8 + 16), coded, reference, distance=8.0)
    assert (near.dx[block] == 24).all()


def test_intra_cells_stay_and_unknown_pictures_leave_a_field_alone():
    coded, reference = _shifted(0, 0), _shifted(2, 1)
    cells = _cells(8 + 48, intra_right=True)
    # the far-off block is not intra here; make every cell intra on the right and move it far off too
    far_right = VectorField.from_arrays(
        width=192, height=128, coded_time=8, reference_time=0, x=cells.x, y=cells.y, w=cells.w, h=cells.h,
        dx=np.where(cells.intra, 200, cells.dx), dy=cells.dy, intra=cells.intra,
    )  # fmt: skip
    out = guard_cells(far_right, coded, reference, distance=8.0)
    assert (out.dx[out.intra] == 200).all()
    assert out.intra.tolist() == far_right.intra.tolist()
    same = guard_fields([far_right], {8.0: coded, 4.0: reference}, distance=8.0)
    assert same[0] is far_right
    again = guard_fields([far_right], {8.0: coded, 0.0: reference}, distance=8.0)
    assert again[0].dx.tolist() == out.dx.tolist()


def test_bad_parameters_are_refused():
    coded, reference = _shifted(0, 0), _shifted(2, 1)
    cells = _cells(8)
    for distance in (0.0, -1.0, float("nan"), float("inf"), True, "8"):
        with pytest.raises(ParameterError):
            guard_cells(cells, coded, reference, distance=distance)
    with pytest.raises(ParameterError):
        guard_cells(cells, _mono(np.zeros((64, 64))), reference, distance=8.0)
    with pytest.raises(ParameterError):
        guard_cells(cells, coded, reference, distance=8.0, preset="ultrafast")
    for value in (0.1, -1.0, 2000.0):
        with pytest.raises(ParameterError):
            SynthParams(flow_guard=value)


def test_synthesis_with_the_guard_mends_a_far_off_block():
    # The truth at t = 1/2 is the camera moved by half the translation (Fourier shift theorem,
    # common practice). One 16x16 block of the coded field is 10 samples off, beyond the +-2 reach
    # of the cell refinement: with the guard the picture is much closer to the truth.
    past, truth, future = _shifted(0, 0), _shifted(-2, -1), _shifted(-4, -2)
    dx = np.full((8, 12), 16)
    dx[3, 6] = 56  # vector (16, 8) everywhere but one block
    field = VectorField.uniform_grid(192, 128, block=16, coded_time=8, reference_time=0, dx=dx, dy=8)
    maker = get_maker("lmmse")

    def synthesise(params):
        pic = maker.prepare(past, future, fields=[field], params=params, past_time=0, future_time=8).at_time(4).picture
        return pic, float(np.mean((pic.y[16:-16, 16:-16].astype(float) - truth.y[16:-16, 16:-16]) ** 2))

    _, plain = synthesise(SynthParams(flow_guard=0.0))
    _, guarded = synthesise(SynthParams(flow_guard=8.0))
    assert guarded < 0.5 * plain, (guarded, plain)
    assert SynthParams().flow_guard == 4.0
