"""Block-matching search: coarse-to-fine integer search and quarter-sample refinement.

Every function works on many blocks at once: loops run over candidate offsets, never over pixels or
blocks. Block samples are fetched with one ``numpy.take`` per candidate.

Coarse-to-fine integer search (a Gaussian pyramid in the manner of Burt & Adelson,
doi:10.1109/TCOM.1983.1095851, built with ``cv2.pyrDown``): a grid of 16 x 16 *anchor* blocks is
searched exhaustively at the coarsest level (window sums from an integral image, one shifted
difference picture per offset), then refined level by level: each anchor tries twice the coarser
vectors of itself and of its four neighbours, and a +-1 search around the best. The anchor vectors
seed the per-block search at full resolution (:func:`integer_search`), which is followed by half- and
quarter-sample refinement on the H.264-interpolated reference (:func:`subpel_search`).
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from synth.motion.cost import vector_bits
from synth.motion.subpel import QuarterPelReference

__all__ = ["ANCHOR", "anchor_vectors", "integer_search", "subpel_search", "block_sad"]

#: Size in luma samples of the anchor blocks of the coarse-to-fine search.
ANCHOR = 16

#: Cost per reference sample that a window's vector moves outside the picture (8-bit units).
OUTSIDE_COST = 4.0

#: Weight of the coarsest level's smoothness prior, per window sample and per unit of vector
#: difference to each of the four grid neighbours (8-bit units).
SMOOTH_WEIGHT = 1.0

#: Vector difference (coarsest-level samples, L1) beyond which the smoothness cost stops growing.
SMOOTH_CAP = 2

_RING = [(dx, dy) for dy in (-1, 0, 1) for dx in (-1, 0, 1) if dx or dy]


def _pyramid(plane: np.ndarray, levels: int) -> list[np.ndarray]:
    out = [plane]
    for _ in range(levels - 1):
        out.append(cv2.pyrDown(out[-1]))
    return out


def _windows(plane: np.ndarray, pad: int, x0: np.ndarray, y0: np.ndarray, size: int, dtype) -> np.ndarray:
    """Windows of `size` x `size` samples with top-left (x0, y0) of an edge-padded plane, (n, size*size)."""
    p = np.pad(plane, pad, mode="edge").astype(dtype)
    oy, ox = np.mgrid[0:size, 0:size]
    idx = ((y0 + pad) * p.shape[1] + x0 + pad)[:, None] + (oy * p.shape[1] + ox).ravel()[None, :]
    return p.ravel().take(idx)


def _coarse_cost_volume(cur: np.ndarray, ref: np.ndarray, x0, y0, win: int, radius: int):
    """SAD of windows (x0, y0, win) at every offset of +-radius: (offsets ox, oy), volume (n, offsets)."""
    pc = win + 1
    cur_p = np.pad(cur, pc, mode="edge")
    ref_p = np.pad(ref, pc + radius, mode="edge")
    hp, wp = cur_p.shape
    r0 = y0 + pc
    c0 = x0 + pc
    offsets = sorted(
        ((ox, oy) for oy in range(-radius, radius + 1) for ox in range(-radius, radius + 1)),
        key=lambda o: (abs(o[0]) + abs(o[1]), abs(o[1]), o[1], o[0]),
    )
    vol = np.empty((len(x0), len(offsets)), dtype=np.float64)
    for k, (ox, oy) in enumerate(offsets):
        shifted = ref_p[radius + oy : radius + oy + hp, radius + ox : radius + ox + wp]
        ii = cv2.integral(cv2.absdiff(cur_p, shifted), sdepth=cv2.CV_64F)
        vol[:, k] = ii[r0 + win, c0 + win] - ii[r0, c0 + win] - ii[r0 + win, c0] + ii[r0, c0]
    off = np.array(offsets, dtype=np.int64)
    return off[:, 0], off[:, 1], vol


def _outside_count(x0, y0, win: int, ox, oy, width: int, height: int) -> np.ndarray:
    """Samples of the window (x0 + ox, y0 + oy, win) that fall outside a width x height picture."""
    ix = np.clip(np.minimum(x0 + ox + win, width) - np.maximum(x0 + ox, 0), 0, win)
    iy = np.clip(np.minimum(y0 + oy + win, height) - np.maximum(y0 + oy, 0), 0, win)
    return win * win - ix * iy


def _smooth_penalty(vx, vy, ox, oy, rows: int, cols: int, *, weight: float, cap: int) -> np.ndarray:
    """Truncated-L1 smoothness cost of every offset against the 4 grid neighbours' vectors, (n, offsets)."""
    pen = np.zeros((rows * cols, len(ox)), dtype=np.float64)
    for nx, ny in zip(_grid_neighbours(vx.reshape(rows, cols))[1:], _grid_neighbours(vy.reshape(rows, cols))[1:]):
        d = np.abs(ox[None, :] - nx.reshape(-1, 1)) + np.abs(oy[None, :] - ny.reshape(-1, 1))
        pen += np.minimum(d, cap)
    return weight * pen


def _coarse_full_search(
    cur: np.ndarray,
    ref: np.ndarray,
    x0,
    y0,
    win: int,
    radius: int,
    *,
    rows: int,
    cols: int,
    smooth: float = 0.0,
    cap: int = 2,
    passes: int = 3,
    outside: float = 0.0,
):
    """Exhaustive search of windows over offsets +-radius, regularised by neighbour agreement.

    Cost of an offset: SAD + smooth * sum over the 4 grid neighbours of min(|v - v_n|_1, cap) (a
    truncated-L1 smoothness prior on a Markov random field, minimised by iterated conditional modes,
    Besag 1986, doi:10.1111/j.2517-6161.1986.tb01412.x). Ties favour short vectors.
    """
    ox, oy, vol = _coarse_cost_volume(cur, ref, x0, y0, win, radius)
    if outside > 0:
        h, w = ref.shape
        vol += outside * _outside_count(x0[:, None], y0[:, None], win, ox[None, :], oy[None, :], w, h)
    k = np.argmin(vol, axis=1)
    vx, vy = ox[k], oy[k]
    if smooth > 0:
        for _ in range(passes):
            cost = vol + _smooth_penalty(vx, vy, ox, oy, rows, cols, weight=smooth, cap=cap)
            k = np.argmin(cost, axis=1)
            nvx, nvy = ox[k], oy[k]
            if np.array_equal(nvx, vx) and np.array_equal(nvy, vy):
                break
            vx, vy = nvx, nvy
    return vx, vy


def _grid_neighbours(v: np.ndarray) -> list[np.ndarray]:
    """v itself and its 4-neighbours on the grid (edges replicated), each of v's shape."""
    p = np.pad(v, 1, mode="edge")
    return [v, p[1:-1, :-2], p[1:-1, 2:], p[:-2, 1:-1], p[2:, 1:-1]]


def anchor_vectors(
    cur: np.ndarray,
    ref: np.ndarray,
    *,
    search_range: int,
    levels: int = 4,
    coarse_range: int | None = None,
    bit_depth: int = 8,
) -> tuple[np.ndarray, np.ndarray]:
    """Integer vectors of the 16 x 16 anchor grid by coarse-to-fine search.

    Parameters
    ----------
    cur, ref : ndarray, shape (height, width)
        Luma planes of the coded and the reference picture.
    search_range : int
        Largest vector component searched, in luma samples.
    levels : int
        Pyramid levels (1 = full resolution only).
    coarse_range : int or None
        Reach of the exhaustive search at the coarsest level, in full-resolution luma samples
        (None: `search_range`). Vectors may still grow beyond it, up to `search_range`, by the
        +-1 refinement of the finer levels and the per-block search.
    bit_depth : int
        Sample bit depth (scales the regularisation costs, which are set for 8 bits).

    Returns
    -------
    vx, vy : ndarray of int64, shape (ceil(height/16), ceil(width/16))
        Vectors in full-resolution luma samples, accurate to about +-1 sample (the last level is
        refined by the per-block search).

    Notes
    -----
    Two regularisers keep flat and featureless areas from taking arbitrary vectors: every sample of
    a window that a vector moves outside the reference costs `OUTSIDE_COST` (edge replication
    would otherwise make flat out-of-picture content match any flat block), and the coarsest
    level's choice is regularised by a truncated-L1 smoothness prior over the anchor grid
    (`SMOOTH_WEIGHT` per sample and per unit of vector difference, capped at `SMOOTH_CAP` coarse
    samples so that motion boundaries stay sharp), minimised by iterated conditional modes
    (Besag 1986, doi:10.1111/j.2517-6161.1986.tb01412.x).
    """
    h, w = cur.shape
    rows, cols = -(-h // ANCHOR), -(-w // ANCHOR)
    ay, ax = np.mgrid[0:rows, 0:cols]
    ay = (ay * ANCHOR).ravel()
    ax = (ax * ANCHOR).ravel()
    levels = max(1, int(levels))
    cur_pyr = _pyramid(cur, levels)
    ref_pyr = _pyramid(ref, levels)
    dtype = np.int16 if cur.dtype == np.uint8 else np.int32
    top = levels - 1
    # the finest level searched here; level 0 is left to the per-block search when there is a pyramid
    finest = 1 if levels > 1 else 0

    def geometry(level: int):
        size = max(ANCHOR >> level, 8)
        off = (size - (ANCHOR >> level)) // 2 if (ANCHOR >> level) < size else 0
        return size, (ax >> level) - off, (ay >> level) - off

    win, x0, y0 = geometry(top)
    reach = search_range if coarse_range is None or levels == 1 else min(search_range, coarse_range)
    radius = max(1, math.ceil(reach / (1 << top)))
    # costs are per sample of an 8-bit picture; scale them with the sample range
    unit = float(1 << (bit_depth - 8)) if bit_depth > 8 else 1.0
    _out = OUTSIDE_COST * unit
    vx, vy = _coarse_full_search(
        cur_pyr[top], ref_pyr[top], x0, y0, win, radius, rows=rows, cols=cols,
        smooth=SMOOTH_WEIGHT * unit * win * win, cap=SMOOTH_CAP, outside=_out,
    )  # fmt: skip
    for level in range(top - 1, finest - 1, -1):
        win, x0, y0 = geometry(level)
        lim = (search_range >> level) + 1
        c = cur_pyr[level]
        r = ref_pyr[level]
        pad = lim + win + 2
        cur_w = _windows(c, win + 2, x0, y0, win, dtype)
        rp = np.pad(r, pad, mode="edge").astype(dtype).ravel()
        stride = r.shape[1] + 2 * pad
        oy, ox = np.mgrid[0:win, 0:win]
        base = (oy * stride + ox).ravel()
        start = (y0 + pad) * stride + (x0 + pad)

        hl, wl = r.shape

        def sad(cx, cy):
            idx = (start + cy * stride + cx)[:, None] + base[None, :]
            out = np.abs(rp.take(idx) - cur_w).sum(axis=1, dtype=np.int64)
            if _out > 0:
                out = out + _out * _outside_count(x0, y0, win, cx, cy, wl, hl)
            return out

        gx = 2 * vx.reshape(rows, cols)
        gy = 2 * vy.reshape(rows, cols)
        cand = list(zip(_grid_neighbours(gx), _grid_neighbours(gy)))
        cand.append((np.zeros_like(gx), np.zeros_like(gy)))
        best = None
        for cx, cy in cand:
            cx = np.clip(cx.ravel(), -lim, lim)
            cy = np.clip(cy.ravel(), -lim, lim)
            s = sad(cx, cy)
            if best is None:
                best, bx, by = s, cx, cy
            else:
                better = s < best
                best = np.where(better, s, best)
                bx = np.where(better, cx, bx)
                by = np.where(better, cy, by)
        cx0, cy0 = bx, by
        for dx, dy in _RING:
            cx = np.clip(cx0 + dx, -lim, lim)
            cy = np.clip(cy0 + dy, -lim, lim)
            s = sad(cx, cy)
            better = s < best
            best = np.where(better, s, best)
            bx = np.where(better, cx, bx)
            by = np.where(better, cy, by)
        vx, vy = bx, by
    scale = 1 << finest
    return (scale * vx).reshape(rows, cols), (scale * vy).reshape(rows, cols)


def block_sad(ref: QuarterPelReference, cur_blocks: np.ndarray, x, y, qx, qy, size: int) -> np.ndarray:
    """SAD of blocks (n, size*size) against the reference at quarter-sample vectors (qx, qy)."""
    pred = ref.fetch(x, y, qx, qy, size, size)
    return np.abs(pred - cur_blocks).sum(axis=1, dtype=np.int64)


def integer_search(
    ref: QuarterPelReference,
    cur_blocks: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    size: int,
    *,
    cand_x: list[np.ndarray],
    cand_y: list[np.ndarray],
    lo_x: np.ndarray,
    hi_x: np.ndarray,
    lo_y: np.ndarray,
    hi_y: np.ndarray,
    radius: int,
    lam: float,
    pred_x: np.ndarray,
    pred_y: np.ndarray,
    max_steps: int = 4,
):
    """Best integer vector per block among candidates, then a +-`radius` search around the best.

    The ring search repeats (at most `max_steps` times) for blocks whose best vector moved.

    Cost J = SAD + lam * bits(4 v - pred), pred in quarter samples. Candidates are clamped to
    [lo, hi] (luma samples) per block; ties keep the earlier candidate.

    Returns
    -------
    vx, vy : ndarray of int64 (luma samples)
    cost : ndarray of float64
    """

    def cost_of(cx, cy):
        s = block_sad(ref, cur_blocks, x, y, 4 * cx, 4 * cy, size)
        return s + lam * vector_bits(4 * cx, 4 * cy, pred_x, pred_y)

    best = None
    for cx, cy in zip(cand_x, cand_y):
        cx = np.clip(cx, lo_x, hi_x)
        cy = np.clip(cy, lo_y, hi_y)
        j = cost_of(cx, cy)
        if best is None:
            best, bx, by = j.astype(np.float64), cx.astype(np.int64), cy.astype(np.int64)
            continue
        better = j < best
        best = np.where(better, j, best)
        bx = np.where(better, cx, bx)
        by = np.where(better, cy, by)
    ring = [(dx, dy) for dy in range(-radius, radius + 1) for dx in range(-radius, radius + 1) if dx or dy]
    # repeated ring search: blocks whose best vector moved search again around the new one
    active = np.arange(len(x))
    for _ in range(max_steps):
        if len(active) == 0:
            break
        cx0, cy0 = bx[active], by[active]
        sub = (cur_blocks[active], x[active], y[active], pred_x[active], pred_y[active])
        lx, hx, ly, hy = lo_x[active], hi_x[active], lo_y[active], hi_y[active]
        b_best, b_x, b_y = best[active], cx0, cy0
        for dx, dy in ring:
            cx = np.clip(cx0 + dx, lx, hx)
            cy = np.clip(cy0 + dy, ly, hy)
            j = block_sad(ref, sub[0], sub[1], sub[2], 4 * cx, 4 * cy, size) + lam * vector_bits(
                4 * cx, 4 * cy, sub[3], sub[4]
            )
            better = j < b_best
            b_best = np.where(better, j, b_best)
            b_x = np.where(better, cx, b_x)
            b_y = np.where(better, cy, b_y)
        moved = (b_x != cx0) | (b_y != cy0)
        best[active], bx[active], by[active] = b_best, b_x, b_y
        active = active[moved]
    return bx, by, best


def subpel_search(
    ref: QuarterPelReference,
    cur_blocks: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    size: int,
    *,
    vx: np.ndarray,
    vy: np.ndarray,
    lo_x: np.ndarray,
    hi_x: np.ndarray,
    lo_y: np.ndarray,
    hi_y: np.ndarray,
    lam: float,
    pred_x: np.ndarray,
    pred_y: np.ndarray,
    quarter: bool = True,
):
    """Half- then quarter-sample refinement around integer vectors (vx, vy).

    Tries the 8 half-sample neighbours of the integer vector, then the 8 quarter-sample neighbours of
    the best, then the predictor itself, on the H.264-interpolated reference
    (:func:`synth.motion.subpel.luma_phases`). Bounds lo/hi are in quarter samples.

    Returns
    -------
    qx, qy : ndarray of int64 (quarter samples)
    sad : ndarray of int64
    cost : ndarray of float64 (SAD + lam * bits)
    """
    qx = np.clip(4 * vx, lo_x, hi_x)
    qy = np.clip(4 * vy, lo_y, hi_y)
    sad = block_sad(ref, cur_blocks, x, y, qx, qy, size)
    best = sad + lam * vector_bits(qx, qy, pred_x, pred_y)

    def step(qx, qy, sad, best, offsets):
        cx0, cy0 = qx, qy
        for dx, dy in offsets:
            cx = np.clip(cx0 + dx, lo_x, hi_x)
            cy = np.clip(cy0 + dy, lo_y, hi_y)
            s = block_sad(ref, cur_blocks, x, y, cx, cy, size)
            j = s + lam * vector_bits(cx, cy, pred_x, pred_y)
            better = j < best
            best = np.where(better, j, best)
            sad = np.where(better, s, sad)
            qx = np.where(better, cx, qx)
            qy = np.where(better, cy, qy)
        return qx, qy, sad, best

    qx, qy, sad, best = step(qx, qy, sad, best, [(2 * dx, 2 * dy) for dx, dy in _RING])
    if quarter:
        qx, qy, sad, best = step(qx, qy, sad, best, _RING)
        # the predictor itself (cheap to code); only when it is inside the bounds
        px = np.clip(pred_x, lo_x, hi_x)
        py = np.clip(pred_y, lo_y, hi_y)
        s = block_sad(ref, cur_blocks, x, y, px, py, size)
        j = s + lam * vector_bits(px, py, pred_x, pred_y)
        better = j < best
        best = np.where(better, j, best)
        sad = np.where(better, s, sad)
        qx = np.where(better, px, qx)
        qy = np.where(better, py, qy)
    return qx, qy, sad, best
