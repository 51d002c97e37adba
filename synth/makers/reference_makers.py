"""Makers of the synthetic reference picture, behind one small interface for export and ``rd``.

A maker works in two steps so that work shared by every picture between the same two references
(estimating the coded vectors) is done once:

- ``prepare(past, future, *, past_time, future_time, qp)`` -> an opaque state;
- ``make(state, *, time)`` -> the `Picture` at display time `time` (strictly between the two);
- ``describe(state)`` -> a list of JSON-ready dicts naming the vector field(s) used.

Makers here:

``estimator``
    The product: vectors coded between the references (estimated with
    `synth.motion.estimate_field`, the future reference coded against the past one, at the given
    QP) and the LMMSE synthesiser `synth.synthesise`.
``blend``
    The temporally weighted average ``(1 - t) past + t future``. A stand-in and a control, not the
    product; reports name it.
any predictor of the evaluation workbench (`synth.makers`, e.g. ``dis-medium``)
    Optical-flow interpolation and the other predictors, through :class:`PredictorMaker`; those
    that work from vectors get the same estimated field as ``estimator``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Protocol

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = [
    "ReferenceMaker", "BlendMaker", "EstimatorMaker", "PredictorMaker", "MAKERS", "maker_by_name", "maker_names",
    "fraction_of",
]


class ReferenceMaker(Protocol):
    name: str

    def prepare(self, past: Picture, future: Picture, *, past_time: float, future_time: float, qp: int) -> Any: ...
    def make(self, state: Any, *, time: float) -> Picture: ...
    def describe(self, state: Any) -> list[dict]: ...


def fraction_of(time: float, past_time: float, future_time: float) -> float:
    """``t = (time - past_time) / (future_time - past_time)``; must lie strictly inside (0, 1)."""
    span = float(future_time) - float(past_time)
    if span == 0:
        raise ParameterError(f"past and future references have the same time {past_time}")
    t = (float(time) - float(past_time)) / span
    if not 0.0 < t < 1.0:
        raise ParameterError(f"time {time} must lie strictly between the references' times {past_time} and {future_time}")
    return t


@dataclass
class _Pair:
    past: Picture
    future: Picture
    past_time: float
    future_time: float
    qp: int
    fields: list = None  # type: ignore[assignment]
    origin: str = "none"


def _check_pair(past: Picture, future: Picture) -> None:
    if not isinstance(past, Picture) or not isinstance(future, Picture):
        raise ParameterError("past and future must be Picture objects")
    if not past.same_format(future):
        raise ParameterError("past and future references differ in size, chroma format or bit depth")


class BlendMaker:
    """``(1 - t) past + t future``, rounded half up: a stand-in and a control."""

    name = "blend"

    def prepare(self, past, future, *, past_time, future_time, qp):
        _check_pair(past, future)
        return _Pair(past, future, float(past_time), float(future_time), int(qp), [])

    def make(self, state: _Pair, *, time: float) -> Picture:
        t = fraction_of(time, state.past_time, state.future_time)
        planes = [(1.0 - t) * a.astype("float32") + t * b.astype("float32") for a, b in zip(state.past.planes, state.future.planes)]
        return Picture.from_float(planes, chroma_format=state.past.chroma_format, bit_depth=state.past.bit_depth)

    def describe(self, state: _Pair) -> list[dict]:
        return []


class EstimatorMaker:
    """Coded-vector estimation plus the LMMSE synthesiser (`synth.motion.estimator`, `synth.synthesise`).

    With `fields` given, those fields are used for every pair instead of estimated ones.
    """

    name = "estimator"

    def __init__(self, *, params=None, estimate_options: dict | None = None, fields: list | None = None, two_way: bool = False):
        try:
            from synth.motion.estimator import estimate_field  # noqa: F401
            from synth.synthesis.synthesiser import synthesise  # noqa: F401
        except ImportError:
            raise ParameterError(
                "the 'estimator' synthesiser needs synth.motion.estimator and synth.synthesis.synthesiser, which this build lacks; "
                "use --synthesiser blend"
            ) from None
        self.params = params
        self.estimate_options = dict(estimate_options or {})
        self.fields = None if fields is None else list(fields)
        self.two_way = bool(two_way)

    def prepare(self, past, future, *, past_time, future_time, qp):
        from synth.motion.estimator import estimate_reference_fields

        _check_pair(past, future)
        if self.fields is not None:  # fields given by the caller (e.g. read from a file)
            return _Pair(past, future, float(past_time), float(future_time), int(qp), self.fields, "given")
        fields = estimate_reference_fields(
            past, future, past_time=float(past_time), future_time=float(future_time), qp=int(qp),
            two_way=self.two_way, **self.estimate_options,
        )
        return _Pair(past, future, float(past_time), float(future_time), int(qp), fields, "estimated")

    def make(self, state: _Pair, *, time: float) -> Picture:
        from synth.synthesis.synthesiser import synthesise

        t = fraction_of(time, state.past_time, state.future_time)
        return synthesise(
            state.past, state.future, state.fields, t=t, params=self.params,
            past_time=state.past_time, future_time=state.future_time,
        )

    def describe(self, state: _Pair) -> list[dict]:
        return [
            {
                "coded_time": f.coded_time,
                "reference_time": f.reference_time,
                "blocks": len(f),
                "source": state.origin,
                "qp": state.qp,
            }
            for f in state.fields
        ]


class PredictorMaker:
    """A predictor of the evaluation workbench (`synth.makers`) as a reference maker.

    Predictors that work from vectors get a field estimated as in :class:`EstimatorMaker` (the
    future reference coded against the past one at the given QP).
    """

    def __init__(self, name: str, *, estimate_options: dict | None = None):
        from synth.makers import get_predictor

        self.predictor = get_predictor(name)
        self.name = name
        self.estimate_options = dict(estimate_options or {})

    def prepare(self, past, future, *, past_time, future_time, qp):
        _check_pair(past, future)
        fields, origin = [], "none"
        if self.predictor.needs_fields:
            from synth.motion.estimator import estimate_reference_fields

            fields = estimate_reference_fields(
                past, future, past_time=float(past_time), future_time=float(future_time), qp=int(qp),
                **self.estimate_options,
            )
            origin = "estimated"
        return _Pair(past, future, float(past_time), float(future_time), int(qp), fields, origin)

    def make(self, state: _Pair, *, time: float) -> Picture:
        t = fraction_of(time, state.past_time, state.future_time)
        return self.predictor(state.past, state.future, t=t, fields=state.fields or None).picture

    def describe(self, state: _Pair) -> list[dict]:
        return EstimatorMaker.describe(self, state)  # same record of the fields used


MAKERS = ("estimator", "blend")


def maker_names() -> list[str]:
    """Every name `maker_by_name` accepts: ours, then the workbench's predictors."""
    try:
        from synth.makers import PREDICTORS
    except ImportError:  # pragma: no cover - the workbench ships with synth
        return list(MAKERS)
    return list(MAKERS) + [n for n in PREDICTORS if n not in MAKERS]


def maker_by_name(name: str, **options) -> ReferenceMaker:
    """A maker by its name: 'estimator' (the product), 'blend' (stand-in/control), or the name of a
    workbench predictor (e.g. 'dis-medium' for optical-flow interpolation)."""
    if name == "estimator":
        return EstimatorMaker(**options)
    if name == "blend":
        return BlendMaker()
    if name in maker_names():
        return PredictorMaker(name, **options)
    raise ParameterError(f"synthesiser must be one of {', '.join(maker_names())}, got {name!r}")
