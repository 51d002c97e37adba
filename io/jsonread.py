"""The one guarded way to read a JSON (or other UTF-8 text) document from a file.

Every JSON file synth reads goes through `read_json_document`: the file size is compared with a
ceiling before it is read, the bytes must be UTF-8, integer literals longer than
`synth.io.limits.MAX_INTEGER_DIGITS` digits are refused before conversion, and ``NaN`` /
``Infinity`` (and floats that overflow to infinity, such as ``1e999``) are refused unless the
caller allows non-finite numbers. Every failure is one `FormatError` line naming the file.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

from synth.errors import FormatError
from synth.io.limits import MAX_DOCUMENT_BYTES, MAX_INTEGER_DIGITS

__all__ = ["read_text_document", "read_json_document", "parse_json_text"]


class _Refused(Exception):
    """Raised inside the JSON parser's hooks; turned into a FormatError naming the file."""


def read_text_document(path: str | os.PathLike, *, what: str = "file", max_bytes: int = MAX_DOCUMENT_BYTES) -> str:
    """The UTF-8 text of a file no larger than `max_bytes`.

    Raises
    ------
    FormatError
        Missing file, a folder, an unreadable file, larger than `max_bytes`, or not UTF-8 (the
        message names the byte offset).
    """
    path = Path(path)
    try:
        size = path.stat().st_size
        if not path.is_file():
            raise FormatError(f"{path}: not a {what} (it is not a regular file)")
    except FileNotFoundError:
        raise FormatError(f"{path}: no such {what}") from None
    except OSError as exc:
        raise FormatError(f"{path}: cannot read this {what}: {exc.strerror or exc}") from None
    if size > max_bytes:
        raise FormatError(f"{path}: {size} bytes is more than a {what} may hold ({max_bytes} bytes)")
    try:
        with open(path, "rb") as fh:
            data = fh.read(size + 1)  # one byte more shows a file that grew since stat
    except OSError as exc:
        raise FormatError(f"{path}: cannot read this {what}: {exc.strerror or exc}") from None
    if len(data) > size:
        raise FormatError(f"{path}: the {what} changed while it was read")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise FormatError(f"{path}: not UTF-8 text (byte 0x{data[exc.start]:02x} at offset {exc.start})") from None


def _parse_int(text: str) -> int:
    digits = len(text) - (text[0] == "-")
    if digits > MAX_INTEGER_DIGITS:
        raise _Refused(f"an integer of {digits} digits (at most {MAX_INTEGER_DIGITS} are read)")
    return int(text)


def _finite_float(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise _Refused(f"the number {text[:24]} is beyond the range of a double")
    return value


def _no_constant(name: str):
    raise _Refused(f"{name} is not a JSON number (non-finite numbers are written as null)")


def _old_constant(name: str) -> float:
    return {"NaN": math.nan, "Infinity": math.inf, "-Infinity": -math.inf}[name]


def parse_json_text(text: str, *, source: str, allow_nonfinite: bool = False):
    """Parse JSON text with the guards of `read_json_document`; `source` names it in messages.

    Parameters
    ----------
    text : str
    source : str
        How messages name the document (usually the file name).
    allow_nonfinite : bool
        Accept ``NaN``, ``Infinity``, ``-Infinity`` (files of synth 0.1); floats overflowing to
        infinity are accepted then too. The caller checks the values it reads.

    Raises
    ------
    FormatError
        Invalid JSON (with line and column), an integer literal longer than the ceiling, a
        non-finite number where none is allowed, nesting deeper than the parser's stack.
    """
    try:
        return json.loads(
            text,
            parse_int=_parse_int,
            parse_float=float if allow_nonfinite else _finite_float,
            parse_constant=_old_constant if allow_nonfinite else _no_constant,
        )
    except _Refused as exc:
        raise FormatError(f"{source}: {exc}") from None
    except json.JSONDecodeError as exc:
        raise FormatError(f"{source}: not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})") from None
    except RecursionError:
        raise FormatError(f"{source}: JSON nested too deeply") from None
    except ValueError as exc:  # any other conversion limit of the parser
        raise FormatError(f"{source}: not readable JSON ({str(exc)[:80]})") from None


def read_json_document(
    path: str | os.PathLike,
    *,
    what: str = "JSON file",
    max_bytes: int = MAX_DOCUMENT_BYTES,
    allow_nonfinite: bool = False,
):
    """Read and parse a JSON file with every guard of this module.

    Parameters
    ----------
    path : path-like
    what : str
        What the file is, for messages ("vector-field file", "parameter file", ...).
    max_bytes : int
        Ceiling of the file size (`synth.io.limits`).
    allow_nonfinite : bool
        See `parse_json_text`.

    Returns
    -------
    The parsed document (dict, list, str, number, bool or None).

    Raises
    ------
    FormatError
        One line naming the file: missing, too large, not UTF-8, invalid JSON, a number refused.
    """
    text = read_text_document(path, what=what, max_bytes=max_bytes)
    return parse_json_text(text, source=str(Path(path)), allow_nonfinite=allow_nonfinite)
