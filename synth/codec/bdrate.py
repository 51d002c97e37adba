"""Bjontegaard delta rate and delta PSNR between two rate-distortion curves.

G. Bjontegaard, "Calculation of average PSNR differences between RD-curves", ITU-T SG16 Q.6
VCEG, document VCEG-M33, Austin, 2001: each curve's logarithm of the rate is fitted by a cubic
polynomial of the PSNR (a least-squares fit, exact through four points); the difference of the two
fits is integrated over the PSNR interval where the curves overlap and divided by its length, and
the average log-rate difference is turned into a percentage, ``(exp(d) - 1) * 100``. Negative
values mean the test curve needs fewer bits than the anchor for the same quality. BD-PSNR swaps
the roles: PSNR as a cubic of log-rate, integrated over the overlapping log-rate interval.
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError

__all__ = ["bd_rate", "bd_psnr"]

_MIN_POINTS = 4


def _curve(rate, psnr, name: str) -> tuple[np.ndarray, np.ndarray]:
    r = np.asarray(rate, dtype=np.float64).ravel()
    p = np.asarray(psnr, dtype=np.float64).ravel()
    if r.shape != p.shape:
        raise ParameterError(f"{name}: {r.size} rates but {p.size} PSNR values")
    if r.size < _MIN_POINTS:
        raise ParameterError(f"{name}: a cubic fit needs at least {_MIN_POINTS} points, got {r.size}")
    if not (np.all(np.isfinite(r)) and np.all(np.isfinite(p))):
        raise ParameterError(f"{name}: rates and PSNR values must be finite (no NaN or infinite PSNR)")
    if np.any(r <= 0):
        raise ParameterError(f"{name}: rates must be > 0, got {r.min()}")
    if np.unique(p).size < _MIN_POINTS or np.unique(r).size < _MIN_POINTS:
        raise ParameterError(f"{name}: needs {_MIN_POINTS} distinct points for a cubic fit")
    return r, p


def _average_difference(xa, ya, xt, yt) -> float:
    """Mean of (fit_t - fit_a) over the overlap of the x ranges; fits are cubic polynomials y(x)."""
    lo = max(xa.min(), xt.min())
    hi = min(xa.max(), xt.max())
    if not hi > lo:
        raise ParameterError(
            f"the curves do not overlap: anchor spans {xa.min():.4g}..{xa.max():.4g}, "
            f"test spans {xt.min():.4g}..{xt.max():.4g}"
        )
    pa = np.polyint(np.polyfit(xa, ya, 3))
    pt = np.polyint(np.polyfit(xt, yt, 3))
    ia = np.polyval(pa, hi) - np.polyval(pa, lo)
    it = np.polyval(pt, hi) - np.polyval(pt, lo)
    return float((it - ia) / (hi - lo))


def bd_rate(anchor_rate, anchor_psnr, test_rate, test_psnr) -> float:
    """Bjontegaard delta rate of a test curve against an anchor curve, in percent.

    Parameters
    ----------
    anchor_rate, anchor_psnr : array-like, at least 4 points each
        The anchor's rates (any positive unit, the same for both curves) and PSNR in dB.
    test_rate, test_psnr : array-like
        The test curve.

    Returns
    -------
    float
        Average rate difference in percent at equal PSNR over the overlapping PSNR range.

    Raises
    ------
    ParameterError
        Fewer than four points, non-positive or non-finite values, or curves that do not overlap.

    Notes
    -----
    G. Bjontegaard, VCEG-M33 (2001): cubic fit of log-rate over PSNR, integrated over the overlap.
    """
    ra, pa = _curve(anchor_rate, anchor_psnr, "anchor")
    rt, pt = _curve(test_rate, test_psnr, "test")
    d = _average_difference(pa, np.log(ra), pt, np.log(rt))
    return float((np.exp(d) - 1.0) * 100.0)


def bd_psnr(anchor_rate, anchor_psnr, test_rate, test_psnr) -> float:
    """Bjontegaard delta PSNR (dB) of a test curve against an anchor (VCEG-M33, 2001).

    PSNR as a cubic polynomial of log-rate, averaged over the overlapping log-rate interval;
    positive means the test curve has the higher quality at equal rate.
    """
    ra, pa = _curve(anchor_rate, anchor_psnr, "anchor")
    rt, pt = _curve(test_rate, test_psnr, "test")
    return _average_difference(np.log(ra), pa, np.log(rt), pt)
