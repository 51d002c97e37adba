"""What `synth calibrate` does: fit the parameters of one model on training clips and write its
parameter file.

``--model interpolation`` (default): the synthesis parameters and the learned reliability
(`synth.synthesis.calibrate`), a `SynthParams` file. ``--model one-reference``: ``a``, ``beta``
and ``gamma`` of the one-reference predictor (`synth.synthesis.one_reference_calibration`:
measured statistics, then a grid refinement by prediction PSNR), a `OneReferenceParams` file,
the one `synth predict --params` reads."""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path

from synth.errors import FormatError, ParameterError

__all__ = ["run_calibrate", "format_calibrate", "DEFAULT_GAPS", "DEFAULT_PICTURES", "MODELS", "DEFAULT_MODEL"]

#: Reference distances fitted on by default.
DEFAULT_GAPS = "2,4,8"
#: Pictures of each clip used by default (display numbers, both included).
DEFAULT_PICTURES = "0:32"
#: Which parameters ``--model`` calibrates: the interpolation (synthesis) ones, or the one-reference
#: predictor's.
MODELS = ("interpolation", "one-reference")
DEFAULT_MODEL = "interpolation"


def run_calibrate(
    clips: Sequence[str | os.PathLike],
    *,
    output: str | os.PathLike,
    gaps=DEFAULT_GAPS,
    pictures: str | None = DEFAULT_PICTURES,
    per_gap: int = 3,
    vector_qp: int = 27,
    params: str | os.PathLike | None = None,
    refine: bool = True,
    evaluations: int = 24,
    model: str = DEFAULT_MODEL,
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """Calibrate on `clips` and write the parameter file `output` (JSON, atomically).

    With ``model="one-reference"`` see `calibrate_one_reference_model` (`gaps`, `per_gap` and
    `evaluations` are not used).

    Parameters
    ----------
    clips : sequence of path-like
        Training clips (any clip `synth.io.open_clip` reads).
    output : path-like
        Parameter file to write (``.json``).
    gaps : str or sequence of int
        Reference distances, even integers >= 2 (``"2,4,8"``).
    pictures : str, optional
        ``FIRST:LAST`` pictures of each clip used (both included; either end may be omitted);
        None: the whole clip.
    per_gap : int
        Target pictures per clip and reference distance.
    vector_qp : int
        Rate constraint of the estimated vectors.
    params : path-like, optional
        Starting parameter file (default: built-in values).
    refine : bool
        Refine by maximising the prediction PSNR.
    evaluations : int
        Most parameter sets the refinement tries.
    model : str
        ``--model``: one of `MODELS`.
    progress : callable, optional
        ``progress(done, total, label)``.

    Returns
    -------
    dict
        Strict JSON: ``cases``, ``clips``, ``output``, the fitted ``params`` (spatial_correlation,
        reliability_scale, coefficients count) and the fit record (``measured``, ``refinement``,
        ``learned``, ``psnr``).

    Raises
    ------
    ParameterError, FormatError
        Any bad option (named as typed) or clip, before the fit starts.
    """
    from synth.commands.options import parse_int_list, parse_picture_range
    from synth.commands.vectors import check_vector_qp
    from synth.io import atomic_write_text
    from synth.io.jsonout import strict_json
    from synth.synthesis.calibrate import calibrate, training_cases
    from synth.synthesis.params import SynthParams

    if model not in MODELS:
        raise ParameterError(f"--model must be one of {', '.join(MODELS)}, got {model!r}")
    if model == "one-reference":
        return calibrate_one_reference_model(
            clips, output=output, pictures=pictures, vector_qp=vector_qp, params=params, refine=refine,
            progress=progress,
        )  # fmt: skip
    gap_list = parse_int_list(gaps, option="--gaps")
    for d in gap_list:
        if d < 2 or d % 2:
            raise ParameterError(f"--gaps must be even integers >= 2, got {d}")
    rng = parse_picture_range(pictures, option="--pictures")
    first, last = (0, None) if rng is None else (rng.first, rng.last)
    frames = None if last is None else last - first + 1
    if frames is not None and frames < 3:
        raise ParameterError(f"--pictures must span at least 3 pictures, got {pictures!r}")
    if isinstance(per_gap, bool) or not isinstance(per_gap, int) or per_gap < 1:
        raise ParameterError(f"--per-gap must be an integer >= 1, got {per_gap!r}")
    if isinstance(evaluations, bool) or not isinstance(evaluations, int) or evaluations < 1:
        raise ParameterError(f"--evaluations must be at least 1, got {evaluations!r}")
    vector_qp = check_vector_qp(vector_qp)
    output = Path(output)
    if output.suffix.lower() != ".json":
        raise ParameterError(f"--output must end in .json (a parameter file), got {str(output)!r}")
    from synth.commands.outputs import check_output_file

    check_output_file(output, (".json",), option="--output")  # its folder must exist
    clips = [Path(c) for c in clips]
    if not clips:
        raise ParameterError("give at least one training clip")
    for clip in clips:
        if not clip.is_file():
            raise FormatError(f"{clip}: no such clip")
    start_params = SynthParams.load(params) if params is not None else SynthParams()
    cases = []
    for i, clip in enumerate(clips):
        if progress is not None:
            progress(i, len(clips), f"reading {clip.name}")
        cases += training_cases(clip, gaps=gap_list, start=first, frames=frames, per_gap=per_gap, qp=vector_qp)
    result = calibrate(cases, params=start_params, refine=refine, evaluations=evaluations, progress=progress)
    atomic_write_text(output, result.to_json())
    p = result.params
    return strict_json({
        "format": "synth-calibrate-summary",
        "schema_version": 1,
        "cases": len(cases),
        "clips": [str(c) for c in clips],
        "output": str(output),
        "settings": {"gaps": gap_list, "pictures": [first, last], "per_gap": per_gap, "vector_qp": vector_qp,
                     "refine": refine, "evaluations": evaluations},
        "params": {"spatial_correlation": p.spatial_correlation, "reliability_scale": p.reliability_scale,
                   "reliability_coefficients": len(p.reliability_coefficients)},
        "fit": result.record,
    })  # fmt: skip


def _check_output_and_clips(output, clips) -> tuple[Path, list[Path]]:
    """``--output`` a .json file in an existing folder; every clip an existing file."""
    from synth.commands.outputs import check_output_file

    output = Path(output)
    if output.suffix.lower() != ".json":
        raise ParameterError(f"--output must end in .json (a parameter file), got {str(output)!r}")
    check_output_file(output, (".json",), option="--output")
    clips = [Path(c) for c in clips]
    if not clips:
        raise ParameterError("give at least one training clip")
    for clip in clips:
        if not clip.is_file():
            raise FormatError(f"{clip}: no such clip")
    return output, clips


def calibrate_one_reference_model(
    clips: Sequence[str | os.PathLike],
    *,
    output: str | os.PathLike,
    pictures: str | None = DEFAULT_PICTURES,
    vector_qp: int = 27,
    params: str | os.PathLike | None = None,
    refine: bool = True,
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """``synth calibrate --model one-reference``: fit the one-reference predictor and write its
    parameter file (`OneReferenceParams.to_json`, atomically).

    Training cases: every picture ``k`` of ``FIRST + 1 .. LAST`` (`pictures`, cut to the clip's
    end) of each clip, against the picture before it, with the built-in estimator's vectors at
    `vector_qp` (`synth.commands.predict.prediction_inputs` with ``--vectors estimate``, so the
    cases are those `synth predict` measures). Then
    `synth.synthesis.one_reference_calibration.calibrate_one_reference` (measured ``a``,
    ``beta``, ``gamma``, then the grid by mean prediction PSNR-Y), or with ``refine=False`` the
    measured values only.

    Parameters
    ----------
    clips, output, pictures, vector_qp, refine, progress
        As `run_calibrate`.
    params : path-like, optional
        Starting one-reference parameter file (its candidate search settings and the values the
        grid does not name; default: built-in values).

    Returns
    -------
    dict
        Strict JSON: ``format``, ``schema_version``, ``model``, ``cases``, ``clips``, ``output``,
        ``settings``, ``params`` (`OneReferenceParams.to_dict` of the written file) and ``fit``
        (``measured``: the measured values and their binned curves; with refinement
        ``refinement``: ``settings`` tried, ``measured_psnr_y`` (the measured setting's mean
        PSNR-Y), ``best_psnr_y`` and ``rows``).

    Raises
    ------
    ParameterError, FormatError
        Any bad option (named as typed) or clip, before the fit starts.
    """
    from synth.commands.options import parse_picture_range
    from synth.commands.predict import prediction_inputs
    from synth.commands.vectors import check_vector_qp
    from synth.io import atomic_write_text, open_clip
    from synth.io.jsonout import strict_json
    from synth.motion.sources import parse_vector_source
    from synth.synthesis.one_reference import OneReferenceParams
    from synth.synthesis.one_reference_calibration import calibrate_one_reference, measure_one_reference_statistics

    rng = parse_picture_range(pictures, option="--pictures")
    first, last = (0, None) if rng is None else (rng.first, rng.last)
    if last is not None and last - first < 1:
        raise ParameterError(f"--pictures must span at least 2 pictures, got {pictures!r}")
    vector_qp = check_vector_qp(vector_qp)
    output, clips = _check_output_and_clips(output, clips)
    if params is not None and not Path(params).is_file():
        raise ParameterError(f"--params {str(params)!r}: no such file")
    start = OneReferenceParams.load(params) if params is not None else OneReferenceParams()
    cases = []
    for i, clip in enumerate(clips):
        if progress is not None:
            progress(i, len(clips), f"vectors of {clip.name}")
        source = parse_vector_source("estimate", qp=vector_qp, clip=clip)
        with open_clip(clip) as reader:
            end = len(reader) - 1 if last is None else min(last, len(reader) - 1)
            if end - first < 1:
                raise ParameterError(
                    f"--pictures must name at least two pictures of {clip.name} (it has 0..{len(reader) - 1}), "
                    f"got {pictures!r}"
                )
            inputs = prediction_inputs(clip, first=first, last=end, source=source, reader=reader)
        cases += [(target, reference, field) for _, target, reference, field in inputs]
    if progress is not None:
        progress(len(clips), len(clips), "vectors done")
    if refine:
        best, record = calibrate_one_reference(cases, start=start, progress=progress)
        rows = record["refinement"]
        names = ("spatial_correlation", "reliability_decay", "outside_factor")
        at = [r["psnr_y"] for r in rows if all(r[n] == record["measured_params"][n] for n in names)]
        fit = {
            "measured": record["measured"],
            "refinement": {"settings": len(rows), "measured_psnr_y": at[0] if at else None,
                           "best_psnr_y": max(r["psnr_y"] for r in rows), "rows": rows},
        }  # fmt: skip
    else:
        from dataclasses import replace

        stats = measure_one_reference_statistics(cases, params=start)
        best = replace(start, **{n: stats[n] for n in ("spatial_correlation", "reliability_decay", "outside_factor")})
        fit = {"measured": stats}
    atomic_write_text(output, best.to_json() + "\n")
    return strict_json({
        "format": "synth-calibrate-summary",
        "schema_version": 1,
        "model": "one-reference",
        "cases": len(cases),
        "clips": [str(c) for c in clips],
        "output": str(output),
        "settings": {"model": "one-reference", "pictures": [first, last], "vector_qp": vector_qp,
                     "vectors": "estimate", "refine": refine},
        "params": best.to_dict(),
        "fit": fit,
    })  # fmt: skip


def _db(v) -> str:
    return "inf" if v is None else f"{v:.2f}"


def _format_one_reference(summary: dict) -> str:
    m, p, fit = summary["fit"]["measured"], summary["params"], summary["fit"]
    lines = [
        f"cases          {summary['cases']} pictures from {len(summary['clips'])} clip(s), each against the one "
        f"before (vectors estimated, QP {summary['settings']['vector_qp']})",
        f"measured       spatial_correlation {m['spatial_correlation']:.3f}, reliability_decay "
        f"{m['reliability_decay']:.3f}, outside_factor {m['outside_factor']:.3f}",
    ]
    if "refinement" in fit:
        r = fit["refinement"]
        lines.append(
            f"refined        spatial_correlation {p['spatial_correlation']:.3f}, reliability_decay "
            f"{p['reliability_decay']:.3f}, outside_factor {p['outside_factor']:.3f} (mean PSNR-Y "
            f"{_db(r['measured_psnr_y'])} -> {_db(r['best_psnr_y'])} dB, {r['settings']} settings)"
        )
    lines.append(f"written        {summary['output']}")
    return "\n".join(lines)


def format_calibrate(summary: dict) -> str:
    """The text `synth calibrate` prints for a `run_calibrate` summary."""
    if summary.get("model") == "one-reference":
        return _format_one_reference(summary)
    rec, p = summary["fit"], summary["params"]
    m = rec["measured"]
    lines = [
        f"cases          {summary['cases']} from {len(summary['clips'])} clip(s)",
        f"measured       spatial_correlation {m['spatial_correlation']:.3f}, innovation_nugget "
        f"{m['innovation_nugget']:.3f}, reliability_scale {m['reliability_scale']:.1f}",
    ]
    if "refinement" in rec:
        r = rec["refinement"]
        lines.append(
            f"refined        spatial_correlation {p['spatial_correlation']:.3f}, reliability_scale "
            f"{p['reliability_scale']:.1f} (mean PSNR-Y {_db(r['before'])} -> {_db(r['after'])} dB, "
            f"{r['evaluations']} evaluations)"
        )
    lr = rec["learned"]
    lines.append(
        f"learned        {p['reliability_coefficients']} coefficients, {lr['samples']} samples, R^2 {lr['r2']:.3f}"
    )
    for name, v in rec["psnr"].items():
        lines.append(f"PSNR-Y         {name}: {_db(v['before'])} -> {_db(v['after'])} dB ({v['cases']} pictures)")
    lines.append(f"written        {summary['output']}")
    return "\n".join(lines)
