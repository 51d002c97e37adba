"""The predictor interface: one callable per way of producing the picture at time t.

A predictor takes the two references and the target time and returns a `Prediction`::

    prediction = predictor(past, future, t=0.5, fields=fields)

``fields`` is the sequence of `synth.VectorField` coded between the two references (both
directions); predictors that do not use vectors ignore it, those that do raise `ParameterError`
when it is missing. Times inside the fields are display times; the predictor maps them onto
``t`` in [0, 1] with the past reference at 0 and the future reference at 1.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = ["Prediction", "Predictor", "check_inputs"]


@dataclass
class Prediction:
    """What a predictor returns.

    Parameters
    ----------
    picture : Picture
        The predicted picture at time t, in the references' format.
    seconds : float
        Wall-clock time spent producing it (excluding vector estimation, which is shared).
    maps : dict of str to ndarray
        Optional per-pixel luma-grid maps for reports (e.g. ``'past_weight'``, ``'confidence'``,
        ``'occlusion'``), float32 of the picture's luma shape.
    """

    picture: Picture
    seconds: float = 0.0
    maps: dict[str, np.ndarray] = field(default_factory=dict)


PredictFunction = Callable[..., Prediction]


@dataclass(frozen=True)
class Predictor:
    """A named predictor.

    Parameters
    ----------
    name : str
        Registry name (``synth compare --predictors``).
    function : callable
        ``function(past, future, *, t, fields) -> (Picture, maps)``; timing is added by `__call__`.
    needs_fields : bool
        True when the predictor works from coded vector fields.
    summary : str
        One line for tables and ``--help``.
    """

    name: str
    function: PredictFunction
    needs_fields: bool
    summary: str

    def __call__(
        self, past: Picture, future: Picture, *, t: float, fields: Sequence[VectorField] | None = None
    ) -> Prediction:
        check_inputs(past, future, t=t)
        if self.needs_fields and not fields:
            raise ParameterError(f"predictor {self.name!r} needs vector fields between the references, got none")
        start = time.perf_counter()
        picture, maps = self.function(past, future, t=float(t), fields=fields)
        seconds = time.perf_counter() - start
        return Prediction(picture=picture, seconds=seconds, maps=dict(maps or {}))

    @property
    def description(self) -> str:
        """The docstring of the predictor's function: the scheme it implements."""
        return self.function.__doc__ or self.summary


def check_inputs(past: Picture, future: Picture, *, t: float) -> None:
    """Validate a reference pair and a target time.

    Raises
    ------
    ParameterError
        When the references differ in format or `t` is not a finite number in [0, 1].
    """
    if not past.same_format(future):
        raise ParameterError(
            f"past and future references must share size, chroma format and bit depth; got "
            f"{past.width}x{past.height} {past.chroma_format} {past.bit_depth}-bit and "
            f"{future.width}x{future.height} {future.chroma_format} {future.bit_depth}-bit"
        )
    try:
        tf = float(t)
    except (TypeError, ValueError):
        raise ParameterError(f"t must be a number in [0, 1], got {t!r}") from None
    if not (0.0 <= tf <= 1.0):
        raise ParameterError(f"t must be in [0, 1], got {t!r}")
