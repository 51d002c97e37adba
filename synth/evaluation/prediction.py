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
from synth.synthesis.one_reference import OneReferenceParams, predict_one_reference, sample_with_vector_maps

__all__ = ["PREDICTION_METHODS", "BASELINE", "obmc_one_reference", "predict_with", "compare_predictions"]

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
    h, w = reference.height, reference.width
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
    ry0, ry1, wy = raised_cosine_weights(h, block, nby)
    rx0, rx1, wx = raised_cosine_weights(w, block, nbx)
    qx, qy, coef = [], [], []
    for by, wyy in ((ry0, 1.0 - wy), (ry1, wy)):
        for bx, wxx in ((rx0, 1.0 - wx), (rx1, wx)):
            qx.append(gdx[by][:, bx])
            qy.append(gdy[by][:, bx])
            coef.append((wyy[:, None] * wxx[None, :]).astype(np.float32))
    return sample_with_vector_maps(reference, np.stack(qx), np.stack(qy), np.stack(coef))


def predict_with(
    method: str, reference: Picture, field: VectorField, *, params: OneReferenceParams | None = None
) -> Picture:
    """The prediction of `field`'s coded picture from `reference` by one of `PREDICTION_METHODS`."""
    if method == "block-mc":
        return motion_compensate(reference, field)
    if method == "obmc":
        return obmc_one_reference(reference, field)
    if method == "lmmse":
        return predict_one_reference(reference, field, params=params)
    raise ParameterError(f"prediction method must be one of {', '.join(PREDICTION_METHODS)}, got {method!r}")


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
        Display number, the true picture, its reference and its own field against that reference.
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


def inter_mask(field: VectorField) -> np.ndarray:
    """Pixels covered by the field's inter blocks (bool, height x width)."""
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
