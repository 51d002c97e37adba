r"""Multi-reference block vectors: every block of a coded picture points at the best of N earlier
pictures, as an H.264 P picture with several reference pictures (``ref_idx``, ITU-T H.264 clause
8.4.2.1) does.

Representation
--------------
`ReferenceFields` holds one `VectorField` per reference picture, nearest first. The fields share one
block grid (same blocks in the same order); each block is inter in at most one of them and intra in
the others (a block intra in all of them is an intra block of the picture). Beside them it carries
the *chain*: for every reference but the oldest, that picture's own field against the next older
reference, which `synth.synthesis.reference_chain` composes to map vectors onto one common
reference. With one reference it is just that reference's field and an empty chain.

Choice rule (built-in estimator, `estimate_multi_reference`)
--------------------------------------------------------------
1. The field against the nearest reference ``t_0`` is `synth.motion.estimator.estimate_field`'s, with
   its quadtree and intra decisions: its blocks are the common grid (so one reference gives exactly
   the one-reference field).
2. Every farther reference ``t_k`` gets its own `estimate_field` field. Each inter block ``b`` of the
   common grid takes as starting points the vectors of that field's inter blocks under ``b``'s
   centre and its four corners, then the estimator's own integer (``integer_search``, +-1) and half-
   and quarter-sample (``subpel_search``) refinement on ``b``, against the median predictor that
   field's block under ``b``'s centre has (`synth.motion.rate.field_predictors`).
3. The block takes the reference of least Lagrangian cost (the estimator's cost, Wiegand et al.,
   IEEE Trans. CSVT 13(7), 2003)::

       J_k(b) = SAD_k(b, v_k) + lambda(QP) * (bits(v_k - p_k) + bits(ref_idx = k))

   ``bits(v - p)`` are the signed Exp-Golomb lengths of the vector difference (clause 9.1.1) and
   ``bits(ref_idx)`` the te(v) length of the reference index (clause 9.1.2, from memory: one bit
   each with two references, ue(v) lengths 1, 3, 3, 5, ... with more). Ties go to the nearer
   reference. Every choice carries the estimator's inter flag (``+ lambda``).
4. A block the nearest field codes intra (``J_intra`` of `estimate_field`: sqrt(2) x the SAD of the
   H.264 Intra_16x16 DC prediction + lambda (1 + INTRA_BITS)) becomes inter on a farther reference
   when some ``J_k`` is below it (uncovered background that an older picture still shows), and
   stays intra otherwise. Blocks inter in the nearest field keep an inter vector.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError
from synth.expgolomb import ue_length
from synth.field import VectorField
from synth.motion.cost import lambda_motion, vector_bits
from synth.motion.estimator import INTRA_BITS, _dc_intra_sad, estimate_field
from synth.motion.rate import block_label_map, field_predictors
from synth.motion.search import block_sad, integer_search, subpel_search
from synth.motion.subpel import QuarterPelReference
from synth.picture import Picture

__all__ = ["ReferenceFields", "estimate_multi_reference", "reference_index_bits"]


def _same_grid(a: VectorField, b: VectorField) -> bool:
    return (a.width, a.height) == (b.width, b.height) and all(
        np.array_equal(getattr(a, n), getattr(b, n)) for n in ("x", "y", "w", "h")
    )


@dataclass(frozen=True, eq=False)
class ReferenceFields:
    """The block vectors of one coded picture against N reference pictures (module docstring).

    Parameters
    ----------
    fields : tuple of VectorField
        One per reference picture, nearest first (all with the same ``coded_time``, increasing
        distance to it); the same blocks in each; a block is inter in at most one field.
    chain : tuple of VectorField
        ``len(fields) - 1`` fields: ``chain[k]`` codes the picture at ``fields[k].reference_time``
        against the one at ``fields[k + 1].reference_time``.
    """

    fields: tuple
    chain: tuple = ()

    def __post_init__(self) -> None:
        fields = tuple(self.fields)
        chain = tuple(self.chain)
        object.__setattr__(self, "fields", fields)
        object.__setattr__(self, "chain", chain)
        if not fields or not all(isinstance(f, VectorField) for f in fields):
            raise ParameterError("ReferenceFields needs at least one VectorField")
        first = fields[0]
        for f in fields[1:]:
            if float(f.coded_time) != float(first.coded_time):
                raise ParameterError("ReferenceFields: every field must code the same picture")
            if not _same_grid(first, f):
                raise ParameterError("ReferenceFields: the fields must share one block grid")
        gaps = [abs(f.span) for f in fields]
        if any(b <= a for a, b in zip(gaps, gaps[1:])):
            raise ParameterError("ReferenceFields: references must be listed nearest first, each one once")
        inter = np.stack([~np.asarray(f.intra, bool) for f in fields])
        if (inter.sum(axis=0) > 1).any():
            raise ParameterError("ReferenceFields: a block is inter in more than one field")
        if len(chain) != len(fields) - 1:
            raise ParameterError(f"ReferenceFields: {len(fields)} references need {len(fields) - 1} chain fields")
        for k, c in enumerate(chain):
            if not isinstance(c, VectorField) or (c.width, c.height) != (first.width, first.height):
                raise ParameterError(f"ReferenceFields: chain field {k} must be a VectorField of the picture's size")
            if (float(c.coded_time), float(c.reference_time)) != (
                float(fields[k].reference_time),
                float(fields[k + 1].reference_time),
            ):
                raise ParameterError(
                    f"ReferenceFields: chain field {k} must code picture {fields[k].reference_time:g} "
                    f"against {fields[k + 1].reference_time:g}"
                )

    def __len__(self) -> int:
        return len(self.fields)

    @property
    def coded_time(self) -> float:
        return float(self.fields[0].coded_time)

    @property
    def reference_times(self) -> tuple[float, ...]:
        return tuple(float(f.reference_time) for f in self.fields)

    @classmethod
    def single(cls, field: VectorField) -> ReferenceFields:
        """One reference: the field itself, no chain."""
        return cls((field,), ())

    def block_reference(self) -> np.ndarray:
        """Index (into `fields`) of the reference each block points at; -1 for intra blocks."""
        inter = np.stack([~np.asarray(f.intra, bool) for f in self.fields])
        return np.where(inter.any(axis=0), inter.argmax(axis=0), -1).astype(np.int32)

    def merged(self) -> VectorField:
        """The common grid with each block's own vector (to its own reference), intra where intra
        in every field; its ``reference_time`` is the nearest reference's."""
        first = self.fields[0]
        which = self.block_reference()
        dx = np.zeros(len(first), np.int32)
        dy = np.zeros(len(first), np.int32)
        for k, f in enumerate(self.fields):
            m = which == k
            dx[m], dy[m] = f.dx[m], f.dy[m]
        return VectorField(
            first.width, first.height, first.coded_time, first.reference_time,
            first.x, first.y, first.w, first.h, dx, dy, which < 0, first.gaps_allowed,
        )  # fmt: skip

    def reference_use(self) -> list[int]:
        """Number of inter blocks on each reference, nearest first."""
        which = self.block_reference()
        return [int((which == k).sum()) for k in range(len(self.fields))]


def reference_index_bits(index: int, references: int) -> int:
    """Bits of ``ref_idx`` coded as te(v) (ITU-T H.264 clause 9.1.2, from memory): one bit with two
    references, the ue(v) length otherwise (0 with a single reference: nothing is sent)."""
    if references <= 1:
        return 0
    if references == 2:
        return 1
    return int(ue_length(np.int64(index)))


def _starting_vectors(other: VectorField, label: np.ndarray, x, y, s) -> list[tuple[np.ndarray, np.ndarray]]:
    """Integer vectors (luma samples) of `other`'s inter blocks under the centre and corners of the
    blocks (x, y, size s); where a point's block is intra, its centre's vector, else zero."""
    h, w = label.shape
    points = [(x + s // 2, y + s // 2), (x, y), (x + s - 1, y), (x, y + s - 1), (x + s - 1, y + s - 1)]
    out = []
    centre = None
    for px, py in points:
        j = label[np.clip(py, 0, h - 1), np.clip(px, 0, w - 1)]
        ok = j >= 0
        jj = np.where(ok, j, 0)
        ok &= ~np.asarray(other.intra, bool)[jj]
        qx = np.where(ok, other.dx[jj], 0).astype(np.int64)
        qy = np.where(ok, other.dy[jj], 0).astype(np.int64)
        if centre is None:
            centre = (qx, qy, ok)
        else:
            qx = np.where(ok, qx, centre[0])
            qy = np.where(ok, qy, centre[1])
        out.append((qx >> 2, qy >> 2))  # floor to whole samples; the refinement finds the fraction
    return out


def _block_costs(
    coded: Picture, reference: Picture, grid: VectorField, other: VectorField, *, lam: float, search_range: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Best vector of each block of `grid` against `reference`, starting from `other`'s vectors
    (module docstring, step 2): quarter-sample (dx, dy) and J without the index bits and flag."""
    n = len(grid)
    H, W = coded.height, coded.width
    dx = np.zeros(n, np.int64)
    dy = np.zeros(n, np.int64)
    cost = np.full(n, np.inf)
    inter = np.ones(n, bool)
    if n == 0:
        return dx, dy, cost
    dtype = np.int16 if coded.bit_depth == 8 else np.int32
    cur = coded.y.astype(dtype)
    top = int(grid.w.max())
    ref = QuarterPelReference(reference.y, pad=top + 8, bit_depth=coded.bit_depth, dtype=dtype)
    label = block_label_map(other)
    opx, opy = field_predictors(other, label=label)
    for s in np.unique(grid.w[inter]).tolist():
        m = np.flatnonzero(inter & (grid.w == s) & (grid.h == s))
        if len(m) == 0:
            continue
        x = grid.x[m].astype(np.int64)
        y = grid.y[m].astype(np.int64)
        oy, ox = np.mgrid[0:s, 0:s]
        blocks = cur.ravel().take((y * W + x)[:, None] + (oy * W + ox).ravel()[None, :])
        lo_x = np.maximum(-(x + s), -search_range)
        hi_x = np.minimum(W - x, search_range)
        lo_y = np.maximum(-(y + s), -search_range)
        hi_y = np.minimum(H - y, search_range)
        j = label[np.clip(y + s // 2, 0, H - 1), np.clip(x + s // 2, 0, W - 1)]
        jj = np.where(j >= 0, j, 0)
        px = np.where(j >= 0, opx[jj], 0)
        py = np.where(j >= 0, opy[jj], 0)
        starts = _starting_vectors(other, label, x, y, s)
        vx, vy, _ = integer_search(
            ref, blocks, x, y, s,
            cand_x=[c[0] for c in starts], cand_y=[c[1] for c in starts],
            lo_x=lo_x, hi_x=hi_x, lo_y=lo_y, hi_y=hi_y,
            radius=1, lam=lam, pred_x=px, pred_y=py, max_steps=2,
        )  # fmt: skip
        qx, qy, _, j_inter = subpel_search(
            ref, blocks, x, y, s, vx=vx, vy=vy,
            lo_x=4 * lo_x, hi_x=4 * hi_x, lo_y=4 * lo_y, hi_y=4 * hi_y,
            lam=lam, pred_x=px, pred_y=py,
        )  # fmt: skip
        dx[m], dy[m], cost[m] = qx, qy, j_inter
    return dx, dy, cost


def _intra_costs(coded: Picture, field: VectorField, *, lam: float) -> np.ndarray:
    """``J_intra`` of the field's intra blocks as `estimate_field` prices it (inf for inter ones)."""
    cost = np.full(len(field), np.inf)
    intra = np.asarray(field.intra, bool)
    if not intra.any():
        return cost
    dtype = np.int16 if coded.bit_depth == 8 else np.int32
    cur = coded.y.astype(dtype)
    W = coded.width
    for s in np.unique(field.w[intra]).tolist():
        m = np.flatnonzero(intra & (field.w == s) & (field.h == s))
        x = field.x[m].astype(np.int64)
        y = field.y[m].astype(np.int64)
        oy, ox = np.mgrid[0:s, 0:s]
        blocks = cur.ravel().take((y * W + x)[:, None] + (oy * W + ox).ravel()[None, :])
        sad = _dc_intra_sad(cur, blocks, x, y, s, coded.bit_depth)
        cost[m] = np.sqrt(2.0) * sad + lam * (1 + INTRA_BITS)
    return cost


def _own_costs(coded: Picture, reference: Picture, field: VectorField, *, lam: float) -> np.ndarray:
    """J of the nearest field's own vectors (SAD + lambda bits against its median predictor)."""
    n = len(field)
    W = coded.width
    cost = np.full(n, np.inf)
    inter = ~np.asarray(field.intra, bool)
    if not inter.any():
        return cost
    dtype = np.int16 if coded.bit_depth == 8 else np.int32
    cur = coded.y.astype(dtype)
    reach = int(max(np.abs(field.dx).max(initial=0), np.abs(field.dy).max(initial=0))) // 4
    ref = QuarterPelReference(reference.y, pad=int(field.w.max()) + reach + 8, bit_depth=coded.bit_depth, dtype=dtype)
    px, py = field_predictors(field)
    for s in np.unique(field.w[inter]).tolist():
        m = np.flatnonzero(inter & (field.w == s) & (field.h == s))
        x = field.x[m].astype(np.int64)
        y = field.y[m].astype(np.int64)
        oy, ox = np.mgrid[0:s, 0:s]
        blocks = cur.ravel().take((y * W + x)[:, None] + (oy * W + ox).ravel()[None, :])
        qx = field.dx[m].astype(np.int64)
        qy = field.dy[m].astype(np.int64)
        cost[m] = block_sad(ref, blocks, x, y, qx, qy, s) + lam * vector_bits(qx, qy, px[m], py[m])
    return cost


def estimate_multi_reference(
    pictures: Mapping[float, Picture],
    *,
    coded_time: float,
    reference_times: Sequence[float],
    qp: int = 27,
    cache: dict | None = None,
    **options,
) -> ReferenceFields:
    """Block vectors of the picture at `coded_time` against the pictures at `reference_times`,
    each block on the reference of least cost (module docstring), with the chain.

    Parameters
    ----------
    pictures : mapping of time to Picture
        Holds the coded picture and every reference.
    coded_time : float
    reference_times : sequence of float
        Nearest first, all on one side of `coded_time`.
    qp : int
        Rate constraint (`estimate_field`).
    cache : dict, optional
        ``(coded_time, reference_time) -> VectorField`` of fields already estimated with the same
        `qp` and options (filled in): the chain field of picture ``t_k`` is ``t_k``'s own nearest
        field, so a clip predicted picture by picture estimates each pair once.
    **options
        `estimate_field` options (``search_range``, ``block_sizes``, ...).

    Returns
    -------
    ReferenceFields
    """
    times = [float(t) for t in reference_times]
    if not times:
        raise ParameterError("estimate_multi_reference needs at least one reference time")
    for t in [coded_time, *times]:
        if t not in pictures:
            raise ParameterError(f"estimate_multi_reference: no picture at time {t:g}")
    gaps = [abs(t - coded_time) for t in times]
    if any(b <= a for a, b in zip(gaps, gaps[1:])) or gaps[0] == 0:
        raise ParameterError("reference times must be distinct, nearest first, and differ from the coded time")
    cache = {} if cache is None else cache

    def field(a: float, b: float) -> VectorField:
        key = (float(a), float(b))
        if key not in cache:
            cache[key] = estimate_field(pictures[a], pictures[b], coded_time=a, reference_time=b, qp=qp, **options)
        return cache[key]

    grid = field(coded_time, times[0])
    if len(times) == 1:
        return ReferenceFields.single(grid)
    coded = pictures[coded_time]
    lam = lambda_motion(qp)
    search_range = int(options.get("search_range", 64))
    n_ref = len(times)
    vx = [grid.dx.astype(np.int64)]
    vy = [grid.dy.astype(np.int64)]
    costs = [_own_costs(coded, pictures[times[0]], grid, lam=lam) + lam * (1 + reference_index_bits(0, n_ref))]
    for k, t in enumerate(times[1:], start=1):
        dx, dy, j = _block_costs(coded, pictures[t], grid, field(coded_time, t), lam=lam, search_range=search_range)
        vx.append(dx)
        vy.append(dy)
        costs.append(j + lam * (1 + reference_index_bits(k, n_ref)))
    intra = np.asarray(grid.intra, bool)
    stacked = np.stack(costs)
    best = np.argmin(stacked, axis=0)  # first minimum: ties to the nearer reference
    # inter blocks of the nearest field keep a vector; intra ones only where a farther one beats J_intra
    stays_intra = intra & ~(stacked.min(axis=0) < _intra_costs(coded, grid, lam=lam))
    fields = []
    for k, t in enumerate(times):
        mine = (best == k) & ~stays_intra
        fields.append(
            VectorField(
                grid.width,
                grid.height,
                grid.coded_time,
                t,
                grid.x,
                grid.y,
                grid.w,
                grid.h,
                np.where(mine, vx[k], 0).astype(np.int32),
                np.where(mine, vy[k], 0).astype(np.int32),
                ~mine,
                grid.gaps_allowed,
            )  # fmt: skip
        )
    chain = tuple(field(times[k], times[k + 1]) for k in range(n_ref - 1))
    return ReferenceFields(tuple(fields), chain)
