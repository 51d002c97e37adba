"""What `synth calibrate` does: fit the synthesis parameters and the learned reliability on training
clips (`synth.synthesis.calibrate`) and write the parameter file."""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path

from synth.errors import FormatError, ParameterError

__all__ = ["run_calibrate", "format_calibrate", "DEFAULT_GAPS", "DEFAULT_PICTURES"]

#: Reference distances fitted on by default.
DEFAULT_GAPS = "2,4,8"
#: Pictures of each clip used by default (display numbers, both included).
DEFAULT_PICTURES = "0:32"


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
    progress: Callable[[int, int, str], None] | None = None,
) -> dict:
    """Calibrate on `clips` and write the parameter file `output` (JSON, atomically).

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


def _db(v) -> str:
    return "inf" if v is None else f"{v:.2f}"


def format_calibrate(summary: dict) -> str:
    """The text `synth calibrate` prints for a `run_calibrate` summary."""
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
