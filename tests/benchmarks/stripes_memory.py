"""Peak memory and time of a 3840x2160 synthesis, whole picture versus horizontal stripes.

    .venv/bin/python tests/benchmarks/stripes_memory.py [--size 3840x2160] [--stripe-rows 256 512] [--no-whole]

The two references are written to a temporary Y4M file first; each measurement runs in a fresh
child process (so peaks do not mix) that reads them, as a study job would, and reports:

* peak resident set size of the process (``VmHWM`` of ``/proc/self/status`` on Linux, else
  ``resource.getrusage(RUSAGE_SELF).ru_maxrss``), which includes the interpreter and its
  libraries (the peak before synthesis is printed too); the inputs are made in another child
  process, so no parent's memory is counted;
* peak of Python-visible allocations during the synthesis (``tracemalloc``; numpy registers its
  array buffers with it);
* wall time, and a SHA-256 of the output planes: stripes must match the whole picture bit for bit.

Input: the scikit-image "astronaut" photograph (scikit-image's bundled data) scaled to the picture
size as the past reference; the future reference is the same picture moved 8 samples right and
3 down; the field (16x16 blocks, quarter-pel) codes that motion from the future to the past.
The target requirement is a peak RSS under 2 GB for a 4K 4:2:0 8-bit picture with stripes.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc


def _make_inputs(path: str, width: int, height: int) -> None:
    """Write the two references to a Y4M file (done once, in the parent process)."""
    import cv2
    import numpy as np
    from skimage import data

    from synth.io import rgb_to_ycbcr420, write_y4m

    rgb = data.astronaut()
    big = cv2.resize(rgb[..., ::-1], (width, height), interpolation=cv2.INTER_CUBIC)
    shift = np.float32([[1, 0, 8], [0, 1, 3]])
    moved = cv2.warpAffine(big, shift, (width, height), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    write_y4m(path, [rgb_to_ycbcr420(big), rgb_to_ycbcr420(moved)])


def _peak_rss_mb() -> float:
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _child(mode: str, path: str, stripe_rows: int) -> dict:
    from synth import VectorField, synthesise
    from synth.io import open_clip
    from synth.study.stripes import synthesise_striped

    with open_clip(path) as clip:
        past, future = clip.read(0), clip.read(1)
    w, h = past.width, past.height
    # Blocks on the future picture (time 2) find their content 8 left and 3 up on the past (time 0).
    field = VectorField.uniform_grid(w, h, block=16, coded_time=2, reference_time=0, dx=-32, dy=-12)
    base = _peak_rss_mb()
    tracemalloc.start()
    t0 = time.perf_counter()
    if mode == "whole":
        pic = synthesise(past, future, [field], t=0.5)
    else:
        pic = synthesise_striped(past, future, [field], t=0.5, stripe_rows=stripe_rows)
    seconds = time.perf_counter() - t0
    _, traced = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    digest = hashlib.sha256(b"".join(p.tobytes() for p in pic.planes)).hexdigest()[:16]
    return {
        "mode": mode if mode == "whole" else f"stripes of {stripe_rows} rows",
        "seconds": round(seconds, 2),
        "peak_rss_mb": round(_peak_rss_mb(), 1),
        "rss_before_mb": round(base, 1),
        "traced_peak_mb": round(traced / 2**20, 1),
        "sha256": digest,
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", default="3840x2160")
    ap.add_argument("--stripe-rows", type=int, nargs="+", default=[512])
    ap.add_argument("--no-whole", action="store_true", help="skip the whole-picture run")
    ap.add_argument("--child", nargs=3, metavar=("MODE", "Y4M", "ROWS"), help=argparse.SUPPRESS)
    ap.add_argument("--make-inputs", nargs=3, metavar=("Y4M", "W", "H"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.make_inputs:
        _make_inputs(args.make_inputs[0], int(args.make_inputs[1]), int(args.make_inputs[2]))
        return 0
    if args.child:
        mode, path, rows = args.child
        print(json.dumps(_child(mode, path, int(rows))))
        return 0
    w, h = (int(v) for v in args.size.lower().split("x"))
    runs = [("stripes", r) for r in args.stripe_rows] + ([] if args.no_whole else [("whole", 0)])
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "refs.y4m")
        subprocess.run([sys.executable, __file__, "--make-inputs", path, str(w), str(h)], check=True)
        for mode, rows in runs:
            out = subprocess.run(
                [sys.executable, __file__, "--child", mode, path, str(rows)], capture_output=True, text=True
            )
            if out.returncode:
                print(out.stderr, file=sys.stderr)
                return out.returncode
            results.append(json.loads(out.stdout.strip().splitlines()[-1]))
    print(f"synthesis of one {w}x{h} 4:2:0 8-bit picture (16x16 field, t = 0.5)")
    for r in results:
        print(
            f"{r['mode']:<22} {r['seconds']:7.2f} s   peak RSS {r['peak_rss_mb']:8.1f} MB "
            f"(before synthesis {r['rss_before_mb']:.1f})"
            f"   traced peak {r['traced_peak_mb']:8.1f} MB   output {r['sha256']}"
        )
    digests = {r["sha256"] for r in results}
    print("outputs identical:", len(digests) == 1)
    return 0 if len(digests) == 1 else 1


if __name__ == "__main__":
    sys.exit(main())
