"""Overlapped block motion compensation of the projected vectors.

Reference: M. T. Orchard and G. J. Sullivan, "Overlapped block motion compensation: an
estimation-theoretic approach", IEEE Trans. Image Processing 3(5), 693-699, 1994,
doi:10.1109/83.334974.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.spatial import cKDTree

from synth.errors import ParameterError
from synth.field import VectorField
from synth.flow import sample_with_flow, scale_flow_to_plane
from synth.picture import Picture
from synth.synthesis.project import project_fields, reference_times

__all__ = ["obmc_picture", "predict_obmc", "raised_cosine_weights", "grid_block_size"]


def grid_block_size(fields: Sequence[VectorField]) -> int:
    """The target grid's block size: the most frequent coded block side (at least 4), power of two."""
    sides = np.concatenate([np.minimum(f.w, f.h) for f in fields]) if fields else np.array([8])
    values, counts = np.unique(sides, return_counts=True)
    side = int(values[np.argmax(counts)]) if len(values) else 8
    return int(max(4, 1 << int(np.floor(np.log2(max(side, 1))))))


def raised_cosine_weights(n: int, block: int, n_blocks: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per sample along one axis: the two overlapping blocks and the weight of the second one.

    The window of block i is ``sin^2(pi (x + 0.5 - i B + B/2) / (2B))`` over 2B samples centred on
    the block; with hop B two windows overlap everywhere and sum to one (sin^2 + cos^2).

    Returns
    -------
    (first, second, weight_second) : ndarrays of shape (n,)
        Block indices (clamped to the picture) and the weight of `second`; `first` has
        ``1 - weight_second``.
    """
    u = (np.arange(n, dtype=np.float64) + 0.5) / block - 0.5
    i0 = np.floor(u).astype(np.int64)
    frac = u - i0
    w1 = np.sin(0.5 * np.pi * frac) ** 2
    first = np.clip(i0, 0, n_blocks - 1)
    second = np.clip(i0 + 1, 0, n_blocks - 1)
    return first, second, w1


def predict_obmc(past: Picture, future: Picture, *, t: float, fields: Sequence[VectorField]):
    """Overlapped block motion compensation (OBMC) of the projected vectors.

    Scheme: every non-intra block of the fields is projected along its trajectory to time t with
    the core's projection (`synth.synthesis.project.project_fields`, the same landed vectors the estimator
    uses). A regular grid of B x B blocks at time t (B the most frequent coded block side, a power
    of two of at least 4) takes, for each of its blocks, the landed vector whose landing centre is
    nearest to its own centre (k-d tree). Each grid block predicts bidirectionally along that
    trajectory, ``(1 - t) past(p + d_past) + t future(p + d_future)``, and the predictions of
    overlapping blocks are blended with a separable raised-cosine window of 2B x 2B samples,
    ``sin^2(pi (n + 0.5) / 2B)``, which sums to one at hop B (M. T. Orchard and G. J. Sullivan,
    "Overlapped block motion compensation: an estimation-theoretic approach", IEEE Trans. Image
    Processing 3(5), 693-699, 1994, doi:10.1109/83.334974, who frame OBMC as estimating each pixel from
    several block vectors; the raised-cosine window is the usual fixed smooth choice, common
    practice). Each pixel thus mixes the four blocks around it,
    which removes the block edges of plain projection. Chroma uses the same vectors scaled to its grid.

    Returns
    -------
    (Picture, dict)
        The prediction and the map ``block_vector_distance`` (luma samples between each grid block's
        centre and the landed block it took its vector from, spread over the block).
    """
    h, w = past.height, past.width
    fields = list(fields)
    for f in fields:
        if (f.width, f.height) != (w, h):
            raise ParameterError(f"vector field is {f.width}x{f.height} but the pictures are {w}x{h}")
    past_time, future_time = reference_times(fields)
    landed = project_fields(fields, past_time=past_time, future_time=future_time, t=t)
    block = grid_block_size(fields)
    nby, nbx = -(-h // block), -(-w // block)
    # Block centres in sample coordinates (a block over samples x..x+B-1 is centred at x + (B-1)/2).
    gy, gx = np.meshgrid(
        np.arange(nby) * block + (block - 1) / 2.0, np.arange(nbx) * block + (block - 1) / 2.0, indexing="ij"
    )
    zeros = np.zeros((nby, nbx), np.float32)
    if len(landed):
        centres = np.stack([landed.cx, landed.cy], axis=1).astype(np.float64)
        dist, idx = cKDTree(centres).query(np.stack([gx.ravel(), gy.ravel()], axis=1), k=1)
        disp = {
            name: getattr(landed, name)[idx].reshape(nby, nbx).astype(np.float32)
            for name in ("past_dx", "past_dy", "future_dx", "future_dy")
        }
        dist = dist.reshape(nby, nbx).astype(np.float32)
    else:  # every block intra: no motion known, zero displacements
        disp = {name: zeros for name in ("past_dx", "past_dy", "future_dx", "future_dy")}
        dist = zeros
    ry0, ry1, wy = raised_cosine_weights(h, block, nby)
    rx0, rx1, wx = raised_cosine_weights(w, block, nbx)
    fx, fy = past.chroma_factors
    corners = []
    for by, wyy in ((ry0, 1.0 - wy), (ry1, wy)):
        for bx, wxx in ((rx0, 1.0 - wx), (rx1, wx)):
            weight = (wyy[:, None] * wxx[None, :]).astype(np.float32)
            d_past = np.stack([disp["past_dx"][by][:, bx], disp["past_dy"][by][:, bx]], axis=-1)
            d_future = np.stack([disp["future_dx"][by][:, bx], disp["future_dy"][by][:, bx]], axis=-1)
            corners.append((weight, d_past, d_future))
    out = []
    for i, (p, f) in enumerate(zip(past.planes, future.planes)):
        acc = np.zeros(p.shape, np.float32)
        for weight, d_past, d_future in corners:
            if i > 0:
                d_past = scale_flow_to_plane(d_past, fx, fy)
                d_future = scale_flow_to_plane(d_future, fx, fy)
                weight = weight[::fy, ::fx]
            mc = (1.0 - t) * sample_with_flow(p, d_past) + t * sample_with_flow(f, d_future)
            acc += weight * mc
        out.append(acc)
    picture = Picture.from_float(out, chroma_format=past.chroma_format, bit_depth=past.bit_depth)
    dist_map = np.kron(dist, np.ones((block, block), np.float32))[:h, :w]
    return picture, {"block_vector_distance": dist_map}


def obmc_picture(state, *, t: float):
    """Overlapped block motion compensation of the projected vectors (see `predict_obmc`)."""
    return predict_obmc(state.past, state.future, t=t, fields=state.fields)
