"""Block trajectories between the two references, for the vector-based baselines.

A `VectorField` coded between the past and the future reference describes, for each block, a
straight trajectory: the content at block position x on the coded picture (normalised time s_c,
0 for the past reference, 1 for the future one) is at x + (dx, dy)/4 on the reference (time s_r),
per the sign convention of `synth.field`. Its velocity in luma samples per unit of normalised time
is ``v = (dx, dy) / 4 / (s_r - s_c)`` and at time t the block has moved to ``x + v (t - s_c)``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..errors import ParameterError
from ..field import VectorField

__all__ = ["LandedBlocks", "land_blocks"]


@dataclass(frozen=True)
class LandedBlocks:
    """Blocks of all fields moved along their trajectories to time t.

    Attributes
    ----------
    x, y : ndarray of float64, shape (n,)
        Top-left corner of each block at time t, in luma samples.
    w, h : ndarray of int32, shape (n,)
        Block sizes.
    vx, vy : ndarray of float64, shape (n,)
        Velocity (displacement from the past to the future reference), luma samples.
    """

    x: np.ndarray
    y: np.ndarray
    w: np.ndarray
    h: np.ndarray
    vx: np.ndarray
    vy: np.ndarray

    def __len__(self) -> int:
        return len(self.x)


def land_blocks(fields: Sequence[VectorField], *, t: float, width: int, height: int) -> LandedBlocks:
    """Move every non-intra block of `fields` along its trajectory to normalised time `t`.

    Parameters
    ----------
    fields : sequence of VectorField
        Fields coded between the same two pictures, in either direction.
    t : float
        Target time, 0 at the earlier picture and 1 at the later one.
    width, height : int
        Picture size the fields must match.

    Raises
    ------
    ParameterError
        When a field's size differs from the pictures or the fields span different picture pairs.
    """
    if not fields:
        raise ParameterError("fields must hold at least one VectorField")
    spans = {(min(f.coded_time, f.reference_time), max(f.coded_time, f.reference_time)) for f in fields}
    if len(spans) != 1:
        raise ParameterError(f"all fields must be coded between the same two pictures, got time pairs {sorted(spans)}")
    t_past, t_future = spans.pop()
    parts = []
    for f in fields:
        if (f.width, f.height) != (width, height):
            raise ParameterError(
                f"vector field is {f.width}x{f.height} but the pictures are {width}x{height}"
            )
        s_c = (f.coded_time - t_past) / (t_future - t_past)
        s_r = (f.reference_time - t_past) / (t_future - t_past)
        keep = ~f.intra
        vx = f.dx[keep].astype(np.float64) / 4.0 / (s_r - s_c)
        vy = f.dy[keep].astype(np.float64) / 4.0 / (s_r - s_c)
        parts.append(
            (
                f.x[keep] + vx * (t - s_c),
                f.y[keep] + vy * (t - s_c),
                f.w[keep],
                f.h[keep],
                vx,
                vy,
            )
        )
    cols = [np.concatenate([p[i] for p in parts]) for i in range(6)]
    if not np.all(np.isfinite(cols[4])) or not np.all(np.isfinite(cols[5])):
        raise ParameterError("vector field holds non-finite vectors")
    return LandedBlocks(cols[0], cols[1], cols[2].astype(np.int32), cols[3].astype(np.int32), cols[4], cols[5])
