"""Codec-like motion estimation: variable-size block vectors between two pictures of a clip.

Public entry of the estimator. The field it returns looks like one an encoder would code: square
blocks from a quadtree, quarter-sample vectors, each choice made by a Lagrangian cost
J = SAD + lambda * bits with lambda from the QP, and intra blocks where no vector predicts well.

Pipeline (luma only):

1. Coarse-to-fine integer search of a 16 x 16 anchor grid over a 4-level Gaussian pyramid
   (:func:`synth.motion.search.anchor_vectors`): exhaustive at the coarsest level (regularised:
   samples moved outside the reference cost extra, and a smoothness prior over the anchor grid keeps
   flat areas on their neighbours' motion), +-1 refinement
   around twice the coarser vectors of the anchor and its neighbours at each finer level.
2. For every block size of the quadtree, every block tries the vectors of the anchors it overlaps
   and its neighbours, then a +-1 integer search, then half- and quarter-sample refinement on the
   reference interpolated with the H.264 luma filter (6-tap (1, -5, 20, 20, -5, 1) / 32 half
   samples, averaged quarter samples; ITU-T H.264 clause 8.4.2.2.1; :mod:`synth.motion.subpel`).
   The rate term counts signed Exp-Golomb bits (H.264 clause 9.1.1) of the difference to a median
   predictor; during the search the predictor comes from the same-size neighbours found so far.
3. Intra decision per block: J_intra = sqrt(2) * SAD of the H.264 Intra_16x16 DC prediction
   (clause 8.3.3, mean of the samples above and left, taken from the coded picture itself)
   + lambda * (1 + INTRA_BITS). The sqrt(2) puts the two on an equal footing for sensor noise: an
   inter residual between two uncoded pictures carries the noise of both, a DC residual of one.
4. Quadtree decision bottom-up (:mod:`synth.motion.quadtree`), then vectors are re-priced with the true
   median predictor in coding order and replaced by the predictor where that is cheaper.
"""

from __future__ import annotations

import math

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.motion.cost import lambda_motion, median_predictor, vector_bits
from synth.motion.quadtree import collect_leaves, decide_splits, plan_levels
from synth.motion.rate import field_predictors
from synth.motion.search import ANCHOR, anchor_vectors, block_sad, integer_search, subpel_search
from synth.motion.subpel import QuarterPelReference
from synth.picture import Picture

__all__ = ["estimate_field", "estimate_reference_fields", "INTRA_BITS", "DEFAULT_BLOCK_SIZES"]

#: Bits charged for signalling an intra block beyond its mode flag (our own approximation of an
#: intra mode plus a DC level).
INTRA_BITS = 6

#: Rounds in which every block tries its same-size neighbours' integer vectors.
PROPAGATION_PASSES = 2

#: Block sizes of the quadtree by default.
DEFAULT_BLOCK_SIZES = (64, 32, 16, 8)


def _check_int(name: str, value, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not lo <= value <= hi:
        raise ParameterError(f"{name} must be an integer in {lo}..{hi}, got {value!r}")
    return int(value)


def _blocks(plane: np.ndarray, x: np.ndarray, y: np.ndarray, size: int) -> np.ndarray:
    oy, ox = np.mgrid[0:size, 0:size]
    w = plane.shape[1]
    idx = (y * w + x)[:, None] + (oy * w + ox).ravel()[None, :]
    return plane.ravel().take(idx)


def _dc_intra_sad(cur: np.ndarray, blocks: np.ndarray, x: np.ndarray, y: np.ndarray, size: int, bit_depth: int):
    """SAD of the H.264 DC intra prediction (clause 8.3.3.3 form) from the samples above and left."""
    h, w = cur.shape
    k = np.arange(size)
    has_top = y > 0
    has_left = x > 0
    top = cur[np.maximum(y - 1, 0)[:, None], np.minimum(x[:, None] + k[None, :], w - 1)].astype(np.int64).sum(1)
    left = cur[np.minimum(y[:, None] + k[None, :], h - 1), np.maximum(x - 1, 0)[:, None]].astype(np.int64).sum(1)
    shift = int(math.log2(size))
    both = (top + left + size) >> (shift + 1)
    only_top = (top + (size >> 1)) >> shift
    only_left = (left + (size >> 1)) >> shift
    dc = np.where(
        has_top & has_left, both, np.where(has_top, only_top, np.where(has_left, only_left, 1 << (bit_depth - 1)))
    )
    return np.abs(blocks.astype(np.int64) - dc[:, None]).sum(axis=1)


def _grid_predictor(gx, gy, ok):
    """Median predictor on a same-size grid: A left, B above, C above-right (else D above-left)."""

    def shifted(a, dr, dc, fill):
        out = np.full_like(a, fill)
        rows, cols = a.shape
        r0, r1 = max(dr, 0), rows + min(dr, 0)
        c0, c1 = max(dc, 0), cols + min(dc, 0)
        out[r0:r1, c0:c1] = a[r0 - dr : r1 - dr, c0 - dc : c1 - dc]
        return out

    a = [shifted(v, 0, 1, f) for v, f in ((gx, 0), (gy, 0), (ok, False))]
    b = [shifted(v, 1, 0, f) for v, f in ((gx, 0), (gy, 0), (ok, False))]
    c = [shifted(v, 1, -1, f) for v, f in ((gx, 0), (gy, 0), (ok, False))]
    d = [shifted(v, 1, 1, f) for v, f in ((gx, 0), (gy, 0), (ok, False))]
    c_ok = c[2]
    cx = np.where(c_ok, c[0], d[0])
    cy = np.where(c_ok, c[1], d[1])
    cav = np.where(c_ok, c[2], d[2])
    return median_predictor(a[0], a[1], a[2], a[2], b[0], b[1], b[2], b[2], cx, cy, cav, cav)


def _candidate_points(x, y, size):
    """Sample positions whose anchor vectors a block of `size` tries first."""
    cx, cy = x + size // 2, y + size // 2
    if size >= 32:
        q = size // 4
        return [(cx, cy), (cx - q, cy - q), (cx + q, cy - q), (cx - q, cy + q), (cx + q, cy + q)]
    d = ANCHOR
    return [(cx, cy), (cx - d, cy), (cx + d, cy), (cx, cy - d), (cx, cy + d)]


def estimate_field(
    coded: Picture,
    reference: Picture,
    *,
    coded_time: float,
    reference_time: float,
    qp: int = 27,
    search_range: int = 64,
    block_sizes: tuple[int, ...] = DEFAULT_BLOCK_SIZES,
    pyramid_levels: int = 4,
    intra: bool = True,
    coarse_range: int | None = None,
) -> VectorField:
    """Estimate a codec-like block vector field of `coded` against `reference`.

    Parameters
    ----------
    coded : Picture
        The picture the blocks live on.
    reference : Picture
        The picture the vectors point to; same luma size and bit depth.
    coded_time, reference_time : float
        Display times of the two pictures (stored in the field; must differ).
    qp : int
        Quantisation parameter 0..51 setting the Lagrange multiplier
        (:func:`synth.motion.cost.lambda_motion`): higher QP, cheaper and smoother fields.
    search_range : int
        Largest vector component in luma samples, 1..1024.
    block_sizes : tuple of int
        Square block sizes the quadtree may use (powers of two 4..128). Edge blocks that do not fit
        are split further, down to 4 x 4.
    pyramid_levels : int
        Levels of the coarse-to-fine integer search, 1..6 (1 = exhaustive search at full
        resolution, slow for large ranges).
    intra : bool
        Allow intra blocks.
    coarse_range : int or None
        Reach in luma samples of the exhaustive search at the coarsest pyramid level, 1..1024
        (None: `search_range`). Vectors can grow beyond it, up to `search_range`, through the
        refinement of the finer levels; a smaller value keeps the exhaustive search from matching
        flat areas far away.

    Returns
    -------
    VectorField
        Blocks in coding order (tree-block raster, z-order inside), quarter-sample vectors.
        ``gaps_allowed`` is set when the picture size is not a multiple of 4 and a remainder strip
        stays uncovered.

    Raises
    ------
    ParameterError
        Pictures of different size or bit depth, parameters out of range.

    Notes
    -----
    Interpolation: ITU-T H.264 clause 8.4.2.2.1. Rate: signed Exp-Golomb, clause 9.1.1, against the
    median predictor of clause 8.4.1.3. Lambda: Wiegand et al. 2003, doi:10.1109/TCSVT.2003.815168.
    Quadtree: the split decision of H.265 coding units (clause 7.3.8.4). See the module docstring.
    """
    for name, pic in (("coded", coded), ("reference", reference)):
        if not isinstance(pic, Picture):
            raise ParameterError(f"{name} must be a Picture, got {type(pic).__name__}")
    if isinstance(block_sizes, (int, np.integer)):
        block_sizes = (int(block_sizes),)
    try:
        block_sizes = tuple(int(s) for s in block_sizes)
    except (TypeError, ValueError):
        raise ParameterError(f"block_sizes must be a tuple of integers, got {block_sizes!r}") from None
    if coded.y.shape != reference.y.shape:
        raise ParameterError(
            f"coded and reference pictures differ in size: {coded.width}x{coded.height} vs "
            f"{reference.width}x{reference.height}"
        )
    if coded.bit_depth != reference.bit_depth:
        raise ParameterError(f"bit depths differ: {coded.bit_depth} vs {reference.bit_depth}")
    for name, t in (("coded_time", coded_time), ("reference_time", reference_time)):
        if not np.isfinite(t):
            raise ParameterError(f"{name} must be finite, got {t}")
    if coded_time == reference_time:
        raise ParameterError(f"coded_time and reference_time must differ, both are {coded_time}")
    qp = _check_int("qp", qp, 0, 51)
    search_range = _check_int("search_range", search_range, 1, 1024)
    pyramid_levels = _check_int("pyramid_levels", pyramid_levels, 1, 6)
    if coarse_range is not None:
        coarse_range = _check_int("coarse_range", coarse_range, 1, 1024)

    height, width = coded.y.shape
    bit_depth = coded.bit_depth
    lam = lambda_motion(qp)
    plan = plan_levels(width, height, block_sizes)
    top = plan[0].size
    dtype = np.int16 if bit_depth == 8 else np.int32
    cur = coded.y.astype(dtype)

    avx, avy = anchor_vectors(
        coded.y, reference.y, search_range=search_range, levels=pyramid_levels,
        coarse_range=coarse_range, bit_depth=bit_depth,
    )  # fmt: skip
    arows, acols = avx.shape
    ref = QuarterPelReference(reference.y, pad=top + 8, bit_depth=bit_depth, dtype=dtype)

    # dominant motion: component-wise median of the anchor vectors
    global_x, global_y = int(np.median(avx)), int(np.median(avy))

    def anchor_at(px, py):
        r = np.clip(py // ANCHOR, 0, arows - 1)
        c = np.clip(px // ANCHOR, 0, acols - 1)
        return avx[r, c], avy[r, c]

    leaf_cost: dict[int, np.ndarray] = {}
    chosen: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
    for lev in plan:
        if not lev.leaf_ok.any():
            continue
        s = lev.size
        x, y = lev.positions(lev.leaf_ok)
        blocks = _blocks(cur, x, y, s)
        lo_x = np.maximum(-(x + s), -search_range)
        hi_x = np.minimum(width - x, search_range)
        lo_y = np.maximum(-(y + s), -search_range)
        hi_y = np.minimum(height - y, search_range)
        cands = [anchor_at(px, py) for px, py in _candidate_points(x, y, s)]
        cands.append((np.zeros_like(x), np.zeros_like(y)))
        cands.append((np.full_like(x, global_x), np.full_like(y, global_y)))
        # predictor for the integer stage: median of the anchors left, above and above-right
        (ax, ay), (bx, by), (cx, cy) = anchor_at(x - 1, y), anchor_at(x, y - 1), anchor_at(x + s, y - 1)
        ones = np.ones(len(x), dtype=bool)
        p0x, p0y = median_predictor(4 * ax, 4 * ay, ones, ones, 4 * bx, 4 * by, ones, ones, 4 * cx, 4 * cy, ones, ones)
        vx, vy, _ = integer_search(
            ref, blocks, x, y, s,
            cand_x=[c[0] for c in cands], cand_y=[c[1] for c in cands],
            lo_x=lo_x, hi_x=hi_x, lo_y=lo_y, hi_y=hi_y,
            radius=1, lam=lam, pred_x=p0x, pred_y=p0y,
        )  # fmt: skip
        # propagation: every block tries its same-size neighbours' vectors, then the ring again
        r, c = y // s, x // s
        gx = np.zeros((lev.rows, lev.cols), dtype=np.int64)
        gy = np.zeros_like(gx)
        for _ in range(PROPAGATION_PASSES):
            gx[r, c] = vx
            gy[r, c] = vy
            px_, py_ = np.pad(gx, 1, mode="edge"), np.pad(gy, 1, mode="edge")
            neigh = [(px_[1 + r, c], py_[1 + r, c]), (px_[1 + r, 2 + c], py_[1 + r, 2 + c]),
                     (px_[r, 1 + c], py_[r, 1 + c]), (px_[2 + r, 1 + c], py_[2 + r, 1 + c])]  # fmt: skip
            vx, vy, _ = integer_search(
                ref, blocks, x, y, s,
                cand_x=[vx] + [n[0] for n in neigh], cand_y=[vy] + [n[1] for n in neigh],
                lo_x=lo_x, hi_x=hi_x, lo_y=lo_y, hi_y=hi_y,
                radius=1, lam=lam, pred_x=p0x, pred_y=p0y, max_steps=2,
            )  # fmt: skip
        # predictor for the sub-sample stage: same-size neighbours' integer vectors
        gx[r, c] = 4 * vx
        gy[r, c] = 4 * vy
        gpx, gpy = _grid_predictor(gx, gy, lev.leaf_ok)
        px, py = gpx[r, c], gpy[r, c]
        qx, qy, sad, j_inter = subpel_search(
            ref, blocks, x, y, s, vx=vx, vy=vy,
            lo_x=4 * lo_x, hi_x=4 * hi_x, lo_y=4 * lo_y, hi_y=4 * hi_y,
            lam=lam, pred_x=px, pred_y=py,
        )  # fmt: skip
        j_inter = j_inter + lam  # inter/intra flag
        is_intra = np.zeros(len(x), dtype=bool)
        if intra:
            j_intra = math.sqrt(2.0) * _dc_intra_sad(cur, blocks, x, y, s, bit_depth) + lam * (1 + INTRA_BITS)
            is_intra = j_intra < j_inter
            j_inter = np.where(is_intra, j_intra, j_inter)
        cost = np.full((lev.rows, lev.cols), np.inf)
        cost[r, c] = j_inter
        leaf_cost[s] = cost
        grids = [np.zeros((lev.rows, lev.cols), dtype=np.int64) for _ in range(3)] + [
            np.zeros((lev.rows, lev.cols), dtype=bool)
        ]
        grids[0][r, c] = qx
        grids[1][r, c] = qy
        grids[2][r, c] = sad
        grids[3][r, c] = is_intra
        chosen[s] = tuple(grids)

    split = decide_splits(plan, leaf_cost, lam=lam)
    lx, ly, ls, gaps = collect_leaves(plan, split, width=width)
    dx = np.zeros(len(lx), dtype=np.int64)
    dy = np.zeros_like(dx)
    sad = np.zeros_like(dx)
    is_intra = np.zeros(len(lx), dtype=bool)
    for s, (gqx, gqy, gsad, gintra) in chosen.items():
        m = ls == s
        r, c = ly[m] // s, lx[m] // s
        dx[m], dy[m], sad[m], is_intra[m] = gqx[r, c], gqy[r, c], gsad[r, c], gintra[r, c]
    dx = np.where(is_intra, 0, dx)
    dy = np.where(is_intra, 0, dy)

    def make(dx, dy):
        return VectorField.from_arrays(
            width=width, height=height, coded_time=coded_time, reference_time=reference_time,
            x=lx, y=ly, w=ls, h=ls, dx=dx, dy=dy, intra=is_intra, gaps_allowed=gaps,
        )  # fmt: skip

    field = make(dx, dy)
    # re-price with the true predictor in coding order; take the predictor where it is cheaper
    px, py = field_predictors(field)
    for s in np.unique(ls).tolist():
        m = (ls == s) & ~is_intra & ((px != dx) | (py != dy))
        if not m.any():
            continue
        x, y = lx[m], ly[m]
        blocks = _blocks(cur, x, y, s)
        lo_x = 4 * np.maximum(-(x + s), -search_range)
        hi_x = 4 * np.minimum(width - x, search_range)
        lo_y = 4 * np.maximum(-(y + s), -search_range)
        hi_y = 4 * np.minimum(height - y, search_range)
        inb = (px[m] >= lo_x) & (px[m] <= hi_x) & (py[m] >= lo_y) & (py[m] <= hi_y)
        qx = np.clip(px[m], lo_x, hi_x)
        qy = np.clip(py[m], lo_y, hi_y)
        sad_p = block_sad(ref, blocks, x, y, qx, qy, s)
        j_cur = sad[m] + lam * vector_bits(dx[m], dy[m], px[m], py[m])
        j_pred = sad_p + lam * 2
        take = inb & (j_pred < j_cur)
        idx = np.nonzero(m)[0][take]
        dx[idx] = qx[take]
        dy[idx] = qy[take]
    return make(dx, dy)


def estimate_reference_fields(
    past: Picture,
    future: Picture,
    *,
    past_time: float,
    future_time: float,
    qp: int = 27,
    two_way: bool = False,
    **options,
) -> list[VectorField]:
    """The vector fields between two references that synth assumes a decoder has.

    Every command that estimates vectors itself (``frame``, ``compare``, ``gop``, ``demo``,
    ``export``, ``rd``, study kinds) calls this one function, so they all synthesise from the same
    vectors.

    Parameters
    ----------
    past, future : Picture
        The two references.
    past_time, future_time : float
        Their display times.
    qp : int
        Rate constraint of the estimated vectors (see `estimate_field`).
    two_way : bool
        False (default): one field, the future reference coded against the past one, as when the
        future anchor of a hierarchical GOP is a P picture. True: also the past reference coded
        against the future one (more candidates; about 1.2x the synthesis time).
    **options
        Passed to `estimate_field` (``search_range``, ``block_sizes``, ...).

    Returns
    -------
    list of VectorField
        ``[future -> past]`` or ``[future -> past, past -> future]``.
    """
    fields = [estimate_field(future, past, coded_time=future_time, reference_time=past_time, qp=qp, **options)]
    if two_way:
        fields.append(estimate_field(past, future, coded_time=past_time, reference_time=future_time, qp=qp, **options))
    return fields
