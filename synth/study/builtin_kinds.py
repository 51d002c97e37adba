"""The job kinds that ship with synth.

``blend``
    A cheap baseline measured on the clip itself: every picture lying between two references
    `gap` pictures apart is predicted by a temporal blend of the references (or by one of them) and
    measured against the true picture. It needs nothing but the clip, runs in milliseconds on small
    clips, and is what the study machinery is tested with.
``compare``, ``gop``, ``rd``
    Adapters around the evaluation workbench (`synth.compare`, `synth.gop`) and the encoder-in-the-
    loop measurement (`synth.rd`). Each one reads the clip by path (a temporary ``.y4m`` when the
    manifest selects pictures or a window) and returns the per-picture rows of the library's result.
    While a library function is missing from the installation, the kind reports itself unavailable
    and a manifest using it is rejected before any job starts.
"""

from __future__ import annotations

import importlib
from typing import Any, Callable

import numpy as np

from synth.errors import ParameterError
from synth.metrics import mean_squared_error, picture_psnr
from synth.picture import Picture

from .clipsource import clip_as_y4m, open_job_clip
from .kinds import JobKind, KindUnavailable, Param, register_kind

__all__ = ["blend_rows", "BLEND_METHODS"]

#: Predictors of the ``blend`` kind.
BLEND_METHODS = ("linear", "nearest", "past")


def _at_least(n: int) -> Callable[[Any], str | None]:
    return lambda v: None if v >= n else f"must be at least {n}"


def _one_of(options) -> Callable[[Any], str | None]:
    return lambda v: None if v in options else f"must be one of {', '.join(options)}"


def _blend(past: Picture, future: Picture, *, t: float, method: str) -> Picture:
    if method == "past" or (method == "nearest" and t <= 0.5):
        return past
    if method == "nearest":
        return future
    planes = [
        (1.0 - np.float32(t)) * a.astype(np.float32) + np.float32(t) * b.astype(np.float32)
        for a, b in zip(past.planes, future.planes)
    ]
    return Picture.from_float(planes, chroma_format=past.chroma_format, bit_depth=past.bit_depth)


def blend_rows(clip_path, params: dict, *, progress=None) -> list[dict]:
    """Run the ``blend`` kind: predict in-between pictures from two references and measure them.

    Parameters
    ----------
    clip_path : path-like
        The clip (any format `synth.io.open_clip` reads, or raw YUV with ``params['raw']``).
    params : dict
        ``gap`` (int >= 2): distance between the references; references sit at 0, gap, 2 gap, ...
        ``method`` ('linear', 'nearest', 'past'): the prediction, ``(1 - t) past + t future``
        rounded half up, the nearer reference (past on a tie), or always the past reference.
        Clip options ``pictures`` and ``window`` as in `synth.study.clipsource`.
    progress : callable, optional
        ``progress(done, total)`` after each predicted picture.

    Returns
    -------
    list of dict
        One row per predicted picture: ``past``, ``future``, ``target`` (picture numbers within the
        selected range), ``t``, ``psnr_y``/``psnr_cb``/``psnr_cr`` (dB; PSNR as 10 log10(MAX^2/MSE),
        common practice) and ``mse_y``.

    Raises
    ------
    ParameterError
        When the clip is shorter than one gap.
    """
    gap = int(params.get("gap", 2))
    method = params.get("method", "linear")
    with open_job_clip(clip_path, params) as clip:
        n = len(clip)
        if n <= gap:
            raise ParameterError(f"gap: the clip has {n} pictures, fewer than gap + 1 = {gap + 1}")
        anchors = list(range(0, n - gap, gap))
        total = len(anchors) * (gap - 1)
        rows: list[dict] = []
        future = clip.read(0)
        for a in anchors:
            past, future = future, clip.read(a + gap)
            for k in range(1, gap):
                t = k / gap
                truth = clip.read(a + k)
                pred = _blend(past, future, t=t, method=method)
                psnr = picture_psnr(pred, truth)
                row = {"past": a, "future": a + gap, "target": a + k, "t": t}
                for plane, value in psnr.items():
                    row[f"psnr_{plane.lower()}"] = value
                row["mse_y"] = mean_squared_error(pred.y, truth.y)
                rows.append(row)
                if progress is not None:
                    progress(len(rows), total)
    return rows


register_kind(
    JobKind(
        name="blend",
        run=blend_rows,
        params={
            "gap": Param((int,), 2, _at_least(2), "distance between the two references, in pictures"),
            "method": Param((str,), "linear", _one_of(BLEND_METHODS), "linear | nearest | past"),
        },
        headline=("psnr_y",),
        metrics=("psnr_y", "psnr_cb", "psnr_cr", "mse_y"),
        summary="temporal blend of the two references, measured against the true in-between pictures (cheap)",
    )
)


# --- adapters around the workbench and the encoder measurement ----------------------------------


def _library_function(module: str, name: str):
    try:
        mod = importlib.import_module(module)
        return getattr(mod, name)
    except (ImportError, AttributeError):
        return None


def _rows_of(result) -> list[dict]:
    """Per-picture rows of a library result object (``.rows`` / ``.to_rows()``) or a list of dicts."""
    if hasattr(result, "to_rows"):
        rows = result.to_rows()
    elif hasattr(result, "rows"):
        rows = result.rows
    else:
        rows = result
    if not isinstance(rows, (list, tuple)) or not all(isinstance(r, dict) for r in rows):
        raise TypeError(f"the library returned {type(result).__name__}, not per-picture rows")
    return [dict(r) for r in rows]


def _adapter(kind: str, module: str, name: str, issue: int, headline: tuple[str, ...], summary: str) -> JobKind:
    def available() -> str | None:
        if _library_function(module, name) is None:
            return f"job kind {kind!r} is not available yet: {module}.{name} is not in this installation (issue {issue})"
        return None

    def run(clip_path, params: dict, *, progress=None) -> list[dict]:
        fn = _library_function(module, name)
        if fn is None:
            raise KindUnavailable(available())
        options = {k: v for k, v in params.items() if k not in ("raw", "pictures", "window")}
        with clip_as_y4m(clip_path, params) as path:
            return _rows_of(fn(path, **options))

    run.__name__ = f"{kind}_rows"
    run.__doc__ = f"Run ``{module}.{name}`` on the job's clip and return its per-picture rows."
    return JobKind(name=kind, run=run, params=None, headline=headline, summary=summary, available=available)


register_kind(_adapter("compare", "synth.compare", "compare", 6, ("psnr_y",), "every predictor on every in-between picture (workbench)"))
register_kind(_adapter("gop", "synth.gop", "gop", 6, ("psnr_y",), "hierarchical GOP synthesis per temporal layer (workbench)"))
register_kind(_adapter("rd", "synth.rd", "rd", 5, ("bits", "psnr_y"), "rate-distortion points with a real encoder (encoder side)"))
