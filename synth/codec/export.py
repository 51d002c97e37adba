"""Export synthetic reference pictures for an experimental encoder.

For a dyadic hierarchical GOP of size G (a power of two, 2..64) the anchors are the pictures
0, G, 2G, ...; within each GOP the picture midway between two references is coded first and
becomes a reference for the next layer (the usual hierarchical-B structure of H.264 / HEVC common
test conditions, common practice). Every non-anchor picture gets one synthetic picture made from
its two hierarchy references (the source pictures at those positions). The pictures are written
in display order as Y4M (or raw planar ``.yuv``), with the source's size, chroma format and bit
depth, plus a JSON sidecar describing each written picture.

Sidecar (``format: synth-reference-sidecar``, ``version: 1``): ``source``, ``output``,
``container`` ('y4m' or 'raw'), ``width``, ``height``, ``chroma_format``, ``bit_depth``,
``frame_rate``, ``gop``, ``synthesiser``, ``qp``, ``pictures`` (one entry per written picture, in
file order: ``position`` in the output file, ``time`` (display number in the source), ``past``,
``future``, ``t``, ``layer`` (1 for the GOP's middle picture, 2 for the next, ...), ``fields``
(the vector fields used: coded and reference time, block count, where they came from)), and
``uncovered`` (source pictures after the last complete GOP, which have no future anchor).
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

from synth.errors import ParameterError
from synth.picture import Picture
from synth.makers.reference_makers import ReferenceMaker

__all__ = ["GopEntry", "hierarchy", "export_plan", "synthetic_references", "write_reference_export", "sidecar_path"]


@dataclass(frozen=True)
class GopEntry:
    """One non-anchor picture of a hierarchical GOP and its two hierarchy references."""

    time: int
    past: int
    future: int
    layer: int

    @property
    def t(self) -> float:
        return (self.time - self.past) / (self.future - self.past)


def _check_gop(gop: int) -> None:
    if isinstance(gop, bool) or not isinstance(gop, int) or gop < 2 or gop > 64 or gop & (gop - 1):
        raise ParameterError(f"gop must be a power of two from 2 to 64, got {gop!r}")


def hierarchy(gop: int, *, start: int = 0) -> list[GopEntry]:
    """Non-anchor pictures of one dyadic GOP ``[start, start + gop]`` in coding order.

    Layer by layer: the middle picture first (layer 1), then the middles of both halves (layer 2),
    and so on; within a layer in display order.
    """
    _check_gop(gop)
    out: list[GopEntry] = []
    spans = [(start, start + gop)]
    layer = 1
    while spans:
        nxt = []
        for a, b in spans:
            if b - a < 2:
                continue
            m = (a + b) // 2
            out.append(GopEntry(m, a, b, layer))
            nxt += [(a, m), (m, b)]
        spans = nxt
        layer += 1
    return out


def export_plan(frame_count: int, gop: int) -> tuple[list[GopEntry], list[int]]:
    """Every non-anchor picture of the complete GOPs of a clip, in display order, and the
    pictures left uncovered after the last anchor.

    Raises
    ------
    ParameterError
        When the clip is shorter than one GOP plus its closing anchor.
    """
    _check_gop(gop)
    if frame_count < gop + 1:
        raise ParameterError(f"a GOP of {gop} needs {gop + 1} pictures, the clip has {frame_count}")
    groups = (frame_count - 1) // gop
    entries = [e for g in range(groups) for e in hierarchy(gop, start=g * gop)]
    entries.sort(key=lambda e: e.time)
    return entries, list(range(groups * gop + 1, frame_count))


def synthetic_references(
    read: Callable[[int], Picture],
    entries: list[GopEntry],
    *,
    maker: ReferenceMaker,
    qp: int,
    progress: Callable[[int, int], None] | None = None,
) -> Iterator[tuple[GopEntry, Picture, list[dict]]]:
    """Yield ``(entry, synthetic picture, fields used)`` for every entry, in the entries' order.

    Work shared by pictures with the same two references is prepared once (kept while consecutive
    entries need it, at most a few pairs at a time).
    """
    cache: dict[tuple[int, int], object] = {}
    for i, e in enumerate(entries):
        key = (e.past, e.future)
        if key not in cache:
            if len(cache) > 8:
                cache.pop(next(iter(cache)))
            cache[key] = maker.prepare(read(e.past), read(e.future), past_time=e.past, future_time=e.future, qp=qp)
        state = cache[key]
        yield e, maker.make(state, time=e.time), maker.describe(state)
        if progress is not None:
            progress(i + 1, len(entries))


def sidecar_path(output: str | os.PathLike) -> Path:
    """The sidecar's default name: the output's name with ``.json`` appended."""
    p = Path(output)
    return p.with_name(p.name + ".json")


def write_reference_export(
    reader,
    output: str | os.PathLike,
    *,
    gop: int,
    maker: ReferenceMaker,
    qp: int = 27,
    raw: bool = False,
    sidecar: str | os.PathLike | None = None,
    source_name: str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> dict:
    """Write the synthetic pictures of every non-anchor picture of a clip and their sidecar.

    Parameters
    ----------
    reader : clip reader (`synth.io.open_clip`)
    output : path
        Y4M file, or raw planar file when `raw` is true.
    gop : int
        Dyadic GOP size, a power of two from 2 to 64.
    maker : ReferenceMaker
        How each synthetic picture is made (see `synth.makers.reference_makers`).
    qp : int
        QP handed to the maker (the rate constraint of the estimated vectors).
    raw : bool
        Write headerless planar samples (8-bit, or 16-bit little-endian above 8 bits).
    sidecar : path, optional
        Where the JSON sidecar goes; default `sidecar_path(output)`.

    Returns
    -------
    dict
        The sidecar document (also written).

    Notes
    -----
    Both files are written atomically (temporary name, then rename); the picture file first.
    """
    from synth.io import atomic_output, atomic_write_text, write_y4m
    from synth.io.y4m import pack_picture

    info = reader.info
    entries, uncovered = export_plan(len(reader), gop)
    records: list[dict] = []

    def pictures() -> Iterator[Picture]:
        for pos, (e, pic, fields) in enumerate(synthetic_references(reader.read, entries, maker=maker, qp=qp, progress=progress)):
            records.append(
                {"position": pos, "time": e.time, "past": e.past, "future": e.future, "t": e.t, "layer": e.layer, "fields": fields}
            )
            yield pic

    output = Path(output)
    if raw:
        with atomic_output(output, "wb") as fh:
            for pic in pictures():
                fh.write(pack_picture(pic))
    else:
        write_y4m(output, pictures(), info)
    doc = {
        "format": "synth-reference-sidecar",
        "version": 1,
        "source": source_name if source_name is not None else str(getattr(reader, "path", "")),
        "output": output.name,
        "container": "raw" if raw else "y4m",
        "width": info.width,
        "height": info.height,
        "chroma_format": info.chroma_format,
        "bit_depth": info.bit_depth,
        "frame_rate": f"{info.frame_rate.numerator}/{info.frame_rate.denominator}",
        "gop": gop,
        "synthesiser": maker.name,
        "qp": qp,
        "pictures": records,
        "uncovered": uncovered,
    }
    atomic_write_text(sidecar if sidecar is not None else sidecar_path(output), json.dumps(doc, indent=2) + "\n")
    return doc
