"""Where the vectors between two references come from: the one ``--vectors`` option.

A `VectorSource` hands every command the fields coded between a reference pair:

``estimate`` (default)
    The built-in estimator, `synth.motion.estimator.estimate_reference_fields`: the future
    reference coded against the past one (both directions with ``two_way``) at the vector QP.
``x264``
    A real encoder's vectors: the input clip coded by PyAV's x264 in a forced hierarchical-B
    structure at the vector QP (`synth.codec.hierarchy_coding`), read back from the stream. With
    `VectorSource.with_hierarchy` (a command working on a GOP) the whole clip is coded with that
    GOP and a pair gets the fields coded between its two pictures; without it each pair is coded
    as its own hierarchy anchored on the two references (I at the past one, P at the future one).
``stream``
    The vectors coded in the input clip itself, when it is an H.264, MPEG-4 Part 2 or MPEG-2
    stream (`synth.io.coded_vectors`); each list is assumed to point to the nearest reference
    picture in its direction (`reference_assumption`).
a field file (``.json`` / ``.npz``)
    The fields of the file whose coded and reference times are the pair's two display times (in
    either direction). A file without such a field is refused, naming the times it holds.

For the coded sources (x264, stream) every field between the two pictures is returned, in both
directions where the stream has them; a pair without one is refused, naming what the source holds.
"""

from __future__ import annotations

import os
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = ["ESTIMATE", "X264", "STREAM", "VectorSource", "parse_vector_source", "fields_between", "describe_record"]

#: The name of the built-in estimator as a source.
ESTIMATE = "estimate"
#: x264's vectors for the input clip, coded in a forced hierarchy.
X264 = "x264"
#: The vectors coded in the input clip itself.
STREAM = "stream"
#: Vector QP when none is given (the estimator's rate constraint).
DEFAULT_VECTOR_QP = 27
#: Streams read by the ``stream`` source, kept in memory (keyed by the file's identity).
_STREAMS: OrderedDict = OrderedDict()
_STREAMS_KEPT = 8


def fields_between(fields, past_time: float, future_time: float) -> list[VectorField]:
    """The fields of `fields` coded between the two display times, in either direction."""
    pair = {float(past_time), float(future_time)}
    return [f for f in fields if {float(f.coded_time), float(f.reference_time)} == pair]


def _held(fields, limit: int = 12) -> str:
    pairs = [f"{f.coded_time:g}->{f.reference_time:g}" for f in fields]
    if not pairs:
        return "none"
    more = f", ... ({len(pairs)} fields)" if len(pairs) > limit else ""
    return ", ".join(pairs[:limit]) + more


def _identity(path: Path) -> tuple:
    p = Path(path).resolve()
    st = p.stat()
    return (str(p), st.st_size, st.st_mtime_ns)


def _read_stream(path: Path):
    """`synth.io.coded_vectors.read_coded_fields` of `path`, read once per file version."""
    from synth.io.coded_vectors import read_coded_fields

    key = _identity(path)
    if key not in _STREAMS:
        _STREAMS[key] = read_coded_fields(path)
        while len(_STREAMS) > _STREAMS_KEPT:
            _STREAMS.popitem(last=False)
    _STREAMS.move_to_end(key)
    return _STREAMS[key]


@dataclass(frozen=True)
class VectorSource:
    """A resolved ``--vectors`` value.

    Attributes
    ----------
    kind : str
        ``'estimate'``, ``'x264'``, ``'stream'`` or ``'file'``.
    path : Path or None
        The field file, for ``kind == 'file'``.
    qp : int
        Rate constraint of estimated vectors; the QP of the encode for ``x264``.
    two_way : bool
        Estimate both coding directions (``estimate`` only: coded sources return what the stream
        holds).
    options : dict
        Further `estimate_field` options (``search_range``, ``block_sizes``).
    clip : Path or None
        The input clip (``x264`` and ``stream``).
    gop : int or None
        Clip-wide GOP of the ``x264`` encode (`with_hierarchy`); None: one hierarchy per pair.
    first : int
        First picture of the clip-wide encode (its first anchor).
    open_clip : callable or None
        Returns a reader of the clip's pictures for the ``x264`` encode (default
        ``synth.io.open_clip(clip)``); `clip_key` says what else identifies those pictures.
    """

    kind: str = ESTIMATE
    path: Path | None = None
    qp: int = DEFAULT_VECTOR_QP
    two_way: bool = False
    options: dict = field(default_factory=dict)
    clip: Path | None = None
    gop: int | None = None
    first: int = 0
    open_clip: Callable | None = field(default=None, compare=False, repr=False)
    clip_key: tuple = ()

    @property
    def label(self) -> str:
        """``estimate``, ``x264``, ``stream`` or the file name, for tables and records."""
        return str(self.path) if self.kind == "file" else self.kind

    @property
    def qp_matters(self) -> bool:
        """Whether the vector QP changes the vectors (a sweep over QPs makes sense)."""
        return self.kind in (ESTIMATE, X264)

    @property
    def reference_assumption(self) -> str | None:
        """For ``stream``: the one line on how lists were mapped to pictures (None otherwise)."""
        if self.kind != STREAM:
            return None
        from synth.io.coded_vectors import NEAREST_REFERENCE_ASSUMPTION

        if self.clip is None:
            return NEAREST_REFERENCE_ASSUMPTION
        return _read_stream(self.clip).assumption

    def with_qp(self, qp: int) -> VectorSource:
        """The same source at another vector QP (for ``x264``: the QP of the encode)."""
        return replace(self, qp=int(qp), options=dict(self.options))

    def with_clip(self, clip, *, open_clip: Callable | None = None, clip_key: tuple = ()) -> VectorSource:
        """The same source for another input clip (commands working on several clips)."""
        if self.kind == STREAM:
            return _stream_source(self, clip, name="--vectors")
        return replace(self, clip=None if clip is None else Path(clip), open_clip=open_clip, clip_key=tuple(clip_key),
                       options=dict(self.options))  # fmt: skip

    def with_hierarchy(self, gop: int, *, first: int = 0, option: str = "--gop-size") -> VectorSource:
        """For ``x264``: code the clip from picture `first` on as one hierarchy of GOP `gop` (2, 4
        or 8; anchors at first, first + gop, ...); other sources are returned unchanged.

        Raises
        ------
        ParameterError
            For ``x264`` and a GOP that is not a power of two from 2 to 8 (naming `option`).
        """
        if self.kind != X264:
            return self
        from synth.codec.hierarchy_coding import check_clip_gop

        return replace(self, gop=check_clip_gop(gop, option=option), first=int(first), options=dict(self.options))

    def _need_clip(self) -> Path:
        if self.clip is None:
            raise ParameterError(f"--vectors {self.kind} needs the input clip (the command passed none)")
        return self.clip

    def coded_fields(self, *, past_time: float, future_time: float) -> tuple[VectorField, ...]:
        """Every field the coded source holds for the pair's structure (``x264``, ``stream``)."""
        if self.kind == STREAM:
            return _read_stream(self._need_clip()).fields
        from synth.codec.hierarchy_coding import coded_hierarchy_fields

        for name, t in (("past", past_time), ("future", future_time)):
            if float(t) != int(t):
                raise ParameterError(f"--vectors x264 needs whole picture numbers, got {name} time {t:g}")
        structure = ("gop", self.gop, self.first) if self.gop else ("pair", int(past_time), int(future_time))
        return coded_hierarchy_fields(
            self._need_clip(), qp=self.qp, structure=structure, open_reader=self.open_clip, reader_key=self.clip_key
        )

    def _describe_held(self) -> str:
        if self.kind == X264:
            how = f"GOP {self.gop}" if self.gop else "the pair's own hierarchy"
            return f"x264 at QP {self.qp} ({how}) holds"
        return f"the stream {self.clip} holds"

    def fields_for(self, past: Picture, future: Picture, *, past_time: float, future_time: float) -> list[VectorField]:
        """The fields between `past` (at `past_time`) and `future` (at `future_time`).

        Raises
        ------
        ParameterError
            When a field file or a coded source holds no field between the two times, or is for
            another picture size.
        FormatError
            When the field file or the stream cannot be read.
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
        if self.kind in (X264, STREAM):
            every = self.coded_fields(past_time=past_time, future_time=future_time)
            if every and (every[0].width, every[0].height) != (past.width, past.height):
                raise ParameterError(
                    f"--vectors {self.kind}: the coded pictures are {every[0].width}x{every[0].height}, "
                    f"the references {past.width}x{past.height}"
                )
            chosen = fields_between(every, past_time, future_time)
            if not chosen:
                raise ParameterError(
                    f"--vectors {self.kind}: no field is coded between pictures {past_time:g} and "
                    f"{future_time:g} ({self._describe_held()} {_held(every)})"
                )
            return chosen
        from synth.io import read_fields

        every = read_fields(self.path, width=past.width, height=past.height)
        chosen = fields_between(every, past_time, future_time)
        if not chosen:
            raise ParameterError(
                f"--vectors {self.path}: no field is coded between pictures {past_time:g} and {future_time:g} "
                f"(the file holds {_held(every, limit=10**9)})"
            )
        return chosen

    def describe(self) -> dict:
        """JSON-ready record of the source."""
        if self.kind == ESTIMATE:
            return {"vectors": ESTIMATE, "vector_qp": self.qp, "two_way": self.two_way}
        if self.kind == X264:
            structure = f"clip-wide GOP {self.gop}" if self.gop else "one hierarchy per reference pair"
            if self.gop and self.first:
                structure += f" from picture {self.first}"
            return {"vectors": X264, "vector_qp": self.qp, "structure": structure}
        if self.kind == STREAM:
            return {"vectors": STREAM, "clip": str(self.clip), "reference_assumption": self.reference_assumption}
        return {"vectors": str(self.path)}


def describe_record(record: dict | None) -> str:
    """One line for a `VectorSource.describe` record, as commands print it.

    For ``stream`` the line ends with the reference assumption, so the user always sees it.
    """
    if record is None:
        return "none"
    kind = record.get("vectors")
    if kind == ESTIMATE:
        both = ", both directions" if record.get("two_way") else ""
        return f"estimated (QP {record['vector_qp']}{both})"
    if kind == X264:
        return f"coded by x264 at QP {record['vector_qp']} ({record['structure']})"
    if kind == STREAM:
        return f"coded in the clip's stream; {record['reference_assumption']}"
    return f"{kind}"


def _stream_source(source: VectorSource, clip, *, name: str) -> VectorSource:
    if clip is None:
        return replace(source, clip=None)
    from synth.io.coded_vectors import check_stream_codec

    check_stream_codec(clip, option=f"{name} stream")
    return replace(source, clip=Path(clip), options=dict(source.options))


def parse_vector_source(
    value: str | os.PathLike | None,
    *,
    qp: int = DEFAULT_VECTOR_QP,
    two_way: bool = False,
    name: str = "--vectors",
    clip: str | os.PathLike | None = None,
    open_clip: Callable | None = None,
    clip_key: tuple = (),
    **options,
) -> VectorSource:
    """A `VectorSource` from the value of ``--vectors``.

    Parameters
    ----------
    value : str, path-like or None
        ``estimate`` (or None), ``x264``, ``stream``, or a ``.json`` / ``.npz`` field file.
    qp : int
        Vector QP (estimator's rate constraint; x264's QP).
    two_way : bool
        Estimate both directions (``estimate``).
    name : str
        How messages name the option.
    clip : path-like, optional
        The input clip, which ``x264`` codes and ``stream`` reads (a source parsed without it can
        be given one later with `VectorSource.with_clip`).
    open_clip : callable, optional
        Returns a reader of the clip's pictures for ``x264`` (default ``synth.io.open_clip(clip)``),
        with `clip_key` saying what else identifies them (e.g. a picture window).
    **options
        Further `estimate_field` options.

    Raises
    ------
    ParameterError
        When the value names no source, a field file does not exist, or ``stream`` is given a clip
        that is not an H.264 / MPEG-4 Part 2 / MPEG-2 stream.
    """
    base = VectorSource(ESTIMATE, None, int(qp), bool(two_way), dict(options))
    text = None if value is None else str(value)
    if text is None or text == ESTIMATE:
        return base
    if text in (X264, STREAM):
        source = replace(base, kind=text)
        if text == STREAM:
            return _stream_source(source, clip, name=name)
        return source.with_clip(clip, open_clip=open_clip, clip_key=clip_key) if clip is not None else source
    path = Path(value)
    if path.suffix.lower() not in (".json", ".npz"):
        raise ParameterError(
            f"{name} must be 'estimate', 'x264', 'stream' or a vector-field file (.json or .npz), got {text!r}"
        )
    if not path.is_file():
        raise ParameterError(f"{name} {text!r}: no such file")
    return VectorSource("file", path, int(qp), bool(two_way), dict(options))
