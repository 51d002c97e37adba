"""Calibration of the one-reference predictor's parameters: measured statistics, then refinement by
prediction PSNR (the two steps of `synth.synthesis.calibrate`, for the model of
`synth.synthesis.one_reference`).

1. Measured statistics (:func:`measure_one_reference_statistics`), on sampled pixels of training
   cases with their true pictures: the errors ``e_i = o_i - y`` of two candidates' observations
   correlate as ``a^{|v_i - v_j|}`` (binned by the vector distance, fitted by
   `synth.synthesis.calibrate.fit_exponential_decay`), which gives ``a``; each observation's
   correlation with the truth, ``1 - E[e^2] / (E[(y - m)^2] + E[e^2])`` (``m`` the mean of the
   pixel's observations, as `synth.synthesis.calibrate.measure_statistics` measures it), binned by
   ``u^2`` inside the blocks, decays as ``exp(-beta u^2)`` (the same fit with ``u^2`` as the lag),
   which gives ``beta``; outside the blocks its ratio to that curve gives ``gamma``.
2. Refinement (:func:`refine_one_reference_params`): a grid over ``a`` (``spatial_correlation``), ``beta`` (``reliability_decay``) and ``gamma``
(``outside_factor``) around a starting point; each setting predicts every training case
(`synth.synthesis.one_reference.predict_one_reference`) and the setting with the highest mean
PSNR-Y wins (ties: the earlier setting in grid order, so the result is reproducible). A search of
this kind is common practice for a handful of model parameters.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Sequence
from dataclasses import replace

import numpy as np

from synth.errors import ParameterError
from synth.metrics import plane_psnr
from synth.synthesis.calibrate import binned, fit_exponential_decay
from synth.synthesis.candidates import CandidateSearch
from synth.synthesis.one_reference import (
    OneReferenceParams,
    _landed,
    _own_first,
    own_block_map,
    predict_one_reference,
    sample_with_vector_maps,
)

__all__ = [
    "refine_one_reference_params",
    "measure_one_reference_statistics",
    "calibrate_one_reference",
    "DEFAULT_GRID",
]

#: Values tried per parameter.
DEFAULT_GRID = {
    "spatial_correlation": (0.8, 0.9, 0.95, 0.98),
    "reliability_decay": (0.5, 1.0, 2.0, 4.0),
    "outside_factor": (0.25, 0.5, 1.0),
}


def refine_one_reference_params(
    cases: Sequence[tuple],
    *,
    start: OneReferenceParams | None = None,
    grid: dict[str, Sequence[float]] | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> tuple[OneReferenceParams, list[dict]]:
    """The grid setting with the best mean prediction PSNR-Y over `cases`.

    Parameters
    ----------
    cases : sequence of (target, reference, field)
        True pictures, their references and their own fields against them.
    start : OneReferenceParams, optional
        Values of the parameters the grid does not name.
    grid : dict of name -> values, optional
        Default `DEFAULT_GRID`.
    progress : callable, optional

    Returns
    -------
    (OneReferenceParams, list of dict)
        The best parameters and one row per setting (its values and ``psnr_y``).
    """
    if not cases:
        raise ParameterError("calibration needs at least one case")
    start = start or OneReferenceParams()
    grid = dict(DEFAULT_GRID if grid is None else grid)
    names = list(grid)
    settings = list(itertools.product(*(grid[n] for n in names)))
    rows = []
    best, best_psnr = start, -np.inf
    for i, values in enumerate(settings):
        params = replace(start, **dict(zip(names, values)))
        psnrs = [
            plane_psnr(predict_one_reference(ref, field, params=params).y, target.y, bit_depth=target.bit_depth)
            for target, ref, field in cases
        ]
        mean = float(np.mean(psnrs))
        rows.append({**dict(zip(names, values)), "psnr_y": mean})
        if mean > best_psnr:
            best, best_psnr = params, mean
        if progress is not None:
            progress(i + 1, len(settings), f"setting {i + 1}")
    return best, rows


def _slots(field, params: OneReferenceParams) -> tuple[np.ndarray, np.ndarray]:
    """Candidate block per slot and pixel, (K, H, W) indices into the inter blocks (-1 empty)."""
    H, W, K, g = field.height, field.width, params.candidates, params.group
    own, inter = own_block_map(field)
    if len(inter) == 0:
        return np.full((K, H, W), -1, np.int32), inter
    search = CandidateSearch(_landed(field, inter), height=H, width=W, k=K, group=g, reach=params.reach)
    near = search.for_group_rows(0, search.rows)
    near = np.repeat(np.repeat(near, g, axis=0), g, axis=1)[:H, :W]
    return np.moveaxis(_own_first(own, near, K), -1, 0), inter


def measure_one_reference_statistics(
    cases: Sequence[tuple], *, params: OneReferenceParams | None = None, pixels: int = 20000, seed: int = 0
) -> dict:
    """Step 1 of the module docstring: ``a``, ``beta`` and ``gamma`` measured on training cases.

    Parameters
    ----------
    cases : sequence of (target, reference, field)
    params : OneReferenceParams, optional
        Candidate count, group and reach of the candidate search.
    pixels : int
        Pixels sampled per case (with at least two candidates).
    seed : int

    Returns
    -------
    dict
        ``spatial_correlation``, ``reliability_decay``, ``outside_factor`` and the binned
        measurements (``pair_correlation``, ``inside_reliability``, ``outside_reliability``).

    Raises
    ------
    ParameterError
        When the cases hold no pixel with two candidates.
    """
    p = params or OneReferenceParams()
    rng = np.random.default_rng(seed)
    e_i, e_j, d_ij, u2s, inside, errs, devs = [], [], [], [], [], [], []
    for target, reference, field in cases:
        slots, inter = _slots(field, p)
        valid = slots >= 0
        has = valid.sum(axis=0) >= 2
        if not has.any():
            continue
        pick = rng.choice(np.flatnonzero(has.ravel()), min(pixels, int(has.sum())), replace=False)
        K = slots.shape[0]
        safe = np.where(valid, slots, 0)
        qx = np.where(valid, field.dx[inter][safe], 0).astype(np.int32)
        qy = np.where(valid, field.dy[inter][safe], 0).astype(np.int32)
        obs = []
        for k in range(K):  # each slot's observation plane (one-hot coefficients)
            one = np.zeros((1,) + slots.shape[1:], np.float32)
            one[0] = 1
            obs.append(sample_with_vector_maps(_luma_only(reference), qx[k : k + 1], qy[k : k + 1], one).y)
        o = np.stack(obs).reshape(K, -1)[:, pick].astype(np.float64)
        v = valid.reshape(K, -1)[:, pick]
        y = target.y.ravel()[pick].astype(np.float64)
        e = o - y[None]
        m = np.where(v, o, 0).sum(0) / np.maximum(v.sum(0), 1)
        fx, fy = qx.reshape(K, -1)[:, pick] / 4.0, qy.reshape(K, -1)[:, pick] / 4.0
        H, W = slots.shape[1:]
        px, py = (pick % W).astype(np.float64), (pick // W).astype(np.float64)
        b = safe.reshape(K, -1)[:, pick]
        bx, by = field.x[inter][b], field.y[inter][b]
        bw, bh = field.w[inter][b].astype(np.float64), field.h[inter][b].astype(np.float64)
        u2 = ((px - (bx + (bw - 1) / 2)) / bw) ** 2 + ((py - (by + (bh - 1) / 2)) / bh) ** 2
        ins = (px >= bx) & (px < bx + bw) & (py >= by) & (py < by + bh)
        for i in range(K):
            u2s.append(u2[i][v[i]])
            inside.append(ins[i][v[i]])
            errs.append(e[i][v[i]] ** 2)
            devs.append(((y - m) ** 2)[v[i]])
            for j in range(i + 1, K):
                both = v[i] & v[j]
                e_i.append(e[i][both])
                e_j.append(e[j][both])
                d_ij.append(np.hypot(fx[i] - fx[j], fy[i] - fy[j])[both])
    if not d_ij:
        raise ParameterError("the training cases hold no pixel with two candidates: nothing to measure")
    a_e, b_e, d = np.concatenate(e_i), np.concatenate(e_j), np.concatenate(d_ij)
    pairs = []
    for centre, msk in binned(d, np.array([0.01, 0.5, 1, 1.5, 2, 3, 4, 6, 8, 12, 16])):
        x, z = a_e[msk], b_e[msk]
        pairs.append((centre, float(np.mean(x * z) / np.sqrt(np.mean(x * x) * np.mean(z * z) + 1e-12)), int(msk.sum())))
    try:
        a, _ = fit_exponential_decay([q[0] for q in pairs], [q[1] for q in pairs], weights=[q[2] for q in pairs])
    except ParameterError:
        a = p.spatial_correlation
    u2, ins = np.concatenate(u2s), np.concatenate(inside)
    err, dev = np.concatenate(errs), np.concatenate(devs)
    edges = np.array([0.0, 0.02, 0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.6, 0.8, 1.0, 1.5, 2.0, 3.0])

    def reliability(mask):
        rows = []
        for centre, msk in binned(u2[mask], edges):
            e2, d2 = err[mask][msk].mean(), dev[mask][msk].mean()
            rows.append((centre, float(1.0 - e2 / max(d2 + e2, 1e-9)), int(msk.sum())))
        return rows

    rin, rout = reliability(ins), reliability(~ins)
    beta, gamma, c0 = p.reliability_decay, p.outside_factor, 1.0
    good = [(c, r, n) for c, r, n in rin if r > 0]
    try:
        decay, nu = fit_exponential_decay(
            [c for c, _, _ in good], [r for _, r, _ in good], weights=[n for *_, n in good]
        )
        beta, c0 = float(-np.log(decay)), 1.0 - nu
    except ParameterError:
        pass
    ratios = [(r / (c0 * np.exp(-beta * c)), n) for c, r, n in rout if r > 0]
    if ratios:
        gamma = float(np.clip(np.average([q for q, _ in ratios], weights=[n for _, n in ratios]), 0.05, 1.0))
    return {
        "spatial_correlation": float(np.clip(a, 0.05, 0.995)),
        "reliability_decay": float(np.clip(beta, 0.0, 50.0)),
        "outside_factor": gamma,
        "pair_correlation": [{"distance": c, "correlation": r, "n": n} for c, r, n in pairs],
        "inside_reliability": [{"u2": c, "reliability": r, "n": n} for c, r, n in rin],
        "outside_reliability": [{"u2": c, "reliability": r, "n": n} for c, r, n in rout],
    }


def _luma_only(picture):
    """The luma plane of `picture` as a monochrome picture (statistics use luma only)."""
    from synth.picture import Picture

    return Picture(picture.y, None, None, "mono", picture.bit_depth)


def calibrate_one_reference(
    cases: Sequence[tuple],
    *,
    start: OneReferenceParams | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> tuple[OneReferenceParams, dict]:
    """Both steps: measured ``a``, ``beta``, ``gamma``, then the grid `DEFAULT_GRID` with the
    measured value added on each axis.

    The measured reliabilities are correlations with the truth, the model's ``q`` are probability
    weights of the true motion; the two need not share a decay, so the refinement searches the
    whole grid rather than only around the measured point (on carphone the measured point alone
    lost 1 dB PSNR-Y to the best grid setting).

    Returns
    -------
    (OneReferenceParams, dict)
        The refined parameters and ``{"measured": ..., "refinement": rows, "measured_params": ...}``.
    """
    start = start or OneReferenceParams()
    stats = measure_one_reference_statistics(cases, params=start)
    a, beta, gamma = stats["spatial_correlation"], stats["reliability_decay"], stats["outside_factor"]
    measured = replace(start, spatial_correlation=a, reliability_decay=beta, outside_factor=gamma)
    grid = {
        name: tuple(sorted(set(DEFAULT_GRID[name]) | {float(value)}))
        for name, value in (("spatial_correlation", a), ("reliability_decay", beta), ("outside_factor", gamma))
    }
    best, rows = refine_one_reference_params(cases, start=measured, grid=grid, progress=progress)
    return best, {"measured": stats, "measured_params": measured.to_dict(), "refinement": rows}
