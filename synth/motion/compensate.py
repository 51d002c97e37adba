"""Motion-compensated prediction of a picture from a reference and a `VectorField`.

Luma samples come from the H.264 quarter-sample interpolation (ITU-T H.264 clause 8.4.2.2.1),
chroma samples from its bilinear chroma interpolation (clause 8.4.2.2.2) with the luma vector
scaled by the chroma subsampling (4:2:0: 1/8 chroma sample units, as clause 8.4.1.4); 4:4:4
chroma uses the luma filter, as H.264 does for ChromaArrayType 3. Sample positions outside the
reference take the nearest edge sample.

Intra blocks and samples no block covers have no vector: they take the co-located reference
sample (zero motion), so a prediction PSNR counts them as zero-motion prediction.
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.motion.rate import block_label_map
from synth.motion.subpel import chroma_bilinear, luma_phases
from synth.picture import Picture

__all__ = ["motion_compensate", "vector_maps"]


def vector_maps(field: VectorField) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-sample vectors of a field on its luma grid.

    Returns
    -------
    dx, dy : ndarray of int32, shape (height, width)
        Quarter-sample vector of the block covering each sample (0 for intra or uncovered samples).
    inter : ndarray of bool, shape (height, width)
        Samples covered by a block with a vector.
    """
    label = block_label_map(field)
    index = np.maximum(label, 0)
    inter = (label >= 0) & ~np.asarray(field.intra, bool)[index]
    dx = np.where(inter, np.asarray(field.dx)[index], 0).astype(np.int32)
    dy = np.where(inter, np.asarray(field.dy)[index], 0).astype(np.int32)
    return dx, dy, inter


def _luma(plane: np.ndarray, dx: np.ndarray, dy: np.ndarray, bit_depth: int) -> np.ndarray:
    h, w = plane.shape
    # every fetched position lies within the picture grown by the largest displacement
    reach = int(max(np.abs(dx).max(initial=0), np.abs(dy).max(initial=0))) // 4 + 2
    pad = min(reach, max(h, w) + 2)
    phases = luma_phases(plane, pad=pad, bit_depth=bit_depth)
    hp, wp = phases.shape[2], phases.shape[3]
    ix = np.arange(w)[None, :] + (dx >> 2).astype(np.int64) + pad
    iy = np.arange(h)[:, None] + (dy >> 2).astype(np.int64) + pad
    ix = np.clip(ix, 0, wp - 1)
    iy = np.clip(iy, 0, hp - 1)
    phase = ((dy & 3) * 4 + (dx & 3)).astype(np.int64)
    flat = phases.reshape(-1)
    return flat.take(phase * (hp * wp) + iy * wp + ix)


def motion_compensate(reference: Picture, field: VectorField) -> Picture:
    """Predict the coded picture of `field` from `reference` by block motion compensation.

    Parameters
    ----------
    reference : Picture
        The picture the field's vectors point to.
    field : VectorField
        Blocks on the coded picture with quarter-sample vectors (sign convention in
        :mod:`synth.field`).

    Returns
    -------
    Picture
        Same format as `reference`. Intra and uncovered samples take the co-located reference
        sample.

    Raises
    ------
    ParameterError
        When the field's picture size differs from the reference's.

    Notes
    -----
    ITU-T H.264 clause 8.4.2.2 (fractional sample interpolation): 6-tap luma half samples and
    averaged quarter samples; bilinear chroma at 1/(4 * subsampling) chroma sample.
    """
    if (field.width, field.height) != (reference.width, reference.height):
        raise ParameterError(
            f"field is for {field.width}x{field.height} pictures, reference is {reference.width}x{reference.height}"
        )
    dx, dy, _ = vector_maps(field)
    bd = reference.bit_depth
    planes = [_luma(reference.y, dx, dy, bd)]
    if reference.chroma_format != "mono":
        fx, fy = reference.chroma_factors
        ch, cw = reference.cb.shape
        cdx = dx[::fy, ::fx][:ch, :cw]
        cdy = dy[::fy, ::fx][:ch, :cw]
        for plane in (reference.cb, reference.cr):
            if fx == 1 and fy == 1:
                planes.append(_luma(plane, cdx, cdy, bd))
            else:
                planes.append(chroma_bilinear(plane, cdx, cdy, den_x=4 * fx, den_y=4 * fy, bit_depth=bd))
    dtype = reference.y.dtype
    planes = [p.astype(dtype) for p in planes]
    if reference.chroma_format == "mono":
        return Picture(planes[0], None, None, "mono", bd)
    return Picture(planes[0], planes[1], planes[2], reference.chroma_format, bd)
