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

from .jobs import Job, jsonable
from .kinds import CLIP_OPTIONS, get_kind

__all__ = ["StudyTables", "aggregate", "setting_label", "to_csv", "to_json"]

_LEAD = ("job", "kind", "clip")


def setting_label(params: dict) -> str:
    """A short label of a job's parameter setting (clip options left out), keys sorted:
    ``"gap=2 method=linear"``; ``"defaults"`` when there are none."""
    items = [(k, v) for k, v in sorted(params.items()) if k not in CLIP_OPTIONS]
    return " ".join(f"{k}={v}" for k, v in items) or "defaults"


def _number(value: Any) -> float | None:
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
        One entry per (kind, setting, clip): ``kind``, ``setting``, ``clip``, ``rows`` and the mean of
        each metric over the clip's rows.
    means : list of dict
        One entry per (kind, setting): ``kind``, ``setting``, ``clips`` and the mean over clips of the
        per-clip means (every clip weighs the same, whatever its length).
    metrics : dict of str to list of str
        Metric columns per kind, in first-seen order.
    failures : list of dict
        ``job``, ``kind``, ``clip``, ``setting``, ``error`` of each failed job.
    missing : list of str
        Ids of jobs without a record (not run yet).
    """

    columns: list[str] = field(default_factory=list)
    rows: list[dict] = field(default_factory=list)
    per_clip: list[dict] = field(default_factory=list)
    means: list[dict] = field(default_factory=list)
    metrics: dict[str, list[str]] = field(default_factory=dict)
    failures: list[dict] = field(default_factory=list)
    missing: list[str] = field(default_factory=list)


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
    for job in jobs:
        rec = records.get(job.id)
        setting = setting_label(job.params)
        if rec is None:
            tables.missing.append(job.id)
            continue
        if rec.get("status") != "ok":
            tables.failures.append({"job": job.id, "kind": job.kind, "clip": job.clip, "setting": setting, "error": rec.get("error")})
            continue
        pcols = _param_columns(job.params)
        for key in pcols:
            columns.setdefault(key, None)
        kind_metrics = get_kind(job.kind).metrics
        group = groups.setdefault((job.kind, setting, job.clip), {"n": 0, "sums": {}})
        for row in rec.get("rows", []):
            out = {"job": job.id, "kind": job.kind, "clip": job.clip, **pcols}
            for key, value in row.items():
                name = key if key not in out or out[key] == value else f"row.{key}"
                out[name] = value
                result_columns.setdefault(name, None)
                is_metric = name in kind_metrics if kind_metrics is not None else isinstance(value, float) or value in ("inf", "-inf", "nan")
                if is_metric and _number(value) is not None:
                    ms = tables.metrics.setdefault(job.kind, [])
                    if name not in ms:
                        ms.append(name)
                    group["sums"].setdefault(name, []).append(_number(value))
            group["n"] += 1
            tables.rows.append(out)
    tables.columns = list(columns) + [c for c in result_columns if c not in columns]

    setting_clips: dict[tuple, list[dict]] = {}
    for (kind, setting, clip), g in groups.items():
        entry = {"kind": kind, "setting": setting, "clip": clip, "rows": g["n"]}
        for m in tables.metrics.get(kind, []):
            entry[m] = _mean(g["sums"].get(m, []))
        tables.per_clip.append(entry)
        setting_clips.setdefault((kind, setting), []).append(entry)
    for (kind, setting), entries in setting_clips.items():
        mean = {"kind": kind, "setting": setting, "clips": len(entries)}
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

    Non-finite numbers are written as the strings ``"inf"``, ``"-inf"``, ``"nan"``.
    """
    doc = dict(header)
    doc.update(
        columns=tables.columns,
        means=tables.means,
        per_clip=tables.per_clip,
        failures=tables.failures,
        rows=tables.rows,
    )
    return json.dumps(jsonable(doc), indent=1, allow_nan=False) + "\n"
