"""Research prototype: per-macroblock view of what an extra reference offers a B picture.

Not run by the suite or by make bench; kept beside results/encoder-value.md, whose per-block
findings it reproduces. For the middle picture of every reference pair 8 apart, with decoded
references at QP 27 (`synth.codec.bpicture.code_b_references`):

- ``own``: the encoder's own block prediction, approximated by the built-in estimator run from the
  target to each decoded reference (forward, backward, their average; the best per 16x16 block);
- per extra picture (lmmse, lmmse with the previous defaults, dis-medium): per 16x16 block SSE,
  the gain over ``own`` where it is lower, binned by the DIS flow's spread inside the block, its
  mean length and the DIS occlusion share; and the whole-picture statistics that turned out level
  (MSE, bi-prediction with the encoder's own MC, error correlation, high-frequency energy, share of
  8x8 blocks under RMS thresholds).

Usage: .venv/bin/python tests/benchmarks/prototypes/encoder_blocks.py CLIP LAST
"""

import sys

import numpy as np

from synth.codec.bpicture import code_b_references
from synth.io import open_clip
from synth.makers import get_maker
from synth.makers.optical_flow import dis_flow
from synth.motion.compensate import motion_compensate
from synth.motion.estimator import estimate_field, estimate_reference_fields
from synth.synthesis.params import SynthParams

B = 16
OLD = SynthParams(interpolation="sixtap", motion_cell=0, group_size=8)


def mb_sum(a):
    H, W = a.shape[:2]
    return (
        a[: H // B * B, : W // B * B].reshape(H // B, B, W // B, B, *a.shape[2:]).sum((1, 3)).reshape(-1, *a.shape[2:])
    )


def main(clip, last, qp=27):
    r = open_clip(clip)
    R = {k: [] for k in ("own", "lmmse", "lmmse-old", "dis", "fstd", "fmag", "occ")}
    whole = {}
    for p in range(0, last - 8 + 1, 8):
        f, t = p + 8, p + 4
        P, F, T = r.read(p), r.read(f), r.read(t)
        dP, dF = code_b_references(P, F, qp=qp)
        Ty = T.y.astype(float)
        mf = motion_compensate(dF, estimate_field(T, dF, coded_time=t, reference_time=f, qp=qp)).y.astype(float)
        mp = motion_compensate(dP, estimate_field(T, dP, coded_time=t, reference_time=p, qp=qp)).y.astype(float)
        own = np.minimum(np.minimum(mb_sum((mf - Ty) ** 2), mb_sum((mp - Ty) ** 2)), mb_sum(((mf + mp) / 2 - Ty) ** 2))
        R["own"].append(own)
        fl = estimate_reference_fields(dP, dF, past_time=p, future_time=f, qp=qp)
        lm = get_maker("lmmse")
        dis = get_maker("dis-medium").prepare(dP, dF, past_time=p, future_time=f).at_time(t)
        X = {
            "lmmse": lm.prepare(dP, dF, fields=fl, past_time=p, future_time=f).at_time(t).picture.y,
            "lmmse-old": lm.prepare(dP, dF, fields=fl, params=OLD, past_time=p, future_time=f).at_time(t).picture.y,
            "dis": dis.picture.y,
        }
        occ = dis.maps["occluded_in_future"] + dis.maps["occluded_in_past"]
        R["occ"].append(mb_sum(occ) / B / B)
        flow = dis_flow(dP.y, dF.y)
        s1, s2 = mb_sum(flow) / B / B, mb_sum(flow**2) / B / B
        R["fstd"].append(np.sqrt(np.maximum(s2 - s1**2, 0).sum(-1)))
        R["fmag"].append(np.hypot(s1[:, 0], s1[:, 1]))
        for k, x in X.items():
            e = x.astype(float) - Ty
            R[k].append(mb_sum(e**2))
            w = whole.setdefault(k, {"mse": [], "bi_future": [], "corr_future": []})
            w["mse"].append(np.mean(e**2))
            w["bi_future"].append(np.mean(((x + mf) / 2 - Ty) ** 2))
            w["corr_future"].append(np.corrcoef(e.ravel(), (mf - Ty).ravel())[0, 1])
    A = {k: np.concatenate(v) for k, v in R.items()}
    print(f"{len(A['own'])} blocks; own block-MC MSE {A['own'].mean() / B / B:.1f}")
    for k, w in whole.items():
        print(f"{k:<10} " + "  ".join(f"{n} {np.mean(v):.3f}" for n, v in w.items()))
    gains = {k: np.maximum(0, A["own"] - A[k]) / B / B for k in ("lmmse", "lmmse-old", "dis")}
    print("gain over own MC per sample (total): " + "  ".join(f"{k} {g.mean():.2f}" for k, g in gains.items()))
    for feat in ("fstd", "fmag", "occ"):
        x = A[feat]
        q = np.quantile(x, [0, 0.5, 0.8, 0.95, 1])
        print(feat)
        for lo, hi in zip(q[:-1], q[1:]):
            m = (x >= lo) & (x <= hi)
            print(
                f"  {lo:8.2f}-{hi:8.2f} n={m.sum():5d} gain "
                + "  ".join(f"{k} {g[m].sum() / len(g):.2f}" for k, g in gains.items())
            )


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]))
