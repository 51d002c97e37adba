r"""Calibration: fitting the synthesiser's parameters and its learned reliability on training clips.

`calibrate` works on *training cases*: pictures ``n`` of a clip with references ``n - d/2`` and
``n + d/2`` (reference distance ``d``), vectors estimated in both coding directions with
`synth.motion.estimate_field`, and the true picture ``n``. Three steps:

1. Measured statistics (:func:`measure_statistics`). For every pixel and every pair of its
   candidates, the errors ``e_i = o_i - y`` of their pair observations against the truth are
   correlated as a function of the difference ``delta`` between their trajectories (the mean
   distance of their sample points on the two references, as in `synth.synthesis.lmmse`); fitting
   ``corr(delta) = (1 - nu) a^delta`` (:func:`fit_exponential_decay`) gives the spatial correlation
   coefficient ``a`` (the innovation decay per luma sample) and the nugget ``nu``. The normalised
   error variance of a candidate as a function of the distance ``d`` from its landing footprint,
   ``v(d) = E[e^2] / E[(y - m)^2]``, gives through ``r = 1 - v / 2`` (unit-variance observation and
   pixel) the reliability decay ``r(d) = r0 exp(-d / L)`` and so the reliability scale ``L``.
2. Refinement (:func:`refine_parameters`): starting from the measured values, ``a`` and ``L``
   are adjusted by maximising the mean luma PSNR of the synthesis over the cases (Nelder-Mead,
   J. A. Nelder and R. Mead, Comput. J. 7(4), 1965, doi:10.1093/comjnl/7.4.308, through
   ``scipy.optimize.minimize``; few evaluations on small crops).
3. The learned reliability (:func:`fit_learned_reliability`): cues of every side observation
   (`synth.synthesis.reliability`) and its squared error against the truth on sampled pixels, fitted by
   regularised linear least squares (`synth.synthesis.reliability.fit_error_model`).

Separately, :func:`fit_predicted_error` fits the scale of the synthesiser's predicted-error map
(`synth.synthesis.reliability`, "Predicted error") so that the predicted RMS error matches the measured
one: non-negative least squares of the measured squared error per block on the posterior variance, the
endpoint mismatch and a constant.

Everything is deterministic (fixed sampling seed, cases in a fixed order).
"""

from __future__ import annotations

import hashlib
import math
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.metrics import plane_psnr
from synth.picture import Picture
from synth.synthesis.candidate_stack import CandidateStack, candidate_stack
from synth.synthesis.params import SynthParams
from synth.synthesis.reliability import (
    CUE_NAMES,
    CUE_SET,
    MotionMaps,
    fit_error_model,
    predict_log_variance,
    side_cues,
    side_weights,
)

__all__ = [
    "TrainingCase",
    "training_cases",
    "case_fields",
    "fit_exponential_decay",
    "measure_statistics",
    "refine_parameters",
    "fit_learned_reliability",
    "calibrate",
    "CalibrationResult",
    "stack_groups",
    "stack_side_cues",
    "learned_estimate",
    "block_means",
    "fit_predicted_error",
]


# ------------------------------------------------------------------------------------------------
# Training cases
# ------------------------------------------------------------------------------------------------
@dataclass(eq=False)
class TrainingCase:
    """One target picture with its two references and the vectors between them."""

    name: str
    gap: int
    target: int
    past: Picture
    future: Picture
    truth: Picture
    fields: list[VectorField]
    t: float = 0.5


def _crop(p: Picture, box) -> Picture:
    if box is None:
        return p
    x0, y0, w, h = box
    if p.chroma_format == "mono":
        return Picture(np.ascontiguousarray(p.y[y0 : y0 + h, x0 : x0 + w]), None, None, "mono", p.bit_depth)
    fx, fy = p.chroma_factors
    c = lambda a: np.ascontiguousarray(a[y0 // fy : (y0 + h) // fy, x0 // fx : (x0 + w) // fx])  # noqa: E731
    return Picture(np.ascontiguousarray(p.y[y0 : y0 + h, x0 : x0 + w]), c(p.cb), c(p.cr), p.chroma_format, p.bit_depth)


def _estimator_version() -> bytes:
    """Digest of the motion estimator's source files: cached fields are reused only by the same code."""
    here = Path(__file__).resolve().parents[1] / "motion"
    h = hashlib.sha1()
    for name in sorted(p.name for p in here.glob("*.py")):
        h.update(name.encode() + (here / name).read_bytes())
    return h.digest()


def case_fields(
    past: Picture,
    future: Picture,
    *,
    past_time: int,
    future_time: int,
    qp: int = 27,
    cache: Path | None = None,
    key: str = "",
) -> list[VectorField]:
    """Vectors in both coding directions (future coded against past, past against future), read
    from / written to ``cache`` (an .npz per case) when given."""
    from synth.io import read_fields, write_fields
    from synth.motion.estimator import estimate_field

    path = None
    if cache is not None:
        digest = hashlib.sha1(
            past.y.tobytes() + future.y.tobytes() + f"{past_time},{future_time},{qp}".encode() + _estimator_version()
        ).hexdigest()[:16]
        path = Path(cache) / f"fields-{key}-{digest}.npz"
        if path.is_file():
            return read_fields(path)
    fields = [
        estimate_field(future, past, coded_time=future_time, reference_time=past_time, qp=qp),
        estimate_field(past, future, coded_time=past_time, reference_time=future_time, qp=qp),
    ]
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_fields(path, fields)
    return fields


def training_cases(
    clip: str | os.PathLike,
    *,
    gaps: Sequence[int] = (2, 4, 8),
    start: int = 0,
    frames: int | None = 33,
    per_gap: int = 3,
    qp: int = 27,
    crop=None,
    cache: Path | None = None,
    name: str | None = None,
) -> list[TrainingCase]:
    """Training (or test) cases from a clip: ``per_gap`` target pictures per reference distance,
    spread evenly over pictures ``start .. start + frames - 1``.

    Raises
    ------
    ParameterError
        On an odd or non-positive gap, a window shorter than the largest gap plus one, or bad counts.
    """
    from synth.io import open_clip

    for d in gaps:
        if isinstance(d, bool) or not isinstance(d, int) or d < 2 or d % 2:
            raise ParameterError(f"gaps must be even integers >= 2, got {d!r}")
    if per_gap < 1:
        raise ParameterError(f"per_gap must be >= 1, got {per_gap}")
    if start < 0:
        raise ParameterError(f"start must be >= 0, got {start}")
    reader = open_clip(clip)
    try:
        n = len(reader)
        end = n if frames is None else min(n, start + int(frames))
        if end - start < max(gaps) + 1:
            raise ParameterError(
                f"{clip}: pictures {start}..{end - 1} are too few for reference distance {max(gaps)} "
                f"(need at least {max(gaps) + 1})"
            )
        label = name or Path(str(clip)).stem
        pictures: dict[int, Picture] = {}

        def pic(i: int) -> Picture:
            if i not in pictures:
                pictures[i] = _crop(reader.read(i), crop)
            return pictures[i]

        cases = []
        for d in gaps:
            first = list(range(start, end - d))
            pick = sorted(set(np.linspace(0, len(first) - 1, min(per_gap, len(first))).round().astype(int).tolist()))
            for i in pick:
                a = first[i]
                b, m = a + d, a + d // 2
                past, future = pic(a), pic(b)
                fl = case_fields(past, future, past_time=a, future_time=b, qp=qp, cache=cache, key=label)
                cases.append(TrainingCase(label, d, m, past, future, pic(m), fl))
        return cases
    finally:
        reader.close()


# ------------------------------------------------------------------------------------------------
# Measured statistics
# ------------------------------------------------------------------------------------------------
def fit_exponential_decay(distance, correlation, *, weights=None) -> tuple[float, float]:
    """Fit ``corr(delta) = (1 - nu) a^delta`` by weighted least squares on ``log corr``.

    Parameters
    ----------
    distance, correlation : array_like, shape (n,)
        Measured correlation at each distance (entries with corr <= 0 are left out).
    weights : array_like, optional
        Weights of the points (e.g. sample counts).

    Returns
    -------
    (a, nu) : (float, float)
        ``a`` clipped to [0.05, 0.999], ``nu`` to [0, 0.95].

    Notes
    -----
    For a first-order autoregressive (Markov) process the autocorrelation is ``rho^|k|``
    (G. E. P. Box and G. M. Jenkins, Time Series Analysis, 1970, ch. 3), a straight line in
    ``log corr`` against the lag; the intercept gives the share at lag 0 that does not decay.
    """
    d = np.asarray(distance, np.float64).ravel()
    c = np.asarray(correlation, np.float64).ravel()
    w = np.ones_like(d) if weights is None else np.asarray(weights, np.float64).ravel()
    if d.shape != c.shape or d.shape != w.shape:
        raise ParameterError("distance, correlation and weights must have the same length")
    ok = np.isfinite(d) & np.isfinite(c) & np.isfinite(w) & (c > 0) & (w > 0)
    if ok.sum() < 2 or np.ptp(d[ok]) == 0:
        raise ParameterError("need positive correlations at two or more distinct distances to fit a decay")
    A = np.stack([np.ones(ok.sum()), d[ok]], axis=1) * np.sqrt(w[ok])[:, None]
    b = np.log(c[ok]) * np.sqrt(w[ok])
    (intercept, slope), *_ = np.linalg.lstsq(A, b, rcond=None)
    a = float(np.clip(math.exp(slope), 0.05, 0.999))
    nu = float(np.clip(1.0 - math.exp(intercept), 0.0, 0.95))
    return a, nu


def binned(x: np.ndarray, edges: np.ndarray, *, min_count: int = 50) -> list[tuple[float, np.ndarray]]:
    """``(mean of x, mask)`` for every bin of `x` between consecutive `edges` holding at least
    `min_count` points (the bins the statistics are measured in)."""
    idx = np.digitize(x, edges) - 1
    out = []
    for b in range(len(edges) - 1):
        m = idx == b
        if m.sum() >= min_count:
            out.append((float(x[m].mean()), m))
    return out


def measure_statistics(
    cases: Sequence[TrainingCase], *, params: SynthParams | None = None, pixels: int = 20000, seed: int = 0
) -> dict:
    """Error statistics of the candidates against the truth (step 1 of the module docstring).

    Returns
    -------
    dict
        'spatial_correlation', 'innovation_nugget', 'reliability_scale' (fitted values) and the
        binned measurements they were fitted on ('pair_correlation', 'distance_variance').
    """
    params = SynthParams() if params is None else params
    rng = np.random.default_rng(seed)
    deltas, prods_i, prods_j, dists, errs, devs = [], [], [], [], [], []
    for case in cases:
        st = candidate_stack(case.past, case.future, case.fields, t=case.t, params=params)
        K, H, W = st.past.shape
        y = case.truth.y.astype(np.float32)
        obs = st.obs
        has = st.valid.sum(axis=0) >= 2
        pick = (
            rng.choice(np.flatnonzero(has.ravel()), min(pixels, int(has.sum())), replace=False)
            if has.any()
            else np.zeros(0, int)
        )
        if pick.size == 0:
            continue
        o = obs.reshape(K, -1)[:, pick]
        v = st.valid.reshape(K, -1)[:, pick]
        yy = y.ravel()[pick]
        e = o - yy[None]
        m = np.where(v, o, 0).sum(0) / np.maximum(v.sum(0), 1)
        fd = np.where(st.valid, st.footprint_distance(), 0).reshape(K, -1)[:, pick]
        dp = [st.column(n).reshape(K, -1)[:, pick] for n in ("past_dx", "past_dy", "future_dx", "future_dy")]
        for i in range(K):
            dists.append(fd[i][v[i]])
            errs.append(e[i][v[i]] ** 2)
            devs.append(((yy - m) ** 2)[v[i]])
            for j in range(i + 1, K):
                both = v[i] & v[j]
                delta = 0.5 * (
                    np.hypot(dp[0][i] - dp[0][j], dp[1][i] - dp[1][j])
                    + np.hypot(dp[2][i] - dp[2][j], dp[3][i] - dp[3][j])
                )
                deltas.append(delta[both])
                prods_i.append(e[i][both])
                prods_j.append(e[j][both])
    if not deltas:
        raise ParameterError("the training cases hold no pixel with two candidates: nothing to measure")
    delta = np.concatenate(deltas)
    ei, ej = np.concatenate(prods_i), np.concatenate(prods_j)
    pairs = []
    for centre, m in binned(delta, np.array([0.01, 0.5, 1, 1.5, 2, 3, 4, 6, 8, 12, 16])):
        a, b = ei[m].astype(np.float64), ej[m].astype(np.float64)
        corr = float(np.mean(a * b) / math.sqrt(np.mean(a * a) * np.mean(b * b) + 1e-12))
        pairs.append((centre, corr, int(m.sum())))
    a_fit, nu_fit = fit_exponential_decay([p[0] for p in pairs], [p[1] for p in pairs], weights=[p[2] for p in pairs])
    dist = np.concatenate(dists)
    err = np.concatenate(errs)
    dev = np.concatenate(devs)
    rows = []
    for centre, m in binned(dist, np.array([-0.5, 0.5, 2, 4, 8, 12, 16, 24, 32, 48])):
        vnorm = float(err[m].mean() / max(dev[m].mean() + err[m].mean(), 1e-9))
        r = 1.0 - vnorm  # observation and pixel of equal variance: E[e^2] / (2 var) = 1 - r
        rows.append((centre, r, int(m.sum())))
    rs = [(c, r, n) for c, r, n in rows if r > 0]
    try:
        decay, _ = fit_exponential_decay([c for c, _, _ in rs], [r for _, r, _ in rs], weights=[n for _, _, n in rs])
        scale = float(np.clip(-1.0 / math.log(decay), 1.0, 1000.0))
    except ParameterError:
        scale = params.reliability_scale
    return {
        "spatial_correlation": a_fit,
        "innovation_nugget": nu_fit,
        "reliability_scale": scale,
        "pair_correlation": [{"delta": c, "correlation": r, "n": n} for c, r, n in pairs],
        "distance_reliability": [{"distance": c, "reliability": r, "n": n} for c, r, n in rows],
    }


# ------------------------------------------------------------------------------------------------
# Refinement by prediction PSNR
# ------------------------------------------------------------------------------------------------
def mean_psnr(cases: Sequence[TrainingCase], params: SynthParams) -> float:
    """Mean luma PSNR of the synthesis over the cases."""
    from synth.synthesis.synthesiser import synthesise

    vals = [
        plane_psnr(
            synthesise(c.past, c.future, c.fields, t=c.t, params=params).y, c.truth.y, bit_depth=c.truth.bit_depth
        )
        for c in cases
    ]
    return float(np.mean(vals))


def refine_parameters(
    cases: Sequence[TrainingCase], params: SynthParams, *, evaluations: int = 24
) -> tuple[SynthParams, dict]:
    """Adjust ``spatial_correlation`` and ``reliability_scale`` by maximising the mean PSNR
    (distance reliability), Nelder-Mead in (logit a, log L). Returns the new parameters and a
    record {'before', 'after', 'evaluations'}."""
    from scipy.optimize import minimize

    base = params.with_changes(reliability="distance")
    memo: dict = {}

    def unpack(x):
        a = float(np.clip(1.0 / (1.0 + math.exp(-x[0])), 0.05, 0.995))
        scale = float(np.clip(math.exp(x[1]), 1.0, 1000.0))
        return a, scale

    def cost(x):
        a, scale = unpack(x)
        key = (round(a, 5), round(scale, 4))
        if key not in memo:
            memo[key] = -mean_psnr(cases, base.with_changes(spatial_correlation=a, reliability_scale=scale))
        return memo[key]

    a0, l0 = params.spatial_correlation, params.reliability_scale
    x0 = np.array([math.log(a0 / (1 - a0)), math.log(l0)])
    before = -cost(x0)
    res = minimize(
        cost,
        x0,
        method="Nelder-Mead",
        options={
            "maxfev": int(evaluations),
            "xatol": 0.05,
            "fatol": 0.005,
            "initial_simplex": [x0, x0 + [0.7, 0], x0 + [0, 0.7]],
        },
    )
    best_x = res.x if -res.fun >= before else x0
    a, scale = unpack(best_x)
    after = max(-float(res.fun), before)
    return params.with_changes(spatial_correlation=a, reliability_scale=scale), {
        "before": before,
        "after": after,
        "evaluations": len(memo),
    }


# ------------------------------------------------------------------------------------------------
# Learned reliability
# ------------------------------------------------------------------------------------------------
def _to_groups(a: np.ndarray, g: int) -> np.ndarray:
    """(..., H, W) -> (..., g*g, G) in the synthesiser's layout (pixels of a group row-major,
    groups row-major); H and W are padded up to multiples of g by edge replication."""
    *lead, H, W = a.shape
    Hp, Wp = -(-H // g) * g, -(-W // g) * g
    if (Hp, Wp) != (H, W):
        pad = [(0, 0)] * len(lead) + [(0, Hp - H), (0, Wp - W)]
        a = np.pad(a, pad, mode="edge")
    a = a.reshape(*lead, Hp // g, g, Wp // g, g)
    a = np.moveaxis(a, (-3, -1), (-4, -3))
    return a.reshape(*lead, g * g, (Hp // g) * (Wp // g))


def _from_groups(a: np.ndarray, H: int, W: int, g: int) -> np.ndarray:
    *lead, M, G = a.shape
    Hp, Wp = -(-H // g) * g, -(-W // g) * g
    a = a.reshape(*lead, g, g, Hp // g, Wp // g)
    a = np.moveaxis(a, (-4, -3), (-3, -1))
    return a.reshape(*lead, Hp, Wp)[..., :H, :W]


def stack_groups(stack: CandidateStack) -> dict:
    """Per-group views of a stack in the synthesiser's (K, M, G) / (K, G) layout."""
    g = stack.group
    x, y = stack.pixel_grid()

    def col(name):  # constant over a group
        return _to_groups(stack.column(name), g)[:, 0, :]

    return {
        "past": _to_groups(stack.past, g),
        "future": _to_groups(stack.future, g),
        "share": _to_groups(stack.share, g),
        "valid": _to_groups(stack.valid, g)[:, 0, :],
        "x": _to_groups(x, g),
        "y": _to_groups(y, g),
        "dpx": col("past_dx"),
        "dpy": col("past_dy"),
        "dfx": col("future_dx"),
        "dfy": col("future_dy"),
        "dist": _to_groups(np.where(stack.valid, stack.footprint_distance(), 0), g),
        "agreement": col("rho01"),
        "field": _to_groups(stack.column("field", -1), g)[:, 0, :].astype(np.int64),
        "colocated": _to_groups(stack.colocated, g),
    }


def stack_side_cues(stack: CandidateStack, fields: Sequence[VectorField]) -> tuple[np.ndarray, dict]:
    """Cues of every side observation of a stack, shape (2, K, M, G, n_cues), and the group views."""
    gv = stack_groups(stack)
    lv = stack.landed
    H, W = stack.shape
    maps = MotionMaps.from_fields(fields, past_time=lv.past_time, future_time=lv.future_time, height=H, width=W)
    on_future = np.array([float(f.coded_time) == float(lv.future_time) for f in fields])
    home_future = on_future[np.maximum(gv["field"], 0)] & gv["valid"]
    unit = np.float32(1.0 / (1 << (stack.bit_depth - 8)))
    cues = side_cues(
        gv["past"] * unit, gv["future"] * unit, gv["share"], gv["valid"],
        x=gv["x"], y=gv["y"], dpx=gv["dpx"], dpy=gv["dpy"], dfx=gv["dfx"], dfy=gv["dfy"],
        dist=gv["dist"], agreement=gv["agreement"], home_future=home_future, maps=maps,
    )  # fmt: skip
    return cues, gv


def learned_estimate(stack: CandidateStack, fields: Sequence[VectorField], coefficients) -> np.ndarray:
    """Luma estimate of the learned-reliability estimator on a stack (unrounded, shape (H, W))."""
    cues, gv = stack_side_cues(stack, fields)
    g = predict_log_variance(cues, coefficients)
    a, b, _ = side_weights(g, gv["valid"], gv["share"])
    est = (a * gv["past"] + b * gv["future"]).sum(axis=0)
    est = np.where(gv["valid"].any(axis=0)[None, :], est, gv["colocated"])
    H, W = stack.shape
    return _from_groups(est, H, W, stack.group)


def fit_learned_reliability(
    cases: Sequence[TrainingCase],
    *,
    params: SynthParams | None = None,
    samples_per_case: int = 20000,
    seed: int = 0,
    ridge: float = 1e-3,
) -> tuple[np.ndarray, dict]:
    """Fit the error model of `synth.synthesis.reliability` on the cases (step 3 of the module docstring).

    Returns
    -------
    coefficients : ndarray of float64
    record : dict
        'samples', 'r2' (share of the variance of log(1 + e^2) explained on the samples).
    """
    params = SynthParams() if params is None else params
    rng = np.random.default_rng(seed)
    Xs, es = [], []
    for case in cases:
        if len({f.span > 0 for f in case.fields}) < 2:
            continue
        st = candidate_stack(case.past, case.future, case.fields, t=case.t, params=params)
        cues, gv = stack_side_cues(st, case.fields)
        unit = np.float32(1.0 / (1 << (st.bit_depth - 8)))
        y = _to_groups(case.truth.y.astype(np.float32), st.group) * unit
        e2 = np.stack([(gv["past"] * unit - y[None]) ** 2, (gv["future"] * unit - y[None]) ** 2])
        usable = np.broadcast_to(gv["valid"][None, :, None, :], e2.shape)
        idx = np.flatnonzero(usable.ravel())
        if idx.size == 0:
            continue
        idx = rng.choice(idx, min(samples_per_case, idx.size), replace=False)
        Xs.append(cues.reshape(-1, len(CUE_NAMES))[idx])
        es.append(e2.ravel()[idx])
    if not Xs:
        raise ParameterError(
            "no training case has fields of both coding directions: the learned reliability needs them"
        )
    X = np.concatenate(Xs)
    e = np.concatenate(es)
    theta = fit_error_model(X, e, ridge=ridge)
    t = np.log1p(e.astype(np.float64))
    pred = predict_log_variance(X.astype(np.float32), theta).astype(np.float64)
    r2 = float(1.0 - np.var(t - pred) / max(np.var(t), 1e-12))
    return theta, {"samples": int(len(e)), "r2": r2, "cue_set": CUE_SET}


# ------------------------------------------------------------------------------------------------
# The whole calibration
# ------------------------------------------------------------------------------------------------
@dataclass
class CalibrationResult:
    """Fitted parameters and the record of the fit (written under "fit" in the parameter file)."""

    params: SynthParams
    record: dict = field(default_factory=dict)

    def to_json(self) -> str:
        """The parameter file with the fit record under "fit" (strict JSON: non-finite figures null)."""
        import json

        from synth.io.jsonout import dumps_strict

        doc = json.loads(self.params.to_json())
        doc["fit"] = self.record
        return dumps_strict(doc, indent=2) + "\n"


def calibrate(
    cases: Sequence[TrainingCase],
    *,
    params: SynthParams | None = None,
    refine: bool = True,
    evaluations: int = 24,
    progress: Callable[[int, int, str], None] | None = None,
) -> CalibrationResult:
    """Fit the parameters on training cases: measured statistics, PSNR refinement, learned reliability.

    Parameters
    ----------
    cases : sequence of TrainingCase
    params : SynthParams, optional
        Starting point (defaults: ``SynthParams()``); fields not fitted are kept.
    refine : bool
        Run the PSNR refinement (step 2).
    evaluations : int
        Largest number of parameter sets the refinement tries.
    progress : callable, optional
        ``progress(done, total, label)``: called before each step (label: what starts) and once at
        the end; the library prints nothing.

    Returns
    -------
    CalibrationResult

    Raises
    ------
    ParameterError
        With no cases, or cases without candidates.
    """
    if not cases:
        raise ParameterError("calibration needs at least one training case, got none")
    steps = (
        ["measuring candidate error statistics"]
        + (["refining by prediction PSNR"] if refine else [])
        + ["fitting the learned reliability", "measuring before and after"]
    )

    def say(label: str) -> None:
        if progress is not None:
            progress(steps.index(label), len(steps), label)

    params = SynthParams() if params is None else params
    start = params
    say("measuring candidate error statistics")
    stats = measure_statistics(cases, params=params)
    fitted = params.with_changes(
        spatial_correlation=float(np.clip(stats["spatial_correlation"], 0.05, 0.995)),
        innovation_nugget=float(stats["innovation_nugget"]),
        reliability_scale=float(stats["reliability_scale"]),
    )
    record: dict = {"cases": [{"clip": c.name, "gap": c.gap, "target": c.target} for c in cases], "measured": stats}
    if refine:
        say("refining by prediction PSNR")
        fitted, rec = refine_parameters(cases, fitted, evaluations=evaluations)
        record["refinement"] = rec
    say("fitting the learned reliability")
    theta, rec = fit_learned_reliability(cases, params=fitted)
    record["learned"] = rec
    result = fitted.with_changes(reliability="learned", reliability_coefficients=tuple(float(v) for v in theta))
    say("measuring before and after")
    per_clip = {}
    from synth.synthesis.synthesiser import synthesise

    for c in cases:
        b = plane_psnr(
            synthesise(c.past, c.future, c.fields, t=c.t, params=start).y, c.truth.y, bit_depth=c.truth.bit_depth
        )
        a = plane_psnr(
            synthesise(c.past, c.future, c.fields, t=c.t, params=result).y, c.truth.y, bit_depth=c.truth.bit_depth
        )
        per_clip.setdefault(c.name, []).append((b, a))
    record["psnr"] = {
        name: {
            "before": float(np.mean([v[0] for v in vals])),
            "after": float(np.mean([v[1] for v in vals])),
            "cases": len(vals),
        }
        for name, vals in per_clip.items()
    }
    if progress is not None:
        progress(len(steps), len(steps), "done")
    return CalibrationResult(result, record)


# ------------------------------------------------------------------------------------------------
# Scale of the predicted error
# ------------------------------------------------------------------------------------------------
def block_means(plane: np.ndarray, block: int = 8) -> np.ndarray:
    """Mean of every whole ``block`` x ``block`` block of a plane (float64, blocks row-major, a
    partial last row or column of blocks left out)."""
    a = np.asarray(plane, np.float64)
    H, W = (a.shape[0] // block) * block, (a.shape[1] // block) * block
    if H == 0 or W == 0:
        raise ParameterError(f"a {a.shape[1]}x{a.shape[0]} plane holds no whole {block}x{block} block")
    return a[:H, :W].reshape(H // block, block, W // block, block).mean(axis=(1, 3)).ravel()


def fit_predicted_error(
    cases: Sequence[TrainingCase], *, params: SynthParams | None = None, block: int = 8
) -> tuple[tuple[float, ...], dict]:
    """Fit the coefficients of the predicted error (`synth.synthesis.reliability`, "Predicted error").

    Parameters
    ----------
    cases : sequence of TrainingCase
    params : SynthParams, optional
    block : int
        Side of the blocks the squared error and the three terms are averaged over.

    Returns
    -------
    coefficients : (alpha, beta, delta, gamma, k)
        For `synth.synthesis.reliability.predicted_rms_error`.
    record : dict
        'cases' (per case the measured and the predicted RMS error, 8-bit units), 'blocks', 'block'.

    Raises
    ------
    ParameterError
        With no cases.

    Notes
    -----
    The shape is the linear least-squares fit of ``log(1 + e^2)`` on ``log(1 + v_post)``,
    ``log(1 + m)``, ``log(1 + z)`` and a constant over the blocks of every case, each case's rows
    divided by the square root of its block count so that every picture counts equally whatever its
    size. The scale ``k`` is the geometric mean over the cases of measured over predicted mean
    squared error, so a typical picture's predicted RMS error equals its measured one.
    """
    from synth.synthesis.reliability import predicted_rms_error
    from synth.synthesis.synthesiser import synthesise_with_maps

    if not cases:
        raise ParameterError("fitting the predicted error needs at least one training case, got none")
    params = SynthParams() if params is None else params
    rows, targets, terms = [], [], []
    for c in cases:
        res = synthesise_with_maps(c.past, c.future, c.fields, t=c.t, params=params)
        unit = 1.0 / (1 << (c.truth.bit_depth - 8))
        err2 = ((res.picture.y.astype(np.float64) - c.truth.y) * unit) ** 2
        z = ((c.past.y.astype(np.float64) - c.future.y) * unit) ** 2
        v = block_means(res.maps["posterior_variance"], block)
        m = block_means(res.maps["endpoint_mismatch"], block)
        zb = block_means(z, block)
        e2 = block_means(err2, block)
        X = np.stack([np.log1p(v), np.log1p(m), np.log1p(zb), np.ones_like(v)], axis=1)
        w = 1.0 / math.sqrt(len(e2))
        rows.append(X * w)
        targets.append(np.log1p(e2) * w)
        terms.append((c, v, m, zb, e2))
    theta, *_ = np.linalg.lstsq(np.concatenate(rows), np.concatenate(targets), rcond=None)
    alpha, beta, delta, gamma = (float(x) for x in theta)
    shape = (alpha, beta, delta, gamma, 1.0)

    def predicted_mse(v, m, zb, coefficients):
        f32 = lambda a: a.astype(np.float32)  # noqa: E731
        return float(np.mean(predicted_rms_error(f32(v), f32(m), f32(zb), coefficients).astype(np.float64) ** 2))

    logs = [math.log(max(e2.mean(), 1e-12) / max(predicted_mse(v, m, zb, shape), 1e-12)) for _, v, m, zb, e2 in terms]
    coefficients = (alpha, beta, delta, gamma, float(math.exp(np.mean(logs))))
    per_case = [
        {
            "clip": c.name,
            "gap": c.gap,
            "target": c.target,
            "measured_rms": float(math.sqrt(e2.mean())),
            "predicted_rms": float(math.sqrt(predicted_mse(v, m, zb, coefficients))),
        }
        for c, v, m, zb, e2 in terms
    ]
    return coefficients, {"cases": per_case, "blocks": int(sum(len(t[4]) for t in terms)), "block": block}
