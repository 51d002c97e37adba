"""What `synth frame` does: synthesise one picture of a clip from two of its pictures, measure it,
write it (1-frame YUV4MPEG2) and optionally its maps (PNG)."""

from __future__ import annotations

import math
import os
import time
from pathlib import Path

import cv2
import numpy as np

from synth.io import atomic_write_bytes, open_clip, read_fields, write_y4m

from synth.errors import ParameterError
from synth.metrics import picture_psnr, ssim
from synth.synthesis.params import SynthParams
from synth.picture import Picture
from synth.synthesis.synthesiser import SynthesisResult, synthesise_with_maps

__all__ = ["run_frame", "write_maps", "ERROR_MAP_GAIN"]

#: The absolute-error map shows |error| (8-bit units) times this gain, saturating at 255.
ERROR_MAP_GAIN = 4


def _png(path: Path, image: np.ndarray) -> None:
    ok, buf = cv2.imencode(".png", image)
    if not ok:  # pragma: no cover - OpenCV failure
        raise ParameterError(f"cannot encode {path.name} as PNG")
    atomic_write_bytes(path, buf.tobytes())


def write_maps(directory: str | os.PathLike, result: SynthesisResult, truth: Picture | None = None) -> list[str]:
    """Write the maps of a synthesis as 8-bit greyscale PNGs into `directory`.

    - ``candidates.png``: candidate count, 255 = the largest K of the run;
    - ``confidence.png``: estimator confidence, 0..1 as 0..255;
    - ``past_weight.png``: share of the estimate taken from the past reference, 0..1 as 0..255;
    - ``abs_error.png`` (when `truth` is given): luma |error| in 8-bit units times `ERROR_MAP_GAIN`.
    """
    d = Path(directory)
    if d.exists() and not d.is_dir():
        raise ParameterError(f"--maps must be a directory, got the file {d}")
    d.mkdir(parents=True, exist_ok=True)
    k = max(1, int(result.info.get("k", 1)))
    images = {
        "candidates.png": result.maps["candidates"] * (255.0 / k),
        "confidence.png": result.maps["confidence"] * 255.0,
        "past_weight.png": result.maps["past_weight"] * 255.0,
    }
    if truth is not None:
        y0, y1 = result.rows
        shift = truth.bit_depth - 8
        err = np.abs(result.picture.y.astype(np.float64) - truth.y[y0:y1].astype(np.float64)) / (1 << shift)
        images["abs_error.png"] = err * ERROR_MAP_GAIN
    written = []
    for name, img in images.items():
        _png(d / name, np.clip(np.floor(img + 0.5), 0, 255).astype(np.uint8))
        written.append(str(d / name))
    return written


def run_frame(
    clip: str | os.PathLike,
    *,
    past: int,
    future: int,
    output: str | os.PathLike,
    at: int | None = None,
    t: float | None = None,
    field_path: str | os.PathLike | None = None,
    params: SynthParams | None = None,
    maps_dir: str | os.PathLike | None = None,
    qp: int = 27,
    two_way: bool = False,
    method: str | None = None,
) -> dict:
    """Synthesise the picture at `at` (or fraction `t`) between pictures `past` and `future` of a clip.

    Parameters
    ----------
    clip : path-like
        Any clip :func:`synth.io.open_clip` reads.
    past, future : int
        Picture numbers of the references (display order from 0), ``past < future``.
    output : path-like
        The synthesised picture as a 1-frame ``.y4m`` (written atomically).
    at : int, optional
        Picture number of the target, strictly between; the true picture is then measured against.
    t : float, optional
        Target time as a fraction in (0, 1) (no true picture). Exactly one of `at` and `t`.
    field_path : path-like, optional
        Vector fields (``.json``/``.npz``, `synth.io.read_fields`); default: estimated with
        :func:`synth.motion.estimate_field` from `future` to `past` (and from `past` to `future`
        with `two_way`).
    params : SynthParams, optional
    maps_dir : path-like, optional
        Directory for the PNG maps (:func:`write_maps`).
    qp : int
        QP of the motion estimator when the vectors are estimated.
    method : str, optional
        Overrides ``params.method``.

    Returns
    -------
    dict
        Times, fraction, picture size, candidate count, mean confidence, PSNR per plane and luma SSIM
        (when the true picture exists), seconds, written paths.
    """
    if (at is None) == (t is None):
        raise ParameterError("give exactly one of --at (a picture number) and --t (a fraction), got " + (
            "both" if at is not None else "neither"))
    reader = open_clip(clip)
    try:
        n = len(reader)
        for name, v in (("--past", past), ("--future", future)):
            if not 0 <= v < n:
                raise ParameterError(f"{name} must be a picture number in 0..{n - 1}, got {v}")
        if past >= future:
            raise ParameterError(f"--past must come before --future, got --past {past} --future {future}")
        if at is not None:
            if not past < at < future:
                raise ParameterError(f"--at must lie strictly between --past {past} and --future {future}, got {at}")
            frac = (at - past) / (future - past)
        else:
            frac = float(t)
            if not math.isfinite(frac) or not 0 < frac < 1:
                raise ParameterError(f"--t must lie strictly between 0 and 1, got {t}")
        p_pic, f_pic = reader.read(past), reader.read(future)
        truth = reader.read(at) if at is not None else None
        info = reader.info
    finally:
        reader.close()
    t0 = time.perf_counter()
    if field_path is not None:
        fields = read_fields(field_path, width=p_pic.width, height=p_pic.height)
        source = str(field_path)
    else:
        from synth.motion.estimator import estimate_reference_fields

        fields = estimate_reference_fields(p_pic, f_pic, past_time=past, future_time=future, qp=qp, two_way=two_way)
        source = f"estimated (QP {qp}{', both directions' if two_way else ''})"
    t1 = time.perf_counter()
    result = synthesise_with_maps(
        p_pic, f_pic, fields, t=frac, params=params, past_time=past, future_time=future, method=method
    )
    t2 = time.perf_counter()
    write_y4m(output, [result.picture], info)
    summary = {
        "clip": str(clip),
        "past": past,
        "future": future,
        "at": at,
        "t": frac,
        "size": f"{p_pic.width}x{p_pic.height}",
        "format": f"{p_pic.chroma_format} {p_pic.bit_depth}-bit",
        "vectors": source,
        "fields": len(fields),
        "method": result.params.method,
        "candidates": int(result.info.get("k", 0)),
        "mean_confidence": float(np.mean(result.maps["confidence"])),
        "vector_seconds": t1 - t0,
        "synthesis_seconds": t2 - t1,
        "output": str(output),
        "psnr": None,
        "ssim_y": None,
        "maps": [],
    }
    if truth is not None:
        summary["psnr"] = picture_psnr(result.picture, truth)
        if min(truth.y.shape) >= 11:
            summary["ssim_y"] = ssim(result.picture.y, truth.y, bit_depth=truth.bit_depth)
    if maps_dir is not None:
        summary["maps"] = write_maps(maps_dir, result, truth)
    return summary
