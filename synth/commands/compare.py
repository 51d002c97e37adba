"""What `synth compare` does: every maker on every picture between references a fixed gap apart,
a table per gap, and optionally a report folder."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["SUMMARY_SCHEMA_VERSION", "run_compare", "format_compare", "load_params", "vector_source", "check_baseline"]

#: Version of the JSON summaries of compare, gop and demo (``--json``).
SUMMARY_SCHEMA_VERSION = 1


def load_params(path):
    """The synthesis parameters of ``--params`` (None: the built-in values)."""
    if path is None:
        return None
    from synth.synthesis.params import SynthParams

    return SynthParams.load(path)


def vector_source(vectors, qps, *, two_way: bool, clip=None, gop: int | None = None, first: int = 0):
    """The `VectorSource` of ``--vectors`` at the first of the ``--vector-qp`` values, for `clip`;
    with `gop`, x264 codes the clip from picture `first` on as one hierarchy of that GOP."""
    from synth.motion.sources import DEFAULT_VECTOR_QP, parse_vector_source

    source = parse_vector_source(
        vectors, qp=qps[0] if qps else DEFAULT_VECTOR_QP, two_way=two_way, name="--vectors", clip=clip
    )
    return source if gop is None else source.with_hierarchy(gop, first=first)


def x264_gop_for_gaps(gaps) -> int | None:
    """The clip-wide GOP that gives x264 fields for every pair of a comparison: the largest gap
    when every gap is a power of two up to 8 (then each pair is a dyadic pair of it); otherwise
    None (each pair coded as its own hierarchy)."""
    from synth.codec.hierarchy_coding import MAX_CLIP_GOP

    if gaps and all(g >= 2 and not g & (g - 1) and g <= MAX_CLIP_GOP for g in gaps):
        return max(gaps)
    return None


def run_compare(
    clip: str | os.PathLike,
    *,
    gaps=None,
    makers=None,
    vectors=None,
    vector_qp=None,
    two_way: bool = False,
    params=None,
    pictures=None,
    report=None,
    baseline: str | None = None,
    progress=None,
) -> dict:
    """Run ``synth compare`` and return its JSON-ready summary.

    Parameters
    ----------
    clip : path
        The clip file.
    gaps : str or list of int, optional
        ``--gaps`` (``'2,4,8'``); default 8.
    makers : str, optional
        ``--makers`` (comma-separated names); default every maker.
    vectors : str, optional
        ``--vectors``: ``estimate`` (default), ``x264``, ``stream`` or a field file.
    vector_qp : str or int, optional
        ``--vector-qp``: one QP or a comma list (a sweep).
    two_way : bool
        ``--two-way``.
    params : path, optional
        ``--params`` (synthesis parameter file).
    pictures : str, optional
        ``--pictures FIRST:LAST``.
    report : path, optional
        ``--report`` folder (report.html, results.json, results.csv, img/).
    baseline : str, optional
        ``--baseline``: the maker every other one is compared with (default dis-medium when run).
    progress : callable, optional
        ``progress(done, total, label)``.

    Returns
    -------
    dict
        ``format`` ('synth-compare-summary'), ``schema_version``, ``command``, ``clip``, ``run``
        (`synth.evaluation.workbench.run_document` without the per-picture records, plus
        ``baseline`` and ``differences``: `synth.evaluation.differences.difference_rows`) and
        ``report`` (paths by name, or None); strict JSON.

    Raises
    ------
    ParameterError
        For a bad option value (the message names the option).
    """
    from synth.commands.options import parse_int_list
    from synth.evaluation.compare import DEFAULT_GAPS, compare_clip
    from synth.io.jsonout import strict_json

    gap_list = parse_int_list(gaps, option="--gaps") if gaps is not None else list(DEFAULT_GAPS)
    if report is not None:
        from synth.commands.outputs import check_output_dir

        check_output_dir(report, option="--report")  # before the run: a missing parent is an error
    reader, inputs = run_inputs(clip, vectors=vectors, vector_qp=vector_qp, two_way=two_way, params=params,
                                pictures=pictures, gop=x264_gop_for_gaps(gap_list))  # fmt: skip
    check_baseline(baseline, makers)
    result = compare_clip(reader, gaps=gap_list, makers=makers, progress=progress, baseline=baseline, **inputs)
    paths = write_run_report(result, report, "compare")
    return strict_json(
        {
            "format": "synth-compare-summary",
            "schema_version": SUMMARY_SCHEMA_VERSION,
            "command": "compare",
            "clip": str(clip),
            "run": summary_run_document(result),
            "report": paths,
        }
    )


def check_baseline(baseline: str | None, makers) -> None:
    """Refuse a ``--baseline`` that is not among the run's makers, before anything runs."""
    if baseline is None:
        return
    from synth.evaluation.differences import resolve_baseline
    from synth.evaluation.workbench import resolve_run_makers

    resolve_baseline([m.name for m in resolve_run_makers(makers)], baseline)


def summary_run_document(result) -> dict:
    """The run document of a ``--json`` summary: no per-picture records; ``baseline`` and the
    paired ``differences`` to it per group."""
    from synth.evaluation.differences import difference_rows
    from synth.evaluation.workbench import run_document

    doc = run_document(result, pictures=False)
    doc["baseline"] = result.settings["baseline"]
    doc["differences"] = difference_rows(
        result.records, result.methods, baseline=doc["baseline"], group_key=result.group_key
    )
    return doc


def run_inputs(clip, *, vectors, vector_qp, two_way, params, pictures, gop: int | None = None):
    """The clip reader and the workbench inputs every run command shares (``--vectors``,
    ``--vector-qp``, ``--two-way``, ``--params``, ``--pictures``), checked before anything runs.
    `gop`: the GOP the run's reference pairs belong to (x264 codes the clip with it from the first
    picture of ``--pictures``).

    Returns
    -------
    (reader, dict)
        The open clip and the keyword arguments ``vectors``, ``vector_qps``, ``params``,
        ``pictures`` and ``clip_name`` of `compare_clip` and `run_gop`.
    """
    from synth.commands.options import parse_picture_range
    from synth.evaluation.workbench import parse_vector_qps
    from synth.io import open_clip

    qps = parse_vector_qps(vector_qp, option="--vector-qp")
    chosen = parse_picture_range(pictures, option="--pictures")
    first = chosen.first if chosen is not None else 0
    inputs = {
        "vectors": vector_source(vectors, qps, two_way=two_way, clip=clip, gop=gop, first=first),
        "vector_qps": qps,
        "params": load_params(params),
        "pictures": chosen,
        "clip_name": Path(clip).name,
    }
    return open_clip(clip), inputs


def write_run_report(result, report, command: str):
    """Write the report folder of a run when ``--report`` is given; its paths, or None."""
    if report is None:
        return None
    from synth.evaluation.report import write_report

    return write_report([result], report, title=f"synth {command}: {result.clip}", baseline=result.settings["baseline"])


def format_report_paths(paths) -> list[str]:
    """The lines naming a written report folder's files."""
    if not paths:
        return []
    return [f"report: {paths['html']} (pictures in {paths['images']})", f"data:   {paths['json']}, {paths['csv']}"]


def format_compare(summary: dict) -> str:
    """The text of ``synth compare``: the run's tables and the report's paths."""
    from synth.evaluation.tables import run_tables

    return "\n".join([run_tables(summary["run"]), *format_report_paths(summary.get("report"))])
