"""The evaluation engine shared by `synth.evaluation.compare` and `synth.evaluation.gop`.

A run is a list of `Job`s (a target picture, its two references and the target time). For every
reference pair the vector fields are estimated once per vector QP (`synth.motion.estimate_reference_fields`:
the future reference coded against the past one, both directions on request) and shared
by all vector-based predictors; every predictor then predicts every target and the prediction is
measured against the true picture (`synth.metrics.picture_metrics`). The result is a `RunResult`:
one record per picture and method, per-pair vector timing, and the best and worst pictures
(with predictions and maps) for reports.
"""

from __future__ import annotations

import math
import time
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Callable, Iterable, Sequence

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.metrics import finite_or_none, picture_metrics
from synth.picture import Picture
from synth.makers import Prediction, Predictor, resolve_predictors

__all__ = [
    "DEFAULT_VECTOR_QP",
    "Job",
    "Highlight",
    "RunResult",
    "FrameSource",
    "estimate_pair_fields",
    "parse_vector_qps",
    "run_jobs",
    "summarise",
    "overview",
    "METRIC_KEYS",
]

#: QP at which vectors are estimated when no --vector-qp is given (synth.motion.estimator's default).
DEFAULT_VECTOR_QP = 27

#: Per-picture figures, in table order.
METRIC_KEYS = ("psnr_yuv", "psnr_y", "psnr_cb", "psnr_cr", "ssim_y", "mae_y")

ProgressCallback = Callable[[int, int, str], None]
FieldEstimator = Callable[..., list[VectorField]]


@dataclass(frozen=True)
class Job:
    """One target picture to predict.

    Attributes
    ----------
    target, past, future : int
        Display indices in the clip.
    t : float
        (target - past) / (future - past).
    tags : dict
        Grouping values copied into every record (e.g. ``{'gap': 8}`` or ``{'gop': 0, 'layer': 2}``).
    """

    target: int
    past: int
    future: int
    t: float
    tags: tuple[tuple[str, object], ...] = ()


@dataclass
class Highlight:
    """A picture kept for the report (the best or the worst one for the key predictor)."""

    label: str  # 'best' or 'worst'
    job: Job
    key_method: str
    key_value: float
    target: Picture
    past: Picture
    future: Picture
    predictions: dict[str, Prediction]
    fields: list[VectorField]


@dataclass
class RunResult:
    """Everything a compare or GOP run measured.

    Attributes
    ----------
    kind : str
        'compare' or 'gop'.
    clip : str
        Name of the clip (for tables).
    settings : dict
        The run's parameters (JSON-ready).
    methods : list of str
        Method labels in table order (predictor name, with ``@qpNN`` when several vector QPs ran).
    records : list of dict
        One per target picture and method: tags, target/past/future/t, predictor, vector_qp,
        method, the metrics of `METRIC_KEYS` (None for an infinite PSNR) and seconds.
    pairs : list of dict
        One per reference pair and vector QP: past, future, vector_qp, vector_seconds, blocks,
        fields (coded_time, reference_time and blocks of each field).
    highlights : list of Highlight
    group_key : str
        Tag the summary groups by ('gap' or 'layer').
    """

    kind: str
    clip: str
    settings: dict
    methods: list[str]
    records: list[dict] = field(default_factory=list)
    pairs: list[dict] = field(default_factory=list)
    highlights: list[Highlight] = field(default_factory=list)
    group_key: str = "gap"

    def to_rows(self) -> list[dict]:
        """The per-picture records without timings (deterministic), e.g. for `synth study`."""
        return [{k: v for k, v in r.items() if k != "seconds"} for r in self.records]

    def summary(self) -> list[dict]:
        """Per-method means per group and over all pictures (see `summarise`)."""
        return summarise(self.records, self.methods, group_key=self.group_key)

    def vector_qp_table(self) -> list[dict]:
        """Mean weighted PSNR of every vector-based predictor at every vector QP (all pictures)."""
        qps = self.settings.get("vector_qps") or []
        out = []
        if len(qps) < 2:
            return out
        names = []
        for r in self.records:
            if r["vector_qp"] is not None and r["predictor"] not in names:
                names.append(r["predictor"])
        for name in names:
            row: dict = {"predictor": name}
            for qp in qps:
                vals = [r["psnr_yuv"] for r in self.records if r["predictor"] == name and r["vector_qp"] == qp]
                row[f"qp{qp}"] = _mean(vals)
            out.append(row)
        return out


class FrameSource:
    """Random access to pictures with a small cache: wraps a list of pictures or a clip reader."""

    def __init__(self, frames, *, limit: int | None = None, cache: int = 80):
        if hasattr(frames, "read"):
            self._read = frames.read
            n = len(frames)
        else:
            seq = list(frames)
            self._read = seq.__getitem__
            n = len(seq)
        if limit is not None:
            if int(limit) < 1:
                raise ParameterError(f"frames must be at least 1, got {limit}")
            n = min(n, int(limit))
        self._n = n
        self._cache: OrderedDict[int, Picture] = OrderedDict()
        self._size = cache

    def __len__(self) -> int:
        return self._n

    def __getitem__(self, index: int) -> Picture:
        if not 0 <= index < self._n:
            raise ParameterError(f"picture index {index} out of range 0..{self._n - 1}")
        if index in self._cache:
            self._cache.move_to_end(index)
            return self._cache[index]
        pic = self._read(index)
        self._cache[index] = pic
        if len(self._cache) > self._size:
            self._cache.popitem(last=False)
        return pic


def parse_vector_qps(value) -> list[int] | None:
    """Vector QPs from a list or a comma-separated string ('22,32,42'); None stays None.

    Raises
    ------
    ParameterError
        For a non-integer, a QP outside 0..51 (H.264/H.265 range) or a repeated value.
    """
    if value is None:
        return None
    if isinstance(value, str):
        parts = [p.strip() for p in value.split(",") if p.strip()]
    else:
        parts = list(value)
    out = []
    for p in parts:
        try:
            q = int(p)
        except (TypeError, ValueError):
            raise ParameterError(f"vector-qp must be integers 0..51 separated by commas, got {value!r}") from None
        if not 0 <= q <= 51:
            raise ParameterError(f"vector-qp values must be in 0..51, got {q}")
        out.append(q)
    if not out:
        raise ParameterError("vector-qp must list at least one QP")
    if len(set(out)) != len(out):
        raise ParameterError(f"vector-qp must not repeat a value, got {value!r}")
    return out


def estimate_pair_fields(
    past: Picture, future: Picture, *, past_time: float, future_time: float, qp: int, two_way: bool = False
) -> list[VectorField]:
    """Vector fields between two references, as every synth command estimates them.

    See `synth.motion.estimate_reference_fields`: ``[future -> past]``, and with `two_way` also
    ``past -> future``.
    """
    try:
        from synth.motion.estimator import estimate_reference_fields
    except ImportError:
        raise ParameterError("vector-based predictors need synth.motion.estimator (vector estimation), which is not installed") from None
    return estimate_reference_fields(past, future, past_time=past_time, future_time=future_time, qp=qp, two_way=two_way)


def method_label(predictor: Predictor, qp: int | None, several_qps: bool) -> str:
    """Table label: the predictor name, with '@qpNN' for vector-based ones when several QPs ran."""
    if predictor.needs_fields and several_qps:
        return f"{predictor.name}@qp{qp}"
    return predictor.name


def _mean(values: Iterable) -> float | None:
    vals = [float(v) for v in values if v is not None and math.isfinite(float(v))]
    return float(np.mean(vals, dtype=np.float64)) if vals else None


def run_jobs(
    jobs: Sequence[Job],
    targets: FrameSource,
    *,
    references: FrameSource | None = None,
    predictors: Sequence[Predictor] | str | None = None,
    vector_qps: Sequence[int] | None = None,
    estimate_fields: FieldEstimator | None = None,
    progress: ProgressCallback | None = None,
    keep_highlights: bool = True,
    on_prediction: Callable[[Job, str, Prediction], None] | None = None,
) -> tuple[list[str], list[dict], list[dict], list[Highlight]]:
    """Predict and measure every job with every predictor.

    Parameters
    ----------
    jobs : sequence of Job
    targets : FrameSource
        The true pictures (what predictions are measured against).
    references : FrameSource, optional
        Where reference pictures come from (e.g. decoded pictures); `targets` when omitted.
    predictors : sequence of Predictor, names, or None
        None runs every available predictor (`synth.makers.resolve_predictors`).
    vector_qps : sequence of int, optional
        QPs at which vectors are estimated; vector-based predictors run once per QP.
        Default: `DEFAULT_VECTOR_QP`.
    estimate_fields : callable, optional
        ``estimate_fields(past, future, past_time=, future_time=, qp=) -> list[VectorField]``;
        default `estimate_pair_fields`.
    progress : callable, optional
        Called as ``progress(done, total, label)`` after each job.
    keep_highlights : bool
        Keep the best and worst picture (by the key predictor) with its predictions.
    on_prediction : callable, optional
        Called as ``on_prediction(job, method, prediction)`` for every prediction (e.g. export).

    Returns
    -------
    (methods, records, pairs, highlights)
    """
    if predictors is None or isinstance(predictors, str):
        preds = resolve_predictors(predictors, vectors=True if estimate_fields is not None else None)
    else:
        preds = [resolve_predictors([p])[0] if isinstance(p, str) else p for p in predictors]
    if not preds:
        raise ParameterError("predictors must name at least one predictor")
    references = references or targets
    qps = list(vector_qps) if vector_qps else [DEFAULT_VECTOR_QP]
    several = len(qps) > 1
    estimate = estimate_fields or estimate_pair_fields
    any_vectors = any(p.needs_fields for p in preds)
    methods: list[str] = []
    for p in preds:
        for qp in qps if p.needs_fields else [None]:
            methods.append(method_label(p, qp, several))
    key_pred = next((p for p in preds if p.name == "lmmse"), preds[0])
    key_method = method_label(key_pred, qps[0] if key_pred.needs_fields else None, several)

    records: list[dict] = []
    pairs: list[dict] = []
    field_cache: dict[tuple[int, int, int], list[VectorField]] = {}
    best: Highlight | None = None
    worst: Highlight | None = None
    n = len(targets)
    for j in jobs:
        for idx in (j.target, j.past, j.future):
            if not 0 <= idx < n:
                raise ParameterError(f"picture index {idx} out of range: the clip has {n} pictures")
    total = len(jobs)
    for done, job in enumerate(jobs, start=1):
        past = references[job.past]
        future = references[job.future]
        truth = targets[job.target]
        if not past.same_format(truth):
            raise ParameterError("reference and target pictures differ in size, chroma format or bit depth")
        fields_by_qp: dict[int, list[VectorField]] = {}
        if any_vectors:
            for qp in qps:
                key = (job.past, job.future, qp)
                if key not in field_cache:
                    start = time.perf_counter()
                    fl = estimate(past, future, past_time=float(job.past), future_time=float(job.future), qp=qp)
                    field_cache[key] = list(fl)
                    pairs.append(
                        {
                            "past": job.past,
                            "future": job.future,
                            "vector_qp": qp,
                            "vector_seconds": time.perf_counter() - start,
                            "blocks": int(sum(len(f) for f in fl)),
                            "fields": [
                                {"coded_time": f.coded_time, "reference_time": f.reference_time, "blocks": len(f)}
                                for f in fl
                            ],
                        }
                    )
                fields_by_qp[qp] = field_cache[key]
        predictions: dict[str, Prediction] = {}
        for p in preds:
            for qp in qps if p.needs_fields else [None]:
                label = method_label(p, qp, several)
                pred = p(past, future, t=job.t, fields=fields_by_qp.get(qp) if qp is not None else None)
                predictions[label] = pred
                if on_prediction is not None:
                    on_prediction(job, label, pred)
                m = picture_metrics(pred.picture, truth)
                rec = dict(job.tags)
                rec.update(
                    target=job.target,
                    past=job.past,
                    future=job.future,
                    t=job.t,
                    method=label,
                    predictor=p.name,
                    vector_qp=qp,
                )
                for k in METRIC_KEYS:
                    if k in m:
                        rec[k] = finite_or_none(m[k]) if k.startswith("psnr") else float(m[k])
                rec["seconds"] = float(pred.seconds)
                records.append(rec)
        if keep_highlights:
            value = next(r["psnr_yuv"] for r in records[-len(predictions):] if r["method"] == key_method)
            value = float("inf") if value is None else value
            fields0 = fields_by_qp.get(qps[0], [])
            if worst is None or value < worst.key_value:
                worst = Highlight("worst", job, key_method, value, truth, past, future, predictions, fields0)
            if best is None or value > best.key_value:
                best = Highlight("best", job, key_method, value, truth, past, future, predictions, fields0)
        if progress is not None:
            progress(done, total, f"picture {job.target}")
        # Field cache: keep only pairs that later jobs still need.
        remaining = {(j.past, j.future) for j in jobs[done:]}
        for key in [k for k in field_cache if (k[0], k[1]) not in remaining]:
            del field_cache[key]
    highlights = [h for h in (worst, best) if h is not None]
    return methods, records, pairs, highlights


def summarise(records: Sequence[dict], methods: Sequence[str], *, group_key: str = "gap") -> list[dict]:
    """Per-method means per group (and 'all'), with wins per picture.

    A picture (identified by its group value and target index) is won by the method with the
    highest weighted PSNR among all methods run on it (ties go to the earlier method).

    Returns
    -------
    list of dict
        Keys: ``group`` (the group value or 'all'), ``method``, ``pictures``, the means of
        `METRIC_KEYS` (None when no finite value), ``ms_per_picture`` and ``wins``.
    """
    order = {m: i for i, m in enumerate(methods)}
    wins: dict[tuple, str] = {}
    best_val: dict[tuple, tuple[float, int]] = {}
    for r in records:
        pic = (r.get(group_key), r["target"])
        v = r["psnr_yuv"]
        v = float("inf") if v is None else v
        cand = (v, -order.get(r["method"], 0))
        if pic not in best_val or cand > best_val[pic]:
            best_val[pic] = cand
            wins[pic] = r["method"]
    groups = sorted({r.get(group_key) for r in records}, key=lambda g: (g is None, g))
    rows = []
    for g in list(groups) + (["all"] if len(groups) > 1 else []):
        for m in methods:
            sel = [r for r in records if r["method"] == m and (g == "all" or r.get(group_key) == g)]
            if not sel:
                continue
            row = {"group": g, "method": m, "pictures": len(sel)}
            for k in METRIC_KEYS:
                if any(k in r for r in sel):
                    row[k] = _mean(r.get(k) for r in sel)
            row["ms_per_picture"] = 1000.0 * float(np.mean([r["seconds"] for r in sel]))
            row["wins"] = sum(1 for pic, w in wins.items() if w == m and (g == "all" or pic[0] == g))
            rows.append(row)
    return rows


def overview(runs: Sequence[RunResult]) -> dict:
    """Mean PSNR-YUV per method pooled over several runs (e.g. the demo clips).

    Columns: one per GOP size ('GOP 16', all layers) and one per comparison gap ('gap 8'), each
    pooling the pictures of every run that has it. Runs with several vector QPs are left out (they
    have their own table). A picture is won by the method with the highest PSNR-YUV on it (ties
    to the earlier method).

    Returns
    -------
    dict
        ``columns`` (list of column names) and ``rows``: per method ``method``, one key per column
        (mean PSNR-YUV or None), ``wins`` and ``ms_per_picture`` over all pooled pictures.
    """
    runs = [r for r in runs if len(r.settings.get("vector_qps") or []) < 2]
    methods: list[str] = []
    for r in runs:
        for m in r.methods:
            if m not in methods:
                methods.append(m)
    columns: dict[str, list[tuple[int, dict]]] = {}
    for kind in ("gop", "compare"):
        for i, r in enumerate(runs):
            if r.kind != kind:
                continue
            if kind == "gop":
                columns.setdefault(f"GOP {r.settings['gop_size']}", []).extend((i, x) for x in r.records)
            else:
                for g in r.settings["gaps"]:
                    columns.setdefault(f"gap {g}", []).extend((i, x) for x in r.records if x.get("gap") == g)
    order = {m: k for k, m in enumerate(methods)}
    best: dict[tuple, tuple] = {}
    for col, recs in columns.items():
        for i, x in recs:
            key = (col, i, x["target"])
            v = float("inf") if x["psnr_yuv"] is None else x["psnr_yuv"]
            cand = (v, -order[x["method"]])
            if key not in best or cand > best[key]:
                best[key] = cand
    wins = {m: 0 for m in methods}
    for _, neg in best.values():
        wins[methods[-neg]] += 1
    rows = []
    for m in methods:
        row: dict = {"method": m}
        for col, recs in columns.items():
            row[col] = _mean(x["psnr_yuv"] for _, x in recs if x["method"] == m)
        secs = [x["seconds"] for recs in columns.values() for _, x in recs if x["method"] == m]
        row["wins"] = wins[m]
        row["ms_per_picture"] = 1000.0 * float(np.mean(secs)) if secs else None
        rows.append(row)
    return {"columns": list(columns), "rows": rows}
