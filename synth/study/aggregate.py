"""Aggregating job records into one table, per-clip means and means over clips.

The aggregate depends only on the jobs (in manifest order) and their result rows, never on the
order jobs finished in, the executor, or timings: the same study gives the same ``study.json`` and
``study.csv`` whether it ran in one process, in a pool, on a cluster, or in several interrupted runs.
"""

from __future__ import annotations

import csv
import io
import json
import math
from dataclasses import dataclass, field
from typing import Any

from synth.io.jsonout import dumps_strict
from synth.study.jobs import Job
from synth.study.kinds import CLIP_OPTIONS, get_kind

__all__ = ["StudyTables", "aggregate", "setting_label", "varying_parameters", "to_csv", "to_json"]

_LEAD = ("job", "kind", "clip")


def setting_label(params: dict, keys=None) -> str:
    """A short label of a job's parameter setting, keys sorted: ``"gap=2 method=linear"``.

    Only `keys` are named when given (the parameters that vary within the study), clip options
    never; ``"all"`` when no parameter is named.
    """
    items = [(k, v) for k, v in sorted(params.items()) if k not in CLIP_OPTIONS and (keys is None or k in keys)]
    return " ".join(f"{k}={v}" for k, v in items) or "all"


def varying_parameters(jobs: list[Job]) -> tuple[dict[str, list[str]], dict[str, dict]]:
    """Per job kind: the parameters whose value differs between its jobs (sorted), and the
    parameters every job of the kind shares, with their value."""
    values: dict[str, dict[str, set]] = {}
    for job in jobs:
        per = values.setdefault(job.kind, {})
        for k, v in job.params.items():
            if k not in CLIP_OPTIONS:
                per.setdefault(k, set()).add(json.dumps(v, sort_keys=True))
    vary = {kind: sorted(k for k, vs in per.items() if len(vs) > 1) for kind, per in values.items()}
    fixed = {
        kind: {k: json.loads(next(iter(vs))) for k, vs in sorted(per.items()) if len(vs) == 1}
        for kind, per in values.items()
    }
    return vary, fixed


def _number(value: Any) -> float | None:
    """A metric value as a float; None for a missing one (null: a non-finite number in a record).
    The strings 'inf', '-inf', 'nan' of records written before the strict JSON policy still count."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return float(value)
    if value in ("inf", "-inf", "nan"):
        return float(value)
    return None


def _mean(values: list[float]) -> float:
    return math.fsum(values) / len(values) if values else float("nan")


@dataclass
class StudyTables:
    """The aggregated study.

    Attributes
    ----------
    columns : list of str
        Column order of `rows` (``job``, ``kind``, ``clip``, parameters, then result columns).
    rows : list of dict
        Every result row of every finished job, in manifest order.
    per_clip : list of dict
        One entry per (kind, setting, values of the kind's `group_by` columns, clip): ``kind``,
        ``setting``, the group columns, ``clip``, ``rows`` and the mean of each metric over the
        clip's rows.
    means : list of dict
        One entry per (kind, setting, group values): ``kind``, ``setting``, the group columns,
        ``clips`` and the mean over clips of the per-clip means (every clip weighs the same, whatever
        its length).
    metrics : dict of str to list of str
        Metric columns per kind, in first-seen order.
    failures : list of dict
        ``job``, ``kind``, ``clip``, ``setting``, ``error`` of each failed job.
    missing : list of str
        Ids of jobs without a record (not run yet).
    fixed : dict of str to dict
        Per kind, the parameters shared by all its jobs (the settings name only those that vary).
    """

    columns: list[str] = field(default_factory=list)
    rows: list[dict] = field(default_factory=list)
    per_clip: list[dict] = field(default_factory=list)
    means: list[dict] = field(default_factory=list)
    metrics: dict[str, list[str]] = field(default_factory=dict)
    failures: list[dict] = field(default_factory=list)
    missing: list[str] = field(default_factory=list)
    fixed: dict[str, dict] = field(default_factory=dict)


def _param_columns(params: dict) -> dict:
    out = {}
    for k, v in params.items():
        if k == "raw":
            continue
        if isinstance(v, list):
            v = ",".join(str(x) for x in v)
        out[k] = v
    return out


def aggregate(jobs: list[Job], records: dict[str, dict]) -> StudyTables:
    """Combine job records into tables.

    Parameters
    ----------
    jobs : list of Job
        The study's jobs in manifest order (two jobs may share an id when two clip entries hold the
        same file content and settings; each keeps its own clip name).
    records : dict of str to dict
        Job records by job id.

    Returns
    -------
    StudyTables
    """
    tables = StudyTables()
    columns: dict[str, None] = dict.fromkeys(_LEAD)
    result_columns: dict[str, None] = {}
    groups: dict[tuple, dict] = {}
    vary, tables.fixed = varying_parameters(jobs)
    for job in jobs:
        rec = records.get(job.id)
        setting = setting_label(job.params, vary.get(job.kind, []))
        if rec is None:
            tables.missing.append(job.id)
            continue
        if rec.get("status") != "ok":
            tables.failures.append(
                {"job": job.id, "kind": job.kind, "clip": job.clip, "setting": setting, "error": rec.get("error")}
            )
            continue
        pcols = _param_columns(job.params)
        for key in pcols:
            columns.setdefault(key, None)
        kind = get_kind(job.kind)
        for row in rec.get("rows", []):
            out = {"job": job.id, "kind": job.kind, "clip": job.clip, **pcols}
            for key, value in row.items():
                out[key if key not in out or out[key] == value else f"row.{key}"] = value
            split = tuple((g, row.get(g)) for g in kind.group_by)
            group = groups.setdefault((job.kind, setting, split, job.clip), {"n": 0, "sums": {}})
            for name, value in out.items():
                if name in _LEAD or name in pcols:
                    continue
                result_columns.setdefault(name, None)
                if name in kind.group_by:
                    continue
                is_metric = (
                    name in kind.metrics
                    if kind.metrics is not None
                    else isinstance(value, float) or value in ("inf", "-inf", "nan")
                )
                if is_metric and (_number(value) is not None or value is None and kind.metrics is not None):
                    ms = tables.metrics.setdefault(job.kind, [])
                    if name not in ms:
                        ms.append(name)
                    values = group["sums"].setdefault(name, [])
                    if _number(value) is not None:  # null (a non-finite number) is left out of the means
                        values.append(_number(value))
            group["n"] += 1
            tables.rows.append(out)
    tables.columns = list(columns) + [c for c in result_columns if c not in columns]

    setting_clips: dict[tuple, list[dict]] = {}
    for (kind, setting, split, clip), g in groups.items():
        entry = {"kind": kind, "setting": setting, **dict(split), "clip": clip, "rows": g["n"]}
        for m in tables.metrics.get(kind, []):
            entry[m] = _mean(g["sums"].get(m, []))
        tables.per_clip.append(entry)
        setting_clips.setdefault((kind, setting, split), []).append(entry)
    for (kind, setting, split), entries in setting_clips.items():
        mean = {"kind": kind, "setting": setting, **dict(split), "clips": len(entries)}
        for m in tables.metrics.get(kind, []):
            vals = [e[m] for e in entries if not math.isnan(e[m])]
            mean[m] = _mean(vals)
        tables.means.append(mean)
    return tables


def to_csv(tables: StudyTables) -> str:
    """``study.csv``: one line per result row, the columns of `StudyTables.columns`."""
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=tables.columns, lineterminator="\n", extrasaction="raise")
    writer.writeheader()
    for row in tables.rows:
        writer.writerow({k: _csv_value(v) for k, v in row.items()})
    return buf.getvalue()


def _csv_value(v: Any) -> Any:
    if isinstance(v, float):
        return repr(v)
    return v


def to_json(tables: StudyTables, *, header: dict) -> str:
    """``study.json``: `header` (title, code version, job counts...) plus the tables.

    Non-finite numbers (a mean over no value, the PSNR of equal pictures) are written as ``null``
    (`synth.io.jsonout.strict_json`, the one JSON policy).
    """
    doc = dict(header)
    doc.update(
        fixed_parameters=tables.fixed,
        columns=tables.columns,
        means=tables.means,
        per_clip=tables.per_clip,
        failures=tables.failures,
        rows=tables.rows,
    )
    return dumps_strict(doc, indent=1) + "\n"
