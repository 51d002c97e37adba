"""Encoder in the loop: how many bits does a synthetic reference save a real encoder?

For every target picture between two references ``gap`` apart (or every B picture of a dyadic
GOP between its own hierarchy references, ``gop_size``), and every QP, short streams are coded with
x264 or x265 in which the target is a B picture (``target_picture='B'``,
:mod:`synth.codec.bpicture`: list 0 {past}, list 1 {future}, bi-prediction allowed, an extra
reference in front of the past one in list 0) or a P picture with several forward references
(``target_picture='P'``, :mod:`synth.codec.encode`). The configurations (``M`` is the first maker
of the run, the "synthetic" one, e.g. ``lmmse``):

``real`` (a)
    the two real references alone: stream ``past, future, target``;
``real+M`` (b)
    the two real references plus M's picture as a third reference: stream
    ``past, future, synthetic, target``, the synthetic picture coded at `extra_qp` (far lower than
    the QP, so it loses little in coding) and its bits not charged: a decoder derives it;
``M-only`` (c, P pictures only)
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
(a) is the headline figure. Over a hierarchy the rate is the bits of a whole GOP (the mean bits per
picture of each temporal layer times the layer's pictures per GOP, summed) and the quality the mean
PSNR-Y over the GOP's pictures; per-layer curves are kept beside it.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from synth.codec.bdrate import bd_psnr, bd_rate
from synth.codec.encode import CODECS, encode_pictures, max_qp
from synth.codec.offsets import refine_with_offsets
from synth.errors import ParameterError
from synth.hierarchy import check_gop_size, dyadic_gop
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
    "TARGET_PICTURES",
    "bisection_layers",
    "hierarchy_targets",
    "limit_targets",
    "qps_warning",
]

#: Picture types the target can be coded as (``--target-picture``).
TARGET_PICTURES = ("B", "P")

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
    qps_match: bool = True  # every picture's QP read back is the planned one (B pictures, H.264)
    kind: str = "P"  # the target's picture type as decoded


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


def code_b_config(
    past: Picture,
    future: Picture,
    target: Picture,
    *,
    extra: Picture | None = None,
    codec: str = "h264",
    qp: int,
    extra_qp: int = 4,
    preset: str = "medium",
    expected_refs: tuple[Picture, Picture] | None = None,
) -> TargetCoding:
    """The target as a B picture (:func:`synth.codec.bpicture.code_b_target`) as a `TargetCoding`.

    ``qps_match`` says whether every picture came out at its planned QP (the QP under test, the
    extra at `extra_qp`), as the decoder reads it back (H.264); ``references_match`` compares the
    decoded past and future with `expected_refs`.
    """
    from synth.codec.bpicture import code_b_target

    r = code_b_target(past, future, target, extra=extra, qp=qp, extra_qp=extra_qp, codec=codec, preset=preset)
    planned = {role: (int(extra_qp) if role == "extra" else int(qp)) for role in r.display_roles}
    qps_match = all(r.qps[k] == v for k, v in planned.items())
    match = True
    if expected_refs is not None:
        match = all(
            all(np.array_equal(a, b) for a, b in zip(r.decoded[role].planes, e.planes))
            for role, e in zip(("past", "future"), expected_refs)
        )
    extra_psnr = picture_psnr(r.decoded["extra"], extra)["Y"] if extra is not None else None
    recon = r.decoded["target"]
    return TargetCoding(
        r.target_bits, picture_psnr(recon, target), recon, extra_psnr, match, qps_match, r.types["target"]
    )


def parse_qps(text: str | Sequence[int], *, bit_depth: int = 8, option: str = "--qps") -> list[int]:
    """QPs from '22,27,32,37' (or a sequence): integers in range, distinct, at least two.

    A BD-rate needs four (VCEG-M33's cubic fit); with two or three the BD figures are null
    (:func:`qps_warning` gives the one-line warning the command prints).
    """
    from synth.commands.options import parse_int_list

    qps = parse_int_list(text, option=option, allow_empty=True)
    top = max_qp(bit_depth)
    if len(qps) < 2 or len(set(qps)) != len(qps) or any(not 0 <= q <= top for q in qps):
        raise ParameterError(f"{option} must be at least two distinct integers in 0..{top}, got {text!r}")
    return sorted(qps)


def qps_warning(qps: Sequence[int], *, option: str = "--qps") -> str | None:
    """One-line warning when fewer than four QPs are measured (no BD-rate then), else None."""
    if len(qps) >= 4:
        return None
    return (
        f"warning: {option} names {len(qps)} QPs; BD-rate and BD-PSNR need four or more (VCEG-M33 cubic fit), "
        "so they are null"
    )


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


def bisection_layers(gap: int) -> dict[int, int]:
    """Temporal layer of every offset 1..gap-1 between two references: the middle picture is layer
    1, the middles of the two halves layer 2, and so on (for a power of two, the dyadic hierarchy
    of `synth.hierarchy.dyadic_gop`; otherwise the same bisection with midpoints rounded down).

    >>> bisection_layers(8)
    {4: 1, 2: 2, 1: 3, 3: 3, 6: 2, 5: 3, 7: 3}
    """
    layers: dict[int, int] = {}

    def visit(lo: int, hi: int, layer: int) -> None:
        if hi - lo < 2:
            return
        mid = (lo + hi) // 2
        layers[mid] = layer
        visit(lo, mid, layer + 1)
        visit(mid, hi, layer + 1)

    visit(0, int(gap), 1)
    return layers


def hierarchy_targets(
    frame_count: int, gop_size: int, *, option: str = "--gop-size"
) -> list[tuple[int, int, int, int]]:
    """``(past, future, target, layer)`` of every B picture of every whole dyadic GOP of the clip.

    GOPs start at pictures 0, N, 2N, ...; each B picture is predicted from its own hierarchy
    references (`synth.hierarchy.dyadic_gop`), listed in coding order GOP by GOP.
    """
    try:
        size = check_gop_size(gop_size)
    except ParameterError:
        raise ParameterError(f"{option} must be a power of two from 2 to 64, got {gop_size!r}") from None
    if frame_count < size + 1:
        raise ParameterError(f"{option} {size} needs at least {size + 1} pictures, the clip has {frame_count}")
    out = []
    for start in range(0, frame_count - size, size):
        out += [(start + g.past, start + g.future, start + g.position, g.layer) for g in dyadic_gop(size)]
    return out


def limit_targets(targets: Sequence[tuple], layers: Sequence[int], limit: int | None) -> list[tuple]:
    """The first `limit` targets in hierarchy order: every middle picture (layer 1) of the clip first,
    then layer 2, ...; within a layer in display order. All targets (in their order) without a limit."""
    if limit is None:
        return list(targets)
    order = sorted(range(len(targets)), key=lambda i: (layers[i], targets[i][2]))
    keep = set(order[:limit])
    return [t for i, t in enumerate(targets) if i in keep]


@dataclass
class ClipRD:
    """Per-target rows and per-configuration curves of one clip."""

    clip: str
    gap: int | None = 8
    synthetic: str = "lmmse"
    rows: list[dict] = field(default_factory=list)
    offsets: list[dict] = field(default_factory=list)
    fields: list[dict] = field(default_factory=list)
    reference_mismatches: int = 0
    gop_size: int | None = None  # set for a whole-hierarchy measurement (gap is None then)
    target_picture: str = "P"
    qp_mismatches: int = 0  # streams with a picture off its planned QP (read back, B pictures)
    maps: list[dict] = field(default_factory=list)  # per-block reference use of chosen targets

    def curves(self) -> dict[str, list[dict]]:
        """Per configuration and QP: mean bits per target picture and mean PSNR per plane."""
        return _curves(self.rows)

    def layer_curves(self) -> dict[str, dict[str, list[dict]]]:
        """Per temporal layer (as text), the curves of that layer's targets."""
        layers = sorted({r["layer"] for r in self.rows if r.get("layer") is not None})
        return {str(k): _curves([r for r in self.rows if r.get("layer") == k]) for k in layers}

    def gop_curves(self) -> dict[str, list[dict]] | None:
        """Whole-hierarchy curves: per configuration and QP, the bits of one GOP (sum over layers of
        the layer's mean bits per picture times its pictures per GOP) and the mean PSNR over the
        GOP's pictures (weighted the same way). None for a per-gap measurement; a QP at which some
        layer was not measured (``--limit``) is left out."""
        if self.gop_size is None:
            return None
        per_gop = {}
        for g in dyadic_gop(self.gop_size):
            per_gop[g.layer] = per_gop.get(g.layer, 0) + 1
        by_layer = {int(k): v for k, v in self.layer_curves().items()}
        out: dict[str, list[dict]] = {}
        configs = sorted({r["config"] for r in self.rows}, key=lambda c: (c != ANCHOR, c))
        n = sum(per_gop.values())
        for c in configs:
            pts = []
            for qp in sorted({r["qp"] for r in self.rows if r["config"] == c}):
                got = {k: next((p for p in by_layer.get(k, {}).get(c, []) if p["qp"] == qp), None) for k in per_gop}
                if any(v is None for v in got.values()):
                    continue
                point = {"qp": qp, "pictures": n, "bits": float(sum(per_gop[k] * got[k]["bits"] for k in per_gop))}
                for key in ("psnr_y", "psnr_cb", "psnr_cr"):
                    point[key] = float(sum(per_gop[k] * got[k][key] for k in per_gop) / n)
                pts.append(point)
            out[c] = pts
        return out

    def bd(self) -> dict[str, dict[str, float | None]]:
        """BD-rate (%) and BD-PSNR (dB) of every configuration against the anchor (a): on the
        per-target curves, or on the whole-GOP curves of a hierarchy."""
        curves = self.gop_curves() if self.gop_size is not None else self.curves()
        return _bd_against_anchor(curves)

    def layer_bd(self) -> dict[str, dict[str, dict[str, float | None]]]:
        """Per temporal layer, BD-rate / BD-PSNR of every configuration against (a)."""
        return {k: _bd_against_anchor(v) for k, v in self.layer_curves().items()}

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


def _curves(rows: Sequence[dict]) -> dict[str, list[dict]]:
    out: dict[str, list[dict]] = {}
    configs = sorted({r["config"] for r in rows}, key=lambda c: (c != ANCHOR, c))
    for c in configs:
        pts = []
        for qp in sorted({r["qp"] for r in rows if r["config"] == c}):
            sel = [r for r in rows if r["config"] == c and r["qp"] == qp]
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


def _bd_against_anchor(curves: dict[str, list[dict]]) -> dict[str, dict[str, float | None]]:
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


def _row(
    clip, past, future, target, config, qp, coding: TargetCoding, *, side_bits=0, reference_psnr=None, layer=None
) -> dict:
    return {
        "clip": clip,
        "gap": future - past,
        "layer": layer,
        "picture_type": coding.kind,
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
    target_picture: str = "P",
    gop_size: int | None = None,
    map_target: int | None = None,
    map_qp: int | None = None,
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
        the synthetic one: configurations ``real+M`` (b), ``M-only`` (c, P pictures only) and, with
        `offsets`, ``real+M+offsets``; every other maker gives ``real+<name>`` (d).
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
        Also measure (c), the synthetic picture as the only reference (P pictures only).
    limit : int, optional
        Measure only `limit` targets, in hierarchy order (`limit_targets`: the middle pictures
        first).
    target_picture : {'B', 'P'}
        Code the target as a B picture (:mod:`synth.codec.bpicture`) or as a P picture with
        forward references only.
    gop_size : int, optional
        Measure the B pictures of dyadic GOPs of this size, each between its own hierarchy
        references (`hierarchy_targets`), instead of the pictures between references `gap` apart.
    map_target, map_qp : int, optional
        Also record which reference every block of target `map_target` uses at `map_qp` (default
        the middle QP) in every extra-reference configuration (``maps``; B pictures, H.264 only:
        :func:`synth.codec.bpicture.reference_usage`).
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
    if target_picture not in TARGET_PICTURES:
        raise ParameterError(f"--target-picture must be B or P, got {target_picture!r}")
    makers = list(makers)
    if not makers:
        raise ParameterError("--makers must name at least one maker")
    if source is None:
        source = parse_vector_source(None)
    qps = list(qps)
    b_frames = target_picture == "B"
    if b_frames and codec == "h264":
        from synth.codec.bpicture import x264_qp_plan

        for q in qps:
            x264_qp_plan(q, extra_qp, ("extra",))
    if gop_size is not None:
        found = hierarchy_targets(frame_count, gop_size)
        targets = [(p, f, n) for p, f, n, _ in found]
        layers = [k for *_, k in found]
    else:
        targets = rd_targets(frame_count, gap)
        within = bisection_layers(gap)
        layers = [within[n - p] for p, _, n in targets]
    layer_of = {t: k for t, k in zip(targets, layers)}
    if limit is not None:
        if limit < 1:
            raise ParameterError(f"--limit must be >= 1, got {limit}")
        targets = limit_targets(targets, layers, limit)
    primary, others = makers[0], makers[1:]
    names = config_names(primary.name)
    only_extra = only_extra and not b_frames
    result = ClipRD(
        clip=clip,
        gap=None if gop_size is not None else gap,
        synthetic=primary.name,
        gop_size=gop_size,
        target_picture=target_picture,
    )
    if map_qp is None and qps:
        map_qp = qps[(len(qps) - 1) // 2]
    want_map = b_frames and codec == "h264" and map_target is not None
    total = len(targets) * len(qps)
    done = 0
    pairs: dict[tuple[int, int], list[int]] = {}
    for p, f, n in targets:
        pairs.setdefault((p, f), []).append(n)
    for (p, f), ns in pairs.items():
        past, future = read(p), read(f)
        for qp in qps:
            if refs == "decoded":
                if b_frames:
                    from synth.codec.bpicture import code_b_references

                    dpast, dfuture = code_b_references(past, future, qp=qp, codec=codec, preset=preset)
                else:
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
            code = code_b_config if b_frames else code_target
            for n in ns:
                target = read(n)
                layer = layer_of[(p, f, n)]
                common = dict(codec=codec, qp=qp, extra_qp=extra_qp, preset=preset, expected_refs=expected)

                def row(config, coding, _at=(p, f, n, qp, layer), **kw):
                    pp, ff, nn, q, k = _at
                    result.rows.append(_row(clip, pp, ff, nn, config, q, coding, layer=k, **kw))

                a = code(past, future, target, **common)
                row(ANCHOR, a)
                synthetic = prepared[0].at_time(n).picture
                syn_psnr = picture_psnr(synthetic, target)["Y"]
                b = code(past, future, target, extra=synthetic, **common)
                row(names["b"], b, reference_psnr=syn_psnr)
                codings = [a, b]
                extras = {names["b"]: synthetic}
                if only_extra:
                    c = code_target(past, future, target, extra=synthetic, extra_only=True, **common)
                    row(names["c"], c, reference_psnr=syn_psnr)
                    codings.append(c)
                for m, pair in zip(others, prepared[1:]):
                    pic = pair.at_time(n).picture
                    d = code(past, future, target, extra=pic, **common)
                    row(f"real+{m.name}", d, reference_psnr=picture_psnr(pic, target)["Y"])
                    codings.append(d)
                    extras[f"real+{m.name}"] = pic
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
                    e = code(past, future, target, extra=search.prediction, **common)
                    row(names["corrected"], e, side_bits=st.bits_total, reference_psnr=st.psnr_after["Y"])
                    codings.append(e)
                    extras[names["corrected"]] = search.prediction
                result.reference_mismatches += sum(not cd.references_match for cd in codings)
                result.qp_mismatches += sum(not cd.qps_match for cd in codings)
                if want_map and n == map_target and qp == map_qp:
                    for m in _usage_maps(past, future, target, extras, qp=qp, extra_qp=extra_qp, preset=preset):
                        result.maps.append(dict(m, past=p, future=f, target=n))
                done += 1
                if progress is not None:
                    progress(done, total, f"{clip} picture {n} QP {qp}")
    return result


def _usage_maps(past, future, target, extras: dict, *, qp: int, extra_qp: int, preset: str) -> list[dict]:
    """Per extra-reference configuration, which reference every block of the B target uses."""
    from synth.codec.bpicture import reference_usage

    out = []
    for config, pic in extras.items():
        u = reference_usage(past, future, target, extra=pic, qp=qp, extra_qp=extra_qp, preset=preset)
        out.append({"config": config, "qp": qp, "classes": u.classes, "shares": u.shares, "picture": target.y})
    return out


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
    """Per-clip (and gap or hierarchy) curves and BD figures, and the average BD-rate per configuration.

    Returns
    -------
    dict
        ``clips`` (one entry per measured clip and gap, and per clip and GOP size for a
        hierarchy: ``structure`` ``'gap'`` or ``'hierarchy'``), ``synthetic`` (the first maker's
        name), ``average`` (per configuration, the mean over every per-gap entry), ``gaps`` (per
        gap, as text, the same mean over that gap's entries) and ``hierarchy`` (per GOP size, as
        text, the mean over the hierarchy entries of the whole-GOP BD figures).
    """
    per = []
    for c in clips:
        entry = {
            "clip": c.clip,
            "structure": "hierarchy" if c.gop_size is not None else "gap",
            "gap": c.gap,
            "gop_size": c.gop_size,
            "target_picture": c.target_picture,
            "targets": len({(r["past"], r["target"]) for r in c.rows}),
            "curves": c.curves(),
            "bd": c.bd(),
            "synthesis_psnr_y": c.synthesis_psnr(),
            "offsets": c.offsets_summary(),
            "reference_mismatches": c.reference_mismatches,
            "qp_mismatches": c.qp_mismatches,
            "fields": c.fields,
            "layers": {k: {"curves": v, "bd": c.layer_bd().get(k, {})} for k, v in c.layer_curves().items()},
            "maps": [{k: v for k, v in m.items() if k not in ("classes", "picture")} for m in c.maps],
        }
        if c.gop_size is not None:
            entry["gop_curves"] = c.gop_curves()
        per.append(entry)
    flat = [p for p in per if p["structure"] == "gap"]
    tree = [p for p in per if p["structure"] == "hierarchy"]
    gaps = list(dict.fromkeys(p["gap"] for p in flat))
    sizes = list(dict.fromkeys(p["gop_size"] for p in tree))
    return {
        "clips": per,
        "synthetic": clips[0].synthetic if clips else None,
        "average": _average(flat),
        "gaps": {str(g): _average([p for p in flat if p["gap"] == g]) for g in gaps},
        "hierarchy": {str(n): _average([p for p in tree if p["gop_size"] == n]) for n in sizes},
    }
