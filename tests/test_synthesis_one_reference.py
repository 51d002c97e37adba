"""The one-reference LMMSE predictor (`synth.synthesis.one_reference`) against outside references.

Sources: block motion compensation as ITU-T H.264 clause 8.4.2.2 defines it (one vector per block);
the LMMSE (Wiener) solution for an AR(1) process (S. M. Kay, Fundamentals of Statistical Signal
Processing: Estimation Theory, 1993, ch. 12); scikit-image's bundled photograph under an exact
integer translation.
"""

import numpy as np
import pytest
import scipy.linalg

from synth.errors import FormatError, ParameterError
from synth.evaluation.prediction import obmc_one_reference
from synth.field import VectorField
from synth.motion.compensate import motion_compensate, vector_maps
from synth.picture import Picture
from synth.synthesis.lmmse import cholesky_solve_soa
from synth.synthesis.one_reference import (
    OneReferenceParams,
    correlation_system,
    one_reference_coefficients,
    predict_one_reference,
)


def _random_picture(rng, h=48, w=64):
    y = rng.integers(0, 256, (h, w), dtype=np.uint8)
    cb = rng.integers(0, 256, (h // 2, w // 2), dtype=np.uint8)
    cr = rng.integers(0, 256, (h // 2, w // 2), dtype=np.uint8)
    return Picture(y, cb, cr, "420", 8)


def _mixed_field(rng, h=48, w=64):
    """16x16 blocks on the left half, 8x8 on the right, random quarter-sample vectors, some intra."""
    blocks = []
    for y in range(0, h, 16):
        for x in range(0, w // 2, 16):
            blocks.append((x, y, 16, 16))
    for y in range(0, h, 8):
        for x in range(w // 2, w, 8):
            blocks.append((x, y, 8, 8))
    x, y, bw, bh = np.array(blocks).T
    n = len(x)
    return VectorField.from_arrays(
        width=w, height=h, coded_time=1, reference_time=0, x=x, y=y, w=bw, h=bh,
        dx=rng.integers(-30, 31, n), dy=rng.integers(-30, 31, n), intra=rng.random(n) < 0.15,
    )  # fmt: skip


def test_single_candidate_is_block_motion_compensation_exactly():
    # H.264 clause 8.4.2.2: block MC predicts each sample from its own block's vector
    rng = np.random.default_rng(1)
    ref, field = _random_picture(rng), _mixed_field(rng)
    pred = predict_one_reference(ref, field, params=OneReferenceParams(candidates=1))
    mc = motion_compensate(ref, field)
    inter = vector_maps(field)[2]  # intra pixels take a neighbour's vector instead (module docstring)
    assert 0 < inter.mean() < 1
    assert pred.y.dtype == mc.y.dtype and np.array_equal(pred.y[inter], mc.y[inter])
    for a, b in zip(pred.planes[1:], mc.planes[1:]):
        assert np.array_equal(a[inter[::2, ::2]], b[inter[::2, ::2]])
    clean = VectorField.from_arrays(
        width=64, height=48, coded_time=1, reference_time=0, x=field.x, y=field.y, w=field.w, h=field.h,
        dx=field.dx, dy=field.dy,
    )  # fmt: skip
    pred = predict_one_reference(ref, clean, params=OneReferenceParams(candidates=1))
    for a, b in zip(pred.planes, motion_compensate(ref, clean).planes):
        assert np.array_equal(a, b)


def test_identical_vectors_with_equal_reliabilities_give_the_compensated_sample():
    # analytic: every observation is the same sample, so any weights summing to one return it
    rng = np.random.default_rng(2)
    ref = _random_picture(rng)
    field = VectorField.uniform_grid(64, 48, block=8, coded_time=1, reference_time=0, dx=-7, dy=5)
    params = OneReferenceParams(candidates=6, reliability_decay=0.0, outside_factor=1.0)
    _, _, coef = one_reference_coefficients(field, params=params)
    assert np.allclose(coef.sum(axis=0), 1.0, atol=1e-5)
    assert np.count_nonzero(coef[1:]) > 0  # the neighbours do take part
    pred = predict_one_reference(ref, field, params=params)
    mc = motion_compensate(ref, field)
    for a, b in zip(pred.planes, mc.planes):
        assert np.array_equal(a, b)


@pytest.mark.parametrize("a", [0.5, 0.9])
def test_ar1_one_step_prediction_weights(a):
    # Kay 1993, ch. 12 (Wiener one-step predictor of an AR(1) process, from memory): from the
    # samples 1, 2, 3 steps away the LMMSE weights are (a, 0, 0): only the nearest one counts.
    vx = np.array([[1.0], [2.0], [3.0]], np.float32)
    vy = np.zeros_like(vx)
    valid = np.ones_like(vx, bool)
    R, _ = correlation_system(vx, vy, np.full_like(vx, 1 / 3), valid, spatial_correlation=a)
    assert np.allclose(R[:, :, 0], a ** np.abs(vx - vx.T), rtol=1e-5)
    r = (a**vx).astype(np.float32)  # correlation with the sample at position 0
    w, ok = cholesky_solve_soa(R.astype(np.float64), r.astype(np.float64), loading=0.0)
    assert ok.all()
    np.testing.assert_allclose(w[:, 0], [a, 0.0, 0.0], atol=1e-5)  # R is built in float32
    np.testing.assert_allclose(w[:, 0], scipy.linalg.solve(R[:, :, 0].astype(np.float64), r[:, 0]), atol=1e-6)


@pytest.mark.parametrize("a", [0.6, 0.95])
def test_ar1_interpolation_weights(a):
    # AR(1) interpolation from both neighbours (from memory; follows from Kay 1993 ch. 12):
    # E[x_n | x_{n-1}, x_{n+1}] = a / (1 + a^2) (x_{n-1} + x_{n+1}); farther samples get 0
    vx = np.array([[-1.0], [1.0], [2.0]], np.float32)
    valid = np.ones_like(vx, bool)
    R, _ = correlation_system(vx, np.zeros_like(vx), np.full_like(vx, 1 / 3), valid, spatial_correlation=a)
    r = a ** np.abs(vx)
    w, _ = cholesky_solve_soa(R.astype(np.float64), r.astype(np.float64), loading=0.0)
    np.testing.assert_allclose(w[:, 0], [a / (1 + a * a), a / (1 + a * a), 0.0], atol=1e-5)


def test_expected_distance_with_a_certain_true_candidate():
    # analytic: when candidate j is the true motion with probability one, e_i = |v_i - v_j|,
    # so r is R's column j
    vx = np.array([[0.0], [1.5], [-2.0]], np.float32)
    vy = np.array([[0.0], [2.0], [0.5]], np.float32)
    pi = np.array([[0.0], [1.0], [0.0]], np.float32)
    R, r = correlation_system(vx, vy, pi, np.ones_like(vx, bool), spatial_correlation=0.9)
    np.testing.assert_allclose(r[:, 0], R[:, 1, 0], rtol=1e-6)
    np.testing.assert_allclose(R[0, 1, 0], 0.9**2.5, rtol=1e-6)  # |(1.5, 2)| = 2.5


def test_exact_global_translation_of_a_photograph():
    # scikit-image's astronaut, the target an exact integer shift of the reference: every vector is
    # the true one, so the prediction is exact (within rounding) wherever the shift stays inside
    from skimage import data

    grey = data.astronaut()[..., 1]
    ref = Picture(np.ascontiguousarray(grey[100:196, 150:278]), None, None, "mono", 8)
    target = Picture(np.ascontiguousarray(grey[103:199, 145:273]), None, None, "mono", 8)  # 5 left, 3 up
    rng = np.random.default_rng(3)
    f = _mixed_field(rng, 96, 128)
    field = VectorField.from_arrays(
        width=128, height=96, coded_time=1, reference_time=0, x=f.x, y=f.y, w=f.w, h=f.h, dx=-20, dy=12
    )
    pred = predict_one_reference(ref, field)
    inner = (slice(0, 96 - 3), slice(5, 128))  # target(x, y) = ref(x - 5, y + 3)
    assert np.abs(pred.y[inner].astype(int) - target.y[inner].astype(int)).max() == 0


def test_coefficients_sum_to_one_and_intra_pixels_take_the_neighbours_vectors():
    # equation 4 of the module: c_i = w_i + (1 - sum w) pi_i sums to one
    rng = np.random.default_rng(4)
    ref, field = _random_picture(rng), _mixed_field(rng)
    _, _, coef = one_reference_coefficients(field)
    assert coef.dtype == np.float32 and coef.shape == (5, 48, 64)
    np.testing.assert_allclose(coef.sum(axis=0), 1.0, atol=1e-4)
    # analytic: one intra block in a uniform field; its neighbours all carry the same vector, so
    # its pixels get the sample that vector points at
    uniform = VectorField.uniform_grid(64, 48, block=8, coded_time=1, reference_time=0, dx=-7, dy=5)
    intra = np.zeros(len(uniform), bool)
    intra[9] = True
    holed = VectorField.from_arrays(
        width=64, height=48, coded_time=1, reference_time=0, x=uniform.x, y=uniform.y, w=8, h=8, dx=-7, dy=5,
        intra=intra,
    )  # fmt: skip
    pred = predict_one_reference(ref, holed)
    for a, b in zip(pred.planes, motion_compensate(ref, uniform).planes):
        assert np.array_equal(a, b)
    # ... where block MC takes the co-located sample
    y, x = int(uniform.y[9]), int(uniform.x[9])
    assert motion_compensate(ref, holed).y[y, x] == ref.y[y, x]


def test_obmc_of_a_uniform_field_is_block_mc():
    # Orchard & Sullivan 1994: the OBMC windows sum to one (sin^2 + cos^2), so one common vector
    # gives the motion-compensated sample
    rng = np.random.default_rng(5)
    ref = _random_picture(rng)
    field = VectorField.uniform_grid(64, 48, block=16, coded_time=1, reference_time=0, dx=9, dy=-3)
    for a, b in zip(obmc_one_reference(ref, field).planes, motion_compensate(ref, field).planes):
        assert np.array_equal(a, b)


def test_parameter_file_round_trip_and_refusals():
    p = OneReferenceParams(spatial_correlation=0.9, candidates=3)
    assert OneReferenceParams.from_json(p.to_json()) == p
    with pytest.raises(FormatError, match="unknown one-reference parameter"):
        OneReferenceParams.from_dict({"candidate": 3})
    with pytest.raises(ParameterError, match="spatial_correlation must be in"):
        OneReferenceParams(spatial_correlation=1.0)
    with pytest.raises(ParameterError, match="field is for 64x48"):
        predict_one_reference(
            Picture.blank(32, 32), VectorField.uniform_grid(64, 48, block=16, coded_time=1, reference_time=0)
        )


def test_refinement_picks_the_best_psnr_setting():
    # PSNR checked against scikit-image's peak_signal_noise_ratio (reference library); the winner
    # is the grid row of highest mean PSNR-Y
    from skimage.metrics import peak_signal_noise_ratio

    from synth.synthesis.one_reference_calibration import refine_one_reference_params

    rng = np.random.default_rng(6)
    ref, field = _random_picture(rng), _mixed_field(rng)
    target = Picture(np.roll(ref.y, (1, -2), axis=(0, 1)), ref.cb, ref.cr, "420", 8)
    grid = {"outside_factor": (0.1, 1.0), "reliability_decay": (0.5, 8.0)}
    best, rows = refine_one_reference_params([(target, ref, field)], grid=grid)
    assert len(rows) == 4
    for row in rows:
        params = OneReferenceParams(outside_factor=row["outside_factor"], reliability_decay=row["reliability_decay"])
        expected = peak_signal_noise_ratio(target.y, predict_one_reference(ref, field, params=params).y, data_range=255)
        assert row["psnr_y"] == pytest.approx(expected, abs=1e-9)
    top = max(rows, key=lambda r: r["psnr_y"])
    assert (best.outside_factor, best.reliability_decay) == (top["outside_factor"], top["reliability_decay"])
    assert len({round(r["psnr_y"], 6) for r in rows}) > 1  # the settings do differ
