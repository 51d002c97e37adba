r"""Vectors to different reference pictures mapped onto one common reference through the chain of
coded vectors, so that their distances can be measured in one place.

A block of the coded picture at time ``t`` with centre ``c`` and vector ``v`` (quarter samples,
sign convention of `synth.field`: the block's content lies at ``c + v / 4`` on its reference) points
at reference ``t_k`` (references nearest first, ``t_0 .. t_{N-1}``). The chain field ``u_k`` codes
the picture ``t_k`` against ``t_{k+1}``; the content at ``p`` on ``t_k`` lies at ``p + u_k(p) / 4``
on ``t_{k+1}``. Composing the two motions gives the vector of the block to ``t_{k+1}``::

    v^{(k+1)} = v^{(k)} + u_k(c + v^{(k)} / 4)

and so on up to a common reference ``t_m``. `vectors_on_every_reference` gives every vector on
each reference from its own on (the LMMSE model compares a pair on the older of its two
references); `common_reference_vectors` maps them all onto the *oldest reference any inter block
of the picture uses*. Either way a picture whose blocks all point at one reference is left as it
is (the one-reference model exactly), and a vector already pointing at ``t_m`` is not touched. ``u_k(p)`` is the vector of the chain field's block covering the sample nearest to ``p``
(clipped to the picture); where that block is intra or no block covers it, the vector of the
nearest inter sample of the chain field (Euclidean distance transform), and zero if the chain field
has no inter block at all. Arithmetic stays in integer quarter samples, so an exact translation
composes exactly: ``v^{(m)} = v + sum_k u_k`` (common practice for chained motion, as temporal
vector scaling in codecs composes motion).

The LMMSE model of `synth.synthesis.one_reference` then measures ``|v_i - v_j|`` (in ``R_ij``) and
``e_i`` between the mapped vectors; each observation still samples its own reference picture with
its own vector ``v_i``.
"""

from __future__ import annotations

import numpy as np

from synth.field import VectorField
from synth.motion.compensate import vector_maps
from synth.motion.multi_reference import ReferenceFields

__all__ = ["chain_vector_at", "compose_along_chain", "common_reference_vectors", "vectors_on_every_reference"]


def chain_vector_at(field: VectorField, px: np.ndarray, py: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The field's quarter-sample vector at luma positions (px, py) (module docstring: ``u(p)``).

    Parameters
    ----------
    field : VectorField
    px, py : ndarray of float
        Positions on the field's coded picture (luma samples).

    Returns
    -------
    ux, uy : ndarray of int64
    """
    dx, dy, inter = vector_maps(field)
    if not inter.any():
        z = np.zeros(np.shape(px), np.int64)
        return z, z.copy()
    if not inter.all():
        from scipy.ndimage import distance_transform_edt

        _, (iy, ix) = distance_transform_edt(~inter, return_indices=True)
        dx, dy = dx[iy, ix], dy[iy, ix]
    col = np.clip(np.floor(np.asarray(px, np.float64) + 0.5).astype(np.int64), 0, field.width - 1)
    row = np.clip(np.floor(np.asarray(py, np.float64) + 0.5).astype(np.int64), 0, field.height - 1)
    return dx[row, col].astype(np.int64), dy[row, col].astype(np.int64)


def compose_along_chain(
    cx: np.ndarray, cy: np.ndarray, vx: np.ndarray, vy: np.ndarray, chain, start: np.ndarray, stop: int
) -> tuple[np.ndarray, np.ndarray]:
    """Map vectors from reference ``start`` (per vector) onto reference ``stop`` along the chain.

    Parameters
    ----------
    cx, cy : ndarray of float
        Where each vector starts (block centres, luma samples of the coded picture).
    vx, vy : ndarray of int
        Quarter-sample vectors to reference ``start``.
    chain : sequence of VectorField
        ``chain[k]`` codes reference ``k`` against reference ``k + 1``.
    start : ndarray of int
        Reference index each vector points at (``<= stop``).
    stop : int
        The common reference.

    Returns
    -------
    mx, my : ndarray of int64
        ``v^{(stop)}`` (module docstring); vectors already at ``stop`` unchanged.
    """
    mx = np.asarray(vx, np.int64).copy()
    my = np.asarray(vy, np.int64).copy()
    start = np.asarray(start)
    cx = np.asarray(cx, np.float64)
    cy = np.asarray(cy, np.float64)
    for k in range(int(start.min(initial=stop)), stop):
        m = np.flatnonzero(start <= k)
        if len(m) == 0:
            continue
        ux, uy = chain_vector_at(chain[k], cx[m] + mx[m] / 4.0, cy[m] + my[m] / 4.0)
        mx[m] += ux
        my[m] += uy
    return mx, my


def common_reference_vectors(fields: ReferenceFields) -> tuple[np.ndarray, np.ndarray, int]:
    """Every block's vector mapped onto the common reference (module docstring).

    Returns
    -------
    mx, my : ndarray of int64, shape (n,)
        Quarter-sample vectors on the common reference (0 for intra blocks).
    common : int
        Index of the common reference (the oldest one an inter block uses; 0 when none is used).
    """
    merged = fields.merged()
    which = fields.block_reference()
    inter = which >= 0
    mx = merged.dx.astype(np.int64)
    my = merged.dy.astype(np.int64)
    if not inter.any():
        return mx, my, 0
    common = int(which[inter].max())
    if common == 0:
        return mx, my, 0
    idx = np.flatnonzero(inter)
    cx = merged.x[idx] + (merged.w[idx] - 1) / 2.0
    cy = merged.y[idx] + (merged.h[idx] - 1) / 2.0
    mx[idx], my[idx] = compose_along_chain(cx, cy, mx[idx], my[idx], fields.chain, which[idx], common)
    return mx, my, common


def vectors_on_every_reference(fields: ReferenceFields) -> tuple[np.ndarray, np.ndarray]:
    """Every block's vector mapped onto each reference at or beyond its own (module docstring).

    Returns
    -------
    lx, ly : ndarray of int64, shape (N, n)
        ``[m, b]``: block ``b``'s vector on reference ``m`` for ``m >= k_b`` (its own vector at
        ``m = k_b``); its own vector for ``m < k_b`` (never measured there), 0 for intra blocks.
    """
    merged = fields.merged()
    which = fields.block_reference()
    n_ref = len(fields)
    mx = merged.dx.astype(np.int64)
    my = merged.dy.astype(np.int64)
    lx = np.repeat(mx[None], n_ref, axis=0)
    ly = np.repeat(my[None], n_ref, axis=0)
    inter = np.flatnonzero(which >= 0)
    cx = merged.x[inter] + (merged.w[inter] - 1) / 2.0
    cy = merged.y[inter] + (merged.h[inter] - 1) / 2.0
    vx, vy = mx[inter].copy(), my[inter].copy()
    k = which[inter]
    for m in range(1, n_ref):
        on = np.flatnonzero(k <= m - 1)  # blocks that reach reference m from m - 1
        if len(on):
            ux, uy = chain_vector_at(fields.chain[m - 1], cx[on] + vx[on] / 4.0, cy[on] + vy[on] / 4.0)
            vx[on] += ux
            vy[on] += uy
        lx[m, inter] = vx
        ly[m, inter] = vy
    return lx, ly
