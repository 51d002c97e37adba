"""Paired differences to a baseline: Student-t quantiles, the paired t interval, the choice of the
baseline and of the pictures to inspect."""

import math

import numpy as np
import pytest
from scipy import stats

from synth.errors import ParameterError
from synth.evaluation.differences import (
    DEFAULT_BASELINE,
    difference_rows,
    paired_difference,
    pick_pictures,
    resolve_baseline,
    t_quantile,
)


@pytest.mark.parametrize(
    ("dof", "value"),
    # Two-sided 95 % points of Student's t, t(0.975, dof), as printed in the t table of
    # Montgomery & Runger, Applied Statistics and Probability for Engineers (from memory).
    [(1, 12.706), (2, 4.303), (5, 2.571), (9, 2.262), (10, 2.228), (20, 2.086), (30, 2.042)],
)
def test_t_quantile_matches_the_printed_table(dof, value):
    assert t_quantile(0.975, dof) == pytest.approx(value, abs=5e-4)


def test_t_quantile_matches_scipy_stats_and_tends_to_the_normal():
    # Reference library: scipy.stats.t.ppf; large dof -> the standard normal 1.959964 (common practice).
    for p in (0.9, 0.95, 0.975, 0.995):
        for dof in (1, 3, 7, 15, 60, 400):
            assert t_quantile(p, dof) == pytest.approx(stats.t.ppf(p, dof), rel=1e-10)
    assert t_quantile(0.975, 10**7) == pytest.approx(1.959964, abs=1e-5)
    with pytest.raises(ParameterError, match="degrees of freedom"):
        t_quantile(0.975, 0)
    with pytest.raises(ParameterError, match="probability"):
        t_quantile(1.0, 5)


def test_paired_interval_agrees_with_scipy_paired_t_test():
    # scipy.stats.ttest_rel gives the same paired t statistic and, with confidence_interval(),
    # the same interval (reference library).
    rng = np.random.default_rng(3)
    base = rng.normal(34.0, 2.0, size=23)
    mine = base + rng.normal(0.15, 0.3, size=23)
    d = paired_difference(mine.tolist(), base.tolist())
    ref = stats.ttest_rel(mine, base)
    ci = ref.confidence_interval(0.95)
    assert d["pictures"] == 23 and d["left_out"] == 0
    assert d["mean_difference"] == pytest.approx(float(np.mean(mine - base)), rel=1e-12)
    assert d["ci_low"] == pytest.approx(ci.low, rel=1e-9) and d["ci_high"] == pytest.approx(ci.high, rel=1e-9)
    assert d["mean_difference"] / (d["std"] / math.sqrt(23)) == pytest.approx(ref.statistic, rel=1e-9)
    assert d["wins"] == int(np.sum(mine > base)) and d["wins"] + d["losses"] + d["ties"] == 23


def test_paired_interval_hand_computed_case():
    # d = (1, 2, 3): mean 2, s = 1, t(0.975, 2) = 4.303 (t table, from memory): 2 +- 4.303 / sqrt(3).
    d = paired_difference([11.0, 12.0, 13.0], [10.0, 10.0, 10.0])
    assert d["mean_difference"] == 2.0 and d["std"] == pytest.approx(1.0)
    assert d["half_width"] == pytest.approx(4.303 / math.sqrt(3), abs=1e-3)
    assert (d["wins"], d["losses"], d["ties"]) == (3, 0, 0)


def test_infinite_or_missing_values_are_left_out_and_one_pair_has_no_interval():
    d = paired_difference([None, 30.0, float("inf")], [29.0, 29.5, 28.0])
    assert d["pictures"] == 1 and d["left_out"] == 2
    assert d["mean_difference"] == 0.5 and d["ci_low"] is None and d["half_width"] is None
    empty = paired_difference([], [])
    assert empty["pictures"] == 0 and empty["mean_difference"] is None
    with pytest.raises(ParameterError, match="same length"):
        paired_difference([1.0], [1.0, 2.0])


def test_baseline_resolution():
    assert DEFAULT_BASELINE == "dis-medium"
    assert resolve_baseline(["lmmse", "dis-medium", "average"]) == "dis-medium"
    assert resolve_baseline(["lmmse", "average"]) == "average"  # no dis-medium: the last method
    assert resolve_baseline(["lmmse@qp22", "lmmse@qp32", "average"], "lmmse") == "lmmse@qp22"
    with pytest.raises(ParameterError, match="--baseline 'obmc' is not among this run's methods: lmmse, average"):
        resolve_baseline(["lmmse", "average"], "obmc")


def _records():
    # Two methods on five pictures of gap 2 and three of gap 4; the baseline b is constant.
    recs = []
    diffs = {2: [0.5, -1.0, 0.2, 0.1, 0.3], 4: [-0.4, 0.0, 0.6]}
    for gap, ds in diffs.items():
        for k, d in enumerate(ds):
            common = {"gap": gap, "target": 10 * gap + k, "past": 0, "future": gap, "t": 0.5}
            recs.append({**common, "method": "a", "psnr_yuv": 30.0 + d})
            recs.append({**common, "method": "b", "psnr_yuv": 30.0})
    return recs


def test_difference_rows_per_group_and_all():
    rows = difference_rows(_records(), ["a", "b"], baseline="b", group_key="gap")
    assert [(r["group"], r["method"], r["pictures"]) for r in rows] == [(2, "a", 5), (4, "a", 3), ("all", "a", 8)]
    assert rows[0]["mean_difference"] == pytest.approx(0.02)
    assert rows[2]["wins"] == 5 and rows[2]["losses"] == 2 and rows[2]["ties"] == 1


def test_worst_and_median_pictures_are_chosen_by_difference_to_the_baseline():
    picks = pick_pictures(_records(), ["a", "b"], baseline="b", group_key="gap")
    # Sorted differences: -1.0, -0.4, 0.0, 0.1, 0.2, 0.3, 0.5, 0.6 -> worst -1.0 (gap 2, picture 21),
    # lower median (index 3) 0.1 (gap 2, picture 23).
    assert [(p["label"], p["group"], p["target"]) for p in picks] == [("worst", 2, 21), ("median", 2, 23)]
    assert picks[0]["difference"] == pytest.approx(-1.0)
