"""One strict-JSON policy for every file synth writes and every ``--json`` output.

Non-finite numbers (an infinite PSNR of identical pictures, a NaN of an empty mean) become
``null``; numpy scalars and arrays become Python numbers and lists; paths become strings. The
output never holds the bare ``Infinity`` or ``NaN`` that strict parsers (RFC 8259) reject.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import asdict, is_dataclass
from fractions import Fraction

import numpy as np

__all__ = ["strict_json", "dumps_strict"]


def strict_json(obj):
    """A copy of `obj` that `json.dumps(..., allow_nan=False)` accepts (see the module docstring).

    >>> strict_json({"psnr": float("inf"), "n": np.int64(3)})
    {'psnr': None, 'n': 3}
    """
    if isinstance(obj, dict):
        return {str(k): strict_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        return [strict_json(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return strict_json(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, Fraction):
        return f"{obj.numerator}/{obj.denominator}"
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if is_dataclass(obj) and not isinstance(obj, type):
        return strict_json(asdict(obj))
    return obj


def dumps_strict(obj, *, indent: int | None = 2, **kwargs) -> str:
    """``json.dumps`` of ``strict_json(obj)``, refusing any remaining non-finite number."""
    return json.dumps(strict_json(obj), indent=indent, allow_nan=False, **kwargs)
