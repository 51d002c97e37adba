"""Synthesis parameters: one dataclass, validated, stored as a small documented JSON file.

File layout (UTF-8 JSON, written atomically)::

    {
      "format": "synth-params",
      "schema_version": 1,
      "params": { "<name>": <value>, ... }
    }

Every name in ``params`` is a field of :class:`SynthParams`; missing names take the defaults, unknown
names are an error (a typo must not pass silently). The meaning of each field is in the class
docstring and in README.md ("Synthesis parameters"); the equations they enter are in
:mod:`synth.synthesis.lmmse`.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import asdict, dataclass, fields, replace
from pathlib import Path

import numpy as np

from synth.errors import FormatError, ParameterError
from synth.io.jsonread import parse_json_text, read_text_document
from synth.io.limits import short_repr as _short

__all__ = ["SynthParams", "METHODS", "INTERPOLATIONS", "PARAMS_FORMAT", "PARAMS_VERSION"]

PARAMS_FORMAT = "synth-params"
PARAMS_VERSION = 1

#: Ways of combining the candidates of a pixel (same candidate pool for all three).
METHODS = ("lmmse", "distance_weighted", "nearest")
#: How the 'lmmse' method judges its observations (see `synth.synthesis.reliability`).
RELIABILITIES = ("learned", "distance")
#: Sub-sample interpolation filters for the observations (OpenCV remap kernels).
INTERPOLATIONS = ("sixtap", "bicubic", "bilinear", "lanczos")


@dataclass(frozen=True)
class SynthParams:
    """Parameters of the synthesiser; the defaults are the calibrated values.

    Parameters
    ----------
    method : {'lmmse', 'distance_weighted', 'nearest'}
        'lmmse': the optimal linear estimator of :mod:`synth.synthesis.lmmse`. 'distance_weighted': weights
        proportional to ``1 / (distance + 1) ** idw_power`` over the same candidates (a control).
        'nearest': each pixel takes the observation of its nearest landed vector (plain projection).
    candidates : int
        K, candidates per pixel when the vectors come from one coding direction.
    candidates_both_directions : int
        K when the fields cover both coding directions (future-to-past and past-to-future).
    group_size : int
        Candidates are chosen per square group of this many luma samples (default 4: larger groups
        leave seams where the candidate set changes); distances, reliabilities
        and weights stay per pixel. A group must hold whole chroma samples: 1 serves 4:4:4 and
        monochrome clips only (4:2:0 and 4:2:2 need 2 or more, see `check_chroma`).
    reach : float
        A landed vector further than this (luma samples) from a group's centre is no candidate.
    spatial_correlation : float
        a in (0, 1): correlation of two samples one luma sample apart; the innovation term of two
        candidates decays as a ** (distance between their sample points).
    innovation_nugget : float
        nu in [0, 1): share of each candidate's innovation that is uncorrelated with every other
        candidate's (it keeps the system well conditioned when two candidates carry the same vector).
    reliability_scale : float
        L (luma samples): a candidate's correlation with the pixel is multiplied by
        exp(-d / L), d the pixel's distance from where the vector landed, outside the block's footprint.
    max_correlation : float
        Upper clip of a candidate's correlation with the pixel (keeps 1 - r**2 away from zero).
    agreement_floor : float
        Variance floor (in 8-bit sample units squared, scaled with the bit depth) in the endpoint
        agreement of :func:`synth.synthesis.lmmse.endpoint_agreement`: it stands for sensor and coding noise,
        so flat but matching patches count as agreeing.
    agreement_margin : int
        The endpoint patches are the block's footprint grown by this many luma samples on each side.
    loading : float
        Diagonal loading added to R (relative; the diagonal of R is 1) in the direct solver.
    interpolation : {'bicubic', 'sixtap', 'bilinear', 'lanczos'}
        Sub-sample interpolation of the observations (see `synth.synthesis.sampling`: 'bicubic' (default)
        the a = -0.75 cubic convolution kernel, 'sixtap' the H.264 half-sample filter followed by
        bilinear interpolation, 'bilinear' the 2x2 linear one, 'lanczos' the a = 4 windowed sinc).
        Measured in the encoder loop (`tests/benchmarks/results/encoder-value.md`), the bicubic picture
        is worth clearly more to x264 as a reference than the six-tap one at the same PSNR.
    motion_cell : int
        0, 1, 2, 4, 8 or 16. When not 0, every field is first re-cut into cells of this many luma
        samples whose vectors vary smoothly between the blocks' vectors
        (`synth.synthesis.smooth_motion`); 0 uses the blocks as coded.
    motion_smoothing : int
        Width in luma samples (1..256) of the box filter that interpolates the vectors between
        neighbouring blocks when ``motion_cell`` is not 0 (1: the blocks are only re-cut).
    cell_refinement : int
        When not 0 (and ``motion_cell`` is not 0), every cell's vector is refined by a local search
        of +- this many luma samples (then half and quarter samples) between the two references
        (`synth.synthesis.refine_cells`); 0..8.
    refinement_window : int
        Side in luma samples (2..32) of the window matched around each cell by the refinement.
    refinement_penalty : float
        Cost per luma sample of refinement offset, in 8-bit sample units (>= 0).
    refinement_median : int
        0, or an odd window of 3..65 cells: after the refinement's local search, a cell takes the
        vector median of this many cells around it where the median matches almost as well
        (`synth.synthesis.refine_cells`).
    refinement_median_weight : float
        How much worse (8-bit units per luma sample of vector difference, 0..1000) the median may
        match and still be taken.
    flow_guard : float
        0 (off), or a distance in luma samples (0.25..1024; needs ``motion_cell``): after the
        refinement, a cell whose vector lies further than this from DIS optical flow averaged over
        the cell takes that average (`synth.synthesis.flow_guard`). Measured in the encoder loop
        (`tests/benchmarks/results/encoder-value.md`), the guard at 4 samples is worth more to x264
        on every clip than the cells without it.
    weight_cell : int
        Weights are computed per square cell of this many luma samples (1: per pixel); must divide
        ``group_size``.
    idw_power : float
        Exponent of the inverse-distance weights of the 'distance_weighted' control.
    disagreement_threshold : float
        When every candidate of a pixel has an endpoint agreement below this, the pixel falls back
        to its nearest candidate (confidence 0). 0 disables the rule.
    border_margin : float
        An endpoint more than this many samples outside its picture is not used: the observation then
        comes from the other reference only.
    reliability : {'learned', 'distance'}
        How 'lmmse' judges its observations. 'distance': the correlation model of
        :mod:`synth.synthesis.lmmse` (endpoint agreement tempered by the distance to the landing spot).
        'learned': every side observation's error variance is predicted from cues by a model fitted
        with ``synth calibrate`` (:mod:`synth.synthesis.reliability`); used when the fields cover both coding
        directions, else 'distance' applies.
    learned_share : float
        With ``reliability='learned'``: the weights are this share of the learned model's plus the
        rest of the correlation model's (1: learned only).
    reliability_coefficients : tuple of float
        Coefficients of the learned error model (cue set ``synth.synthesis.reliability.CUE_SET``); empty:
        the built-in calibrated ones (``synth.synthesis.reliability.DEFAULT_COEFFICIENTS``).
    """

    method: str = "lmmse"
    candidates: int = 8
    candidates_both_directions: int = 12
    group_size: int = 4
    reach: float = 48.0
    spatial_correlation: float = 0.69
    innovation_nugget: float = 0.05
    reliability_scale: float = 28.0
    max_correlation: float = 0.99
    agreement_floor: float = 20.0
    agreement_margin: int = 4
    loading: float = 0.01
    interpolation: str = "bicubic"
    motion_cell: int = 4
    motion_smoothing: int = 8
    cell_refinement: int = 2
    refinement_window: int = 8
    refinement_penalty: float = 1.0
    refinement_median: int = 0
    refinement_median_weight: float = 0.5
    flow_guard: float = 4.0
    weight_cell: int = 2
    idw_power: float = 2.0
    disagreement_threshold: float = 0.0
    border_margin: float = 1.0
    reliability: str = "distance"
    learned_share: float = 0.5
    reliability_coefficients: tuple = ()

    def __post_init__(self) -> None:
        if isinstance(self.reliability_coefficients, (list, np.ndarray)):
            object.__setattr__(self, "reliability_coefficients", _number_tuple(self.reliability_coefficients))
        self.validate()

    # -- validation -------------------------------------------------------------------------------
    def validate(self) -> None:
        """Raise `ParameterError` naming the first parameter that breaks its rule."""

        def number(name: str) -> float:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not _finite(v):
                raise ParameterError(f"parameter {name} must be a finite number, got {_short(v)}")
            return float(v)

        def integer(name: str, lo: int, hi: int) -> None:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
                raise ParameterError(f"parameter {name} must be an integer in [{lo}, {hi}], got {_short(v)}")

        def choice(name: str, options) -> None:
            v = getattr(self, name)
            if not isinstance(v, str) or v not in options:
                raise ParameterError(f"parameter {name} must be one of {', '.join(options)}, got {_short(v)}")

        def power_of_two(name: str, extra: str = "") -> None:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or v not in (1, 2, 4, 8):
                raise ParameterError(f"parameter {name} must be 1, 2, 4 or 8{extra}, got {_short(v)}")

        choice("method", METHODS)
        choice("reliability", RELIABILITIES)
        if not isinstance(self.reliability_coefficients, tuple):
            raise ParameterError(
                f"parameter reliability_coefficients must be a sequence of numbers, got {type(self.reliability_coefficients).__name__}"
            )
        if self.reliability_coefficients:
            from synth.synthesis.reliability import check_coefficients

            check_coefficients(self.reliability_coefficients)
        choice("interpolation", INTERPOLATIONS)
        integer("candidates", 1, 32)
        integer("candidates_both_directions", 1, 32)
        integer("agreement_margin", 0, 16)
        integer("motion_smoothing", 1, 256)
        integer("cell_refinement", 0, 8)
        integer("refinement_window", 2, 32)
        integer("refinement_median", 0, 65)
        if self.refinement_median and (self.refinement_median < 3 or self.refinement_median % 2 == 0):
            raise ParameterError(
                f"parameter refinement_median must be 0 or odd in [3, 65], got {self.refinement_median!r}"
            )
        if isinstance(self.motion_cell, bool) or self.motion_cell not in (0, 1, 2, 4, 8, 16):
            raise ParameterError(f"parameter motion_cell must be 0, 1, 2, 4, 8 or 16, got {_short(self.motion_cell)}")
        power_of_two("group_size")
        power_of_two("weight_cell", f" and divide group_size ({self.group_size})")
        if self.group_size % self.weight_cell:
            raise ParameterError(
                f"parameter weight_cell must be 1, 2, 4 or 8 and divide group_size ({self.group_size}), got {self.weight_cell!r}"
            )
        rules = {
            "reach": (lambda v: 0 < v <= 1024, "in (0, 1024]"),
            "spatial_correlation": (lambda v: 0 < v < 1, "in (0, 1)"),
            "innovation_nugget": (lambda v: 0 <= v < 1, "in [0, 1)"),
            "reliability_scale": (lambda v: v > 0, "> 0"),
            "max_correlation": (lambda v: 0 < v < 1, "in (0, 1)"),
            "agreement_floor": (lambda v: v > 0, "> 0"),
            "loading": (lambda v: 0 <= v <= 10, "in [0, 10]"),
            "idw_power": (lambda v: 0 <= v <= 8, "in [0, 8]"),
            "disagreement_threshold": (lambda v: 0 <= v <= 1, "in [0, 1]"),
            "border_margin": (lambda v: 0 <= v <= 64, "in [0, 64]"),
            "refinement_penalty": (lambda v: 0 <= v <= 1000, "in [0, 1000]"),
            "refinement_median_weight": (lambda v: 0 <= v <= 1000, "in [0, 1000]"),
            "flow_guard": (lambda v: v == 0 or 0.25 <= v <= 1024, "0 or in [0.25, 1024]"),
            "learned_share": (lambda v: 0 <= v <= 1, "in [0, 1]"),
        }
        for name, (ok, rule) in rules.items():
            v = number(name)
            if not ok(v):
                raise ParameterError(f"parameter {name} must be {rule}, got {v!r}")

    def check_chroma(self, chroma_format: str, fx: int, fy: int) -> None:
        """Refuse a `group_size` that does not hold whole chroma samples of the clip.

        The synthesiser maps each group of candidates onto ``group_size / fx`` by
        ``group_size / fy`` chroma samples, so a group must span whole chroma samples: group_size 1
        works for 4:4:4 and monochrome clips, not for 4:2:0 or 4:2:2 (2 or more).

        Raises
        ------
        ParameterError
            Naming the group size, the chroma format and the smallest group size that serves it.
        """
        if self.group_size % fx or self.group_size % fy:
            raise ParameterError(
                f"parameter group_size {self.group_size} is smaller than a {chroma_format} chroma sample "
                f"({fx}x{fy} luma samples): use {max(fx, fy)} or more for this clip"
            )

    # -- helpers ----------------------------------------------------------------------------------
    def with_changes(self, **changes) -> SynthParams:
        """A copy with some fields changed (validated)."""
        unknown = set(changes) - {f.name for f in fields(self)}
        if unknown:
            raise ParameterError(f"unknown synthesis parameter(s): {', '.join(sorted(unknown))}")
        return replace(self, **changes)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["reliability_coefficients"] = list(self.reliability_coefficients)
        return d

    def effective_coefficients(self) -> tuple:
        """The learned model's coefficients in use: this file's, else the built-in calibrated ones."""
        if self.reliability_coefficients:
            return self.reliability_coefficients
        from synth.synthesis.reliability import DEFAULT_COEFFICIENTS

        return DEFAULT_COEFFICIENTS

    @classmethod
    def from_dict(cls, data: dict) -> SynthParams:
        """Build from a mapping of field names; unknown names raise `ParameterError`."""
        if not isinstance(data, dict):
            raise ParameterError(f"synthesis parameters must be a JSON object, got {type(data).__name__}")
        known = {f.name: f for f in fields(cls)}
        unknown = set(map(str, data)) - set(known)
        if unknown:
            raise ParameterError(f"unknown synthesis parameter(s): {_cut(', '.join(sorted(unknown)))}")
        values = {}
        for name, value in data.items():
            default = getattr(cls, name)
            if isinstance(default, float) and isinstance(value, int) and not isinstance(value, bool):
                if not _finite(value):
                    raise ParameterError(f"parameter {name} must be a finite number, got {_short(value)}")
                value = float(value)
            if isinstance(default, tuple):
                if not isinstance(value, (list, tuple)):
                    raise ParameterError(f"parameter {name} must be a list of numbers, got {_short(value)}")
                value = _number_tuple(value, name=name)
            values[name] = value
        return cls(**values)

    def to_json(self) -> str:
        doc = {"format": PARAMS_FORMAT, "schema_version": PARAMS_VERSION, "params": self.to_dict()}
        return json.dumps(doc, indent=2) + "\n"

    @classmethod
    def from_json(cls, text: str, *, source: str = "parameters") -> SynthParams:
        """Parse a parameter document (see the module docstring); `source` names it in messages.

        Raises
        ------
        FormatError
            Not JSON, not a parameter file, an unknown schema version or top-level key; numbers
            beyond the JSON reader's ceilings (`synth.io.jsonread`).
        ParameterError
            A parameter breaking its rule, prefixed with `source`.
        """
        # NaN / Infinity are parsed (files of synth 0.1 may hold them in "fit"); parameters refuse them
        doc = parse_json_text(text, source=source, allow_nonfinite=True)
        if not isinstance(doc, dict) or doc.get("format") != PARAMS_FORMAT:
            raise FormatError(f'{source}: not a synth parameter file (expected "format": "{PARAMS_FORMAT}")')
        version = doc.get("schema_version", doc.get("version"))  # files before 0.2 say "version"
        if version != PARAMS_VERSION or isinstance(version, bool):
            raise FormatError(f"{source}: unsupported parameter file schema_version {_short(version)} (expected 1)")
        extra = set(doc) - {"format", "schema_version", "version", "params", "fit"}
        if extra:
            raise FormatError(f"{source}: unknown top-level key(s) {_cut(', '.join(sorted(map(str, extra))))}")
        try:
            return cls.from_dict(doc.get("params", {}))
        except ParameterError as exc:
            raise ParameterError(f"{source}: {exc}") from None

    @classmethod
    def load(cls, path: str | os.PathLike) -> SynthParams:
        """Read a parameter file (see the module docstring).

        Raises
        ------
        FormatError
            Missing, too large (`synth.io.limits.MAX_DOCUMENT_BYTES`), not UTF-8, not a parameter
            file (see `from_json`); one line naming the file.
        ParameterError
            A parameter breaking its rule, naming the file and the parameter.
        """
        path = Path(path)
        text = read_text_document(path, what="parameter file")
        return cls.from_json(text, source=str(path))

    def save(self, path: str | os.PathLike) -> None:
        """Write a parameter file atomically."""
        from synth.io import atomic_write_text

        atomic_write_text(path, self.to_json())


def _cut(text: str) -> str:
    return text if len(text) <= 40 else text[:37] + "..."


def _finite(v) -> bool:
    """True for a finite number; integers too large for a double are not finite here."""
    if isinstance(v, int):
        return abs(v) <= 2**1023
    return math.isfinite(v)


def _number_tuple(values, *, name: str = "reliability_coefficients") -> tuple:
    """Values as a tuple of finite floats, refusing anything else with `ParameterError`."""
    out = []
    for v in values:
        if (
            isinstance(v, (bool, np.bool_))
            or not isinstance(v, (int, float, np.integer, np.floating))
            or not _finite(v)
        ):
            raise ParameterError(f"parameter {name} must be a list of finite numbers, got {_short(v)} in it")
        out.append(float(v))
    return tuple(out)
