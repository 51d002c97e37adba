"""The motion-free baseline: a blend of the two references."""

from __future__ import annotations

from synth.picture import Picture

__all__ = ["predict_average"]


def predict_average(past: Picture, future: Picture, *, t: float, fields=None):
    """Average of the references, weighted by temporal distance.

    Every sample is ``(1 - t) * past + t * future``, the plain mean at t = 0.5 (the usual
    bidirectional average of a B picture with zero vectors, common practice). It uses no motion,
    so it measures how much any motion-compensated scheme gains.

    Returns
    -------
    (Picture, dict)
        The blended picture and an empty map dictionary.
    """
    planes = [(1.0 - t) * p + t * f for p, f in zip(past.to_float(), future.to_float())]
    return Picture.from_float(planes, chroma_format=past.chroma_format, bit_depth=past.bit_depth), {}
