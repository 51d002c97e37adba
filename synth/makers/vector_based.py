"""Predictors built on the core synthesis (`synth.synthesis.synthesiser`): the estimator and its two
simplifications, which share the projection of the coded vectors and differ only in how they
combine the candidates landing near each pixel.
"""

from __future__ import annotations

from typing import Sequence

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = ["predict_lmmse", "predict_projection", "predict_weighted", "core_available"]


def core_available() -> bool:
    """True when the core synthesis (`synth.synthesis.synthesise_with_maps`) is installed."""
    try:
        from synth.synthesis.synthesiser import synthesise_with_maps  # noqa: F401
    except ImportError:
        return False
    return True


def _core(past: Picture, future: Picture, fields: Sequence[VectorField], *, t: float, method: str):
    try:
        from synth.synthesis.synthesiser import synthesise_with_maps
    except ImportError:
        raise ParameterError(
            f"predictor method {method!r} needs the core synthesis (synth.synthesis.synthesiser), which is not installed"
        ) from None
    result = synthesise_with_maps(past, future, list(fields), t=t, method=method)
    return result.picture, dict(result.maps)


def predict_lmmse(past: Picture, future: Picture, *, t: float, fields: Sequence[VectorField]):
    """The core estimator: LMMSE (Wiener) combination of the projected vector candidates.

    The coded vectors are projected along their trajectories to time t; at every pixel the K
    nearby candidates each point at a pair of samples (one per reference), and the weights solve
    R w = r per pixel (see `synth.synthesis.synthesiser`). Maps: the core's 'past_weight', 'confidence',
    'candidates'.
    """
    return _core(past, future, fields, t=t, method="lmmse")


def predict_projection(past: Picture, future: Picture, *, t: float, fields: Sequence[VectorField]):
    """Plain vector projection: each pixel takes the nearest landed vector (method 'nearest' of the
    core synthesis) and averages its two reference samples by temporal distance.
    """
    return _core(past, future, fields, t=t, method="nearest")


def predict_weighted(past: Picture, future: Picture, *, t: float, fields: Sequence[VectorField]):
    """Distance-weighted average of the same K candidates the estimator uses (method
    'distance_weighted' of the core synthesis): the estimator without its correlation model.
    """
    return _core(past, future, fields, t=t, method="distance_weighted")
