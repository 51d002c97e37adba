"""Synthesis of the picture at time t from two references and the vectors coded between them.

Pipeline (equations in :mod:`synth.estimate`, projection in :mod:`synth.project`):

1. project every block of the fields onto the target time (landing spot, past and future
   displacements); measure each block's endpoint agreement on its footprint (luma);
2. per group of ``group_size`` x ``group_size`` luma samples, the K landed vectors nearest to the
   group's centre are the candidates of its pixels (`synth.candidates`);
3. per pixel: distance to each candidate's footprint, reliability, correlations, weights
   (``method``: 'lmmse', 'distance_weighted' or 'nearest');
4. per plane: each candidate, moved to the pixel, samples the past and the future reference; the pair
   mean is its observation (one side only where the other endpoint leaves the picture); the
   estimate is ``m + sum_i w_i (o_i - m)`` with ``m`` the mean of the pixel's observations;
5. chroma uses the same candidates (displacements divided by the subsampling factors) and the luma
   weights averaged over the luma samples each chroma sample covers.

Holes and failures: a pixel with no candidate within reach takes the co-located average of the two
references; a pixel whose candidates all have an endpoint agreement below
``disagreement_threshold`` takes its nearest candidate; both get confidence 0.

The picture is processed in bands of 64 luma rows aligned to the top of the picture; every pixel's
result depends only on full-picture inputs and on its own band's computation, so synthesising a
range of rows gives exactly (bit for bit) the rows of the whole picture.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from .candidates import CandidateSearch
from .errors import ParameterError
from .estimate import (
    distance_reliability,
    endpoint_agreement_stats,
    innovation_correlation,
    link_correlation,
    lmmse_weights_soa,
)
from .field import VectorField
from .observe import endpoint_patches, remap_plane
from .params import METHODS, SynthParams
from .picture import Picture
from .project import LandedVectors, project_fields, reference_times

__all__ = ["synthesise", "synthesise_with_maps", "SynthesisResult", "BAND_ROWS", "MAP_NAMES"]

#: Luma rows per processing band (a multiple of every group size and chroma factor).
BAND_ROWS = 64
#: Names of the per-pixel maps returned by `synthesise_with_maps`.
MAP_NAMES = ("candidates", "confidence", "past_weight")


@dataclass
class SynthesisResult:
    """A synthesised picture and its per-pixel maps.

    Attributes
    ----------
    picture : Picture
        The synthesised picture (only the requested rows when ``rows`` was given).
    maps : dict of str -> ndarray of float32, luma-sized
        'candidates': number of candidates of the pixel; 'confidence': share of the pixel's variance
        the estimator explains (0 at fallbacks); 'past_weight': share of the estimate taken from the
        past reference.
    rows : (int, int)
        The luma rows computed.
    landed : LandedVectors
        The projected vectors.
    params : SynthParams
    """

    picture: Picture
    maps: dict[str, np.ndarray]
    rows: tuple[int, int]
    landed: LandedVectors
    params: SynthParams
    info: dict = field(default_factory=dict)


def _as_fields(fields) -> list[VectorField]:
    if isinstance(fields, VectorField):
        return [fields]
    try:
        out = list(fields)
    except TypeError:
        raise ParameterError(f"fields must be a VectorField or a sequence of them, got {type(fields).__name__}") from None
    return out


def _check_inputs(past: Picture, future: Picture, fields: list[VectorField], t: float) -> None:
    for name, pic in (("past", past), ("future", future)):
        if not isinstance(pic, Picture):
            raise ParameterError(f"{name} must be a Picture, got {type(pic).__name__}")
    if not past.same_format(future):
        raise ParameterError(
            f"past and future pictures differ: {past.width}x{past.height} {past.chroma_format} {past.bit_depth}-bit "
            f"vs {future.width}x{future.height} {future.chroma_format} {future.bit_depth}-bit"
        )
    if not fields:
        raise ParameterError("at least one vector field is needed, got none")
    for i, f in enumerate(fields):
        if not isinstance(f, VectorField):
            raise ParameterError(f"fields[{i}] must be a VectorField, got {type(f).__name__}")
        if (f.width, f.height) != (past.width, past.height):
            raise ParameterError(
                f"fields[{i}] is for a {f.width}x{f.height} picture, but the references are {past.width}x{past.height}"
            )
    try:
        tf = float(t)
    except (TypeError, ValueError):
        raise ParameterError(f"t must be a number in (0, 1), got {t!r}") from None
    if not math.isfinite(tf) or not 0.0 < tf < 1.0:
        raise ParameterError(f"t must lie strictly between 0 and 1, got {t!r}")


def _both_directions(fields: list[VectorField]) -> bool:
    signs = {f.span > 0 for f in fields}
    return len(signs) == 2


class _Synthesiser:
    """Everything computed once per call (full-picture inputs), and the per-band computation."""

    def __init__(self, past: Picture, future: Picture, landed: LandedVectors, params: SynthParams, k: int):
        self.p = params
        self.k = k
        self.g = params.group_size
        self.H, self.W = past.height, past.width
        self.fx, self.fy = (1, 1) if past.chroma_format == "mono" else past.chroma_factors
        self.past = [pl.astype(np.float32) for pl in past.planes]
        self.future = [pl.astype(np.float32) for pl in future.planes]
        self.bit_depth = past.bit_depth
        self.landed = landed
        self.search = CandidateSearch(landed, height=self.H, width=self.W, k=k, group=self.g, reach=params.reach)
        self.rho = self._agreement()
        # per-vector columns gathered per band
        self._cols = {
            "cx": landed.cx,
            "cy": landed.cy,
            "hw": ((landed.bw.astype(np.float32) - 1) / 2).astype(np.float32),
            "hh": ((landed.bh.astype(np.float32) - 1) / 2).astype(np.float32),
            "dpx": landed.past_dx,
            "dpy": landed.past_dy,
            "dfx": landed.future_dx,
            "dfy": landed.future_dy,
            "rho": self.rho,
        }

    # -- per-vector endpoint agreement ----------------------------------------------------------
    def _agreement(self) -> np.ndarray:
        rho = np.zeros(len(self.landed), np.float32)
        scale = float(1 << (self.bit_depth - 8)) ** 2
        floor = self.p.agreement_floor * scale
        for index, a, b in endpoint_patches(
            self.past[0], self.future[0], self.landed, margin=self.p.agreement_margin, interpolation=self.p.interpolation
        ):
            rho[index] = endpoint_agreement_stats(a, b, floor=floor)
        return rho

    # -- one band -------------------------------------------------------------------------------
    def band(self, y0: int, y1: int):
        """Luma rows y0..y1 (y0 a multiple of BAND_ROWS); returns planes and maps of those rows."""
        g, K, p = self.g, self.k, self.p
        gy0, gy1 = y0 // g, -(-y1 // g)
        idx = self.search.for_group_rows(gy0, gy1)  # (Gr, Gx, K)
        Gr, Gx = idx.shape[:2]
        valid_g = idx >= 0
        safe = np.where(valid_g, idx, 0)
        cols = {}
        for name, col in self._cols.items():
            v = col[safe]
            if name in ("dpx", "dpy", "dfx", "dfy", "rho"):
                v = np.where(valid_g, v, np.float32(0))
            cols[name] = np.ascontiguousarray(np.moveaxis(v, -1, 0))  # (K, Gr, Gx)
        valid_k = np.ascontiguousarray(np.moveaxis(valid_g, -1, 0))

        def expand(q, fy=1, fx=1):
            """(..., Gr, Gx) group values -> (..., Gr*g/fy, Gx*g/fx) sample values."""
            sy, sx = g // fy, g // fx
            lead = q.shape[:-2]
            out = np.broadcast_to(q[..., :, None, :, None], lead + (Gr, sy, Gx, sx))
            return out.reshape(lead + (Gr * sy, Gx * sx))

        Pr, Pc = Gr * g, Gx * g
        X = np.arange(Pc, dtype=np.float32)[None, None, :]
        Y = (np.arange(Pr, dtype=np.float32) + np.float32(gy0 * g))[None, :, None]
        valid = expand(valid_k)
        count = valid.sum(axis=0).astype(np.float32)  # (Pr, Pc)

        # distances: to the landing centre and to the footprint
        ddx = X - expand(cols["cx"])
        ddy = Y - expand(cols["cy"])
        dist_centre = np.sqrt(ddx * ddx + ddy * ddy)
        big = np.float32(1e9)
        dist_centre = np.where(valid, dist_centre, big)

        nearest = np.argmin(dist_centre, axis=0)  # (Pr, Pc), lowest slot on ties
        fallback = None
        if p.method == "nearest":
            w = (np.arange(K)[:, None, None] == nearest[None]).astype(np.float32) * valid
            conf = np.zeros((Pr, Pc), np.float32)
            mean_mix = False
        elif p.method == "distance_weighted":
            w = np.where(valid, 1.0 / np.power(dist_centre + 1.0, np.float32(p.idw_power)), 0).astype(np.float32)
            sw = w.sum(axis=0)
            w = w / np.where(sw > 0, sw, 1)
            conf = np.zeros((Pr, Pc), np.float32)
            mean_mix = False
        else:
            ex = np.maximum(np.abs(ddx) - expand(cols["hw"]), 0)
            ey = np.maximum(np.abs(ddy) - expand(cols["hh"]), 0)
            dist_fp = np.sqrt(ex * ex + ey * ey)
            rel = distance_reliability(dist_fp, scale=p.reliability_scale)
            r = link_correlation(expand(cols["rho"])) * rel
            r = np.where(valid, np.minimum(r, np.float32(p.max_correlation)), 0).astype(np.float32)
            Cg = innovation_correlation(
                *(np.moveaxis(cols[n], 0, -1).reshape(-1, K) for n in ("dpx", "dpy", "dfx", "dfy")),
                np.moveaxis(valid_k, 0, -1).reshape(-1, K),
                spatial_correlation=p.spatial_correlation,
                nugget=p.innovation_nugget,
            )  # (Gr*Gx, K, K)
            Cg = np.moveaxis(Cg.reshape(Gr, Gx, K, K), (2, 3), (0, 1))  # (K, K, Gr, Gx)
            P = Pr * Pc
            w_flat, conf_flat = lmmse_weights_soa(
                r.reshape(K, P), lambda i, j: expand(Cg[i, j]).reshape(P), loading=p.loading
            )
            w = w_flat.reshape(K, Pr, Pc)
            conf = conf_flat.reshape(Pr, Pc)
            mean_mix = True
            if p.disagreement_threshold > 0:
                rho_max = np.where(valid, expand(cols["rho"]), 0).max(axis=0)
                fall = (rho_max < p.disagreement_threshold) & (count > 0)
                if fall.any():
                    fallback = (fall, (np.arange(K)[:, None, None] == nearest[None]).astype(np.float32))

        # coefficients c_k on the observations: estimate = sum_k c_k o_k
        if mean_mix:
            n = np.maximum(count, 1)
            c = w + valid * ((1.0 - w.sum(axis=0)) / n)[None]
            if fallback is not None:
                fall, onehot = fallback
                c = np.where(fall[None], onehot, c)
                conf = np.where(fall, 0, conf)
        else:
            c = w
        c = c.astype(np.float32)
        hole = count == 0
        conf = np.where(hole, 0, conf).astype(np.float32)

        planes_out = []
        past_weight = None
        for pi in range(len(self.past)):
            fy, fx = (1, 1) if pi == 0 else (self.fy, self.fx)
            if pi == 0:
                cp = c
            else:
                cp = c.reshape(K, Pr // fy, fy, Pc // fx, fx).mean(axis=(2, 4))
            est, pw = self._combine(pi, cp, cols, expand, fy, fx, gy0 * g // fy, want_side=(pi == 0))
            if pi == 0:
                past_weight = pw
            holes_p = hole if pi == 0 else hole.reshape(Pr // fy, fy, Pc // fx, fx)[:, 0, :, 0]
            if holes_p.any():
                ph, pwid = est.shape
                r0 = gy0 * g // fy
                pa = self._rows(self.past[pi], r0, ph, pwid)
                fu = self._rows(self.future[pi], r0, ph, pwid)
                est = np.where(holes_p, 0.5 * (pa + fu), est)
            planes_out.append(est)
        past_weight = np.where(hole, 0.5, past_weight).astype(np.float32)
        maps = {"candidates": count, "confidence": conf, "past_weight": past_weight}
        return planes_out, maps

    @staticmethod
    def _rows(plane, r0, nrows, ncols):
        """Rows r0..r0+nrows of a plane, edge-replicated to (nrows, ncols)."""
        h, w = plane.shape
        rr = np.clip(np.arange(r0, r0 + nrows), 0, h - 1)
        cc = np.clip(np.arange(ncols), 0, w - 1)
        return plane[rr][:, cc]

    def _combine(self, pi, c, cols, expand, fy, fx, row0, *, want_side):
        """sum_k c_k o_k on plane pi; returns the estimate and (luma) the past-side share."""
        K = self.k
        past, future = self.past[pi], self.future[pi]
        h, w = past.shape
        margin = np.float32(self.p.border_margin)
        Pr, Pc = c.shape[1:]
        X = np.arange(Pc, dtype=np.float32)[None, :]
        Y = (np.arange(Pr, dtype=np.float32) + np.float32(row0))[:, None]
        est = np.zeros((Pr, Pc), np.float32)
        side = np.zeros((Pr, Pc), np.float32) if want_side else None
        sx, sy = np.float32(1.0 / fx), np.float32(1.0 / fy)
        for k in range(K):
            ck = c[k]
            if not np.any(ck):
                continue
            dpx = expand(cols["dpx"][k], fy, fx) * sx
            dpy = expand(cols["dpy"][k], fy, fx) * sy
            dfx = expand(cols["dfx"][k], fy, fx) * sx
            dfy = expand(cols["dfy"][k], fy, fx) * sy
            mpx, mpy = X + dpx, Y + dpy
            mfx, mfy = X + dfx, Y + dfy
            a = remap_plane(past, mpx, mpy, interpolation=self.p.interpolation)
            b = remap_plane(future, mfx, mfy, interpolation=self.p.interpolation)
            lo, hx, hy = -margin, np.float32(w - 1) + margin, np.float32(h - 1) + margin
            out_p = (mpx < lo) | (mpx > hx) | (mpy < lo) | (mpy > hy)
            out_f = (mfx < lo) | (mfx > hx) | (mfy < lo) | (mfy > hy)
            only_f = out_p & ~out_f
            only_p = out_f & ~out_p
            o = np.where(only_f, b, np.where(only_p, a, np.float32(0.5) * (a + b)))
            est += ck * o
            if want_side:
                share = np.where(only_p, np.float32(1), np.where(only_f, np.float32(0), np.float32(0.5)))
                side += ck * share
        if want_side:
            total = c.sum(axis=0)
            side = np.where(np.abs(total) > 1e-6, side / np.where(np.abs(total) > 1e-6, total, 1), 0.5)
            side = np.clip(side, 0, 1).astype(np.float32)
        return est, side


def synthesise_with_maps(
    past: Picture,
    future: Picture,
    fields: VectorField | Sequence[VectorField],
    *,
    t: float,
    params: SynthParams | None = None,
    rows: tuple[int, int] | None = None,
    past_time: float | None = None,
    future_time: float | None = None,
    method: str | None = None,
) -> SynthesisResult:
    """Synthesise the picture at time ``t`` between two references, with per-pixel maps.

    Parameters
    ----------
    past, future : Picture
        The two references (same size, chroma format and bit depth).
    fields : VectorField or sequence of VectorField
        Vectors coded between the references, in either direction (or both).
    t : float
        Target time as a fraction in (0, 1) from past to future.
    params : SynthParams, optional
        Defaults: ``SynthParams()`` (the calibrated values).
    rows : (int, int), optional
        Compute only luma rows ``y0 .. y1 - 1`` (chroma rows accordingly); ``y0`` must be a
        multiple of the vertical chroma factor. The rows are bit-identical to the whole picture's.
    past_time, future_time : float, optional
        Display times of the references; default the earliest and latest time the fields refer to.
    method : {'lmmse', 'distance_weighted', 'nearest'}, optional
        Overrides ``params.method``.

    Returns
    -------
    SynthesisResult

    Raises
    ------
    ParameterError
        On mismatched pictures or fields, ``t`` outside (0, 1), bad rows or bad parameters.

    Notes
    -----
    Model and equations: :mod:`synth.estimate` (LMMSE / Wiener estimation, S. M. Kay, Fundamentals
    of Statistical Signal Processing: Estimation Theory, 1993, ch. 12); projection: :mod:`synth.project`.
    """
    fields = _as_fields(fields)
    _check_inputs(past, future, fields, t)
    if params is None:
        params = SynthParams()
    elif not isinstance(params, SynthParams):
        raise ParameterError(f"params must be a SynthParams, got {type(params).__name__}")
    if method is not None:
        if method not in METHODS:
            raise ParameterError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
        params = params.with_changes(method=method)
    dpt, dft = reference_times(fields)
    pt = dpt if past_time is None else past_time
    ft = dft if future_time is None else future_time
    landed = project_fields(fields, past_time=pt, future_time=ft, t=float(t))
    H, W = past.height, past.width
    fx, fy = (1, 1) if past.chroma_format == "mono" else past.chroma_factors
    if rows is None:
        y0, y1 = 0, H
    else:
        try:
            y0, y1 = (int(v) for v in rows)
        except (TypeError, ValueError):
            raise ParameterError(f"rows must be a pair of integers (y0, y1), got {rows!r}") from None
        if not 0 <= y0 < y1 <= H:
            raise ParameterError(f"rows must satisfy 0 <= y0 < y1 <= {H}, got {rows!r}")
        if y0 % fy or (y1 % fy and y1 != H):
            raise ParameterError(f"rows must start and end on multiples of the chroma factor {fy}, got {rows!r}")
    k = params.candidates_both_directions if _both_directions(fields) else params.candidates
    eng = _Synthesiser(past, future, landed, params, k)
    n_planes = len(past.planes)
    out = []
    for pi in range(n_planes):
        if pi == 0:
            out.append(np.zeros((y1 - y0, W), np.float32))
        else:
            ch, cw = past.planes[pi].shape
            out.append(np.zeros((-(-y1 // fy) - y0 // fy, cw), np.float32))
    maps = {name: np.zeros((y1 - y0, W), np.float32) for name in MAP_NAMES}
    for b0 in range((y0 // BAND_ROWS) * BAND_ROWS, y1, BAND_ROWS):
        b1 = min(H, b0 + BAND_ROWS)
        planes, bmaps = eng.band(b0, b1)
        # luma rows of this band inside the requested range
        s0, s1 = max(b0, y0), min(b1, y1)
        out[0][s0 - y0 : s1 - y0] = planes[0][s0 - b0 : s1 - b0, :W]
        for name in MAP_NAMES:
            maps[name][s0 - y0 : s1 - y0] = bmaps[name][s0 - b0 : s1 - b0, :W]
        for pi in range(1, n_planes):
            ch, cw = past.planes[pi].shape
            c0, c1 = s0 // fy, min(ch, -(-s1 // fy))
            cb0 = b0 // fy
            out[pi][c0 - y0 // fy : c1 - y0 // fy] = planes[pi][c0 - cb0 : c1 - cb0, :cw]
    picture = Picture.from_float(out, chroma_format=past.chroma_format, bit_depth=past.bit_depth)
    return SynthesisResult(picture=picture, maps=maps, rows=(y0, y1), landed=landed, params=params, info={"k": k})


def synthesise(
    past: Picture,
    future: Picture,
    fields: VectorField | Sequence[VectorField],
    *,
    t: float,
    params: SynthParams | None = None,
    rows: tuple[int, int] | None = None,
    past_time: float | None = None,
    future_time: float | None = None,
    method: str | None = None,
) -> Picture:
    """Synthesise the picture at time ``t``; see `synthesise_with_maps` (same parameters)."""
    return synthesise_with_maps(
        past, future, fields, t=t, params=params, rows=rows, past_time=past_time, future_time=future_time, method=method
    ).picture
