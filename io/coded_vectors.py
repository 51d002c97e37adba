"""Coded motion vectors of real bitstreams: the blocks and vectors a stream carries, as `VectorField`s.

FFmpeg's H.264, MPEG-1/2, MPEG-4 Part 2 and H.263-family decoders export the vectors they decode
when the decoder option ``flags2`` is ``+export_mvs``: each decoded frame then carries side data
``MOTION_VECTORS``, one record per block and prediction list (``AVMotionVector`` in FFmpeg's
``libavutil/motion_vector.h``). The meaning of the record's fields, pinned by the tests of this
module (tests/test_io_coded_vectors.py) on photographs under known translations:

- ``dst_x, dst_y`` are the block's *centre* on the coded picture; ``w``, ``h`` its width and height,
  so the top-left corner is ``(dst_x - w // 2, dst_y - h // 2)``;
- ``motion_x / motion_scale`` is (position on the reference) - (position on the coded picture) in
  luma samples: the project's sign (`synth.field`), so the quarter-sample vector is
  ``motion_x * 4 // motion_scale`` (``motion_scale`` is 4 for quarter-sample and 2 for half-sample
  codecs: exact);
- ``source`` names the *list* (negative: list 0, positive: list 1), not the reference picture: a
  bi-predicted block has two records. The reference index and the reference picture's number are
  not exported.

Which picture a list points to is therefore either given (`structure`: streams synth coded itself,
whose structure is known exactly) or assumed: the nearest reference picture in that direction
(earlier in display order for list 0, later for list 1) among the pictures already decoded. The
assumption holds for one reference per list in the default list order (x264 with ``ref=1``,
MPEG-1/2, MPEG-4 Part 2) and fails silently otherwise (several references, reordered lists,
low-delay B), which `CodedStream.assumption` says in one line.

One field per (coded picture, list): blocks of that list's records, every other part of the picture
an intra block (the exporter writes nothing for intra blocks and nothing for a list a block does not
use). A picture coded without any record (an I picture, or an inter picture whose blocks are all
intra) gives an all-intra field against the reference its list 0 would have used. H.264 blocks
smaller than 8x8 come out as one 8x8 record (FFmpeg exports the vector of the top-left 4x4).
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from synth.errors import FormatError, ParameterError
from synth.field import VectorField
from synth.field_checks import MAX_BLOCK, MIN_BLOCK, check_picture_size

__all__ = [
    "CODECS_WITH_VECTORS",
    "CodedPictureInfo",
    "CodedStream",
    "check_stream_codec",
    "read_coded_fields",
    "stream_codec",
    "NEAREST_REFERENCE_ASSUMPTION",
]

#: FFmpeg decoders that honour ``flags2=+export_mvs``, with the names users know them by.
CODECS_WITH_VECTORS: dict[str, str] = {
    "h264": "H.264",
    "mpeg2video": "MPEG-2",
    "mpeg1video": "MPEG-1",
    "mpeg4": "MPEG-4 Part 2",
    "h263": "H.263",
    "h263p": "H.263+",
    "flv": "Sorenson H.263",
    "msmpeg4v2": "MS-MPEG-4 v2",
    "msmpeg4v3": "MS-MPEG-4 v3",
    "wmv1": "WMV 7",
    "wmv2": "WMV 8",
}
#: Decoders whose exported B-picture vectors are all zero (FFmpeg's MPEG-4 Part 2 family never
#: writes B-picture motion into the exported table): their B pictures give no field.
_ZERO_B_CODECS = {"mpeg4", "h263", "h263p", "flv", "msmpeg4v2", "msmpeg4v3", "wmv1", "wmv2"}

#: The one line a command prints when the reference pictures of the lists were inferred.
NEAREST_REFERENCE_ASSUMPTION = (
    "reference pictures assumed: the nearest reference picture in each list's direction among those "
    "already decoded (right for one reference per list, as x264 ref=1 or MPEG-1/2/4 code)"
)

_LETTERS = {1: "I", 2: "P", 3: "B", 4: "S", 5: "SI", 6: "SP", 7: "BI"}


@dataclass(frozen=True)
class CodedPictureInfo:
    """One decoded picture of a stream.

    Attributes
    ----------
    number : int
        Display-order picture number, from 0.
    decode_index : int
        Position in decoding order.
    kind : str
        Picture type the decoder reports ('I', 'P', 'B', ...).
    is_reference : bool
        Whether later pictures may predict from it (H.264: ``nal_ref_idc`` of its first slice).
    past_reference, future_reference : int or None
        Picture numbers list 0 and list 1 point to (given, or assumed).
    records : int
        Exported vector records (0: no vectors; None: the decoder attached none although the
        picture may have had some, e.g. MPEG pictures output at the decoder's flush).
    """

    number: int
    decode_index: int
    kind: str
    is_reference: bool
    past_reference: int | None
    future_reference: int | None
    records: int | None


@dataclass(frozen=True, eq=False)
class CodedStream:
    """What a stream's coded vectors hold.

    Attributes
    ----------
    path : str
    codec : str
        FFmpeg's decoder name (``h264``, ``mpeg2video``, ...).
    width, height : int
        Luma size.
    pictures : tuple of CodedPictureInfo
        Display order.
    fields : tuple of VectorField
        One per (coded picture, list), in display order of the coded picture, list 0 first; times
        are picture numbers.
    assumption : str or None
        One line on how the lists were mapped to pictures (None when the structure was given), plus
        what was left out.
    """

    path: str
    codec: str
    width: int
    height: int
    pictures: tuple[CodedPictureInfo, ...]
    fields: tuple[VectorField, ...]
    assumption: str | None


def _codec_name(stream) -> str:
    return stream.codec_context.name


def stream_codec(path: str | os.PathLike) -> str:
    """FFmpeg's decoder name for the first video stream of `path` (``h264``, ``hevc``, ...).

    Raises
    ------
    FormatError
        When the file is missing, cannot be opened, or holds no video stream.
    """
    container = _open(path)
    try:
        return _codec_name(_video_stream(container, path))
    finally:
        container.close()


def _open(path, fmt: str | None = None):
    """Open a file path, or a stream held in memory (bytes, with its FFmpeg format name)."""
    import io as _stdio

    import av

    if isinstance(path, (bytes, bytearray)):
        try:
            return av.open(_stdio.BytesIO(bytes(path)), format=fmt)
        except (av.error.FFmpegError, OSError, ValueError) as exc:
            raise FormatError(f"coded stream: not a readable video stream ({exc.__class__.__name__})") from None
    p = Path(path)
    if not p.is_file():
        raise FormatError(f"{p}: no such file")
    try:
        return av.open(str(p), format=fmt)
    except (av.error.FFmpegError, OSError, ValueError) as exc:
        raise FormatError(f"{p}: not a readable video stream ({exc.__class__.__name__})") from None


def _video_stream(container, path):
    if not container.streams.video:
        raise FormatError(f"{path}: the file holds no video stream")
    return container.streams.video[0]


def _check_codec(name: str, path) -> None:
    if name not in CODECS_WITH_VECTORS:
        known = ", ".join(sorted(set(CODECS_WITH_VECTORS.values()) & {"H.264", "MPEG-2", "MPEG-1", "MPEG-4 Part 2"}))
        raise FormatError(
            f"{path}: codec {name!r}: FFmpeg's decoder for it exports no coded motion vectors "
            f"(readable: {known}); re-code the clip, e.g. with --vectors x264"
        )


def _nal_ref_idc(data: bytes, length_size: int | None) -> int | None:
    """``nal_ref_idc`` of the first slice NAL unit (type 1 or 5) of an H.264 access unit.

    Annex-B start codes when `length_size` is None, else length-prefixed NAL units (avcC, as in MP4
    and Matroska); ITU-T H.264 clause 7.3.1 (NAL unit header) and Annex B.
    """
    if length_size is None:
        j = 0
        while True:
            j = data.find(b"\x00\x00\x01", j)
            if j < 0 or j + 3 >= len(data):
                return None
            head = data[j + 3]
            if head & 31 in (1, 5):
                return (head >> 5) & 3
            j += 3
    j = 0
    while j + length_size < len(data):
        n = int.from_bytes(data[j : j + length_size], "big")
        head = data[j + length_size]
        if head & 31 in (1, 5):
            return (head >> 5) & 3
        j += length_size + n
    return None


def _pieces(start: int, length: int, limit: int, cap: int) -> list[tuple[int, int]]:
    """Split ``[start, start + length)`` clipped to ``[0, limit)`` into power-of-two runs of
    ``MIN_BLOCK..cap`` samples, largest first; a remainder under MIN_BLOCK is dropped."""
    lo, hi = max(start, 0), min(start + length, limit)
    out = []
    pos = lo
    while hi - pos >= MIN_BLOCK:
        size = min(cap, 1 << ((hi - pos).bit_length() - 1))
        out.append((pos, size))
        pos += size
    return out


def _blocks_from_records(rec: np.ndarray, width: int, height: int):
    """Records (x, y, w, h, dx, dy; int64 columns) clipped to the picture as valid blocks."""
    inside = (rec[:, 0] >= 0) & (rec[:, 1] >= 0) & (rec[:, 0] + rec[:, 2] <= width) & (rec[:, 1] + rec[:, 3] <= height)
    pow2 = (
        (rec[:, 2] >= MIN_BLOCK)
        & (rec[:, 3] >= MIN_BLOCK)
        & (rec[:, 2] <= MAX_BLOCK)
        & (rec[:, 3] <= MAX_BLOCK)
        & ((rec[:, 2] & (rec[:, 2] - 1)) == 0)
        & ((rec[:, 3] & (rec[:, 3] - 1)) == 0)
    )
    ok = rec[inside & pow2]
    parts = [ok]
    for x, y, w, h, dx, dy in rec[~(inside & pow2)].tolist():  # edge blocks only: few
        for px, sw in _pieces(x, w, width, MAX_BLOCK):
            for py, sh in _pieces(y, h, height, MAX_BLOCK):
                parts.append(np.array([[px, py, sw, sh, dx, dy]], np.int64))
    return np.concatenate(parts) if len(parts) > 1 else ok


def _clamp_vectors(b: np.ndarray, width: int, height: int) -> None:
    """Keep each displaced block within touching distance of the picture (the field rule of
    `synth.field_checks`): H.264 vectors may point far outside, where the reference repeats its
    edge samples, so clamping changes no prediction sample."""
    b[:, 4] = np.clip(b[:, 4], -4 * (b[:, 0] + b[:, 2]), 4 * (width - b[:, 0]))
    b[:, 5] = np.clip(b[:, 5], -4 * (b[:, 1] + b[:, 3]), 4 * (height - b[:, 1]))


def _intra_fill(covered: np.ndarray, width: int, height: int) -> tuple[np.ndarray, bool]:
    """Intra blocks (x, y, w, h) tiling the samples `covered` leaves free, on an 8x8 grid refined to
    4x4 where a cell is partly covered; returns the blocks and whether samples stay uncovered."""
    xs = np.array([p for s in range(0, width, 8) for p in _pieces(s, 8, width, 8)], np.int64).reshape(-1, 2)
    ys = np.array([p for s in range(0, height, 8) for p in _pieces(s, 8, height, 8)], np.int64).reshape(-1, 2)
    wc, hc = int(xs[:, 1].sum()), int(ys[:, 1].sum())
    gaps = wc < width or hc < height
    if not len(xs) or not len(ys):
        return np.zeros((0, 4), np.int64), True
    free = (~covered[:hc, :wc]).astype(np.int64)
    counts = np.add.reduceat(np.add.reduceat(free, ys[:, 0], axis=0), xs[:, 0], axis=1)
    sizes = np.outer(ys[:, 1], xs[:, 1])
    full_r, full_c = np.nonzero(counts == sizes)
    blocks = [np.stack([xs[full_c, 0], ys[full_r, 0], xs[full_c, 1], ys[full_r, 1]], axis=1)]
    for r, c in zip(*np.nonzero((counts > 0) & (counts < sizes))):  # partly covered: 4x4 pieces
        (x0, w), (y0, h) = xs[c].tolist(), ys[r].tolist()
        for sy in range(0, h, 4):
            for sx in range(0, w, 4):
                sub = free[y0 + sy : y0 + sy + 4, x0 + sx : x0 + sx + 4]
                if sub.all():
                    blocks.append(np.array([[x0 + sx, y0 + sy, 4, 4]], np.int64))
                elif sub.any():
                    gaps = True
    return np.concatenate(blocks), gaps


def _painted(b: np.ndarray, width: int, height: int) -> np.ndarray | None:
    """The samples blocks (x, y, w, h, ...) cover, counted on the 4x4 grid every exported block
    is aligned to; None when blocks overlap or are not aligned (the caller then goes block by
    block)."""
    covered = np.zeros((height, width), bool)
    if not len(b):
        return covered
    if (b[:, :4] % 4).any():
        return None
    count = np.zeros((-(-height // 4), -(-width // 4)), np.int32)
    for w, h in {(int(w), int(h)) for w, h in b[:, 2:4].tolist()}:
        sel = (b[:, 2] == w) & (b[:, 3] == h)
        gx, gy = b[sel, 0] // 4, b[sel, 1] // 4
        for i in range(h // 4):
            for j in range(w // 4):
                np.add.at(count, (gy + i, gx + j), 1)
    if count.max() > 1:
        return None
    return np.repeat(np.repeat(count > 0, 4, axis=0), 4, axis=1)[:height, :width]


def _field(rec: np.ndarray, *, width: int, height: int, coded_time: int, reference_time: int) -> VectorField:
    """A valid `VectorField` from one list's records (n, 6) of one picture."""
    b = _blocks_from_records(rec, width, height)
    covered = _painted(b, width, height)
    if covered is None:  # overlapping records (not seen from FFmpeg's exporters): keep the first
        covered = np.zeros((height, width), bool)
        keep = np.ones(len(b), bool)
        for i, (x, y, w, h) in enumerate(b[:, :4].tolist()):
            region = covered[y : y + h, x : x + w]
            if region.any():
                keep[i] = False
                continue
            region[...] = True
        b = b[keep]
    _clamp_vectors(b, width, height)
    intra, gaps = _intra_fill(covered, width, height)
    zeros = np.zeros(len(intra), np.int64)
    return VectorField.from_arrays(
        width=width,
        height=height,
        coded_time=coded_time,
        reference_time=reference_time,
        x=np.concatenate([b[:, 0], intra[:, 0]]),
        y=np.concatenate([b[:, 1], intra[:, 1]]),
        w=np.concatenate([b[:, 2], intra[:, 2]]),
        h=np.concatenate([b[:, 3], intra[:, 3]]),
        dx=np.concatenate([b[:, 4], zeros]),
        dy=np.concatenate([b[:, 5], zeros]),
        intra=np.concatenate([np.zeros(len(b), bool), np.ones(len(intra), bool)]),
        gaps_allowed=bool(gaps),
    )


def _records(mv) -> np.ndarray:
    """Exported records as (list, x, y, w, h, dx_qpel, dy_qpel) int64 rows (list: -1 or +1)."""
    a = mv.to_ndarray()
    w = a["w"].astype(np.int64)
    h = a["h"].astype(np.int64)
    scale = a["motion_scale"].astype(np.int64)
    scale[scale == 0] = 4
    return np.stack(
        [
            np.sign(a["source"].astype(np.int64)),
            a["dst_x"].astype(np.int64) - w // 2,
            a["dst_y"].astype(np.int64) - h // 2,
            w,
            h,
            (a["motion_x"].astype(np.int64) * 4) // scale,
            (a["motion_y"].astype(np.int64) * 4) // scale,
        ],
        axis=1,
    )


def _decode(path, container, stream, name: str):
    """Decode with the vector export; return per output picture (decode index, type, records or
    None, flushed) and the reference flag per decode index."""
    import av

    stream.codec_context.options = {"flags2": "+export_mvs"}
    length_size = None
    extra = stream.codec_context.extradata
    if name == "h264" and extra and extra[0] == 1 and len(extra) > 4:
        length_size = (extra[4] & 3) + 1
    ref_flags: list[int | None] = []
    out = []

    def take(frames, flushed):
        for fr in frames:
            if fr.width > 0 and fr.height > 0:
                check_size(fr.width, fr.height)
            sd = fr.side_data.get("MOTION_VECTORS")
            rec = _records(sd) if sd is not None else None
            out.append((fr.pts, _LETTERS.get(int(fr.pict_type), "?"), rec, flushed, fr.width, fr.height))

    def check_size(w, h):
        try:
            check_picture_size(int(w), int(h))
        except FormatError as exc:
            raise FormatError(f"{path}: {exc}") from None

    if stream.codec_context.width and stream.codec_context.height:
        check_size(stream.codec_context.width, stream.codec_context.height)
    try:
        for packet in container.demux(stream):
            if packet.size:
                ref_flags.append(_nal_ref_idc(bytes(packet), length_size) if name == "h264" else None)
                # decoders keep a packet's pts on its picture: carry the decoding position through
                packet.pts = packet.dts = len(ref_flags) - 1
                take(stream.decode(packet), False)
            else:
                take(stream.decode(packet), True)
    except av.error.FFmpegError as exc:
        raise FormatError(f"{path}: the stream cannot be decoded ({exc.__class__.__name__})") from None
    return out, ref_flags


def read_coded_fields(
    path: str | os.PathLike | bytes,
    *,
    structure: Mapping[int, tuple[int | None, int | None]] | None = None,
    format: str | None = None,
) -> CodedStream:
    """The vector fields coded in a stream, one per (coded picture, reference picture).

    Parameters
    ----------
    path : path-like or bytes
        A file PyAV (FFmpeg) opens: raw ``.h264`` / ``.m2v``, or ``.mp4``, ``.mkv``, ``.avi`` ...;
        or the bytes of a stream (then give `format`, e.g. ``'h264'``).
    structure : mapping of int to (int or None, int or None), optional
        Picture number -> (list 0 reference, list 1 reference), for streams whose structure is
        known (synth's own encodes). Without it the nearest reference picture in each direction
        among those already decoded is assumed (`NEAREST_REFERENCE_ASSUMPTION`).
    format : str, optional
        FFmpeg's container/stream format name, when it cannot be told from the file.

    Returns
    -------
    CodedStream
        Its ``fields`` have picture numbers as times, quarter-sample vectors, the project's sign;
        each passes `synth.field_checks.validate_field`.

    Raises
    ------
    FormatError
        Missing, unreadable or undecodable file, no video stream, pictures larger than
        `synth.field_checks.MAX_PICTURE_SIDE`, or a codec whose decoder exports no vectors (HEVC,
        AV1, VP9, ...), each in one line naming the file.

    Notes
    -----
    The export is FFmpeg's ``AV_FRAME_DATA_MOTION_VECTORS`` side data (``flags2=+export_mvs``).
    H.264 references: ITU-T H.264 clause 8.2.4 (reference picture lists). MPEG-1/2 and MPEG-4
    Part 2 pictures output when the decoder is flushed carry no side data although they are
    inter-coded; they give no field (said in ``assumption``).

    Examples
    --------
    >>> stream = read_coded_fields("clip.h264")  # doctest: +SKIP
    >>> [(f.coded_time, f.reference_time) for f in stream.fields][:3]  # doctest: +SKIP
    [(4.0, 0.0), (2.0, 0.0), (2.0, 4.0)]
    """
    if isinstance(path, (bytes, bytearray)):
        data, path = path, "coded stream"
    else:
        data = path
    container = _open(data, format)
    try:
        stream = _video_stream(container, path)
        name = _codec_name(stream)
        _check_codec(name, path)
        decoded, ref_flags = _decode(path, container, stream, name)
    finally:
        container.close()
    if not decoded:
        raise FormatError(f"{path}: the stream holds no decodable picture")
    width, height = decoded[0][4], decoded[0][5]
    notes = []
    infos: list[CodedPictureInfo] = []
    prepared = []
    for number, (di, kind, rec, flushed, w, h) in enumerate(decoded):
        if (w, h) != (width, height):
            raise FormatError(f"{path}: picture {number} is {w}x{h}, picture 0 is {width}x{height}")
        di = int(di) if di is not None and 0 <= int(di) < len(ref_flags) else number
        flag = ref_flags[di] if di < len(ref_flags) else None
        is_ref = bool(flag) if flag is not None else kind not in ("B", "BI")
        prepared.append((number, di, kind, is_ref, rec, flushed))
    for number, di, kind, is_ref, rec, flushed in prepared:
        if structure is not None:
            past_ref, future_ref = structure.get(number, (None, None))
        else:
            earlier = [q for q in prepared if q[3] and q[1] < di]
            pasts = [q[0] for q in earlier if q[0] < number]
            futures = [q[0] for q in earlier if q[0] > number]
            past_ref = max(pasts) if pasts else None
            future_ref = min(futures) if futures else None
        unknown = rec is None and kind != "I" and flushed and name != "h264"
        infos.append(
            CodedPictureInfo(
                number, di, kind, is_ref, past_ref, future_ref, None if unknown else (0 if rec is None else len(rec))
            )
        )
    fields = []
    skipped_b = []
    for info, (_, _, kind, _, rec, _) in zip(infos, prepared):
        if info.records is None:
            notes.append(f"picture {info.number} came out of the decoder's flush without vectors: no field")
            continue
        if kind == "B" and name in _ZERO_B_CODECS:
            skipped_b.append(info.number)
            continue
        lists = {-1: info.past_reference, +1: info.future_reference}
        if info.records == 0:
            if info.past_reference is not None:
                fields.append(
                    _field(np.zeros((0, 6), np.int64), width=width, height=height,
                           coded_time=info.number, reference_time=info.past_reference)
                )  # fmt: skip
            continue
        for lst in (-1, +1):
            rows = rec[rec[:, 0] == lst][:, 1:]
            if not len(rows):
                continue
            ref = lists[lst]
            if ref is None:
                raise FormatError(
                    f"{path}: picture {info.number} ({kind}) has list {(lst + 1) // 2} vectors but no "
                    f"reference picture decoded before it lies in that direction"
                )
            fields.append(_field(rows, width=width, height=height, coded_time=info.number, reference_time=ref))
    if skipped_b:
        notes.append(
            f"{CODECS_WITH_VECTORS[name]} B pictures export zero vectors: pictures "
            f"{', '.join(map(str, skipped_b))} give no field"
        )
    assumption = None if structure is not None else NEAREST_REFERENCE_ASSUMPTION
    if notes:
        assumption = "; ".join(([assumption] if assumption else []) + notes)
    return CodedStream(str(path), name, int(width), int(height), tuple(infos), tuple(fields), assumption)


def check_stream_codec(path: str | os.PathLike, *, option: str = "--vectors stream") -> str:
    """The decoder name of `path` when its vectors can be read; `ParameterError` otherwise.

    Raises
    ------
    ParameterError
        When the file is not a stream of a codec whose decoder exports vectors (the message names
        `option` and the codec).
    """
    try:
        name = stream_codec(path)
    except FormatError as exc:
        raise ParameterError(f"{option}: {exc}") from None
    if name not in CODECS_WITH_VECTORS:
        raise ParameterError(
            f"{option} needs an H.264, MPEG-4 Part 2 or MPEG-2 stream as the clip; {path} is {name!r}, "
            f"whose decoder exports no coded vectors"
        )
    return name
