"""Paired differences to a baseline method: mean difference per picture with a Student-t interval.

Every report compares each method with one baseline (default `DEFAULT_BASELINE`). A method and
the baseline are measured on the same pictures, so the figure of interest is the per-picture
difference ``d_i = metric(method, i) - metric(baseline, i)``; its mean with the paired-t
confidence interval

    mean(d) +- t(1 - alpha/2, n - 1) * s_d / sqrt(n)

(``s_d`` the sample standard deviation of the differences, ``n`` the number of pictures) says
whether a 0.1 dB difference is more than picture-to-picture noise [1]_. A picture is a win when
the method's value is higher than the baseline's on it, a loss when lower.

References
----------
.. [1] D. C. Montgomery and G. C. Runger, *Applied Statistics and Probability for Engineers*,
   Wiley: the paired t confidence interval on the mean difference (chapter on statistical
   inference for two samples).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from synth.errors import ParameterError

__all__ = [
    "DEFAULT_BASELINE",
    "CONFIDENCE",
    "t_quantile",
    "paired_difference",
    "resolve_baseline",
    "picture_key",
    "paired_values",
    "difference_rows",
    "pick_pictures",
]

#: Baseline of every report when ``--baseline`` is not given (an optical-flow interpolation).
DEFAULT_BASELINE = "dis-medium"
#: Confidence level of the intervals.
CONFIDENCE = 0.95


def t_quantile(p: float, dof: int) -> float:
    """Quantile of Student's t distribution with `dof` degrees of freedom (`scipy.special.stdtrit`,
    the inverse of the t distribution function; lighter to import than `scipy.stats`).

    Parameters
    ----------
    p : float
        Probability in (0, 1), e.g. 0.975 for a two-sided 95 % interval.
    dof : int
        Degrees of freedom, at least 1.

    Examples
    --------
    >>> round(t_quantile(0.975, 9), 3)
    2.262
    """
    from scipy.special import stdtrit

    if not 0.0 < p < 1.0:
        raise ParameterError(f"probability must be in (0, 1), got {p}")
    if dof < 1:
        raise ParameterError(f"degrees of freedom must be at least 1, got {dof}")
    return float(stdtrit(dof, p))


def paired_difference(values: Sequence[float], baseline: Sequence[float], *, level: float = CONFIDENCE) -> dict:
    """Mean of the paired differences ``values - baseline`` with its Student-t interval.

    Parameters
    ----------
    values, baseline : sequence of float, same length
        The method's and the baseline's value on the same pictures (None or non-finite pairs are
        left out: an infinite PSNR has no finite difference).
    level : float
        Confidence level of the two-sided interval (default 0.95).

    Returns
    -------
    dict
        ``pictures`` (n pairs used), ``mean_difference``, ``ci_low``, ``ci_high``,
        ``half_width`` (t(1 - (1 - level)/2, n - 1) s / sqrt(n); None for n < 2), ``std``
        (sample standard deviation, ddof 1), ``wins``, ``losses``, ``ties`` (pictures where
        the method is above, below, equal to the baseline) and ``left_out`` (pairs dropped).

    Notes
    -----
    The paired t interval of Montgomery and Runger (see the module's references); it assumes the
    differences are roughly normal or n is large enough for the mean to be.
    """
    if len(values) != len(baseline):
        raise ParameterError(f"paired values must have the same length, got {len(values)} and {len(baseline)}")
    pairs = [
        (float(a), float(b))
        for a, b in zip(values, baseline)
        if a is not None and b is not None and math.isfinite(float(a)) and math.isfinite(float(b))
    ]
    d = np.array([a - b for a, b in pairs], dtype=np.float64)
    n = int(d.size)
    out = {
        "pictures": n,
        "mean_difference": None,
        "ci_low": None,
        "ci_high": None,
        "half_width": None,
        "std": None,
        "wins": int(np.count_nonzero(d > 0)),
        "losses": int(np.count_nonzero(d < 0)),
        "ties": int(np.count_nonzero(d == 0)),
        "left_out": len(values) - n,
    }
    if n == 0:
        return out
    mean = float(np.mean(d))
    out["mean_difference"] = mean
    if n >= 2:
        std = float(np.std(d, ddof=1))
        half = t_quantile(1.0 - (1.0 - level) / 2.0, n - 1) * std / math.sqrt(n)
        out.update(std=std, half_width=half, ci_low=mean - half, ci_high=mean + half)
    return out


def resolve_baseline(methods: Sequence[str], baseline: str | None = None, *, option: str = "--baseline") -> str:
    """The method label a run is compared with.

    Parameters
    ----------
    methods : sequence of str
        The run's method labels (maker names, ``lmmse@qp22`` in a vector-QP sweep).
    baseline : str, optional
        A label or a maker name (a vector maker's name in a sweep means its first QP). None: the
        default `DEFAULT_BASELINE` when the run has it, else the run's last method.

    Raises
    ------
    ParameterError
        When `baseline` is given and is not among `methods` (the message names `option`).
    """
    methods = list(methods)
    if not methods:
        raise ParameterError("a run without methods has no baseline")
    if baseline is None:
        return DEFAULT_BASELINE if DEFAULT_BASELINE in methods else methods[-1]
    if baseline in methods:
        return baseline
    swept = [m for m in methods if m.split("@", 1)[0] == baseline]
    if swept:
        return swept[0]
    raise ParameterError(f"{option} {baseline!r} is not among this run's methods: {', '.join(methods)}")


def picture_key(record: dict, group_key: str) -> tuple:
    """What identifies one picture of a run across methods: its group value and target number
    (and its GOP number in a GOP run)."""
    return (record.get(group_key), record.get("gop"), record["target"])


def paired_values(
    records: Sequence[dict], method: str, baseline: str, *, group_key: str, group=None, metric: str = "psnr_yuv"
) -> tuple[list, list, list[tuple]]:
    """The method's and the baseline's `metric` on the pictures both were run on (optionally one
    group only), in picture order: ``(values, baseline_values, keys)``."""
    mine: dict[tuple, object] = {}
    base: dict[tuple, object] = {}
    for r in records:
        if group is not None and r.get(group_key) != group:
            continue
        if r["method"] == method:
            mine[picture_key(r, group_key)] = r.get(metric)
        elif r["method"] == baseline:
            base[picture_key(r, group_key)] = r.get(metric)
    keys = [k for k in mine if k in base]
    return [mine[k] for k in keys], [base[k] for k in keys], keys


def difference_rows(
    records: Sequence[dict],
    methods: Sequence[str],
    *,
    baseline: str,
    group_key: str,
    metric: str = "psnr_yuv",
    level: float = CONFIDENCE,
) -> list[dict]:
    """Per group (gap or layer, and 'all' when there are several) and per method other than the
    baseline: `paired_difference` of `metric` to the baseline.

    Returns
    -------
    list of dict
        ``group``, ``method``, ``baseline``, ``metric`` and the keys of `paired_difference`.
    """
    groups = sorted({r.get(group_key) for r in records}, key=lambda g: (g is None, g))
    rows = []
    for g in list(groups) + (["all"] if len(groups) > 1 else []):
        for m in methods:
            if m == baseline:
                continue
            vals, base, _ = paired_values(
                records, m, baseline, group_key=group_key, group=None if g == "all" else g, metric=metric
            )
            if not vals:
                continue
            row = {"group": g, "method": m, "baseline": baseline, "metric": metric}
            row.update(paired_difference(vals, base, level=level))
            rows.append(row)
    return rows


def pick_pictures(
    records: Sequence[dict], methods: Sequence[str], *, baseline: str, group_key: str, metric: str = "psnr_yuv"
) -> list[dict]:
    """The worst and the median picture of every method other than the baseline, by the method's
    difference to the baseline (not by layer or level).

    The worst is the picture with the lowest difference (first in picture order on ties), the
    median the lower median of the differences sorted (stable, so ties keep picture order).

    Returns
    -------
    list of dict
        ``method``, ``label`` ('worst' or 'median'), ``target``, ``past``, ``future``, ``t``,
        ``group`` (the picture's gap or layer), ``difference`` (dB), in method order.
    """
    by_key = {}
    for r in records:
        by_key.setdefault((r["method"], picture_key(r, group_key)), r)
    picks = []
    for m in methods:
        if m == baseline:
            continue
        vals, base, keys = paired_values(records, m, baseline, group_key=group_key, metric=metric)
        diffs = [
            (float(a) - float(b), k)
            for a, b, k in zip(vals, base, keys)
            if a is not None and b is not None and math.isfinite(float(a)) and math.isfinite(float(b))
        ]
        if not diffs:
            continue
        order = sorted(range(len(diffs)), key=lambda i: diffs[i][0])
        for label, i in (("worst", order[0]), ("median", order[(len(order) - 1) // 2])):
            d, k = diffs[i]
            r = by_key[(m, k)]
            picks.append(
                {
                    "method": m,
                    "label": label,
                    "target": r["target"],
                    "past": r["past"],
                    "future": r["future"],
                    "t": r["t"],
                    "group": r.get(group_key),
                    "gop": r.get("gop"),
                    "difference": d,
                }
            )
    return picks
