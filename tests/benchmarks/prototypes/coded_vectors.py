"""Read coded motion vectors from real bitstreams through PyAV (FFmpeg), and
code test clips with x264 in a forced hierarchical-B structure.

Project convention for the returned records: a block whose top-left corner is
at (x, y) on the *coded* picture, with vector (dx_qpel, dy_qpel) in quarter
luma samples, has its content at (x + dx_qpel/4, y + dy_qpel/4) on the
*reference* picture.

Conversion from FFmpeg's AVMotionVector (pinned experimentally, FINDINGS.md):
    x = dst_x - w // 2          (dst_x, dst_y are block CENTRES)
    y = dst_y - h // 2
    dx_qpel = motion_x * 4 // motion_scale    (motion_x / motion_scale = src_x - dst_x,
    dy_qpel = motion_y * 4 // motion_scale     in luma samples, exact; src_x is truncated)
    source = -1: list0 vector, +1: list1 vector (one record per list, so a
    bi-predicted block has two records).
Which *picture* a list points to is not exported by FFmpeg (no ref_idx, no POC);
read_stream_vectors infers it from the coded structure assuming ONE reference
per list (x264 `ref=1`, MPEG-1/2, MPEG-4 Part 2): the list0 reference is the
nearest reference picture earlier in display order among those already decoded,
the list1 reference the nearest later one.
"""

from __future__ import annotations

import io
import warnings
from collections.abc import Sequence

import av
import numpy as np

__all__ = [
    "RECORD_DTYPE",
    "UnsupportedCodecError",
    "read_stream_vectors",
    "encode_x264_hierarchy",
    "x264_hierarchy_refs",
    "x264_params",
]

RECORD_DTYPE = np.dtype(
    [
        ("source", np.int8),  # -1 list0 (past ref), +1 list1 (future ref)
        ("x", np.int16),  # top-left corner on the coded picture, luma samples
        ("y", np.int16),
        ("w", np.uint8),
        ("h", np.uint8),
        ("dx_qpel", np.int32),  # quarter luma samples, coded -> reference
        ("dy_qpel", np.int32),
    ]
)

# Decoders that honour flags2=+export_mvs (FFmpeg's mpegvideo family + H.264).
_MV_CODECS = {
    "h264",
    "mpeg2video",
    "mpeg1video",
    "mpeg4",
    "h263",
    "h263p",
    "msmpeg4v2",
    "msmpeg4v3",
    "wmv1",
    "wmv2",
    "flv",
    "svq3",
}
# B pictures of these decoders come out with all-zero vectors (B motion is never
# written to the exported motion_val table); measured for mpeg4, see FINDINGS.md.
_ZERO_B_CODECS = {"mpeg4", "h263", "h263p", "msmpeg4v2", "msmpeg4v3", "wmv1", "wmv2", "flv"}


class UnsupportedCodecError(ValueError):
    pass


# ----------------------------------------------------------------------------- reading


def _nal_ref_idc_h264(data: bytes, nal_len_size: int | None) -> int | None:
    """nal_ref_idc of the first VCL NAL (type 1 or 5) of an access unit."""
    if nal_len_size is None:  # Annex-B start codes
        j = 0
        while True:
            j = data.find(b"\x00\x00\x01", j)
            if j < 0 or j + 3 >= len(data):
                return None
            h = data[j + 3]
            if (h & 31) in (1, 5):
                return (h >> 5) & 3
            j += 3
    j = 0
    while j + nal_len_size < len(data):  # length-prefixed (avcC: mp4/mkv)
        n = int.from_bytes(data[j : j + nal_len_size], "big")
        h = data[j + nal_len_size]
        if (h & 31) in (1, 5):
            return (h >> 5) & 3
        j += nal_len_size + n
    return None


def _convert(mv: np.ndarray, square: bool) -> np.ndarray:
    w = mv["w"].astype(np.int32)
    h = mv["h"].astype(np.int32)
    out = np.empty(len(mv), RECORD_DTYPE)
    out["source"] = np.sign(mv["source"])
    out["x"] = mv["dst_x"].astype(np.int32) - w // 2
    out["y"] = mv["dst_y"].astype(np.int32) - h // 2
    out["w"] = w
    out["h"] = h
    scale = mv["motion_scale"].astype(np.int64)
    out["dx_qpel"] = (mv["motion_x"].astype(np.int64) * 4) // scale  # scale is 2 or 4: exact
    out["dy_qpel"] = (mv["motion_y"].astype(np.int64) * 4) // scale
    if square:
        out = _split_square(out)
    return out


def _split_square(rec: np.ndarray) -> np.ndarray:
    """Split rectangular blocks (16x8, 8x16) into squares of side min(w, h)."""
    rect = rec["w"] != rec["h"]
    if not rect.any():
        return rec
    parts = [rec[~rect]]
    for r in rec[rect]:
        s = min(int(r["w"]), int(r["h"]))
        for oy in range(0, int(r["h"]), s):
            for ox in range(0, int(r["w"]), s):
                q = r.copy()
                q["x"] += ox
                q["y"] += oy
                q["w"] = q["h"] = s
                parts.append(q[None])
    return np.concatenate(parts)


def read_stream_vectors(path, fmt: str | None = None, square: bool = False, strict_refs: bool = True) -> list[dict]:
    """Decode a stream with flags2=+export_mvs and return, per picture in display order:

    dict(display_index, decode_index, pict_type ('I','P','B',...), time (seconds, or
         display_index if the stream has no timestamps), is_reference,
         refs={-1: display_index of the list0 reference or None, +1: list1 ...},
         has_vectors (False when the decoder attached no MOTION_VECTORS side data),
         records (numpy array of RECORD_DTYPE: source, x, y, w, h, dx_qpel, dy_qpel))

    `path` may be a filename, bytes or a file object.  Raises UnsupportedCodecError for
    codecs whose FFmpeg decoder exports no motion vectors (e.g. HEVC, AV1, VP9).
    """
    src = io.BytesIO(path) if isinstance(path, (bytes, bytearray)) else path
    container = av.open(src, format=fmt)
    try:
        if not container.streams.video:
            raise UnsupportedCodecError("no video stream")
        st = container.streams.video[0]
        name = st.codec_context.name
        if name not in _MV_CODECS:
            raise UnsupportedCodecError(
                f"codec '{name}': FFmpeg's {name} decoder does not export coded motion vectors "
                f"(flags2=+export_mvs is only implemented for H.264, MPEG-1/2, MPEG-4 Part 2 "
                f"and H.263-family decoders); re-code the source, e.g. with x264"
            )
        st.codec_context.options = {"flags2": "+export_mvs"}
        nal_len = None
        ext = st.codec_context.extradata
        if name == "h264" and ext and ext[0] == 1 and len(ext) > 4:
            nal_len = (ext[4] & 3) + 1
        tb = st.time_base

        dec_info = []  # per decode index: (orig_pts, ref_idc or None)
        frames = []  # output (display) order

        def take(fr):
            sd = fr.side_data.get("MOTION_VECTORS")
            mv = sd.to_ndarray().copy() if sd is not None else None
            frames.append((fr.pts, int(fr.pict_type), mv))

        for pkt in container.demux(st):
            if pkt.size:
                ref_idc = _nal_ref_idc_h264(bytes(pkt), nal_len) if name == "h264" else None
                dec_info.append((pkt.pts, ref_idc))
                # carry the decode index through the decoder in pts (decoders keep the pts of
                # the packet that held the picture and reorder frames by their own POC)
                pkt.pts = pkt.dts = len(dec_info) - 1
            for fr in st.decode(pkt):
                take(fr)
    finally:
        container.close()

    letters = {1: "I", 2: "P", 3: "B", 4: "S", 5: "SI", 6: "SP", 7: "BI"}
    pics = []
    for disp, (di, pt, mv) in enumerate(frames):
        orig_pts, ref_idc = dec_info[di] if di is not None and 0 <= di < len(dec_info) else (None, None)
        ptl = letters.get(pt, "?")
        if name == "h264":
            is_ref = bool(ref_idc) if ref_idc is not None else ptl != "B"
        else:
            is_ref = ptl in ("I", "P", "S")
        t = float(orig_pts * tb) if (orig_pts is not None and tb is not None) else float(disp)
        pics.append(
            dict(
                display_index=disp,
                decode_index=di,
                pict_type=ptl,
                time=t,
                is_reference=is_ref,
                has_vectors=mv is not None,
                records=_convert(mv, square) if mv is not None and len(mv) else np.zeros(0, RECORD_DTYPE),
            )
        )

    # reference inference (one reference per list)
    for p in pics:
        di = p["decode_index"]
        cands = [
            q
            for q in pics
            if q["is_reference"] and q["decode_index"] is not None and di is not None and q["decode_index"] < di
        ]
        past = [q["display_index"] for q in cands if q["display_index"] < p["display_index"]]
        fut = [q["display_index"] for q in cands if q["display_index"] > p["display_index"]]
        p["refs"] = {-1: max(past) if past else None, +1: min(fut) if fut else None}
        srcs = set(np.unique(p["records"]["source"]).tolist())
        for s in srcs:
            if p["refs"][s] is None:
                msg = (
                    f"picture {p['display_index']} ({p['pict_type']}) has list{(s + 1) // 2} "
                    f"vectors but no candidate reference was found"
                )
                if strict_refs:
                    raise RuntimeError(msg)
                warnings.warn(msg)
        if name in _ZERO_B_CODECS and p["pict_type"] == "B" and len(p["records"]):
            warnings.warn(
                f"{name}: B picture {p['display_index']}: FFmpeg exports zero vectors "
                f"for B pictures of this codec; records are not usable"
            )
            p["unreliable"] = True
    for p in pics:
        p["refs_time"] = {s: (pics[r]["time"] if r is not None else None) for s, r in p["refs"].items()}
    return pics


# ----------------------------------------------------------------------------- coding


def x264_params(gop: int, qp: int, uniform_qp: bool = True, extra: str = "") -> str:
    """x264-params string for the forced hierarchy (gop = anchor spacing, power of two)."""
    ps = [
        f"bframes={gop - 1}",
        "b-pyramid=strict" if gop > 2 else "b-pyramid=none",
        "b-adapt=0",
        "ref=1",
        "keyint=100000",
        "min-keyint=100000",
        "scenecut=0",
        "open-gop=0",
        "weightp=0",
        f"qp={qp}",
    ]
    if uniform_qp:
        ps += ["ipratio=1.0", "pbratio=1.0"]
    if extra:
        ps.append(extra)
    return ":".join(ps)


def _types(n: int, gop: int) -> list[str]:
    t = ["I" if k == 0 else ("P" if k % gop == 0 else "B") for k in range(n)]
    if n > 1:
        t[-1] = "P" if t[-1] == "B" else t[-1]  # a trailing mini-GOP must end on a P
    return t


def encode_x264_hierarchy(
    pictures: Sequence[tuple[np.ndarray, np.ndarray, np.ndarray]],
    qp: int = 22,
    gop: int = 4,
    fps: int = 25,
    uniform_qp: bool = True,
    extra_params: str = "",
) -> bytes:
    """Code 8-bit 4:2:0 pictures [(Y, U, V), ...] with libx264 (via PyAV) in a forced
    hierarchical-B structure and return a raw Annex-B H.264 stream.

    Picture types are forced per picture (VideoFrame.pict_type): 0 -> I, k % gop == 0 -> P,
    otherwise B; ref=1, strict B-pyramid, no scene cuts, no adaptive B decision.
    gop=4 gives a full dyadic hierarchy:  P(k+4) <- k;  B(k+2) ref (k, k+4);
    B(k+1) (k, k+2);  B(k+3) (k+2, k+4).  gop=8 does NOT give a full dyadic
    hierarchy: x264 keeps only the middle B as reference (see x264_hierarchy_refs).
    """
    if gop < 1 or gop & (gop - 1) or gop > 16:
        raise ValueError("gop must be a power of two <= 16")
    H, W = pictures[0][0].shape
    if H % 2 or W % 2:
        raise ValueError("4:2:0 needs even dimensions")
    buf = io.BytesIO()
    out = av.open(buf, "w", format="h264")
    st = out.add_stream("libx264", rate=fps)
    st.width, st.height, st.pix_fmt = W, H, "yuv420p"
    st.codec_context.options = {"x264-params": x264_params(gop, qp, uniform_qp, extra_params), "threads": "1"}
    types = _types(len(pictures), gop)
    PT = av.video.frame.PictureType
    tmap = {"I": PT.I, "P": PT.P, "B": PT.B}
    for k, (Y, U, V) in enumerate(pictures):
        if Y.dtype != np.uint8 or U.shape != (H // 2, W // 2) or V.shape != (H // 2, W // 2):
            raise ValueError("expected uint8 planes Y (H, W), U and V (H/2, W/2)")
        arr = np.concatenate([Y, U.reshape(-1, W), V.reshape(-1, W)], 0)
        f = av.VideoFrame.from_ndarray(np.ascontiguousarray(arr), format="yuv420p")
        f.pts = k
        f.pict_type = tmap[types[k]]
        for p in st.encode(f):
            out.mux(p)
    for p in st.encode(None):
        out.mux(p)
    out.close()
    return buf.getvalue()


def x264_hierarchy_refs(n: int, gop: int) -> dict[int, tuple[int | None, int | None]]:
    """Expected display index -> (list0 ref, list1 ref) of encode_x264_hierarchy, following
    x264's rules: anchors (I/P) every `gop`; in each run of b = gop-1 (or fewer, at the end)
    B pictures, only the one at offset (b-1)//2 + 1 is kept as reference (b > 1); it is
    coded right after the anchor, the other Bs after it, each referencing the nearest
    earlier / later reference picture."""
    types = _types(n, gop)
    anchors = [k for k in range(n) if types[k] != "B"]
    refs = {0: (None, None)}
    for a0, a1 in zip(anchors, anchors[1:]):
        refs[a1] = (a0, None)
        b = a1 - a0 - 1
        mid = a0 + (b - 1) // 2 + 1 if b > 1 else None
        for k in range(a0 + 1, a1):
            if k == mid:
                refs[k] = (a0, a1)
            elif mid is None:
                refs[k] = (a0, a1)
            else:
                refs[k] = (a0, mid) if k < mid else (mid, a1)
    return refs
