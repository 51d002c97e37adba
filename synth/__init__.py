"""synth: interpolated reference frames from coded motion vectors.

Public API (see README.md). The numeric core takes arrays and dataclasses, never paths, and
prints nothing.
"""

from .errors import FormatError, ParameterError, SynthError
from .field import VectorField
from .picture import ClipInfo, Picture

# -- coded motion (issue 3) --
from .compensate import motion_compensate
from .field_summary import summarize_field
from .motion import estimate_field, estimate_reference_fields
# -- synthesis (issue 4) --
from .params import SynthParams
from .synthesis import SynthesisResult, synthesise, synthesise_with_maps
# --- issue 5: encoder side (offsets, BD-rate, encoder in the loop) ---
from .bdrate import bd_psnr, bd_rate
from .encode import encode_pictures
from .offsets import refine_with_offsets
# -- evaluation workbench (issue 6) --
from .compare import compare_clip
from .gop import run_gop
from .metrics import picture_metrics, ssim, weighted_psnr
from .predictors import PREDICTORS, Prediction, Predictor, get_predictor
from .report import write_report
# -- estimator quality and calibration (issue 4, quality) --
from .calibrate import calibrate, training_cases
from .oracles import best_of_k, block_least_squares

__version__ = "0.1.0"

__all__ = [
    "SynthError",
    "FormatError",
    "ParameterError",
    "Picture",
    "ClipInfo",
    "VectorField",
    # coded motion (issue 3)
    "estimate_field",
    "estimate_reference_fields",
    "motion_compensate",
    "summarize_field",
    # synthesis (issue 4)
    "SynthParams",
    "SynthesisResult",
    "synthesise",
    "synthesise_with_maps",
    # issue 5
    "refine_with_offsets",
    "bd_rate",
    "bd_psnr",
    "encode_pictures",
    # evaluation workbench (issue 6)
    "PREDICTORS",
    "Prediction",
    "Predictor",
    "get_predictor",
    "compare_clip",
    "run_gop",
    "write_report",
    "picture_metrics",
    "ssim",
    "weighted_psnr",
    # estimator quality and calibration (issue 4, quality)
    "calibrate",
    "training_cases",
    "best_of_k",
    "block_least_squares",
]
