"""Reading the JSON sidecar of an export (``synth export``, ``synth gop --export``).

The sidecar (``format: synth-reference-sidecar``, ``schema_version: 1``) is written by
`synth.codec.export.write_reference_export`; its layout is in ``io/FORMATS.md`` ("Export
sidecar"). `read_sidecar` checks every key a reader relies on, and when told the clip it describes
(its picture count and size), that the pair matches: a clip written by one run beside the sidecar
of another is refused in one line naming both counts.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

from synth.errors import FormatError
from synth.io.jsonread import read_json_document
from synth.io.limits import MAX_TABLE_FILE_BYTES, MAX_TEXT_LENGTH
from synth.io.limits import short_repr as _short
from synth.picture import CHROMA_FORMATS

__all__ = ["SIDECAR_FORMAT", "read_sidecar"]

SIDECAR_FORMAT = "synth-reference-sidecar"
_VERSION_KEYS = ("schema_version", "version", "format_version")
_RATE = re.compile(r"[0-9]{1,10}/[1-9][0-9]{0,9}")
_HASH = re.compile(r"[0-9a-f]{64}")


def _is_int(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _int(path: Path, where: str, v, lo: int, hi: int) -> int:
    if not _is_int(v) or not lo <= v <= hi:
        raise FormatError(f"{path}: {where} must be an integer in {lo}..{hi}, got {_short(v)}")
    return v


def _text(path: Path, where: str, v) -> str:
    if not isinstance(v, str) or len(v) > MAX_TEXT_LENGTH:
        raise FormatError(f"{path}: {where} must be a string of at most {MAX_TEXT_LENGTH} characters, got {_short(v)}")
    return v


def _picture(path: Path, k: int, entry, width: int, height: int) -> None:
    where = f"pictures[{k}]"
    if not isinstance(entry, dict):
        raise FormatError(f"{path}: {where} must be an object, got {_short(entry)}")
    for key in ("position", "time", "past", "future", "t", "layer"):
        if key not in entry:
            raise FormatError(f"{path}: {where} lacks {key!r}")
    if entry["position"] != k or not _is_int(entry["position"]):
        raise FormatError(
            f"{path}: {where}.position must be {k} (pictures in file order), got {_short(entry['position'])}"
        )
    past = _int(path, f"{where}.past", entry["past"], 0, 2**31 - 1)
    future = _int(path, f"{where}.future", entry["future"], 0, 2**31 - 1)
    time = _int(path, f"{where}.time", entry["time"], 0, 2**31 - 1)
    if not past < time < future:
        raise FormatError(f"{path}: {where}: time {time} must lie between past {past} and future {future}")
    t = entry["t"]
    if isinstance(t, bool) or not isinstance(t, (int, float)) or not 0 < t < 1:
        raise FormatError(f"{path}: {where}.t must be a number strictly between 0 and 1, got {_short(t)}")
    _int(path, f"{where}.layer", entry["layer"], 1, 64)
    fields = entry.get("fields", [])
    if not isinstance(fields, list):
        raise FormatError(f"{path}: {where}.fields must be a list, got {_short(fields)}")
    for j, f in enumerate(fields):
        if not isinstance(f, dict):
            raise FormatError(f"{path}: {where}.fields[{j}] must be an object, got {_short(f)}")
        if "blocks" in f:
            _int(path, f"{where}.fields[{j}].blocks", f["blocks"], 0, (width // 4) * (height // 4))


def read_sidecar(
    path: str | os.PathLike,
    *,
    pictures: int | None = None,
    width: int | None = None,
    height: int | None = None,
) -> dict:
    """Read and check an export sidecar; optionally against the clip it describes.

    Parameters
    ----------
    path : path-like
    pictures : int, optional
        Pictures in the exported clip: a sidecar listing another number is refused.
    width, height : int, optional
        The exported clip's picture size: a sidecar for another size is refused.

    Returns
    -------
    dict
        The document.

    Raises
    ------
    FormatError
        One line naming the file: missing, not JSON, not a sidecar, an unknown schema version, a
        key missing or of the wrong kind, or a sidecar that contradicts the clip.
    """
    from synth.field_checks import check_picture_size

    path = Path(path)
    doc = read_json_document(path, what="sidecar file", max_bytes=MAX_TABLE_FILE_BYTES)
    if not isinstance(doc, dict) or doc.get("format") != SIDECAR_FORMAT:
        raise FormatError(f"{path}: not an export sidecar (format must be {SIDECAR_FORMAT!r})")
    version = next((doc[k] for k in _VERSION_KEYS if k in doc), None)
    if version != 1 or not _is_int(version):
        raise FormatError(f"{path}: unknown schema version {_short(version)} (this synth reads 1)")
    for key in ("output", "container", "width", "height", "chroma_format", "bit_depth", "gop", "pictures"):
        if key not in doc:
            raise FormatError(f"{path}: missing key {key!r}")
    try:
        w, h = check_picture_size(doc["width"], doc["height"])
    except FormatError as exc:
        raise FormatError(f"{path}: {exc}") from None
    if (width is not None and w != width) or (height is not None and h != height):
        raise FormatError(
            f"{path}: the sidecar describes {w}x{h} pictures, the clip holds "
            f"{width if width is not None else w}x{height if height is not None else h}"
        )
    _text(path, "output", doc["output"])
    if doc.get("source") is not None:
        _text(path, "source", doc["source"])
    if doc["container"] not in ("y4m", "raw"):
        raise FormatError(f"{path}: container must be 'y4m' or 'raw', got {_short(doc['container'])}")
    if not isinstance(doc["chroma_format"], str) or doc["chroma_format"] not in CHROMA_FORMATS:
        raise FormatError(
            f"{path}: chroma_format must be one of {', '.join(CHROMA_FORMATS)}, got {_short(doc['chroma_format'])}"
        )
    _int(path, "bit_depth", doc["bit_depth"], 8, 16)
    gop = _int(path, "gop", doc["gop"], 2, 64)
    if gop & (gop - 1):
        raise FormatError(f"{path}: gop must be a power of two, got {gop}")
    rate = doc.get("frame_rate", "25/1")
    if not isinstance(rate, str) or not _RATE.fullmatch(rate):
        raise FormatError(f"{path}: frame_rate must be 'N/D', got {_short(rate)}")
    qp = doc.get("qp")
    if qp is not None:
        _int(path, "qp", qp, 0, 51)
    if "clip_sha256" in doc and (not isinstance(doc["clip_sha256"], str) or not _HASH.fullmatch(doc["clip_sha256"])):
        raise FormatError(f"{path}: clip_sha256 must be 64 lower-case hex digits, got {_short(doc['clip_sha256'])}")
    if "clip_bytes" in doc:
        _int(path, "clip_bytes", doc["clip_bytes"], 0, 2**62)
    entries = doc["pictures"]
    if not isinstance(entries, list):
        raise FormatError(f"{path}: pictures must be a list, got {_short(entries)}")
    if pictures is not None and len(entries) != pictures:
        raise FormatError(
            f"{path}: the sidecar lists {len(entries)} pictures, the clip holds {pictures} "
            f"(the clip and its sidecar come from different runs)"
        )
    for k, entry in enumerate(entries):
        _picture(path, k, entry, w, h)
    uncovered = doc.get("uncovered", [])
    if not isinstance(uncovered, list) or not all(_is_int(v) and v >= 0 for v in uncovered):
        raise FormatError(f"{path}: uncovered must be a list of picture numbers, got {_short(uncovered)}")
    return doc
