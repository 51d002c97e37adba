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


def _cells_with(w, h, vector_of):
    """4x4 cells whose vectors (quarter samples) are given per cell by vector_of(x, y) -> (dx, dy)."""
    base = _cells(w, h, 0, 0)
    dx, dy = vector_of(base.x, base.y)
    return VectorField.from_arrays(
        width=w, height=h, coded_time=8, reference_time=0, x=base.x, y=base.y, w=base.w, h=base.h,
        dx=np.broadcast_to(dx, base.x.shape), dy=np.broadcast_to(dy, base.x.shape), intra=base.intra,
    )  # fmt: skip


def test_the_median_stage_replaces_an_outlier_block_beyond_the_search_reach():
    # True motion: the camera moved by (2, 1) samples, vector (8, 4). One 16x16 block carries a
    # vector 6 samples off, beyond the +-2 reach of the local search: only the median of the 17x17
    # cells around it, which is the truth, can mend it (vector median filtering of motion fields,
    # Astola et al., Proc. IEEE 1990).
    coded, reference = _camera_pair(2.0, 1.0)
    block = lambda x, y: (x >= 96) & (x < 112) & (y >= 48) & (y < 64)  # noqa: E731
    cells = _cells_with(192, 128, lambda x, y: (np.where(block(x, y), 32, 8), np.where(block(x, y), 4, 4)))
    plain = refine_cells(cells, coded, reference)
    assert (plain.dx[block(plain.x, plain.y)] != 8).all()
    out = refine_cells(cells, coded, reference, median_window=17, median_weight=0.5)
    validate_field(out)
    assert ((out.dx == 8) & (out.dy == 4))[block(out.x, out.y)].all()
    inner = (out.x >= 8) & (out.x < 180) & (out.y >= 8) & (out.y < 116)
    assert ((out.dx[inner] == 8) & (out.dy[inner] == 4)).mean() > 0.95


def test_the_median_stage_keeps_a_small_object_moving_against_the_background():
    # A 24x24 patch of scikit-image's grass texture moves by (-3, 2) samples over a background moving by
    # (2, 1): the median around the patch is the background's motion, which matches the patch far
    # worse, so the patch's cells keep their own vector (a motion boundary is not an outlier).
    cam = data.camera()[128:256, 128:320].astype(np.float64)
    patch = data.grass()[:24, :24].astype(np.float64)

    def shift(img, sx, sy):
        return np.real(np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(img), (sy, sx))))

    coded = cam.copy()
    coded[52:76, 88:112] = patch
    reference = shift(cam, 2, 1)
    reference[54:78, 85:109] = patch  # the patch's content at p is at p + (-3, 2) on the reference
    on_patch = lambda x, y: (x >= 88) & (x < 112) & (y >= 52) & (y < 76)  # noqa: E731
    cells = _cells_with(192, 128, lambda x, y: (np.where(on_patch(x, y), -12, 8), np.where(on_patch(x, y), 8, 4)))
    out = refine_cells(cells, _mono(coded), _mono(np.clip(reference, 0, 255)), median_window=17, median_weight=0.5)
    # the patch's inner cells (their 8x8 windows inside the patch) keep (-12, 8)
    inner = (out.x >= 92) & (out.x < 108) & (out.y >= 56) & (out.y < 72)
    assert ((out.dx == -12) & (out.dy == 8))[inner].all()


def test_bad_parameters_are_refused():
    coded, reference = _camera_pair(1.0, 0.0)
    cells = _cells(192, 128, 4, 0)
    for kw in (
        {"reach": 0},
        {"reach": 9},
        {"window": 1},
        {"penalty": -1.0},
        {"penalty": float("nan")},
        {"median_window": 4},
        {"median_window": 67},
        {"median_weight": -0.5},
    ):
        with pytest.raises(ParameterError):
            refine_cells(cells, coded, reference, **kw)
    with pytest.raises(ParameterError):
        refine_cells(cells, _mono(np.zeros((64, 64))), reference)
    for kw in ({"cell_refinement": 9}, {"refinement_median": 8}, {"refinement_median_weight": -1.0}):
        with pytest.raises(ParameterError):
            SynthParams(**kw)


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


def test_synthesis_with_the_median_stage_mends_an_outlier_block():
    # The synthesiser passes refinement_median through: the picture at t = 1/2 of a camera
    # translation (Fourier shift theorem, common practice) with one 16x16 block 6 samples off is
    # closer to the truth with the median stage than without.
    cam = data.camera()[128:256, 128:320].astype(np.float64)

    def shifted(sx, sy):
        return _mono(np.clip(np.real(np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(cam), (sy, sx)))), 0, 255))

    past, truth, future = shifted(0, 0), shifted(-2, -1), shifted(-4, -2)
    dx = np.full((8, 12), 16)
    dx[3, 6] = 40  # vector (16, 8) everywhere but one block
    field = VectorField.uniform_grid(192, 128, block=16, coded_time=8, reference_time=0, dx=dx, dy=8)
    maker = get_maker("lmmse")

    def error(params):
        pic = maker.prepare(past, future, fields=[field], params=params, past_time=0, future_time=8).at_time(4).picture
        return float(np.mean((pic.y[16:-16, 16:-16].astype(float) - truth.y[16:-16, 16:-16]) ** 2))

    plain, mended = error(SynthParams()), error(SynthParams(refinement_median=17))
    assert mended < 0.8 * plain, (mended, plain)
