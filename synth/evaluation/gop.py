"""`synth gop`: synthesis inside a dyadic hierarchical GOP, with statistics per temporal layer.

Consecutive GOPs of `size` pictures cover the clip (anchors at the first picture, + size, 2 size, ...; pictures after
the last complete GOP are not used). In every GOP each non-anchor picture, in coding order, is
predicted from its two hierarchy references (`synth.hierarchy.dyadic_gop`), or with `flat` straight
from the two anchors (t = k / size). References are the source pictures, or with
`decoded_refs_qp` the pictures after an H.264 encode and decode (`synth.codec.decoded_refs`).
"""

from __future__ import annotations

from dataclasses import dataclass

from synth.errors import ParameterError
from synth.evaluation.differences import resolve_baseline
from synth.evaluation.workbench import (
    FrameSource,
    Job,
    RunResult,
    method_label,
    parse_vector_qps,
    resolve_run_makers,
    run_jobs,
)
from synth.hierarchy import check_gop_size, dyadic_gop, flat_gop
from synth.makers import DEFAULT_MAKER
from synth.picture import Picture

__all__ = [
    "DEFAULT_GOP_SIZE",
    "gop_jobs",
    "run_gop",
    "gop",
    "GopRun",
    "export_maker_label",
    "write_gop_export",
]

#: GOP size when none is given (``--gop-size``).
DEFAULT_GOP_SIZE = 8


@dataclass
class GopRun(RunResult):
    """A `RunResult` with, when requested, the synthetic pictures for export.

    Attributes
    ----------
    synthetic : list of (Job, Picture) or None
        Every non-anchor picture in display order, made by `settings['export_maker']`.
    """

    synthetic: list[tuple[Job, Picture]] | None = None


def gop_jobs(n_pictures: int, size: int, *, flat: bool = False, first: int = 0) -> list[Job]:
    """Jobs for every GOP that fits in `n_pictures` (display numbers from `first`), each GOP in
    coding order.

    Tags: ``gop`` (GOP number), ``layer`` (temporal layer), ``coding_index`` (position in the GOP's
    coding order, 1 for the first B picture).

    Raises
    ------
    ParameterError
        For an invalid size or a clip shorter than size + 1 pictures.
    """
    size = check_gop_size(size)
    if n_pictures < size + 1:
        raise ParameterError(f"a GOP of size {size} needs at least {size + 1} pictures, the clip has {n_pictures}")
    structure = flat_gop(size) if flat else dyadic_gop(size)
    jobs = []
    for g, anchor in enumerate(range(first, first + n_pictures - size, size)):
        for p in structure:
            jobs.append(
                Job(
                    anchor + p.position,
                    anchor + p.past,
                    anchor + p.future,
                    p.t,
                    (("gop", g), ("layer", p.layer), ("coding_index", p.coding_index)),
                )
            )
    return jobs


def export_maker_label(makers, vector_qps, export_maker: str | None = None) -> str:
    """The method label whose pictures a GOP export writes: the one place that picks the default.

    Parameters
    ----------
    makers : the run's makers (as `synth.evaluation.workbench.run_jobs` takes them)
    vector_qps : list of int or None
    export_maker : str, optional
        A maker name or a method label (``lmmse@qp22``); default the product maker (lmmse) when
        the run has it, else the run's first maker. A vector maker's name in a vector-QP sweep
        means its first QP.

    Raises
    ------
    ParameterError
        When `export_maker` is not among the run's methods.
    """
    chosen = resolve_run_makers(makers)
    qps = list(vector_qps or [None])
    several = len(qps) > 1
    labels = [method_label(m, q, several) for m in chosen for q in (qps if m.needs_vectors else [None])]
    if export_maker is None:
        name = DEFAULT_MAKER if any(m.name == DEFAULT_MAKER for m in chosen) else chosen[0].name
    else:
        name = export_maker
    if name in labels:
        return name
    by_name = {m.name: m for m in chosen}
    if name in by_name and by_name[name].needs_vectors and several:
        return method_label(by_name[name], qps[0], True)
    raise ParameterError(f"--export-maker {name!r} is not among this run's methods: {', '.join(labels)}")


def run_gop(
    frames,
    *,
    size: int = DEFAULT_GOP_SIZE,
    flat: bool = False,
    decoded_refs_qp: int | None = None,
    makers=None,
    vectors=None,
    vector_qps=None,
    params=None,
    pictures=None,
    limit: int | None = None,
    clip_name: str = "clip",
    export: bool = False,
    export_maker: str | None = None,
    frame_rate=None,
    progress=None,
    baseline: str | None = None,
    highlights: bool = True,
) -> GopRun:
    """Synthesise every non-anchor picture of a hierarchical GOP and measure it per temporal layer.

    Parameters
    ----------
    frames : sequence of Picture or clip reader
    size : int
        GOP size, a power of two from 2 to 64.
    flat : bool
        Make every picture from the two anchors instead of its hierarchy references.
    decoded_refs_qp : int, optional
        Encode and decode the used pictures with H.264 at this QP and take references from the
        decoded pictures (targets stay the source pictures).
    makers, vectors, vector_qps, params, pictures, limit, clip_name, progress
        As in `synth.evaluation.compare.compare_clip`.
    export : bool
        Collect the pictures of one method into `GopRun.synthetic`.
    export_maker : str, optional
        That method (see `export_maker_label`, which picks the default); implies `export`.
    frame_rate : Fraction, optional
        Passed to the encoder for decoded references.
    baseline, highlights
        As in `synth.evaluation.compare.compare_clip`.

    Returns
    -------
    GopRun
        kind 'gop', grouped by temporal layer.
    """
    source = FrameSource(frames, pictures=pictures, limit=limit)
    qps = parse_vector_qps(vector_qps)
    jobs = gop_jobs(len(source), size, flat=flat, first=source.first)
    last = max(j.future for j in jobs)
    references = source
    if decoded_refs_qp is not None:
        from synth.codec.decoded_refs import encode_decode

        decoded = encode_decode(
            [source[i] for i in range(source.first, last + 1)],
            qp=decoded_refs_qp,
            **({"frame_rate": frame_rate} if frame_rate else {}),
        )
        references = FrameSource(decoded, offset=source.first)
    chosen = resolve_run_makers(makers)
    method = export_maker_label(chosen, qps, export_maker) if (export or export_maker is not None) else None
    collected: dict[int, tuple[Job, Picture]] = {}

    def keep(job: Job, label: str, prediction) -> None:
        if label == method:
            collected[job.target] = (job, prediction.picture)

    methods, records, pairs, highlights = run_jobs(
        jobs,
        source,
        references=references,
        makers=chosen,
        vectors=vectors,
        vector_qps=qps,
        params=params,
        progress=progress,
        on_prediction=keep if method is not None else None,
        baseline=baseline,
        keep_highlights=highlights,
    )
    settings = {
        "gop_size": int(size),
        "structure": "flat" if flat else "dyadic",
        "decoded_refs_qp": decoded_refs_qp,
        "gops": len({r["gop"] for r in records}),
        "pictures_used": last + 1 - source.first,
        "first_picture": source.first,
        "predictors": [m.name for m in chosen],
        "vector_qps": qps,
        "export_maker": method,
        "baseline": resolve_baseline(methods, baseline),
    }
    if vectors is not None and hasattr(vectors, "describe"):
        settings["vectors"] = vectors.describe()
    synthetic = [collected[i] for i in sorted(collected)] if method is not None else None
    return GopRun(
        "gop", clip_name, settings, methods, records, pairs, highlights, group_key="layer", synthetic=synthetic
    )


def gop(
    path,
    *,
    size: int = DEFAULT_GOP_SIZE,
    flat: bool = False,
    decoded_refs: int | None = None,
    makers=None,
    predictors=None,
    vectors=None,
    vector_qp=None,
    params=None,
    pictures=None,
    frames: int | None = None,
    progress=None,
) -> GopRun:
    """`run_gop` on a clip file, with the command line's option names (used by `synth study`;
    `predictors` is the former name of `makers`, `frames` keeps the first N pictures)."""
    from pathlib import Path

    from synth.io import open_clip

    reader = open_clip(path)
    return run_gop(
        reader,
        size=size,
        flat=flat,
        decoded_refs_qp=decoded_refs,
        makers=makers if makers is not None else predictors,
        vectors=vectors,
        vector_qps=vector_qp,
        params=params,
        pictures=pictures,
        limit=frames,
        clip_name=Path(path).name,
        frame_rate=reader.info.frame_rate,
        progress=progress,
        highlights=False,  # a study keeps the rows only
    )


def write_gop_export(run: GopRun, output, *, info, source_name: str) -> dict:
    """Write the synthetic pictures of a GOP run (display order, anchors left out) as Y4M, with a
    JSON sidecar beside it, in the layout of ``synth export`` (`synth.codec.export`).

    Parameters
    ----------
    run : GopRun
        A run made with `export` (or `export_maker`).
    output : path
        The ``.y4m`` file; the sidecar is ``output + '.json'``.
    info : ClipInfo
        The source clip's metadata (frame rate and the like).
    source_name : str
        Recorded in the sidecar.

    Returns
    -------
    dict
        The sidecar document: ``format`` 'synth-reference-sidecar', ``version`` 1, ``source``,
        ``output``, ``container``, ``width``, ``height``, ``chroma_format``, ``bit_depth``,
        ``frame_rate``, ``gop``, ``synthesiser`` (the method), ``qp`` (vector QP, null for methods
        without vectors), ``pictures`` (``position``, ``time``, ``past``, ``future``, ``t``,
        ``layer``, ``fields``), ``uncovered``, and two keys of this command: ``structure``
        ('dyadic' or 'flat') and ``references`` ('source' or 'decoded-qpNN').

    Raises
    ------
    ParameterError
        When the run holds no exported pictures or `output` is not a ``.y4m`` file.
    """
    from dataclasses import replace
    from pathlib import Path

    from synth.io import atomic_write_text, write_clip
    from synth.io.jsonout import dumps_strict

    output = Path(output)
    if output.suffix.lower() != ".y4m":
        raise ParameterError(f"--export must name a .y4m file, got {str(output)!r}")
    if not run.synthetic:
        raise ParameterError("the GOP run holds no exported pictures (run it with export=True)")
    method = run.settings["export_maker"]
    qp = None
    uses_vectors = any(r["method"] == method and r["vector_qp"] is not None for r in run.records)
    if uses_vectors:
        qp = next(r["vector_qp"] for r in run.records if r["method"] == method)
    pairs = {(p["past"], p["future"], p["vector_qp"]): p for p in run.pairs}
    pictures = []
    for pos, (job, _) in enumerate(run.synthetic):
        pair = pairs.get((job.past, job.future, qp)) if uses_vectors else None
        fields = [dict(f, source="estimated", qp=qp) for f in pair["fields"]] if pair else []
        pictures.append(
            {
                "position": pos,
                "time": job.target,
                "past": job.past,
                "future": job.future,
                "t": job.t,
                "layer": dict(job.tags)["layer"],
                "fields": fields,
            }
        )
    last = run.settings["pictures_used"] - 1
    first = run.synthetic[0][1]
    clip_info = replace(info, width=first.width, height=first.height, frame_count=len(run.synthetic))
    write_clip(output, [pic for _, pic in run.synthetic], clip_info)
    decoded = run.settings.get("decoded_refs_qp")
    doc = {
        "format": "synth-reference-sidecar",
        "schema_version": 1,
        "source": source_name,
        "output": output.name,
        "container": "y4m",
        "width": first.width,
        "height": first.height,
        "chroma_format": first.chroma_format,
        "bit_depth": first.bit_depth,
        "frame_rate": f"{info.frame_rate.numerator}/{info.frame_rate.denominator}",
        "gop": run.settings["gop_size"],
        "synthesiser": method,
        "qp": qp,
        "pictures": pictures,
        "uncovered": list(range(last + 1, int(info.frame_count or last + 1))),
        "structure": run.settings["structure"],
        "references": "source" if decoded is None else f"decoded-qp{decoded}",
    }
    from synth.codec.export import sidecar_path

    atomic_write_text(sidecar_path(output), dumps_strict(doc) + "\n")
    return doc
