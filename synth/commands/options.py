"""Parsing of the option values shared by several commands (DEVELOPERS.md, "Vocabulary").

Lists are comma-separated everywhere (``--gaps 2,4,8``); picture ranges are ``FIRST:LAST``
(display numbers, both included, either may be omitted). Errors name the option as typed.
"""

from __future__ import annotations

from synth.errors import ParameterError

__all__ = ["parse_int_list", "parse_name_list", "parse_picture_range", "PictureRange"]


def parse_int_list(text, *, option: str, allow_empty: bool = False) -> list[int]:
    """``"2,4,8"`` -> ``[2, 4, 8]`` (an int or a list of ints passes through).

    Raises
    ------
    ParameterError
        For a value that is not a comma-separated list of integers.
    """
    if text is None:
        return []
    if isinstance(text, int) and not isinstance(text, bool):
        return [int(text)]
    if isinstance(text, (list, tuple)):
        items = [str(v) for v in text]
    else:
        items = [v.strip() for v in str(text).split(",") if v.strip()]
    try:
        values = [int(v) for v in items]
    except ValueError:
        raise ParameterError(f"{option} must be comma-separated integers, got {text!r}") from None
    if not values and not allow_empty:
        raise ParameterError(f"{option} must name at least one value, got {text!r}")
    return values


def parse_name_list(text, *, option: str) -> list[str] | None:
    """``"lmmse,dis-medium"`` -> ``["lmmse", "dis-medium"]``; None stays None (the default set)."""
    if text is None:
        return None
    names = [v.strip() for v in str(text).split(",") if v.strip()]
    if not names:
        raise ParameterError(f"{option} must name at least one value, got {text!r}")
    return names


class PictureRange(tuple):
    """``(first, last)`` display numbers, both included; ``last`` None means the clip's end."""

    @property
    def first(self) -> int:
        return self[0]

    @property
    def last(self) -> int | None:
        return self[1]

    def count(self, n_pictures: int) -> int:
        """How many pictures of a clip of `n_pictures` the range keeps."""
        last = n_pictures - 1 if self.last is None else min(self.last, n_pictures - 1)
        return max(0, last - self.first + 1)


def parse_picture_range(text: str | None, *, option: str = "--pictures") -> PictureRange | None:
    """``"0:32"`` -> ``(0, 32)``; ``":16"`` -> ``(0, 16)``; ``"8:"`` -> ``(8, None)``; None -> None.

    Raises
    ------
    ParameterError
        When the text is not ``FIRST:LAST`` with non-negative integers and FIRST <= LAST.
    """
    if text is None:
        return None
    parts = str(text).split(":")
    if len(parts) != 2:
        raise ParameterError(f"{option} must be FIRST:LAST (picture numbers, both included), got {text!r}")
    try:
        first = int(parts[0]) if parts[0].strip() else 0
        last = int(parts[1]) if parts[1].strip() else None
    except ValueError:
        raise ParameterError(f"{option} must be FIRST:LAST (picture numbers, both included), got {text!r}") from None
    if first < 0 or (last is not None and last < first):
        raise ParameterError(f"{option} must have 0 <= FIRST <= LAST, got {text!r}")
    return PictureRange((first, last))
