"""The one way to make the picture at time t: the `Maker` protocol.

Every maker works in two steps, so that work shared by all pictures between the same two
references (flows, pyramids, the projection set-up) is done once::

    pair = maker.prepare(past, future, fields=fields, params=params)   # once per reference pair
    prediction = pair.at(0.5)                                          # any t in (0, 1)

``fields`` are the `synth.VectorField`s coded between the two references (see
`synth.motion.sources` for where they come from); makers that do not use vectors ignore them,
those that do raise `ParameterError` without them. Times inside the fields are display times;
`PreparedPair.at_time` maps a display time onto ``t``.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture
from synth.timebase import check_t, fraction_of

__all__ = ["Prediction", "Maker", "PreparedPair", "check_pair", "temporal_blend"]


@dataclass
class Prediction:
    """What a maker returns for one target time.

    Parameters
    ----------
    picture : Picture
        The picture at time t, in the references' format.
    seconds : float
        Wall-clock time spent on this picture (its share of the preparation excluded).
    maps : dict of str to ndarray
        Optional per-pixel luma-grid maps for reports (e.g. ``'past_weight'``, ``'confidence'``),
        float32 of the picture's luma shape.
    """

    picture: Picture
    seconds: float = 0.0
    maps: dict[str, np.ndarray] = field(default_factory=dict)


def check_pair(past: Picture, future: Picture) -> None:
    """Two references of the same format.

    Raises
    ------
    ParameterError
    """
    for name, pic in (("past", past), ("future", future)):
        if not isinstance(pic, Picture):
            raise ParameterError(f"{name} must be a Picture, got {type(pic).__name__}")
    if not past.same_format(future):
        raise ParameterError(
            f"past and future references must share size, chroma format and bit depth; got "
            f"{past.width}x{past.height} {past.chroma_format} {past.bit_depth}-bit and "
            f"{future.width}x{future.height} {future.chroma_format} {future.bit_depth}-bit"
        )


def temporal_blend(past_planes, future_planes, t: float) -> list[np.ndarray]:
    """``(1 - t) past + t future`` per plane, float32: the one blend of two co-sited sample sets.

    The weighting of a bidirectional average by temporal distance (common practice); at t = 0.5 it
    is the plain mean of a B picture with zero vectors.
    """
    a = np.float32(1.0 - t)
    b = np.float32(t)
    return [
        a * np.asarray(p, dtype=np.float32) + b * np.asarray(f, dtype=np.float32)
        for p, f in zip(past_planes, future_planes)
    ]


#: ``prepare(past, future, *, fields, params) -> state`` of a maker.
PrepareFunction = Callable[..., Any]
#: ``picture(state, *, t) -> (Picture, maps)`` of a maker.
PictureFunction = Callable[..., tuple]


@dataclass
class _PairState:
    past: Picture
    future: Picture
    fields: list
    params: Any


def _keep_inputs(past, future, *, fields, params):
    return _PairState(past, future, list(fields or []), params)


@dataclass(frozen=True)
class Maker:
    """A named way to make the picture at time t from two references.

    Parameters
    ----------
    name : str
        Registry name, the same on every command (``--maker`` / ``--makers``).
    picture_function : callable
        ``picture_function(state, *, t) -> (Picture, maps)``.
    needs_vectors : bool
        True when the maker works from coded vector fields.
    summary : str
        One line for tables and ``--help``.
    prepare_function : callable, optional
        ``prepare_function(past, future, *, fields, params) -> state``; default: keeps its inputs.
    """

    name: str
    picture_function: PictureFunction
    needs_vectors: bool
    summary: str
    prepare_function: PrepareFunction = _keep_inputs

    def prepare(
        self,
        past: Picture,
        future: Picture,
        *,
        fields: Sequence[VectorField] | None = None,
        params=None,
        past_time: float = 0.0,
        future_time: float = 1.0,
    ) -> PreparedPair:
        """Do the work shared by every picture between `past` and `future`.

        Raises
        ------
        ParameterError
            When the references differ in format, or vectors are needed and none are given.
        """
        check_pair(past, future)
        if self.needs_vectors and not fields:
            raise ParameterError(f"maker {self.name!r} needs vector fields between the references, got none")
        start = time.perf_counter()
        state = self.prepare_function(past, future, fields=list(fields or []), params=params)
        return PreparedPair(
            self,
            past,
            future,
            list(fields or []),
            float(past_time),
            float(future_time),
            state,
            time.perf_counter() - start,
        )

    def __call__(
        self, past: Picture, future: Picture, *, t: float, fields: Sequence[VectorField] | None = None, params=None
    ) -> Prediction:
        """One picture at once: ``prepare(...).at(t)``, the preparation time included."""
        pair = self.prepare(past, future, fields=fields, params=params)
        prediction = pair.at(t)
        prediction.seconds += pair.prepare_seconds
        return prediction

    @property
    def description(self) -> str:
        """The docstring of the maker's picture function: the scheme it implements."""
        return self.picture_function.__doc__ or self.summary


@dataclass
class PreparedPair:
    """A maker prepared for one reference pair; `at` makes the picture at any t."""

    maker: Maker
    past: Picture
    future: Picture
    fields: list
    past_time: float
    future_time: float
    state: Any
    prepare_seconds: float = 0.0

    def at(self, t: float) -> Prediction:
        """The picture at fraction `t` in (0, 1) from the past reference to the future one."""
        t = check_t(t)
        start = time.perf_counter()
        picture, maps = self.maker.picture_function(self.state, t=t)
        return Prediction(picture=picture, seconds=time.perf_counter() - start, maps=dict(maps or {}))

    def at_time(self, display_time: float) -> Prediction:
        """The picture at a display time strictly between the references' times."""
        return self.at(fraction_of(display_time, self.past_time, self.future_time))
