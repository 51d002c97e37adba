"""Candidate vectors per pixel: the K landed vectors nearest to a small group of pixels.

The picture is cut into square groups of ``group`` luma samples, aligned to the picture's top-left
corner (so a group, and everything computed for it, is the same whichever rows of the picture are
being synthesised). For each group the K landed vectors whose landing centres are nearest to the
group's centre, and no further than ``reach``, are its candidates, ordered by that distance; slots
without a candidate hold -1. Per-pixel quantities (distance to the landing spot, reliability,
weights) are computed later per pixel from these shared candidates.

Searching per group instead of per pixel divides the search cost by ``group**2``. 8x8 groups cost
only 0.01 dB of PSNR-Y against 4x4 groups on real footage, since the K nearest to the group centre
are nearly always the K nearest to each of its pixels too; but where the candidate set changes, at
group borders, the picture gets seams an encoder pays for. The default is 4x4 groups: in the
encoder loop they save 0.6 / 0.4 / 0.0 points more BD-rate than 8x8 on carphone / bikes /
bigbuckbunny, for about 12 % more synthesis time (`tests/benchmarks/results/encoder-value.md`). The search is a k-d tree over the landing centres (SciPy's ``cKDTree``; J. L. Bentley,
"Multidimensional binary search trees used for associative searching", CACM 18(9), 1975,
doi:10.1145/361002.361007).
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from synth.errors import ParameterError
from synth.synthesis.project import LandedVectors

__all__ = ["CandidateSearch", "group_grid", "group_centres"]


def group_grid(height: int, width: int, group: int) -> tuple[int, int]:
    """Number of group rows and columns covering a picture (the last ones may stick out)."""
    return -(-height // group), -(-width // group)


def group_centres(gy0: int, gy1: int, n_cols: int, group: int) -> tuple[np.ndarray, np.ndarray]:
    """Centres (x, y) in luma samples of the groups of rows ``gy0 .. gy1 - 1``, shape (rows, cols)."""
    half = (group - 1) / 2.0
    gx = np.arange(n_cols, dtype=np.float64) * group + half
    gy = np.arange(gy0, gy1, dtype=np.float64) * group + half
    return np.broadcast_to(gx[None, :], (gy1 - gy0, n_cols)), np.broadcast_to(gy[:, None], (gy1 - gy0, n_cols))


class CandidateSearch:
    """K-nearest landed vectors per pixel group.

    Parameters
    ----------
    landed : LandedVectors
    height, width : int
        Luma size of the picture.
    k : int
        Candidates per group.
    group : int
        Group size in luma samples.
    reach : float
        Largest distance (luma samples) from a group's centre to a candidate's landing centre.
    workers : int
        Threads for the k-d tree queries (results do not depend on it).
    """

    def __init__(
        self, landed: LandedVectors, *, height: int, width: int, k: int, group: int, reach: float, workers: int = 1
    ):
        if k < 1:
            raise ParameterError(f"k (candidates per pixel) must be >= 1, got {k}")
        if group < 1:
            raise ParameterError(f"group must be >= 1, got {group}")
        self.landed = landed
        self.height, self.width = int(height), int(width)
        self.k, self.group, self.reach = int(k), int(group), float(reach)
        self.workers = workers
        self.rows, self.cols = group_grid(self.height, self.width, self.group)
        n = len(landed)
        self._tree = cKDTree(np.stack([landed.cx, landed.cy], axis=1).astype(np.float64)) if n else None

    def for_group_rows(self, gy0: int, gy1: int) -> np.ndarray:
        """Candidate indices for the group rows ``gy0 .. gy1 - 1``.

        Returns
        -------
        ndarray of int32, shape (gy1 - gy0, cols, k)
            Indices into the landed vectors, nearest first; -1 where fewer than k lie within reach.
        """
        if not 0 <= gy0 < gy1 <= self.rows:
            raise ParameterError(f"group rows must satisfy 0 <= gy0 < gy1 <= {self.rows}, got ({gy0}, {gy1})")
        shape = (gy1 - gy0, self.cols, self.k)
        if self._tree is None:
            return np.full(shape, -1, np.int32)
        x, y = group_centres(gy0, gy1, self.cols, self.group)
        q = np.stack([x.ravel(), y.ravel()], axis=1)
        _, idx = self._tree.query(q, k=self.k, distance_upper_bound=self.reach, workers=self.workers)
        idx = np.asarray(idx).reshape(len(q), self.k)
        idx = np.where(idx >= len(self.landed), -1, idx).astype(np.int32)
        return idx.reshape(shape)
