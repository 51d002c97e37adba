"""Calibration, the learned reliability and the oracles.

Outside anchors: the autocorrelation of a first-order autoregressive process (textbook, G. E. P.
Box and G. M. Jenkins, Time Series Analysis, 1970, ch. 3: rho^|k|; with added white noise the
autocorrelation at lags k >= 1 is scaled by var(AR) / (var(AR) + var(noise))); linear least
squares checked against SciPy's `scipy.linalg.lstsq`; scikit-image's bundled photograph
(`skimage.data.astronaut`) panned by integer crops for pictures with known motion.
"""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
import scipy.linalg
from typer.testing import CliRunner

from synth import SynthParams, VectorField, synthesise
from synth.cli import app
from synth.errors import ParameterError
from synth.io import rgb_to_ycbcr420, write_clip
from synth.synthesis.calibrate import fit_exponential_decay, learned_estimate, stack_side_cues
from synth.synthesis.candidate_stack import candidate_stack
from synth.synthesis.oracles import best_of_k, block_least_squares_stack
from synth.synthesis.reliability import (
    CUE_NAMES,
    check_coefficients,
    fit_error_model,
    n_coefficients,
    predict_log_variance,
    quadratic_features,
    side_weights,
)


def _ar1(n, rho, rng):
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0]
    s = np.sqrt(1 - rho * rho)
    for i in range(1, n):  # test data only
        x[i] = rho * x[i - 1] + s * e[i]
    return x


def _autocorr(x, lags):
    x = x - x.mean()
    v = np.mean(x * x)
    return np.array([np.mean(x[: len(x) - k] * x[k:]) / v for k in lags])


def test_decay_fit_recovers_an_ar1_coefficient():
    # AR(1) autocorrelation rho^|k| (Box and Jenkins 1970, ch. 3)
    rng = np.random.default_rng(7)
    x = _ar1(100_000, 0.8, rng)
    lags = np.arange(1, 7)
    a, nu = fit_exponential_decay(lags, _autocorr(x, lags))
    # standard error of a lag-k autocorrelation ~ 1/sqrt(n): 0.003; a few of them -> 0.01
    assert a == pytest.approx(0.8, abs=0.01)
    assert nu == pytest.approx(0.0, abs=0.02)


def test_decay_fit_recovers_the_nugget_of_ar1_plus_white_noise():
    # x = AR(1) + white noise of variance s2: corr_k = rho^k / (1 + s2) for k >= 1 (Box and Jenkins)
    rng = np.random.default_rng(8)
    s2 = 0.25
    x = _ar1(200_000, 0.7, rng) + np.sqrt(s2) * rng.standard_normal(200_000)
    lags = np.arange(1, 6)
    a, nu = fit_exponential_decay(lags, _autocorr(x, lags))
    assert a == pytest.approx(0.7, abs=0.02)
    assert nu == pytest.approx(s2 / (1 + s2), abs=0.02)


def test_decay_fit_rejects_too_few_points():
    with pytest.raises(ParameterError, match="two or more distinct distances"):
        fit_exponential_decay([1.0, 1.0], [0.5, 0.4])


def test_error_model_fit_agrees_with_scipy_lstsq():
    # ordinary least squares (no ridge) on the quadratic terms equals scipy.linalg.lstsq
    rng = np.random.default_rng(3)
    X = rng.uniform(0, 2, size=(4000, len(CUE_NAMES)))
    truth = rng.normal(0, 0.1, n_coefficients())
    target = quadratic_features(X) @ truth + rng.normal(0, 0.05, len(X))
    e2 = np.expm1(target)  # the model fits log(1 + e^2)
    e2 = np.maximum(e2, 0)
    ok = target > 0
    theta = fit_error_model(X[ok], e2[ok], ridge=0.0)
    ref, *_ = scipy.linalg.lstsq(quadratic_features(X[ok]), np.log1p(e2[ok]))
    np.testing.assert_allclose(theta, ref, rtol=1e-6, atol=1e-8)
    pred = predict_log_variance(X[ok].astype(np.float32), theta)
    np.testing.assert_allclose(pred, quadratic_features(X[ok]) @ ref, atol=1e-3)


def test_coefficient_checks_name_the_parameter():
    with pytest.raises(ParameterError, match="reliability_coefficients must hold"):
        check_coefficients([1.0, 2.0])
    with pytest.raises(ParameterError, match="finite"):
        check_coefficients([np.nan] * n_coefficients())
    with pytest.raises(ParameterError, match="reliability must be one of"):
        SynthParams(reliability="magic")
    p = SynthParams(reliability="learned", reliability_coefficients=tuple([0.0] * n_coefficients()))
    back = SynthParams.from_json(p.to_json())
    assert back == p


def test_side_weights_are_inverse_variance_and_sum_to_one():
    # two candidates, one pixel, one group: variances e^g; weights proportional to 1 / variance
    g = np.log(np.array([[1.0, 4.0], [2.0, 8.0]], np.float32))[:, :, None, None]  # (2 sides, K=2, M=1, G=1)
    valid = np.ones((2, 1), bool)
    share = np.full((2, 1), 0.5, np.float32)
    a, b, conf = side_weights(g, valid, share)
    inv = np.array([1, 1 / 4, 1 / 2, 1 / 8])
    expect = inv / inv.sum()
    np.testing.assert_allclose([a[0, 0, 0], a[1, 0, 0], b[0, 0, 0], b[1, 0, 0]], expect, rtol=1e-5)
    # an endpoint outside its picture (share 1: past only) takes no future weight
    a, b, _ = side_weights(g, valid, np.array([[1.0], [0.5]], np.float32))
    assert b[0, 0, 0] == 0 and a.sum() + b.sum() == pytest.approx(1.0)


@pytest.fixture(scope="module")
def pan_pictures():
    from skimage import data

    bgr = cv2.cvtColor(data.astronaut(), cv2.COLOR_RGB2BGR)
    # 4 samples right and 2 down per picture
    return [
        rgb_to_ycbcr420(np.ascontiguousarray(bgr[150 - 2 * k : 246 - 2 * k, 200 - 4 * k : 328 - 4 * k]))
        for k in range(9)
    ]


def _fields(dx, dy, past_time=0, future_time=4, noise=None):
    """Both coding directions of a pan (quarter-pel), optionally with per-block vector errors."""
    rows, cols = 96 // 16, 128 // 16
    ex = 0 if noise is None else noise[0]
    ey = 0 if noise is None else noise[1]
    back = VectorField.uniform_grid(
        128,
        96,
        block=16,
        coded_time=future_time,
        reference_time=past_time,
        dx=np.full((rows, cols), -dx) + ex,
        dy=np.full((rows, cols), -dy) + ey,
    )
    fwd = VectorField.uniform_grid(
        128,
        96,
        block=16,
        coded_time=past_time,
        reference_time=future_time,
        dx=np.full((rows, cols), dx) - ex,
        dy=np.full((rows, cols), dy) - ey,
    )
    return [back, fwd]


def test_oracles_bound_the_methods_they_cover(pan_pictures):
    # by definition: the per-pixel best candidate is at least as close as any one candidate, so
    # at least as good as plain projection ('nearest', one candidate per pixel); the per-block
    # least-squares weights are at least as good as any fixed weights per block over the same
    # candidates (here the plain mean of the block's candidates)
    rng = np.random.default_rng(1)
    noise = (rng.integers(-12, 13, (6, 8)), rng.integers(-12, 13, (6, 8)))
    fl = _fields(64, 32, noise=noise)
    past, future, truth = pan_pictures[0], pan_pictures[4], pan_pictures[2]
    p = SynthParams()
    st = candidate_stack(past, future, fl, t=0.5, params=p)
    y = truth.y.astype(np.float32)
    best = best_of_k(st, y)
    nearest = synthesise(past, future, fl, t=0.5, params=p, method="nearest").y.astype(np.float32)
    err_best = np.abs(best - y)
    obs = st.obs
    for k in range(st.k):
        assert np.all(err_best <= np.where(st.valid[k], np.abs(obs[k] - y), np.inf) + 1e-4)
    assert np.mean((best - y) ** 2) <= np.mean((nearest - y) ** 2) + 0.5  # nearest is rounded
    st8 = candidate_stack(past, future, fl, t=0.5, params=p, group=8)
    ls = block_least_squares_stack(st8, y, block=8)
    mean_obs = np.where(st8.valid, st8.obs, 0).sum(0) / np.maximum(st8.valid.sum(0), 1)
    assert np.mean((ls - y) ** 2) <= np.mean((mean_obs - y) ** 2) + 1e-3


def test_learned_reliability_in_the_synthesiser(pan_pictures):
    rng = np.random.default_rng(2)
    noise = (rng.integers(-8, 9, (6, 8)), rng.integers(-8, 9, (6, 8)))
    fl = _fields(64, 32, noise=noise)
    past, future = pan_pictures[0], pan_pictures[4]
    theta = np.zeros(n_coefficients())
    theta[1 + CUE_NAMES.index("bilateral")] = 1.0  # trust observations whose endpoints agree
    learned = SynthParams(reliability="learned", learned_share=1.0, reliability_coefficients=tuple(theta.tolist()))
    out = synthesise(past, future, fl, t=0.5, params=learned)
    assert np.isfinite(out.y.astype(float)).all()
    # it follows the stack implementation of the same estimator (weights per 2x2 cell there: loose)
    st = candidate_stack(past, future, fl, t=0.5, params=learned)
    ref = learned_estimate(st, fl, theta)
    assert np.mean(np.abs(out.y.astype(np.float32) - ref)[8:-8, 8:-8]) < 2.0
    # one coding direction: the learned model does not apply, the correlation model is used
    one_l = synthesise(past, future, fl[0], t=0.5, params=learned)
    one_d = synthesise(past, future, fl[0], t=0.5, params=learned.with_changes(reliability="distance"))
    assert np.array_equal(one_l.y, one_d.y)
    cues, _ = stack_side_cues(st, fl)
    assert cues.shape[-1] == len(CUE_NAMES) and np.isfinite(cues).all()
    # the built-in calibrated coefficients are used when the file gives none
    builtin = synthesise(past, future, fl, t=0.5, params=SynthParams(reliability="learned"))
    assert np.isfinite(builtin.y.astype(float)).all()


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory, pan_pictures):
    path = tmp_path_factory.mktemp("clip") / "pan.y4m"
    write_clip(path, pan_pictures[:6])
    return path


def test_calibrate_cli_writes_a_loadable_parameter_file(pan_clip, tmp_path):
    out = tmp_path / "params.json"
    res = CliRunner().invoke(
        app, ["calibrate", str(pan_clip), "-o", str(out), "--gaps", "2,4", "--pictures", "0:5", "--per-gap", "1",
              "--evaluations", "2"]
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    p = SynthParams.load(out)
    assert p.reliability == "learned" and len(p.reliability_coefficients) == n_coefficients()
    assert 0 < p.spatial_correlation < 1 and p.reliability_scale > 0
    doc = json.loads(out.read_text())
    assert set(doc["fit"]) >= {"measured", "refinement", "learned", "psnr"}
    assert "written" in res.stdout and "PSNR-Y" in res.stdout
    # the same run as strict JSON (RFC 8259: no bare Infinity / NaN), without refinement
    res = CliRunner().invoke(
        app, ["calibrate", str(pan_clip), "-o", str(out), "--gaps", "2", "--pictures", ":4", "--per-gap", "1",
              "--no-refine", "--json"]
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.stdout, parse_constant=lambda c: pytest.fail(f"non-strict JSON constant {c}"))
    assert summary["cases"] == 1 and summary["settings"]["pictures"] == [0, 4]
    assert "refinement" not in summary["fit"] and summary["params"]["reliability_coefficients"] == n_coefficients()


def test_calibrate_reports_progress_as_done_total_label(pan_pictures):
    from synth.synthesis.calibrate import TrainingCase, calibrate

    rng = np.random.default_rng(5)
    fl = _fields(64, 32, noise=(rng.integers(-12, 13, (6, 8)), rng.integers(-12, 13, (6, 8))))
    case = TrainingCase("pan", 4, 2, pan_pictures[0], pan_pictures[4], pan_pictures[2], fl)
    seen = []
    calibrate([case], refine=False, progress=lambda done, total, label: seen.append((done, total, label)))
    assert [s[0] for s in seen] == list(range(len(seen))) and seen[-1][0] == seen[-1][1] == len(seen) - 1


@pytest.mark.parametrize(
    "args, message",
    [
        (["--gaps", "3"], "--gaps must be even integers"),
        (["--gaps", "a,b"], "--gaps must be comma-separated"),
        (["--pictures", "0:1"], "--pictures must span at least 3 pictures"),
        (["--pictures", "5:2"], "--pictures must have 0 <= FIRST <= LAST"),
        (["--pictures", "4"], "--pictures must be FIRST:LAST"),
        (["--gaps", "8", "--pictures", "0:5"], "too few for reference distance 8"),
        (["--per-gap", "0"], "--per-gap must be an integer >= 1"),
        (["--vector-qp", "60"], "--vector-qp must be an integer in 0..51"),
    ],
)
def test_calibrate_cli_errors_are_one_line(pan_clip, tmp_path, args, message):
    out = tmp_path / "p.json"
    res = CliRunner().invoke(app, ["calibrate", str(pan_clip), "-o", str(out), *args])
    assert res.exit_code == 2
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("synth: error")]
    assert len(lines) == 1 and message in lines[0], res.stderr
    assert "Traceback" not in res.output and not out.exists()


def test_calibrate_cli_missing_clip(tmp_path):
    res = CliRunner().invoke(app, ["calibrate", str(tmp_path / "none.y4m"), "-o", str(tmp_path / "p.json")])
    assert res.exit_code == 2 and "no such clip" in res.stderr
