"""Corrective block offsets on a synthetic picture: the encoder-side residual search.

An encoder that uses the synthetic picture as a reference still sees the true target picture. For
every block of the target it looks, in a small window around the co-located position on the
synthetic picture, for the quarter-pel offset that minimises the Lagrangian cost

    J(o) = D(o) + lambda * R(o),

with ``D`` the SAD or the Hadamard SATD (:mod:`synth.codec.satd`) of the block's residual and ``R`` the
bits of the offset coded as two signed Exp-Golomb code words ``se(v)`` (ITU-T H.264 clause 9.1.1)
against the zero offset as predictor. Fractional positions use the H.265 luma interpolation filter
(:mod:`synth.codec.dctif`). The search is exhaustive over the window and vectorised over blocks: each
candidate offset is evaluated for all blocks at once, so the Python loop runs over the
``(8 window + 1)^2`` offsets only.

Lambda follows the H.264 reference encoder's rate-constrained motion search (common practice):
``lambda_mode = 0.85 * 2^((QP - 12) / 3)`` and ``lambda_motion = sqrt(lambda_mode)`` for SAD/SATD
distortion (T. Wiegand, H. Schwarz, A. Joch, F. Kossentini, G. J. Sullivan, "Rate-constrained coder
control and comparison of video coding standards", IEEE TCSVT 13(7), 2003,
doi:10.1109/TCSVT.2003.815168), scaled by ``2^(bit_depth - 8)`` for deeper samples.

The offsets are a vector field in the usual sign convention (:mod:`synth.field`): a block at
``(x, y)`` of the target with offset ``(dx, dy)`` takes its prediction from ``(x + dx/4, y + dy/4)``
on the synthetic picture. Its reference is the synthetic picture, which lives at the target's own
time, so the field has one time (the model, :class:`synth.offset_field.OffsetField`). Blocks cover
the largest multiple of the block size; a rim beyond it (when the picture size is not a multiple)
keeps the synthetic samples and is flagged as an allowed gap.

Chroma follows the luma offset scaled by the subsampling, interpolated bilinearly (the H.264
chroma sample interpolation of clause 8.4.2.2.2 is bilinear at 1/8 sample for 4:2:0).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from synth.codec.dctif import quarter_pel_phases, shifted_view
from synth.codec.satd import block_sad, block_satd
from synth.errors import ParameterError
from synth.expgolomb import se_length
from synth.flow import sample_with_flow, scale_flow_to_plane
from synth.metrics import picture_psnr
from synth.offset_field import OffsetField, OffsetStatistics
from synth.picture import Picture

__all__ = [
    "METRICS",
    "OffsetField",
    "OffsetStatistics",
    "OffsetSearch",
    "motion_lagrangian",
    "offset_bits",
    "refine_with_offsets",
]

#: Distortion measures the search accepts.
METRICS = ("sad", "satd")
_BLOCK_SIZES = (4, 8, 16, 32, 64)
_MAX_WINDOW = 8


@dataclass(frozen=True, eq=False)
class OffsetSearch:
    """Result of :func:`refine_with_offsets`."""

    field: OffsetField
    prediction: Picture
    stats: OffsetStatistics
    block_cost: np.ndarray = field(repr=False)  # (rows, cols) float64, chosen J per block


def motion_lagrangian(qp: float, *, bit_depth: int = 8) -> float:
    """Lagrange multiplier for SAD/SATD-based motion search at a QP.

    ``sqrt(0.85 * 2^((QP - 12) / 3)) * 2^(bit_depth - 8)`` (H.264 reference encoder, Wiegand et
    al. 2003, doi:10.1109/TCSVT.2003.815168; the bit-depth scaling is common practice).

    Raises
    ------
    ParameterError
        When `qp` is not a finite number in 0..63.
    """
    q = float(qp)
    if not np.isfinite(q) or not 0.0 <= q <= 63.0:
        raise ParameterError(f"qp must be a number in 0..63, got {qp!r}")
    return float(np.sqrt(0.85 * 2.0 ** ((q - 12.0) / 3.0)) * 2.0 ** (int(bit_depth) - 8))


def offset_bits(dx, dy) -> np.ndarray:
    """Bits of offsets coded as ``se(dx)`` then ``se(dy)`` (H.264 clause 9.1.1), zero predictor."""
    return se_length(dx) + se_length(dy)


def _candidate_offsets(window: int) -> np.ndarray:
    """All quarter-pel offsets of the window, cheapest first (zero first), deterministic order."""
    r = 4 * window
    oy, ox = np.mgrid[-r : r + 1, -r : r + 1]
    ox, oy = ox.ravel(), oy.ravel()
    bits = offset_bits(ox, oy)
    order = np.lexsort((ox, oy, np.abs(ox), np.abs(oy), bits))
    return np.stack([ox[order], oy[order]], axis=1)


def _validate(target: Picture, synthetic: Picture, block: int, window: int, metric: str) -> None:
    if not isinstance(target, Picture) or not isinstance(synthetic, Picture):
        raise ParameterError("target and synthetic must be Picture objects")
    if not target.same_format(synthetic):
        raise ParameterError(
            f"target ({target.width}x{target.height} {target.chroma_format} {target.bit_depth}-bit) and synthetic "
            f"({synthetic.width}x{synthetic.height} {synthetic.chroma_format} {synthetic.bit_depth}-bit) pictures differ"
        )
    if block not in _BLOCK_SIZES:
        raise ParameterError(f"block must be one of {', '.join(map(str, _BLOCK_SIZES))}, got {block!r}")
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or not 0 <= window <= _MAX_WINDOW:
        raise ParameterError(f"window must be an integer number of luma samples in 0..{_MAX_WINDOW}, got {window!r}")
    if metric not in METRICS:
        raise ParameterError(f"metric must be one of {', '.join(METRICS)}, got {metric!r}")
    if target.width < block or target.height < block:
        raise ParameterError(f"picture {target.width}x{target.height} is smaller than one block of {block}")


def refine_with_offsets(
    target: Picture,
    synthetic: Picture,
    *,
    block: int = 16,
    window: int = 2,
    metric: str = "satd",
    qp: float = 27,
    lagrangian: float | None = None,
    time: float = 0.0,
) -> OffsetSearch:
    """Find per-block corrective offsets of `target` on `synthetic` and the corrected prediction.

    Parameters
    ----------
    target : Picture
        The true picture the encoder codes.
    synthetic : Picture
        The synthetic reference at the same time, same size and format.
    block : {4, 8, 16, 32, 64}
        Block size in luma samples (8 or 16 are the usual choices).
    window : int, 0..8
        Search range in whole luma samples each way; offsets are quarter-pel.
    metric : {'satd', 'sad'}
        Distortion: Hadamard SATD over 4x4 tiles (:mod:`synth.codec.satd`) or SAD.
    qp : float
        QP from which lambda is derived (:func:`motion_lagrangian`), unless `lagrangian` is given.
    lagrangian : float, optional
        Lambda in distortion units per bit; overrides `qp`.
    time : float
        Display time of the target, stored in the field.

    Returns
    -------
    OffsetSearch
        The offsets (an :class:`OffsetField` in quarter-pel, synthetic picture as reference), the
        corrected prediction (all planes) and :class:`OffsetStatistics`.

    Raises
    ------
    ParameterError
        On mismatched pictures or a parameter out of range.

    Notes
    -----
    Cost ``J = D + lambda (se_len(dx) + se_len(dy))`` per block (ITU-T H.264 clause 9.1.1 for the
    code lengths). Ties keep the cheaper offset: candidates are visited in order of increasing
    bits and a block changes only on a strictly lower cost, so equal inputs give equal outputs.
    """
    _validate(target, synthetic, block, window, metric)
    lam = motion_lagrangian(qp, bit_depth=target.bit_depth) if lagrangian is None else float(lagrangian)
    if not np.isfinite(lam) or lam < 0:
        raise ParameterError(f"lagrangian must be a finite number >= 0, got {lagrangian!r}")

    h, w = target.height, target.width
    rows, cols = h // block, w // block
    ch, cw = rows * block, cols * block
    tgt = target.y[:ch, :cw].astype(np.float32)
    pad = window + 1
    phases = quarter_pel_phases(synthetic.y, pad=pad)

    def distortion(pred: np.ndarray) -> np.ndarray:
        res = tgt - pred
        if metric == "sad":
            return block_sad(res.astype(np.float64), block=block)
        return block_satd(res, block=block).astype(np.float64)

    candidates = _candidate_offsets(window)
    best_cost = np.full((rows, cols), np.inf)
    best_dx = np.zeros((rows, cols), np.int32)
    best_dy = np.zeros((rows, cols), np.int32)
    zero_cost = None
    for ox, oy in candidates:
        pred = shifted_view(phases, int(ox), int(oy), pad=pad, height=ch, width=cw)
        cost = distortion(pred) + lam * float(offset_bits(ox, oy))
        if zero_cost is None:
            zero_cost = cost
        better = cost < best_cost
        if better.any():
            best_cost = np.where(better, cost, best_cost)
            best_dx[better] = ox
            best_dy[better] = oy

    # corrected luma: the chosen displaced samples, block by block
    luma = synthetic.y.astype(np.float32)
    covered = luma[:ch, :cw].reshape(rows, block, cols, block).copy()
    pairs = np.stack([best_dx.ravel(), best_dy.ravel()], axis=1)
    for ox, oy in np.unique(pairs, axis=0):
        if ox == 0 and oy == 0:
            continue
        mask = (best_dx == ox) & (best_dy == oy)
        shifted = shifted_view(phases, int(ox), int(oy), pad=pad, height=ch, width=cw).reshape(rows, block, cols, block)
        covered = np.where(mask[:, None, :, None], shifted, covered)
    luma[:ch, :cw] = covered.reshape(ch, cw)
    planes = [luma]

    # chroma: the same offsets scaled by the subsampling, bilinear
    if target.chroma_format != "mono":
        flow = np.zeros((h, w, 2), np.float32)
        flow[:ch, :cw, 0] = np.repeat(np.repeat(best_dx / 4.0, block, 0), block, 1)
        flow[:ch, :cw, 1] = np.repeat(np.repeat(best_dy / 4.0, block, 0), block, 1)
        fx, fy = target.chroma_factors
        cflow = scale_flow_to_plane(flow, fx, fy)
        for plane in (synthetic.cb, synthetic.cr):
            planes.append(sample_with_flow(plane, np.ascontiguousarray(cflow), interpolation="bilinear"))
    prediction = Picture.from_float(planes, chroma_format=target.chroma_format, bit_depth=target.bit_depth)

    gy, gx = np.mgrid[0:rows, 0:cols]
    offsets = OffsetField.from_blocks(
        width=w,
        height=h,
        time=time,
        x=(gx * block).ravel(),
        y=(gy * block).ravel(),
        w=block,
        h=block,
        dx=best_dx.ravel(),
        dy=best_dy.ravel(),
        gaps_allowed=(ch != h or cw != w),
    )

    bits = offset_bits(best_dx, best_dy)
    n = rows * cols
    t64 = target.y.astype(np.float64)
    stats = OffsetStatistics(
        blocks=n,
        block=int(block),
        window=int(window),
        metric=metric,
        lagrangian=lam,
        zero_share=float(np.mean((best_dx == 0) & (best_dy == 0))),
        bits_total=int(bits.sum()),
        bits_per_block=float(bits.sum() / n),
        bits_per_pixel=float(bits.sum() / (w * h)),
        psnr_before=picture_psnr(synthetic, target),
        psnr_after=picture_psnr(prediction, target),
        sad_before=float(np.abs(t64 - synthetic.y).sum()),
        sad_after=float(np.abs(t64 - prediction.y).sum()),
        cost_before=float(zero_cost.sum()),
        cost_after=float(best_cost.sum()),
    )
    return OffsetSearch(field=offsets, prediction=prediction, stats=stats, block_cost=best_cost)


def json_safe(obj):
    """Deprecated: `synth.io.jsonout.strict_json` (kept while callers move)."""
    from synth.io.jsonout import strict_json

    return strict_json(obj)
