"""Vector-field files: our versioned JSON format, a compact ``.npz`` twin, and CSV export.

JSON (schema version 1)::

    {
      "format": "synth-vector-field",
      "schema_version": 1,
      "width": 352,
      "height": 288,
      "vector_unit": "quarter-sample",
      "fields": [
        {
          "coded_time": 8.0,
          "reference_time": 0.0,
          "gaps_allowed": false,
          "columns": ["x", "y", "w", "h", "dx", "dy", "intra"],
          "blocks": [
            [0, 0, 64, 64, 12, -4, 0],
            ...
          ]
        }
      ]
    }

Blocks are listed in coding order (vector prediction uses earlier blocks only); ``columns`` may list
the seven names in any order. ``.npz``: the same content as arrays (``format``, ``schema_version``,
``width``, ``height``, ``field_count``, ``columns`` and per field k ``field{k}_times`` [coded,
reference], ``field{k}_gaps_allowed``, ``field{k}_blocks`` int32 (n, 7)), saved compressed, read
without pickle. Every file read is validated by :func:`synth.field_checks.field_from_columns`.
"""

from __future__ import annotations

import csv
import io as _stdio
import json
import lzma
import os
import struct
import zipfile
import zlib
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from synth.errors import FormatError, ParameterError
from synth.field import VectorField
from synth.field_checks import COLUMNS, check_block_count, check_picture_size, field_from_columns, validate_field
from synth.io.atomic import atomic_output, atomic_write_text
from synth.io.jsonread import read_json_document
from synth.io.limits import MAX_FIELDS_PER_FILE, MAX_TABLE_FILE_BYTES
from synth.io.limits import short_repr as _short

__all__ = ["FORMAT_NAME", "SCHEMA_VERSION", "write_fields", "read_fields", "fields_to_csv"]

FORMAT_NAME = "synth-vector-field"
SCHEMA_VERSION = 1
_SUFFIXES = (".json", ".npz")


def _as_list(fields) -> list[VectorField]:
    if isinstance(fields, VectorField):
        fields = [fields]
    fields = list(fields)
    if not fields:
        raise ParameterError("fields: need at least one VectorField, got none")
    for i, f in enumerate(fields):
        if not isinstance(f, VectorField):
            raise ParameterError(f"fields[{i}] must be a VectorField, got {type(f).__name__}")
    w, h = fields[0].width, fields[0].height
    for i, f in enumerate(fields):
        if (f.width, f.height) != (w, h):
            raise ParameterError(
                f"fields[{i}] is for {f.width}x{f.height} pictures, fields[0] for {w}x{h}: one file holds one picture size"
            )
        try:  # never write a file that would not read back
            validate_field(f, label=f"fields[{i}]")
        except FormatError as exc:
            raise ParameterError(str(exc)) from None
    return fields


def _suffix(path: Path) -> str:
    s = path.suffix.lower()
    if s not in _SUFFIXES:
        raise FormatError(f"{path}: vector-field files end in .json or .npz, got {path.suffix or 'no suffix'!r}")
    return s


def _number(t: float):
    """Times as JSON numbers: integral values without a fraction are still floats on reading."""
    return float(t)


def _json_text(fields: list[VectorField]) -> str:
    head = {
        "format": FORMAT_NAME,
        "schema_version": SCHEMA_VERSION,
        "width": fields[0].width,
        "height": fields[0].height,
        "vector_unit": "quarter-sample",
    }
    lines = ["{"]
    for k, v in head.items():
        lines.append(f"  {json.dumps(k)}: {json.dumps(v)},")
    lines.append('  "fields": [')
    for n, f in enumerate(fields):
        lines.append("    {")
        lines.append(f'      "coded_time": {json.dumps(_number(f.coded_time))},')
        lines.append(f'      "reference_time": {json.dumps(_number(f.reference_time))},')
        lines.append(f'      "gaps_allowed": {json.dumps(bool(f.gaps_allowed))},')
        lines.append(f'      "columns": {json.dumps(list(COLUMNS))},')
        rows = np.stack([f.x, f.y, f.w, f.h, f.dx, f.dy, f.intra.astype(np.int32)], axis=1).tolist() if len(f) else []
        if rows:
            lines.append('      "blocks": [')
            body = [f"        [{', '.join(str(v) for v in r)}]" for r in rows]
            lines.append(",\n".join(body))
            lines.append("      ]")
        else:
            lines.append('      "blocks": []')
        lines.append("    }" + ("," if n < len(fields) - 1 else ""))
    lines.append("  ]")
    lines.append("}")
    return "\n".join(lines) + "\n"


def write_fields(path: str | os.PathLike, fields: VectorField | Iterable[VectorField]) -> None:
    """Write one or several vector fields to a ``.json`` or ``.npz`` file, atomically.

    Parameters
    ----------
    path : path-like
        Target; the suffix chooses the format.
    fields : VectorField or iterable of VectorField
        All for the same picture size.

    Raises
    ------
    FormatError
        Unknown suffix.
    ParameterError
        No fields, fields of different picture sizes, or a field breaking a rule of
        :mod:`synth.field_checks` (the file would not read back).
    """
    path = Path(path)
    kind = _suffix(path)
    fields = _as_list(fields)
    if kind == ".json":
        atomic_write_text(path, _json_text(fields))
        return
    arrays: dict[str, np.ndarray] = {
        "format": np.array(FORMAT_NAME),
        "schema_version": np.array(SCHEMA_VERSION, dtype=np.int64),
        "width": np.array(fields[0].width, dtype=np.int64),
        "height": np.array(fields[0].height, dtype=np.int64),
        "field_count": np.array(len(fields), dtype=np.int64),
        "columns": np.array(COLUMNS),
    }
    for k, f in enumerate(fields):
        arrays[f"field{k}_times"] = np.array([f.coded_time, f.reference_time], dtype=np.float64)
        arrays[f"field{k}_gaps_allowed"] = np.array(bool(f.gaps_allowed))
        arrays[f"field{k}_blocks"] = (
            np.stack([f.x, f.y, f.w, f.h, f.dx, f.dy, f.intra.astype(np.int32)], axis=1)
            .astype(np.int32)
            .reshape(len(f), len(COLUMNS))
        )
    buf = _stdio.BytesIO()
    np.savez_compressed(buf, **arrays)
    with atomic_output(path, "wb") as fh:
        fh.write(buf.getvalue())


def _check_version(path: Path, fmt, version) -> None:
    if fmt != FORMAT_NAME:
        raise FormatError(f"{path}: not a vector-field file (format is {_short(fmt)}, expected {FORMAT_NAME!r})")
    if isinstance(version, bool) or not isinstance(version, int):
        raise FormatError(f"{path}: schema_version must be an integer, got {_short(version)}")
    if version != SCHEMA_VERSION:
        raise FormatError(f"{path}: unknown schema version {version} (this synth reads version {SCHEMA_VERSION})")


def _read_json(path: Path, expected=(None, None)) -> list[VectorField]:
    # NaN and infinities are parsed so that the block rules can name the block that holds one
    doc = read_json_document(path, what="vector-field file", max_bytes=MAX_TABLE_FILE_BYTES, allow_nonfinite=True)
    if not isinstance(doc, dict):
        raise FormatError(f"{path}: top level must be a JSON object, got {type(doc).__name__}")
    for key in ("format", "schema_version", "width", "height", "fields"):
        if key not in doc:
            raise FormatError(f"{path}: missing key {key!r}")
    _check_version(path, doc["format"], doc["schema_version"])
    unit = doc.get("vector_unit", "quarter-sample")
    if unit != "quarter-sample":
        raise FormatError(f"{path}: vector_unit must be 'quarter-sample', got {_short(unit)}")
    width, height = _picture_size(path, doc["width"], doc["height"], expected)
    if not isinstance(doc["fields"], list) or not doc["fields"]:
        raise FormatError(f"{path}: 'fields' must be a non-empty list")
    if len(doc["fields"]) > MAX_FIELDS_PER_FILE:
        raise FormatError(f"{path}: {len(doc['fields'])} fields is more than a file may hold ({MAX_FIELDS_PER_FILE})")
    out = []
    for k, fd in enumerate(doc["fields"]):
        label = f"{path}, field {k}"
        if not isinstance(fd, dict):
            raise FormatError(f"{label}: must be a JSON object")
        for key in ("coded_time", "reference_time", "columns", "blocks"):
            if key not in fd:
                raise FormatError(f"{label}: missing key {key!r}")
        cols = fd["columns"]
        if not isinstance(cols, list) or not all(isinstance(c, str) for c in cols) or sorted(cols) != sorted(COLUMNS):
            raise FormatError(f"{label}: columns must name {', '.join(COLUMNS)} once each, got {_short(cols)}")
        blocks = fd["blocks"]
        if not isinstance(blocks, list):
            raise FormatError(f"{label}: 'blocks' must be a list of rows")
        check_block_count(len(blocks), width, height, label=label)
        for i, row in enumerate(blocks):
            if not isinstance(row, list) or len(row) != len(cols):
                raise FormatError(f"{label}, block {i}: a row must list {len(cols)} values, got {_short(row)}")
        columns = {c: [row[j] for row in blocks] for j, c in enumerate(cols)}
        out.append(
            field_from_columns(
                columns,
                width=width,
                height=height,
                coded_time=fd["coded_time"],
                reference_time=fd["reference_time"],
                gaps_allowed=fd.get("gaps_allowed", False),
                label=label,
            )  # fmt: skip
        )
    return out


#: Everything a damaged zip archive or .npy member can raise while it is read.
_ARCHIVE_ERRORS = (
    zipfile.BadZipFile,
    zlib.error,
    lzma.LZMAError,
    EOFError,
    OSError,
    ValueError,
    NotImplementedError,
    RuntimeError,
    struct.error,
    KeyError,
    IndexError,
    TypeError,
    OverflowError,
    SyntaxError,
)


def _npy_member(zf: zipfile.ZipFile, info: zipfile.ZipInfo, path: Path) -> np.ndarray:
    """One ``.npy`` member, its header checked against the member's size before any data is read."""
    from numpy.lib import format as npy

    name = info.filename[: -len(".npy")]
    with zf.open(info) as fh:
        version = npy.read_magic(fh)
        if version == (1, 0):
            shape, fortran, dtype = npy.read_array_header_1_0(fh)
        elif version == (2, 0):
            shape, fortran, dtype = npy.read_array_header_2_0(fh)
        else:
            raise FormatError(f"{path}: array {name!r} uses .npy version {version}, not 1.0 or 2.0")
        if dtype.hasobject:
            raise FormatError(f"{path}: array {name!r} holds Python objects (not read: no pickle)")
        count = 1
        for d in shape:
            count *= int(d)
        nbytes = count * dtype.itemsize
        if nbytes != info.file_size - fh.tell():
            raise FormatError(
                f"{path}: array {name!r} declares {nbytes} bytes of data, its member holds {info.file_size - fh.tell()}"
            )
        data = fh.read(nbytes)
    if len(data) != nbytes:
        raise FormatError(f"{path}: array {name!r} is truncated")
    a = np.frombuffer(data, dtype=dtype, count=count)
    return a.reshape(shape[::-1]).transpose() if fortran else a.reshape(shape)


def _load_npz(path: Path) -> dict[str, np.ndarray]:
    """The arrays of an ``.npz`` archive, every size checked before it is read (no pickle)."""
    size = path.stat().st_size
    if size > MAX_TABLE_FILE_BYTES:
        raise FormatError(f"{path}: {size} bytes is more than a vector-field file may hold ({MAX_TABLE_FILE_BYTES})")
    data: dict[str, np.ndarray] = {}
    try:
        with zipfile.ZipFile(path) as zf:
            members = zf.infolist()
            if len(members) > 6 + 3 * MAX_FIELDS_PER_FILE:
                raise FormatError(f"{path}: an archive of {len(members)} members is no vector-field file")
            total = sum(m.file_size for m in members)
            if total > MAX_TABLE_FILE_BYTES:
                raise FormatError(
                    f"{path}: its arrays hold {total} bytes, more than a vector-field file may ({MAX_TABLE_FILE_BYTES})"
                )
            for info in members:
                if not info.filename.endswith(".npy"):
                    raise FormatError(f"{path}: archive member {info.filename[:40]!r} is not a .npy array")
                data[info.filename[: -len(".npy")]] = _npy_member(zf, info, path)
    except FormatError:
        raise
    except _ARCHIVE_ERRORS as exc:
        raise FormatError(f"{path}: not a readable .npz archive ({type(exc).__name__}: {str(exc)[:80]})") from None
    return data


def _read_npz(path: Path, expected=(None, None)) -> list[VectorField]:
    data = _load_npz(path)

    def get(key: str) -> np.ndarray:
        if key not in data:
            raise FormatError(f"{path}: missing array {key!r}")
        return data[key]

    def scalar(key: str, kind: str):
        a = get(key)
        if a.shape != () or a.dtype.kind not in kind:
            raise FormatError(f"{path}: array {key!r} must be a single value of kind {kind!r}, got {a.dtype} {a.shape}")
        v = a.item()
        return v.decode("latin-1") if isinstance(v, bytes) else v

    _check_version(path, scalar("format", "U"), scalar("schema_version", "iu"))
    width, height = _picture_size(path, scalar("width", "iu"), scalar("height", "iu"), expected)
    col_array = get("columns")
    cols = [str(c) for c in col_array.tolist()] if col_array.ndim == 1 and col_array.dtype.kind == "U" else None
    if cols is None or sorted(cols) != sorted(COLUMNS):
        raise FormatError(f"{path}: columns must name {', '.join(COLUMNS)} once each")
    count = scalar("field_count", "iu")
    if not 1 <= count <= MAX_FIELDS_PER_FILE:
        raise FormatError(f"{path}: field_count must be in 1..{MAX_FIELDS_PER_FILE}, got {count}")
    out = []
    for k in range(count):
        label = f"{path}, field {k}"
        times = get(f"field{k}_times")
        if times.shape != (2,) or times.dtype.kind not in "fiu":
            raise FormatError(f"{label}: times must be 2 numbers [coded, reference], got {times.dtype} {times.shape}")
        blocks = get(f"field{k}_blocks")
        if blocks.ndim != 2 or blocks.shape[1] != len(cols):
            raise FormatError(f"{label}: blocks must be an (n, {len(cols)}) array, got shape {blocks.shape}")
        check_block_count(blocks.shape[0], width, height, label=label)
        columns = {c: blocks[:, j] for j, c in enumerate(cols)}
        gaps = get(f"field{k}_gaps_allowed")
        out.append(
            field_from_columns(
                columns,
                width=width,
                height=height,
                coded_time=times[0].item(),
                reference_time=times[1].item(),
                gaps_allowed=gaps.item() if gaps.dtype == bool and gaps.shape == () else gaps,
                label=label,
            )  # fmt: skip
        )
    return out


def read_fields(path: str | os.PathLike, *, width: int | None = None, height: int | None = None) -> list[VectorField]:
    """Read and validate the vector fields of a ``.json`` or ``.npz`` file.

    Parameters
    ----------
    path : path-like
    width, height : int, optional
        Size of the clip the fields are meant for; a file for another size is rejected.

    Returns
    -------
    list of VectorField

    Raises
    ------
    FormatError
        Missing, truncated or malformed file, unknown schema version, a field breaking a rule of
        :mod:`synth.field_checks` (the message names the field and block), or a picture size that
        differs from `width` x `height`.
    """
    path = Path(path)
    kind = _suffix(path)
    try:
        exists = path.is_file()
    except OSError as exc:
        raise FormatError(f"{path}: cannot read this file: {exc.strerror or exc}") from None
    if not exists:
        raise FormatError(f"{path}: no such file")
    # The size is compared before any block is validated: validation allocates a coverage map of
    # the declared picture, which must not happen for a size the clip contradicts.
    return _read_json(path, (width, height)) if kind == ".json" else _read_npz(path, (width, height))


def _picture_size(path: Path, width, height, expected) -> tuple[int, int]:
    """The file's picture size: compared with the clip's first (the message names both), then
    checked against the ceiling."""
    if all(isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_)) for v in (width, height)):
        _check_expected_size(path, int(width), int(height), expected)
    try:
        return check_picture_size(width, height)
    except FormatError as exc:
        raise FormatError(f"{path}: {exc}") from None


def _check_expected_size(path: Path, fw: int, fh: int, expected) -> None:
    width, height = expected
    if (width is not None and fw != width) or (height is not None and fh != height):
        raise FormatError(
            f"{path}: picture size {fw}x{fh} does not match the clip's {width if width is not None else fw}x"
            f"{height if height is not None else fh}"
        )


def fields_to_csv(path: str | os.PathLike, fields: VectorField | Iterable[VectorField]) -> None:
    """Export fields to CSV for spreadsheets, one row per block, atomically.

    Columns: ``field, coded_time, reference_time, x, y, w, h, dx, dy, intra, dx_samples,
    dy_samples`` (dx, dy in quarter samples; the ``_samples`` columns in luma samples).
    Export only: CSV files are not read back.
    """
    fields = _as_list(fields)
    buf = _stdio.StringIO()
    wr = csv.writer(buf, lineterminator="\n")
    wr.writerow(["field", "coded_time", "reference_time", *COLUMNS, "dx_samples", "dy_samples"])
    for k, f in enumerate(fields):
        for x, y, w, h, dx, dy, intra in zip(
            f.x.tolist(), f.y.tolist(), f.w.tolist(), f.h.tolist(), f.dx.tolist(), f.dy.tolist(), f.intra.tolist()
        ):
            wr.writerow([k, repr(float(f.coded_time)), repr(float(f.reference_time)), x, y, w, h, dx, dy, int(intra),
                         dx / 4, dy / 4])  # fmt: skip
    atomic_write_text(path, buf.getvalue())
