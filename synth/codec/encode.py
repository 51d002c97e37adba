"""Short test streams through a real encoder: x264 (H.264) or x265 (HEVC), as bundled with PyAV.

:func:`encode_pictures` codes a handful of pictures in the given order as one I picture followed by
P pictures, at a constant QP, with B pictures off and a chosen number of reference pictures; single
pictures can get their own QP (used to code a synthetic reference almost losslessly). It returns
the raw elementary stream (Annex B byte stream), the size of every picture's packet and every
decoded picture. This is what the encoder-in-the-loop measurement builds on (see DEVELOPERS.md
for its caveats).

Encoder settings (names are the encoders' own options, passed as ``x264-params`` /
``x265-params``):

- constant QP ``qp=``, ``ipratio=1`` so the I picture uses the same QP as the P pictures;
- ``bframes=0``, ``ref=N`` (reference pictures a P picture may use; the most recent first),
  ``scenecut=0`` and a long ``keyint`` so the forced picture types hold;
- ``weightp=0`` (weighted prediction would duplicate references), psycho-visual tuning and
  adaptive quantisation off (we measure PSNR), one thread so results are bit-exact across runs;
- per-picture QP through the encoders' ``zones`` option with a forced QP ``q=``. x264 numbers zone
  frames from 0, inclusive; in constant-QP mode x264 clamps every QP to the range spanned by the
  I, P and B QPs, so we widen it with ``pbratio=0.01`` (there are no B pictures, so nothing else
  changes). x265 matches a zone ``s,e`` for frames ``s-1 .. e-1`` in our single-threaded set-up,
  so picture k is addressed as ``k+1,k+1``; a test checks that the addressed picture, and only
  it, comes out at the low QP for both encoders.
"""

from __future__ import annotations

import io as _stdio
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from fractions import Fraction

import av
import numpy as np
from av.video.frame import PictureType

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["CODECS", "CodedPicture", "CodedStream", "encode_pictures", "decode_stream", "max_qp"]

#: Our codec names -> (PyAV encoder, raw stream format / decoder name).
CODECS: dict[str, tuple[str, str]] = {"h264": ("libx264", "h264"), "hevc": ("libx265", "hevc")}

_PIX_FMT = {"420": "yuv420p", "422": "yuv422p", "444": "yuv444p", "mono": "gray"}
_PRESETS = ("ultrafast", "superfast", "veryfast", "faster", "fast", "medium", "slow", "slower", "veryslow")


@dataclass(frozen=True, eq=False)
class CodedPicture:
    """One picture of a coded stream: where it is, how it was coded, what it cost, what came out."""

    position: int
    kind: str  # 'I' or 'P'
    qp: int
    bits: int  # its packet's size in bits
    reconstruction: Picture


@dataclass(frozen=True, eq=False)
class CodedStream:
    """A coded stream: the bytes, the codec, and its pictures in coding (= display) order."""

    codec: str
    data: bytes
    pictures: tuple[CodedPicture, ...]

    @property
    def bits(self) -> int:
        return 8 * len(self.data)


def max_qp(bit_depth: int = 8) -> int:
    """Largest QP we take: 51 at every bit depth.

    QP here is the standards' slice QP, whose quantiser step size does not depend on the bit depth
    (ITU-T H.264 / H.265 add ``QpBdOffset = 6 (bit_depth - 8)`` internally). x265's ``qp`` option
    uses that scale; x264's uses ``QP + QpBdOffset``, so we add the offset for x264.
    """
    return 51


def _pix_fmt(picture: Picture, encoder: str) -> str:
    base = _PIX_FMT[picture.chroma_format]
    if picture.bit_depth == 8:
        fmt = base
    elif picture.bit_depth in (10, 12):
        fmt = f"{base}{picture.bit_depth}le"
    else:
        raise ParameterError(f"bit depth must be 8, 10 or 12 for the encoders, got {picture.bit_depth}")
    supported = {f.name for f in av.codec.Codec(encoder, "w").video_formats}
    if fmt not in supported:
        raise ParameterError(f"encoder {encoder} cannot code {fmt} pictures (supports {', '.join(sorted(supported))})")
    return fmt


def _to_frame(picture: Picture, pix_fmt: str) -> av.VideoFrame:
    frame = av.VideoFrame(picture.width, picture.height, pix_fmt)
    dtype = np.dtype("<u2") if picture.bit_depth > 8 else np.dtype(np.uint8)
    for dst, plane in zip(frame.planes, picture.planes):
        per_line = dst.line_size // dtype.itemsize
        buf = np.zeros((plane.shape[0], per_line), dtype)
        buf[:, : plane.shape[1]] = plane
        dst.update(buf.tobytes())
    return frame


def _from_frame(frame: av.VideoFrame, like: Picture) -> Picture:
    dtype = np.dtype("<u2") if like.bit_depth > 8 else np.dtype(np.uint8)
    native = np.uint16 if like.bit_depth > 8 else np.uint8
    planes = []
    for src, ref in zip(frame.planes, like.planes):
        a = np.frombuffer(bytes(src), dtype).reshape(src.height, src.line_size // dtype.itemsize)
        planes.append(a[: ref.shape[0], : ref.shape[1]].astype(native))
    if like.chroma_format == "mono":
        return Picture(planes[0], None, None, "mono", like.bit_depth)
    return Picture(planes[0], planes[1], planes[2], like.chroma_format, like.bit_depth)


#: x265 options every measurement uses: no psycho-visual tuning, adaptive quantisation or
#: CU-tree (constant QP really constant), one frame thread and no thread pool (bit-identical
#: streams), no SEI of the options, quiet.
X265_STEADY = (
    "psy-rd=0",
    "psy-rdoq=0",
    "aq-mode=0",
    "cutree=0",
    "limit-refs=0",
    "frame-threads=1",
    "pools=none",
    "info=0",
    "log-level=error",
)


def _params(codec: str, *, qp: int, refs: int, zones: dict[int, int], frames: int, bit_depth: int) -> str:
    keyint = max(frames + 1, 250)
    if codec == "h264":
        bd_offset = 6 * (bit_depth - 8)  # x264 takes QP + QpBdOffset above 8 bits
        qp += bd_offset
        zones = {k: q + bd_offset for k, q in zones.items()}
        opts = [
            f"qp={qp}",
            "ipratio=1.0",
            "pbratio=0.01",
            "bframes=0",
            f"ref={refs}",
            f"keyint={keyint}",
            "scenecut=0",
            "weightp=0",
            "psy=0",
            "aq-mode=0",
            "threads=1",
        ]
        zone_list = [f"{k},{k},q={q}" for k, q in sorted(zones.items())]
    else:
        opts = [
            f"qp={qp}",
            "ipratio=1.0",
            "bframes=0",
            f"ref={refs}",
            f"keyint={keyint}",
            "scenecut=0",
            "weightp=0",
            *X265_STEADY,
        ]
        zone_list = [f"{k + 1},{k + 1},q={q}" for k, q in sorted(zones.items())]
    if zone_list:
        opts.append("zones=" + "/".join(zone_list))
    return ":".join(opts)


def encode_pictures(
    pictures: Sequence[Picture],
    *,
    codec: str = "h264",
    qp: int,
    picture_qp: Mapping[int, int] | None = None,
    refs: int = 3,
    preset: str = "medium",
) -> CodedStream:
    """Code pictures in the given order as I P P ... at a constant QP and decode the stream.

    Parameters
    ----------
    pictures : sequence of Picture
        Two or more pictures of one size and format, in coding order (which is also the display
        order: there are no B pictures).
    codec : {'h264', 'hevc'}
        x264 or x265 through PyAV.
    qp : int
        QP of every picture, 0..51, on the standards' slice-QP scale at every bit depth (see
        :func:`max_qp`).
    picture_qp : mapping of position -> QP, optional
        Pictures coded at their own QP (e.g. a reference that should lose little).
    refs : int, 1..16
        Reference pictures a P picture may predict from (the most recent ones).
    preset : str
        Encoder speed preset.

    Returns
    -------
    CodedStream
        The Annex B byte stream, and for every picture its packet size in bits and its decoded
        reconstruction.

    Raises
    ------
    ParameterError
        On an unknown codec or preset, a QP out of range, mismatched pictures, or a picture format
        the encoder does not take.

    Notes
    -----
    ITU-T H.264 / H.265 streams made by x264 / x265 (see the module docstring for the settings).
    The first picture's packet also carries the parameter sets, so only P pictures' bits are
    clean per-picture costs.
    """
    if codec not in CODECS:
        raise ParameterError(f"codec must be one of {', '.join(CODECS)}, got {codec!r}")
    if preset not in _PRESETS:
        raise ParameterError(f"preset must be one of {', '.join(_PRESETS)}, got {preset!r}")
    pics = list(pictures)
    if len(pics) < 1:
        raise ParameterError("encode_pictures needs at least one picture")
    first = pics[0]
    for i, p in enumerate(pics):
        if not isinstance(p, Picture) or not p.same_format(first):
            raise ParameterError(f"picture {i} differs in size or format from picture 0")
    top = max_qp(first.bit_depth)
    zones = {int(k): int(v) for k, v in (picture_qp or {}).items()}
    for name, q in [("qp", qp)] + [(f"picture_qp[{k}]", v) for k, v in zones.items()]:
        if isinstance(q, bool) or not isinstance(q, (int, np.integer)) or not 0 <= q <= top:
            raise ParameterError(f"{name} must be an integer in 0..{top}, got {q!r}")
    for k in zones:
        if not 0 <= k < len(pics):
            raise ParameterError(f"picture_qp names picture {k}, but there are {len(pics)} pictures")
    if isinstance(refs, bool) or not isinstance(refs, (int, np.integer)) or not 1 <= refs <= 16:
        raise ParameterError(f"refs must be an integer in 1..16, got {refs!r}")
    if first.width % 2 or first.height % 2:
        raise ParameterError(f"the encoders need even picture sizes, got {first.width}x{first.height}")

    encoder, fmt = CODECS[codec]
    pix_fmt = _pix_fmt(first, encoder)
    buf = _stdio.BytesIO()
    sizes: dict[int, int] = {}
    with av.open(buf, "w", format=fmt) as out:
        stream = out.add_stream(encoder, rate=25)
        stream.width, stream.height, stream.pix_fmt = first.width, first.height, pix_fmt
        stream.time_base = Fraction(1, 25)
        params = _params(codec, qp=int(qp), refs=int(refs), zones=zones, frames=len(pics), bit_depth=first.bit_depth)
        stream.codec_context.options = {f"{encoder[3:]}-params": params, "preset": preset}

        def mux(packets):
            for pkt in packets:
                if pkt.pts is None or pkt.pts in sizes:
                    raise ParameterError(f"encoder returned an unexpected packet (pts {pkt.pts})")
                sizes[int(pkt.pts)] = int(pkt.size)
                out.mux(pkt)

        for i, p in enumerate(pics):
            frame = _to_frame(p, pix_fmt)
            frame.pts = i
            frame.time_base = Fraction(1, 25)
            frame.pict_type = PictureType.I if i == 0 else PictureType.P
            mux(stream.encode(frame))
        mux(stream.encode(None))
    data = buf.getvalue()
    if sorted(sizes) != list(range(len(pics))):
        raise ParameterError(f"encoder returned packets for pictures {sorted(sizes)}, expected 0..{len(pics) - 1}")
    recon = decode_stream(data, codec=codec, like=first)
    if len(recon) != len(pics):
        raise ParameterError(f"decoding gave {len(recon)} pictures, expected {len(pics)}")
    coded = tuple(
        CodedPicture(
            position=i,
            kind="I" if i == 0 else "P",
            qp=zones.get(i, int(qp)),
            bits=8 * sizes[i],
            reconstruction=recon[i],
        )
        for i in range(len(pics))
    )
    return CodedStream(codec=codec, data=data, pictures=coded)


def decode_stream(data: bytes, *, codec: str, like: Picture) -> list[Picture]:
    """Decode an Annex B H.264 / HEVC byte stream into pictures shaped like `like`."""
    if codec not in CODECS:
        raise ParameterError(f"codec must be one of {', '.join(CODECS)}, got {codec!r}")
    fmt = CODECS[codec][1]
    try:
        with av.open(_stdio.BytesIO(data), "r", format=fmt) as inp:
            return [_from_frame(f, like) for f in inp.decode(video=0)]
    except av.error.FFmpegError as exc:
        raise ParameterError(f"the {codec} stream does not decode: {exc}") from None
