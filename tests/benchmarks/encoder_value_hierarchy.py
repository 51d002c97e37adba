"""The synthetic picture against optical flow as a third reference of every B picture of dyadic GOPs.

`synth.codec.rdmeasure.measure_clip` with the B-picture set-up (`target_picture="B"`), decoded
references and ``gop_size=8``: every B picture of each whole GOP of 8 is coded between its own
hierarchy references (layer 1: gap 8, layer 2: gap 4, layer 3: gap 2), without an extra reference
and with each maker's picture as one. Makers: ``lmmse`` (the defaults), ``dis-medium``, ``lmmse``
with the previous defaults (six-tap sampling on the coded blocks, ``lmmse-sixtap-blocks``),
``lmmse`` without cell refinement and flow guard (``lmmse-unrefined``) and ``obmc``; ``--makers`` picks some, and
``--variant NAME=KEY:VALUE,...`` adds ``lmmse`` with those parameters changed (repeatable);
``--smooth-weight`` replaces the estimator's coarsest-level smoothness weight for the run. Vectors: the built-in estimator at each point's QP (``--vectors x264`` for PyAV's x264,
``--two-way`` for both coding directions).

Usage::

    .venv/bin/python tests/benchmarks/encoder_value_hierarchy.py CLIP --last 112 --json OUT.json

Prints the BD-rate of each configuration against no extra reference, per layer and over the GOP's
bits (G. Bjontegaard, VCEG-M33, 2001; `synth.codec.bdrate`). Results of this release:
results/encoder-value.md and results/encoder-value-hierarchy.json.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

from encoder_value import parse_variant  # this directory is on sys.path when run as a script

from synth.codec.rdmeasure import measure_clip, summarise_clips
from synth.io import open_clip
from synth.makers import get_maker
from synth.makers.base import Maker
from synth.motion.sources import parse_vector_source
from synth.synthesis.params import SynthParams

#: The synthesiser's defaults before this release's encoder-loop measurements.
PREVIOUS_DEFAULTS = SynthParams(interpolation="sixtap", motion_cell=0, group_size=8, cell_refinement=0)
#: This release's defaults without the decoder-side refinement of the motion cells and without the flow guard.
UNREFINED = SynthParams(cell_refinement=0, flow_guard=0)
MAKERS = ("lmmse", "dis-medium", "lmmse-sixtap-blocks", "lmmse-unrefined", "obmc")


def with_params(name: str, params: SynthParams) -> Maker:
    """The ``lmmse`` maker under another name, always with `params`."""
    base = get_maker("lmmse")

    def prepare(past, future, *, fields, params=None):
        return base.prepare_function(past, future, fields=fields, params=fixed)

    fixed = params
    return Maker(name, base.picture_function, True, base.summary, prepare)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip")
    ap.add_argument("--last", type=int, default=None, help="last picture used (default: the whole clip)")
    ap.add_argument("--vectors", default="estimate")
    ap.add_argument("--two-way", action="store_true")
    ap.add_argument("--json", default=None)
    ap.add_argument("--makers", default=",".join(MAKERS), help="comma-separated, of: " + ", ".join(MAKERS))
    ap.add_argument(
        "--variant",
        action="append",
        default=[],
        help="NAME=KEY:VALUE,...: lmmse with these parameters changed, e.g. reach4=cell_refinement:4",
    )
    ap.add_argument("--smooth-weight", type=float, default=None, help="estimator smoothness weight (default: 1)")
    args = ap.parse_args()
    if args.smooth_weight is not None:
        import synth.motion.search

        synth.motion.search.SMOOTH_WEIGHT = float(args.smooth_weight)
    variants = []
    for spec in args.variant:
        parsed = parse_variant(spec)
        if parsed is None:
            ap.error(f"--variant {spec!r}: expected NAME=KEY:VALUE,...")
        variants.append(with_params(f"lmmse-{parsed[0]}", SynthParams().with_changes(**parsed[1])))
    chosen = [m.strip() for m in args.makers.split(",") if m.strip()]
    unknown = sorted(set(chosen) - set(MAKERS))
    if unknown or not (chosen or variants):
        ap.error(f"unknown makers {unknown}; choose among {', '.join(MAKERS)}")
    reader = open_clip(args.clip)
    n = len(reader) if args.last is None else min(args.last + 1, len(reader))
    special = {
        "lmmse-sixtap-blocks": lambda: with_params("lmmse-sixtap-blocks", PREVIOUS_DEFAULTS),
        "lmmse-unrefined": lambda: with_params("lmmse-unrefined", UNREFINED),
    }
    makers = [special[m]() if m in special else get_maker(m) for m in chosen] + variants
    source = parse_vector_source(args.vectors, two_way=args.two_way, clip=args.clip)
    start = time.time()

    def progress(done, total, label):
        print(f"{done}/{total} {label} {time.time() - start:.0f} s", file=sys.stderr, flush=True)

    result = measure_clip(
        reader.read,
        n,
        clip=args.clip,
        gap=8,
        qps=(22, 27, 32, 37),
        makers=makers,
        source=source,
        target_picture="B",
        gop_size=8,
        progress=progress,
    )
    clip = summarise_clips([result])["clips"][0]
    print(f"{clip['targets']} targets, reference mismatches {clip['reference_mismatches']}")
    print(f"{'configuration':<28} {'GOP bits':>9} " + " ".join(f"{'layer ' + k:>9}" for k in sorted(clip["layers"])))
    for name, bd in clip["bd"].items():
        layers = " ".join(f"{clip['layers'][k]['bd'][name]['bd_rate']:>8.2f}%" for k in sorted(clip["layers"]))
        print(f"{name:<28} {bd['bd_rate']:>8.2f}% {layers}")
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(clip, fh, indent=1, default=str)


if __name__ == "__main__":
    main()
