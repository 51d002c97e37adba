"""Picture quality metrics.

PSNR follows the usual definition 10 log10(MAX^2 / MSE) with MAX = 2**bit_depth - 1 (common
practice in codec comparisons); identical planes give +inf.
"""

from __future__ import annotations

import numpy as np

from .errors import ParameterError
from .picture import Picture

__all__ = ["mean_squared_error", "plane_psnr", "picture_psnr"]


def mean_squared_error(a: np.ndarray, b: np.ndarray) -> float:
    """Mean squared difference of two planes, accumulated in float64."""
    if a.shape != b.shape:
        raise ParameterError(f"plane shapes differ: {a.shape} vs {b.shape}")
    d = a.astype(np.float64) - b.astype(np.float64)
    return float(np.mean(d * d))


def plane_psnr(a: np.ndarray, b: np.ndarray, *, bit_depth: int = 8) -> float:
    """PSNR in dB of plane `a` against reference plane `b`."""
    mse = mean_squared_error(a, b)
    peak = float((1 << bit_depth) - 1)
    if mse == 0.0:
        return float("inf")
    return float(10.0 * np.log10(peak * peak / mse))


def picture_psnr(test: Picture, reference: Picture) -> dict[str, float]:
    """PSNR per plane ('Y', 'Cb', 'Cr') of `test` against `reference`."""
    if not test.same_format(reference):
        raise ParameterError("pictures differ in size, chroma format or bit depth")
    names = ("Y", "Cb", "Cr")
    return {names[i]: plane_psnr(p, q, bit_depth=test.bit_depth) for i, (p, q) in enumerate(zip(test.planes, reference.planes))}
