"""Makers built on the core synthesis (`synth.synthesis.synthesiser`): the estimator and its two
simplifications, which share the projection of the coded vectors and differ only in how they
combine the candidates landing near each pixel.
"""

from __future__ import annotations

from synth.synthesis.synthesiser import synthesise_with_maps

__all__ = ["lmmse_picture", "projection_picture", "weighted_picture"]


def _core(state, *, t: float, method: str):
    result = synthesise_with_maps(state.past, state.future, state.fields, t=t, params=state.params, method=method)
    return result.picture, dict(result.maps)


def lmmse_picture(state, *, t: float):
    """The core estimator: LMMSE (Wiener) combination of the projected vector candidates.

    The coded vectors are projected along their trajectories to time t; at every pixel the K
    nearby candidates each point at a pair of samples (one per reference), and the weights solve
    R w = r per pixel (see `synth.synthesis.synthesiser`). Maps: the core's 'past_weight',
    'confidence', 'candidates'.
    """
    return _core(state, t=t, method="lmmse")


def projection_picture(state, *, t: float):
    """Plain vector projection: each pixel takes the nearest landed vector (method 'nearest' of the
    core synthesis) and averages its two reference samples by temporal distance.
    """
    return _core(state, t=t, method="nearest")


def weighted_picture(state, *, t: float):
    """Distance-weighted average of the same K candidates the estimator uses (method
    'distance_weighted' of the core synthesis): the estimator without its correlation model.
    """
    return _core(state, t=t, method="distance_weighted")
