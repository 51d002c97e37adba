"""What `synth frame` does: make one picture of a clip from two of its pictures with a maker, measure
it, write it (1-frame YUV4MPEG2) and optionally its maps (PNG) and corrective offsets (JSON)."""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["run_frame", "format_frame", "write_maps", "read_pair", "check_output_suffix"]

#: Error maps drawn with one shared colour-bar range (8-bit code values).
_ERROR_MAPS = ("predicted_error", "abs_error")


def check_output_suffix(path, suffixes: tuple[str, ...] | dict[str, str], *, option: str) -> Path:
    """`path` as a Path, refused unless its suffix is one of `suffixes` (the option names the format)
    and its folder exists (`synth.commands.outputs.check_output_file`).

    Raises
    ------
    ParameterError
    """
    from synth.commands.outputs import check_output_file

    return check_output_file(path, suffixes, option=option)


def write_maps(
    directory: str | os.PathLike,
    maps: dict,
    picture: Picture,
    truth: Picture | None = None,
    *,
    candidates: int | None = None,
    label: str = "",
) -> list[str]:
    """Write a maker's maps as PNG figures into `directory` (created when missing).

    One ``<name>.png`` per map, each with a title, a colour bar and its unit
    (`synth.evaluation.map_images`), plus ``abs_error.png`` (luma |error| in 8-bit code values) when
    `truth` is given. ``predicted_error`` and ``abs_error`` share one colour-bar range, so the two
    can be compared; ``candidates`` runs from 0 to `candidates` (the largest K of the run).

    Parameters
    ----------
    label : str
        What the picture is (e.g. "picture 4 of clip.y4m, lmmse"), shown under each title.

    Returns
    -------
    list of str
        The files written: the maps in the maker's order, then ``abs_error.png``.

    Raises
    ------
    ParameterError
        When `directory` exists and is not a directory.
    """
    from synth.evaluation.map_images import error_scale, map_png, style_for
    from synth.io import atomic_write_bytes

    d = Path(directory)
    if d.exists() and not d.is_dir():
        raise ParameterError(f"--maps must be a directory, got the file {d}")
    d.mkdir(parents=True, exist_ok=True)
    arrays = {name: np.asarray(m, dtype=np.float32) for name, m in maps.items()}
    if truth is not None:
        unit = 1.0 / (1 << (truth.bit_depth - 8))
        arrays["abs_error"] = (np.abs(picture.y.astype(np.float64) - truth.y) * unit).astype(np.float32)
    shared = error_scale(*(arrays[n] for n in _ERROR_MAPS if n in arrays))
    written = []
    for name, m in arrays.items():
        vmax = shared if name in _ERROR_MAPS else (float(candidates) if name == "candidates" and candidates else None)
        note = f"mean {float(np.mean(m, dtype=np.float64)):.3g} ({style_for(name).unit})"
        if name == "abs_error":
            rms = float(np.sqrt(np.mean(np.square(m, dtype=np.float64))))
            note = f"mean {float(np.mean(m, dtype=np.float64)):.3g}, RMS {rms:.3g} (code values, 8-bit)"
        elif name == "predicted_error":
            note = f"predicted RMS {float(np.sqrt(np.mean(np.square(m, dtype=np.float64)))):.3g} (code values, 8-bit)"
        path = d / f"{name}.png"
        atomic_write_bytes(path, map_png(m, name=name, vmax=vmax, note=f"{label}: {note}" if label else note))
        written.append(str(path))
    return written


def read_pair(reader, *, past: int, future: int, at: int | None = None):
    """The references (and the target when `at` is given) of an open clip, every number checked.

    Returns
    -------
    (Picture, Picture, Picture or None)

    Raises
    ------
    ParameterError
        Numbers outside the clip (``--past``, ``--future``, ``--at``), past not before future, or
        `at` not strictly between.
    """
    from synth.timebase import check_picture_number, check_reference_order, fraction_of

    n = len(reader)
    past = check_picture_number(past, count=n, name="--past")
    future = check_picture_number(future, count=n, name="--future")
    check_reference_order(past, future)
    if at is not None:
        at = check_picture_number(at, count=n, name="--at")
        fraction_of(at, past, future, name="--at")
    return reader.read(past), reader.read(future), (reader.read(at) if at is not None else None)


def _candidates(params, fields) -> int:
    """K of the core synthesis for these fields (more with both coding directions)."""
    from synth.synthesis.params import SynthParams

    p = params or SynthParams()
    both = len({f.span > 0 for f in fields}) == 2
    return p.candidates_both_directions if both else p.candidates


def run_frame(
    clip: str | os.PathLike,
    *,
    past: int,
    future: int,
    output: str | os.PathLike,
    at: int | None = None,
    t: float | None = None,
    vectors: str | os.PathLike | None = None,
    vector_qp: int = 27,
    two_way: bool = False,
    params: str | os.PathLike | None = None,
    maker: str = "lmmse",
    maps: str | os.PathLike | None = None,
    offsets: str | os.PathLike | None = None,
    offset_block: int = 16,
    offset_window: int = 2,
) -> dict:
    """Make the picture at `at` (or fraction `t`) between pictures `past` and `future` of a clip.

    Parameters
    ----------
    clip : path-like
        Any clip :func:`synth.io.open_clip` reads.
    past, future : int
        Picture numbers of the references (display order from 0), ``past < future``.
    output : path-like
        The picture as a 1-frame ``.y4m``, or raw planar ``.yuv`` (written atomically; its folder
        must exist).
    at : int, optional
        Picture number of the target, strictly between; the true picture is then measured against.
    t : float, optional
        Target time as a fraction in (0, 1) (no true picture). Exactly one of `at` and `t`.
    vectors : str or path-like, optional
        ``estimate`` (default), ``x264``, ``stream`` or a field file (`synth.motion.sources.parse_vector_source`); only
        read when the maker needs vectors.
    vector_qp : int
        Rate constraint of estimated vectors.
    two_way : bool
        Estimate vectors in both coding directions.
    params : path-like, optional
        Synthesis parameter file (`synth.synthesis.params.SynthParams.load`).
    maker : str
        A registered maker (`synth.makers`), default ``lmmse``.
    maps : path-like, optional
        Directory for the PNG maps (:func:`write_maps`).
    offsets : path-like, optional
        Also search corrective block offsets of picture `at` on the picture made and write them
        (``.json``, `synth.io.offsets_file`); needs `at`. Lambda follows `vector_qp`.
    offset_block, offset_window : int
        Offset block size and search range in luma samples.

    Returns
    -------
    dict
        Strict-JSON summary: times, fraction, picture size, maker, vectors, K, mean confidence and
        predicted RMS error (core makers), PSNR per plane and luma SSIM (when the true picture exists; an infinite PSNR
        is None), seconds, written paths, and ``offsets`` (statistics) when asked.

    Raises
    ------
    ParameterError, FormatError
        Any bad option (named as typed), before anything is computed.
    """
    from synth.io import open_clip, write_clip
    from synth.io.jsonout import strict_json
    from synth.makers import get_maker
    from synth.metrics import picture_psnr, ssim
    from synth.motion.sources import parse_vector_source
    from synth.synthesis.params import SynthParams
    from synth.timebase import check_t, fraction_of

    if (at is None) == (t is None):
        raise ParameterError(
            "give exactly one of --at (a picture number) and --t (a fraction), got "
            + ("both" if at is not None else "neither")
        )
    if t is not None:
        t = check_t(t, name="--t")
    from synth.commands.outputs import PICTURE_FORMATS, check_distinct, check_output_dir

    output = check_output_suffix(output, PICTURE_FORMATS, option="--output")
    if maps is not None:
        maps = check_output_dir(maps, option="--maps")
    if offsets is not None:
        from synth.commands.offsets import check_offset_options

        if at is None:
            raise ParameterError("--offsets needs --at (the true picture is the target of the offset search)")
        offsets = check_output_suffix(offsets, (".json",), option="--offsets")
        check_offset_options(offset_block, offset_window)
    check_distinct(
        {"--output": output, "--offsets": offsets, "--maps": maps},
        {"clip": clip, "--vectors": vectors, "--params": params},
    )
    the_maker = get_maker(maker, option="--maker")
    source = parse_vector_source(vectors, qp=vector_qp, two_way=two_way, clip=clip)
    p = SynthParams.load(params) if params is not None else None
    with open_clip(clip) as reader:
        p_pic, f_pic, truth = read_pair(reader, past=past, future=future, at=at)
        info = reader.info
    frac = fraction_of(at, past, future, name="--at") if at is not None else t
    t0 = time.perf_counter()
    fields = source.fields_for(p_pic, f_pic, past_time=past, future_time=future) if the_maker.needs_vectors else []
    t1 = time.perf_counter()
    pair = the_maker.prepare(p_pic, f_pic, fields=fields, params=p, past_time=past, future_time=future)
    prediction = pair.at(frac)
    write_clip(output, [prediction.picture], info)
    k = _candidates(p, fields) if "candidates" in prediction.maps else None
    conf = prediction.maps.get("confidence")
    predicted = prediction.maps.get("predicted_error")
    summary = {
        "format": "synth-frame-summary",
        "schema_version": 2,
        "clip": str(clip),
        "past": past,
        "future": future,
        "at": at,
        "t": frac,
        "size": f"{p_pic.width}x{p_pic.height}",
        "picture_format": f"{p_pic.chroma_format} {p_pic.bit_depth}-bit",
        "maker": the_maker.name,
        "vectors": source.describe() if the_maker.needs_vectors else None,
        "fields": len(fields),
        "candidates": k,
        "mean_confidence": float(np.mean(conf)) if conf is not None else None,
        "predicted_rms_error": (
            float(np.sqrt(np.mean(np.square(predicted, dtype=np.float64)))) if predicted is not None else None
        ),
        "vector_seconds": t1 - t0,
        "synthesis_seconds": pair.prepare_seconds + prediction.seconds,
        "output": str(output),
        "psnr": None,
        "ssim_y": None,
        "maps": [],
        "offsets": None,
    }
    if truth is not None:
        summary["psnr"] = picture_psnr(prediction.picture, truth)
        if min(truth.y.shape) >= 11:
            summary["ssim_y"] = ssim(prediction.picture.y, truth.y, bit_depth=truth.bit_depth)
    if maps is not None:
        target = f"picture {at}" if at is not None else f"t = {frac:.4g}"
        label = f"{target} of {Path(str(clip)).name}, {the_maker.name}"
        summary["maps"] = write_maps(maps, prediction.maps, prediction.picture, truth, candidates=k, label=label)
    if offsets is not None:
        from synth.commands.offsets import search_and_write

        _, summary["offsets"] = search_and_write(
            truth, prediction.picture, output=offsets, block=offset_block, window=offset_window, qp=vector_qp,
            time=at, extra={"source": str(clip), "past": past, "future": future, "maker": the_maker.name},
        )  # fmt: skip
    return strict_json(summary)


def _db(value) -> str:
    return "inf dB" if value is None else f"{value:.2f} dB"


def _describe_vectors(v: dict | None, fields: int) -> str:
    if v is None:
        return "none (the maker needs no vectors)"
    from synth.motion.sources import describe_record

    return f"{describe_record(v)}, {fields} field(s)"


def format_frame(summary: dict) -> str:
    """The text `synth frame` prints for a `run_frame` summary."""
    s = summary
    target = f"picture {s['at']}" if s["at"] is not None else f"t = {s['t']:.4g}"
    lines = [
        f"synthesised    {target} from pictures {s['past']} and {s['future']} ({s['size']}, {s['picture_format']})",
        f"vectors        {_describe_vectors(s['vectors'], s['fields'])}",
    ]
    maker = f"maker          {s['maker']}"
    if s["candidates"] is not None:
        maker += f", K = {s['candidates']}"
    if s.get("predicted_rms_error") is not None:
        maker += f", predicted RMS error {s['predicted_rms_error']:.2f} (8-bit code values)"
    lines.append(maker)
    if s["psnr"] is not None:
        lines.append("PSNR           " + "  ".join(f"{k} {_db(v)}" for k, v in s["psnr"].items()))
        if s["ssim_y"] is not None:
            lines.append(f"SSIM (Y)       {s['ssim_y']:.4f}")
    lines.append(f"time           vectors {s['vector_seconds']:.2f} s, synthesis {s['synthesis_seconds']:.2f} s")
    lines.append(f"written        {s['output']}")
    lines += [f"map            {m}" for m in s["maps"]]
    o = s.get("offsets")
    if o:
        lines.append(
            f"offsets        {o['blocks']} blocks of {o['block']}, {100 * o['zero_share']:.0f} % zero, "
            f"{o['bits_total']} bits ({o['bits_per_block']:.2f}/block); "
            f"PSNR-Y {_db(o['psnr_before']['Y'])} -> {_db(o['psnr_after']['Y'])}"
        )
        lines.append(f"written        {o['output']}")
    return "\n".join(lines)
