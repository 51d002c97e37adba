"""Quadtree partition of a picture into square blocks, chosen by Lagrangian cost.

The picture is cut into a raster of *tree blocks* of the largest allowed size; each is split
recursively into four quadrants. A split is chosen when the summed cost of the four quadrants is
lower than the cost of coding the block whole (J = D + lambda * R), bottom-up, as in the quadtree
coding-unit decision of ITU-T H.265 (clause 7.3.8.4, ``split_cu_flag``; common practice).

Picture edges: a block that crosses the right or bottom edge is split without signalling (H.265's
implicit split at picture boundaries), down to 4 x 4 even when smaller sizes than the smallest
allowed one are needed there. Samples left uncovered by 4 x 4 blocks (picture sizes that are not a
multiple of 4) stay uncovered and the field is flagged ``gaps_allowed``.

Coding order is the raster order of tree blocks and the z-order (Morton order) inside each.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError

__all__ = ["SizeLevel", "plan_levels", "decide_splits", "collect_leaves", "z_order_key"]

MIN_SIZE = 4


@dataclass
class SizeLevel:
    """One level of the quadtree: the grid of `size` x `size` blocks over the picture."""

    size: int
    rows: int
    cols: int
    inside: np.ndarray  # block lies entirely inside the picture
    needed: np.ndarray  # block can occur in some partition
    leaf_ok: np.ndarray  # block may be coded whole
    split_ok: np.ndarray  # block may be split
    flagged: np.ndarray  # both choices exist: the split decision costs one bit

    def positions(self, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(x, y) of the blocks where `mask` is set, in row-major grid order."""
        r, c = np.nonzero(mask)
        return (c * self.size).astype(np.int64), (r * self.size).astype(np.int64)


def _upsample(mask: np.ndarray, rows: int, cols: int) -> np.ndarray:
    up = np.repeat(np.repeat(mask, 2, axis=0), 2, axis=1)
    return up[:rows, :cols]


def plan_levels(width: int, height: int, block_sizes: tuple[int, ...]) -> list[SizeLevel]:
    """The quadtree levels needed to partition a width x height picture with `block_sizes`.

    Parameters
    ----------
    width, height : int
    block_sizes : tuple of int
        Allowed square block sizes (powers of two, 4..128).

    Returns
    -------
    list of SizeLevel, from the largest size down.
    """
    sizes = sorted(set(int(s) for s in block_sizes), reverse=True)
    if not sizes:
        raise ParameterError("block_sizes must name at least one size")
    for s in sizes:
        if s < MIN_SIZE or s > 128 or s & (s - 1):
            raise ParameterError(f"block sizes must be powers of two from 4 to 128, got {s}")
    top, smallest = sizes[0], sizes[-1]
    levels: list[SizeLevel] = []
    s = top
    needed = None
    while s >= MIN_SIZE:
        rows, cols = -(-height // s), -(-width // s)
        r, c = np.mgrid[0:rows, 0:cols]
        inside = ((c + 1) * s <= width) & ((r + 1) * s <= height)
        if needed is None:
            needed = np.ones((rows, cols), dtype=bool)
        leaf_ok = needed & inside & ((s in sizes) | (s < smallest))
        split_ok = needed & (s > MIN_SIZE) & (~inside | (s > smallest))
        flagged = leaf_ok & split_ok
        levels.append(SizeLevel(s, rows, cols, inside, needed, leaf_ok, split_ok, flagged))
        if not split_ok.any():
            break
        s //= 2
        needed = _upsample(split_ok, -(-height // s), -(-width // s))
    return levels


def decide_splits(levels: list[SizeLevel], leaf_cost: dict[int, np.ndarray], *, lam: float) -> dict[int, np.ndarray]:
    """Bottom-up split decision minimising the summed cost.

    Parameters
    ----------
    levels : list of SizeLevel
        From :func:`plan_levels`.
    leaf_cost : dict size -> ndarray (rows, cols) of float
        Cost of coding each block whole (read where ``leaf_ok``).
    lam : float
        Lagrange multiplier; each signalled split decision costs one bit.

    Returns
    -------
    dict size -> ndarray of bool: blocks that are split.
    """
    split: dict[int, np.ndarray] = {}
    below = None
    for lev in reversed(levels):
        leaf = np.where(lev.leaf_ok, leaf_cost.get(lev.size, np.full((lev.rows, lev.cols), np.inf)), np.inf)
        if below is not None:
            pad = np.zeros((2 * lev.rows, 2 * lev.cols))
            pad[: below.shape[0], : below.shape[1]] = below
            child_sum = pad.reshape(lev.rows, 2, lev.cols, 2).sum(axis=(1, 3))
            split_cost = np.where(lev.split_ok, child_sum, np.inf)
        else:
            split_cost = np.full((lev.rows, lev.cols), np.inf)
        sp = split_cost < leaf
        cost = np.minimum(leaf, split_cost)
        # needed blocks with no option are uncovered remainders (cost 0); unneeded ones never count
        cost = np.where(np.isinf(cost), 0.0, cost) + lam * lev.flagged
        split[lev.size] = sp & lev.split_ok
        below = np.where(lev.needed, cost, 0.0)
    return split


def z_order_key(x: np.ndarray, y: np.ndarray, *, top: int, width: int) -> np.ndarray:
    """Coding-order key of blocks at (x, y): tree-block raster index, then Morton order inside."""
    x = np.asarray(x, dtype=np.int64)
    y = np.asarray(y, dtype=np.int64)
    tcols = -(-width // top)
    tree = (y // top) * tcols + (x // top)
    ux = (x % top) // MIN_SIZE
    uy = (y % top) // MIN_SIZE
    morton = np.zeros_like(ux)
    for bit in range(8):
        morton |= ((ux >> bit) & 1) << (2 * bit)
        morton |= ((uy >> bit) & 1) << (2 * bit + 1)
    return tree * (1 << 16) + morton


def collect_leaves(levels: list[SizeLevel], split: dict[int, np.ndarray], *, width: int):
    """Leaves of the decided partition in coding order.

    Returns
    -------
    x, y, size : ndarray of int64
        Leaf blocks in coding order.
    gaps : bool
        True when some samples are left uncovered.
    """
    xs, ys, ss = [], [], []
    gaps = False
    active = None
    for lev in levels:
        if active is None:
            active = lev.needed.copy()
        leaf = active & ~split[lev.size] & lev.leaf_ok
        if np.any(active & ~split[lev.size] & ~lev.leaf_ok):
            gaps = True
        x, y = lev.positions(leaf)
        xs.append(x)
        ys.append(y)
        ss.append(np.full(len(x), lev.size, dtype=np.int64))
        nxt = active & split[lev.size]
        if lev is not levels[-1]:
            child = levels[levels.index(lev) + 1]
            active = _upsample(nxt, child.rows, child.cols)
    x = np.concatenate(xs)
    y = np.concatenate(ys)
    s = np.concatenate(ss)
    order = np.argsort(z_order_key(x, y, top=levels[0].size, width=width), kind="stable")
    return x[order], y[order], s[order], gaps
