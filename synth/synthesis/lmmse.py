r"""The per-pixel optimal linear (LMMSE) estimator and its batched solver.

Model
-----
Let ``y`` be the unknown sample of the target picture at pixel ``p`` and ``o_1 .. o_K`` the
observations the pixel's K candidate vectors give: candidate ``i`` moved to ``p`` points at
``p + d_past_i`` on the past and ``p + d_future_i`` on the future reference, and its observation is
the temporally weighted pair ``o_i = (1 - t) past(p + d_past_i) + t future(p + d_future_i)`` (the
pair mean at t = 0.5; one side only when the other endpoint leaves its picture). All quantities are taken around a local mean and normalised to
unit variance, so correlations are all that is needed.

1. Endpoint agreement of candidate ``i`` (per block, on the patches the block's footprint covers on
   the two references, grown by ``agreement_margin``)::

       rho01_i = clip(1 - mean((P_i - F_i)^2) / (var(P_i) + var(F_i) + c), 0, 1)

   ``c`` is the variance floor ``agreement_floor`` (noise). For zero-mean patches of equal variance
   this is their correlation coefficient; the mean difference and the floor make flat, matching
   patches agree and flat, mismatching ones disagree.

2. Correlation of observation ``i`` with ``y``. Along the true trajectory the samples form a Markov
   chain ``s0 -> y -> s1``; with equal correlation on each link, ``corr(s0, s1) = rho_t^2``, so the
   link correlation is the square root of the endpoint correlation (checked by simulation in the
   tests). The candidate is reliable near where its vector landed and less so away from it::

       r_i = min(sqrt(rho01_i) * exp(-dist_i / L), r_max)

   ``dist_i`` is the pixel's distance (luma samples) to the block's footprint at the target time
   (0 inside it), ``L`` the ``reliability_scale`` and ``r_max`` the ``max_correlation``.

3. Correlation between observations ``i`` and ``j``: the part of each explained by ``y`` plus an
   innovation (what each observation has that ``y`` does not)::

       R_ij = r_i r_j + sqrt((1 - r_i^2)(1 - r_j^2)) * ((1 - nu) a^delta_ij + nu [i == j])

   ``a`` is the ``spatial_correlation`` per luma sample, ``delta_ij = (|d_past_i - d_past_j| +
   |d_future_i - d_future_j|) / 2`` the mean distance between the two candidates' sample points on
   the two references, and ``nu`` the ``innovation_nugget`` (an uncorrelated share of the innovation;
   it keeps R well conditioned when two candidates carry the same vector). ``R_ii = 1``. The direct
   solver adds ``loading`` to the diagonal.

4. Weights and estimate. The LMMSE weights solve ``R w = r`` (Wiener-Hopf normal equations; S. M.
   Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, 1993, ch. 12). The weights
   are applied around the mean ``m`` of the pixel's valid observations, unnormalised::

       y_hat = m + sum_i w_i (o_i - m)

   so when no candidate is trustworthy (all ``r_i`` small) the estimate falls back to ``m``. The
   share of the variance of ``y`` explained, ``r^T w = r^T R^{-1} r`` (in [0, 1]), is the pixel's
   *confidence*; ``1 - r^T w`` is the model's normalised mean squared error.

5. Posterior variance. With ``s^2`` the variance of ``y`` around the local mean, the estimator's
   posterior (error) variance, its minimum Bayesian MSE ``C_yy - C_yo C_oo^{-1} C_oy`` (Kay 1993,
   ch. 12), is in the normalised model::

       v_post = s^2 (1 - r^T R^{-1} r)

   (:func:`posterior_variance`; the synthesiser's ``posterior_variance`` map, see
   `synth.synthesis.reliability`, "Predicted error").

Solver
------
``R`` is symmetric positive definite. :func:`solve_spd_batched` solves all pixels' systems at once
with a Cholesky factorisation ``R = L L^T`` written over the pixel axis: Python loops run over the
K x K entries only, every operation is a numpy operation over a tile of pixels (structure-of-arrays
layout, entries ``(i, j)`` contiguous over pixels). Systems whose pivots fall below a tolerance are
solved again with ten times the loading (up to four times); a system that still fails gets zero
weights. No NaN leaves the solver.

The synthesiser uses the structure of ``R`` (:func:`lmmse_weights_structured`): ``R = r r^T + S C S``
with ``C`` shared by all pixels of a candidate group, so by the Sherman-Morrison formula one Cholesky
factorisation of ``C`` per group and two triangular solves per pixel give the same weights as a
per-pixel solve (checked in the tests). There ``loading`` is added to ``C``'s diagonal.
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError

__all__ = [
    "solve_spd_batched",
    "cholesky_solve_soa",
    "endpoint_agreement_stats",
    "link_correlation",
    "distance_reliability",
    "innovation_correlation",
    "lmmse_weights_soa",
    "lmmse_weights_structured",
    "posterior_variance",
]

#: Pixels per tile in the batched solver (entries of a tile stay in the CPU caches).
SOLVER_TILE = 8192
_MAX_RETRIES = 4


# ------------------------------------------------------------------------------------------------
# Batched SPD solver
# ------------------------------------------------------------------------------------------------
def _cholesky_tile(A, b, loading, eps):
    """Factor and solve one tile in place. A: list of lists of (n,) arrays (lower triangle used),
    b: list of (n,) or (m, n) arrays. Returns (x list, ok mask)."""
    K = len(A)
    dtype = A[0][0].dtype
    diag_scale = sum(A[i][i] for i in range(K)) / K
    load = loading * diag_scale
    tol = eps * diag_scale
    ok = np.isfinite(diag_scale) & (diag_scale > 0)
    L = [[None] * K for _ in range(K)]
    inv_diag = [None] * K
    for j in range(K):
        d = A[j][j] + load
        for k in range(j):
            d = d - L[j][k] * L[j][k]
        good = d > tol
        ok &= good
        d = np.where(good, d, np.ones((), dtype))
        ljj = np.sqrt(d)
        inv = np.divide(np.ones((), dtype), ljj)
        inv_diag[j] = inv
        L[j][j] = ljj
        for i in range(j + 1, K):
            s = A[i][j].copy()
            for k in range(j):
                s -= L[i][k] * L[j][k]
            s *= inv
            L[i][j] = s
    # forward substitution L z = b
    z = [None] * K
    for i in range(K):
        s = b[i].copy()
        for k in range(i):
            s -= L[i][k] * z[k]
        s *= inv_diag[i]
        z[i] = s
    # back substitution L^T x = z
    x = [None] * K
    for i in range(K - 1, -1, -1):
        s = z[i]
        for k in range(i + 1, K):
            s = s - L[k][i] * x[k]
        x[i] = s * inv_diag[i]
    return x, ok


def cholesky_solve_soa(
    A: np.ndarray, b: np.ndarray, *, loading: float = 0.0, tile: int = SOLVER_TILE
) -> tuple[np.ndarray, np.ndarray]:
    """Solve SPD systems laid out structure-of-arrays: ``A`` (K, K, P), ``b`` (K, P) or (K, M, P).

    Only the lower triangle of ``A`` is read. Returns ``(x, ok)`` with ``x`` like ``b`` and ``ok``
    (P,) bool, False where the system needed more loading than allowed (its ``x`` is zero).
    See :func:`solve_spd_batched` for the method.
    """
    K, K2, P = A.shape
    if K != K2:
        raise ParameterError(f"A must have shape (K, K, P), got {A.shape}")
    dtype = A.dtype
    eps = np.finfo(dtype).eps * 16 * K
    x = np.zeros_like(b)
    ok_all = np.zeros(P, bool)
    for p0 in range(0, P, tile):
        p1 = min(P, p0 + tile)
        At = [[A[i, j, p0:p1] for j in range(K)] for i in range(K)]
        bt = [b[i, ..., p0:p1] for i in range(K)]
        xs, ok = _cholesky_tile(At, bt, dtype.type(loading), eps)
        for i in range(K):
            x[i, ..., p0:p1] = xs[i]
        ok_all[p0:p1] = ok
    # Retry failed systems with more loading; zero weights for systems that still fail.
    load = max(float(loading), 1e-6)
    for _ in range(_MAX_RETRIES):
        bad = np.flatnonzero(~ok_all)
        if bad.size == 0:
            break
        load *= 10.0
        Ab = A[:, :, bad]
        bb = b[..., bad]
        xs, ok = _cholesky_tile(
            [[Ab[i, j] for j in range(K)] for i in range(K)], [bb[i] for i in range(K)], dtype.type(load), eps
        )
        for i in range(K):
            x[i, ..., bad] = np.where(ok, xs[i], 0)
        ok_all[bad] = ok
    x[..., ~ok_all] = 0
    bad = ~np.isfinite(x)
    if bad.any():  # overflow in a degenerate system: never let it out
        x[bad] = 0
        ok_all &= ~np.any(bad.reshape(-1, P), axis=0)
    return x, ok_all


def solve_spd_batched(R: np.ndarray, r: np.ndarray, *, loading: float = 0.0, tile: int = SOLVER_TILE) -> np.ndarray:
    """Solve ``R[p] w[p] = r[p]`` for a stack of symmetric positive definite systems.

    Parameters
    ----------
    R : ndarray, shape (P, K, K)
        Symmetric positive (semi-)definite matrices (the lower triangle is read). float32 or float64
        (other dtypes are computed in float64); the result has R's working dtype.
    r : ndarray, shape (P, K) or (P, K, M)
        Right-hand sides.
    loading : float
        Diagonal loading, relative to the mean of each matrix's diagonal.
    tile : int
        Systems per tile.

    Returns
    -------
    ndarray, shape like ``r``
        The solutions; zero for a system that stays numerically singular after four rounds of
        ten-fold increased loading. Never NaN.

    Raises
    ------
    ParameterError
        On mismatched shapes, negative loading or non-finite entries.

    Notes
    -----
    Cholesky factorisation (G. H. Golub and C. F. Van Loan, Matrix Computations, 4th ed., 2013,
    algorithm 4.2.1) written over the system axis: Python loops over the K x K entries, numpy over
    the systems of a tile (structure-of-arrays layout). Diagonal loading as in ridge regression
    (A. E. Hoerl and R. W. Kennard, Technometrics 12(1), 1970, doi:10.1080/00401706.1970.10488634).
    """
    R = np.asarray(R)
    r = np.asarray(r)
    if R.ndim != 3 or R.shape[1] != R.shape[2]:
        raise ParameterError(f"R must have shape (P, K, K), got {R.shape}")
    P, K, _ = R.shape
    if r.shape[:2] != (P, K) or r.ndim not in (2, 3):
        raise ParameterError(f"r must have shape ({P}, {K}) or ({P}, {K}, M), got {r.shape}")
    if not np.isfinite(loading) or loading < 0:
        raise ParameterError(f"loading must be finite and >= 0, got {loading}")
    dtype = R.dtype if R.dtype in (np.float32, np.float64) else np.dtype(np.float64)
    if not (np.all(np.isfinite(R)) and np.all(np.isfinite(r))):
        raise ParameterError("R and r must hold finite numbers only (found NaN or infinity)")
    A = np.ascontiguousarray(np.moveaxis(R.astype(dtype, copy=False), 0, -1))  # (K, K, P)
    if r.ndim == 2:
        b = np.ascontiguousarray(r.astype(dtype, copy=False).T)  # (K, P)
        x, _ = cholesky_solve_soa(A, b, loading=loading, tile=tile)
        return np.ascontiguousarray(x.T)
    b = np.ascontiguousarray(np.moveaxis(r.astype(dtype, copy=False), 0, -1))  # (K, M, P)
    x, _ = cholesky_solve_soa(A, b, loading=loading, tile=tile)
    return np.ascontiguousarray(np.moveaxis(x, -1, 0))


# ------------------------------------------------------------------------------------------------
# Model terms
# ------------------------------------------------------------------------------------------------
def endpoint_agreement_stats(past_patches: np.ndarray, future_patches: np.ndarray, *, floor: float) -> np.ndarray:
    """Endpoint agreement ``rho01`` of each pair of patches (equation 1 of the module docstring).

    Parameters
    ----------
    past_patches, future_patches : ndarray, shape (n, m)
        Samples of the n candidates' patches (m samples each) on the two references.
    floor : float
        Variance floor ``c`` in squared sample units.

    Returns
    -------
    ndarray of float32, shape (n,), in [0, 1]
    """
    a = past_patches.astype(np.float32, copy=False)
    b = future_patches.astype(np.float32, copy=False)
    m = np.float32(1.0 / a.shape[1])
    diff = a - b
    mse = np.einsum("ij,ij->i", diff, diff) * m
    ma, mb = a.sum(axis=1) * m, b.sum(axis=1) * m
    va = np.maximum(np.einsum("ij,ij->i", a, a) * m - ma * ma, 0)
    vb = np.maximum(np.einsum("ij,ij->i", b, b) * m - mb * mb, 0)
    rho = 1.0 - mse / (va + vb + np.float32(floor))
    return np.clip(rho, 0.0, 1.0).astype(np.float32)


def link_correlation(endpoint_correlation):
    """Correlation of each link of a symmetric Markov chain ``s0 -> y -> s1`` from ``corr(s0, s1)``.

    For a chain with ``corr(s0, y) = corr(y, s1) = rho_t`` and ``s0``, ``s1`` independent given ``y``,
    ``corr(s0, s1) = rho_t ** 2`` (Markov property; e.g. A. Papoulis and S. U. Pillai, Probability,
    Random Variables and Stochastic Processes, 4th ed., 2002, ch. 15); the link is its square root.
    """
    return np.sqrt(np.clip(endpoint_correlation, 0.0, 1.0))


def distance_reliability(distance, *, scale: float):
    """Reliability ``exp(-distance / scale)`` of a candidate at a distance from its landing spot."""
    return np.exp(-np.asarray(distance) / np.float32(scale))


def innovation_correlation(dpx, dpy, dfx, dfy, valid, *, spatial_correlation: float, nugget: float) -> np.ndarray:
    """Innovation correlation matrices ``(1 - nu) a^delta_ij + nu [i == j]`` per group.

    Parameters
    ----------
    dpx, dpy, dfx, dfy : ndarray, shape (K, G)
        Candidates' displacements to their past and future endpoints (luma samples), for G groups.
    valid : ndarray of bool, shape (K, G)
        Slots holding a candidate; invalid slots get an identity row and column.

    Returns
    -------
    ndarray of float32, shape (K, K, G)
    """
    dpx, dpy, dfx, dfy = (np.asarray(v, np.float32) for v in (dpx, dpy, dfx, dfy))
    K, G = dpx.shape
    ex = dpx[:, None, :] - dpx[None, :, :]
    ey = dpy[:, None, :] - dpy[None, :, :]
    delta = np.sqrt(ex * ex + ey * ey)
    ex = dfx[:, None, :] - dfx[None, :, :]
    ey = dfy[:, None, :] - dfy[None, :, :]
    delta += np.sqrt(ex * ex + ey * ey)
    # a ** (delta / 2) = exp(ln(a) / 2 * delta)
    C = np.exp(delta * np.float32(0.5 * np.log(spatial_correlation)))
    C *= np.float32(1.0 - nugget)
    eye = np.eye(K, dtype=bool)
    C[eye] = 1.0
    pair_valid = valid[:, None, :] & valid[None, :, :]
    C = np.where(pair_valid | eye[:, :, None], C, np.float32(0))
    return C.astype(np.float32, copy=False)


def lmmse_weights_soa(r: np.ndarray, C: np.ndarray, *, loading: float) -> tuple[np.ndarray, np.ndarray]:
    """LMMSE weights for every pixel (equations 3-4 of the module docstring).

    Parameters
    ----------
    r : ndarray of float32, shape (K, P)
        Correlation of each candidate's observation with the pixel (0 for empty slots).
    C : ndarray of float32, shape (K, K, P), or callable (i, j) -> ndarray (P,)
        Innovation correlation of each pixel's candidates (identity rows for empty slots); a
        callable is asked for the entries below the diagonal only.
    loading : float
        Diagonal loading of R.

    Returns
    -------
    w : ndarray of float32, shape (K, P)
    confidence : ndarray of float32, shape (P,)
        ``r^T w`` clipped to [0, 1].
    """
    K, P = r.shape
    s = np.sqrt(np.maximum(1.0 - r * r, 0.0)).astype(np.float32)
    R = np.empty((K, K, P), np.float32)
    for i in range(K):
        for j in range(i + 1):
            if i == j:
                R[i, i] = 1.0
            else:
                cij = C(i, j) if callable(C) else C[i, j]
                R[i, j] = r[i] * r[j] + s[i] * s[j] * cij
    w, _ = cholesky_solve_soa(R, r, loading=loading)
    conf = np.zeros(P, np.float32)
    for i in range(K):
        conf += r[i] * w[i]
    return w, np.clip(conf, 0.0, 1.0)


def lmmse_weights_structured(r: np.ndarray, C: np.ndarray, *, loading: float) -> tuple[np.ndarray, np.ndarray]:
    """LMMSE weights when the innovation correlation ``C`` is shared by several pixels.

    ``R = r r^T + S C S`` with ``S = diag(sqrt(1 - r_i^2))``. By the Sherman-Morrison formula
    (J. Sherman and W. J. Morrison, Ann. Math. Statist. 21(1), 1950, doi:10.1214/aoms/1177729893)

        R^{-1} r = u / (1 + r^T u),   u = S^{-1} C^{-1} S^{-1} r,

    so one Cholesky factorisation of ``C`` per group serves all its pixels; per pixel only two
    triangular solves remain. ``loading`` is added to the diagonal of ``C`` (relative to its mean
    diagonal, which is 1): in ``R`` this is loading proportional to ``1 - r_i^2``.

    Parameters
    ----------
    r : ndarray of float32, shape (K, M, G)
        Correlations of the candidates of M pixels in each of G groups (0 for empty slots).
    C : ndarray of float32, shape (K, K, G)
        Innovation correlation per group (identity rows/columns for empty slots).
    loading : float

    Returns
    -------
    w : ndarray of float32, shape (K, M, G)
    confidence : ndarray of float32, shape (M, G)
        ``r^T w = r^T u / (1 + r^T u)``.
    """
    s = np.sqrt(np.maximum(np.float32(1) - r * r, np.float32(1e-6)))
    z = r / s
    y, _ = cholesky_solve_soa(C, z, loading=loading)
    u = y / s
    ru = _dot_k(r, u)
    inv = np.float32(1) / (np.float32(1) + np.maximum(ru, np.float32(0)))
    w = u * inv[None]
    conf = np.clip(ru * inv, 0.0, 1.0).astype(np.float32)
    return w.astype(np.float32, copy=False), conf


def _dot_k(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """sum over the first axis of a * b, in slot order (deterministic)."""
    acc = a[0] * b[0]
    for k in range(1, a.shape[0]):
        acc += a[k] * b[k]
    return acc


def posterior_variance(confidence, signal_variance):
    """Posterior (error) variance of the LMMSE estimate: ``s^2 (1 - r^T R^{-1} r)``.

    Parameters
    ----------
    confidence : array_like
        ``r^T R^{-1} r``, the share of the variance explained (as returned by
        :func:`lmmse_weights_structured` and :func:`lmmse_weights_soa`), in [0, 1].
    signal_variance : array_like, broadcastable
        ``s^2``, the prior variance of the sample around its local mean (any unit; the result is in
        the same unit).

    Returns
    -------
    ndarray of float32

    Notes
    -----
    For the LMMSE estimator of ``y`` from zero-mean observations ``o`` the minimum Bayesian MSE is
    ``C_yy - C_yo C_oo^{-1} C_oy`` (S. M. Kay, Fundamentals of Statistical Signal Processing:
    Estimation Theory, 1993, ch. 12). With ``C_yy = s^2`` and every observation normalised to unit
    variance, ``C_yo = s r^T`` and ``C_oo = R``, so it is ``s^2 (1 - r^T R^{-1} r)``. One observation
    ``o = y + n`` gives ``s^2 sigma_n^2 / (s^2 + sigma_n^2)``; N independent ones of equal noise give
    ``(1 / s^2 + N / sigma_n^2)^{-1}``.

    Examples
    --------
    >>> float(posterior_variance(0.75, 16.0))
    4.0
    """
    c = np.clip(np.asarray(confidence, np.float32), np.float32(0), np.float32(1))
    return ((np.float32(1) - c) * np.asarray(signal_variance, np.float32)).astype(np.float32)
