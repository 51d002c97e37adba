"""What `synth predict` does: every inter picture of a clip (or those chosen) predicted from its
reference (the picture before it; with ``--references N`` each block from the best of the N before
it) with its own vectors by block MC, OBMC and the per-pixel LMMSE
estimator (`synth.evaluation.prediction`), PSNR per method and the paired difference to block MC."""

from __future__ import annotations

import os
from pathlib import Path

from synth.errors import ParameterError

__all__ = [
    "run_predict",
    "format_predict",
    "prediction_inputs",
    "check_references",
    "MAX_REFERENCES",
    "PREDICT_FORMAT",
    "PREDICT_SCHEMA_VERSION",
]

PREDICT_FORMAT = "synth-predict-summary"
PREDICT_SCHEMA_VERSION = 1


#: Largest ``--references``.
MAX_REFERENCES = 4


def check_references(references, source) -> int:
    """``--references``: an integer 1..MAX_REFERENCES; above 1 only with the built-in estimator.

    Raises
    ------
    ParameterError
        Out of range, or several references with a coded source.
    """
    if isinstance(references, bool) or not isinstance(references, int) or not 1 <= references <= MAX_REFERENCES:
        raise ParameterError(f"--references must be an integer in 1..{MAX_REFERENCES}, got {references!r}")
    if references > 1 and source.kind == "x264":
        raise ParameterError(
            "--references above 1 needs --vectors estimate: the motion vectors FFmpeg exports from an H.264 "
            "stream (AVMotionVector) give only the direction of each block's reference, not which one it is"
        )
    if references > 1 and source.kind != "estimate":
        raise ParameterError(
            f"--references above 1 needs --vectors estimate (--vectors {source.label} holds one field per "
            "picture, against the one before)"
        )
    return references


def prediction_inputs(clip, *, first: int, last: int, source, reader, references: int = 1) -> list[tuple]:
    """(number, target, reference, field) for the pictures ``first + 1 .. last``, each against the
    picture before it, with the vectors of `source` (a `synth.motion.sources.VectorSource`).

    ``x264``: the pictures first..last coded as I P P ... with one reference (``ref=1``), each P
    picture's own coded vectors (`synth.codec.hierarchy_coding`, structure ``('ippp', ...)``).

    ``references`` > 1 (built-in estimator only, `check_references`): each picture ``k`` against
    the pictures ``k - 1 .. k - N`` that exist from FIRST on (fewer for the first ones), as
    (number, target, [references nearest first], `ReferenceFields`)
    (`synth.motion.multi_reference.estimate_multi_reference`).
    """
    pictures = {k: reader.read(k) for k in range(first, last + 1)}
    if references > 1:
        from synth.motion.multi_reference import estimate_multi_reference

        cache: dict = {}
        out = []
        for k in range(first + 1, last + 1):
            times = [float(k - d) for d in range(1, references + 1) if k - d >= first]
            fields = estimate_multi_reference(
                {float(t): pictures[t] for t in range(max(first, k - references), k + 1)},
                coded_time=float(k), reference_times=times, qp=source.qp, cache=cache, **source.options,
            )  # fmt: skip
            for key in [key for key in cache if key[0] < k - references]:
                del cache[key]
            out.append((k, pictures[k], [pictures[int(t)] for t in times], fields))
        return out
    out = []
    if source.kind == "x264":
        from synth.codec.hierarchy_coding import coded_hierarchy_fields

        coded = coded_hierarchy_fields(clip, qp=source.qp, structure=("ippp", first, last))
        by_time = {(int(f.coded_time), int(f.reference_time)): f for f in coded}
    for k in range(first + 1, last + 1):
        target, reference = pictures[k], pictures[k - 1]
        if source.kind == "x264":
            field = by_time.get((k, k - 1))
            if field is None:
                raise ParameterError(f"--vectors x264: no field coded for picture {k} against {k - 1}")
        else:
            found = [
                f
                for f in source.fields_for(reference, target, past_time=k - 1, future_time=k)
                if float(f.coded_time) == k and float(f.reference_time) == k - 1
            ]
            if not found:
                raise ParameterError(f"--vectors {source.label}: no field codes picture {k} against {k - 1}")
            field = found[0]
        out.append((k, target, reference, field))
    return out


def run_predict(
    clip: str | os.PathLike,
    *,
    pictures=None,
    vectors=None,
    vector_qp: int | None = None,
    params=None,
    report=None,
    output=None,
    references: int = 1,
    progress=None,
) -> dict:
    """Run ``synth predict`` and return its JSON-ready summary.

    Parameters
    ----------
    clip : path
    pictures : str, optional
        ``--pictures FIRST:LAST``: the pictures FIRST + 1 .. LAST are predicted (FIRST is only a
        reference); default the whole clip.
    vectors : str, optional
        ``--vectors``: estimate (default), x264, stream or a field file.
    vector_qp : int, optional
        ``--vector-qp`` (default 27).
    params : path, optional
        ``--params``: a one-reference parameter file (`OneReferenceParams.to_json`).
    report : path, optional
        ``--report DIR``: results.json (records and summary) and results.csv (records).
    output : path, optional
        ``-o OUT.y4m``: the LMMSE predictions in display order.
    references : int
        ``--references N`` (default 1): each picture against the N before it, each block on the
        best of them (built-in estimator only; `check_references`).
    progress : callable, optional

    Returns
    -------
    dict
        ``format``, ``schema_version``, ``clip``, ``vectors`` (the source's record),
        ``pictures`` (predicted numbers), ``baseline``, ``summary`` (one row per method:
        ``method``, ``psnr_y``, ``psnr_yuv``, ``pictures``, ``seconds_per_picture`` and, but for the
        baseline, ``difference_y``/``difference_yuv``), ``params``, ``references`` (N),
        ``reference_use`` (inter blocks on each reference, nearest first, summed over the
        pictures), ``output``, ``report``.
    """
    from synth.commands.options import parse_picture_range
    from synth.commands.outputs import check_distinct, check_output_dir, check_output_file
    from synth.evaluation.prediction import compare_predictions
    from synth.io import open_clip
    from synth.motion.sources import DEFAULT_VECTOR_QP, parse_vector_source
    from synth.synthesis.one_reference import OneReferenceParams

    qp = DEFAULT_VECTOR_QP if vector_qp is None else vector_qp
    if isinstance(qp, bool) or not isinstance(qp, int) or not 0 <= qp <= 51:
        raise ParameterError(f"--vector-qp must be an integer in 0..51, got {qp!r}")
    span = parse_picture_range(pictures, option="--pictures")
    if output is not None:
        check_output_file(output, (".y4m",), option="--output")
    if report is not None:
        check_output_dir(report, option="--report")
    check_distinct({"--output": output, "--report": report}, {"CLIP": clip})
    one = OneReferenceParams()
    if params is not None:
        path = Path(params)
        if not path.is_file():
            raise ParameterError(f"--params {str(params)!r}: no such file")
        one = OneReferenceParams.load(path)
    source = parse_vector_source(vectors, qp=qp, clip=clip)
    references = check_references(references, source)
    with open_clip(clip) as reader:
        n = len(reader)
        first = 0 if span is None else span.first
        last = n - 1 if span is None or span.last is None else span.last
        if last > n - 1 or first >= last:
            raise ParameterError(
                f"--pictures must name at least two pictures of the clip (it has 0..{n - 1}), got {pictures!r}"
            )
        inputs = prediction_inputs(clip, first=first, last=last, source=source, reader=reader, references=references)
        info = reader.info
    result = compare_predictions(inputs, params=one, keep="lmmse" if output is not None else None, progress=progress)
    summary = {
        "format": PREDICT_FORMAT,
        "schema_version": PREDICT_SCHEMA_VERSION,
        "clip": str(clip),
        "vectors": _describe_source(source, first, last),
        "pictures": [k for k, *_ in inputs],
        "baseline": result["baseline"],
        "summary": result["summary"],
        "params": one.to_dict(),
        "references": references,
        "reference_use": _reference_use(inputs, references),
        "output": None,
        "report": None,
    }
    if output is not None:
        from synth.io import write_clip

        write_clip(output, result["predictions"], info)
        summary["output"] = str(output)
    if report is not None:
        summary["report"] = _write_report(Path(report), summary, result["records"], inputs=inputs, params=one)
    return summary


def _reference_use(inputs: list[tuple], references: int) -> list[int]:
    """Inter blocks on each reference (nearest first), summed over the predicted pictures."""
    use = [0] * references
    for *_, field in inputs:
        counts = field.reference_use() if hasattr(field, "reference_use") else [int((~field.intra).sum())]
        for k, c in enumerate(counts):
            use[k] += c
    return use


def _describe_source(source, first: int, last: int) -> dict:
    """The source's record; for x264 the I P P ... structure this command codes."""
    record = source.describe()
    if source.kind == "x264":
        record["structure"] = f"I P P ..., one reference, pictures {first}..{last}"
    return record


def _write_report(folder: Path, summary: dict, records: list[dict], *, inputs=(), params=None) -> str:
    """results.json (summary and records), results.csv (records) and report.html with its ``img/``
    folder (`synth.evaluation.predictpage`) in `folder`.

    The page shows the error maps of the pictures where the estimator gains most and least over
    block MC; those two are predicted again from `inputs` (the `prediction_inputs` tuples) with
    `params`. Nothing is written until the page is built; then every file atomically, the page
    last (`write_predict_page`).
    """
    import csv
    import io

    from synth.evaluation.prediction import BASELINE, predict_with
    from synth.evaluation.predictpage import ESTIMATOR, extreme_pictures, write_predict_page
    from synth.io.jsonout import dumps_strict

    folder.mkdir(exist_ok=True)
    by_number = {k: (target, reference, field) for k, target, reference, field in inputs}
    inspected = []
    for entry in extreme_pictures(records, method=ESTIMATOR, baseline=BASELINE):
        target, reference, field = by_number[entry["picture"]]
        preds = {m: predict_with(m, reference, field, params=params) for m in (BASELINE, ESTIMATOR)}
        inspected.append((entry, target, preds))
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=["picture", "method", "psnr_y", "psnr_yuv", "psnr_y_inter", "seconds"])
    writer.writeheader()
    writer.writerows(records)
    results = {"results.json": dumps_strict({**summary, "records": records}, indent=2), "results.csv": buf.getvalue()}
    write_predict_page(folder, summary, records, inspected=inspected, beside=results)
    return str(folder)


def format_predict(summary: dict) -> str:
    """The text table: one row per method, the difference to block MC with its 95 % interval."""
    from synth.motion.sources import describe_record

    pics = summary["pictures"]
    n_refs = summary.get("references", 1)
    each = "each from the one before" if n_refs == 1 else f"each block from the best of the {n_refs} before"
    head = (
        f"{summary['clip']}: {len(pics)} inter pictures ({pics[0]}..{pics[-1]}), {each}; "
        f"vectors {describe_record(summary['vectors'])}"
    )
    lines = [
        head,
        f"{'method':<10} {'PSNR-Y':>8} {'PSNR-YUV':>9} {'Y inter':>8} {'vs ' + summary['baseline'] + ' (Y, 95 % CI)':>34}",
    ]
    for row in summary["summary"]:
        d = row.get("difference_y")
        if d is None:
            diff = "baseline"
        elif d["half_width"] is None:
            diff = f"{d['mean_difference']:+.3f} dB"
        else:
            diff = f"{d['mean_difference']:+.3f} dB [{d['ci_low']:+.3f}, {d['ci_high']:+.3f}]"
        lines.append(
            f"{row['method']:<10} {_db(row['psnr_y']):>8} {_db(row['psnr_yuv']):>9} {_db(row['psnr_y_inter']):>8} "
            f"{diff:>34}"
        )
    lines.append("Y inter: PSNR-Y over the pixels of inter blocks (block MC predicts intra ones with zero motion)")
    if n_refs > 1:
        use = summary.get("reference_use") or []
        total = sum(use) or 1
        share = ", ".join(f"{k + 1} before: {100.0 * c / total:.1f} %" for k, c in enumerate(use))
        lines.append(f"inter blocks per reference: {share}")
    if summary.get("output"):
        lines.append(f"predictions (lmmse): {summary['output']}")
    if summary.get("report"):
        lines.append(f"report: {summary['report']}")
    return "\n".join(lines)


def _db(v) -> str:
    return "-" if v is None else f"{v:.3f}"
