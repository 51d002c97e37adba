"""Vector prediction and vector bits of a whole `VectorField`, in its block order.

The blocks of a field are listed in coding order: a neighbour is available for prediction only when
it comes earlier in the list. Prediction follows :func:`synth.motion.cost.median_predictor`
(ITU-T H.264 clause 8.4.1.3 style, neighbours A left, B above, C above-right or D above-left found
through the samples next to the block's corners, as in clause 6.4.11.7), and the bits are signed
Exp-Golomb lengths of the differences (clause 9.1.1).
"""

from __future__ import annotations

import numpy as np

from synth.field import VectorField
from synth.motion.cost import median_predictor, vector_bits

__all__ = ["block_label_map", "field_predictors", "field_vector_bits"]


def block_label_map(field: VectorField) -> np.ndarray:
    """Index of the block covering each luma sample (-1 where none), shape (height, width).

    Filled with one scatter into the flattened map per block shape (a field's blocks lie inside its
    picture and do not overlap, `synth.field_checks`).
    """
    label = np.full((field.height, field.width), -1, dtype=np.int32)
    x, y = np.asarray(field.x, np.int64), np.asarray(field.y, np.int64)
    w, h = np.asarray(field.w, np.int64), np.asarray(field.h, np.int64)
    flat = label.reshape(-1)
    shape_key = w * (1 << 20) + h
    for key in np.unique(shape_key).tolist():
        bw, bh = key >> 20, key & ((1 << 20) - 1)
        (ids,) = np.nonzero(shape_key == key)
        offsets = (np.arange(bh)[:, None] * field.width + np.arange(bw)[None, :]).ravel()
        starts = y[ids] * field.width + x[ids]
        flat[(starts[:, None] + offsets[None, :]).ravel()] = np.repeat(ids.astype(np.int32), bw * bh)
    return label


def field_predictors(field: VectorField, *, label: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Median predictor of every block's vector from earlier-coded neighbours (quarter samples).

    Parameters
    ----------
    field : VectorField
    label : ndarray, optional
        :func:`block_label_map` of the field, when already computed.

    Returns
    -------
    px, py : ndarray of int64, shape (n,)
    """
    if label is None:
        label = block_label_map(field)
    n = len(field)
    idx = np.arange(n)
    x = field.x.astype(np.int64)
    y = field.y.astype(np.int64)
    w = field.w.astype(np.int64)

    def neighbour(sx, sy):
        inside = (sx >= 0) & (sy >= 0) & (sx < field.width) & (sy < field.height)
        j = np.where(inside, label[np.clip(sy, 0, field.height - 1), np.clip(sx, 0, field.width - 1)], -1)
        ok = inside & (j >= 0) & (j < idx)
        jj = np.where(ok, j, 0)
        if n:
            inter = ok & ~field.intra[jj]
            return field.dx[jj].astype(np.int64), field.dy[jj].astype(np.int64), ok, inter
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, ok, ok

    a = neighbour(x - 1, y)
    b = neighbour(x, y - 1)
    c = neighbour(x + w, y - 1)
    d = neighbour(x - 1, y - 1)
    c_ok = c[2]
    cx = np.where(c_ok, c[0], d[0])
    cy = np.where(c_ok, c[1], d[1])
    c_av = np.where(c_ok, c[2], d[2])
    c_in = np.where(c_ok, c[3], d[3])
    return median_predictor(*a, *b, cx, cy, c_av, c_in)


def field_vector_bits(field: VectorField) -> np.ndarray:
    """Bits of each block's vector difference (0 for intra blocks), as se(v) codes of both components."""
    px, py = field_predictors(field)
    bits = vector_bits(field.dx, field.dy, px, py)
    return np.where(field.intra, 0, bits).astype(np.int64)
