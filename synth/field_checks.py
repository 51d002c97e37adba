"""Validation of vector fields: the rules every field read from a file must satisfy.

Rules (each failure raises :class:`synth.errors.FormatError` naming the field and the block):

- block positions, sizes and vectors are integers (not booleans, not floating point) and finite;
  the intra flag is a boolean or 0/1;
- block width and height are powers of two from 4 to 128;
- every block lies inside the picture;
- blocks do not overlap, and cover the whole picture unless the field sets ``gaps_allowed``;
- a vector points no further than the picture: the displaced block (x + dx/4, y + dy/4) keeps its
  top-left corner within [-w, width] x [-h, height], i.e. it at most touches the picture from
  outside (samples outside the reference picture repeat its edge, so going further is meaningless);
- coded and reference times are finite numbers of magnitude at most 2**31 and differ;
- the picture's sides are at most `synth.io.limits.MAX_PICTURE_SIDE`, and a field holds no more blocks
  than non-overlapping 4x4 blocks fit in its picture (checked before any array is built).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np

from synth.errors import FormatError
from synth.field import VectorField
from synth.io.limits import MAX_ABS_TIME, MAX_PICTURE_SIDE, max_blocks_for
from synth.io.limits import short_repr as _short

__all__ = [
    "COLUMNS",
    "MIN_BLOCK",
    "MAX_BLOCK",
    "MAX_PICTURE_SIDE",
    "check_picture_size",
    "check_block_count",
    "coverage_map",
    "field_from_columns",
    "validate_field",
]

#: Block columns in files, in their canonical order.
COLUMNS = ("x", "y", "w", "h", "dx", "dy", "intra")
MIN_BLOCK = 4
MAX_BLOCK = 128


def _describe(label: str, i: int, x, y, w, h) -> str:
    return f"{label}, block {i} (x={x}, y={y}, {w}x{h})"


def check_picture_size(width, height) -> tuple[int, int]:
    """Picture width and height must be integers in 1..`MAX_PICTURE_SIDE` (16384)."""
    for name, v in (("width", width), ("height", height)):
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, np.integer)):
            raise FormatError(f"picture {name} must be an integer, got {_short(v)}")
        if not 1 <= int(v) <= MAX_PICTURE_SIDE:
            raise FormatError(f"picture {name} must be in 1..{MAX_PICTURE_SIDE}, got {v}")
    return int(width), int(height)


def check_block_count(n: int, width: int, height: int, *, label: str) -> None:
    """Refuse more blocks than non-overlapping 4x4 blocks fit in a `width` x `height` picture."""
    most = max_blocks_for(width, height)
    if n > most:
        raise FormatError(
            f"{label}: {n} blocks cannot fit a {width}x{height} picture (at most {most} blocks of 4x4 or larger)"
        )


def _check_time(label: str, name: str, t) -> float:
    if isinstance(t, (bool, np.bool_)) or not isinstance(t, (int, float, np.integer, np.floating)):
        raise FormatError(f"{label}: {name} must be a number, got {_short(t)}")
    if isinstance(t, (int, np.integer)):
        if not -MAX_ABS_TIME <= t <= MAX_ABS_TIME:
            raise FormatError(f"{label}: {name} must be a number of magnitude at most 2**31, got {_short(t)}")
        return float(t)
    t = float(t)
    if not math.isfinite(t):
        raise FormatError(f"{label}: {name} must be finite, got {t}")
    if abs(t) > MAX_ABS_TIME:
        raise FormatError(f"{label}: {name} must be a number of magnitude at most 2**31, got {t}")
    return t


def _integer_column(label: str, name: str, values, xs, ys) -> np.ndarray:
    """Return the column as int64 or raise naming the first bad block."""
    lo, hi = -(2**31), 2**31 - 1
    if not isinstance(values, np.ndarray):
        return _integer_list(label, name, values, xs, ys, lo, hi)
    a = values
    if a.dtype.kind == "f":
        bad = ~np.isfinite(a) | (np.floor(np.where(np.isfinite(a), a, 0)) != a)
        if bad.any():
            i = int(np.argmax(bad))
            where = f"{label}, block {i}"
            if i < len(xs) and float(xs[i]).is_integer() and float(ys[i]).is_integer():
                where += f" (x={int(xs[i])}, y={int(ys[i])})"
            kind = "a finite integer" if not np.isfinite(a[i]) else "an integer"
            raise FormatError(f"{where}: {name} must be {kind}, got {a[i]}")
        return a  # integral values stored as floating point: rejected by the caller after all columns
    if a.dtype.kind not in "iu":
        return _integer_list(label, name, a.ravel().tolist(), xs, ys, lo, hi)
    if a.size and (a.max() > hi or a.min() < lo):
        i = int(np.argmax((a > hi) | (a < lo)))
        raise FormatError(f"{label}, block {i}: {name} = {a[i]} does not fit a 32-bit integer")
    return a.astype(np.int64).ravel()


def _integer_list(label: str, name: str, values, xs, ys, lo: int, hi: int) -> np.ndarray:
    """A sequence of Python values as int64, refusing anything but integers of 32 bits."""
    lst = list(values)
    for i, v in enumerate(lst):
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, np.integer)):
            where = f"{label}, block {i}"
            if i < len(xs) and _is_int(xs[i]) and _is_int(ys[i]):
                where += f" (x={xs[i]}, y={ys[i]})"
            if isinstance(v, (float, np.floating)) and not math.isfinite(v):
                raise FormatError(f"{where}: {name} must be a finite integer, got {v}")
            raise FormatError(f"{where}: {name} must be an integer, got {_short(v)}")
        if not lo <= v <= hi:
            raise FormatError(f"{label}, block {i}: {name} = {_short(v)} does not fit a 32-bit integer")
    return np.array(lst, dtype=np.int64)


def _is_int(v) -> bool:
    return isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_))


def _intra_column(label: str, values, n: int) -> np.ndarray:
    if isinstance(values, np.ndarray) and values.dtype == bool:
        return values.astype(bool).reshape(n)
    lst = values.ravel().tolist() if isinstance(values, np.ndarray) else list(values)
    for i, v in enumerate(lst):
        if not (isinstance(v, (bool, np.bool_)) or (_is_int(v) and v in (0, 1))):
            raise FormatError(f"{label}, block {i}: intra must be true/false or 0/1, got {_short(v)}")
    return np.array([bool(v) for v in lst], dtype=bool).reshape(n)


def field_from_columns(
    columns: Mapping[str, Sequence],
    *,
    width: int,
    height: int,
    coded_time,
    reference_time,
    gaps_allowed=False,
    label: str = "field",
) -> VectorField:
    """Build a `VectorField` from raw block columns (as parsed from a file) and validate it.

    Parameters
    ----------
    columns : mapping of 'x', 'y', 'w', 'h', 'dx', 'dy', 'intra' to sequences
        Raw values, one per block, in coding order.
    width, height : int
        Picture size.
    coded_time, reference_time : number
    gaps_allowed : bool
    label : str
        How messages name this field (e.g. "field.json, field 2").

    Returns
    -------
    VectorField

    Raises
    ------
    FormatError
        Naming the field and block that break a rule (see the module docstring).
    """
    width, height = check_picture_size(width, height)
    missing = [c for c in COLUMNS if c not in columns]
    if missing:
        raise FormatError(f"{label}: missing block column(s) {', '.join(missing)}")
    for c in COLUMNS:
        col = columns[c]
        if isinstance(col, np.ndarray) and col.ndim != 1:
            raise FormatError(f"{label}: column {c} must be one-dimensional, got shape {col.shape}")
        if not isinstance(col, (np.ndarray, Sequence)) or isinstance(col, (str, bytes)):
            raise FormatError(f"{label}: column {c} must be a sequence of values, got {type(col).__name__}")
    n = len(columns["x"])
    for c in COLUMNS:
        if len(columns[c]) != n:
            raise FormatError(f"{label}: column {c} has {len(columns[c])} values, column x has {n}")
    check_block_count(n, width, height, label=label)
    if not isinstance(gaps_allowed, (bool, np.bool_)):
        raise FormatError(f"{label}: gaps_allowed must be true or false, got {_short(gaps_allowed)}")
    ct = _check_time(label, "coded_time", coded_time)
    rt = _check_time(label, "reference_time", reference_time)
    if ct == rt:
        raise FormatError(f"{label}: coded_time and reference_time must differ, both are {ct}")
    xs = columns["x"].tolist() if isinstance(columns["x"], np.ndarray) else list(columns["x"])
    ys = columns["y"].tolist() if isinstance(columns["y"], np.ndarray) else list(columns["y"])
    ints = {c: _integer_column(label, c, columns[c], xs, ys) for c in COLUMNS[:-1]}
    for c, a in ints.items():
        if a.dtype.kind == "f":
            raise FormatError(
                f"{label}: column {c} is stored as floating point ({a.dtype}); block values must be integers"
            )
    intra = _intra_column(label, columns["intra"], n)
    field = VectorField(
        width, height, ct, rt,
        *(ints[c].astype(np.int32) for c in COLUMNS[:-1]),
        intra, bool(gaps_allowed),
    )  # fmt: skip
    validate_field(field, label=label)
    return field


def validate_field(field: VectorField, *, label: str = "field") -> None:
    """Check a field against the geometric rules (module docstring); raise `FormatError` if broken.

    Parameters
    ----------
    field : VectorField
    label : str
        How messages name this field.

    Raises
    ------
    FormatError
        Naming the first offending block: size not a power of two in 4..128, block outside the
        picture, overlapping blocks, uncovered samples without ``gaps_allowed``, vector pointing
        further than the picture, times not finite or equal.
    """
    W, H = check_picture_size(field.width, field.height)
    for name, t in (("coded_time", field.coded_time), ("reference_time", field.reference_time)):
        _check_time(label, name, t)
    if field.coded_time == field.reference_time:
        raise FormatError(f"{label}: coded_time and reference_time must differ, both are {field.coded_time}")
    x = field.x.astype(np.int64)
    y = field.y.astype(np.int64)
    w = field.w.astype(np.int64)
    h = field.h.astype(np.int64)
    dx = field.dx.astype(np.int64)
    dy = field.dy.astype(np.int64)

    def first(mask) -> int:
        return int(np.argmax(mask))

    def where(i: int) -> str:
        return _describe(label, i, int(x[i]), int(y[i]), int(w[i]), int(h[i]))

    for name, s in (("width", w), ("height", h)):
        bad = (s < MIN_BLOCK) | (s > MAX_BLOCK) | ((s & (s - 1)) != 0)
        if bad.any():
            i = first(bad)
            raise FormatError(
                f"{where(i)}: block {name} must be a power of two from {MIN_BLOCK} to {MAX_BLOCK}, got {s[i]}"
            )
    outside = (x < 0) | (y < 0) | (x + w > W) | (y + h > H)
    if outside.any():
        i = first(outside)
        raise FormatError(f"{where(i)}: block lies outside the {W}x{H} picture")
    inter = ~field.intra
    # displaced top-left corner in quarter samples must stay within [-w, W] x [-h, H]
    far = inter & ((4 * x + dx < -4 * w) | (4 * x + dx > 4 * W) | (4 * y + dy < -4 * h) | (4 * y + dy > 4 * H))
    if far.any():
        i = first(far)
        raise FormatError(
            f"{where(i)}: vector (dx={dx[i]}, dy={dy[i]}) quarter samples points further than the {W}x{H} picture"
        )
    owner, cell, clash = coverage_map(x, y, w, h, W, H)
    if clash is not None:
        i, j = clash
        raise FormatError(f"{where(i)}: block overlaps block {j} (x={x[j]}, y={y[j]}, {w[j]}x{h[j]}) coded before it")
    if not field.gaps_allowed:
        hole = first_uncovered(owner, cell)
        if hole is not None:
            c, r = hole
            raise FormatError(
                f"{label}: sample (x={c}, y={r}) is covered by no block; blocks must cover the {W}x{H} "
                f"picture unless gaps_allowed is true"
            )


def coverage_map(x, y, w, h, width: int, height: int) -> tuple[np.ndarray, int, tuple[int, int] | None]:
    """Which block owns each cell of the picture, on the coarsest grid every block is aligned to.

    The cell side is the greatest common divisor of every block position and size and of the
    picture size (16 for a field of 16x16-aligned macroblocks), so the map holds
    ``(height / cell) x (width / cell)`` entries, not one per sample.

    Parameters
    ----------
    x, y, w, h : (n,) int64 ndarray
        Blocks inside the picture (checked by the caller), in listing order.
    width, height : int

    Returns
    -------
    owner : (height // cell, width // cell) int32 ndarray
        Index of the block owning each cell, -1 for none.
    cell : int
    clash : (int, int) or None
        The first block ``i`` that overlaps an earlier one, and that earlier block ``j``.
    """
    cell = math.gcd(int(width), int(height))
    for a in (x, y, w, h):
        if a.size:
            cell = math.gcd(cell, int(np.gcd.reduce(a)))
    owner = np.full((height // cell, width // cell), -1, dtype=np.int32)
    for i, (bx, by, bw, bh) in enumerate(zip((x // cell).tolist(), (y // cell).tolist(), (w // cell).tolist(),
                                             (h // cell).tolist())):  # fmt: skip
        region = owner[by : by + bh, bx : bx + bw]
        taken = region >= 0
        if taken.any():
            return owner, cell, (i, int(region[taken][0]))
        region[...] = i
    return owner, cell, None


def first_uncovered(owner: np.ndarray, cell: int) -> tuple[int, int] | None:
    """(x, y) of the first sample, in raster order, that no block of `coverage_map` covers."""
    gaps = owner < 0
    if not gaps.any():
        return None
    r, c = np.argwhere(gaps)[0]
    return int(c) * cell, int(r) * cell
