"""A small ITU-T H.265 header parser for the x265 tests and research prototypes.

Reads NAL units (Annex B start codes), the RBSP (emulation prevention removed, clause 7.4.2), and
VPS / SPS / PPS / slice-segment headers far enough for SliceQpY = 26 + init_qp_minus26 +
slice_qp_delta (clauses 7.3.2.2, 7.3.2.3, 7.3.6.1 and 7.4.7.1), the NAL unit type, the short-term
reference picture set and num_ref_idx. Written from the standard for streams with a single slice
per picture, no tiles, scaling lists or long-term references (what x265 writes with the settings
used in the tests). FFmpeg's HEVC decoder exports no QPs, hence this parser.
"""

from __future__ import annotations


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
