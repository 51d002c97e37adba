"""Decoder-side refinement of motion cells (`synth.synthesis.refine_cells`).

Outside references: scikit-image's camera photograph translated by an exact sub-sample shift with
`scipy.ndimage.fourier_shift` (the shift theorem of the Fourier transform, common practice) is the
truth the refined vectors are checked against; a constant picture, where every offset matches
equally, must keep the coded vectors (the role of the penalty, common practice in rate-constrained
motion search).
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
from synth.synthesis.params import SynthParams
from synth.synthesis.refine_cells import refine_cells, refine_fields
from synth.synthesis.smooth_motion import smooth_cells


def _mono(y: np.ndarray) -> Picture:
    return Picture.from_float([y], chroma_format="mono", bit_depth=8)


def _camera_pair(shift_x: float, shift_y: float):
    """(coded, reference): the reference is the coded picture moved by (shift_x, shift_y)."""
    cam = data.camera()[128:256, 128:320].astype(np.float64)
    moved = np.real(np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(cam), (shift_y, shift_x))))
    return _mono(cam), _mono(np.clip(moved, 0, 255))


def _cells(w, h, dx, dy, intra=None):
    f = VectorField.uniform_grid(w, h, block=16, coded_time=8, reference_time=0, dx=dx, dy=dy)
    if intra is not None:
        f = VectorField.from_arrays(
            width=w, height=h, coded_time=8, reference_time=0, x=f.x, y=f.y, w=f.w, h=f.h,
            dx=f.dx, dy=f.dy, intra=intra(f),
        )  # fmt: skip
    return smooth_cells(f, cell=4, smoothing=1)


def test_a_wrong_vector_is_moved_to_the_true_sub_sample_translation():
    # Content of the coded picture at p is at p + (2.25, -1.5) on the reference, i.e. the vector
    # (9, -6) in quarter samples (sign convention of synth.field). The cells start 1 sample off in x
    # and 1.25 samples off in y.
    coded, reference = _camera_pair(2.25, -1.5)
    cells = _cells(192, 128, 5, -1)
    out = refine_cells(cells, coded, reference, reach=2, window=8, penalty=0.0)
    validate_field(out)
    inner = (out.x >= 8) & (out.x < 180) & (out.y >= 8) & (out.y < 116)
    # The photograph's flat sky leaves some cells ambiguous to a quarter sample: the most common
    # vector is the truth, most cells are within a quarter sample of it, and the mean error drops
    # from 1.6 samples to under 0.4.
    pairs = list(zip(out.dx[inner].tolist(), out.dy[inner].tolist()))
    assert max(set(pairs), key=pairs.count) == (9, -6)
    near = (np.abs(out.dx[inner] - 9) <= 1) & (np.abs(out.dy[inner] + 6) <= 1)
    assert near.mean() > 0.75, near.mean()
    error = np.hypot(out.dx[inner] - 9, out.dy[inner] + 6).mean() / 4
    assert error < 0.4, error
    before = (cells.dx[inner] == 9) & (cells.dy[inner] == -6)
    assert not before.any()


def test_right_vectors_stay_and_flat_cells_keep_theirs():
    coded, reference = _camera_pair(2.0, 1.0)
    cells = _cells(192, 128, 8, 4)
    out = refine_cells(cells, coded, reference, penalty=1.0)
    inner = (out.x >= 8) & (out.x < 180) & (out.y >= 8) & (out.y < 116)
    assert ((out.dx[inner] == 8) & (out.dy[inner] == 4)).mean() > 0.95
    flat = _mono(np.full((64, 64), 128.0))
    moved = refine_cells(_cells(64, 64, 3, -7), flat, flat, penalty=1.0)
    assert set(moved.dx.tolist()) == {3} and set(moved.dy.tolist()) == {-7}


def test_intra_cells_are_left_alone_and_refine_fields_skips_unknown_pictures():
    coded, reference = _camera_pair(2.25, -1.5)
    cells = _cells(192, 128, 5, -1, intra=lambda f: f.x >= 96)
    out = refine_cells(cells, coded, reference, penalty=0.0)
    assert (out.dx[out.intra] == cells.dx[cells.intra]).all()
    assert out.intra.tolist() == cells.intra.tolist()
    same = refine_fields([cells], {8.0: coded, 4.0: reference})
    assert same[0] is cells
    again = refine_fields([cells], {8.0: coded, 0.0: reference}, penalty=0.0)
    assert again[0].dx.tolist() == out.dx.tolist()


def test_bad_parameters_are_refused():
    coded, reference = _camera_pair(1.0, 0.0)
    cells = _cells(192, 128, 4, 0)
    for kw in ({"reach": 0}, {"reach": 9}, {"window": 1}, {"penalty": -1.0}, {"penalty": float("nan")}):
        with pytest.raises(ParameterError):
            refine_cells(cells, coded, reference, **kw)
    with pytest.raises(ParameterError):
        refine_cells(cells, _mono(np.zeros((64, 64))), reference)
    with pytest.raises(ParameterError):
        SynthParams(cell_refinement=9)


def test_synthesis_with_refinement_is_closer_to_the_truth_and_off_changes_nothing():
    # The truth at t = 1/2 is the camera moved by half the translation; the coded field is 1.5
    # samples off. Refinement off must give the synthesis of the unrefined cells exactly.
    cam = data.camera()[128:256, 128:320].astype(np.float64)

    def shifted(sx, sy):
        return _mono(np.clip(np.real(np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(cam), (sy, sx)))), 0, 255))

    past, truth, future = shifted(0, 0), shifted(-2, -1), shifted(-4, -2)
    # future coded against past: content of future at p is at p + (4, 2) on past: vector (16, 8)
    field = VectorField.uniform_grid(192, 128, block=16, coded_time=8, reference_time=0, dx=10, dy=8)
    maker = get_maker("lmmse")

    def error(params):
        pic = maker.prepare(past, future, fields=[field], params=params, past_time=0, future_time=8).at_time(4).picture
        return float(np.mean((pic.y[16:-16, 16:-16].astype(float) - truth.y[16:-16, 16:-16]) ** 2)), pic

    off_err, off_pic = error(SynthParams(cell_refinement=0))
    on_err, _ = error(SynthParams(cell_refinement=2, refinement_penalty=0.0))
    assert on_err < 0.5 * off_err, (on_err, off_err)
    default_err, default_pic = error(SynthParams())
    if SynthParams().cell_refinement == 0:
        assert np.array_equal(default_pic.y, off_pic.y)


def test_recent_results_drop_the_least_recently_used():
    # Least-recently-used eviction (common practice for small caches).
    from synth.synthesis.recent import RecentResults

    cache = RecentResults(2)
    cache.put("a", None, 1)
    cache.put("b", None, 2)
    assert cache.get("a") == 1  # "a" is now the most recent
    cache.put("c", None, 3)
    assert cache.get("b") is None and cache.get("a") == 1 and cache.get("c") == 3
    cache.clear()
    assert cache.get("a") is None
