"""How fast synth.io reads a 1080p 8-bit YUV4MPEG2 clip, against reading the same bytes raw.

Writes a 1920x1080 4:2:0 8-bit Y4M of --frames frames (default 60, ~187 MB) to a temporary folder,
then measures, each --repeat times (best kept):

* raw read: the file read start to end in 8 MiB chunks into a reused buffer (``dd``-like);
* Y4MReader: opening (header and FRAME-line index) plus reading every frame as a `Picture`;
* Y4MReader random order: every frame read once in a shuffled order.

"cold-ish" runs first evict the file from the page cache with ``posix_fadvise(DONTNEED)`` (no root
needed; the device's own cache may still hold it); "warm" runs read it from the page cache.

Usage: python tests/benchmarks/read_speed.py [--frames 60] [--repeat 3] [--dir /some/disk] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from synth.io import Y4MReader, write_y4m
from synth.picture import Picture

W, H = 1920, 1080


def make_clip(path: Path, frames: int) -> int:
    rng = np.random.default_rng(0)
    bank = [
        Picture(
            rng.integers(16, 236, (H, W), dtype=np.uint8),
            rng.integers(16, 241, (H // 2, W // 2), dtype=np.uint8),
            rng.integers(16, 241, (H // 2, W // 2), dtype=np.uint8),
        )
        for _ in range(4)
    ]
    return write_y4m(path, (bank[i % 4] for i in range(frames)))


def evict(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
        if hasattr(os, "posix_fadvise"):
            os.posix_fadvise(fd, 0, 0, os.POSIX_FADV_DONTNEED)
    finally:
        os.close(fd)


def raw_read(path: Path) -> int:
    buf = bytearray(8 << 20)
    total = 0
    with open(path, "rb", buffering=0) as fh:
        while n := fh.readinto(buf):
            total += n
    return total


def reader_read(path: Path, order=None) -> int:
    with Y4MReader(path) as r:
        idx = range(len(r)) if order is None else order
        for i in idx:
            r.read(i)
        return len(idx)


def timed(fn, *args, cold: bool, path: Path, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        if cold:
            evict(path)
        t0 = time.perf_counter()
        fn(*args)
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=60)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--dir", type=Path, default=None, help="folder for the temporary clip (default: system temp)")
    ap.add_argument("--json", action="store_true", help="print JSON instead of a table")
    args = ap.parse_args()

    with tempfile.TemporaryDirectory(dir=args.dir) as tmp:
        path = Path(tmp) / f"bench_{W}x{H}.y4m"
        make_clip(path, args.frames)
        size = path.stat().st_size
        frame_bytes = W * H * 3 // 2
        order = list(np.random.default_rng(1).permutation(args.frames))
        rows = []
        for label, fn, fargs in (
            ("raw read (8 MiB chunks)", raw_read, (path,)),
            ("Y4MReader, in order", reader_read, (path,)),
            ("Y4MReader, shuffled", reader_read, (path, order)),
        ):
            for cold in (True, False):
                sec = timed(fn, *fargs, cold=cold, path=path, repeat=args.repeat)
                rows.append(
                    {
                        "what": label,
                        "cache": "cold-ish" if cold else "warm",
                        "seconds": round(sec, 4),
                        "MB_per_s": round(size / sec / 1e6, 1),
                        "frames_per_s": round(args.frames / sec, 1)
                        if fn is not raw_read
                        else round(size / frame_bytes / sec, 1),
                    }
                )
        result = {"clip": f"{W}x{H} 4:2:0 8-bit, {args.frames} frames, {size / 1e6:.1f} MB", "rows": rows}
    if args.json:
        print(json.dumps(result, indent=2))
        return
    print(result["clip"])
    print(f"{'what':<26} {'cache':<9} {'seconds':>8} {'MB/s':>8} {'frames/s':>9}")
    for r in rows:
        print(f"{r['what']:<26} {r['cache']:<9} {r['seconds']:>8.3f} {r['MB_per_s']:>8.1f} {r['frames_per_s']:>9.1f}")
    print("(frames/s of the raw read = bytes per second / bytes per frame)")


if __name__ == "__main__":
    main()
