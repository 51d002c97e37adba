"""Research prototype: a decoder-side choice per block between two synthesised pictures.

Not run by the suite or by make bench; kept beside results/encoder-value.md (negative results).
For the middle picture of every reference pair 8 apart, with decoded references at each QP
(`synth.codec.bpicture.code_b_target`): picture ``a`` from vectors at the point's QP, picture ``b``
from vectors at ALT_QP, and ``sel`` taking each BLOCK x BLOCK block from the picture whose mean
``predicted_error`` map (the synthesiser's own error estimate, no target needed) is lower. Prints
the BD-rate of each as an extra reference against no extra reference (VCEG-M33, `synth.codec.bdrate`).

Usage: .venv/bin/python tests/benchmarks/prototypes/block_choice.py CLIP LAST ALT_QP [BLOCK]
"""

import sys
import time

import numpy as np

from synth.codec.bdrate import bd_rate
from synth.codec.bpicture import code_b_target
from synth.io import open_clip
from synth.metrics import picture_psnr
from synth.motion.estimator import estimate_reference_fields
from synth.picture import Picture
from synth.synthesis.synthesiser import synthesise_with_maps

QPS = (22, 27, 32, 37)
GAP = 8


def combine(pa: Picture, pb: Picture, ea: np.ndarray, eb: np.ndarray, block: int) -> tuple[Picture, float]:
    """Each block from the picture of lower mean predicted error; the share taken from `pb`."""
    H, W = pa.height, pa.width
    h4, w4 = -(-H // block), -(-W // block)

    def per_block(e):
        pad = np.pad(e, ((0, h4 * block - H), (0, w4 * block - W)), mode="edge")
        return pad.reshape(h4, block, w4, block).mean(axis=(1, 3))

    choose_b = per_block(eb) < per_block(ea)
    m = np.kron(choose_b, np.ones((block, block), bool))[:H, :W]
    planes = []
    for a, b in zip(pa.planes, pb.planes):
        sy, sx = H // a.shape[0], W // a.shape[1]
        planes.append(np.where(m[::sy, ::sx][: a.shape[0], : a.shape[1]], b, a))
    return Picture(*planes, chroma_format=pa.chroma_format, bit_depth=pa.bit_depth), float(choose_b.mean())


def main() -> None:
    clip, last, alt_qp = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    block = int(sys.argv[4]) if len(sys.argv) > 4 else 16
    reader = open_clip(clip)
    rows = []
    start = time.time()
    for p in range(0, min(last + 1, len(reader)) - GAP, GAP):
        f, t = p + GAP, p + GAP // 2
        past, future, target = reader.read(p), reader.read(f), reader.read(t)
        for qp in QPS:
            anchor = code_b_target(past, future, target, qp=qp)
            dp, df = anchor.decoded["past"], anchor.decoded["future"]
            made = {}
            for name, vqp in (("a", qp), ("b", alt_qp)):
                fields = estimate_reference_fields(dp, df, past_time=p, future_time=f, qp=vqp)
                made[name] = synthesise_with_maps(dp, df, fields, t=0.5, past_time=p, future_time=f)
            sel, share = combine(
                made["a"].picture, made["b"].picture,
                made["a"].maps["predicted_error"], made["b"].maps["predicted_error"], block,
            )  # fmt: skip
            row = {"qp": qp, "share": share, "bits": {"real": anchor.target_bits}}
            row["psnr"] = {"real": picture_psnr(anchor.decoded["target"], target)["Y"]}
            for name, pic in (("a", made["a"].picture), ("b", made["b"].picture), ("sel", sel)):
                coded = code_b_target(past, future, target, extra=pic, qp=qp)
                row["bits"][name] = coded.target_bits
                row["psnr"][name] = picture_psnr(coded.decoded["target"], target)["Y"]
            rows.append(row)
        share = np.mean([x["share"] for x in rows[-len(QPS) :]])
        print(f"pair {p} done, {time.time() - start:.0f} s, share of b {share:.2f}", file=sys.stderr, flush=True)

    def curve(name):
        bits = [sum(x["bits"][name] for x in rows if x["qp"] == q) for q in QPS]
        psnr = [float(np.mean([x["psnr"][name] for x in rows if x["qp"] == q])) for q in QPS]
        return bits, psnr

    ref_bits, ref_psnr = curve("real")
    for name in ("a", "b", "sel"):
        bits, psnr = curve(name)
        print(f"{name:<4} BD-rate {bd_rate(ref_bits, ref_psnr, bits, psnr):+.2f} %")


if __name__ == "__main__":
    main()
