"""Sum of absolute transformed differences (SATD) with the Hadamard transform.

The residual of every ``n x n`` tile (n = 4 or 8) is transformed with the unnormalised Hadamard
matrix on both sides, ``T = H_n X H_n^T``, and the absolute coefficients are summed. As in the H.264
reference encoder (JM, ``HadamardSAD4x4`` / ``HadamardSAD8x8``) the sum is divided by 2 for 4x4
tiles and by 4 for 8x8 tiles so that SATD and SAD are on a comparable scale (common practice in
encoder motion search; the divisors are from memory of the JM source, which rounds the integer
sum, while we keep the exact float quotient).

The transform runs as butterflies (fast Walsh-Hadamard transform) over whole planes at once, so
the cost per sample is ``2 log2(n)`` additions; the order of the coefficients (natural/Sylvester
versus sequency order) does not change the sum of their magnitudes.

References
----------
.. [1] The H.264 reference software (JM), whose motion search and mode decision use the Hadamard
   SATD as distortion (common practice in H.264/HEVC encoders; x264 and the HEVC test model do
   the same).
.. [2] J. J. Sylvester, "Thoughts on inverse orthogonal matrices...", Phil. Mag. 34, 1867 (the
   recursive construction of Hadamard matrices used by `scipy.linalg.hadamard`).
"""

from __future__ import annotations

import numpy as np

from .errors import ParameterError

__all__ = ["SATD_SCALE", "hadamard_tiles", "satd_tiles", "block_satd", "block_sad"]

#: Divisor applied to the sum of absolute Hadamard coefficients, per tile size.
SATD_SCALE: dict[int, float] = {4: 2.0, 8: 4.0}


def _check_tile(tile: int) -> None:
    if tile not in SATD_SCALE:
        raise ParameterError(f"SATD tile size must be 4 or 8, got {tile!r}")


def _butterflies(a: np.ndarray, axis: int, n: int) -> np.ndarray:
    """Walsh-Hadamard transform of length `n` along `axis` (Sylvester order), unnormalised."""
    a = np.moveaxis(a, axis, -1)
    shape = a.shape
    h = 1
    while h < n:
        b = a.reshape(shape[:-1] + (n // (2 * h), 2, h))
        lo = b[..., 0, :]
        hi = b[..., 1, :]
        a = np.stack((lo + hi, lo - hi), axis=-2).reshape(shape)
        h *= 2
    return np.moveaxis(a, -1, axis)


def hadamard_tiles(residual: np.ndarray, *, tile: int = 4) -> np.ndarray:
    """Hadamard coefficients ``H X H^T`` of every ``tile x tile`` tile of a 2-D residual.

    Parameters
    ----------
    residual : ndarray, shape (..., height, width)
        Height and width must be multiples of `tile`.
    tile : {4, 8}

    Returns
    -------
    ndarray, shape (..., height // tile, width // tile, tile, tile)
        Coefficients of each tile in Sylvester (natural) order, the same order as
        ``scipy.linalg.hadamard(tile) @ X @ scipy.linalg.hadamard(tile).T``.
    """
    _check_tile(tile)
    r = np.asarray(residual)
    h, w = r.shape[-2:]
    if h % tile or w % tile:
        raise ParameterError(f"residual size {w}x{h} is not a multiple of the SATD tile size {tile}")
    lead = r.shape[:-2]
    tiles = r.reshape(lead + (h // tile, tile, w // tile, tile))
    tiles = np.swapaxes(tiles, -3, -2)  # (..., rows, cols, tile, tile)
    out = _butterflies(tiles, -2, tile)
    return _butterflies(out, -1, tile)


def satd_tiles(residual: np.ndarray, *, tile: int = 4) -> np.ndarray:
    """SATD of every tile of a residual: ``sum |H X H^T| / SATD_SCALE[tile]``.

    Returns an array of shape (..., height // tile, width // tile), accumulated in the residual's
    float type (pass float64 for exact sums of large blocks).
    """
    coeffs = hadamard_tiles(residual, tile=tile)
    return np.abs(coeffs).sum(axis=(-1, -2)) / SATD_SCALE[tile]


def _block_sum(per_tile: np.ndarray, factor: int) -> np.ndarray:
    rows, cols = per_tile.shape[-2:]
    lead = per_tile.shape[:-2]
    return per_tile.reshape(lead + (rows // factor, factor, cols // factor, factor)).sum(axis=(-3, -1))


def block_satd(residual: np.ndarray, *, block: int, tile: int = 4) -> np.ndarray:
    """SATD per ``block x block`` block of a residual plane: the sum over its tiles.

    Parameters
    ----------
    residual : ndarray, shape (height, width), both multiples of `block`
    block : int
        Block size, a multiple of `tile`.
    tile : {4, 8}

    Returns
    -------
    ndarray, shape (height // block, width // block)
    """
    _check_tile(tile)
    if block % tile:
        raise ParameterError(f"block size {block} is not a multiple of the SATD tile size {tile}")
    return _block_sum(satd_tiles(residual, tile=tile), block // tile)


def block_sad(residual: np.ndarray, *, block: int) -> np.ndarray:
    """Sum of absolute differences per ``block x block`` block of a residual plane."""
    r = np.asarray(residual)
    h, w = r.shape[-2:]
    if h % block or w % block:
        raise ParameterError(f"residual size {w}x{h} is not a multiple of the block size {block}")
    return _block_sum(np.abs(r), block)
