"""The `VectorField` model: block motion vectors as an encoder codes them.

Sign convention (used everywhere in synth): a block whose top-left corner is at ``(x, y)`` on the
*coded* picture, with vector ``(dx, dy)`` in quarter-pel units, has its content at
``(x + dx/4, y + dy/4)`` on the *reference* picture. Positions and sizes are in luma samples.

Times are display times (picture numbers in display order, possibly fractional). A field points
from ``coded_time`` to ``reference_time``; either may be the earlier one. Blocks flagged ``intra``
carry no vector (their dx, dy are 0 and ignored).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError

__all__ = ["VectorField"]


@dataclass(frozen=True, eq=False)
class VectorField:
    """Block motion of one coded picture against one reference picture.

    Parameters
    ----------
    width, height : int
        Luma size of the coded picture (and of the reference).
    coded_time, reference_time : float
        Display times of the picture the blocks live on and of the picture the vectors point to.
    x, y, w, h : ndarray of int32, shape (n,)
        Block top-left corner and size in luma samples.
    dx, dy : ndarray of int32, shape (n,)
        Vectors in quarter-pel units (see the module docstring for the sign).
    intra : ndarray of bool, shape (n,)
        Blocks coded without a vector.
    gaps_allowed : bool
        True when the blocks are allowed to leave parts of the picture uncovered.
    """

    width: int
    height: int
    coded_time: float
    reference_time: float
    x: np.ndarray
    y: np.ndarray
    w: np.ndarray
    h: np.ndarray
    dx: np.ndarray
    dy: np.ndarray
    intra: np.ndarray
    gaps_allowed: bool = False

    def __post_init__(self) -> None:
        n = len(self.x)
        for name in ("x", "y", "w", "h", "dx", "dy", "intra"):
            a = getattr(self, name)
            if not isinstance(a, np.ndarray) or a.shape != (n,):
                raise ParameterError(f"VectorField.{name} must be a 1-D array of {n} entries")
        if self.coded_time == self.reference_time:
            raise ParameterError("a field's coded_time and reference_time must differ")

    def __len__(self) -> int:
        return len(self.x)

    @property
    def span(self) -> float:
        """reference_time - coded_time (signed)."""
        return float(self.reference_time) - float(self.coded_time)

    @classmethod
    def from_arrays(
        cls,
        *,
        width: int,
        height: int,
        coded_time: float,
        reference_time: float,
        x,
        y,
        w,
        h,
        dx,
        dy,
        intra=None,
        gaps_allowed: bool = False,
    ) -> VectorField:
        """Build a field from array-likes, broadcasting scalar sizes and casting dtypes."""
        x = np.asarray(x, dtype=np.int32).ravel()
        n = len(x)

        def col(v, dtype=np.int32):
            return np.broadcast_to(np.asarray(v, dtype=dtype), (n,)).copy()

        return cls(
            int(width),
            int(height),
            float(coded_time),
            float(reference_time),
            x,
            col(y),
            col(w),
            col(h),
            col(dx),
            col(dy),
            col(False if intra is None else intra, bool),
            gaps_allowed,
        )

    @classmethod
    def uniform_grid(
        cls, width: int, height: int, *, block: int, coded_time: float, reference_time: float, dx=0, dy=0
    ) -> VectorField:
        """A regular grid of square `block`-sized blocks covering the picture exactly.

        The picture size must be a multiple of `block`. ``dx``/``dy`` may be scalars or arrays of
        shape (rows, cols) in quarter-pel units.
        """
        if width % block or height % block:
            raise ParameterError(f"picture size {width}x{height} is not a multiple of block size {block}")
        rows, cols = height // block, width // block
        gy, gx = np.mgrid[0:rows, 0:cols]
        return cls.from_arrays(
            width=width,
            height=height,
            coded_time=coded_time,
            reference_time=reference_time,
            x=(gx * block).ravel(),
            y=(gy * block).ravel(),
            w=block,
            h=block,
            dx=np.broadcast_to(np.asarray(dx), (rows, cols)).ravel(),
            dy=np.broadcast_to(np.asarray(dy), (rows, cols)).ravel(),
        )
