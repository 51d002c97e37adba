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

from synth.errors import ParameterError

__all__ = ["SATD_SCALE", "hadamard_tiles", "satd_tiles", "block_satd", "block_sad"]

#: Divisor applied to the sum of absolute Hadamard coefficients, per tile size.
SATD_SCALE: dict[int, float] = {4: 2.0, 8: 4.0}


def _check_tile(tile: int) -> None:
    if tile not in SATD_SCALE:
        raise ParameterError(f"SATD tile size must be 4 or 8, got {tile!r}")


def _fwht(parts: list[np.ndarray]) -> list[np.ndarray]:
    """Walsh-Hadamard transform of a list of equally shaped arrays (Sylvester order), unnormalised.

    Element k of the result is ``sum_j H[k, j] parts[j]`` with ``H = scipy.linalg.hadamard(n)``.
    """
    n = len(parts)
    h = 1
    while h < n:
        out = list(parts)
        for start in range(0, n, 2 * h):
            for i in range(start, start + h):
                a, b = parts[i], parts[i + h]
                out[i], out[i + h] = a + b, a - b
        parts = out
        h *= 2
    return parts


def _tile_view(residual: np.ndarray, tile: int) -> np.ndarray:
    _check_tile(tile)
    r = np.asarray(residual)
    h, w = r.shape[-2:]
    if h % tile or w % tile:
        raise ParameterError(f"residual size {w}x{h} is not a multiple of the SATD tile size {tile}")
    return r.reshape(r.shape[:-2] + (h // tile, tile, w // tile, tile))


def _coefficients(residual: np.ndarray, tile: int) -> list[list[np.ndarray]]:
    """coeff[k][l] of every tile, each an array of shape (..., rows, cols)."""
    v = _tile_view(residual, tile)
    cols = _fwht([v[..., j] for j in range(tile)])  # along the tile's columns: (..., rows, tile, cols)
    return [_fwht([c[..., i, :] for i in range(tile)]) for c in cols]  # [l][k] -> along rows


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
    coeff = _coefficients(residual, tile)
    # coeff[l][k]: row transform index k, column transform index l -> out[..., k, l]
    return np.stack([np.stack([coeff[l][k] for l in range(tile)], axis=-1) for k in range(tile)], axis=-2)


def satd_tiles(residual: np.ndarray, *, tile: int = 4) -> np.ndarray:
    """SATD of every tile of a residual: ``sum |H X H^T| / SATD_SCALE[tile]``.

    Returns an array of shape (..., height // tile, width // tile), accumulated in the residual's
    float type (pass float64 for exact sums of large blocks).
    """
    coeff = _coefficients(residual, tile)
    acc = None
    for row in coeff:
        for c in row:
            a = np.abs(c)
            acc = a if acc is None else acc + a
    return acc / SATD_SCALE[tile]


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
