"""Exp-Golomb code lengths and code words (ITU-T H.264, clause 9.1).

``ue(v)``: code number k is written as M leading zeros, a one, and M info bits, where
M = floor(log2(k + 1)); its length is 2M + 1. ``se(v)`` maps a signed value v to k = 2v - 1 for
v > 0 and k = -2v for v <= 0 (clause 9.1.1, Table 9-3).
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError

__all__ = [
    "ue_length",
    "se_length",
    "ue_codeword",
    "se_codeword",
    "signed_to_code_number",
    "code_number_to_signed",
]


def signed_to_code_number(v):
    """Map signed values to ``se(v)`` code numbers (H.264 Table 9-3): 0,1,-1,2,-2 -> 0,1,2,3,4."""
    v = np.asarray(v, dtype=np.int64)
    return np.where(v > 0, 2 * v - 1, -2 * v)


def code_number_to_signed(k):
    """Inverse of :func:`signed_to_code_number`: (-1)**(k+1) * ceil(k / 2) (H.264 clause 9.1.1)."""
    k = np.asarray(k, dtype=np.int64)
    if np.any(k < 0):
        raise ParameterError(f"se(v) code numbers must be >= 0, got {k.min()}")
    return np.where(k % 2 == 1, (k + 1) // 2, -(k // 2))


def ue_length(k):
    """Bit length of the ``ue(v)`` code word of code number(s) `k` >= 0 (H.264 clause 9.1)."""
    k = np.asarray(k, dtype=np.int64)
    if np.any(k < 0):
        raise ParameterError(f"ue(v) code numbers must be >= 0, got {k.min()}")
    # floor(log2(k+1)) exactly: frexp's exponent is exact for integers below 2**53
    if np.any(k >= 2**53 - 1):
        raise ParameterError("ue(v) code numbers must be below 2**53 - 1")
    m = np.frexp((k + 1).astype(np.float64))[1] - 1
    return 2 * m + 1


def se_length(v):
    """Bit length of the ``se(v)`` code word of signed value(s) `v` (H.264 clause 9.1.1)."""
    return ue_length(signed_to_code_number(v))


def ue_codeword(k: int) -> str:
    """The ``ue(v)`` code word of code number `k` as a string of '0'/'1' (H.264 Table 9-2)."""
    if k < 0:
        raise ParameterError(f"ue(v) code numbers must be >= 0, got {k}")
    info = bin(k + 1)[3:]  # k+1 without its leading one
    return "0" * len(info) + "1" + info


def se_codeword(v: int) -> str:
    """The ``se(v)`` code word of signed value `v`."""
    return ue_codeword(int(signed_to_code_number(v)))
