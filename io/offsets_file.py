"""Files of corrective block offsets (format ``synth-offsets``, schema version 1).

The layout is the offsets document of :mod:`synth.offset_field` (the model); this module only
writes it as strict JSON and reads it back, checking every rule. The block table is the one of the
vector-field files (:mod:`synth.io.fields`): ``columns`` and one row per block, quarter-sample
offsets. Offsets point into the synthetic picture made for the target's own time, so the file has
ONE ``time`` (a finite number); the vector-field rule "coded and reference times differ" does not
apply and is not faked. The block rules are checked here directly: integer values, sizes powers
of two from 4 to 128, blocks inside the picture, no overlap, coverage unless ``gaps_allowed``,
offsets no further than the picture.

Version key ``schema_version``; files with the older ``version`` / ``format_version`` keys are read.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from synth.errors import FormatError
from synth.io.atomic import atomic_write_text
from synth.io.jsonread import read_json_document
from synth.io.limits import MAX_ABS_TIME, MAX_TABLE_FILE_BYTES
from synth.io.limits import short_repr as _short
from synth.offset_field import (
    OFFSET_COLUMNS,
    OFFSETS_FORMAT,
    OFFSETS_SCHEMA_VERSION,
    OffsetField,
    OffsetStatistics,
    offsets_document,
)

__all__ = ["OFFSETS_FORMAT", "write_offsets", "read_offsets"]

_VERSION_KEYS = ("schema_version", "version", "format_version")
_MIN_BLOCK, _MAX_BLOCK = 4, 128


def write_offsets(
    path: str | os.PathLike,
    field: OffsetField,
    *,
    statistics: OffsetStatistics | dict | None = None,
    settings: dict | None = None,
    extra: dict | None = None,
) -> dict:
    """Write offsets as a ``synth-offsets`` JSON file, atomically.

    Parameters
    ----------
    path : path-like
    field : OffsetField
    statistics, settings, extra
        As in `synth.offset_field.offsets_document`.

    Returns
    -------
    dict
        The document written.
    """
    from synth.io.jsonout import dumps_strict

    doc = offsets_document(field, statistics=statistics, settings=settings, extra=extra)
    atomic_write_text(path, dumps_strict(doc, indent=1) + "\n")
    return doc


def _integers(label: str, name: str, values) -> np.ndarray:
    out = []
    for i, v in enumerate(values):
        if isinstance(v, bool) or not isinstance(v, int):
            raise FormatError(f"{label}, block {i}: {name} must be an integer, got {_short(v)}")
        if not -(2**31) <= v < 2**31:
            raise FormatError(f"{label}, block {i}: {name} = {v} does not fit a 32-bit integer")
        out.append(v)
    return np.array(out, dtype=np.int64)


def _check_blocks(label: str, width: int, height: int, x, y, w, h, dx, dy, intra, gaps_allowed: bool) -> None:
    """The geometric rules of a block table (module docstring); raise `FormatError` naming the block."""

    def where(i: int) -> str:
        return f"{label}, block {i} (x={x[i]}, y={y[i]}, {w[i]}x{h[i]})"

    for name, s in (("width", w), ("height", h)):
        bad = (s < _MIN_BLOCK) | (s > _MAX_BLOCK) | ((s & (s - 1)) != 0)
        if bad.any():
            i = int(np.argmax(bad))
            raise FormatError(
                f"{where(i)}: block {name} must be a power of two from {_MIN_BLOCK} to {_MAX_BLOCK}, got {s[i]}"
            )
    outside = (x < 0) | (y < 0) | (x + w > width) | (y + h > height)
    if outside.any():
        i = int(np.argmax(outside))
        raise FormatError(f"{where(i)}: block lies outside the {width}x{height} picture")
    far = ~intra & (
        (4 * x + dx < -4 * w) | (4 * x + dx > 4 * width) | (4 * y + dy < -4 * h) | (4 * y + dy > 4 * height)
    )
    if far.any():
        i = int(np.argmax(far))
        raise FormatError(
            f"{where(i)}: offset (dx={dx[i]}, dy={dy[i]}) quarter samples points further than the picture"
        )
    from synth.field_checks import coverage_map, first_uncovered

    owner, cell, clash = coverage_map(x, y, w, h, width, height)
    if clash is not None:
        i, j = clash
        raise FormatError(f"{where(i)}: block overlaps block {j} (x={x[j]}, y={y[j]}) listed before it")
    hole = None if gaps_allowed else first_uncovered(owner, cell)
    if hole is not None:
        c, r = hole
        raise FormatError(f"{label}: sample (x={c}, y={r}) is covered by no block and gaps_allowed is false")


def read_offsets(
    path: str | os.PathLike, *, width: int | None = None, height: int | None = None
) -> tuple[OffsetField, dict]:
    """Read and validate an offsets file.

    Parameters
    ----------
    path : path-like
    width, height : int, optional
        Size of the clip the offsets are meant for: a file made for another picture size is
        refused (naming both sizes) before any block is checked.

    Returns
    -------
    (OffsetField, dict)
        The offsets and the whole document (statistics, search settings, extra keys).

    Raises
    ------
    FormatError
        Missing or malformed file, wrong format or schema version, a bad time, a picture size
        other than `width` x `height`, or a block breaking a rule of the module docstring (the
        message names the block).
    """
    from synth.field_checks import check_block_count, check_picture_size

    path = Path(path)
    label = str(path)
    # NaN / Infinity are parsed (statistics of synth 0.1 files); the time and blocks refuse them
    try:
        doc = read_json_document(path, what="offsets file", max_bytes=MAX_TABLE_FILE_BYTES, allow_nonfinite=True)
    except FormatError as exc:
        raise FormatError(str(exc).replace(": not valid JSON (", ": not a JSON offsets file (", 1)) from None
    if not isinstance(doc, dict) or doc.get("format") != OFFSETS_FORMAT:
        raise FormatError(f"{path}: not an offsets file (format must be {OFFSETS_FORMAT!r})")
    version = next((doc[k] for k in _VERSION_KEYS if k in doc), None)
    if version != OFFSETS_SCHEMA_VERSION or isinstance(version, bool):
        raise FormatError(
            f"{path}: unknown schema version {_short(version)} (this synth reads {OFFSETS_SCHEMA_VERSION})"
        )
    for key in ("width", "height", "time", "columns", "blocks"):
        if key not in doc:
            raise FormatError(f"{path}: missing key {key!r}")
    if doc.get("vector_unit", "quarter-sample") != "quarter-sample":
        raise FormatError(f"{path}: vector_unit must be 'quarter-sample', got {_short(doc.get('vector_unit'))}")
    fw, fh = doc["width"], doc["height"]
    if all(isinstance(v, int) and not isinstance(v, bool) for v in (fw, fh)) and (
        (width is not None and fw != width) or (height is not None and fh != height)
    ):
        raise FormatError(
            f"{path}: offsets made for {fw}x{fh} pictures, the clip's are "
            f"{width if width is not None else fw}x{height if height is not None else fh}"
        )
    try:
        width, height = check_picture_size(fw, fh)
    except FormatError as exc:
        raise FormatError(f"{path}: {exc}") from None
    time = doc["time"]
    if (
        isinstance(time, bool)
        or not isinstance(time, (int, float))
        or not math.isfinite(time)
        or abs(time) > MAX_ABS_TIME
    ):
        raise FormatError(
            f"{path}: time must be a finite number of magnitude at most 2**31 (the target's display time), got {_short(time)}"
        )
    gaps_allowed = doc.get("gaps_allowed", False)
    if not isinstance(gaps_allowed, bool):
        raise FormatError(f"{path}: gaps_allowed must be true or false, got {_short(gaps_allowed)}")
    cols, blocks = doc["columns"], doc["blocks"]
    if (
        not isinstance(cols, list)
        or not all(isinstance(c, str) for c in cols)
        or sorted(cols) != sorted(OFFSET_COLUMNS)
    ):
        raise FormatError(f"{path}: columns must name {', '.join(OFFSET_COLUMNS)} once each, got {_short(cols)}")
    if not isinstance(blocks, list):
        raise FormatError(f"{path}: 'blocks' must be a list of rows")
    check_block_count(len(blocks), width, height, label=label)
    for i, row in enumerate(blocks):
        if not isinstance(row, list) or len(row) != len(cols):
            raise FormatError(f"{path}, block {i}: a row must list {len(cols)} values, got {_short(row)}")
    raw = {c: [row[j] for row in blocks] for j, c in enumerate(cols)}
    ints = {c: _integers(label, c, raw[c]) for c in OFFSET_COLUMNS[:-1]}
    for i, v in enumerate(raw["intra"]):
        if not (isinstance(v, bool) or (isinstance(v, int) and v in (0, 1))):
            raise FormatError(f"{path}, block {i}: intra must be true/false or 0/1, got {_short(v)}")
    intra = np.array([bool(v) for v in raw["intra"]], dtype=bool)
    _check_blocks(label, width, height, *(ints[c] for c in OFFSET_COLUMNS[:-1]), intra, gaps_allowed)
    field = OffsetField.from_blocks(
        width=width, height=height, time=float(time), **{c: ints[c] for c in OFFSET_COLUMNS[:-1]}, intra=intra,
        gaps_allowed=gaps_allowed,
    )  # fmt: skip
    return field, doc
