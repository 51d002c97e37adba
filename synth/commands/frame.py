"""What `synth frame` does: make one picture of a clip from two of its pictures with a maker, measure
it, write it (1-frame YUV4MPEG2) and optionally its maps (PNG) and corrective offsets (JSON)."""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["run_frame", "format_frame", "write_maps", "read_pair", "check_output_suffix", "ERROR_MAP_GAIN"]

#: The absolute-error map shows |error| (8-bit units) times this gain, saturating at 255.
ERROR_MAP_GAIN = 4
#: Maps whose values lie in 0..1 (shown as 0..255).
_UNIT_MAPS = ("confidence", "past_weight", "occluded_in_future", "occluded_in_past")


def check_output_suffix(path, suffixes: tuple[str, ...], *, option: str) -> Path:
    """`path` as a Path, refused unless its suffix is one of `suffixes` (the option names the format).

    Raises
    ------
    ParameterError
    """
    p = Path(path)
    if p.suffix.lower() not in suffixes:
        raise ParameterError(f"{option} must end in {' or '.join(suffixes)}, got {str(path)!r}")
    if p.exists() and p.is_dir():
        raise ParameterError(f"{option} must be a file, got the directory {str(path)!r}")
    return p


def _png(path: Path, image: np.ndarray) -> None:
    import cv2

    from synth.io import atomic_write_bytes

    ok, buf = cv2.imencode(".png", image)
    if not ok:  # pragma: no cover - OpenCV failure
        raise ParameterError(f"cannot encode {path.name} as PNG")
    atomic_write_bytes(path, buf.tobytes())


def write_maps(
    directory: str | os.PathLike,
    maps: dict,
    picture: Picture,
    truth: Picture | None = None,
    *,
    candidates: int | None = None,
) -> list[str]:
    """Write a maker's maps as 8-bit greyscale PNGs into `directory` (created when missing).

    - ``candidates.png``: candidate count, 255 = `candidates` (the largest K of the run);
    - ``confidence.png``, ``past_weight.png``, ``occluded_*.png``: 0..1 as 0..255;
    - any other map: 0..its maximum as 0..255;
    - ``abs_error.png`` (when `truth` is given): luma |error| in 8-bit units times `ERROR_MAP_GAIN`.

    Returns
    -------
    list of str
        The files written, in the order above.

    Raises
    ------
    ParameterError
        When `directory` exists and is not a directory.
    """
    d = Path(directory)
    if d.exists() and not d.is_dir():
        raise ParameterError(f"--maps must be a directory, got the file {d}")
    d.mkdir(parents=True, exist_ok=True)
    images = {}
    for name, m in maps.items():
        m = np.asarray(m, dtype=np.float32)
        if name == "candidates":
            images["candidates.png"] = m * (255.0 / max(1, int(candidates or m.max() or 1)))
        elif name in _UNIT_MAPS:
            images[f"{name}.png"] = m * 255.0
        else:
            top = float(m.max()) if m.size else 0.0
            images[f"{name}.png"] = m * (255.0 / top) if top > 0 else m * 0.0
    if truth is not None:
        shift = truth.bit_depth - 8
        err = np.abs(picture.y.astype(np.float64) - truth.y.astype(np.float64)) / (1 << shift)
        images["abs_error.png"] = err * ERROR_MAP_GAIN
    written = []
    for name, img in images.items():
        _png(d / name, np.clip(np.floor(img + 0.5), 0, 255).astype(np.uint8))
        written.append(str(d / name))
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
        The picture as a 1-frame ``.y4m`` (written atomically).
    at : int, optional
        Picture number of the target, strictly between; the true picture is then measured against.
    t : float, optional
        Target time as a fraction in (0, 1) (no true picture). Exactly one of `at` and `t`.
    vectors : str or path-like, optional
        ``estimate`` (default) or a field file (`synth.motion.sources.parse_vector_source`); only
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
        Strict-JSON summary: times, fraction, picture size, maker, vectors, K and mean confidence
        (core makers), PSNR per plane and luma SSIM (when the true picture exists; an infinite PSNR
        is None), seconds, written paths, and ``offsets`` (statistics) when asked.

    Raises
    ------
    ParameterError, FormatError
        Any bad option (named as typed), before anything is computed.
    """
    from synth.io import open_clip, write_y4m
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
    output = check_output_suffix(output, (".y4m",), option="--output")
    if maps is not None and Path(maps).exists() and not Path(maps).is_dir():
        raise ParameterError(f"--maps must be a directory (or not exist yet), got the file {maps}")
    if offsets is not None:
        from synth.commands.offsets import check_offset_options

        if at is None:
            raise ParameterError("--offsets needs --at (the true picture is the target of the offset search)")
        offsets = check_output_suffix(offsets, (".json",), option="--offsets")
        check_offset_options(offset_block, offset_window)
    the_maker = get_maker(maker, option="--maker")
    source = parse_vector_source(vectors, qp=vector_qp, two_way=two_way)
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
    write_y4m(output, [prediction.picture], info)
    k = _candidates(p, fields) if "candidates" in prediction.maps else None
    conf = prediction.maps.get("confidence")
    summary = {
        "clip": str(clip),
        "past": past,
        "future": future,
        "at": at,
        "t": frac,
        "size": f"{p_pic.width}x{p_pic.height}",
        "format": f"{p_pic.chroma_format} {p_pic.bit_depth}-bit",
        "maker": the_maker.name,
        "vectors": source.describe() if the_maker.needs_vectors else None,
        "fields": len(fields),
        "candidates": k,
        "mean_confidence": float(np.mean(conf)) if conf is not None else None,
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
        summary["maps"] = write_maps(maps, prediction.maps, prediction.picture, truth, candidates=k)
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
    if v.get("vectors") == "estimate":
        both = ", both directions" if v.get("two_way") else ""
        return f"estimated (QP {v['vector_qp']}{both}), {fields} field(s)"
    return f"{v['vectors']}, {fields} field(s)"


def format_frame(summary: dict) -> str:
    """The text `synth frame` prints for a `run_frame` summary."""
    s = summary
    target = f"picture {s['at']}" if s["at"] is not None else f"t = {s['t']:.4g}"
    lines = [
        f"synthesised    {target} from pictures {s['past']} and {s['future']} ({s['size']}, {s['format']})",
        f"vectors        {_describe_vectors(s['vectors'], s['fields'])}",
    ]
    maker = f"maker          {s['maker']}"
    if s["candidates"] is not None:
        maker += f", K = {s['candidates']}"
    if s["mean_confidence"] is not None:
        maker += f", mean confidence {s['mean_confidence']:.3f}"
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
