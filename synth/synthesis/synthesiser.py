"""Synthesis of the picture at time t from two references and the vectors coded between them.

Pipeline (equations in :mod:`synth.synthesis.lmmse`, projection in :mod:`synth.synthesis.project`):

0. with ``motion_cell`` (default 4), re-cut every field into small cells whose vectors vary
   smoothly between the blocks' (`synth.synthesis.smooth_motion`): zoom, rotation and deformation
   are not translations, and an encoder values a reference that follows them;
1. project every block of the fields onto the target time (landing spot, past and future
   displacements); measure each block's endpoint agreement on its footprint (luma);
2. per group of ``group_size`` x ``group_size`` luma samples, the K landed vectors nearest to the
   group's centre are the candidates of its pixels (`synth.synthesis.candidates`);
3. per pixel: distance to each candidate's footprint, reliability, correlations, weights
   (``method``: 'lmmse', 'distance_weighted' or 'nearest');
4. per plane: each candidate, moved to the pixel, samples the past and the future reference;
   ``(1 - t) past + t future`` is its observation (one side only where the other endpoint leaves
   the picture); the estimate is ``m + sum_i w_i (o_i - m)`` with ``m`` the mean of the pixel's
   observations;
5. chroma uses the same candidates (displacements divided by the subsampling factors) and the luma
   weights averaged over the luma samples each chroma sample covers.

Holes and failures: a pixel with no candidate within reach takes the co-located average of the two
references; a pixel whose candidates all have an endpoint agreement below
``disagreement_threshold`` takes its nearest candidate; both get confidence 0.

Maps (`synthesise_with_maps`): besides the candidate count, the confidence ``r^T w`` and the share of
the past reference, the predicted error of every pixel (:mod:`synth.synthesis.reliability`, "Predicted
error"): the estimator's posterior variance ``s^2 (1 - r^T R^{-1} r)``, ``s^2`` the local variance of
the two references around the pixel, the endpoint mismatch
``sum_k |c_k| (P_k - F_k)^2 / sum_k |c_k|`` of its candidates and the co-located difference of the
two references, combined with calibrated coefficients into a predicted RMS error in 8-bit code
values. Computing the maps never changes the picture.

The picture is processed in bands of 64 luma rows aligned to the top of the picture; every pixel's
result depends only on full-picture inputs and on its own band's computation, so synthesising a
range of rows gives exactly (bit for bit) the rows of the whole picture.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture
from synth.synthesis.candidates import CandidateSearch
from synth.synthesis.flow_guard import guard_fields
from synth.synthesis.lmmse import (
    distance_reliability,
    endpoint_agreement_stats,
    innovation_correlation,
    link_correlation,
    lmmse_weights_structured,
    posterior_variance,
)
from synth.synthesis.params import METHODS, SynthParams
from synth.synthesis.project import LandedVectors, project_fields, reference_times
from synth.synthesis.refine_cells import refine_fields
from synth.synthesis.reliability import LOCAL_VARIANCE_WINDOW, predicted_rms_error
from synth.synthesis.sampling import PlaneSampler, endpoint_patches
from synth.synthesis.smooth_motion import smooth_fields
from synth.timebase import check_t

__all__ = ["synthesise", "synthesise_with_maps", "SynthesisResult", "BAND_ROWS", "MAP_NAMES"]

#: Luma rows per processing band (a multiple of every group size and chroma factor).
BAND_ROWS = 64
#: Names of the per-pixel maps returned by `synthesise_with_maps`.
MAP_NAMES = ("candidates", "confidence", "past_weight", "posterior_variance", "endpoint_mismatch", "predicted_error")
#: Chunks of vectors the endpoint agreement is computed in (in parallel; results do not depend on it).
_AGREEMENT_CHUNKS = 4


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
        past reference; 'posterior_variance': the estimator's posterior (error) variance, 8-bit code
        values squared; 'endpoint_mismatch': weighted mean squared difference of the candidates' past
        and future samples, 8-bit code values squared; 'predicted_error': the calibrated predicted RMS
        error, 8-bit code values (:func:`synth.synthesis.reliability.predicted_rms_error`).
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
        raise ParameterError(
            f"fields must be a VectorField or a sequence of them, got {type(fields).__name__}"
        ) from None
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
    check_t(t)


def _check_reach(landed: LandedVectors, width: int, height: int) -> None:
    """Every endpoint must lie within one picture size of the picture (vectors out of range are bad
    input, not motion)."""
    for side, dx, dy in (("past", landed.past_dx, landed.past_dy), ("future", landed.future_dx, landed.future_dy)):
        x = landed.cx + dx
        y = landed.cy + dy
        bad = (x < -width) | (x > 2 * width) | (y < -height) | (y > 2 * height) | ~np.isfinite(x) | ~np.isfinite(y)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ParameterError(
                f"fields[{landed.field[i]}] block {landed.block[i]}: its {side} endpoint ({x[i]:.1f}, {y[i]:.1f}) lies "
                f"more than a picture size outside the {width}x{height} picture (vector out of range)"
            )


def _both_directions(fields: list[VectorField]) -> bool:
    signs = {f.span > 0 for f in fields}
    return len(signs) == 2


class _InlineExecutor:
    """The executor interface, running everything in the calling thread (workers=1)."""

    class _Done:
        def __init__(self, value):
            self._value = value

        def result(self):
            return self._value

    def submit(self, fn, *args):
        return self._Done(fn(*args))

    def map(self, fn, items):
        return [fn(x) for x in items]

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def _resample_axis(a: np.ndarray, axis: int, cell: int, sample: int) -> np.ndarray:
    """Cell-resolution values -> plane-resolution values along one axis (sizes in luma samples):
    repeat when the cell is larger than the plane's sample, average when smaller."""
    if cell == sample:
        return a
    if cell > sample:
        return np.repeat(a, cell // sample, axis=axis)
    f = sample // cell
    sl = [slice(None)] * a.ndim
    sl[axis] = slice(0, None, f)
    out = a[tuple(sl)].copy()
    for i in range(1, f):
        sl[axis] = slice(i, None, f)
        out += a[tuple(sl)]
    out *= np.float32(1.0 / f)
    return out


def _local_variance(plane: np.ndarray, *, size: int, unit: float) -> np.ndarray:
    """Variance of the samples in the ``size`` x ``size`` window around every sample (replicated
    border), in 8-bit units squared (``unit`` = 1 / 2 ** (bit_depth - 8)); float32."""
    f = plane.astype(np.float32) * np.float32(unit)
    m = cv2.boxFilter(f, cv2.CV_32F, (size, size), borderType=cv2.BORDER_REPLICATE)
    m2 = cv2.boxFilter(f * f, cv2.CV_32F, (size, size), borderType=cv2.BORDER_REPLICATE)
    return np.maximum(m2 - m * m, np.float32(0))


class _Synthesiser:
    """Everything computed once per call (full-picture inputs), and the per-band computation."""

    def __init__(
        self,
        past: Picture,
        future: Picture,
        landed: LandedVectors,
        params: SynthParams,
        k: int,
        group_rows,
        pool,
        learned=None,
        want_maps: bool = True,
    ):
        self.p = params
        self.want_maps = want_maps  # per-pixel maps computed with the planes (off for the picture only)
        self.learned = learned  # synth.synthesis.reliability.LearnedReliability or None
        self.k = k
        self.g = params.group_size
        self.c = params.weight_cell
        self.H, self.W = past.height, past.width
        self.fx, self.fy = (1, 1) if past.chroma_format == "mono" else past.chroma_factors
        self.bit_depth = past.bit_depth
        self.landed = landed
        # d_future = kappa * d_past for every vector (see synth.synthesis.project)
        self.kappa = (landed.future_time - landed.target_time) / (landed.past_time - landed.target_time)
        search = CandidateSearch(landed, height=self.H, width=self.W, k=k, group=self.g, reach=params.reach)
        self.g_row0, g_row1 = group_rows
        query = pool.submit(search.for_group_rows, self.g_row0, g_row1)

        def sampler(item):
            index, plane = item
            return PlaneSampler(plane, interpolation=params.interpolation, chroma=index > 0)

        pairs = [(i, pl) for i, pair in enumerate(zip(past.planes, future.planes)) for pl in pair]
        made = [pool.submit(sampler, item) for item in pairs]
        # the endpoint agreement needs the luma samplers only: it starts while chroma is prepared
        rho = self._agreement(made[0].result(), made[1].result(), pool)
        flat = [m.result() for m in made]
        self.samplers = [(flat[2 * i], flat[2 * i + 1]) for i in range(len(flat) // 2)]
        # local variance of each luma reference (8-bit units squared), for the posterior variance map
        self.unit = 1.0 / (1 << (past.bit_depth - 8))
        self.local_variance = self.temporal_difference = None
        if want_maps:
            # full-picture terms of the predicted error, padded to whole groups (as the bands are)
            pad = ((0, -self.H % self.g), (0, -self.W % self.g))
            s2 = [_local_variance(pic.y, size=LOCAL_VARIANCE_WINDOW, unit=self.unit) for pic in (past, future)]
            self.local_variance = np.pad(np.float32(0.5) * (s2[0] + s2[1]), pad, mode="edge")
            z = (past.y.astype(np.float32) - future.y.astype(np.float32)) * np.float32(self.unit)
            self.temporal_difference = np.pad(z * z, pad, mode="edge")
        self.idx = query.result()  # (rows, cols, K)
        self._cols = {
            "cx": landed.cx,
            "cy": landed.cy,
            "hw": ((landed.bw.astype(np.float32) - 1) / 2).astype(np.float32),
            "hh": ((landed.bh.astype(np.float32) - 1) / 2).astype(np.float32),
            "dpx": landed.past_dx,
            "dpy": landed.past_dy,
            "dfx": landed.future_dx,
            "dfy": landed.future_dy,
            "srho": link_correlation(rho).astype(np.float32),
        }
        if len(landed) == 0:  # no vector at all (e.g. all blocks intra): one dummy entry, never valid
            self._cols = {name: np.zeros(1, np.float32) for name in self._cols}

    # -- per-vector endpoint agreement ----------------------------------------------------------
    def _agreement(self, sp: PlaneSampler, sf: PlaneSampler, pool) -> np.ndarray:
        """Endpoint agreement of every landed vector, in chunks of vectors run on the pool (each
        vector's value depends on its own patches only)."""
        n = len(self.landed)
        rho = np.zeros(n, np.float32)
        scale = float(1 << (self.bit_depth - 8)) ** 2
        floor = self.p.agreement_floor * scale

        def chunk(sel):
            part = self.landed.take(sel)
            for index, a, b in endpoint_patches(sp, sf, part, margin=self.p.agreement_margin):
                rho[sel[index]] = endpoint_agreement_stats(a, b, floor=floor)

        step = max(1, -(-n // _AGREEMENT_CHUNKS))
        done = [pool.submit(chunk, np.arange(i, min(n, i + step))) for i in range(0, n, step)]
        for d in done:
            d.result()
        return rho

    # -- one band -------------------------------------------------------------------------------
    def band_samples(self, y0: int, y1: int):
        """`band`, with the planes rounded half up and clipped to integer samples (as
        `Picture.from_float`)."""
        planes, maps = self.band(y0, y1)
        top = np.float32((1 << self.bit_depth) - 1)
        dtype = np.uint8 if self.bit_depth <= 8 else np.uint16
        out = []
        for p in planes:
            if not np.all(np.isfinite(p)):
                raise ParameterError("the synthesis produced non-finite samples (please report this)")
            # floor(p + 1/2) clipped to [0, top]: clipping before the floor gives the same integers
            # (the bounds are integers), and the cast truncates, which is the floor on [0, top]
            p += np.float32(0.5)
            np.clip(p, np.float32(0), top, out=p)
            out.append(p.astype(dtype))
        return out, maps

    def band(self, y0: int, y1: int):
        """Luma rows y0..y1 (y0 a multiple of BAND_ROWS); returns planes and maps of those rows
        (padded to whole groups)."""
        g, c, K, p = self.g, self.c, self.k, self.p
        gy0, gy1 = y0 // g, -(-y1 // g)
        idx = self.idx[gy0 - self.g_row0 : gy1 - self.g_row0]  # (Gr, Gx, K)
        Gr, Gx = idx.shape[:2]
        G = Gr * Gx
        idx = np.ascontiguousarray(idx.reshape(G, K).T)  # (K, G)
        valid = idx >= 0
        safe = np.where(valid, idx, 0)
        zero = np.float32(0)
        col = {}
        for name, values in self._cols.items():
            v = values[safe]
            if name in ("dpx", "dpy", "dfx", "dfy", "srho"):
                v = np.where(valid, v, zero)
            col[name] = v.astype(np.float32, copy=False)
        count = valid.sum(axis=0)  # (G,)
        # group origins and cell centres
        gxo = np.tile(np.arange(Gx, dtype=np.float32) * g, Gr)
        gyo = np.repeat(np.arange(gy0, gy1, dtype=np.float32) * g, Gx)
        n = g // c
        off = np.arange(n, dtype=np.float32) * c + np.float32((c - 1) / 2)
        ocy, ocx = np.meshgrid(off, off, indexing="ij")
        Xc = gxo[None, :] + ocx.reshape(-1, 1)  # (M, G)
        Yc = gyo[None, :] + ocy.reshape(-1, 1)
        ddx = Xc[None] - col["cx"][:, None, :]  # (K, M, G)
        ddy = Yc[None] - col["cy"][:, None, :]
        vmask = valid[:, None, :]
        conf = None
        if p.method in ("nearest", "distance_weighted") or p.disagreement_threshold > 0:
            dc = np.sqrt(ddx * ddx + ddy * ddy)
            dc = np.where(vmask, dc, np.float32(np.inf))
        if p.method == "nearest":
            coef = (np.arange(K)[:, None, None] == np.argmin(dc, axis=0)[None]) & vmask
            coef = coef.astype(np.float32, copy=False)
        elif p.method == "distance_weighted":
            w = np.where(vmask, np.float32(1) / np.power(dc + np.float32(1), np.float32(p.idw_power)), zero)
            sw = w.sum(axis=0)
            coef = (w / np.where(sw > 0, sw, np.float32(1))[None]).astype(np.float32)
        elif self.learned is not None and p.learned_share >= 1:  # learned only: weights after the border rule
            ex = np.maximum(np.abs(ddx) - col["hw"][:, None, :], zero)
            ey = np.maximum(np.abs(ddy) - col["hh"][:, None, :], zero)
            dist = np.sqrt(ex * ex + ey * ey)
            coef = np.zeros((K,) + Xc.shape, np.float32)
        else:
            ex = np.maximum(np.abs(ddx) - col["hw"][:, None, :], zero)
            ey = np.maximum(np.abs(ddy) - col["hh"][:, None, :], zero)
            dist = np.sqrt(ex * ex + ey * ey)
            rel = distance_reliability(dist, scale=p.reliability_scale)
            r = np.minimum(col["srho"][:, None, :] * rel, np.float32(p.max_correlation))
            r = np.where(vmask, r, zero).astype(np.float32, copy=False)
            C = innovation_correlation(
                col["dpx"],
                col["dpy"],
                col["dfx"],
                col["dfy"],
                valid,
                spatial_correlation=p.spatial_correlation,
                nugget=p.innovation_nugget,
            )  # (K, K, G)
            w, conf = lmmse_weights_structured(r, C, loading=p.loading)
            nv = np.maximum(count, 1).astype(np.float32)
            coef = w + vmask * ((np.float32(1) - w.sum(axis=0)) / nv[None, :])[None]
            if p.disagreement_threshold > 0:
                srho_max = np.where(valid, col["srho"], zero).max(axis=0)  # (G,)
                fall = srho_max < np.float32(np.sqrt(p.disagreement_threshold))
                if fall.any():
                    onehot = ((np.arange(K)[:, None, None] == np.argmin(dc, axis=0)[None]) & vmask).astype(np.float32)
                    coef = np.where(fall[None, None, :], onehot, coef)
                    conf = np.where(fall[None, :], zero, conf)
            coef = coef.astype(np.float32, copy=False)
        if conf is None:
            conf = np.zeros(coef.shape[1:], np.float32)
        # which endpoints are usable: the weight cell's centre moved by the displacement must stay
        # within border_margin of the picture, else the observation takes the other side only
        m = np.float32(p.border_margin)
        hi_x, hi_y = np.float32(self.W - 1) + m, np.float32(self.H - 1) + m

        def outside(dx, dy):
            x = Xc[None] + dx[:, None, :]
            y = Yc[None] + dy[:, None, :]
            return (x < -m) | (x > hi_x) | (y < -m) | (y > hi_y)

        op, of = outside(col["dpx"], col["dpy"]), outside(col["dfx"], col["dfy"])
        # an observation weights its two samples by temporal proximity, (1 - t) past + t future
        # (measured: +0.28 dB on the training clips at t = 0.25, t = 0.5 unchanged)
        near = np.float32(1.0 - self.landed.t)
        share = np.where(op & ~of, zero, np.where(of & ~op, np.float32(1), near))  # (K, M, G)
        hole = count == 0
        if hole.any():  # co-located average through slot 0 (zero displacement)
            coef[0][:, hole] = 1.0
            share[0][:, hole] = near
            if conf is not None:
                conf[:, hole] = 0
        alpha = coef * share
        beta = coef - alpha
        model_conf = conf  # the correlation model's r^T R^{-1} r (before any learned mixing)
        learned_var, lam = None, np.float32(0)
        if self.learned is not None and p.method == "lmmse":
            # learned side weights, mixed with the correlation model's by learned_share
            agreement = np.where(valid, col["srho"] * col["srho"], zero)
            la, lb, lconf, learned_var = self.learned.weights(
                self.samplers[0], {**col, "agreement": agreement}, safe, valid, share, Xc, Yc, dist
            )
            if hole.any():
                la[0][:, hole] = near
                lb[0][:, hole] = np.float32(1) - near
                lconf[:, hole] = 0
                learned_var[:, hole] = np.nan  # no learned variance: the prior's below
            lam = np.float32(p.learned_share)
            if lam >= 1:
                alpha, beta, conf = la, lb, lconf
            else:
                alpha = lam * la + (np.float32(1) - lam) * alpha
                beta = lam * lb + (np.float32(1) - lam) * beta
                conf = lam * lconf + (np.float32(1) - lam) * conf
        act_a = np.any(alpha != 0, axis=1)  # (K, G): slot used on the past side by the group
        act_b = np.any(beta != 0, axis=1)

        def cells_to_plane(a):
            """(..., M, G) cell values -> (..., Gr*n, Gx*n) cell planes."""
            lead = a.shape[:-2]
            a = a.reshape(lead + (n, n, Gr, Gx))
            a = np.moveaxis(a, (-4, -3), (-3, -1))  # (..., Gr, n_y, Gx, n_x)
            return np.ascontiguousarray(a).reshape(lead + (Gr * n, Gx * n))

        alpha_cells = cells_to_plane(alpha)
        beta_cells = cells_to_plane(beta)
        planes = []
        terms = {} if self.want_maps else None  # luma error terms, filled by _combine
        for pi in range(len(self.samplers)):
            fy, fx = (1, 1) if pi == 0 else (self.fy, self.fx)
            A = _resample_axis(_resample_axis(alpha_cells, 1, c, fy), 2, c, fx)
            B = _resample_axis(_resample_axis(beta_cells, 1, c, fy), 2, c, fx)
            planes.append(
                self._combine(
                    pi, A, B, act_a, act_b, col, Gr, Gx, gy0 * g // fy, fy, fx, terms=terms if pi == 0 else None
                )
            )
        if not self.want_maps:  # synthesise(): the picture only
            return planes, {}
        total = alpha_cells.sum(axis=0) + beta_cells.sum(axis=0)
        pw = np.where(total > 1e-6, alpha_cells.sum(axis=0) / np.where(total > 1e-6, total, 1), np.float32(0.5))
        up = lambda a: _resample_axis(_resample_axis(a, 0, c, 1), 1, c, 1)  # noqa: E731
        maps = {
            "candidates": np.repeat(np.repeat(count.reshape(Gr, Gx).astype(np.float32), g, 0), g, 1),
            "confidence": up(cells_to_plane(conf)),
            "past_weight": up(np.clip(pw, 0, 1).astype(np.float32)),
        }
        # posterior variance s^2 (1 - r^T R^{-1} r): s^2 the references' local variance at the pixel
        # (the prior variance of the pixel around its local mean), 1 - r^T R^{-1} r the normalised
        # error of the correlation model (1 where it gives no weights: fallbacks, holes, the controls)
        rows = slice(gy0 * g, gy0 * g + Gr * g)
        s2 = self.local_variance[rows, : Gx * g]
        if model_conf is None or (self.learned is not None and p.learned_share >= 1):
            model_conf = np.zeros(conf.shape, np.float32)
        posterior = posterior_variance(up(cells_to_plane(model_conf)), s2)
        if learned_var is not None:  # the learned model's own error variance, mixed like the weights
            lv = up(cells_to_plane(learned_var.astype(np.float32)))
            lv = np.where(np.isfinite(lv), lv, s2)
            posterior = lam * lv + (np.float32(1) - lam) * posterior
        maps["posterior_variance"] = posterior.astype(np.float32)
        maps["endpoint_mismatch"] = terms["mismatch"]
        maps["predicted_error"] = predicted_rms_error(
            posterior, terms["mismatch"], self.temporal_difference[rows, : Gx * g]
        )
        return planes, maps

    def _combine(self, pi, A, B, act_a, act_b, col, Gr, Gx, row0, fy, fx, terms=None):
        """sum_k A_k past(p + d_past_k) + B_k future(p + d_future_k) on plane pi.

        A, B: (K, Pr, Pc) coefficients; act_a, act_b: (K, G) whether a group uses the slot.
        With ``terms`` (a dict, luma only) the endpoint mismatch of the maps is put into it:
        'mismatch', the mean of (P_k - F_k)^2 weighted by ``|c_k| = |A_k| + |B_k|``, 8-bit units
        squared. It is computed beside the estimate and never changes it.
        """
        g = self.g
        sp, sf = self.samplers[pi]
        Pr, Pc = A.shape[1:]
        ry, rx = g // fy, g // fx
        scale = np.float32(sp.scale)
        base_x = np.broadcast_to(np.arange(Pc, dtype=np.float32) * scale, (Gr, ry, Pc))
        base_y = np.broadcast_to(
            ((np.arange(Pr, dtype=np.float32) + np.float32(row0)) * scale).reshape(Gr, ry, 1), (Gr, ry, Pc)
        )
        sx, sy = np.float32(scale / fx), np.float32(scale / fy)
        est = np.zeros((Pr, Pc), np.float32)
        kappa = np.float32(self.kappa)  # d_future = kappa * d_past for every vector
        if terms is not None:
            weight_sum, mismatch = np.zeros((Pr, Pc), np.float32), np.zeros((Pr, Pc), np.float32)
        for k in range(self.k):
            use_a, use_b = act_a[k].any(), act_b[k].any()
            if not (use_a or use_b):
                continue
            # group displacement repeated over the group's columns (broadcast over its rows below)
            rx_k = np.repeat((col["dpx"][k] * sx).reshape(Gr, Gx), rx, axis=1)[:, None, :]
            ry_k = np.repeat((col["dpy"][k] * sy).reshape(Gr, Gx), rx, axis=1)[:, None, :]
            obs_a = obs_b = None
            if use_a:
                obs_a = sp.sample_xy((base_x + rx_k).reshape(Pr, Pc), (base_y + ry_k).reshape(Pr, Pc))
                cv2.accumulateProduct(obs_a, A[k], est)
            if use_b:
                fx_k, fy_k = rx_k * kappa, ry_k * kappa
                obs_b = sf.sample_xy((base_x + fx_k).reshape(Pr, Pc), (base_y + fy_k).reshape(Pr, Pc))
                cv2.accumulateProduct(obs_b, B[k], est)
            if terms is not None:
                self._mismatch_term(k, A, B, obs_a, obs_b, base_x, base_y, rx_k, ry_k, weight_sum, mismatch)
        if terms is not None:
            # in 8-bit units squared
            unit2 = np.float32(self.unit * self.unit)
            terms["mismatch"] = mismatch * unit2 / np.where(weight_sum > 0, weight_sum, np.float32(1))
        return est

    def _mismatch_term(self, k, A, B, obs_a, obs_b, base_x, base_y, rx_k, ry_k, weight_sum, mismatch):
        """Add candidate k's share of the endpoint mismatch (see `_combine`) to the accumulators."""
        sp, sf = self.samplers[0]
        Pr, Pc = A.shape[1:]
        kappa = np.float32(self.kappa)
        if obs_a is None:  # the side the estimate does not use still tells whether the two agree
            obs_a = sp.sample_xy((base_x + rx_k).reshape(Pr, Pc), (base_y + ry_k).reshape(Pr, Pc))
        if obs_b is None:
            obs_b = sf.sample_xy((base_x + rx_k * kappa).reshape(Pr, Pc), (base_y + ry_k * kappa).reshape(Pr, Pc))
        cabs = np.abs(A[k])
        cabs += np.abs(B[k])
        weight_sum += cabs
        d = obs_a - obs_b
        d *= d
        cv2.accumulateProduct(d, cabs, mismatch)


def _learned_reliability(params: SynthParams, fields, landed: LandedVectors, past: Picture):
    """The learned reliability of `synth.synthesis.reliability` when the parameters ask for it and apply."""
    if params.method != "lmmse" or params.reliability != "learned" or len(landed) == 0:
        return None
    from synth.synthesis.reliability import LearnedReliability

    coefficients = params.effective_coefficients()
    if not coefficients or not LearnedReliability.applicable(fields, landed):
        return None
    return LearnedReliability(
        coefficients, fields, landed, height=past.height, width=past.width, bit_depth=past.bit_depth
    )


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
    workers: int | None = None,
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
    workers : int, optional
        Threads processing bands in parallel (default: the CPU count, at most 4). Results do not
        depend on it.

    Returns
    -------
    SynthesisResult

    Raises
    ------
    ParameterError
        On mismatched pictures or fields, ``t`` outside (0, 1), bad rows or bad parameters.

    Notes
    -----
    Model and equations: :mod:`synth.synthesis.lmmse` (LMMSE / Wiener estimation, S. M. Kay, Fundamentals
    of Statistical Signal Processing: Estimation Theory, 1993, ch. 12); projection: :mod:`synth.synthesis.project`.
    """
    return _synthesise(
        past,
        future,
        fields,
        t=t,
        params=params,
        rows=rows,
        past_time=past_time,
        future_time=future_time,
        method=method,
        workers=workers,
        want_maps=True,
    )


def _synthesise(past, future, fields, *, t, params, rows, past_time, future_time, method, workers, want_maps):
    """The body of `synthesise_with_maps`; without ``want_maps`` the maps are not computed (empty)."""
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
    # vectors out of range are refused as given, before the cells, their refinement and the flow
    # guard can change them
    landed = project_fields(fields, past_time=pt, future_time=ft, t=float(t))
    _check_reach(landed, past.width, past.height)
    if params.motion_cell:
        fields = smooth_fields(fields, cell=params.motion_cell, smoothing=params.motion_smoothing)
        if params.cell_refinement:
            fields = refine_fields(
                fields,
                {float(pt): past, float(ft): future},
                reach=params.cell_refinement,
                window=params.refinement_window,
                penalty=params.refinement_penalty,
                median_window=params.refinement_median,
                median_weight=params.refinement_median_weight,
            )
        if params.flow_guard:
            fields = guard_fields(fields, {float(pt): past, float(ft): future}, distance=params.flow_guard)
        landed = project_fields(fields, past_time=pt, future_time=ft, t=float(t))
    H, W = past.height, past.width
    fx, fy = (1, 1) if past.chroma_format == "mono" else past.chroma_factors
    params.check_chroma(past.chroma_format, fx, fy)  # a group must hold whole chroma samples
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
    g = params.group_size
    b_first = (y0 // BAND_ROWS) * BAND_ROWS
    b_last = min(H, -(-y1 // BAND_ROWS) * BAND_ROWS)
    if workers is None:
        workers = min(4, os.cpu_count() or 1)
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise ParameterError(f"workers must be a positive integer, got {workers!r}")
    # With our own band threads, OpenCV's internal threads only add synchronisation on the small
    # per-band calls (measured: about 20 % more CPU time at 1920x1080); OpenCV's results do not
    # depend on its thread count, and its setting is restored afterwards.
    cv_threads = cv2.getNumThreads() if workers > 1 else None
    try:
        if cv_threads is not None:
            cv2.setNumThreads(1)
        with ThreadPoolExecutor(max_workers=workers) if workers > 1 else _InlineExecutor() as pool:
            learned = _learned_reliability(params, fields, landed, past)
            eng = _Synthesiser(
                past, future, landed, params, k, (b_first // g, -(-b_last // g)), pool, learned, want_maps=want_maps
            )
            starts = list(range((y0 // BAND_ROWS) * BAND_ROWS, y1, BAND_ROWS))
            results = pool.map(lambda b0: (b0, eng.band_samples(b0, min(H, b0 + BAND_ROWS))), starts)
            results = list(results)
    finally:
        if cv_threads is not None:
            cv2.setNumThreads(cv_threads)
    n_planes = len(past.planes)
    dtype = past.y.dtype
    out = []
    for pi in range(n_planes):
        if pi == 0:
            out.append(np.zeros((y1 - y0, W), dtype))
        else:
            ch, cw = past.planes[pi].shape
            out.append(np.zeros((-(-y1 // fy) - y0 // fy, cw), dtype))
    maps = {name: np.zeros((y1 - y0, W), np.float32) for name in MAP_NAMES} if want_maps else {}
    for b0, (planes, bmaps) in results:
        b1 = min(H, b0 + BAND_ROWS)
        # luma rows of this band inside the requested range
        s0, s1 = max(b0, y0), min(b1, y1)
        out[0][s0 - y0 : s1 - y0] = planes[0][s0 - b0 : s1 - b0, :W]
        for name in maps:
            maps[name][s0 - y0 : s1 - y0] = bmaps[name][s0 - b0 : s1 - b0, :W]
        for pi in range(1, n_planes):
            ch, cw = past.planes[pi].shape
            c0, c1 = s0 // fy, min(ch, -(-s1 // fy))
            cb0 = b0 // fy
            out[pi][c0 - y0 // fy : c1 - y0 // fy] = planes[pi][c0 - cb0 : c1 - cb0, :cw]
    if past.chroma_format == "mono":
        picture = Picture(out[0], None, None, "mono", past.bit_depth)
    else:
        picture = Picture(out[0], out[1], out[2], past.chroma_format, past.bit_depth)
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
    workers: int | None = None,
) -> Picture:
    """Synthesise the picture at time ``t``; see `synthesise_with_maps` (same parameters)."""
    return _synthesise(
        past,
        future,
        fields,
        t=t,
        params=params,
        rows=rows,
        past_time=past_time,
        future_time=future_time,
        method=method,
        workers=workers,
        want_maps=False,
    ).picture
