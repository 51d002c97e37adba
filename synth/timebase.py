"""The one check of target times and picture numbers, used at every public boundary.

Rules (DEVELOPERS.md, "Vocabulary"):

- A target time ``t`` is a finite number strictly inside (0, 1): 0 is the past reference, 1 the
  future one, and a picture to synthesise lies between them. `fraction_of` turns a display time
  into ``t`` under the same rule.
- A picture number is an integer display index in ``0 .. count - 1`` of its clip.

Messages name the option the user typed when the caller passes it (``name="--t"``).
"""

from __future__ import annotations

import math
import numbers

from synth.errors import ParameterError

__all__ = ["check_t", "fraction_of", "check_picture_number", "check_reference_order"]


def check_t(t, *, name: str = "t") -> float:
    """`t` as a float, checked to lie strictly between 0 and 1.

    Parameters
    ----------
    t : float
        Target time as a fraction of the way from the past reference (0) to the future one (1).
    name : str
        How the value is named in the error message (the option, e.g. ``--t``).

    Returns
    -------
    float

    Raises
    ------
    ParameterError
        When `t` is not a finite number in the open interval (0, 1).

    Examples
    --------
    >>> check_t(0.25)
    0.25
    """
    if isinstance(t, bool) or not isinstance(t, numbers.Real):
        raise ParameterError(f"{name} must be a number strictly between 0 and 1, got {t!r}")
    value = float(t)
    if not math.isfinite(value) or not 0.0 < value < 1.0:
        raise ParameterError(f"{name} must lie strictly between 0 and 1, got {t!r}")
    return value


def fraction_of(time: float, past_time: float, future_time: float, *, name: str = "time") -> float:
    """``t = (time - past_time) / (future_time - past_time)``, checked as `check_t` does.

    Raises
    ------
    ParameterError
        When the references share a time or `time` does not lie strictly between them.
    """
    span = float(future_time) - float(past_time)
    if span == 0 or not math.isfinite(span):
        raise ParameterError(f"the references' times must differ and be finite, got {past_time} and {future_time}")
    t = (float(time) - float(past_time)) / span
    if not math.isfinite(t) or not 0.0 < t < 1.0:
        raise ParameterError(
            f"{name} {time} must lie strictly between the references' times {past_time} and {future_time}"
        )
    return t


def check_picture_number(value, *, count: int | None = None, name: str = "picture") -> int:
    """`value` as a display index of a clip with `count` pictures.

    Raises
    ------
    ParameterError
        When `value` is not an integer in ``0 .. count - 1`` (any non-negative integer when `count`
        is None).
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ParameterError(f"{name} must be a picture number (an integer), got {value!r}")
    n = int(value)
    if n < 0 or (count is not None and n >= count):
        limit = f"0..{count - 1}" if count is not None else "0 or more"
        raise ParameterError(f"{name} must be a picture number in {limit}, got {n}")
    return n


def check_reference_order(past: int, future: int, *, names: tuple[str, str] = ("--past", "--future")) -> None:
    """The past reference must precede the future one.

    Raises
    ------
    ParameterError
    """
    if not past < future:
        raise ParameterError(f"{names[0]} must be before {names[1]}, got {past} and {future}")
