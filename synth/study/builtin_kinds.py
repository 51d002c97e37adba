"""The job kinds that ship with synth.

``blend``
    A cheap baseline measured on the clip itself: every picture lying between two references
    `gap` pictures apart is predicted by a temporal blend of the references (or by one of them) and
    measured against the true picture. It needs nothing but the clip, runs in milliseconds on small
    clips, and is what the study machinery is tested with.
``synthesise``
    The product on the clip: vectors estimated between the references, the LMMSE synthesiser
    (optionally in stripes), measured against the true in-between pictures.
``rd``
    The encoder-in-the-loop measurement (`synth.codec.rdmeasure.measure_clip`): rows per target picture,
    configuration and QP, with each configuration's BD-rate against the real references.
``compare``, ``gop``
    Adapters around the evaluation workbench (`synth.evaluation.compare.compare`, `synth.evaluation.gop.gop`). Each one
    reads the clip by path (a temporary ``.y4m`` on the worker when the manifest selects pictures or
    a window) and returns the per-picture rows of the library's result. Their rows carry the
    measured ``seconds`` per picture, which naturally differ from run to run.

While a kind's library function is missing from the installation, the kind reports itself
unavailable and a manifest using it is rejected before any job starts.
"""

from __future__ import annotations

import importlib
from typing import Any, Callable

import numpy as np

from synth.errors import ParameterError
from synth.metrics import mean_squared_error, picture_psnr
from synth.picture import Picture

from synth.study.clipsource import clip_as_y4m, open_job_clip
from synth.study.kinds import JobKind, KindUnavailable, Param, register_kind

__all__ = ["blend_rows", "BLEND_METHODS"]

#: Predictors of the ``blend`` kind.
BLEND_METHODS = ("linear", "nearest", "past")


def _at_least(n: int) -> Callable[[Any], str | None]:
    return lambda v: None if v >= n else f"must be at least {n}"


def _one_of(options) -> Callable[[Any], str | None]:
    return lambda v: None if v in options else f"must be one of {', '.join(options)}"


def _with_defaults(kind: str, params: dict) -> dict:
    """`params` with the kind's declared defaults filled in for keys it lacks (callers that bypass
    the manifest, e.g. tests calling ``get_kind(...).run`` directly, may pass only some keys)."""
    from synth.study.kinds import get_kind

    out = dict(params)
    for key, spec in (get_kind(kind).params or {}).items():
        if key not in out and spec.default is not None:
            out[key] = spec.default
    return out


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
    params = _with_defaults("blend", params)
    gap, method = int(params["gap"]), params["method"]

    def predictor(a, past, future):
        return lambda t: _blend(past, future, t=t, method=method)

    with open_job_clip(clip_path, params) as clip:
        return _in_between_rows(clip, gap, predictor, progress)


def _in_between_rows(clip, gap: int, predictor, progress=None) -> list[dict]:
    """Measure every picture between references `gap` apart against its prediction.

    ``predictor(a, past, future)`` is called once per reference pair (anchor `a`) and returns a
    function ``t -> Picture``; each row holds ``past``, ``future``, ``target``, ``t``, PSNR per plane
    and ``mse_y``.
    """
    n = len(clip)
    if n <= gap:
        raise ParameterError(f"gap: the clip has {n} pictures, fewer than gap + 1 = {gap + 1}")
    anchors = list(range(0, n - gap, gap))
    total = len(anchors) * (gap - 1)
    rows: list[dict] = []
    future = clip.read(0)
    for a in anchors:
        past, future = future, clip.read(a + gap)
        predict = predictor(a, past, future)
        for k in range(1, gap):
            t = k / gap
            pred = predict(t)
            truth = clip.read(a + k)
            row = {"past": a, "future": a + gap, "target": a + k, "t": t}
            for plane, value in picture_psnr(pred, truth).items():
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


# --- synthesis with the product's estimator ------------------------------------------------------


def synthesise_rows(clip_path, params: dict, *, progress=None) -> list[dict]:
    """Run the ``synthesise`` kind: the LMMSE synthesiser on every in-between picture.

    For each pair of references `gap` apart, a codec-like vector field of the future reference
    against the past one is estimated at QP `qp` (`synth.estimate_field`), and every picture between
    them is synthesised (`synth.study.stripes.synthesise_striped` with `stripe_rows` rows per stripe,
    or the whole picture at once when `stripe_rows` is 0) and measured against the true picture.

    Parameters
    ----------
    clip_path : path-like
    params : dict
        ``gap`` (int >= 2), ``qp`` (int 0..51, the vector field's rate constraint), ``method``
        ('lmmse', 'distance_weighted', 'nearest'), ``stripe_rows`` (int >= 0) and the clip options.
    progress : callable, optional
        ``progress(done, total)`` after each synthesised picture.

    Returns
    -------
    list of dict
        ``past``, ``future``, ``target``, ``t``, ``psnr_y``/``psnr_cb``/``psnr_cr``, ``mse_y`` per
        synthesised picture.
    """
    from synth.motion.estimator import estimate_field
    from synth.synthesis.params import SynthParams
    from synth.synthesis.synthesiser import synthesise

    from synth.study.stripes import synthesise_striped

    params = _with_defaults("synthesise", params)
    gap, qp, stripe_rows = int(params["gap"]), int(params["qp"]), int(params["stripe_rows"])
    sp = SynthParams().with_changes(method=params["method"])

    def predictor(a, past, future):
        field = estimate_field(future, past, coded_time=a + gap, reference_time=a, qp=qp)
        if stripe_rows:
            return lambda t: synthesise_striped(past, future, [field], t=t, params=sp, stripe_rows=stripe_rows)
        return lambda t: synthesise(past, future, [field], t=t, params=sp)

    with open_job_clip(clip_path, params) as clip:
        return _in_between_rows(clip, gap, predictor, progress)


def _synthesis_available() -> str | None:
    for module, name in (("synth.motion.estimator", "estimate_field"), ("synth.synthesis.synthesiser", "synthesise"), ("synth.synthesis.params", "SynthParams")):
        if _library_function(module, name) is None:
            return f"job kind 'synthesise' is not available: {module}.{name} is not in this installation"
    return None


# --- adapters around the workbench and the encoder measurement ----------------------------------


def _library_function(module: str, name: str):
    try:
        mod = importlib.import_module(module)
        return getattr(mod, name)
    except (ImportError, AttributeError):
        return None


def rd_rows(clip_path, params: dict, *, progress=None) -> list[dict]:
    """Run the ``rd`` kind: the encoder-in-the-loop measurement (`synth.codec.rdmeasure.measure_clip`).

    Parameters
    ----------
    clip_path : path-like
    params : dict
        ``gap``, ``qps`` (text such as ``"22,27,32,37"``), ``codec``, ``synthesiser``, ``refs``,
        ``extra_qp``, ``preset``, ``offsets`` (with ``offset_block`` and ``offset_window``), ``limit``
        (0: all targets), as for ``synth rd``; and the clip options.

    Returns
    -------
    list of dict
        The measurement's rows (one per target picture, configuration and QP: ``bits``, ``psnr_y``
        ...), each with the clip's BD-rate (%) and BD-PSNR (dB) of its configuration against the
        two real references (VCEG-M33; empty for the anchor itself).
    """
    from synth.codec.rdmeasure import measure_clip, parse_qps
    from synth.makers.reference_makers import maker_by_name

    params = _with_defaults("rd", params)
    with open_job_clip(clip_path, params) as clip:
        result = measure_clip(
            clip.read, len(clip), clip=str(clip_path), gap=int(params["gap"]),
            qps=parse_qps(params["qps"], bit_depth=clip.info.bit_depth), codec=params["codec"],
            maker=maker_by_name(params["synthesiser"]), refs=params["refs"], extra_qp=int(params["extra_qp"]),
            preset=params["preset"],
            offsets={"block": int(params["offset_block"]), "window": int(params["offset_window"])} if params["offsets"] else None,
            limit=int(params["limit"]) or None, progress=progress,
        )
    bd = result.bd()
    rows = []
    for r in result.rows:
        r = {k: v for k, v in r.items() if k != "clip"}  # the study names clips itself
        figures = bd.get(r["config"], {})
        r["bd_rate"] = figures.get("bd_rate")
        r["bd_psnr"] = figures.get("bd_psnr")
        rows.append(r)
    return rows


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


def _adapter(kind: str, module: str, name: str, issue: int, *, params: dict[str, Param] | None, headline: tuple[str, ...],
             metrics: tuple[str, ...] | None, group_by: tuple[str, ...], summary: str) -> JobKind:
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
            rows = _rows_of(fn(path, **options))
        return [{k: v for k, v in r.items() if k != "clip"} for r in rows]  # the study names clips itself

    run.__name__ = f"{kind}_rows"
    run.__doc__ = f"Run ``{module}.{name}`` on the job's clip and return its per-picture rows."
    return JobKind(name=kind, run=run, params=params, headline=headline, metrics=metrics, group_by=group_by,
                   summary=summary, available=available)


def _rd_available() -> str | None:
    for module, name in (("synth.codec.rdmeasure", "measure_clip"), ("synth.makers.reference_makers", "maker_by_name")):
        if _library_function(module, name) is None:
            return f"job kind 'rd' is not available yet: {module}.{name} is not in this installation (issue 5)"
    return None


def _int_range(lo: int, hi: int) -> Callable[[Any], str | None]:
    return lambda v: None if lo <= v <= hi else f"must be in {lo}..{hi}"


register_kind(
    JobKind(
        name="synthesise",
        run=synthesise_rows,
        params={
            "gap": Param((int,), 2, _at_least(2), "distance between the two references, in pictures"),
            "qp": Param((int,), 27, _int_range(0, 51), "QP of the estimated vector field (rate constraint)"),
            "method": Param((str,), "lmmse", _one_of(("lmmse", "distance_weighted", "nearest")), "weights of the candidates"),
            "stripe_rows": Param((int,), 0, lambda v: None if v >= 0 else "must be >= 0", "rows per stripe (0: whole picture)"),
        },
        headline=("psnr_y",),
        metrics=("psnr_y", "psnr_cb", "psnr_cr", "mse_y"),
        summary="the LMMSE synthesiser from estimated coded vectors, measured against the true in-between pictures",
        available=_synthesis_available,
    )
)
register_kind(
    JobKind(
        name="rd",
        run=rd_rows,
        params={
            "gap": Param((int,), 8, _at_least(2), "distance between the two references"),
            "qps": Param((str,), "22,27,32,37", None, "comma-separated QPs, four or more"),
            "codec": Param((str,), "h264", _one_of(("h264", "hevc")), "h264 (x264) or hevc (x265)"),
            "synthesiser": Param((str,), "estimator", _one_of(("estimator", "blend")), "maker of the synthetic reference"),
            "refs": Param((str,), "decoded", _one_of(("decoded", "source")), "synthesise from decoded or source references"),
            "extra_qp": Param((int,), 4, _int_range(0, 51), "QP of the extra reference picture"),
            "preset": Param((str,), "medium", None, "encoder speed preset"),
            "offsets": Param((bool,), False, None, "also measure the offset-corrected synthetic picture"),
            "offset_block": Param((int,), 16, _one_of((8, 16, 32)), "offset block size (with offsets)"),
            "offset_window": Param((int,), 2, _at_least(1), "offset search range in luma samples (with offsets)"),
            "limit": Param((int,), 0, lambda v: None if v >= 0 else "must be >= 0", "only the first N targets (0: all)"),
        },
        headline=("bits", "psnr_y"),
        metrics=("bits", "psnr_y", "psnr_cb", "psnr_cr", "bd_rate", "bd_psnr"),
        group_by=("config", "qp"),
        summary="bits and PSNR of the target picture coded by a real encoder, per configuration and QP; BD-rate against the real references",
        available=_rd_available,
    )
)
_WORKBENCH_METRICS = ("psnr_yuv", "psnr_y", "psnr_cb", "psnr_cr", "ssim_y", "mae_y")


def _qp_list(v) -> str | None:
    if isinstance(v, int):
        return None if 0 <= v <= 51 else "must be in 0..51"
    parts = [p.strip() for p in str(v).split(",")]
    if not parts or not all(p.isdigit() and 0 <= int(p) <= 51 for p in parts):
        return "must be a QP 0..51 or comma-separated QPs such as \"22,32,42\""
    return None


def _positive(v) -> str | None:
    return None if v >= 1 else "must be at least 1"


register_kind(
    _adapter(
        "compare", "synth.evaluation.compare", "compare", 6,
        params={
            "gap": Param((int,), 8, _at_least(2), "distance between the two references"),
            "predictors": Param((str,), None, None, "comma-separated predictor names (default: all)"),
            "vector_qp": Param((int, str), None, _qp_list, "QP(s) of the estimated vectors"),
            "frames": Param((int,), None, _positive, "use only the first N pictures"),
        },
        headline=("psnr_yuv",), metrics=_WORKBENCH_METRICS, group_by=("method",),
        summary="every predictor on every in-between picture (workbench)",
    )
)
register_kind(
    _adapter(
        "gop", "synth.evaluation.gop", "gop", 6,
        params={
            "size": Param((int,), 16, _one_of((2, 4, 8, 16, 32, 64)), "GOP size"),
            "flat": Param((bool,), None, None, "synthesise every picture straight from the anchors"),
            "decoded_refs": Param((int,), None, _int_range(0, 51), "references after an H.264 encode at this QP"),
            "predictors": Param((str,), None, None, "comma-separated predictor names (default: all)"),
            "vector_qp": Param((int, str), None, _qp_list, "QP(s) of the estimated vectors"),
            "frames": Param((int,), None, _positive, "use only the first N pictures"),
        },
        headline=("psnr_yuv",), metrics=_WORKBENCH_METRICS, group_by=("method", "layer"),
        summary="hierarchical GOP synthesis per temporal layer (workbench)",
    )
)
