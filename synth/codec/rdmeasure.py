"""Encoder in the loop: how many bits does a synthetic reference save a real encoder?

For every target picture between two references ``gap`` apart, and every QP, short streams are
coded with x264 or x265 (:mod:`synth.codec.encode`) in which the target is a P picture and its
reference pictures are (``M`` is the first maker of the run, the "synthetic" one, e.g. ``lmmse``):

``real`` (a)
    the two real references alone: stream ``past, future, target``;
``real+M`` (b)
    the two real references plus M's picture as a third reference: stream
    ``past, future, synthetic, target``, the synthetic picture coded at `extra_qp` (far lower than
    the QP, so it loses little in coding) and its bits not charged: a decoder derives it;
``M-only`` (c)
    the synthetic picture as the only reference (same stream as (b), one reference picture);
``real+<other>`` (d)
    another maker's picture (e.g. ``real+dis-medium``, optical-flow interpolation) as the third
    reference;
``real+M+offsets`` (optional)
    the synthetic picture corrected with the encoder-side offsets (:mod:`synth.codec.offsets`) as the
    third reference, the offsets' bits charged to the target.

By default the synthetic picture is made from the *decoded* references at the same QP, which is
what a decoder would have; ``refs='source'`` uses the source pictures instead (an upper bound).
The bits of the target picture alone (its packet) and its PSNR give one rate-distortion point per
QP; per clip the rate is the mean bits per target picture and the quality the mean PSNR-Y over the
targets. The Bjontegaard delta rate (:mod:`synth.codec.bdrate`, VCEG-M33) of each configuration against
(a) is the headline figure.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from synth.codec.bdrate import bd_psnr, bd_rate
from synth.codec.encode import CODECS, encode_pictures, max_qp
from synth.codec.offsets import refine_with_offsets
from synth.errors import ParameterError
from synth.makers import Maker
from synth.metrics import picture_psnr
from synth.motion.sources import VectorSource
from synth.picture import Picture

__all__ = [
    "ANCHOR",
    "TargetCoding",
    "code_target",
    "measure_clip",
    "ClipRD",
    "rd_targets",
    "summarise_clips",
    "parse_qps",
    "config_names",
    "parse_gaps",
]

#: The anchor configuration every BD-rate is measured against.
ANCHOR = "real"


def config_names(synthetic: str) -> dict[str, str]:
    """Configuration labels of a run whose first maker is `synthetic`: keys ``'b'`` (plus it as a
    third reference), ``'c'`` (it as the only reference), ``'corrected'`` (with the offsets).

    >>> config_names("lmmse")["c"]
    'lmmse-only'
    """
    return {"b": f"real+{synthetic}", "c": f"{synthetic}-only", "corrected": f"real+{synthetic}+offsets"}


@dataclass(frozen=True, eq=False)
class TargetCoding:
    """The target picture's cost and quality in one short stream."""

    bits: int
    psnr: dict[str, float]
    reconstruction: Picture
    extra_psnr_y: float | None  # decoded extra reference against the extra picture itself
    references_match: bool  # decoded past/future equal those of the given reference stream


def code_target(
    past: Picture,
    future: Picture,
    target: Picture,
    *,
    extra: Picture | None = None,
    extra_only: bool = False,
    codec: str = "h264",
    qp: int,
    extra_qp: int = 4,
    preset: str = "medium",
    expected_refs: tuple[Picture, Picture] | None = None,
) -> TargetCoding:
    """Code ``past, future, [extra,] target`` and return the target's bits and PSNR.

    Parameters
    ----------
    past, future, target : Picture
    extra : Picture, optional
        A third reference coded just before the target at `extra_qp`; its bits are not counted.
    extra_only : bool
        The target may use only the picture coded just before it (the extra one).
    codec, qp, preset
        As in :func:`synth.codec.encode.encode_pictures`.
    expected_refs : (Picture, Picture), optional
        Decoded past and future the caller expects (e.g. used to make `extra`); the result says
        whether this stream's decoded references equal them.
    """
    pics = [past, future] + ([extra] if extra is not None else []) + [target]
    if extra is None:
        refs = 2
        if extra_only:
            raise ParameterError("extra_only needs an extra reference picture")
    else:
        refs = 1 if extra_only else 3
    zones = {2: int(extra_qp)} if extra is not None else None
    stream = encode_pictures(pics, codec=codec, qp=qp, picture_qp=zones, refs=refs, preset=preset)
    tp = stream.pictures[-1]
    extra_psnr = None
    if extra is not None:
        extra_psnr = picture_psnr(stream.pictures[2].reconstruction, extra)["Y"]
    match = True
    if expected_refs is not None:
        match = all(
            all(np.array_equal(a, b) for a, b in zip(s.reconstruction.planes, e.planes))
            for s, e in zip(stream.pictures[:2], expected_refs)
        )
    return TargetCoding(tp.bits, picture_psnr(tp.reconstruction, target), tp.reconstruction, extra_psnr, match)


def parse_qps(text: str | Sequence[int], *, bit_depth: int = 8, option: str = "--qps") -> list[int]:
    """QPs from '22,27,32,37' (or a sequence): integers in range, distinct, at least four."""
    from synth.commands.options import parse_int_list

    qps = parse_int_list(text, option=option, allow_empty=True)
    top = max_qp(bit_depth)
    if len(qps) < 4 or len(set(qps)) != len(qps) or any(not 0 <= q <= top for q in qps):
        raise ParameterError(f"{option} must be at least four distinct integers in 0..{top}, got {text!r}")
    return sorted(qps)


def parse_gaps(text, *, option: str = "--gaps") -> list[int]:
    """Reference gaps from '8' or '2,4,8' (or a sequence): distinct integers >= 2, in the given order."""
    from synth.commands.options import parse_int_list

    gaps = parse_int_list(text, option=option)
    if any(g < 2 for g in gaps) or len(set(gaps)) != len(gaps):
        raise ParameterError(f"{option} must be distinct integers >= 2, got {text!r}")
    return gaps


def rd_targets(frame_count: int, gap: int) -> list[tuple[int, int, int]]:
    """``(past, future, target)`` for every picture between references ``gap`` apart (0, gap, 2 gap...)."""
    if isinstance(gap, bool) or not isinstance(gap, int) or gap < 2:
        raise ParameterError(f"--gaps must be integers >= 2, got {gap!r}")
    if frame_count < gap + 1:
        raise ParameterError(f"--gaps {gap} needs at least {gap + 1} pictures, the clip has {frame_count}")
    out = []
    for p in range(0, frame_count - gap, gap):
        out += [(p, p + gap, n) for n in range(p + 1, p + gap)]
    return out


@dataclass
class ClipRD:
    """Per-target rows and per-configuration curves of one clip."""

    clip: str
    gap: int = 8
    synthetic: str = "lmmse"
    rows: list[dict] = field(default_factory=list)
    offsets: list[dict] = field(default_factory=list)
    fields: list[dict] = field(default_factory=list)
    reference_mismatches: int = 0

    def curves(self) -> dict[str, list[dict]]:
        """Per configuration and QP: mean bits per target picture and mean PSNR per plane."""
        out: dict[str, list[dict]] = {}
        configs = sorted({r["config"] for r in self.rows}, key=lambda c: (c != ANCHOR, c))
        for c in configs:
            pts = []
            for qp in sorted({r["qp"] for r in self.rows if r["config"] == c}):
                sel = [r for r in self.rows if r["config"] == c and r["qp"] == qp]
                pts.append(
                    {
                        "qp": qp,
                        "targets": len(sel),
                        "bits": float(np.mean([r["bits"] for r in sel])),
                        "side_bits": float(np.mean([r["side_bits"] for r in sel])),
                        "psnr_y": float(np.mean([r["psnr_y"] for r in sel])),
                        "psnr_cb": float(np.mean([r["psnr_cb"] for r in sel])),
                        "psnr_cr": float(np.mean([r["psnr_cr"] for r in sel])),
                    }
                )
            out[c] = pts
        return out

    def bd(self) -> dict[str, dict[str, float | None]]:
        """BD-rate (%) and BD-PSNR (dB) of every configuration against the anchor (a)."""
        curves = self.curves()
        if ANCHOR not in curves:
            return {}
        a = curves[ANCHOR]
        res = {}
        for c, pts in curves.items():
            if c == ANCHOR:
                continue
            ra, pa = [p["bits"] for p in a], [p["psnr_y"] for p in a]
            rt, pt = [p["bits"] for p in pts], [p["psnr_y"] for p in pts]
            try:
                res[c] = {"bd_rate": bd_rate(ra, pa, rt, pt), "bd_psnr": bd_psnr(ra, pa, rt, pt)}
            except ParameterError as exc:
                res[c] = {"bd_rate": None, "bd_psnr": None, "note": str(exc)}
        return res

    def synthesis_psnr(self) -> dict[str, float]:
        """Mean PSNR-Y of each configuration's extra picture against the target, before coding."""
        out = {}
        for c in sorted({r["config"] for r in self.rows if r.get("reference_psnr_y") is not None}):
            vals = [
                r["reference_psnr_y"] for r in self.rows if r["config"] == c and r.get("reference_psnr_y") is not None
            ]
            out[c] = float(np.mean(vals))
        return out

    def offsets_summary(self) -> list[dict]:
        """Per QP: mean PSNR-Y before/after the offsets, mean bits per picture and per block, zero share."""
        out = []
        for qp in sorted({o["qp"] for o in self.offsets}):
            sel = [o for o in self.offsets if o["qp"] == qp]
            out.append(
                {
                    "qp": qp,
                    "pictures": len(sel),
                    "psnr_before_y": float(np.mean([o["psnr_before_y"] for o in sel])),
                    "psnr_after_y": float(np.mean([o["psnr_after_y"] for o in sel])),
                    "psnr_gain_y": float(np.mean([o["psnr_after_y"] - o["psnr_before_y"] for o in sel])),
                    "bits_per_picture": float(np.mean([o["bits_total"] for o in sel])),
                    "bits_per_block": float(np.mean([o["bits_per_block"] for o in sel])),
                    "zero_share": float(np.mean([o["zero_share"] for o in sel])),
                }
            )
        return out


def _row(clip, past, future, target, config, qp, coding: TargetCoding, *, side_bits=0, reference_psnr=None) -> dict:
    return {
        "clip": clip,
        "gap": future - past,
        "past": past,
        "future": future,
        "target": target,
        "t": (target - past) / (future - past),
        "config": config,
        "qp": qp,
        "bits": coding.bits + side_bits,
        "target_bits": coding.bits,
        "side_bits": side_bits,
        "psnr_y": coding.psnr["Y"],
        "psnr_cb": coding.psnr.get("Cb", float("nan")),
        "psnr_cr": coding.psnr.get("Cr", float("nan")),
        "reference_psnr_y": reference_psnr,
        "extra_psnr_y": coding.extra_psnr_y,
    }


def measure_clip(
    read: Callable[[int], Picture],
    frame_count: int,
    *,
    clip: str,
    gap: int = 8,
    qps: Sequence[int] = (22, 27, 32, 37),
    codec: str = "h264",
    makers: Sequence[Maker],
    source: VectorSource | None = None,
    params=None,
    vector_qp: int | None = None,
    refs: str = "decoded",
    extra_qp: int = 4,
    preset: str = "medium",
    offsets: dict | None = None,
    only_extra: bool = True,
    limit: int | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> ClipRD:
    """Run the encoder-in-the-loop measurement on one clip.

    Parameters
    ----------
    read : callable index -> Picture
        Random access to the clip's pictures.
    frame_count : int
    clip : str
        Name used in the rows.
    gap : int
        Distance between the two references (targets are every picture between them).
    qps : sequence of int
        One rate-distortion point per QP (four or more for a BD-rate).
    codec : {'h264', 'hevc'}
    makers : sequence of Maker
        One extra-reference configuration per maker (`synth.makers.resolve_makers`). The first is
        the synthetic one: configurations ``real+M`` (b), ``M-only`` (c) and, with `offsets`,
        ``real+M+offsets``; every other maker gives ``real+<name>`` (d).
    source : VectorSource, optional
        Where the vectors of makers that need them come from (default: the built-in estimator).
    params : SynthParams, optional
        Synthesis parameters handed to the makers.
    vector_qp : int, optional
        QP of estimated vectors; None (default) estimates them at each point's encoder QP, as the
        encoder would have coded them.
    refs : {'decoded', 'source'}
        Make extra references from the decoded references at each QP (what a decoder has) or from
        the source pictures.
    extra_qp : int
        QP of the extra reference picture in the stream.
    offsets : dict, optional
        When given (keys ``block``, ``window``, ``metric``), run the offset search on every
        synthetic picture (lambda from the QP), record its statistics, and add configuration
        ``real+M+offsets`` with the offsets' bits charged.
    only_extra : bool
        Also measure (c), the synthetic picture as the only reference.
    limit : int, optional
        Measure only the first `limit` targets (quick looks).
    progress : callable (done, total, label), optional

    Returns
    -------
    ClipRD
        ``fields`` records the vector fields used per reference pair and QP (``past``, ``future``,
        ``qp``, ``fields``: coded_time, reference_time, blocks, source, qp).
    """
    from synth.codec.export import prepare_pair
    from synth.motion.sources import parse_vector_source

    if codec not in CODECS:
        raise ParameterError(f"--codec must be one of {', '.join(CODECS)}, got {codec!r}")
    if refs not in ("decoded", "source"):
        raise ParameterError(f"--refs must be 'decoded' or 'source', got {refs!r}")
    makers = list(makers)
    if not makers:
        raise ParameterError("--makers must name at least one maker")
    if source is None:
        source = parse_vector_source(None)
    qps = list(qps)
    targets = rd_targets(frame_count, gap)
    if limit is not None:
        if limit < 1:
            raise ParameterError(f"--limit must be >= 1, got {limit}")
        targets = targets[:limit]
    primary, others = makers[0], makers[1:]
    names = config_names(primary.name)
    result = ClipRD(clip=clip, gap=gap, synthetic=primary.name)
    total = len(targets) * len(qps)
    done = 0
    pairs: dict[tuple[int, int], list[int]] = {}
    for p, f, n in targets:
        pairs.setdefault((p, f), []).append(n)
    for (p, f), ns in pairs.items():
        past, future = read(p), read(f)
        for qp in qps:
            if refs == "decoded":
                ref_stream = encode_pictures([past, future], codec=codec, qp=qp, refs=2, preset=preset)
                dpast, dfuture = (c.reconstruction for c in ref_stream.pictures)
            else:
                dpast, dfuture = past, future
            point_source = source.with_qp(qp if vector_qp is None else vector_qp)
            prepared = []
            for m in makers:
                pair, used = prepare_pair(
                    m, dpast, dfuture, past_time=p, future_time=f, source=point_source, params=params
                )
                prepared.append(pair)
                if used:
                    result.fields.append({"past": p, "future": f, "qp": qp, "maker": m.name, "fields": used})
            expected = (dpast, dfuture) if refs == "decoded" else None
            for n in ns:
                target = read(n)
                common = dict(codec=codec, qp=qp, extra_qp=extra_qp, preset=preset, expected_refs=expected)
                a = code_target(past, future, target, **common)
                result.rows.append(_row(clip, p, f, n, ANCHOR, qp, a))
                synthetic = prepared[0].at_time(n).picture
                syn_psnr = picture_psnr(synthetic, target)["Y"]
                b = code_target(past, future, target, extra=synthetic, **common)
                result.rows.append(_row(clip, p, f, n, names["b"], qp, b, reference_psnr=syn_psnr))
                codings = [a, b]
                if only_extra:
                    c = code_target(past, future, target, extra=synthetic, extra_only=True, **common)
                    result.rows.append(_row(clip, p, f, n, names["c"], qp, c, reference_psnr=syn_psnr))
                    codings.append(c)
                for m, pair in zip(others, prepared[1:]):
                    pic = pair.at_time(n).picture
                    d = code_target(past, future, target, extra=pic, **common)
                    result.rows.append(
                        _row(clip, p, f, n, f"real+{m.name}", qp, d, reference_psnr=picture_psnr(pic, target)["Y"])
                    )
                    codings.append(d)
                if offsets is not None:
                    search = refine_with_offsets(target, synthetic, qp=qp, time=n, **offsets)
                    st = search.stats
                    result.offsets.append(
                        {
                            "clip": clip,
                            "target": n,
                            "qp": qp,
                            "psnr_before_y": st.psnr_before["Y"],
                            "psnr_after_y": st.psnr_after["Y"],
                            "bits_total": st.bits_total,
                            "bits_per_block": st.bits_per_block,
                            "zero_share": st.zero_share,
                            "sad_before": st.sad_before,
                            "sad_after": st.sad_after,
                        }
                    )
                    e = code_target(past, future, target, extra=search.prediction, **common)
                    result.rows.append(
                        _row(
                            clip,
                            p,
                            f,
                            n,
                            names["corrected"],
                            qp,
                            e,
                            side_bits=st.bits_total,
                            reference_psnr=st.psnr_after["Y"],
                        )
                    )
                    codings.append(e)
                result.reference_mismatches += sum(not cd.references_match for cd in codings)
                done += 1
                if progress is not None:
                    progress(done, total, f"{clip} picture {n} QP {qp}")
    return result


def _average(per: list[dict]) -> dict:
    configs = sorted({k for p in per for k in p["bd"]})
    average = {}
    for k in configs:
        vals = [p["bd"][k]["bd_rate"] for p in per if k in p["bd"] and p["bd"][k]["bd_rate"] is not None]
        psn = [p["bd"][k]["bd_psnr"] for p in per if k in p["bd"] and p["bd"][k]["bd_psnr"] is not None]
        average[k] = {
            "bd_rate": float(np.mean(vals)) if vals else None,
            "bd_psnr": float(np.mean(psn)) if psn else None,
            "clips": len(vals),
        }
    return average


def summarise_clips(clips: Sequence[ClipRD]) -> dict:
    """Per-clip (and gap) curves and BD figures, and the average BD-rate per configuration.

    Returns
    -------
    dict
        ``clips`` (one entry per measured clip and gap), ``synthetic`` (the first maker's name),
        ``average`` (per configuration, the mean over every entry) and ``gaps`` (per gap, as text,
        the same mean over that gap's entries).
    """
    per = []
    for c in clips:
        per.append(
            {
                "clip": c.clip,
                "gap": c.gap,
                "targets": len({(r["past"], r["target"]) for r in c.rows}),
                "curves": c.curves(),
                "bd": c.bd(),
                "synthesis_psnr_y": c.synthesis_psnr(),
                "offsets": c.offsets_summary(),
                "reference_mismatches": c.reference_mismatches,
                "fields": c.fields,
            }
        )
    gaps = list(dict.fromkeys(p["gap"] for p in per))
    return {
        "clips": per,
        "synthetic": clips[0].synthetic if clips else None,
        "average": _average(per),
        "gaps": {str(g): _average([p for p in per if p["gap"] == g]) for g in gaps},
    }
