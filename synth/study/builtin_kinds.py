"""The job kinds that ship with synth.

``blend``
    A cheap baseline measured on the clip itself: every picture lying between two references
    `gap` pictures apart is predicted by a temporal blend of the references (or by one of them) and
    measured against the true picture. It needs nothing but the clip, runs in milliseconds on small
    clips, and is what the study machinery is tested with.
``synthesise``
    A maker of the registry (`synth.makers`, default ``lmmse``, the product) on the clip: vectors
    from the job's vector source between the references, the picture at every in-between time
    (vector-based makers optionally in stripes), measured against the true in-between pictures.
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
from collections.abc import Callable
from typing import Any

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
    return lambda v: None if v in options else f"must be one of {', '.join(map(str, options))}"


def _with_defaults(kind: str, params: dict) -> dict:
    """`params` with the kind's declared defaults filled in for keys it lacks (callers that bypass
    the manifest, e.g. tests calling ``get_kind(...).run`` directly, may pass only some keys)."""
    from synth.study.kinds import get_kind

    out = dict(params)
    for key, spec in (get_kind(kind).params or {}).items():
        if key not in out and spec.default is not None:
            out[key] = spec.default
    return out


def _blend_predictor(past: Picture, future: Picture, method: str):
    """``t -> Picture`` of a ``blend`` method: 'linear' is the registry's ``average`` maker
    (`synth.makers.temporal_blend`, rounded half up); 'nearest' and 'past' copy a reference."""
    if method == "linear":
        from synth.makers import get_maker

        pair = get_maker("average").prepare(past, future)
        return lambda t: pair.at(t).picture
    return lambda t: past if method == "past" or t <= 0.5 else future


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
        return _blend_predictor(past, future, method)

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


def _job_vector_source(clip_path, params: dict, *, qp: int | None, gop: int | None = None):
    """The job's `VectorSource` (``vectors`` at `qp`) for its clip: ``x264`` codes the job's
    pictures (the clip options applied), as one hierarchy of `gop` when given; ``stream`` reads
    the clip file itself, so it refuses the clip options that renumber pictures."""
    from synth.motion.sources import DEFAULT_VECTOR_QP, STREAM, parse_vector_source

    value = params.get("vectors")
    if value == STREAM and (params.get("pictures") or params.get("window") or params.get("raw")):
        raise ParameterError(
            "vectors: 'stream' reads the clip file as it is; it cannot be combined with raw, pictures or window"
        )
    key = tuple(repr(params.get(k)) for k in ("raw", "pictures", "window"))
    source = parse_vector_source(
        value,
        qp=DEFAULT_VECTOR_QP if qp is None else qp,
        name="vectors",
        clip=None if clip_path is None else clip_path,
        open_clip=None if clip_path is None else (lambda: open_job_clip(clip_path, params)),
        clip_key=key,
    )
    return source if gop is None else source.with_hierarchy(gop, option="gap")


def _source_and_params(params: dict, *, qp: int | None, clip_path=None, gap: int | None = None):
    """The job's `VectorSource` (``vectors``, at `qp`, for `clip_path`; x264 coded as one
    hierarchy of GOP `gap` when that gives every pair its fields) and synthesis parameters
    (``params`` file)."""
    from synth.commands.compare import x264_gop_for_gaps

    gop = x264_gop_for_gaps([gap]) if gap is not None else None
    source = _job_vector_source(clip_path, params, qp=qp, gop=gop)
    syn = None
    if params.get("params"):
        from synth.synthesis.params import SynthParams

        syn = SynthParams.load(params["params"])
    return source, syn


#: Core-synthesis method of each vector-based maker that can run in stripes.
_STRIPED_METHODS = {"lmmse": "lmmse", "projection": "nearest", "weighted": "distance_weighted"}


def synthesise_rows(clip_path, params: dict, *, progress=None) -> list[dict]:
    """Run the ``synthesise`` kind: a maker of the registry on every in-between picture.

    For each pair of references `gap` apart, the fields between them come from the job's vector
    source (``vectors``: the built-in estimator at ``vector_qp``, or a field file whose times are
    the job's picture numbers), the maker is prepared once (`synth.makers.Maker.prepare`) and every
    picture between them is made and measured against the true picture. With ``stripe_rows`` > 0,
    vector-based makers run in stripes (`synth.study.stripes.synthesise_striped`; bit-identical).

    Parameters
    ----------
    clip_path : path-like
    params : dict
        ``gap`` (int >= 2), ``maker`` (a registry name, default 'lmmse'), ``vectors``
        ('estimate' or a field file), ``vector_qp`` (int 0..51), ``params`` (synthesis parameter
        file, '' for the built-in values), ``stripe_rows`` (int >= 0) and the clip options.
    progress : callable, optional
        ``progress(done, total)`` after each synthesised picture.

    Returns
    -------
    list of dict
        ``past``, ``future``, ``target``, ``t``, ``psnr_y``/``psnr_cb``/``psnr_cr``, ``mse_y`` per
        synthesised picture.
    """
    from synth.codec.export import prepare_pair
    from synth.makers import get_maker
    from synth.study.stripes import synthesise_striped

    params = _with_defaults("synthesise", params)
    gap, stripe_rows = int(params["gap"]), int(params["stripe_rows"])
    maker = get_maker(params["maker"], option="maker")
    if stripe_rows and maker.name not in _STRIPED_METHODS:
        raise ParameterError(
            f"stripe_rows: maker {maker.name!r} does not run in stripes (only {', '.join(_STRIPED_METHODS)}); use 0"
        )
    source, syn = _source_and_params(params, qp=int(params["vector_qp"]), clip_path=clip_path, gap=gap)

    def predictor(a, past, future):
        pair, _ = prepare_pair(maker, past, future, past_time=a, future_time=a + gap, source=source, params=syn)
        if stripe_rows:
            from synth.synthesis.params import SynthParams

            sp = (syn or SynthParams()).with_changes(method=_STRIPED_METHODS[maker.name])
            return lambda t: synthesise_striped(past, future, pair.fields, t=t, params=sp, stripe_rows=stripe_rows)
        return lambda t: pair.at(t).picture

    with open_job_clip(clip_path, params) as clip:
        return _in_between_rows(clip, gap, predictor, progress)


def _synthesis_available() -> str | None:
    for module, name in (("synth.makers", "get_maker"), ("synth.study.stripes", "synthesise_striped")):
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
        ``gap``, ``qps`` (text such as ``"22,27,32,37"``), ``codec``, ``makers`` (comma-separated;
        the first is the synthetic one), ``vectors``, ``vector_qp`` (absent: each point's encoder
        QP), ``params``, ``refs``, ``extra_qp``, ``preset``, ``offsets`` (with ``offset_block`` and
        ``offset_window``), ``limit`` (0: all targets), as for ``synth rd``; and the clip options.

    Returns
    -------
    list of dict
        The measurement's rows (one per target picture, configuration and QP: ``bits``, ``psnr_y``
        ...), each with the clip's BD-rate (%) and BD-PSNR (dB) of its configuration against the
        two real references (VCEG-M33; empty for the anchor itself).
    """
    from synth.codec.rdmeasure import measure_clip, parse_qps
    from synth.makers import resolve_makers

    params = _with_defaults("rd", params)
    vector_qp = params.get("vector_qp")
    source, syn = _source_and_params(params, qp=vector_qp, clip_path=clip_path, gap=int(params["gap"]))
    with open_job_clip(clip_path, params) as clip:
        result = measure_clip(
            clip.read,
            len(clip),
            clip=str(clip_path),
            gap=int(params["gap"]),
            qps=parse_qps(params["qps"], bit_depth=clip.info.bit_depth, option="qps"),
            codec=params["codec"],
            makers=resolve_makers(params["makers"], option="makers"),
            source=source,
            params=syn,
            vector_qp=None if vector_qp is None else int(vector_qp),
            refs=params["refs"],
            extra_qp=int(params["extra_qp"]),
            preset=params["preset"],
            offsets={"block": int(params["offset_block"]), "window": int(params["offset_window"])}
            if params["offsets"]
            else None,
            limit=int(params["limit"]) or None,
            target_picture=params["target_picture"],
            progress=progress,
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


def _adapter(
    kind: str,
    module: str,
    name: str,
    issue: int,
    *,
    params: dict[str, Param] | None,
    headline: tuple[str, ...],
    metrics: tuple[str, ...] | None,
    group_by: tuple[str, ...],
    summary: str,
    vector_gop: Callable[[dict], int | None] | None = None,
) -> JobKind:
    def available() -> str | None:
        if _library_function(module, name) is None:
            return (
                f"job kind {kind!r} is not available yet: {module}.{name} is not in this installation (issue {issue})"
            )
        return None

    def run(clip_path, params: dict, *, progress=None) -> list[dict]:
        fn = _library_function(module, name)
        if fn is None:
            raise KindUnavailable(available())
        options = {k: v for k, v in params.items() if k not in ("raw", "pictures", "window")}
        with clip_as_y4m(clip_path, params) as path:
            if vector_gop is not None and isinstance(options.get("vectors"), str):
                # the coded sources need the clip (x264 codes it, stream reads it)
                qp = options.get("vector_qp")
                first_qp = int(str(qp).split(",")[0]) if qp is not None else None
                options["vectors"] = _job_vector_source(path, {"vectors": options["vectors"]}, qp=first_qp,
                                                        gop=vector_gop(options))  # fmt: skip
            rows = _rows_of(fn(path, **options))
        return [{k: v for k, v in r.items() if k != "clip"} for r in rows]  # the study names clips itself

    run.__name__ = f"{kind}_rows"
    run.__doc__ = f"Run ``{module}.{name}`` on the job's clip and return its per-picture rows."
    return JobKind(
        name=kind,
        run=run,
        params=params,
        headline=headline,
        metrics=metrics,
        group_by=group_by,
        summary=summary,
        available=available,
    )


def _rd_available() -> str | None:
    for module, name in (("synth.codec.rdmeasure", "measure_clip"), ("synth.makers", "resolve_makers")):
        if _library_function(module, name) is None:
            return f"job kind 'rd' is not available yet: {module}.{name} is not in this installation (issue 5)"
    return None


def _int_range(lo: int, hi: int) -> Callable[[Any], str | None]:
    return lambda v: None if lo <= v <= hi else f"must be in {lo}..{hi}"


def _maker_names(*, several: bool) -> Callable[[Any], str | None]:
    """Check of a ``maker`` / ``makers`` value against the registry (`synth.makers`)."""

    def check(v) -> str | None:
        from synth.makers import MAKERS, resolve_makers

        names = [n.strip() for n in str(v).split(",") if n.strip()] if several else [v]
        if not several and "," in str(v):
            return f"must be one maker: {', '.join(MAKERS)}"
        try:
            resolve_makers(names)
        except ParameterError:
            return f"must be {'comma-separated names' if several else 'one'} of {', '.join(MAKERS)}, without repeats"
        return None

    return check


_VECTORS_HELP = "'estimate', 'x264', 'stream' (H.264/MPEG-4/MPEG-2 clips) or a vector-field file (.json/.npz)"


def _vector_source(v) -> str | None:
    from synth.motion.sources import parse_vector_source

    try:
        parse_vector_source(v, name="vectors")
    except ParameterError as exc:
        return str(exc)
    return None


def _params_file(v) -> str | None:
    import os

    return None if v == "" or os.path.isfile(v) else "must name an existing synthesis parameter file (JSON)"


def _vector_params(*, qp_default) -> dict[str, Param]:
    """The ``vectors``, ``vector_qp`` and ``params`` parameters of the kinds that synthesise."""
    return {
        "vectors": Param((str,), "estimate", _vector_source, _VECTORS_HELP),
        "vector_qp": Param((int,), qp_default, _int_range(0, 51), "QP of the estimated vectors"),
        "params": Param((str,), "", _params_file, "synthesis parameter file ('': built-in values)"),
    }


register_kind(
    JobKind(
        name="synthesise",
        run=synthesise_rows,
        params={
            "gap": Param((int,), 2, _at_least(2), "distance between the two references, in pictures"),
            "maker": Param((str,), "lmmse", _maker_names(several=False), "maker of the picture (synth.makers)"),
            **_vector_params(qp_default=27),
            "stripe_rows": Param(
                (int,), 0, lambda v: None if v >= 0 else "must be >= 0", "rows per stripe (0: whole picture)"
            ),
        },
        headline=("psnr_y",),
        metrics=("psnr_y", "psnr_cb", "psnr_cr", "mse_y"),
        summary="a maker (default the LMMSE estimator) on every in-between picture, measured against the true pictures",
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
            "makers": Param(
                (str,),
                "lmmse,dis-medium",
                _maker_names(several=True),
                "comma-separated makers, one extra reference each; the first is the synthetic one",
            ),
            **_vector_params(qp_default=None),
            "refs": Param(
                (str,), "decoded", _one_of(("decoded", "source")), "synthesise from decoded or source references"
            ),
            "extra_qp": Param((int,), 4, _int_range(0, 51), "QP of the extra reference picture"),
            "target_picture": Param(
                (str,),
                "B",
                _one_of(("B", "P")),
                "the target coded as a B picture (default, as synth rd) or a P picture",
            ),
            "preset": Param((str,), "medium", None, "encoder speed preset"),
            "offsets": Param((bool,), False, None, "also measure the offset-corrected synthetic picture"),
            "offset_block": Param((int,), 16, _one_of((8, 16, 32)), "offset block size (with offsets)"),
            "offset_window": Param((int,), 2, _at_least(1), "offset search range in luma samples (with offsets)"),
            "limit": Param(
                (int,), 0, lambda v: None if v >= 0 else "must be >= 0", "only the first N targets (0: all)"
            ),
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
        return 'must be a QP 0..51 or comma-separated QPs such as "22,32,42"'
    return None


def _x264_gop_for_gap(gap) -> int | None:
    from synth.commands.compare import x264_gop_for_gaps

    return x264_gop_for_gaps([int(gap)])


def _positive(v) -> str | None:
    return None if v >= 1 else "must be at least 1"


register_kind(
    _adapter(
        "compare",
        "synth.evaluation.compare",
        "compare",
        6,
        params={
            "gap": Param((int,), 8, _at_least(2), "distance between the two references"),
            "makers": Param((str,), None, _maker_names(several=True), "comma-separated makers (default: all)"),
            "predictors": Param((str,), None, None, "former name of makers"),
            "vectors": Param((str,), None, _vector_source, _VECTORS_HELP),
            "vector_qp": Param((int, str), None, _qp_list, "QP(s) of the estimated vectors"),
            "params": Param((str,), None, _params_file, "synthesis parameter file"),
            "frames": Param((int,), None, _positive, "use only the first N pictures"),
        },
        headline=("psnr_yuv",),
        metrics=_WORKBENCH_METRICS,
        group_by=("method",),
        summary="every maker on every in-between picture (workbench)",
        vector_gop=lambda o: _x264_gop_for_gap(o.get("gap", 8)),
    )
)
register_kind(
    _adapter(
        "gop",
        "synth.evaluation.gop",
        "gop",
        6,
        params={
            "size": Param((int,), 16, _one_of((2, 4, 8, 16, 32, 64)), "GOP size"),
            "flat": Param((bool,), None, None, "synthesise every picture straight from the anchors"),
            "decoded_refs": Param((int,), None, _int_range(0, 51), "references after an H.264 encode at this QP"),
            "makers": Param((str,), None, _maker_names(several=True), "comma-separated makers (default: all)"),
            "predictors": Param((str,), None, None, "former name of makers"),
            "vectors": Param((str,), None, _vector_source, _VECTORS_HELP),
            "vector_qp": Param((int, str), None, _qp_list, "QP(s) of the estimated vectors"),
            "params": Param((str,), None, _params_file, "synthesis parameter file"),
            "frames": Param((int,), None, _positive, "use only the first N pictures"),
        },
        headline=("psnr_yuv",),
        metrics=_WORKBENCH_METRICS,
        group_by=("method", "layer"),
        summary="hierarchical GOP synthesis per temporal layer (workbench)",
        vector_gop=lambda o: int(o.get("size", 16)),
    )
)
