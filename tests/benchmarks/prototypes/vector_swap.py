"""Research prototype: which of the estimator's cells cost the bits, found by swapping in DIS's flow.

Not run by the suite or by make bench; kept beside results/encoder-value.md. For the middle picture
of every reference pair 8 apart, with decoded references at each QP
(`synth.codec.bpicture.code_b_target`), the default cells (4x4, smoothed, refined) are compared
with the same cells carrying DIS-medium's flow averaged over each cell (OpenCV's DIS, T. Kroeger et
al., ECCV 2016), and with two hybrids: DIS's vector only where the two differ by more than
SWAP samples ("far"), or only where they differ by at most SWAP ("near"). Every set of cells goes
through the same lmmse synthesis (no further smoothing or refinement). Prints the BD-rate of each
picture as an extra reference against no extra reference (VCEG-M33, `synth.codec.bdrate`), next to
DIS-medium's own interpolation, and the share of cells swapped.

Usage: .venv/bin/python tests/benchmarks/prototypes/vector_swap.py CLIP LAST [SWAP]
"""

import sys
import time

import numpy as np

from synth.codec.bdrate import bd_rate
from synth.codec.bpicture import code_b_target
from synth.field import VectorField
from synth.flow import dis_flow, luma8
from synth.io import open_clip
from synth.makers import get_maker
from synth.metrics import picture_psnr
from synth.motion.estimator import estimate_reference_fields
from synth.synthesis.flow_guard import flow_per_cell
from synth.synthesis.params import SynthParams
from synth.synthesis.refine_cells import refine_fields
from synth.synthesis.smooth_motion import smooth_fields
from synth.synthesis.synthesiser import synthesise_with_maps

QPS = (22, 27, 32, 37)
GAP = 8
AS_GIVEN = SynthParams(motion_smoothing=1, cell_refinement=0, flow_guard=0)


def with_vectors(cells: VectorField, dx, dy) -> VectorField:
    return VectorField.from_arrays(
        width=cells.width, height=cells.height, coded_time=cells.coded_time, reference_time=cells.reference_time,
        x=cells.x, y=cells.y, w=cells.w, h=cells.h, dx=dx, dy=dy, intra=cells.intra,
    )  # fmt: skip


def main() -> None:
    clip, last = sys.argv[1], int(sys.argv[2])
    swap = float(sys.argv[3]) if len(sys.argv) > 3 else 8.0
    reader = open_clip(clip)
    rows, shares = [], []
    start = time.time()
    names = ("ours", "dis-cells", "far", "near", "dis-medium")
    for p in range(0, min(last + 1, len(reader)) - GAP, GAP):
        f, t = p + GAP, p + GAP // 2
        past, future, target = reader.read(p), reader.read(f), reader.read(t)
        for qp in QPS:
            anchor = code_b_target(past, future, target, qp=qp)
            dp, df = anchor.decoded["past"], anchor.decoded["future"]
            fields = estimate_reference_fields(dp, df, past_time=p, future_time=f, qp=qp)
            cells = refine_fields(smooth_fields(fields, cell=4, smoothing=8), {float(p): dp, float(f): df})[0]
            fx, fy = flow_per_cell(cells, dis_flow(luma8(df), luma8(dp)))
            far = np.hypot(cells.dx - fx, cells.dy - fy) / 4 > swap
            far &= ~np.asarray(cells.intra, bool)
            shares.append(float(far.mean()))
            sets = {
                "ours": cells,
                "dis-cells": with_vectors(
                    cells, np.where(cells.intra, cells.dx, fx), np.where(cells.intra, cells.dy, fy)
                ),
                "far": with_vectors(cells, np.where(far, fx, cells.dx), np.where(far, fy, cells.dy)),
                "near": with_vectors(
                    cells, np.where(far | cells.intra, cells.dx, fx), np.where(far | cells.intra, cells.dy, fy)
                ),
            }
            pictures = {
                k: synthesise_with_maps(dp, df, [v], t=0.5, past_time=p, future_time=f, params=AS_GIVEN).picture
                for k, v in sets.items()
            }
            pictures["dis-medium"] = (
                get_maker("dis-medium").prepare(dp, df, past_time=p, future_time=f).at_time(t).picture
            )
            row = {
                "qp": qp,
                "bits": {"real": anchor.target_bits},
                "psnr": {"real": picture_psnr(anchor.decoded["target"], target)["Y"]},
            }
            row["picture_psnr"] = {}
            for name, pic in pictures.items():
                coded = code_b_target(past, future, target, extra=pic, qp=qp)
                row["bits"][name] = coded.target_bits
                row["psnr"][name] = picture_psnr(coded.decoded["target"], target)["Y"]
                row["picture_psnr"][name] = picture_psnr(pic, target)["Y"]
            rows.append(row)
        print(
            f"pair {p} done, {time.time() - start:.0f} s, far share {np.mean(shares[-4:]):.3f}",
            file=sys.stderr,
            flush=True,
        )

    def curve(name):
        bits = [sum(x["bits"][name] for x in rows if x["qp"] == q) for q in QPS]
        psnr = [float(np.mean([x["psnr"][name] for x in rows if x["qp"] == q])) for q in QPS]
        return bits, psnr

    ref_bits, ref_psnr = curve("real")
    print(f"cells swapped in 'far': {np.mean(shares):.3f}")
    for name in names:
        bits, psnr = curve(name)
        pic = np.mean([x["picture_psnr"][name] for x in rows])
        print(f"{name:<11} BD-rate {bd_rate(ref_bits, ref_psnr, bits, psnr):+.2f} %   picture PSNR-Y {pic:.2f} dB")


if __name__ == "__main__":
    main()
