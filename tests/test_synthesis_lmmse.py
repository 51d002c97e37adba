"""The estimator core: batched SPD solver, LMMSE weights, model terms."""

import numpy as np
import pytest
import scipy.linalg

from synth import ParameterError
from synth.synthesis.lmmse import (
    endpoint_agreement_stats,
    innovation_correlation,
    link_correlation,
    lmmse_weights_soa,
    lmmse_weights_structured,
    solve_spd_batched,
)


def _random_spd(rng, n, k, dtype, cond_floor=0.05):
    b = rng.standard_normal((n, k, k))
    a = b @ np.swapaxes(b, 1, 2) / k + cond_floor * np.eye(k)[None]
    return a.astype(dtype)


@pytest.mark.parametrize("k", [1, 3, 8, 12])
def test_batched_cholesky_matches_scipy_float64(k):
    # Reference library: scipy.linalg.solve (LAPACK gesv) on every system; relative error 1e-6 (float64).
    rng = np.random.default_rng(1)
    R = _random_spd(rng, 3000, k, np.float64)
    r = rng.standard_normal((3000, k))
    w = solve_spd_batched(R, r)
    ref = np.stack([scipy.linalg.solve(R[i], r[i], assume_a="pos") for i in range(len(R))])
    rel = np.linalg.norm(w - ref, axis=1) / np.linalg.norm(ref, axis=1)
    assert rel.max() < 1e-6


def test_batched_cholesky_matches_scipy_float32():
    # Same check in float32. Tolerance: the forward error bound of a Cholesky solve is about
    # cond(R) * k * eps (Golub & Van Loan, Matrix Computations, 4th ed., section 4.2.7); with
    # eps(float32) = 1.2e-7, k = 8 and cond(R) <= ~1e3 for these systems, 1e-3 relative leaves margin.
    rng = np.random.default_rng(2)
    R = _random_spd(rng, 3000, 8, np.float64)
    r = rng.standard_normal((3000, 8))
    cond = np.linalg.cond(R)
    assert cond.max() < 2e3
    w = solve_spd_batched(R.astype(np.float32), r.astype(np.float32))
    assert w.dtype == np.float32
    ref = np.stack([scipy.linalg.solve(R[i], r[i], assume_a="pos") for i in range(len(R))])
    rel = np.linalg.norm(w - ref, axis=1) / np.linalg.norm(ref, axis=1)
    assert rel.max() < 1e-3
    assert np.median(rel) < 1e-5


def test_several_right_hand_sides():
    rng = np.random.default_rng(3)
    R = _random_spd(rng, 200, 5, np.float64)
    r = rng.standard_normal((200, 5, 3))
    w = solve_spd_batched(R, r)
    assert w.shape == (200, 5, 3)
    np.testing.assert_allclose(np.einsum("pij,pjm->pim", R, w), r, rtol=1e-8, atol=1e-9)


def test_ar1_optimal_weights_are_markov():
    # Textbook result (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory,
    # 1993, ch. 12; Markov property of an AR(1) sequence): predicting x[n] from x[n-1], x[n-2],
    # x[n-3] with correlation rho^|k| gives weights (rho, 0, 0).
    rhos = np.array([0.1, 0.5, 0.8, 0.95, 0.99])
    lags = np.arange(1, 4)
    R = rhos[:, None, None] ** np.abs(lags[:, None] - lags[None, :])[None]
    r = rhos[:, None] ** lags[None, :]
    w = solve_spd_batched(R, r)
    expected = np.zeros_like(r)
    expected[:, 0] = rhos
    np.testing.assert_allclose(w, expected, atol=1e-9)
    # the structured solver of the synthesiser reproduces it: R = r r^T + S C S with
    # C_ij = (R_ij - r_i r_j) / (s_i s_j)
    s = np.sqrt(1 - r**2)
    C = (R - r[:, :, None] * r[:, None, :]) / (s[:, :, None] * s[:, None, :])
    w2, conf = lmmse_weights_structured(
        r.T[:, None, :].astype(np.float32), np.moveaxis(C, 0, -1).astype(np.float32), loading=0.0
    )
    np.testing.assert_allclose(w2[:, 0, :].T, expected, atol=2e-4)
    # explained variance r^T w = rho^2 (one-step prediction error 1 - rho^2, Kay ch. 12)
    np.testing.assert_allclose(conf[0], rhos**2, atol=2e-4)


def test_structured_solver_equals_direct_solve():
    # Sherman-Morrison identity (Sherman & Morrison 1950) against the explicit R of the model.
    rng = np.random.default_rng(4)
    K, M, G = 8, 4, 300
    d = rng.normal(0, 3, (4, K, G)).astype(np.float32)
    valid = rng.random((K, G)) > 0.1
    C = innovation_correlation(*d, valid, spatial_correlation=0.8, nugget=0.1)
    r = (rng.random((K, M, G)) * 0.95).astype(np.float32) * valid[:, None, :]
    w, conf = lmmse_weights_structured(r, C, loading=0.0)
    # direct: R = r r^T + S C S per pixel, solved with solve_spd_batched
    rr = np.moveaxis(r, 0, -1).reshape(-1, K).astype(np.float64)  # (M*G, K)
    Cp = np.broadcast_to(np.moveaxis(C, -1, 0)[None], (M, G, K, K)).reshape(-1, K, K).astype(np.float64)
    s = np.sqrt(1 - rr**2)
    R = rr[:, :, None] * rr[:, None, :] + s[:, :, None] * s[:, None, :] * Cp
    ref = solve_spd_batched(R, rr)
    got = np.moveaxis(w, 0, -1).reshape(-1, K)
    np.testing.assert_allclose(got, ref, atol=2e-4)
    np.testing.assert_allclose(conf.reshape(-1), np.sum(rr * ref, axis=1), atol=2e-4)
    # and the per-pixel direct path of the estimator agrees too
    w3, conf3 = lmmse_weights_soa(rr.T.astype(np.float32), np.moveaxis(Cp, 0, -1).astype(np.float32), loading=0.0)
    np.testing.assert_allclose(w3.T, ref, atol=2e-4)


def test_markov_chain_endpoint_correlation_is_squared():
    # Monte Carlo of s0 -> y -> s1 with link correlation rho_t (fixed seed). corr(s0, s1) = rho_t^2
    # (Markov chain; e.g. Papoulis & Pillai, Probability, Random Variables and Stochastic Processes,
    # 4th ed., 2002, ch. 15); the sample correlation's standard deviation is about (1 - rho^2)/sqrt(n).
    rng = np.random.default_rng(5)
    n = 400_000
    for rho_t in (0.5, 0.8, 0.95):
        s0 = rng.standard_normal(n)
        y = rho_t * s0 + np.sqrt(1 - rho_t**2) * rng.standard_normal(n)
        s1 = rho_t * y + np.sqrt(1 - rho_t**2) * rng.standard_normal(n)
        measured = np.corrcoef(s0, s1)[0, 1]
        sd = (1 - rho_t**4) / np.sqrt(n)
        assert abs(measured - rho_t**2) < 5 * sd
        assert abs(float(link_correlation(measured)) - rho_t) < 5 * sd / (2 * rho_t)


def test_endpoint_agreement_is_the_correlation_for_zero_mean_patches():
    # Reference: numpy.corrcoef. For zero-mean patches of equal variance and no floor, equation 1 of
    # synth.synthesis.lmmse is the correlation coefficient.
    rng = np.random.default_rng(6)
    a = rng.standard_normal((500, 256))
    noise = rng.standard_normal((500, 256))
    rho = rng.uniform(0.05, 0.95, 500)
    b = rho[:, None] * a + np.sqrt(1 - rho[:, None] ** 2) * noise
    a -= a.mean(axis=1, keepdims=True)
    b -= b.mean(axis=1, keepdims=True)
    b *= a.std(axis=1, keepdims=True) / b.std(axis=1, keepdims=True)
    got = endpoint_agreement_stats(a * 40, b * 40, floor=1e-6)
    ref = np.array([np.corrcoef(a[i], b[i])[0, 1] for i in range(500)])
    np.testing.assert_allclose(got, np.clip(ref, 0, 1), atol=1e-4)
    # identical patches agree fully, flat matching ones too (the floor), flat mismatching ones do not
    flat = np.full((1, 64), 100.0)
    assert endpoint_agreement_stats(a[:1] * 40, a[:1] * 40, floor=20)[0] == pytest.approx(1.0)
    assert endpoint_agreement_stats(flat, flat, floor=20)[0] == pytest.approx(1.0)
    assert endpoint_agreement_stats(flat, flat + 30, floor=20)[0] == 0.0


def test_singular_and_degenerate_systems_never_give_nan():
    rng = np.random.default_rng(7)
    R = np.zeros((50, 4, 4), np.float32)
    R[:10] = 1.0  # rank one
    R[10:20] = np.eye(4) * 1e-30
    R[20:] = _random_spd(rng, 30, 4, np.float32)
    r = rng.standard_normal((50, 4)).astype(np.float32)
    w = solve_spd_batched(R, r, loading=0.0)
    assert np.all(np.isfinite(w))
    # the healthy systems are unaffected by their neighbours' failures
    ref = np.stack([np.linalg.solve(R[i].astype(np.float64), r[i]) for i in range(20, 50)])
    np.testing.assert_allclose(w[20:], ref, rtol=2e-3, atol=2e-3)


def test_solver_rejects_bad_input():
    with pytest.raises(ParameterError, match="R must have shape"):
        solve_spd_batched(np.zeros((3, 2, 4)), np.zeros((3, 2)))
    with pytest.raises(ParameterError, match="r must have shape"):
        solve_spd_batched(np.eye(2)[None], np.zeros((1, 3)))
    with pytest.raises(ParameterError, match="NaN"):
        solve_spd_batched(np.full((1, 2, 2), np.nan), np.zeros((1, 2)))
    with pytest.raises(ParameterError, match="loading"):
        solve_spd_batched(np.eye(2)[None], np.zeros((1, 2)), loading=-1)


def test_innovation_correlation_decays_with_vector_difference():
    # (1 - nu) a^delta + nu [i == j], delta the mean distance of the sample points on the two sides
    dpx = np.array([[0.0], [2.0], [0.0]], np.float32)
    zeros = np.zeros_like(dpx)
    valid = np.array([[True], [True], [False]])
    C = innovation_correlation(dpx, zeros, -dpx, zeros, valid, spatial_correlation=0.5, nugget=0.2)
    assert C.shape == (3, 3, 1)
    np.testing.assert_allclose(np.diag(C[:, :, 0]), 1.0)
    assert C[0, 1, 0] == pytest.approx(0.8 * 0.5**2)  # delta = (2 + 2) / 2
    assert C[0, 2, 0] == 0 and C[2, 1, 0] == 0  # empty slot decoupled
