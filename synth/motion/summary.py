"""Figures that describe a vector field: block sizes, intra share, vector lengths, bits, PSNR.

PSNR of the motion-compensated prediction (:func:`synth.motion.compensate.motion_compensate`) against the
coded picture, next to the PSNR of zero motion (the reference itself), luma, 10 log10(MAX^2 / MSE)
(common practice).
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.metrics import plane_psnr
from synth.motion.compensate import motion_compensate
from synth.motion.rate import field_vector_bits
from synth.picture import Picture

__all__ = ["summarize_field"]


def summarize_field(field: VectorField, *, coded: Picture | None = None, reference: Picture | None = None) -> dict:
    """Describe a field; with both pictures, add prediction PSNRs.

    Parameters
    ----------
    field : VectorField
    coded, reference : Picture, optional
        The pictures the field was estimated between.

    Returns
    -------
    dict
        ``blocks`` (count), ``blocks_by_size`` ({"16x16": count, ...}), ``intra_share`` (fraction
        of the covered area coded intra), ``mean_vector_length`` (luma samples, area-weighted over
        inter blocks), ``vector_bits`` (se(v) bits of the vector differences against the median
        predictor, H.264 clause 9.1.1), and with pictures ``mc_psnr_y`` and ``zero_motion_psnr_y``
        (dB).
    """
    area = field.w.astype(np.int64) * field.h.astype(np.int64)
    sizes: dict[str, int] = {}
    for w, h in sorted(set(zip(field.w.tolist(), field.h.tolist())), reverse=True):
        sizes[f"{w}x{h}"] = int(np.sum((field.w == w) & (field.h == h)))
    covered = int(area.sum())
    inter = ~field.intra
    length = np.hypot(field.dx.astype(np.float64), field.dy.astype(np.float64)) / 4.0
    out = {
        "blocks": int(len(field)),
        "blocks_by_size": sizes,
        "intra_share": float(area[field.intra].sum() / covered) if covered else 0.0,
        "mean_vector_length": float((length * area)[inter].sum() / area[inter].sum()) if inter.any() else 0.0,
        "vector_bits": int(field_vector_bits(field).sum()),
    }
    if coded is not None and reference is not None:
        if not coded.same_format(reference):
            raise ParameterError("coded and reference pictures differ in size, chroma format or bit depth")
        pred = motion_compensate(reference, field)
        out["mc_psnr_y"] = plane_psnr(pred.y, coded.y, bit_depth=coded.bit_depth)
        out["zero_motion_psnr_y"] = plane_psnr(reference.y, coded.y, bit_depth=coded.bit_depth)
    return out
