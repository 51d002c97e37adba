"""The evaluation engine shared by `synth.evaluation.compare` and `synth.evaluation.gop`.

A run is a list of `Job`s (a target picture, its two references and the target time). For every
reference pair the vectors are fetched once per vector QP from a `synth.motion.sources.VectorSource`
(``--vectors``: the built-in estimator, x264, the clip's stream or a field file) and shared by all vector makers; every
maker (`synth.makers`) is prepared once per reference pair (``maker.prepare``: optical flows and
the like are computed once per pair, not per picture) and makes every target with
``pair.at(t)``; each picture is measured against the true one (`synth.metrics.picture_metrics`).
The result is a `RunResult`: one record per picture and method, per-pair vector timing, and the
worst and the median picture of every method by its difference to the baseline (with
predictions and maps) for reports.
"""

from __future__ import annotations

import math
import time
from collections import Counter, OrderedDict
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.makers import Maker, Prediction, get_maker, resolve_makers
from synth.metrics import finite_or_none, picture_metrics
from synth.motion.sources import DEFAULT_VECTOR_QP, VectorSource, parse_vector_source
from synth.picture import Picture

__all__ = [
    "DEFAULT_VECTOR_QP",
    "Job",
    "Highlight",
    "RunResult",
    "FrameSource",
    "parse_vector_qps",
    "resolve_run_makers",
    "method_label",
    "run_jobs",
    "summarise",
    "overview",
    "run_document",
    "METRIC_KEYS",
]

#: Per-picture figures, in table order.
METRIC_KEYS = ("psnr_yuv", "psnr_y", "psnr_cb", "psnr_cr", "ssim_y", "mae_y")

ProgressCallback = Callable[[int, int, str], None]


@dataclass(frozen=True)
class Job:
    """One target picture to make.

    Attributes
    ----------
    target, past, future : int
        Display numbers in the clip.
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
    """A picture kept for the report: the worst or the median one of a method (`key_method`) by
    its PSNR-YUV difference to the baseline (`key_value`, dB); `predictions` holds the method's
    and the baseline's pictures."""

    label: str  # 'worst' or 'median'
    job: Job
    key_method: str
    key_value: float
    target: Picture
    past: Picture
    future: Picture
    predictions: dict[str, Prediction]
    fields: list[VectorField]
    baseline: str | None = None


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
        Method labels in table order (maker name, with ``@qpNN`` when several vector QPs ran).
    records : list of dict
        One per target picture and method: tags, target/past/future/t, predictor (the maker's
        name), vector_qp, method, the metrics of `METRIC_KEYS` (None for an infinite PSNR) and
        seconds (the picture's time plus its share of the pair's preparation).
    pairs : list of dict
        One per reference pair and vector QP: past, future, vector_qp, vector_seconds, blocks,
        intra_share, mean_vector_length, fields (coded_time, reference_time and blocks of each
        field).
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
        """Mean weighted PSNR of every vector maker at every vector QP (all pictures)."""
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

    def vector_statistics(self) -> list[dict]:
        """Per vector QP (when several ran): mean over reference pairs of the fields' intra share
        and mean vector length (`_field_statistics`)."""
        qps = self.settings.get("vector_qps") or []
        if len(qps) < 2:
            return []
        out = []
        for qp in qps:
            rows = [p for p in self.pairs if p["vector_qp"] == qp]
            out.append({
                "vector_qp": qp,
                "pairs": len(rows),
                "intra_share": _mean(p.get("intra_share") for p in rows),
                "mean_vector_length": _mean(p.get("mean_vector_length") for p in rows),
            })  # fmt: skip
        return out


def run_document(run: RunResult, run_id: int = 0, *, pictures: bool = True) -> dict:
    """One run as a JSON-ready dict (not yet passed through `strict_json`): ``id``, ``kind``,
    ``clip``, ``settings``, ``methods``, ``group_key``, ``summary``, ``vector_qp_table``, ``pairs``
    and, with `pictures`, ``pictures`` (the records). The tables of `synth.evaluation.tables` read it."""
    doc = {
        "id": run_id,
        "kind": run.kind,
        "clip": run.clip,
        "settings": run.settings,
        "methods": list(run.methods),
        "group_key": run.group_key,
        "summary": run.summary(),
        "vector_qp_table": run.vector_qp_table(),
        "vector_statistics": run.vector_statistics(),
        "pairs": run.pairs,
    }
    if pictures:
        doc["pictures"] = run.records
    return doc


class FrameSource:
    """Random access by display number to the pictures of a clip (or a list), with a small cache.

    Parameters
    ----------
    frames : sequence of Picture or clip reader
        Picture ``i`` of `frames` has display number ``offset + i``.
    pictures : (first, last), optional
        Display numbers kept, both included (`synth.commands.options.PictureRange`; ``last`` None:
        the end). Default: all.
    limit : int, optional
        Keep at most this many pictures from the first one.
    offset : int
        Display number of ``frames[0]``.
    """

    def __init__(self, frames, *, pictures=None, limit: int | None = None, offset: int = 0, cache: int = 80):
        if hasattr(frames, "read"):
            self._read = frames.read
            n = len(frames)
        else:
            seq = list(frames)
            self._read = seq.__getitem__
            n = len(seq)
        self._offset = int(offset)
        first, last = self._offset, self._offset + n - 1
        if pictures is not None:
            want_first, want_last = pictures
            if want_first > last:
                raise ParameterError(f"--pictures starts at {want_first}, the clip ends at picture {last}")
            first = max(first, int(want_first))
            if want_last is not None:
                last = min(last, int(want_last))
        if limit is not None:
            if int(limit) < 1:
                raise ParameterError(f"frames must be at least 1, got {limit}")
            last = min(last, first + int(limit) - 1)
        self.first, self.last = first, last
        self._cache: OrderedDict[int, Picture] = OrderedDict()
        self._size = cache

    def __len__(self) -> int:
        return self.last - self.first + 1

    def __contains__(self, index: int) -> bool:
        return self.first <= index <= self.last

    def __getitem__(self, index: int) -> Picture:
        if index not in self:
            raise ParameterError(f"picture {index} out of range {self.first}..{self.last}")
        if index in self._cache:
            self._cache.move_to_end(index)
            return self._cache[index]
        pic = self._read(index - self._offset)
        self._cache[index] = pic
        if len(self._cache) > self._size:
            self._cache.popitem(last=False)
        return pic


def parse_vector_qps(value, *, option: str = "--vector-qp") -> list[int] | None:
    """Vector QPs from an int, a list or a comma-separated string ('22,32,42'); None stays None.

    Raises
    ------
    ParameterError
        For a non-integer, a QP outside 0..51 (H.264/H.265 range) or a repeated value; the
        message names `option`.
    """
    if value is None:
        return None
    if isinstance(value, int) and not isinstance(value, bool):
        parts = [value]
    elif isinstance(value, str):
        parts = [p.strip() for p in value.split(",") if p.strip()]
    else:
        parts = list(value)
    out = []
    for p in parts:
        try:
            q = int(p)
        except (TypeError, ValueError):
            raise ParameterError(f"{option} must be integers 0..51 separated by commas, got {value!r}") from None
        if not 0 <= q <= 51:
            raise ParameterError(f"{option} values must be in 0..51, got {q}")
        out.append(q)
    if not out:
        raise ParameterError(f"{option} must list at least one QP")
    if len(set(out)) != len(out):
        raise ParameterError(f"{option} must not repeat a value, got {value!r}")
    return out


def resolve_run_makers(makers=None, *, option: str = "--makers") -> list[Maker]:
    """The makers of a run: `Maker`s, names, a comma-separated string, or None (every maker)."""
    if makers is None or isinstance(makers, str):
        return resolve_makers(makers, option=option)
    names = [m.name if isinstance(m, Maker) else m for m in makers]
    resolve_makers(names, option=option)  # the checks: known names, none repeated, at least one
    return [m if isinstance(m, Maker) else get_maker(m, option=option) for m in makers]


def method_label(maker: Maker, qp: int | None, several_qps: bool) -> str:
    """Table label: the maker name, with '@qpNN' for vector makers when several QPs ran."""
    if maker.needs_vectors and several_qps:
        return f"{maker.name}@qp{qp}"
    return maker.name


def _field_statistics(fields) -> dict:
    """Area share of intra blocks and mean vector length (luma samples, area-weighted over inter
    blocks) of a pair's fields, as `synth.motion.summary.summarize_field` defines them."""
    area = intra = length = 0.0
    for f in fields:
        a = f.w.astype(np.float64) * f.h.astype(np.float64)
        area += a.sum()
        intra += a[f.intra].sum()
        v = np.hypot(f.dx.astype(np.float64), f.dy.astype(np.float64)) / 4.0
        length += (v * a)[~f.intra].sum()
    inter = area - intra
    return {
        "intra_share": float(intra / area) if area else None,
        "mean_vector_length": float(length / inter) if inter else None,
    }


def _mean(values: Iterable) -> float | None:
    vals = [float(v) for v in values if v is not None and math.isfinite(float(v))]
    return float(np.mean(vals, dtype=np.float64)) if vals else None


def run_jobs(
    jobs: Sequence[Job],
    targets: FrameSource,
    *,
    references: FrameSource | None = None,
    makers=None,
    vectors: VectorSource | str | None = None,
    vector_qps: Sequence[int] | None = None,
    params=None,
    progress: ProgressCallback | None = None,
    keep_highlights: bool = True,
    on_prediction: Callable[[Job, str, Prediction], None] | None = None,
    baseline: str | None = None,
) -> tuple[list[str], list[dict], list[dict], list[Highlight]]:
    """Make and measure every job with every maker.

    Parameters
    ----------
    jobs : sequence of Job
    targets : FrameSource
        The true pictures (what the made pictures are measured against).
    references : FrameSource, optional
        Where reference pictures come from (e.g. decoded pictures); `targets` when omitted.
    makers : sequence of Maker or names, comma-separated str, or None
        None runs every registered maker (`synth.makers.resolve_makers`).
    vectors : VectorSource or str, optional
        Where the vectors between two references come from (``--vectors``; default the built-in
        estimator). Any object with ``with_qp(q)`` and ``fields_for(past, future, past_time=,
        future_time=)`` will do.
    vector_qps : sequence of int, optional
        Vector QPs; vector makers run once per QP (``vectors.with_qp(q)``). Default: the source's QP.
    params : SynthParams, optional
        Calibrated synthesis parameters, handed to every maker's ``prepare``.
    progress : callable, optional
        Called as ``progress(done, total, label)`` after each job.
    keep_highlights : bool
        Keep the worst and the median picture of every method by its difference to the baseline
        (`synth.evaluation.differences.pick_pictures`) with its and the baseline's predictions;
        the worst are kept while running, the medians are made again after the run.
    on_prediction : callable, optional
        Called as ``on_prediction(job, method, prediction)`` for every picture (e.g. export).
    baseline : str, optional
        The method the highlights are chosen against (``--baseline``; default
        `synth.evaluation.differences.resolve_baseline`).

    Returns
    -------
    (methods, records, pairs, highlights)

    Notes
    -----
    Each maker is prepared once per reference pair (and vector QP); a record's ``seconds`` is
    the picture's own time plus an equal share of that preparation over the pair's pictures.
    """
    makers = resolve_run_makers(makers)
    references = references or targets
    if vectors is None or isinstance(vectors, str):
        vectors = parse_vector_source(vectors)
    qps = list(vector_qps) if vector_qps else [int(getattr(vectors, "qp", DEFAULT_VECTOR_QP))]
    several = len(qps) > 1
    if several and not getattr(vectors, "qp_matters", True):
        raise ParameterError(f"--vector-qp takes one value with --vectors {vectors.label} (its vectors are fixed)")
    sources = {qp: vectors.with_qp(qp) for qp in qps}
    any_vectors = any(m.needs_vectors for m in makers)
    methods: list[str] = []
    for m in makers:
        for qp in qps if m.needs_vectors else [None]:
            methods.append(method_label(m, qp, several))
    if keep_highlights:
        from synth.evaluation.differences import resolve_baseline

        base_method = resolve_baseline(methods, baseline)

    for j in jobs:
        for idx in (j.target, j.past, j.future):
            if idx not in targets or idx not in references:
                raise ParameterError(
                    f"picture {idx} out of range: the run uses pictures {targets.first}..{targets.last}"
                )
    per_pair = Counter((j.past, j.future) for j in jobs)
    records: list[dict] = []
    pairs: list[dict] = []
    field_cache: dict[tuple[int, int, int], list[VectorField]] = {}
    kept_fields: dict[tuple[int, int, int], list[VectorField]] = {}  # for the medians made again
    prepared: dict[tuple[int, int, str], object] = {}
    worst: dict[str, Highlight] = {}
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
                    fl = sources[qp].fields_for(past, future, past_time=float(job.past), future_time=float(job.future))
                    field_cache[key] = list(fl)
                    if keep_highlights:
                        kept_fields[key] = field_cache[key]
                    pairs.append(
                        {
                            "past": job.past,
                            "future": job.future,
                            "vector_qp": qp,
                            "vector_seconds": time.perf_counter() - start,
                            "blocks": int(sum(len(f) for f in fl)),
                            **_field_statistics(fl),
                            "fields": [
                                {"coded_time": f.coded_time, "reference_time": f.reference_time, "blocks": len(f)}
                                for f in fl
                            ],
                        }
                    )
                fields_by_qp[qp] = field_cache[key]
        predictions: dict[str, Prediction] = {}
        for m in makers:
            for qp in qps if m.needs_vectors else [None]:
                label = method_label(m, qp, several)
                pkey = (job.past, job.future, label)
                if pkey not in prepared:
                    prepared[pkey] = m.prepare(
                        past,
                        future,
                        fields=fields_by_qp.get(qp) if qp is not None else None,
                        params=params,
                        past_time=float(job.past),
                        future_time=float(job.future),
                    )
                pair = prepared[pkey]
                pred = pair.at(job.t)
                predictions[label] = pred
                if on_prediction is not None:
                    on_prediction(job, label, pred)
                met = picture_metrics(pred.picture, truth)
                rec = dict(job.tags)
                rec.update(
                    target=job.target,
                    past=job.past,
                    future=job.future,
                    t=job.t,
                    method=label,
                    predictor=m.name,
                    vector_qp=qp,
                )
                for k in METRIC_KEYS:
                    if k in met:
                        rec[k] = finite_or_none(met[k]) if k.startswith("psnr") else float(met[k])
                rec["seconds"] = float(pred.seconds) + pair.prepare_seconds / per_pair[(job.past, job.future)]
                records.append(rec)
        if keep_highlights:
            now = {r["method"]: r["psnr_yuv"] for r in records[-len(predictions) :]}
            fields0 = fields_by_qp.get(qps[0], [])
            for label, value in now.items():
                if label == base_method or value is None or now.get(base_method) is None:
                    continue
                diff = value - now[base_method]
                if label not in worst or diff < worst[label].key_value:
                    kept = {label: predictions[label], base_method: predictions[base_method]}
                    worst[label] = Highlight(
                        "worst", job, label, diff, truth, past, future, kept, fields0, baseline=base_method
                    )
        if progress is not None:
            progress(done, total, f"picture {job.target}")
        # Caches: keep only the pairs later jobs still need.
        remaining = {(j.past, j.future) for j in jobs[done:]}
        for key in [k for k in field_cache if (k[0], k[1]) not in remaining]:
            del field_cache[key]
        for key in [k for k in prepared if (k[0], k[1]) not in remaining]:
            del prepared[key]
    highlights = []
    if keep_highlights:
        highlights = _highlights(
            jobs, records, methods, worst, base_method, targets=targets, references=references, makers=makers,
            vectors=_KeptFields(kept_fields), qps=qps, params=params,
        )  # fmt: skip
    return methods, records, pairs, highlights


class _KeptFields:
    """A vector source serving the fields a run already fetched (the medians made again after the
    run reuse them: no second estimation, the same vectors)."""

    kind = "kept"

    def __init__(self, fields: dict[tuple[int, int, int], list[VectorField]], qp: int | None = None):
        self.fields, self.qp = fields, qp

    def with_qp(self, qp: int) -> _KeptFields:
        return _KeptFields(self.fields, qp)

    def fields_for(self, past, future, *, past_time: float, future_time: float) -> list[VectorField]:
        return self.fields[(int(past_time), int(future_time), self.qp)]


def _highlights(jobs, records, methods, worst, baseline, *, targets, references, makers, vectors, qps, params):
    """The worst (kept while running) and the median picture of every method by its difference
    to the baseline; medians are made again, from the same inputs (same pictures, bit for bit)."""
    from synth.evaluation.differences import pick_pictures

    group_key = "layer" if any("layer" in r for r in records) else "gap"
    by_job = {(j.target, j.past, j.future, j.t): j for j in jobs}
    out = []
    for pick in pick_pictures(records, methods, baseline=baseline, group_key=group_key):
        job = by_job[(pick["target"], pick["past"], pick["future"], pick["t"])]
        kept = worst.get(pick["method"])
        if kept is not None and kept.job == job:
            out.append(kept if pick["label"] == "worst" else Highlight(**{**kept.__dict__, "label": "median"}))
            continue
        wanted = {pick["method"], baseline}
        made: dict[str, Prediction] = {}
        chosen = [m for m in makers if any(method_label(m, q, len(qps) > 1) in wanted for q in qps)]
        run_jobs(
            [job], targets, references=references, makers=chosen, vectors=vectors, params=params,
            vector_qps=qps, keep_highlights=False,
            on_prediction=lambda _j, label, pred, made=made, wanted=wanted: made.update({label: pred}) if label in wanted else None,
        )  # fmt: skip
        out.append(
            Highlight(
                pick["label"], job, pick["method"], pick["difference"], targets[job.target], references[job.past],
                references[job.future], made, [], baseline=baseline,
            )
        )  # fmt: skip
    return out


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
