"""The model of corrective block offsets: `OffsetField`, `OffsetStatistics` and the offsets document.

An encoder that uses a synthetic picture as a reference still codes the true target picture; per
block it may send a small quarter-pel *offset* into the synthetic picture (the search lives in
`synth.codec.offsets`). The offsets are a block table like a `VectorField`'s, in the same sign
convention (:mod:`synth.field`): a block at ``(x, y)`` with offset ``(dx, dy)`` takes its
prediction from ``(x + dx/4, y + dy/4)`` on the synthetic picture. That picture is made for the
target's own display time, so an offset field has ONE time (`OffsetField.time`): its coded and
reference times are equal, which a vector field forbids.

The offsets document (`offsets_document`) is what the file ``synth-offsets`` holds (read and
written by `synth.io.offsets_file`)::

    format          "synth-offsets"
    schema_version  1
    width, height   picture size, luma samples
    vector_unit     "quarter-sample"
    reference       "synthetic"
    time            the target's display time
    gaps_allowed    true when the blocks leave a rim uncovered (picture not a multiple of the block)
    search          the search settings (block, window, metric, lambda)
    statistics      `OffsetStatistics.as_dict` (non-finite figures as null)
    columns         x, y, w, h, dx, dy, intra
    blocks          one row per block
    ...             any extra keys of the caller (clip, picture numbers, maker)
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField

__all__ = [
    "OFFSETS_FORMAT",
    "OFFSETS_SCHEMA_VERSION",
    "OFFSET_COLUMNS",
    "OffsetField",
    "OffsetStatistics",
    "offsets_document",
]

#: The ``format`` value of an offsets file.
OFFSETS_FORMAT = "synth-offsets"
#: The schema version this synth writes (and the only one it reads).
OFFSETS_SCHEMA_VERSION = 1
#: Block columns, in file order (the vector-field files' columns).
OFFSET_COLUMNS = ("x", "y", "w", "h", "dx", "dy", "intra")


@dataclass(frozen=True, eq=False)
class OffsetField(VectorField):
    """A `VectorField` whose reference is the synthetic picture at the coded picture's own time.

    Identical to its parent except that ``coded_time == reference_time`` is required: the synthetic
    picture is made for the target's time (`time`).

    Raises
    ------
    ParameterError
        When a column is not a 1-D array of the block count, or the two times differ.
    """

    def __post_init__(self) -> None:
        n = len(self.x)
        for name in OFFSET_COLUMNS:
            a = getattr(self, name)
            if not isinstance(a, np.ndarray) or a.shape != (n,):
                raise ParameterError(f"OffsetField.{name} must be a 1-D array of {n} entries")
        if float(self.coded_time) != float(self.reference_time):
            raise ParameterError(
                f"an OffsetField has one time (the target's), got coded_time {self.coded_time} and reference_time "
                f"{self.reference_time}"
            )

    @property
    def time(self) -> float:
        """Display time of the target (and of the synthetic picture the offsets point into)."""
        return float(self.coded_time)

    @classmethod
    def from_blocks(
        cls, *, width: int, height: int, time: float, x, y, w, h, dx, dy, intra=None, gaps_allowed: bool = False
    ) -> OffsetField:
        """Build an offset field from array-likes at one `time` (scalar sizes are broadcast)."""
        return cls.from_arrays(
            width=width, height=height, coded_time=time, reference_time=time, x=x, y=y, w=w, h=h, dx=dx, dy=dy,
            intra=intra, gaps_allowed=gaps_allowed,
        )  # fmt: skip

    def rows(self) -> list[list[int]]:
        """The block table, one ``[x, y, w, h, dx, dy, intra]`` row per block."""
        columns = [self.x, self.y, self.w, self.h, self.dx, self.dy, self.intra.astype(np.int32)]
        return np.stack(columns, axis=1).tolist()


@dataclass(frozen=True)
class OffsetStatistics:
    """What the offsets cost and what they bring.

    PSNR figures are per plane ('Y', 'Cb', 'Cr'); SAD is over the whole luma plane; costs are the
    summed Lagrangian ``D + lambda R`` with the search's distortion measure over the blocks.
    """

    blocks: int
    block: int
    window: int
    metric: str
    lagrangian: float
    zero_share: float
    bits_total: int
    bits_per_block: float
    bits_per_pixel: float
    psnr_before: dict[str, float]
    psnr_after: dict[str, float]
    sad_before: float
    sad_after: float
    cost_before: float
    cost_after: float

    @property
    def psnr_gain(self) -> float:
        """Luma PSNR after minus before, in dB."""
        return float(self.psnr_after["Y"] - self.psnr_before["Y"])

    def as_dict(self) -> dict:
        """Every figure by name, plus ``psnr_gain_y`` (not yet made JSON-safe: PSNR may be infinite)."""
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["psnr_gain_y"] = self.psnr_gain
        return d

    @property
    def settings(self) -> dict:
        """The search settings: ``block``, ``window``, ``metric`` and ``lambda``."""
        return {"block": self.block, "window": self.window, "metric": self.metric, "lambda": self.lagrangian}


def offsets_document(
    field: OffsetField,
    *,
    statistics: OffsetStatistics | Mapping | None = None,
    settings: Mapping | None = None,
    extra: Mapping | None = None,
) -> dict:
    """The offsets document of an offset field (layout in the module docstring), strict-JSON ready.

    Parameters
    ----------
    field : OffsetField
    statistics : OffsetStatistics or mapping, optional
        What the search measured; its settings fill ``search`` unless `settings` is given.
    settings : mapping, optional
        The search settings (block, window, metric, lambda).
    extra : mapping, optional
        Further top-level keys (the clip, picture numbers, the maker); they may not replace the
        layout's keys.

    Returns
    -------
    dict
        Non-finite numbers (an infinite PSNR of identical pictures) are None.

    Raises
    ------
    ParameterError
        When `field` is not an `OffsetField` or `extra` would replace a layout key.
    """
    from synth.io.jsonout import strict_json

    if not isinstance(field, OffsetField):
        raise ParameterError(f"field must be an OffsetField, got {type(field).__name__}")
    if isinstance(statistics, OffsetStatistics):
        settings = statistics.settings if settings is None else settings
        statistics = statistics.as_dict()
    doc = {
        "format": OFFSETS_FORMAT,
        "schema_version": OFFSETS_SCHEMA_VERSION,
        "width": int(field.width),
        "height": int(field.height),
        "vector_unit": "quarter-sample",
        "reference": "synthetic",
        "time": field.time,
        "gaps_allowed": bool(field.gaps_allowed),
        "search": dict(settings or {}),
        "statistics": dict(statistics or {}),
        "columns": list(OFFSET_COLUMNS),
        "blocks": field.rows(),
    }
    for key, value in (extra or {}).items():
        if key in doc:
            raise ParameterError(f"extra key {key!r} would replace a key of the offsets document")
        doc[key] = value
    return strict_json(doc)
