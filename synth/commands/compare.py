"""What `synth compare` does: every maker on every picture between references a fixed gap apart,
a table per gap, and optionally a report folder."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["run_compare", "format_compare", "load_params", "vector_source"]


def load_params(path):
    """The synthesis parameters of ``--params`` (None: the built-in values)."""
    if path is None:
        return None
    from synth.synthesis.params import SynthParams

    return SynthParams.load(path)


def vector_source(vectors, qps, *, two_way: bool):
    """The `VectorSource` of ``--vectors`` at the first of the ``--vector-qp`` values."""
    from synth.motion.sources import DEFAULT_VECTOR_QP, parse_vector_source

    return parse_vector_source(vectors, qp=qps[0] if qps else DEFAULT_VECTOR_QP, two_way=two_way, name="--vectors")


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
        ``--vectors``: ``estimate`` (default) or a field file.
    vector_qp : str or int, optional
        ``--vector-qp``: one QP or a comma list (a sweep).
    two_way : bool
        ``--two-way``.
    params : path, optional
        ``--params`` (synthesis parameter file).
    pictures : str, optional
        ``--pictures FIRST:LAST``.
    report : path, optional
        ``--report`` folder (report.html, results.json, results.csv).
    progress : callable, optional
        ``progress(done, total, label)``.

    Returns
    -------
    dict
        ``command``, ``clip``, ``run`` (`synth.evaluation.workbench.run_document` without the
        per-picture records) and ``report`` (paths by name, or None); strict JSON.

    Raises
    ------
    ParameterError
        For a bad option value (the message names the option).
    """
    from synth.commands.options import parse_int_list
    from synth.evaluation.compare import DEFAULT_GAPS, compare_clip
    from synth.evaluation.workbench import run_document
    from synth.io.jsonout import strict_json

    gap_list = parse_int_list(gaps, option="--gaps") if gaps is not None else list(DEFAULT_GAPS)
    reader, inputs = run_inputs(clip, vectors=vectors, vector_qp=vector_qp, two_way=two_way, params=params,
                                pictures=pictures)  # fmt: skip
    result = compare_clip(reader, gaps=gap_list, makers=makers, progress=progress, **inputs)
    paths = write_run_report(result, report, "compare")
    return strict_json(
        {"command": "compare", "clip": str(clip), "run": run_document(result, pictures=False), "report": paths}
    )


def run_inputs(clip, *, vectors, vector_qp, two_way, params, pictures):
    """The clip reader and the workbench inputs every run command shares (``--vectors``,
    ``--vector-qp``, ``--two-way``, ``--params``, ``--pictures``), checked before anything runs.

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
    inputs = {
        "vectors": vector_source(vectors, qps, two_way=two_way),
        "vector_qps": qps,
        "params": load_params(params),
        "pictures": parse_picture_range(pictures, option="--pictures"),
        "clip_name": Path(clip).name,
    }
    return open_clip(clip), inputs


def write_run_report(result, report, command: str):
    """Write the report folder of a run when ``--report`` is given; its paths, or None."""
    if report is None:
        return None
    from synth.evaluation.report import write_report

    return write_report([result], report, title=f"synth {command}: {result.clip}")


def format_report_paths(paths) -> list[str]:
    """The lines naming a written report folder's files."""
    if not paths:
        return []
    return [f"report: {paths['html']}", f"data:   {paths['json']}, {paths['csv']}"]


def format_compare(summary: dict) -> str:
    """The text of ``synth compare``: the run's tables and the report's paths."""
    from synth.evaluation.tables import run_tables

    return "\n".join([run_tables(summary["run"]), *format_report_paths(summary.get("report"))])
