"""Predictors: every way of producing the picture at time t from its two references, behind one
interface (`Predictor`, returning a `Prediction`), and the registry `PREDICTORS`.

========== ============= ===================================================================
name       needs fields  scheme
========== ============= ===================================================================
lmmse      yes           the core estimator (LMMSE combination of projected vector candidates)
projection yes           nearest landed vector per pixel
weighted   yes           distance-weighted average of the estimator's K candidates
obmc       yes           overlapped block motion compensation, raised-cosine window
average    no            (1 - t) past + t future
dis-fast   no            optical-flow interpolation, OpenCV DIS 'fast'
dis-medium no            optical-flow interpolation, OpenCV DIS 'medium'
farneback  no            optical-flow interpolation, OpenCV Farneback
========== ============= ===================================================================
"""

from __future__ import annotations

from synth.errors import ParameterError
from synth.makers.average import predict_average
from synth.makers.base import Prediction, Predictor, check_inputs
from synth.makers.obmc import predict_obmc
from synth.makers.optical_flow import predict_dis_fast, predict_dis_medium, predict_farneback
from synth.makers.vector_based import core_available, predict_lmmse, predict_projection, predict_weighted

__all__ = [
    "Prediction",
    "Predictor",
    "PREDICTORS",
    "get_predictor",
    "resolve_predictors",
    "check_inputs",
    "core_available",
    "motion_available",
]

#: The registry, in report order: vector-based first, then the ones that need no vectors.
PREDICTORS: dict[str, Predictor] = {
    p.name: p
    for p in (
        Predictor("lmmse", predict_lmmse, True, "LMMSE estimator over projected vector candidates"),
        Predictor("projection", predict_projection, True, "nearest projected vector per pixel"),
        Predictor("weighted", predict_weighted, True, "distance-weighted average of the K candidates"),
        Predictor("obmc", predict_obmc, True, "overlapped block MC of projected vectors (raised cosine)"),
        Predictor("average", predict_average, False, "temporal-distance average of the references"),
        Predictor("dis-fast", predict_dis_fast, False, "optical-flow interpolation, DIS fast preset"),
        Predictor("dis-medium", predict_dis_medium, False, "optical-flow interpolation, DIS medium preset"),
        Predictor("farneback", predict_farneback, False, "optical-flow interpolation, Farneback flow"),
    )
}

#: Predictors that rely on the core synthesis module.
CORE_PREDICTORS = ("lmmse", "projection", "weighted")


def get_predictor(name: str) -> Predictor:
    """The registered predictor called `name`.

    Raises
    ------
    ParameterError
        For an unknown name (the message lists the known ones).
    """
    try:
        return PREDICTORS[name]
    except KeyError:
        raise ParameterError(f"unknown predictor {name!r}; known: {', '.join(PREDICTORS)}") from None


def motion_available() -> bool:
    """True when vector estimation (`synth.motion.estimate_field`) is installed."""
    try:
        from synth.motion.estimator import estimate_field  # noqa: F401
    except ImportError:
        return False
    return True


def resolve_predictors(names=None, *, vectors: bool | None = None) -> list[Predictor]:
    """Predictors for a run: the given names (a list or a comma-separated string), or every
    registered predictor available in this installation when `names` is None.

    Parameters
    ----------
    names : list of str, comma-separated str, or None
    vectors : bool, optional
        Whether vector fields will be available (default: whether `synth.motion.estimator` is installed);
        only used when `names` is None.

    Raises
    ------
    ParameterError
        For an unknown or repeated name, or an empty list.
    """
    if names is None:
        if vectors is None:
            vectors = motion_available()
        return [
            p
            for n, p in PREDICTORS.items()
            if (not p.needs_fields or vectors) and (n not in CORE_PREDICTORS or core_available())
        ]
    if isinstance(names, str):
        names = [n.strip() for n in names.split(",") if n.strip()]
    names = list(names)
    if not names:
        raise ParameterError("predictors must name at least one predictor")
    if len(set(names)) != len(names):
        raise ParameterError(f"predictors must not repeat a name, got {','.join(names)}")
    return [get_predictor(n) for n in names]
