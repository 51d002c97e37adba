"""One-reference prediction compared: every inter picture predicted from its reference with its own
coded vectors by block motion compensation, OBMC and the per-pixel LMMSE estimator.

Methods (``PREDICTION_METHODS``):

``block-mc``
    `synth.motion.compensate.motion_compensate`: each pixel takes its block's vector.
``obmc``
    Overlapped block motion compensation with the workbench's window
    (`synth.makers.obmc.raised_cosine_weights` on the grid of `synth.makers.obmc.grid_block_size`):
    every grid block takes the vector of the coded block under its centre (for an intra or uncovered
    one, of the inter block whose centre is nearest, as the workbench's OBMC does), and the
    four overlapping blocks' predictions are blended with the separable raised-cosine window
    (M. T. Orchard and G. J. Sullivan, IEEE Trans. Image Processing 3(5), 693-699, 1994).
``lmmse``
    `synth.synthesis.one_reference.predict_one_reference`.

All three sample the reference with the H.264 interpolation (ITU-T H.264 clause 8.4.2.2), so they
differ only in how the vectors are combined.

Several references (`synth.motion.multi_reference.ReferenceFields`, pictures nearest first): block
MC takes each block's own vector on its own reference (intra and uncovered samples: the co-located
sample of the nearest reference); OBMC gives each grid block the vector and the reference of the
coded block under its centre; ``lmmse`` is
`synth.synthesis.one_reference.predict_multi_reference`. With one reference all three are the
one-reference methods exactly.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence

import numpy as np

from synth.errors import ParameterError
from synth.evaluation.differences import paired_difference
from synth.field import VectorField
from synth.makers.obmc import grid_block_size, raised_cosine_weights
from synth.metrics import picture_psnr, weighted_psnr
from synth.motion.compensate import motion_compensate, vector_maps
from synth.picture import Picture
from synth.synthesis.one_reference import (
    OneReferenceParams,
    predict_multi_reference,
    predict_one_reference,
    sample_with_references,
    sample_with_vector_maps,
)

__all__ = [
    "PREDICTION_METHODS",
    "BASELINE",
    "obmc_one_reference",
    "obmc_multi_reference",
    "block_mc_multi_reference",
    "predict_with",
    "compare_predictions",
]

PREDICTION_METHODS = ("block-mc", "obmc", "lmmse")
#: The method every other one is compared with.
BASELINE = "block-mc"


def obmc_one_reference(reference: Picture, field: VectorField) -> Picture:
    """Overlapped block motion compensation of `field` from `reference` (module docstring).

    Returns
    -------
    Picture
        Same format as `reference`.
    """
    qx, qy, coef, _ = _obmc_maps(field, None)
    return sample_with_vector_maps(reference, qx, qy, coef)


def obmc_multi_reference(references: Sequence[Picture], fields) -> Picture:
    """OBMC of a `ReferenceFields` from its pictures (nearest first): each grid block takes the
    vector and the reference of the coded block under its centre (module docstring)."""
    if len(fields) == 1:
        return obmc_one_reference(references[0], fields.fields[0])
    merged = fields.merged()
    qx, qy, coef, ref = _obmc_maps(merged, fields.block_reference())
    return sample_with_references(references, ref, qx, qy, coef)


def block_mc_multi_reference(references: Sequence[Picture], fields) -> Picture:
    """Block MC of a `ReferenceFields`: each block's own vector on its own reference."""
    if len(fields) == 1:
        return motion_compensate(references[0], fields.fields[0])
    merged = fields.merged()
    dx, dy, _ = vector_maps(merged)
    ref = _reference_map(merged, fields.block_reference())
    one = np.ones((1, *dx.shape), np.float32)
    return sample_with_references(references, ref[None], dx[None], dy[None], one)


def _reference_map(field: VectorField, which: np.ndarray) -> np.ndarray:
    """Reference index of the inter block covering each sample (0 elsewhere)."""
    ref = np.zeros((field.height, field.width), np.int32)
    for x, y, w, h, k in zip(field.x.tolist(), field.y.tolist(), field.w.tolist(), field.h.tolist(), which.tolist()):
        if k > 0:
            ref[max(y, 0) : y + h, max(x, 0) : x + w] = k
    return ref


def _obmc_maps(field: VectorField, which: np.ndarray | None):
    """OBMC's four slots: quarter-sample vectors, window weights and (with `which`, each block's
    reference index) the reference each slot samples."""
    h, w = field.height, field.width
    block = grid_block_size([field])
    nby, nbx = -(-h // block), -(-w // block)
    dx, dy, inter = vector_maps(field)
    cy = np.minimum(np.arange(nby) * block + block // 2, h - 1)
    cx = np.minimum(np.arange(nbx) * block + block // 2, w - 1)
    gdx, gdy = dx[np.ix_(cy, cx)], dy[np.ix_(cy, cx)]
    loose = ~inter[np.ix_(cy, cx)]
    blocks = np.flatnonzero(~np.asarray(field.intra, bool))
    if loose.any() and len(blocks):  # as the workbench's OBMC: the nearest inter block's vector
        from scipy.spatial import cKDTree

        centres = np.stack(
            [field.x[blocks] + (field.w[blocks] - 1) / 2, field.y[blocks] + (field.h[blocks] - 1) / 2], 1
        )
        gy, gx = np.nonzero(loose)
        _, near = cKDTree(centres).query(np.stack([cx[gx], cy[gy]], 1).astype(np.float64), k=1)
        gdx[gy, gx] = field.dx[blocks][near]
        gdy[gy, gx] = field.dy[blocks][near]
    if which is not None:
        gref = _reference_map(field, which)[np.ix_(cy, cx)]
        if loose.any() and len(blocks):
            gref[gy, gx] = which[blocks][near]
    ry0, ry1, wy = raised_cosine_weights(h, block, nby)
    rx0, rx1, wx = raised_cosine_weights(w, block, nbx)
    qx, qy, coef, ref = [], [], [], []
    for by, wyy in ((ry0, 1.0 - wy), (ry1, wy)):
        for bx, wxx in ((rx0, 1.0 - wx), (rx1, wx)):
            qx.append(gdx[by][:, bx])
            qy.append(gdy[by][:, bx])
            coef.append((wyy[:, None] * wxx[None, :]).astype(np.float32))
            if which is not None:
                ref.append(gref[by][:, bx])
    return np.stack(qx), np.stack(qy), np.stack(coef), (np.stack(ref) if which is not None else None)


def predict_with(method: str, reference, field, *, params: OneReferenceParams | None = None) -> Picture:
    """The prediction of `field`'s coded picture from `reference` by one of `PREDICTION_METHODS`.

    `reference` and `field` are a Picture and a VectorField, or a sequence of Pictures (nearest
    first) and a `synth.motion.multi_reference.ReferenceFields`.
    """
    if method not in PREDICTION_METHODS:
        raise ParameterError(f"prediction method must be one of {', '.join(PREDICTION_METHODS)}, got {method!r}")
    if not isinstance(field, VectorField):
        refs = list(reference)
        if method == "block-mc":
            return block_mc_multi_reference(refs, field)
        if method == "obmc":
            return obmc_multi_reference(refs, field)
        return predict_multi_reference(refs, field, params=params)
    if method == "block-mc":
        return motion_compensate(reference, field)
    if method == "obmc":
        return obmc_one_reference(reference, field)
    return predict_one_reference(reference, field, params=params)


def compare_predictions(
    pictures: Sequence[tuple[int, Picture, Picture, VectorField]],
    *,
    params: OneReferenceParams | None = None,
    methods: Sequence[str] = PREDICTION_METHODS,
    keep: str | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """Predict every (number, target, reference, field) with every method and summarise.

    Parameters
    ----------
    pictures : sequence of (int, Picture, Picture, VectorField)
        Display number, the true picture, its reference and its own field against that reference
        (or its references, nearest first, and a `ReferenceFields`: `predict_with`).
    params : OneReferenceParams, optional
        For ``lmmse``.
    methods : sequence of str
        Names from `PREDICTION_METHODS`; the baseline ``block-mc`` is always included.
    keep : str, optional
        A method whose predictions are returned (``predictions``, in the order given).
    progress : callable, optional
        ``progress(done, total, label)``.

    Returns
    -------
    dict
        ``records`` (one per picture and method: ``picture``, ``method``, ``psnr_y``, ``psnr_yuv``
        (the weighted (6 Y + Cb + Cr) / 8), ``psnr_y_inter`` (over the inter blocks' pixels only),
        ``seconds``), ``summary`` (one row per method: ``method``, ``psnr_y``, ``psnr_yuv``,
        ``psnr_y_inter``, ``pictures``, ``seconds_per_picture``, ``difference_y``,
        ``difference_yuv`` and ``difference_y_inter`` to block MC: `paired_difference` dicts, 95 %
        Student-t intervals) and ``predictions`` (list of Picture, or None).
    """
    methods = list(dict.fromkeys([BASELINE, *methods]))
    for m in methods:
        if m not in PREDICTION_METHODS:
            raise ParameterError(f"prediction method must be one of {', '.join(PREDICTION_METHODS)}, got {m!r}")
    if keep is not None and keep not in methods:
        raise ParameterError(f"kept predictions must come from one of {', '.join(methods)}, got {keep!r}")
    records, kept = [], []
    total = len(pictures) * len(methods)
    done = 0
    for number, target, reference, field in pictures:
        for m in methods:
            start = time.perf_counter()
            pred = predict_with(m, reference, field, params=params)
            seconds = time.perf_counter() - start
            psnr = picture_psnr(pred, target)
            records.append(
                {"picture": int(number), "method": m, "psnr_y": psnr["Y"],
                 "psnr_yuv": weighted_psnr(psnr) if len(psnr) == 3 else psnr["Y"],
                 "psnr_y_inter": _masked_psnr(pred.y, target.y, inter_mask(field), target.bit_depth),
                 "seconds": seconds}
            )  # fmt: skip
            if m == keep:
                kept.append(pred)
            done += 1
            if progress is not None:
                progress(done, total, f"picture {number} {m}")
    by = {m: [r for r in records if r["method"] == m] for m in methods}
    summary = []
    for m in methods:
        rows = by[m]
        row = {
            "method": m,
            "psnr_y": _mean([r["psnr_y"] for r in rows]),
            "psnr_yuv": _mean([r["psnr_yuv"] for r in rows]),
            "psnr_y_inter": _mean([r["psnr_y_inter"] for r in rows]),
            "pictures": len(rows),
            "seconds_per_picture": _mean([r["seconds"] for r in rows]),
        }
        if m != BASELINE:
            row["difference_y"] = paired_difference([r["psnr_y"] for r in rows], [r["psnr_y"] for r in by[BASELINE]])
            row["difference_yuv"] = paired_difference(
                [r["psnr_yuv"] for r in rows], [r["psnr_yuv"] for r in by[BASELINE]]
            )
            row["difference_y_inter"] = paired_difference(
                [r["psnr_y_inter"] for r in rows], [r["psnr_y_inter"] for r in by[BASELINE]]
            )
        summary.append(row)
    return {"records": records, "summary": summary, "baseline": BASELINE, "predictions": kept if keep else None}


def inter_mask(field) -> np.ndarray:
    """Pixels covered by the field's inter blocks (bool, height x width); a `ReferenceFields`:
    the inter blocks on any reference."""
    if not isinstance(field, VectorField):
        field = field.merged()
    return vector_maps(field)[2]


def _masked_psnr(a: np.ndarray, b: np.ndarray, mask: np.ndarray, bit_depth: int) -> float | None:
    """PSNR in dB over the pixels of `mask` (None for an empty mask; inf for no error)."""
    if not mask.any():
        return None
    d = a[mask].astype(np.float64) - b[mask].astype(np.float64)
    mse = float(np.mean(d * d))
    peak = float((1 << bit_depth) - 1)
    return float("inf") if mse == 0 else 10.0 * np.log10(peak * peak / mse)


def _mean(values: Sequence[float]) -> float | None:
    """Mean of the finite values (None when there are none)."""
    v = [float(x) for x in values if x is not None and np.isfinite(x)]
    return float(np.mean(v)) if v else None
