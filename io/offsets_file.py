"""Files of corrective block offsets (format ``synth-offsets``, schema version 1).

The block table is the one of the vector-field files (:mod:`synth.io.fields`): ``columns`` and one
row per block, quarter-sample vectors. The offsets point into the synthetic picture made for the
target's own time (``reference: synthetic``), so coded and reference time are the same ``time``;
the vector-field format requires two different times, hence a format of its own. Every other block
rule of :mod:`synth.field_checks` (sizes, inside the picture, no overlap, coverage unless gaps are
allowed, vectors within reach) is checked on reading. Layout: :func:`synth.codec.offsets.offsets_document`.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from synth.errors import FormatError

from synth.io.atomic import atomic_write_text

__all__ = ["OFFSETS_FORMAT", "write_offsets", "read_offsets"]

OFFSETS_FORMAT = "synth-offsets"


def write_offsets(path: str | os.PathLike, search, *, extra: dict | None = None) -> dict:
    """Write an offset search (`synth.codec.offsets.OffsetSearch`) as JSON, atomically; return the document."""
    from synth.codec.offsets import offsets_document

    doc = offsets_document(search, extra=extra)
    atomic_write_text(path, json.dumps(doc, indent=1) + "\n")
    return doc


def read_offsets(path: str | os.PathLike):
    """Read and validate an offsets file.

    Returns
    -------
    (OffsetField, dict)
        The offsets and the whole document (statistics, search settings, extra keys).

    Raises
    ------
    FormatError
        Missing or malformed file, wrong format or schema version, or a block breaking a rule of
        :mod:`synth.field_checks` (the message names the block).
    """
    from synth.field_checks import COLUMNS, check_picture_size, field_from_columns
    from synth.codec.offsets import OffsetField

    path = Path(path)
    if not path.is_file():
        raise FormatError(f"{path}: no such file")
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FormatError(f"{path}: not a JSON offsets file ({exc})") from None
    if not isinstance(doc, dict) or doc.get("format") != OFFSETS_FORMAT:
        raise FormatError(f"{path}: not an offsets file (format must be {OFFSETS_FORMAT!r})")
    if doc.get("schema_version") != 1:
        raise FormatError(f"{path}: unknown schema version {doc.get('schema_version')!r} (this synth reads 1)")
    for key in ("width", "height", "time", "columns", "blocks"):
        if key not in doc:
            raise FormatError(f"{path}: missing key {key!r}")
    if doc.get("vector_unit", "quarter-sample") != "quarter-sample":
        raise FormatError(f"{path}: vector_unit must be 'quarter-sample', got {doc.get('vector_unit')!r}")
    try:
        width, height = check_picture_size(doc["width"], doc["height"])
    except FormatError as exc:
        raise FormatError(f"{path}: {exc}") from None
    cols, blocks = doc["columns"], doc["blocks"]
    if not isinstance(cols, list) or sorted(map(str, cols)) != sorted(COLUMNS) or len(cols) != len(COLUMNS):
        raise FormatError(f"{path}: columns must name {', '.join(COLUMNS)} once each, got {cols!r}")
    if not isinstance(blocks, list):
        raise FormatError(f"{path}: 'blocks' must be a list of rows")
    for i, row in enumerate(blocks):
        if not isinstance(row, list) or len(row) != len(cols):
            raise FormatError(f"{path}, block {i}: a row must list {len(cols)} values, got {row!r}")
    time = doc["time"]
    if isinstance(time, bool) or not isinstance(time, (int, float)):
        raise FormatError(f"{path}: time must be a number, got {time!r}")
    columns = {c: [row[j] for row in blocks] for j, c in enumerate(cols)}
    # The block rules of the vector-field format; the "two different times" rule does not apply
    # (the synthetic reference lives at the target's time), so a placeholder time is used here.
    checked = field_from_columns(
        columns, width=width, height=height, coded_time=float(time), reference_time=float(time) + 1.0,
        gaps_allowed=doc.get("gaps_allowed", False), label=str(path),
    )  # fmt: skip
    field = OffsetField(
        checked.width, checked.height, float(time), float(time), checked.x, checked.y, checked.w, checked.h,
        checked.dx, checked.dy, checked.intra, checked.gaps_allowed,
    )  # fmt: skip
    return field, doc
