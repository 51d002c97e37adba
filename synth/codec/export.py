"""Export synthetic reference pictures for an experimental encoder.

For a dyadic hierarchical GOP of size G (a power of two, 2..64) the anchors are the pictures
0, G, 2G, ...; within each GOP the picture midway between two references is coded first and
becomes a reference for the next layer (the usual hierarchical-B structure of H.264 / HEVC common
test conditions, common practice). Every non-anchor picture gets one synthetic picture made from
its two hierarchy references (the source pictures at those positions). The pictures are written
in display order as Y4M (or raw planar ``.yuv``), with the source's size, chroma format and bit
depth, plus a JSON sidecar describing each written picture.

Sidecar (``format: synth-reference-sidecar``, ``schema_version: 1``): ``source``, ``output``,
``container`` ('y4m' or 'raw'), ``width``, ``height``, ``chroma_format``, ``bit_depth``,
``frame_rate``, ``gop`` (the GOP size), ``synthesiser`` (the maker's registry name), ``qp`` (the
vector QP), ``pictures`` (one entry per written picture, in file order: ``position`` in the output
file, ``time`` (display number in the source), ``past``, ``future``, ``t``, ``layer`` (1 for the
GOP's middle picture, 2 for the next, ...), ``fields`` (the vector fields used: coded and
reference time, block count, where they came from, QP)), and ``uncovered`` (source pictures after
the last complete GOP, which have no future anchor), ``clip_sha256`` and ``clip_bytes`` (SHA-256
and size of the picture file as written: a clip and a sidecar of different runs, e.g. after a run
killed between the two renames, are told apart by `check_export_pair`). The layout is described in
io/FORMATS.md.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

from synth.errors import FormatError, ParameterError
from synth.makers import Maker
from synth.motion.sources import VectorSource
from synth.picture import Picture

__all__ = [
    "GopEntry",
    "hierarchy",
    "export_plan",
    "describe_fields",
    "synthetic_references",
    "write_reference_export",
    "sidecar_path",
    "clip_digest",
    "check_export_pair",
    "SIDECAR_SCHEMA_VERSION",
]

#: ``schema_version`` of the sidecar this module writes.
SIDECAR_SCHEMA_VERSION = 1


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


def _check_gop(gop: int, option: str = "--gop-size") -> None:
    if isinstance(gop, bool) or not isinstance(gop, int) or gop < 2 or gop > 64 or gop & (gop - 1):
        raise ParameterError(f"{option} must be a power of two from 2 to 64, got {gop!r}")


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
        raise ParameterError(f"--gop-size {gop}: a GOP of {gop} needs {gop + 1} pictures, the clip has {frame_count}")
    groups = (frame_count - 1) // gop
    entries = [e for g in range(groups) for e in hierarchy(gop, start=g * gop)]
    entries.sort(key=lambda e: e.time)
    return entries, list(range(groups * gop + 1, frame_count))


def describe_fields(fields, source: VectorSource | None) -> list[dict]:
    """JSON-ready record of the vector fields a picture was made from.

    One dict per field: ``coded_time``, ``reference_time``, ``blocks`` (the field's block count),
    ``source`` ('estimated' by the built-in estimator, 'given' when read from a field file) and
    ``qp`` (the vector QP of estimated fields, None for given ones).
    """
    estimated = source is None or source.kind == "estimate"
    return [
        {
            "coded_time": f.coded_time,
            "reference_time": f.reference_time,
            "blocks": len(f),
            "source": "estimated" if estimated else "given",
            "qp": (source.qp if source is not None else None) if estimated else None,
        }
        for f in fields
    ]


def prepare_pair(
    maker: Maker,
    past: Picture,
    future: Picture,
    *,
    past_time: float,
    future_time: float,
    source: VectorSource | None,
    params=None,
):
    """``(PreparedPair, fields record)`` of `maker` for one reference pair.

    The fields come from `source` only when the maker needs vectors (`Maker.needs_vectors`).
    """
    fields = []
    if maker.needs_vectors:
        if source is None:
            raise ParameterError(f"maker {maker.name!r} needs vectors: give a vector source (--vectors)")
        fields = source.fields_for(past, future, past_time=past_time, future_time=future_time)
    pair = maker.prepare(past, future, fields=fields, params=params, past_time=past_time, future_time=future_time)
    return pair, describe_fields(fields, source)


def synthetic_references(
    read: Callable[[int], Picture],
    entries: list[GopEntry],
    *,
    maker: Maker,
    source: VectorSource | None = None,
    params=None,
    progress: Callable[[int, int, str], None] | None = None,
) -> Iterator[tuple[GopEntry, Picture, list[dict]]]:
    """Yield ``(entry, synthetic picture, fields used)`` for every entry, in the entries' order.

    Parameters
    ----------
    read : callable
        ``read(display number) -> Picture``.
    entries : list of GopEntry
    maker : Maker
        From the makers registry (`synth.makers.get_maker`).
    source : VectorSource, optional
        Where the vectors come from (used only by makers that need vectors).
    params : SynthParams, optional
        Synthesis parameters handed to the maker.
    progress : callable, optional
        ``progress(done, total, label)`` after each picture.

    Notes
    -----
    Work shared by pictures with the same two references is prepared once (kept while consecutive
    entries need it, at most a few pairs at a time).
    """
    cache: dict[tuple[int, int], tuple] = {}
    for i, e in enumerate(entries):
        key = (e.past, e.future)
        if key not in cache:
            if len(cache) > 8:
                cache.pop(next(iter(cache)))
            cache[key] = prepare_pair(
                maker,
                read(e.past),
                read(e.future),
                past_time=e.past,
                future_time=e.future,
                source=source,
                params=params,
            )
        pair, fields = cache[key]
        yield e, pair.at_time(e.time).picture, fields
        if progress is not None:
            progress(i + 1, len(entries), f"picture {e.time}")


def clip_digest(path: str | os.PathLike) -> tuple[str, int]:
    """SHA-256 (hex) and size in bytes of a file, read in 4 MiB blocks."""
    import hashlib

    digest = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 22), b""):
            digest.update(block)
            size += len(block)
    return digest.hexdigest(), size


def check_export_pair(sidecar: dict, clip: str | os.PathLike, *, sidecar_name: str = "the sidecar") -> None:
    """Refuse a picture file that is not the one its sidecar describes.

    Parameters
    ----------
    sidecar : dict
        The sidecar document (as read).
    clip : path-like
        The picture file beside it.
    sidecar_name : str
        How the sidecar is named in the message (its path).

    Raises
    ------
    FormatError
        When the sidecar's ``clip_bytes`` / ``clip_sha256`` differ from the file's (the two come
        from different runs). Sidecars written before the hash was recorded pass unchecked.
    """
    want = sidecar.get("clip_sha256")
    if want is None:
        return
    size = Path(clip).stat().st_size
    if isinstance(sidecar.get("clip_bytes"), int) and sidecar["clip_bytes"] != size:
        raise FormatError(
            f"{clip}: {size} bytes, but {sidecar_name} describes a file of {sidecar['clip_bytes']} bytes: "
            "the two come from different runs (export again)"
        )
    got, _ = clip_digest(clip)
    if got != want:
        raise FormatError(
            f"{clip}: SHA-256 {got[:16]}..., but {sidecar_name} names {str(want)[:16]}...: "
            "the two come from different runs (export again)"
        )


def sidecar_path(output: str | os.PathLike) -> Path:
    """The sidecar's default name: the output's name with ``.json`` appended."""
    p = Path(output)
    return p.with_name(p.name + ".json")


def write_reference_export(
    reader,
    output: str | os.PathLike,
    *,
    gop: int,
    maker: Maker,
    source: VectorSource | None = None,
    params=None,
    raw: bool = False,
    sidecar: str | os.PathLike | None = None,
    source_name: str | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """Write the synthetic pictures of every non-anchor picture of a clip and their sidecar.

    Parameters
    ----------
    reader : clip reader (`synth.io.open_clip`)
    output : path
        Y4M file, or raw planar file when `raw` is true.
    gop : int
        Dyadic GOP size, a power of two from 2 to 64.
    maker : Maker
        How each synthetic picture is made (`synth.makers.get_maker`).
    source : VectorSource, optional
        Where the vectors come from (`synth.motion.sources.parse_vector_source`; default: the
        built-in estimator at vector QP 27). Used only by makers that need vectors.
    params : SynthParams, optional
        Synthesis parameters (default: built-in values).
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
    Both files are written atomically (temporary name, then rename); the picture file first, then
    the sidecar naming its SHA-256, so a pair of different runs is detected (`check_export_pair`).
    """
    from synth.io import atomic_output, write_y4m
    from synth.io.y4m import pack_picture
    from synth.motion.sources import parse_vector_source

    if source is None:
        source = parse_vector_source(None)
    info = reader.info
    entries, uncovered = export_plan(len(reader), gop)
    records: list[dict] = []

    def pictures() -> Iterator[Picture]:
        for pos, (e, pic, fields) in enumerate(
            synthetic_references(reader.read, entries, maker=maker, source=source, params=params, progress=progress)
        ):
            records.append(
                {
                    "position": pos,
                    "time": e.time,
                    "past": e.past,
                    "future": e.future,
                    "t": e.t,
                    "layer": e.layer,
                    "fields": fields,
                }
            )
            yield pic

    output = Path(output)
    if raw:
        with atomic_output(output, "wb") as fh:
            for pic in pictures():
                fh.write(pack_picture(pic))
    else:
        write_y4m(output, pictures(), info)
    try:
        return _write_sidecar(output, sidecar, info, raw, gop, maker, source, records, uncovered, source_name, reader)
    except BaseException:
        # interrupted (or failed) after the picture file was renamed into place but before its
        # sidecar was: remove the picture file, so no clip is left without the sidecar naming it
        with contextlib.suppress(FileNotFoundError):
            output.unlink()
        raise


def _write_sidecar(output, sidecar, info, raw, gop, maker, source, records, uncovered, source_name, reader) -> dict:
    """Write the sidecar of `output` (the body of `write_reference_export` after the picture file)."""
    from synth.io import atomic_write_text
    from synth.io.jsonout import dumps_strict

    digest, size = clip_digest(output)
    doc = {
        "format": "synth-reference-sidecar",
        "schema_version": SIDECAR_SCHEMA_VERSION,
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
        "qp": source.qp if source.kind == "estimate" else None,
        "pictures": records,
        "uncovered": uncovered,
        "clip_sha256": digest,
        "clip_bytes": size,
    }
    atomic_write_text(sidecar if sidecar is not None else sidecar_path(output), dumps_strict(doc, indent=2) + "\n")
    return doc
