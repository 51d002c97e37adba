"""All K candidate observations of every luma pixel, as arrays (for measurement and fitting).

The synthesiser (`synth.synthesis.synthesiser`) never materialises the observations of all candidates: it turns
weights into one remap per candidate and plane. Measuring, calibrating and the oracles need them
side by side, so this module builds, for the luma plane, the same candidates the synthesiser uses
(same projection, same per-group K-nearest search, same sub-sample filter, same border rule) as a
stack of shape (K, H, W):

- ``past[k]``, ``future[k]``: the samples candidate ``k``, moved to the pixel, points at;
- ``share[k]``: weight of the past sample in the candidate's observation (1 - t normally, 0 or 1
  when one endpoint leaves its picture), so ``obs[k] = share * past + (1 - share) * future``;
- ``valid[k]``; per-candidate columns gathered per group (landing centre, half sizes, displacements,
  block endpoint agreement).

Memory is about 4 bytes x K x H x W per array (a 1280x720 picture with K = 12: 44 MB each).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture
from synth.synthesis.candidates import CandidateSearch
from synth.synthesis.lmmse import endpoint_agreement_stats
from synth.synthesis.params import SynthParams
from synth.synthesis.project import LandedVectors, project_fields, reference_times
from synth.synthesis.sampling import PlaneSampler, endpoint_patches

__all__ = ["CandidateStack", "candidate_stack", "block_agreement"]


@dataclass(eq=False)
class CandidateStack:
    """Luma observations of the K candidates of every pixel.

    Attributes
    ----------
    past, future : ndarray of float32, shape (K, H, W)
        Samples at the candidate's past and future endpoints (0 in empty slots).
    share : ndarray of float32, shape (K, H, W)
        Weight of the past sample in the observation.
    valid : ndarray of bool, shape (K, H, W)
    index : ndarray of int32, shape (K, H, W)
        Index into ``landed`` (-1 in empty slots).
    landed : LandedVectors
    rho01 : ndarray of float32, shape (n,)
        Block endpoint agreement of every landed vector (`synth.synthesis.lmmse.endpoint_agreement_stats`).
    colocated : ndarray of float32, shape (H, W)
        Mean of the co-located reference samples (the synthesiser's fallback at holes).
    group : int
    bit_depth : int
    """

    past: np.ndarray
    future: np.ndarray
    share: np.ndarray
    valid: np.ndarray
    index: np.ndarray
    landed: LandedVectors
    rho01: np.ndarray
    colocated: np.ndarray
    group: int
    bit_depth: int

    @property
    def k(self) -> int:
        return self.past.shape[0]

    @property
    def shape(self) -> tuple[int, int]:
        return self.past.shape[1:]

    @property
    def obs(self) -> np.ndarray:
        """Pair observations ``share * past + (1 - share) * future``, shape (K, H, W)."""
        return self.share * self.past + (np.float32(1) - self.share) * self.future

    def column(self, name: str, fill: float = 0.0) -> np.ndarray:
        """A per-landed-vector attribute (a `LandedVectors` field or 'rho01') per slot and pixel."""
        values = self.rho01 if name == "rho01" else getattr(self.landed, name)
        safe = np.where(self.valid, self.index, 0)
        out = np.asarray(values)[safe].astype(np.float32)
        return np.where(self.valid, out, np.float32(fill))

    def pixel_grid(self) -> tuple[np.ndarray, np.ndarray]:
        """Pixel coordinates (x, y), float32, shape (H, W)."""
        H, W = self.shape
        return np.meshgrid(np.arange(W, dtype=np.float32), np.arange(H, dtype=np.float32))

    def footprint_distance(self) -> np.ndarray:
        """Distance of every pixel to each candidate's block footprint at the target time (0 inside),
        as the synthesiser's reliability uses it; shape (K, H, W)."""
        x, y = self.pixel_grid()
        hw = (self.column("bw") - 1) / 2
        hh = (self.column("bh") - 1) / 2
        ex = np.maximum(np.abs(x[None] - self.column("cx")) - hw, 0)
        ey = np.maximum(np.abs(y[None] - self.column("cy")) - hh, 0)
        return np.where(self.valid, np.sqrt(ex * ex + ey * ey), np.float32(np.inf)).astype(np.float32)

    def centre_distance(self) -> np.ndarray:
        """Distance of every pixel to each candidate's landing centre; shape (K, H, W)."""
        x, y = self.pixel_grid()
        ex = x[None] - self.column("cx")
        ey = y[None] - self.column("cy")
        return np.where(self.valid, np.sqrt(ex * ex + ey * ey), np.float32(np.inf)).astype(np.float32)


def block_agreement(
    past: PlaneSampler, future: PlaneSampler, landed: LandedVectors, params: SynthParams, bit_depth: int
) -> np.ndarray:
    """Endpoint agreement ``rho01`` of every landed vector, as the synthesiser measures it."""
    rho = np.zeros(len(landed), np.float32)
    floor = params.agreement_floor * float(1 << (bit_depth - 8)) ** 2
    for index, a, b in endpoint_patches(past, future, landed, margin=params.agreement_margin):
        rho[index] = endpoint_agreement_stats(a, b, floor=floor)
    return rho


def _rerank(gidx: np.ndarray, landed: LandedVectors, g: int, k: int, *, rank: str, dedupe: bool) -> np.ndarray:
    Gr, Gx, n = gidx.shape
    valid = gidx >= 0
    safe = np.where(valid, gidx, 0)
    half = (g - 1) / 2.0
    gx = (np.arange(Gx) * g + half)[None, :, None]
    gy = (np.arange(Gr) * g + half)[:, None, None]
    ddx = gx - landed.cx[safe]
    ddy = gy - landed.cy[safe]
    centre = np.sqrt(ddx * ddx + ddy * ddy)
    if rank == "footprint":
        ex = np.maximum(np.abs(ddx) - (landed.bw[safe] - 1) / 2.0, 0)
        ey = np.maximum(np.abs(ddy) - (landed.bh[safe] - 1) / 2.0, 0)
        key = np.sqrt(ex * ex + ey * ey) * 1e3 + centre
    else:
        key = centre.copy()
    key = np.where(valid, key, np.inf)
    if dedupe:
        disp = np.stack(
            [landed.past_dx[safe], landed.past_dy[safe], landed.future_dx[safe], landed.future_dy[safe]], -1
        )
        order = np.argsort(key, axis=-1, kind="stable")
        disp_o = np.take_along_axis(disp, order[..., None], axis=2)
        key_o = np.take_along_axis(key, order, axis=2)
        same = np.all(disp_o[:, :, :, None, :] == disp_o[:, :, None, :, :], axis=-1)  # (Gr, Gx, n, n)
        earlier = np.tril(np.ones((n, n), bool), -1)  # [i, j] j < i
        dup = np.any(same & earlier[None, None] & np.isfinite(key_o)[:, :, None, :], axis=-1)
        key_o = np.where(dup, np.inf, key_o)
        key = np.empty_like(key)
        np.put_along_axis(key, order, key_o, axis=2)
    order = np.argsort(key, axis=-1, kind="stable")[..., :k]
    out = np.take_along_axis(gidx, order, axis=2)
    return np.where(np.isfinite(np.take_along_axis(key, order, axis=2)), out, -1).astype(np.int32)


def candidate_stack(
    past: Picture,
    future: Picture,
    fields: VectorField | Sequence[VectorField],
    *,
    t: float,
    params: SynthParams | None = None,
    k: int | None = None,
    group: int | None = None,
    rank: str = "centre",
    pool: int | None = None,
    dedupe: bool = False,
) -> CandidateStack:
    """Build the luma candidate stack the synthesiser would use for these inputs.

    Parameters
    ----------
    past, future : Picture
    fields : VectorField or sequence of VectorField
    t : float
        Target time in (0, 1).
    params : SynthParams, optional
        Supplies K (one or both coding directions, as in `synth.synthesise`), the group size, the
        reach, the sub-sample filter and the border margin.
    k, group : int, optional
        Override K and the group size.
    rank : {'centre', 'footprint'}
        'centre' (the synthesiser's rule): the K landed vectors whose landing centres are nearest
        to the group's centre. 'footprint': among the ``pool`` nearest centres, the K whose landed
        footprints are nearest to the group's centre (0 inside), ties by centre distance.
    pool : int, optional
        Candidates examined by 'footprint' ranking (default 3 K).
    dedupe : bool
        Drop candidates whose displacements equal those of a better-ranked candidate.

    Returns
    -------
    CandidateStack

    Raises
    ------
    ParameterError
        On mismatched inputs or bad ``t``.
    """
    params = SynthParams() if params is None else params
    if isinstance(fields, VectorField):
        fields = [fields]
    fields = list(fields)
    if not fields:
        raise ParameterError("at least one vector field is needed, got none")
    if past.y.shape != future.y.shape:
        raise ParameterError(f"past and future differ in size: {past.y.shape} vs {future.y.shape}")
    pt, ft = reference_times(fields)
    landed = project_fields(fields, past_time=pt, future_time=ft, t=float(t))
    both = len({f.span > 0 for f in fields}) == 2
    if k is None:
        k = params.candidates_both_directions if both else params.candidates
    g = params.group_size if group is None else int(group)
    H, W = past.y.shape
    if rank not in ("centre", "footprint"):
        raise ParameterError(f"rank must be 'centre' or 'footprint', got {rank!r}")
    wide = k if (rank == "centre" and not dedupe) else (pool or 3 * k)
    search = CandidateSearch(landed, height=H, width=W, k=wide, group=g, reach=params.reach)
    gidx = search.for_group_rows(0, search.rows)  # (Gr, Gx, wide)
    if wide != k:
        gidx = _rerank(gidx, landed, g, k, rank=rank, dedupe=dedupe)
    idx = np.repeat(np.repeat(gidx, g, axis=0), g, axis=1)[:H, :W]
    idx = np.ascontiguousarray(np.moveaxis(idx, -1, 0))  # (K, H, W)
    valid = idx >= 0
    safe = np.where(valid, idx, 0)
    sp = PlaneSampler(past.y, interpolation=params.interpolation)
    sf = PlaneSampler(future.y, interpolation=params.interpolation)
    scale = np.float32(sp.scale)
    xs = np.broadcast_to(np.arange(W, dtype=np.float32)[None, :], (H, W))
    ys = np.broadcast_to(np.arange(H, dtype=np.float32)[:, None], (H, W))
    # the synthesiser's border rule, judged per weight cell (here per pixel: weight_cell 1)
    m = np.float32(params.border_margin)
    zero = np.float32(0)
    P = np.zeros((k, H, W), np.float32)
    F = np.zeros((k, H, W), np.float32)
    near = np.float32(1.0 - landed.t)
    share = np.full((k, H, W), near, np.float32)
    for s in range(k):
        v = valid[s]
        outside = []
        for dxn, dyn, sampler, out in (("past_dx", "past_dy", sp, P), ("future_dx", "future_dy", sf, F)):
            dx = np.where(v, getattr(landed, dxn)[safe[s]], zero).astype(np.float32)
            dy = np.where(v, getattr(landed, dyn)[safe[s]], zero).astype(np.float32)
            x, y = xs + dx, ys + dy
            out[s] = sampler.sample_xy(np.ascontiguousarray(x * scale), np.ascontiguousarray(y * scale))
            outside.append((x < -m) | (x > W - 1 + m) | (y < -m) | (y > H - 1 + m))
        op, of = outside
        share[s] = np.where(op & ~of, zero, np.where(of & ~op, np.float32(1), near))
    P[~valid] = 0
    F[~valid] = 0
    rho = block_agreement(sp, sf, landed, params, past.bit_depth)
    colocated = (1.0 - landed.t) * past.y.astype(np.float32) + landed.t * future.y.astype(np.float32)
    return CandidateStack(P, F, share, valid, idx.astype(np.int32), landed, rho, colocated, g, past.bit_depth)
