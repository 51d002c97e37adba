"""Rate terms of the motion estimator: lambda from QP, vector bits, median vector prediction.

- Lagrange multiplier for SAD-based motion search: ``lambda_motion = sqrt(0.85 * 2**((QP - 12) / 3))``
  (the H.264 reference encoder's relation, Wiegand et al., "Rate-constrained coder control and
  comparison of video coding standards", IEEE Trans. CSVT 13(7), 2003, doi:10.1109/TCSVT.2003.815168;
  recalled from memory).
- Vector rate: signed Exp-Golomb code lengths (ITU-T H.264 clause 9.1.1) of both components of the
  vector difference, in quarter-sample units.
- Vector predictor: the component-wise median of the left (A), above (B) and above-right (C, replaced
  by above-left D when unavailable) neighbours, with the special cases of ITU-T H.264 clause 8.4.1.3
  (clause numbers from memory).
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError
from synth.expgolomb import se_length

__all__ = ["lambda_motion", "vector_bits", "median_predictor"]


def lambda_motion(qp: float) -> float:
    """Lagrange multiplier for SAD + lambda * bits motion decisions at quantisation parameter `qp`.

    Parameters
    ----------
    qp : float
        H.264/H.265 quantisation parameter, 0..51.

    Returns
    -------
    float
        ``sqrt(0.85 * 2**((qp - 12) / 3))``.

    Raises
    ------
    ParameterError
        When `qp` is outside 0..51 or not finite.

    Notes
    -----
    Relation used by the H.264 reference encoder (Wiegand et al. 2003,
    doi:10.1109/TCSVT.2003.815168): lambda_mode = 0.85 * 2**((QP-12)/3) for squared-error decisions
    and its square root for SAD decisions. Recalled from memory; common practice.
    """
    if not np.isfinite(qp) or not 0 <= qp <= 51:
        raise ParameterError(f"qp must be in 0..51, got {qp}")
    return float(np.sqrt(0.85 * 2.0 ** ((float(qp) - 12.0) / 3.0)))


def vector_bits(dx, dy, px, py):
    """Bits of the vector differences (dx - px, dy - py), quarter-sample units, as two se(v) codes."""
    return se_length(np.asarray(dx) - np.asarray(px)) + se_length(np.asarray(dy) - np.asarray(py))


def median_predictor(
    ax, ay, a_ok, a_inter, bx, by, b_ok, b_inter, cx, cy, c_ok, c_inter
) -> tuple[np.ndarray, np.ndarray]:
    """Median vector predictor from neighbours A (left), B (above), C (above-right or above-left).

    Parameters
    ----------
    ax, ay, bx, by, cx, cy : ndarray of int
        Neighbour vectors (quarter samples).
    a_ok, b_ok, c_ok : ndarray of bool
        Neighbour available (inside the picture and already coded).
    a_inter, b_inter, c_inter : ndarray of bool
        Neighbour available and coded with a vector to the same reference (not intra).

    Returns
    -------
    px, py : ndarray of int64

    Notes
    -----
    ITU-T H.264 clause 8.4.1.3 (from memory): when B and C are both unavailable and A is
    available, B and C take A's vector and reference; unavailable or intra neighbours count as a
    zero vector with a different reference; if exactly one neighbour refers to the same reference its
    vector is the predictor, otherwise the component-wise median of the three.
    """
    arr = [np.asarray(v, dtype=np.int64) for v in (ax, ay, bx, by, cx, cy)]
    ax, ay, bx, by, cx, cy = arr
    a_ok, b_ok, c_ok, a_inter, b_inter, c_inter = (
        np.asarray(v, dtype=bool) for v in (a_ok, b_ok, c_ok, a_inter, b_inter, c_inter)
    )
    if not (ax.shape == ay.shape == bx.shape == a_ok.shape == c_inter.shape):
        raise ParameterError("median_predictor: neighbour arrays must have the same shape")
    a_x = np.where(a_inter, ax, 0)
    a_y = np.where(a_inter, ay, 0)
    b_x = np.where(b_inter, bx, 0)
    b_y = np.where(b_inter, by, 0)
    c_x = np.where(c_inter, cx, 0)
    c_y = np.where(c_inter, cy, 0)
    b_inter = b_inter.copy()
    c_inter = c_inter.copy()
    only_a = ~b_ok & ~c_ok & a_ok
    b_x = np.where(only_a, a_x, b_x)
    b_y = np.where(only_a, a_y, b_y)
    c_x = np.where(only_a, a_x, c_x)
    c_y = np.where(only_a, a_y, c_y)
    b_inter = np.where(only_a, a_inter, b_inter)
    c_inter = np.where(only_a, a_inter, c_inter)
    med_x = np.maximum(np.minimum(a_x, b_x), np.minimum(np.maximum(a_x, b_x), c_x))
    med_y = np.maximum(np.minimum(a_y, b_y), np.minimum(np.maximum(a_y, b_y), c_y))
    n_same = a_inter.astype(np.int8) + b_inter.astype(np.int8) + c_inter.astype(np.int8)
    one = n_same == 1
    sel_x = np.where(a_inter, a_x, np.where(b_inter, b_x, c_x))
    sel_y = np.where(a_inter, a_y, np.where(b_inter, b_y, c_y))
    px = np.where(one, sel_x, med_x)
    py = np.where(one, sel_y, med_y)
    return px, py
