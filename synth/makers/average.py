"""The motion-free control: a blend of the two references."""

from __future__ import annotations

from synth.makers.base import temporal_blend
from synth.picture import Picture

__all__ = ["average_picture"]


def average_picture(state, *, t: float):
    """Average of the references, weighted by temporal distance.

    Every sample is ``(1 - t) * past + t * future`` (`synth.makers.base.temporal_blend`), the plain
    mean at t = 0.5 (the usual bidirectional average of a B picture with zero vectors, common
    practice). It uses no motion, so it measures how much any motion-compensated scheme gains.

    Returns
    -------
    (Picture, dict)
        The blended picture and an empty map dictionary.
    """
    past, future = state.past, state.future
    planes = temporal_blend(past.planes, future.planes, t)
    return Picture.from_float(planes, chroma_format=past.chroma_format, bit_depth=past.bit_depth), {}
