"""The predicted-error map: the estimator's posterior variance against textbook LMMSE results, the
map against the true error on a constructed occlusion, its calibration, and that it never changes
the picture.

Outside references: S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory,
1993, ch. 12 (minimum Bayesian MSE of the LMMSE estimator, ``C_yy - C_yo C_oo^{-1} C_oy``; for the
Bayesian linear model ``o = 1 y + n`` with white noise it is ``(1 / s^2 + N / sigma_n^2)^{-1}``);
photographs bundled with scikit-image (`skimage.data`); rank correlation by
``scipy.stats.spearmanr``.
"""

import numpy as np
import pytest
from scipy.stats import spearmanr
from skimage import data

from synth import ParameterError, Picture, SynthParams, VectorField, synthesise, synthesise_with_maps
from synth.synthesis.calibrate import TrainingCase, block_means, fit_predicted_error
from synth.synthesis.lmmse import lmmse_weights_soa, lmmse_weights_structured, posterior_variance
from synth.synthesis.reliability import PREDICTED_ERROR_COEFFICIENTS, predicted_rms_error


def _normalised_model(signal_variance, noise_variances):
    """r (correlation of each observation o_i = y + n_i with y) for independent noises."""
    s2 = float(signal_variance)
    return np.array([np.sqrt(s2 / (s2 + nv)) for nv in noise_variances])


def _bmse_from_covariances(signal_variance, noise_variances):
    """C_yy - C_yo C_oo^{-1} C_oy computed directly from the covariances (Kay 1993, ch. 12)."""
    s2 = float(signal_variance)
    n = len(noise_variances)
    c_oo = np.full((n, n), s2) + np.diag(noise_variances)
    c_yo = np.full(n, s2)
    return s2 - c_yo @ np.linalg.solve(c_oo, c_yo)


@pytest.mark.parametrize("s2,n2", [(100.0, 25.0), (400.0, 400.0), (9.0, 81.0)])
def test_one_observation_gives_the_textbook_lmmse_error(s2, n2):
    # Kay 1993, ch. 12: one observation o = y + n gives the minimum Bayesian MSE s^2 n^2 / (s^2 + n^2)
    r = _normalised_model(s2, [n2]).astype(np.float32)
    _, conf = lmmse_weights_structured(r.reshape(1, 1, 1), np.ones((1, 1, 1), np.float32), loading=0.0)
    v = posterior_variance(conf, s2)
    assert v.dtype == np.float32 and v.shape == (1, 1)
    assert v[0, 0] == pytest.approx(s2 * n2 / (s2 + n2), rel=1e-5)
    assert v[0, 0] == pytest.approx(_bmse_from_covariances(s2, [n2]), rel=1e-5)


def test_two_independent_equally_reliable_observations_halve_the_error():
    # Kay 1993, ch. 12 (Bayesian linear model): N independent observations of noise variance n^2
    # give (1/s^2 + N/n^2)^-1; with a vague prior (s^2 >> n^2) two of them halve the error of one.
    n2 = 4.0
    for s2 in (50.0, 1.0e3):
        one = _normalised_model(s2, [n2]).astype(np.float32)
        two = _normalised_model(s2, [n2, n2]).astype(np.float32)
        eye = np.eye(2, dtype=np.float32)[:, :, None]  # independent noises: no innovation correlation
        _, c1 = lmmse_weights_structured(one.reshape(1, 1, 1), eye[:1, :1], loading=0.0)
        _, c2 = lmmse_weights_structured(two.reshape(2, 1, 1), eye, loading=0.0)
        _, c2_direct = lmmse_weights_soa(two.reshape(2, 1), eye, loading=0.0)
        v1, v2 = float(posterior_variance(c1, s2)[0, 0]), float(posterior_variance(c2, s2)[0, 0])
        # float32 arithmetic: 1 - r^T R^-1 r loses digits as the prior grows vague
        assert v2 == pytest.approx(1.0 / (1.0 / s2 + 2.0 / n2), rel=1e-3)
        assert v2 == pytest.approx(_bmse_from_covariances(s2, [n2, n2]), rel=1e-3)
        assert float(posterior_variance(c2_direct, s2)[0]) == pytest.approx(v2, rel=1e-3)
        if s2 > n2 * 100:
            assert v2 / v1 == pytest.approx(0.5, abs=3e-3)  # exactly 0.501 at s^2 = 250 n^2
        else:
            assert 0.5 < v2 / v1 < 0.6  # an informative prior helps the single observation more


H, W = 96, 128


def _occlusion_scene():
    """A textured square (from skimage's astronaut) moving 24 samples right over a static photograph
    (skimage's camera); exact vectors on the future picture: behind the square's trailing edge the
    background is uncovered (seen in the future only) and in front of it covered (past only)."""
    bg = data.camera()[200 : 200 + H, 180 : 180 + W].astype(np.uint8)
    square = data.astronaut()[100:148, 180:228, 1].astype(np.uint8)

    def scene(x0):
        y = bg.copy()
        y[24:72, x0 : x0 + 48] = square
        return Picture(y, None, None, "mono", 8)

    xs, ys = np.meshgrid(np.arange(0, W, 8), np.arange(0, H, 8))
    x, y = xs.ravel(), ys.ravel()
    on_square = (x >= 48) & (x + 8 <= 96) & (y >= 24) & (y + 8 <= 72)
    field = VectorField.from_arrays(
        width=W, height=H, coded_time=2, reference_time=0, x=x, y=y, w=8, h=8, dx=np.where(on_square, -96, 0), dy=0
    )
    return scene(24), scene(36), scene(48), field


def test_predicted_error_is_large_where_the_synthesis_is_wrong():
    past, truth, future, field = _occlusion_scene()
    res = synthesise_with_maps(past, future, field, t=0.5)
    pred = res.maps["predicted_error"]
    assert pred.shape == (H, W) and pred.dtype == np.float32 and np.all(np.isfinite(pred)) and pred.min() >= 0
    err = block_means(np.abs(res.picture.y.astype(np.float64) - truth.y))
    p = block_means(pred)
    wrong, right = err > 10, err < 2
    assert wrong.sum() >= 10 and right.sum() >= 100  # the scene has both
    # the occluded blocks are predicted to be far worse than the rest, and in a matching range
    assert p[wrong].mean() > 10 * p[right].mean()
    assert 0.5 < p[wrong].mean() / err[wrong].mean() < 2.0
    assert spearmanr(p, err).statistic > 0.6


def _two_way_busy_case():
    past = Picture(data.camera()[100:196, 100:228].copy(), None, None, "mono", 8)
    future = Picture(data.camera()[103:199, 96:224].copy(), None, None, "mono", 8)
    rng = np.random.default_rng(5)
    xs, ys = np.meshgrid(np.arange(0, W, 16), np.arange(0, H, 16))
    n = xs.size

    def field(coded, ref, sign):
        return VectorField.from_arrays(
            width=W, height=H, coded_time=coded, reference_time=ref, x=xs.ravel(), y=ys.ravel(), w=16, h=16,
            dx=sign * 16 + rng.integers(-6, 7, n), dy=sign * -12 + rng.integers(-6, 7, n), intra=rng.random(n) < 0.1,
        )  # fmt: skip

    return past, future, [field(4, 0, 1), field(0, 4, -1)]


@pytest.mark.parametrize(
    "params",
    [SynthParams(), SynthParams(reliability="learned"), SynthParams(reliability="learned", learned_share=1.0)],
    ids=["correlation", "learned-mixed", "learned-only"],
)
@pytest.mark.parametrize("method", ["lmmse", "nearest", "distance_weighted"])
def test_computing_the_maps_does_not_change_the_picture(params, method):
    past, future, fields = _two_way_busy_case()
    with_maps = synthesise_with_maps(past, future, fields, t=0.5, params=params, method=method)
    without = synthesise(past, future, fields, t=0.5, params=params, method=method)
    assert np.array_equal(with_maps.picture.y, without.y)
    for name in ("posterior_variance", "endpoint_mismatch", "predicted_error"):
        m = with_maps.maps[name]
        assert m.shape == (H, W) and np.all(np.isfinite(m)) and m.min() >= 0, name
    assert with_maps.maps["predicted_error"].max() > 0


def test_fit_predicted_error_matches_the_measured_rms_on_its_cases():
    past, truth, future, field = _occlusion_scene()
    p2, f2, fields2 = _two_way_busy_case()
    cases = [
        TrainingCase("occlusion", 2, 1, past, future, truth, [field]),
        TrainingCase(
            "busy", 4, 2, p2, f2, Picture(data.camera()[101:197, 98:226].copy(), None, None, "mono", 8), fields2
        ),
    ]
    coefficients, record = fit_predicted_error(cases)
    assert len(coefficients) == 5 and all(np.isfinite(coefficients)) and coefficients[4] > 0
    ratios = [c["predicted_rms"] / c["measured_rms"] for c in record["cases"]]
    # the scale k makes the geometric mean of predicted over measured mean squared error 1
    assert np.exp(np.mean(np.log(np.square(ratios)))) == pytest.approx(1.0, rel=1e-4)
    assert record["blocks"] == 2 * (H // 8) * (W // 8)
    with pytest.raises(ParameterError, match="at least one training case"):
        fit_predicted_error([])


def test_predicted_rms_error_formula_and_its_checks():
    # sqrt(k (exp(gamma) (1 + v)^alpha (1 + m)^beta (1 + z)^delta - 1)) with alpha = k = 1, others 0
    v = np.array([0.0, 3.0, 99.0], np.float32)
    out = predicted_rms_error(v, np.zeros(3, np.float32), np.zeros(3, np.float32), (1.0, 0.0, 0.0, 0.0, 1.0))
    np.testing.assert_allclose(out, np.sqrt(v), rtol=1e-6)
    both = predicted_rms_error(np.float32(3.0), np.float32(3.0), np.float32(0.0), (0.5, 0.5, 0.0, 0.0, 2.0))
    assert float(both) == pytest.approx(np.sqrt(2.0 * 3.0), rel=1e-6)  # (1 + 3)^0.5 (1 + 3)^0.5 - 1 = 3
    assert len(PREDICTED_ERROR_COEFFICIENTS) == 5 and PREDICTED_ERROR_COEFFICIENTS[4] > 0
    with pytest.raises(ParameterError, match="five finite numbers"):
        predicted_rms_error(v, v, v, (1.0, 0.0, 0.0, 0.0, 0.0))
    with pytest.raises(ParameterError, match="five finite numbers"):
        predicted_rms_error(v, v, v, (1.0, 0.0))
