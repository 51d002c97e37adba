"""What `synth gop` does: every B picture of a hierarchical GOP made from its references,
statistics per temporal layer, optionally an export of one maker's pictures and a report."""

from __future__ import annotations

import os
from pathlib import Path

from synth.errors import ParameterError

__all__ = ["run_gop_command", "format_gop"]


def run_gop_command(
    clip: str | os.PathLike,
    *,
    gop_size: int | None = None,
    flat: bool = False,
    decoded_refs: int | None = None,
    makers=None,
    vectors=None,
    vector_qp=None,
    two_way: bool = False,
    params=None,
    pictures=None,
    report=None,
    export=None,
    export_maker: str | None = None,
    baseline: str | None = None,
    progress=None,
) -> dict:
    """Run ``synth gop`` and return its JSON-ready summary.

    Parameters
    ----------
    clip : path
    gop_size : int, optional
        ``--gop-size``: a power of two 2..64; default `synth.evaluation.gop.DEFAULT_GOP_SIZE` (8).
    flat : bool
        ``--flat``: every picture from the two anchors.
    decoded_refs : int, optional
        ``--decoded-refs QP``: references after an H.264 encode and decode at this QP.
    makers, vectors, vector_qp, two_way, params, pictures, report, progress
        As in `synth.commands.compare.run_compare`.
    export : path, optional
        ``--export FILE.y4m``: the synthetic pictures with a JSON sidecar.
    export_maker : str, optional
        ``--export-maker``: whose pictures; the default is picked by the library
        (`synth.evaluation.gop.export_maker_label`).
    baseline : str, optional
        ``--baseline`` (as in `synth.commands.compare.run_compare`).

    Returns
    -------
    dict
        ``format`` ('synth-gop-summary'), ``schema_version``, ``command``, ``clip``, ``run`` (run
        document without per-picture records, with ``baseline`` and ``differences``), ``export``
        (``output``, ``sidecar``, ``maker``, ``pictures``, or None) and ``report``; strict JSON.

    Raises
    ------
    ParameterError
        For a bad option value (the message names the option).
    """
    from synth.codec.export import sidecar_path
    from synth.commands.compare import (
        SUMMARY_SCHEMA_VERSION,
        check_baseline,
        run_inputs,
        summary_run_document,
        write_run_report,
    )
    from synth.evaluation.gop import DEFAULT_GOP_SIZE, run_gop, write_gop_export
    from synth.hierarchy import check_gop_size
    from synth.io.jsonout import strict_json

    size = DEFAULT_GOP_SIZE if gop_size is None else gop_size
    try:
        size = check_gop_size(size)
    except ParameterError as exc:
        raise ParameterError(str(exc).replace("GOP size", "--gop-size", 1)) from None
    if export is not None and Path(export).suffix.lower() != ".y4m":
        raise ParameterError(f"--export must name a .y4m file, got {str(export)!r}")
    if export is None and export_maker is not None:
        raise ParameterError("--export-maker needs --export")
    from synth.commands.outputs import check_output_dir, check_output_file

    if export is not None:
        check_output_file(export, (".y4m",), option="--export")  # its folder must exist
    if report is not None:
        check_output_dir(report, option="--report")
    if decoded_refs is not None and not (isinstance(decoded_refs, int) and 0 <= decoded_refs <= 51):
        raise ParameterError(f"--decoded-refs QP must be an integer 0..51, got {decoded_refs!r}")
    reader, inputs = run_inputs(clip, vectors=vectors, vector_qp=vector_qp, two_way=two_way, params=params,
                                pictures=pictures, gop=size)  # fmt: skip
    check_baseline(baseline, makers)
    result = run_gop(
        reader,
        size=size,
        flat=flat,
        decoded_refs_qp=decoded_refs,
        makers=makers,
        **inputs,
        export=export is not None,
        export_maker=export_maker,
        frame_rate=reader.info.frame_rate,
        progress=progress,
        baseline=baseline,
    )
    exported = None
    if export is not None:
        from dataclasses import replace

        info = reader.info
        if not info.frame_count:
            info = replace(info, frame_count=len(reader))
        write_gop_export(result, export, info=info, source_name=str(clip))
        exported = {
            "output": str(export),
            "sidecar": str(sidecar_path(export)),
            "maker": result.settings["export_maker"],
            "pictures": len(result.synthetic),
        }
    paths = write_run_report(result, report, "gop")
    return strict_json(
        {
            "format": "synth-gop-summary",
            "schema_version": SUMMARY_SCHEMA_VERSION,
            "command": "gop",
            "clip": str(clip),
            "run": summary_run_document(result),
            "export": exported,
            "report": paths,
        }
    )


def format_gop(summary: dict) -> str:
    """The text of ``synth gop``: the run's tables, the export and the report's paths."""
    from synth.commands.compare import format_report_paths
    from synth.evaluation.tables import run_tables

    lines = [run_tables(summary["run"])]
    e = summary.get("export")
    if e:
        lines.append(
            f"exported {e['pictures']} synthetic pictures ({e['maker']}) to {e['output']}; sidecar {e['sidecar']}"
        )
    lines += format_report_paths(summary.get("report"))
    return "\n".join(lines)
