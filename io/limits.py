"""Documented ceilings of every file synth reads (the table in ``io/FORMATS.md``, "Ceilings").

Readers compare the sizes, counts and lengths a file declares with each other and with these
ceilings *before* they allocate anything in proportion to them, so a damaged or hostile file of a
few hundred bytes cannot make synth allocate gigabytes or run for minutes before it is refused.

The values are far above any real material (the largest picture sides in use are 8192 samples;
a JSON number with more than 40 digits is never a block position or a parameter) and low enough
that the work a reader does before refusing stays small.
"""

from __future__ import annotations

__all__ = [
    "MAX_PICTURE_SIDE",
    "MIN_BLOCK_SIDE",
    "MAX_BLOCKS",
    "max_blocks_for",
    "MAX_TABLE_FILE_BYTES",
    "MAX_DOCUMENT_BYTES",
    "MAX_INTEGER_DIGITS",
    "MAX_ABS_TIME",
    "MAX_FIELDS_PER_FILE",
    "MAX_TEXT_LENGTH",
    "MAX_ECHO",
    "short_repr",
]

#: Largest picture width or height, in luma samples, any reader accepts (clips, fields, offsets).
MAX_PICTURE_SIDE = 16384
#: Smallest block side of a vector field or an offsets table.
MIN_BLOCK_SIDE = 4
#: Most blocks one field can hold: non-overlapping blocks of at least 4x4 inside the largest picture.
MAX_BLOCKS = (MAX_PICTURE_SIDE // MIN_BLOCK_SIDE) ** 2
#: Largest vector-field, offsets or sidecar file read (bytes): a full field of 4x4 blocks of the
#: largest picture in JSON is about this size.
MAX_TABLE_FILE_BYTES = 1 << 30
#: Largest parameter file, study manifest or other small document read (bytes).
MAX_DOCUMENT_BYTES = 16 << 20
#: Longest integer literal (digits, sign excluded) a JSON reader converts; longer ones are refused
#: before conversion (Python's own limit, 4300 digits, would raise deep inside the parser).
MAX_INTEGER_DIGITS = 40
#: Largest magnitude of a time (picture number or display time) in a field or offsets file.
MAX_ABS_TIME = 2.0**31
#: Most fields one vector-field file may hold.
MAX_FIELDS_PER_FILE = 65536
#: Longest text value (a path, a name) a reader takes from a file.
MAX_TEXT_LENGTH = 4096


def max_blocks_for(width: int, height: int) -> int:
    """Most non-overlapping blocks of at least ``MIN_BLOCK_SIDE`` squared that fit a picture.

    A block list longer than this cannot be valid for the picture, so it is refused before any
    array of its length is built.
    """
    return (int(width) // MIN_BLOCK_SIDE) * (int(height) // MIN_BLOCK_SIDE)


#: Most characters of a refused value a message repeats (messages stay one short line).
MAX_ECHO = 40


def short_repr(value, most: int = MAX_ECHO) -> str:
    """`value` for a one-line message: its repr on one line, cut to `most` characters."""
    text = " ".join(repr(value).split())
    return text if len(text) <= most else text[: most - 3] + "..."
