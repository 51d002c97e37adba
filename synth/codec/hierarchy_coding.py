"""A real encoder's vectors: code a clip with x264 (PyAV) in a forced hierarchical-B structure and
read back the vectors it coded (`synth.io.coded_vectors`).

Set-up (every encode): picture types forced per picture (``VideoFrame.pict_type``: I first, P at
every anchor, B between), one reference per list (``ref=1``), strict B pyramid, no adaptive B
decision, no scene cut, weighted prediction off, constant QP on every picture (``ipratio`` and
``pbratio`` 1), one thread (bit-identical streams), motion search ``umh`` over +-64 samples (the
built-in estimator's reach; `X264_SEARCH_RANGE`). Through FFmpeg a B picture can only be forced as
a non-reference B; x264 itself (``encoder/slicetype.c``, ``b-pyramid``) keeps exactly one B picture
of each run of ``b`` B pictures as a reference, the one ``(b - 1) // 2 + 1`` after the anchor, and
codes it right after the anchor; the other B pictures reference the nearest reference picture on
either side. `x264_structure` writes this rule down; the tests check it against the decoded stream.

Two structures:

clip-wide GOP (``('gop', g, first)``)
    Anchors every `g` pictures from picture `first` on (``bframes = g - 1``). For g = 2 and 4 this is the full dyadic
    hierarchy of `synth.hierarchy`; for g = 8 the pictures 1..3 and 5..7 reference (0, 4) and
    (4, 8) instead of their dyadic pairs, but every dyadic pair (k - 2^z, k + 2^z) still has a field
    between its two pictures (8->0, 4->0, 4->8, 2->0, 2->4, 6->4, 6->8). Above 8 some dyadic pairs
    would have none (for 16: nothing between 2 and 4), so larger GOPs are refused.
pair (``('pair', past, future)``)
    The pictures ``past..future`` as one hierarchy whose anchors are the two references: I at
    `past`, P at `future`, ``bframes = future - past - 1`` B pictures between (any distance, not
    only powers of two: the two anchors are references whatever x264 does between them). When
    that exceeds x264's maximum of 16 B pictures (``X264_BFRAME_MAX``), only the two references are
    coded (I, P). Either way the P picture gives the field future -> past.

References: x264 project, ``encoder/slicetype.c`` (B-pyramid decision) and ``common/base.h``
(``X264_BFRAME_MAX``); ITU-T H.264 clause 8.2.4 (reference picture lists).
"""

from __future__ import annotations

import io
import os
from collections import OrderedDict
from collections.abc import Sequence
from pathlib import Path

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = [
    "MAX_CLIP_GOP",
    "X264_MAX_BFRAMES",
    "code_x264_hierarchy",
    "x264_params",
    "x264_picture_types",
    "x264_structure",
    "coded_hierarchy_fields",
    "check_clip_gop",
    "clear_cache",
]

#: x264's largest number of consecutive B pictures (``X264_BFRAME_MAX``).
X264_MAX_BFRAMES = 16
#: Largest clip-wide GOP whose every dyadic pair x264 codes a field for.
MAX_CLIP_GOP = 8
#: x264's motion search: uneven multi-hexagon over +-64 luma samples, the reach of the built-in
#: estimator (``search_range=64``), so that the vectors differ from it by the encoder's rate-distortion
#: choices rather than by a search that stops short. x264's default hexagon search (with its
#: default +-16 or with +-64) misses much of the motion of bikes: lmmse from its vectors gave
#: 35.98 dB PSNR-YUV at QP 22 on the first 17 pictures (gaps 2, 4, 8), 37.42 dB with ``umh``.
X264_MOTION_SEARCH = "umh"
X264_SEARCH_RANGE = 64
#: Encodes kept in memory (keyed by clip identity, QP and structure).
_CACHE_SIZE = 8
_CACHE: OrderedDict = OrderedDict()


def check_clip_gop(gop, *, option: str = "--gop-size") -> int:
    """A clip-wide GOP for the x264 source: a power of two from 2 to `MAX_CLIP_GOP`.

    Raises
    ------
    ParameterError
        Naming `option`, with why larger GOPs are refused.
    """
    if isinstance(gop, bool) or not isinstance(gop, int) or gop < 2 or gop & (gop - 1):
        raise ParameterError(
            f"{option} must be a power of two from 2 to {MAX_CLIP_GOP} for --vectors x264, got {gop!r}"
        )
    if gop > MAX_CLIP_GOP:
        raise ParameterError(
            f"{option} {gop} is too large for --vectors x264: x264 keeps one B reference per run of B "
            f"pictures, so above a GOP of {MAX_CLIP_GOP} some dyadic pairs get no coded field"
        )
    return gop


def x264_params(bframes: int, qp: int) -> str:
    """The ``x264-params`` string of the forced structure with `bframes` B pictures per run."""
    parts = [
        f"bframes={bframes}",
        "b-pyramid=strict" if bframes > 1 else "b-pyramid=none",
        "b-adapt=0",
        "ref=1",
        "keyint=100000",
        "min-keyint=100000",
        "scenecut=0",
        "open-gop=0",
        "weightp=0",
        f"qp={qp}",
        "ipratio=1.0",
        "pbratio=1.0",
        f"me={X264_MOTION_SEARCH}",
        f"merange={X264_SEARCH_RANGE}",
    ]
    return ":".join(parts)


def x264_picture_types(count: int, gop: int) -> list[str]:
    """Forced types: I at 0, P every `gop` pictures and at the last picture, B elsewhere."""
    types = ["I" if k == 0 else ("P" if k % gop == 0 else "B") for k in range(count)]
    if count > 1 and types[-1] == "B":
        types[-1] = "P"
    return types


def x264_structure(count: int, gop: int) -> dict[int, tuple[int | None, int | None]]:
    """Picture -> (list 0 reference, list 1 reference) of `code_x264_hierarchy` (module docstring).

    Parameters
    ----------
    count : int
        Pictures coded.
    gop : int
        Anchor spacing (``bframes = gop - 1``).
    """
    types = x264_picture_types(count, gop)
    anchors = [k for k in range(count) if types[k] != "B"]
    refs: dict[int, tuple[int | None, int | None]] = {0: (None, None)}
    for a0, a1 in zip(anchors, anchors[1:]):
        refs[a1] = (a0, None)
        b = a1 - a0 - 1
        mid = a0 + (b - 1) // 2 + 1 if b > 1 else None
        for k in range(a0 + 1, a1):
            if mid is None or k == mid:
                refs[k] = (a0, a1)
            else:
                refs[k] = (a0, mid) if k < mid else (mid, a1)
    return refs


def code_x264_hierarchy(pictures: Sequence[Picture], *, qp: int, gop: int) -> bytes:
    """Code `pictures` with PyAV's libx264 in the forced structure; return the Annex-B stream.

    Parameters
    ----------
    pictures : sequence of Picture
        One size and format (4:2:0, 4:2:2 or 4:4:4, 8 or 10 bits as the bundled x264 allows).
    qp : int
        Slice QP of every picture, 0..51 (x264 gets ``qp + 6 (bit_depth - 8)``).
    gop : int
        Anchor spacing, 1..17 (``bframes = gop - 1``).

    Returns
    -------
    bytes
        Raw H.264 (Annex B).
    """
    import av

    from synth.codec.encode import _pix_fmt, _to_frame

    if not pictures:
        raise ParameterError("no pictures to code")
    if not 1 <= gop <= X264_MAX_BFRAMES + 1:
        raise ParameterError(f"x264 codes at most {X264_MAX_BFRAMES} B pictures in a row, asked for {gop - 1}")
    first = pictures[0]
    pix_fmt = _pix_fmt(first, "libx264")
    buf = io.BytesIO()
    out = av.open(buf, "w", format="h264")
    try:
        stream = out.add_stream("libx264", rate=25)
        stream.width, stream.height, stream.pix_fmt = first.width, first.height, pix_fmt
        stream.codec_context.options = {
            "x264-params": x264_params(gop - 1, int(qp) + 6 * (first.bit_depth - 8)),
            "threads": "1",
        }
        kinds = {"I": av.video.frame.PictureType.I, "P": av.video.frame.PictureType.P,
                 "B": av.video.frame.PictureType.B}  # fmt: skip
        for k, (pic, kind) in enumerate(zip(pictures, x264_picture_types(len(pictures), gop))):
            frame = _to_frame(pic, pix_fmt)
            frame.pts = k
            frame.pict_type = kinds[kind]
            for packet in stream.encode(frame):
                out.mux(packet)
        for packet in stream.encode(None):
            out.mux(packet)
    finally:
        out.close()
    return buf.getvalue()


def _code_and_read(pictures: Sequence[Picture], *, qp: int, gop: int, offset: int) -> tuple[VectorField, ...]:
    from synth.io.coded_vectors import read_coded_fields

    data = code_x264_hierarchy(pictures, qp=qp, gop=gop)
    coded = read_coded_fields(data, structure=x264_structure(len(pictures), gop), format="h264")
    if not offset:
        return coded.fields
    return tuple(_shifted(f, offset) for f in coded.fields)


def _shifted(f: VectorField, offset: int) -> VectorField:
    return VectorField(
        f.width, f.height, f.coded_time + offset, f.reference_time + offset,
        f.x, f.y, f.w, f.h, f.dx, f.dy, f.intra, f.gaps_allowed,
    )  # fmt: skip


def _clip_identity(clip: str | os.PathLike) -> tuple:
    p = Path(clip).resolve()
    try:
        st = p.stat()
    except OSError:
        return (str(p), None, None)
    return (str(p), st.st_size, st.st_mtime_ns)


def clear_cache() -> None:
    """Forget every cached encode."""
    _CACHE.clear()


def coded_hierarchy_fields(
    clip: str | os.PathLike,
    *,
    qp: int,
    structure: tuple,
    open_reader=None,
    reader_key=(),
) -> tuple[VectorField, ...]:
    """The fields x264 codes for a clip in `structure`, coded once per clip, QP and structure.

    Parameters
    ----------
    clip : path-like
        The clip file (its resolved path, size and modification time identify the encode).
    qp : int
        QP of the encode, 0..51.
    structure : tuple
        ``('gop', g)`` or ``('gop', g, first)`` (clip-wide from picture `first`, default 0, to the
        end; g a power of two 2..8) or ``('pair', past, future)`` (the pictures past..future as one
        hierarchy anchored on the two; module docstring) or ``('ippp', first, last)`` (the
        pictures first..last as I P P ..., each P picture against the one before it, ``ref=1``).
    open_reader : callable, optional
        Returns a clip reader (``len``, ``read(i)``, context manager); default
        ``synth.io.open_clip(clip)``.
    reader_key : hashable
        What else identifies the pictures `open_reader` returns (e.g. a picture window).

    Returns
    -------
    tuple of VectorField
        Times are the clip's picture numbers.

    Raises
    ------
    ParameterError
        A GOP above 8 or not a power of two, a pair outside the clip, a QP outside 0..51.
    """
    if isinstance(qp, bool) or not isinstance(qp, int) or not 0 <= qp <= 51:
        raise ParameterError(f"--vector-qp must be an integer in 0..51 (the x264 QP), got {qp!r}")
    key = (_clip_identity(clip), reader_key, int(qp), tuple(structure))
    if key in _CACHE:
        _CACHE.move_to_end(key)
        return _CACHE[key]
    if open_reader is None:
        from synth.io import open_clip

        def open_reader():
            return open_clip(clip)

    with open_reader() as reader:
        n = len(reader)
        if structure[0] == "gop":
            gop = check_clip_gop(structure[1])
            first = int(structure[2]) if len(structure) > 2 else 0
            if not 0 <= first < n - 1:
                raise ParameterError(f"a GOP from picture {first}: the clip has pictures 0..{n - 1}")
            pictures = [reader.read(k) for k in range(first, n)]
            fields = _code_and_read(pictures, qp=qp, gop=gop, offset=first)
        elif structure[0] == "pair":
            past, future = sorted((int(structure[1]), int(structure[2])))
            if past < 0 or future >= n or past == future:
                raise ParameterError(f"pictures {past} and {future}: the clip has pictures 0..{n - 1}")
            span = future - past
            if span - 1 <= X264_MAX_BFRAMES:
                pictures = [reader.read(k) for k in range(past, future + 1)]
                fields = _code_and_read(pictures, qp=qp, gop=span, offset=past)
            else:  # more B pictures than x264 codes in a row: the two references only
                pictures = [reader.read(past), reader.read(future)]
                fields = tuple(
                    VectorField(f.width, f.height, future if f.coded_time else past,
                                future if f.reference_time else past, f.x, f.y, f.w, f.h, f.dx, f.dy,
                                f.intra, f.gaps_allowed)
                    for f in _code_and_read(pictures, qp=qp, gop=1, offset=0)
                )  # fmt: skip
        elif structure[0] == "ippp":
            first = int(structure[1]) if len(structure) > 1 else 0
            last = int(structure[2]) if len(structure) > 2 else n - 1
            if not 0 <= first < last < n:
                raise ParameterError(f"pictures {first}..{last}: the clip has pictures 0..{n - 1}")
            pictures = [reader.read(k) for k in range(first, last + 1)]
            fields = _code_and_read(pictures, qp=qp, gop=1, offset=first)
        else:
            raise ParameterError(f"unknown coding structure {structure!r}")
    _CACHE[key] = fields
    while len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return fields
