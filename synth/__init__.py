"""synth: interpolated reference pictures from coded motion vectors, for video-coding research.

Public API (see README.md and DEVELOPERS.md). The numeric core takes arrays and dataclasses, never
paths, and prints nothing. Names are imported on first use, so ``import synth`` is cheap.

Stages (one subpackage each, arrows point down)::

    commands  (synth.cli parses and formats; synth.commands holds the bodies)
    study, demo
    evaluation  (workbench, compare, gop, tables, plots, report pages)
    codec       (offsets, encoders, RD, BD-rate, export)
    makers      (every way to make the picture at time t, one registry)
    synthesis   (projection, candidates, sampling, LMMSE core, parameters, calibration)
    motion      (the built-in estimator, compensation)
    synth.io    (files <-> models)
    models at the root (Picture, VectorField, errors, flow layout, GOP hierarchy, metrics)
"""

from synth.errors import FormatError, ParameterError, SynthError
from synth.lazy import lazy_exports

__version__ = "0.1.0"

_EXPORTS = {
    "Picture": "synth.picture",
    "ClipInfo": "synth.picture",
    "VectorField": "synth.field",
    # coded motion
    "estimate_field": "synth.motion.estimator",
    "estimate_reference_fields": "synth.motion.estimator",
    "motion_compensate": "synth.motion.compensate",
    "summarize_field": "synth.motion.summary",
    # synthesis
    "SynthParams": "synth.synthesis.params",
    "SynthesisResult": "synth.synthesis.synthesiser",
    "synthesise": "synth.synthesis.synthesiser",
    "synthesise_with_maps": "synth.synthesis.synthesiser",
    "calibrate": "synth.synthesis.calibrate",
    "training_cases": "synth.synthesis.calibrate",
    "best_of_k": "synth.synthesis.oracles",
    "block_least_squares": "synth.synthesis.oracles",
    # codec side
    "refine_with_offsets": "synth.codec.offsets",
    "bd_rate": "synth.codec.bdrate",
    "bd_psnr": "synth.codec.bdrate",
    "encode_pictures": "synth.codec.encode",
    # makers and evaluation
    "PREDICTORS": "synth.makers",
    "Prediction": "synth.makers",
    "Predictor": "synth.makers",
    "get_predictor": "synth.makers",
    "compare_clip": "synth.evaluation.compare",
    "run_gop": "synth.evaluation.gop",
    "write_report": "synth.evaluation.report",
    "picture_metrics": "synth.metrics",
    "ssim": "synth.metrics",
    "weighted_psnr": "synth.metrics",
}

__all__ = ["SynthError", "FormatError", "ParameterError", *_EXPORTS]
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
