"""The target as a B picture between its two real references, optionally with an extra reference.

:func:`code_b_target` codes one short stream with x264 (or x265) through PyAV, in which the target
picture is a non-reference B picture whose lists hold the past reference (list 0) and the future
reference (list 1), bi-prediction allowed, and optionally an *extra* picture (a synthetic
reference) in list 0 in front of the past one. It returns the target's bits, every decoded picture,
the picture types the decoder reports and the QP of every picture as read back from the stream.

Stream layouts (display order, picture types forced per input frame with ``VideoFrame.pict_type``):

``plain`` (no extra)
    ``past (I) | target (B) | future (P)``, ``bframes=1``; coding order past, future, target.
``compact`` (x264 with an extra)
    ``past (I) | extra (B) | target (B) | future (P)``, ``bframes=2``, ``b-pyramid=normal``: x264
    promotes B-run index ``(bframes - 1) // 2 = 0`` (the extra) to a reference B picture. Coding
    order past, future, extra, target; the target's lists are {extra, past} and {future} (the
    default H.264 B ordering of ITU-T H.264 clause 8.2.4.2.4: list 0 by descending POC below the
    current one).
``lead`` (x265 with an extra)
    ``past (I) | dummy (B) | extra (B) | target (B) | future (P)``, ``bframes=3``: x265 promotes
    B-run index ``bframes // 2 = 1`` (the extra); the dummy (a copy of the past picture) is a
    non-reference B picture that nothing predicts from. FFmpeg's libx265 wrapper cannot force a
    reference B picture, so the dummy is needed. Coding order past, future, extra, dummy, target.

The future picture is coded before the extra one and cannot use it, so past and future come out
identical in every layout (checked by the callers: ``reference_mismatches``).

QP plan. In constant-QP mode x264 sets its QP span (qpmin..qpmax) to the span of its I/P/B QPs and
clips every zone QP into it; ``ipratio`` and ``pbratio`` are clipped to [0.01, 10]. We open the span
downwards with ``pbratio = 2**(-D/6)`` (so the B QP is ``qp - D``, ``D`` the even number at or
above ``qp - extra_qp``, at most 38) and put every picture back where it belongs with zones
``q=Z`` (a zone gives ``QP = base(type) + Z - qp``): the extra (reference B, base ``qp - D/2``)
gets ``Z = extra_qp + D/2``, the target (and dummy) (non-reference B, base ``qp - D``) get
``Z = qp + D``; past (I) and future (P) keep ``qp`` without a zone. x264 numbers zone frames in
input (display) order. x265 does not clip zone QPs in constant-QP mode, so ``pbratio=1`` and one
zone for the extra suffice; it numbers zone frames in *coding* order and matches a zone ``s,e`` for
coding indices ``s-1 .. e-1``, so the extra (coding index 2) is ``3,3``.

The QPs reported for H.264 are read back from the decoder (FFmpeg's ``export_side_data=venc_params``:
the per-macroblock luma QP map); FFmpeg's HEVC decoder exports no such data, so for x265 the QPs are
those of the plan (tests check them through the reconstructions).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = [
    "BCoding",
    "ReferenceUsage",
    "USAGE_CLASSES",
    "b_layout",
    "x264_qp_plan",
    "code_b_target",
    "code_b_references",
    "reference_usage",
]

#: Largest even distance ``qp - extra_qp`` x264's pbratio range (>= 0.01, i.e. 39.9 QP) can open.
MAX_X264_SPAN = 38

#: Per-block reference use of a B target, as codes of :attr:`ReferenceUsage.classes`.
USAGE_CLASSES: dict[int, str] = {
    0: "intra (no vector)",
    1: "past only",
    2: "extra only",
    3: "future only",
    4: "past + future",
    5: "extra + future",
}

_PTYPE = {1: "I", 2: "P", 3: "B"}


def b_layout(codec: str, with_extra: bool) -> tuple[tuple[str, ...], tuple[str, ...], int]:
    """``(display roles, forced types, bframes)`` of the stream for `codec` with or without an extra.

    >>> b_layout("h264", True)[0]
    ('past', 'extra', 'target', 'future')
    """
    if not with_extra:
        return ("past", "target", "future"), ("I", "B", "P"), 1
    if codec == "h264":
        return ("past", "extra", "target", "future"), ("I", "B", "B", "P"), 2
    return ("past", "dummy", "extra", "target", "future"), ("I", "B", "B", "B", "P"), 3


def x264_qp_plan(qp: int, extra_qp: int, roles: Sequence[str]) -> tuple[float, dict[int, int]]:
    """``(pbratio, zones)`` that code the extra at `extra_qp` and every other picture at `qp` (x264).

    Parameters
    ----------
    qp, extra_qp : int
        On x264's own QP scale.
    roles : sequence of str
        Display-order roles (``past``, ``extra``, ``target``, ``dummy``, ``future``).

    Returns
    -------
    pbratio : float
    zones : dict display index -> zone ``q``

    Raises
    ------
    ParameterError
        When `extra_qp` is above `qp` or more than `MAX_X264_SPAN` below it.
    """
    d = int(qp) - int(extra_qp)
    d += d & 1
    if "extra" not in roles:
        return 1.0, {}
    if d < 0 or d > MAX_X264_SPAN:
        raise ParameterError(
            f"--extra-qp {extra_qp} must be at most the QP and at most {MAX_X264_SPAN} below it for x264 "
            f"B pictures (QP {qp}): x264 cannot open its QP span further"
        )
    if d == 0:
        return 1.0, {}
    zones = {}
    for i, role in enumerate(roles):
        if role in ("target", "dummy"):
            zones[i] = int(qp) + d
        elif role == "extra":
            zones[i] = int(extra_qp) + d // 2
    return 2.0 ** (-d / 6.0), zones


def _x264_params(qp: int, extra_qp: int, roles, bframes: int) -> str:
    pbratio, zones = x264_qp_plan(qp, extra_qp, roles)
    opts = [
        f"qp={qp}",
        "ipratio=1.0",
        f"pbratio={pbratio:.8f}",
        f"bframes={bframes}",
        "b-adapt=0",
        "b-pyramid=normal",
        "ref=4",
        "scenecut=0",
        "keyint=250",
        "min-keyint=250",
        "weightb=0",
        "weightp=0",
        "direct=spatial",
        "psy=0",
        "aq-mode=0",
        "threads=1",
    ]
    if zones:
        opts.append("zones=" + "/".join(f"{k},{k},q={q}" for k, q in sorted(zones.items())))
    return ":".join(opts)


def _x265_params(qp: int, extra_qp: int, roles, bframes: int) -> str:
    from synth.codec.encode import X265_STEADY

    opts = [
        f"qp={qp}",
        "ipratio=1.0",
        "pbratio=1.0",
        f"bframes={bframes}",
        "b-adapt=0",
        "b-pyramid=1",
        "ref=4",
        "scenecut=0",
        "keyint=250",
        "min-keyint=250",
        "open-gop=0",
        "weightb=0",
        "weightp=0",
        *X265_STEADY,
        "lookahead-slices=0",
    ]
    if "extra" in roles:
        opts.append(f"zones=3,3,q={extra_qp}")  # coding index 2, x265's off-by-one
    return ":".join(opts)


@dataclass(frozen=True, eq=False)
class BCoding:
    """One coded B-target stream.

    Attributes
    ----------
    codec, layout : str
    params : str
        The encoder option string.
    display_roles, coding_roles : tuple of str
        Roles in display and in coding order.
    packets : tuple of bytes
        The access units in coding order (the first one carries the parameter sets).
    bits : dict role -> int
        Each picture's packet size in bits.
    qps : dict role -> int
        QP of every picture (H.264: read back from the decoder's QP map; HEVC: the plan).
    types : dict role -> str
        Picture types as the decoder reports them ('I', 'P', 'B').
    decoded : dict role -> Picture
        Decoded pictures.
    vectors : ndarray or None
        The target's exported motion vectors (FFmpeg ``AVMotionVector`` records) when requested.
    """

    codec: str
    layout: str
    params: str
    display_roles: tuple[str, ...]
    coding_roles: tuple[str, ...]
    packets: tuple[bytes, ...]
    bits: dict[str, int]
    qps: dict[str, int | tuple[int, int]]
    types: dict[str, str]
    decoded: dict[str, Picture]
    vectors: np.ndarray | None = field(default=None, repr=False)

    @property
    def target_bits(self) -> int:
        """Bits of the target's packet."""
        return self.bits["target"]


def _check(past, future, target, extra, qp, extra_qp, codec):
    from synth.codec.encode import CODECS, max_qp

    if codec not in CODECS:
        raise ParameterError(f"--codec must be one of {', '.join(CODECS)}, got {codec!r}")
    pics = [past, future, target] + ([extra] if extra is not None else [])
    for i, p in enumerate(pics):
        if not isinstance(p, Picture) or not p.same_format(past):
            raise ParameterError(f"picture {i} of the B-target stream differs in size or format from the past one")
    top = max_qp(past.bit_depth)
    for name, q in (("qp", qp), ("--extra-qp", extra_qp)):
        if isinstance(q, bool) or not isinstance(q, (int, np.integer)) or not 0 <= q <= top:
            raise ParameterError(f"{name} must be an integer in 0..{top}, got {q!r}")
    if past.width % 2 or past.height % 2:
        raise ParameterError(f"the encoders need even picture sizes, got {past.width}x{past.height}")


def _encode(frames, codec: str, params: str, preset: str, like: Picture) -> list:
    import av

    from synth.codec.encode import CODECS, _pix_fmt, _to_frame

    encoder = CODECS[codec][0]
    pix_fmt = _pix_fmt(like, encoder)
    cc = av.CodecContext.create(encoder, "w")
    cc.width, cc.height, cc.pix_fmt = like.width, like.height, pix_fmt
    cc.time_base, cc.framerate = Fraction(1, 25), Fraction(25)
    cc.thread_count = 1
    cc.options = {f"{encoder[3:]}-params": params, "preset": preset}
    packets = []
    for i, (pic, ptype) in enumerate(frames):
        frame = _to_frame(pic, pix_fmt)
        frame.pts = i
        frame.time_base = Fraction(1, 25)
        frame.pict_type = getattr(av.video.frame.PictureType, ptype)
        packets += cc.encode(frame)
    packets += cc.encode(None)
    return [(int(p.pts), bytes(p)) for p in packets]


def _decode(packets: Sequence[tuple[int, bytes]], codec: str, like: Picture, *, vectors: bool, skip_loop_filter: bool):
    import av

    from synth.codec.encode import CODECS, _from_frame

    dc = av.CodecContext.create(CODECS[codec][1], "r")
    dc.thread_count = 1
    opts = {}
    if codec == "h264":
        opts["export_side_data"] = "venc_params"
        if vectors:
            opts["flags2"] = "+export_mvs"
    if skip_loop_filter:
        opts["skip_loop_filter"] = "all"
    dc.options = opts
    out = {}
    try:
        for pts, data in list(packets) + [(None, None)]:
            pkt = None
            if data is not None:
                pkt = av.Packet(data)
                pkt.pts = pts
            for f in dc.decode(pkt):
                rec = {"picture": _from_frame(f, like), "type": _PTYPE.get(int(f.pict_type), "?")}
                sd = f.side_data
                enc = sd.get("VIDEO_ENC_PARAMS") if hasattr(sd, "get") else None
                if enc is not None and enc.nb_blocks:
                    qmap = enc.qp_map()
                    lo, hi = int(qmap.min()), int(qmap.max())
                    rec["qp"] = lo if lo == hi else (lo, hi)
                mv = sd.get("MOTION_VECTORS") if vectors and hasattr(sd, "get") else None
                rec["vectors"] = mv.to_ndarray() if mv is not None else None
                out[int(f.pts)] = rec
    except av.error.FFmpegError as exc:
        raise ParameterError(f"the {codec} B-target stream does not decode: {exc}") from None
    return out


def code_b_target(
    past: Picture,
    future: Picture,
    target: Picture,
    *,
    extra: Picture | None = None,
    qp: int,
    extra_qp: int = 4,
    codec: str = "h264",
    preset: str = "medium",
    vectors: bool = False,
    skip_loop_filter: bool = False,
    extra_packet: bytes | None = None,
) -> BCoding:
    """Code `target` as a B picture between `past` and `future` (and `extra`) and decode it.

    Parameters
    ----------
    past, future, target : Picture
        One size and format; the target lies between the two references in time.
    extra : Picture, optional
        An extra reference in the target's list 0 (in front of the past picture), coded as a
        reference B picture at `extra_qp`; its bits are reported but belong to no configuration.
    qp : int
        QP of past, future and target (and the dummy), 0..51 on the standards' slice-QP scale.
    extra_qp : int
        QP of the extra picture (x264: at most the QP and at most 38 below it).
    codec : {'h264', 'hevc'}
        x264 or x265 through PyAV.
    preset : str
        Encoder speed preset.
    vectors : bool
        Export the target's motion vectors (H.264 only; FFmpeg ``flags2=+export_mvs``).
    skip_loop_filter : bool
        Decode without the deblocking filter (for reference-swap probing).
    extra_packet : bytes, optional
        Replace the extra picture's access unit before decoding (reference-swap probing).

    Returns
    -------
    BCoding

    Raises
    ------
    ParameterError
        Unknown codec, QPs out of range, mismatched pictures, or a stream that does not come out
        with the forced structure.

    Examples
    --------
    >>> r = code_b_target(past, future, target, extra=synthetic, qp=27)  # doctest: +SKIP
    >>> r.target_bits, r.types["target"], r.qps  # doctest: +SKIP
    (3792, 'B', {'past': 27, 'extra': 4, 'target': 27, 'future': 27})

    Notes
    -----
    ITU-T H.264 / H.265 B pictures from x264 / x265; the stream layouts and the QP plan are in the
    module docstring.
    """
    _check(past, future, target, extra, qp, extra_qp, codec)
    roles, types, bframes = b_layout(codec, extra is not None)
    layout = "plain" if extra is None else ("compact" if codec == "h264" else "lead")
    pics = {"past": past, "future": future, "target": target, "extra": extra, "dummy": past}
    offset = 6 * (past.bit_depth - 8) if codec == "h264" else 0  # x264 takes QP + QpBdOffset
    q, eq = int(qp) + offset, int(extra_qp) + offset
    if codec == "h264":
        params = _x264_params(q, eq, roles, bframes)
    else:
        params = _x265_params(q, eq, roles, bframes)
    encoded = _encode([(pics[r], t) for r, t in zip(roles, types)], codec, params, preset, past)
    if sorted(p for p, _ in encoded) != list(range(len(roles))):
        raise ParameterError(f"the encoder returned packets for pictures {sorted(p for p, _ in encoded)}")
    coding_roles = tuple(roles[p] for p, _ in encoded)
    if extra_packet is not None:
        encoded[coding_roles.index("extra")] = (encoded[coding_roles.index("extra")][0], bytes(extra_packet))
    dec = _decode(encoded, codec, past, vectors=vectors, skip_loop_filter=skip_loop_filter)
    if sorted(dec) != list(range(len(roles))):
        raise ParameterError(f"decoding gave pictures {sorted(dec)}, expected 0..{len(roles) - 1}")
    planned = {r: int(qp) for r in roles}
    if extra is not None:
        planned["extra"] = int(extra_qp)
    qps = {}
    for i, r in enumerate(roles):
        got = dec[i].get("qp")
        qps[r] = (
            planned[r] if got is None else (got - offset if isinstance(got, int) else tuple(g - offset for g in got))
        )
    return BCoding(
        codec=codec,
        layout=layout,
        params=params,
        display_roles=roles,
        coding_roles=coding_roles,
        packets=tuple(d for _, d in encoded),
        bits={roles[p]: 8 * len(d) for p, d in encoded},
        qps=qps,
        types={r: dec[i]["type"] for i, r in enumerate(roles)},
        decoded={r: dec[i]["picture"] for i, r in enumerate(roles)},
        vectors=dec[roles.index("target")].get("vectors"),
    )


def code_b_references(past: Picture, future: Picture, *, qp: int, codec: str = "h264", preset: str = "medium"):
    """The past and future pictures as every B-target stream decodes them: ``(past, future)``.

    Codes ``past (I) | future (P)`` with the B-stream settings (the future is coded before any B
    picture, so its reconstruction does not depend on the pictures between).
    """
    from synth.codec.encode import CODECS

    _check(past, future, future, None, qp, qp, codec)
    offset = 6 * (past.bit_depth - 8) if codec == "h264" else 0
    roles = ("past", "future")
    q = int(qp) + offset
    params = _x264_params(q, q, roles, 1) if codec == "h264" else _x265_params(q, q, roles, 1)
    encoded = _encode([(past, "I"), (future, "P")], codec, params, preset, past)
    dec = _decode(encoded, codec, past, vectors=False, skip_loop_filter=False)
    if sorted(dec) != [0, 1]:
        raise ParameterError(f"the {CODECS[codec][0]} reference stream decoded to {len(dec)} pictures")
    return dec[0]["picture"], dec[1]["picture"]


# ------------------------------------------------------------------------------------------------
# Which reference each block of the target uses


@dataclass(frozen=True, eq=False)
class ReferenceUsage:
    """Per-block reference use of a B target with an extra reference.

    Attributes
    ----------
    classes : ndarray of int8, shape (height, width)
        Per luma sample, a code of `USAGE_CLASSES`.
    shares : dict str -> float
        Fraction of the picture's luma samples per class label.
    blocks : list of dict
        One entry per predicted block: ``x, y, w, h`` (luma samples), ``lists`` (the lists its
        vectors come from: -1 list 0, +1 list 1), ``swap_change`` (mean absolute change of the
        block's decoded samples when the extra picture is swapped) and ``usage`` (the class code).
    coding : BCoding
        The stream that was analysed (loop filter on, as normally decoded).
    """

    classes: np.ndarray
    shares: dict[str, float]
    blocks: list[dict]
    coding: BCoding


def _distinguishable(picture: Picture, delta: int) -> Picture:
    """Every sample moved by `delta` towards the middle of the range: differs from `picture` everywhere."""
    mid = 1 << (picture.bit_depth - 1)
    d = delta << (picture.bit_depth - 8)
    planes = []
    for p in picture.planes:
        a = p.astype(np.int32)
        planes.append(np.where(a < mid, a + d, a - d).astype(p.dtype))
    if picture.chroma_format == "mono":
        return Picture(planes[0], None, None, "mono", picture.bit_depth)
    return Picture(planes[0], planes[1], planes[2], picture.chroma_format, picture.bit_depth)


def reference_usage(
    past: Picture,
    future: Picture,
    target: Picture,
    *,
    extra: Picture,
    qp: int,
    extra_qp: int = 4,
    preset: str = "medium",
    delta: int = 96,
) -> ReferenceUsage:
    """Which reference every block of the B target predicts from (H.264): exact, by swapping the extra.

    FFmpeg's exported motion vectors name the list of each vector (-1 list 0, +1 list 1) but not
    the reference index, and list 0 holds {extra, past}. So the stream is coded once more with the
    extra picture replaced by one that differs from it by `delta` in every sample; its extra access
    unit, spliced into the first stream, leaves the target's own syntax (vectors, reference indices,
    residual) untouched, so the target's decoded samples (both decoded without the loop filter)
    change exactly where its prediction came from the extra picture: by about `delta` where list 0
    alone pointed into it, by about `delta / 2` where it was averaged with the future picture.

    Parameters
    ----------
    past, future, target, extra : Picture
    qp, extra_qp, preset
        As in :func:`code_b_target` (x264 only).
    delta : int
        Size of the swap, on the 8-bit scale.

    Returns
    -------
    ReferenceUsage

    Notes
    -----
    Intra blocks carry no vector and are reported as such. Vectors and their lists come from
    FFmpeg's ``flags2=+export_mvs`` (``AVMotionVector.source``; block centres ``dst_x, dst_y``).
    """
    from collections import defaultdict

    base = code_b_target(past, future, target, extra=extra, qp=qp, extra_qp=extra_qp, preset=preset, vectors=True)
    plain = code_b_target(
        past, future, target, extra=extra, qp=qp, extra_qp=extra_qp, preset=preset, skip_loop_filter=True
    )
    swapped_stream = code_b_target(
        past, future, target, extra=_distinguishable(extra, delta), qp=qp, extra_qp=extra_qp, preset=preset
    )
    swapped = code_b_target(
        past,
        future,
        target,
        extra=extra,
        qp=qp,
        extra_qp=extra_qp,
        preset=preset,
        skip_loop_filter=True,
        extra_packet=swapped_stream.packets[swapped_stream.coding_roles.index("extra")],
    )
    scale = 1 << (target.bit_depth - 8)
    change = np.abs(swapped.decoded["target"].y.astype(np.int32) - plain.decoded["target"].y.astype(np.int32))
    change = change.astype(np.float64) / scale
    h, w = target.height, target.width
    classes = np.zeros((h, w), np.int8)
    groups: dict[tuple[int, int, int, int], set[int]] = defaultdict(set)
    if base.vectors is not None:
        for m in base.vectors:
            groups[(int(m["dst_x"]), int(m["dst_y"]), int(m["w"]), int(m["h"]))].add(int(m["source"]))
    blocks = []
    threshold = delta / 4.0  # halfway between 0 (no use) and delta/2 (averaged with the extra)
    for (cx, cy, bw, bh), lists in sorted(groups.items(), key=lambda kv: (kv[0][1], kv[0][0])):
        x0, y0 = cx - bw // 2, cy - bh // 2  # dst_x / dst_y are block centres
        ys, xs = slice(max(y0, 0), min(y0 + bh, h)), slice(max(x0, 0), min(x0 + bw, w))
        patch = change[ys, xs]
        mean = float(patch.mean()) if patch.size else 0.0
        from_extra = mean > threshold
        if lists == {-1}:
            code = 2 if from_extra else 1
        elif lists == {1}:
            code = 3
        else:
            code = 5 if from_extra else 4
        classes[ys, xs] = code
        blocks.append({"x": x0, "y": y0, "w": bw, "h": bh, "lists": sorted(lists), "swap_change": mean, "usage": code})
    total = float(h * w)
    shares = {label: float(np.count_nonzero(classes == k)) / total for k, label in USAGE_CLASSES.items()}
    return ReferenceUsage(classes=classes, shares=shares, blocks=blocks, coding=base)
