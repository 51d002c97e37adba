"""Where the vectors between two references come from: the one ``--vectors`` option.

A `VectorSource` hands every command the fields coded between a reference pair:

``estimate`` (default)
    The built-in estimator, `synth.motion.estimator.estimate_reference_fields`: the future
    reference coded against the past one (both directions with ``two_way``) at the vector QP.
a field file (``.json`` / ``.npz``)
    The fields of the file whose coded and reference times are the pair's two display times (in
    either direction). A file without such a field is refused, naming the times it holds.

Other sources (real bitstreams) register here as they are added.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = ["ESTIMATE", "VectorSource", "parse_vector_source", "fields_between"]

#: The name of the built-in estimator as a source.
ESTIMATE = "estimate"
#: Vector QP when none is given (the estimator's rate constraint).
DEFAULT_VECTOR_QP = 27


def fields_between(fields, past_time: float, future_time: float) -> list[VectorField]:
    """The fields of `fields` coded between the two display times, in either direction."""
    pair = {float(past_time), float(future_time)}
    return [f for f in fields if {float(f.coded_time), float(f.reference_time)} == pair]


@dataclass(frozen=True)
class VectorSource:
    """A resolved ``--vectors`` value.

    Attributes
    ----------
    kind : str
        ``'estimate'`` or ``'file'``.
    path : Path or None
        The field file, for ``kind == 'file'``.
    qp : int
        Rate constraint of estimated vectors.
    two_way : bool
        Estimate both coding directions.
    options : dict
        Further `estimate_field` options (``search_range``, ``block_sizes``).
    """

    kind: str = ESTIMATE
    path: Path | None = None
    qp: int = DEFAULT_VECTOR_QP
    two_way: bool = False
    options: dict = field(default_factory=dict)

    @property
    def label(self) -> str:
        """``estimate`` or the file name, for tables and records."""
        return ESTIMATE if self.kind == ESTIMATE else str(self.path)

    def with_qp(self, qp: int) -> VectorSource:
        """The same source at another vector QP."""
        return VectorSource(self.kind, self.path, int(qp), self.two_way, dict(self.options))

    def fields_for(self, past: Picture, future: Picture, *, past_time: float, future_time: float) -> list[VectorField]:
        """The fields between `past` (at `past_time`) and `future` (at `future_time`).

        Raises
        ------
        ParameterError
            When a field file holds no field between the two times, or is for another picture size.
        FormatError
            When the field file cannot be read.
        """
        if self.kind == ESTIMATE:
            from synth.motion.estimator import estimate_reference_fields

            return estimate_reference_fields(
                past,
                future,
                past_time=float(past_time),
                future_time=float(future_time),
                qp=self.qp,
                two_way=self.two_way,
                **self.options,
            )
        from synth.io import read_fields

        every = read_fields(self.path, width=past.width, height=past.height)
        chosen = fields_between(every, past_time, future_time)
        if not chosen:
            held = ", ".join(f"{f.coded_time:g}->{f.reference_time:g}" for f in every) or "none"
            raise ParameterError(
                f"--vectors {self.path}: no field is coded between pictures {past_time:g} and {future_time:g} "
                f"(the file holds {held})"
            )
        return chosen

    def describe(self) -> dict:
        """JSON-ready record of the source."""
        if self.kind == ESTIMATE:
            return {"vectors": ESTIMATE, "vector_qp": self.qp, "two_way": self.two_way}
        return {"vectors": str(self.path)}


def parse_vector_source(
    value: str | os.PathLike | None,
    *,
    qp: int = DEFAULT_VECTOR_QP,
    two_way: bool = False,
    name: str = "--vectors",
    **options,
) -> VectorSource:
    """A `VectorSource` from the value of ``--vectors``: ``estimate`` (or None) or a field file path.

    Raises
    ------
    ParameterError
        When the value names neither the estimator nor an existing ``.json`` / ``.npz`` file.
    """
    if value is None or str(value) == ESTIMATE:
        return VectorSource(ESTIMATE, None, int(qp), bool(two_way), dict(options))
    path = Path(value)
    if path.suffix.lower() not in (".json", ".npz"):
        raise ParameterError(f"{name} must be 'estimate' or a vector-field file (.json or .npz), got {str(value)!r}")
    if not path.is_file():
        raise ParameterError(f"{name} {str(value)!r}: no such file")
    return VectorSource("file", path, int(qp), bool(two_way), dict(options))
