"""Whole-process optical-flow interpolation of one picture pair: the peer of ``synth frame``.

    .venv/bin/python tests/benchmarks/dis_interpolate.py CLIP.y4m OUT.y4m [--past 0] [--future 1] [--t 0.5]

Reads the two references from a Y4M clip, makes the picture at t with synth's ``dis-medium`` maker
(OpenCV DIS 'medium' flows both ways, `synth.makers.optical_flow`) and writes it as a one-picture
Y4M. `startup.py` times this script as a whole process against ``synth frame`` on the same pair;
it is a helper of that benchmark, not a benchmark of its own (`run_all.py` skips it).
"""

from __future__ import annotations

import argparse
import sys


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip")
    ap.add_argument("output")
    ap.add_argument("--past", type=int, default=0)
    ap.add_argument("--future", type=int, default=1)
    ap.add_argument("--t", type=float, default=0.5)
    a = ap.parse_args(argv)

    from synth.io import open_clip, write_y4m
    from synth.makers import get_maker

    reader = open_clip(a.clip)
    past, future = reader.read(a.past), reader.read(a.future)
    prediction = get_maker("dis-medium")(past, future, t=a.t)
    write_y4m(a.output, [prediction.picture])
    return 0


if __name__ == "__main__":
    sys.exit(main())
