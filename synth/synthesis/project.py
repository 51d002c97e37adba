"""Projection of coded block vectors onto the target time.

A block of a field lives on the coded picture (time ``tc``) with its centre at ``c`` (luma samples,
sample centres at integer positions: a block covering samples ``x .. x+w-1`` has its centre at
``x + (w-1)/2``); its vector ``v`` (``(dx, dy) / 4`` luma samples, see `synth.field`) points to where
its content is on the reference (time ``tr``). Assuming motion at constant velocity, the content is
at time ``tau`` at

    p(tau) = c + v * (tau - tc) / (tr - tc).

At the target time ``T = past_time + t * (future_time - past_time)`` the block *lands* at ``p(T)``;
from there its content is found on the past picture at ``p(T) + d_past`` and on the future picture
at ``p(T) + d_future`` with

    d_past   = v * (past_time   - T) / (tr - tc),
    d_future = v * (future_time - T) / (tr - tc).

This holds whichever way the field was coded (future-to-past or past-to-future): only the signed
span ``tr - tc`` enters. Intra blocks carry no vector and are dropped. Landing spots may overlap
(several blocks) or leave holes (none); the candidate search (`synth.synthesis.candidates`) copes with both.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.timebase import check_t

__all__ = ["LandedVectors", "project_fields", "reference_times"]


@dataclass(frozen=True, eq=False)
class LandedVectors:
    """Vectors projected onto the target time (one entry per non-intra block of every field).

    Attributes
    ----------
    cx, cy : ndarray of float32, shape (n,)
        Landing centre at the target time, luma samples.
    bw, bh : ndarray of int32, shape (n,)
        Block size in luma samples.
    past_dx, past_dy : ndarray of float32, shape (n,)
        Displacement from a point at the target time to its past endpoint, luma samples.
    future_dx, future_dy : ndarray of float32, shape (n,)
        Displacement from a point at the target time to its future endpoint, luma samples.
    field : ndarray of int32, shape (n,)
        Index of the source field in the sequence given to `project_fields`.
    block : ndarray of int32, shape (n,)
        Index of the block within its field.
    past_time, future_time, target_time, t : float
        The times used.
    """

    cx: np.ndarray
    cy: np.ndarray
    bw: np.ndarray
    bh: np.ndarray
    past_dx: np.ndarray
    past_dy: np.ndarray
    future_dx: np.ndarray
    future_dy: np.ndarray
    field: np.ndarray
    block: np.ndarray
    past_time: float
    future_time: float
    target_time: float
    t: float

    def __len__(self) -> int:
        return len(self.cx)

    def take(self, index: np.ndarray) -> LandedVectors:
        """A subset (or reordering) of the landed vectors."""
        index = np.asarray(index)
        names = ("cx", "cy", "bw", "bh", "past_dx", "past_dy", "future_dx", "future_dy", "field", "block")
        return LandedVectors(
            *(getattr(self, n)[index] for n in names),
            past_time=self.past_time,
            future_time=self.future_time,
            target_time=self.target_time,
            t=self.t,
        )


def reference_times(fields: Sequence[VectorField]) -> tuple[float, float]:
    """Default (past_time, future_time): the earliest and latest time any field refers to."""
    times = [float(v) for f in fields for v in (f.coded_time, f.reference_time)]
    return min(times), max(times)


def _check_fields(fields) -> list[VectorField]:
    if isinstance(fields, VectorField):
        fields = [fields]
    fields = list(fields)
    if not fields:
        raise ParameterError("fields must hold at least one VectorField, got none")
    for i, f in enumerate(fields):
        if not isinstance(f, VectorField):
            raise ParameterError(f"fields[{i}] must be a VectorField, got {type(f).__name__}")
        if (f.width, f.height) != (fields[0].width, fields[0].height):
            raise ParameterError(
                f"fields[{i}] is for a {f.width}x{f.height} picture but fields[0] for "
                f"{fields[0].width}x{fields[0].height}"
            )
        for name in ("coded_time", "reference_time"):
            if not math.isfinite(float(getattr(f, name))):
                raise ParameterError(f"fields[{i}].{name} must be finite, got {getattr(f, name)!r}")
        if np.any(f.w <= 0) or np.any(f.h <= 0):
            raise ParameterError(f"fields[{i}] holds blocks of non-positive size")
    return fields


def project_fields(
    fields: Sequence[VectorField] | VectorField,
    *,
    past_time: float,
    future_time: float,
    t: float,
) -> LandedVectors:
    """Project every non-intra block of the fields onto the target time.

    Parameters
    ----------
    fields : VectorField or sequence of VectorField
        Fields coded in either direction between (or around) the two references.
    past_time, future_time : float
        Display times of the past and future references, ``past_time < future_time``.
    t : float
        Target time as a fraction in (0, 1) of the way from past to future.

    Returns
    -------
    LandedVectors

    Raises
    ------
    ParameterError
        On an empty or inconsistent field list, non-finite times, ``past_time >= future_time`` or
        ``t`` outside (0, 1).

    Notes
    -----
    Constant-velocity motion along each block's trajectory (the usual assumption of motion-compensated
    frame interpolation, e.g. B.-D. Choi et al., "Motion-compensated frame interpolation using
    bilateral motion estimation and adaptive overlapped block motion compensation", IEEE TCSVT 17(4),
    2007, doi:10.1109/TCSVT.2007.893835). Equations in the module docstring.
    """
    fields = _check_fields(fields)
    past_time, future_time, t = float(past_time), float(future_time), float(t)
    if not (math.isfinite(past_time) and math.isfinite(future_time)) or past_time >= future_time:
        raise ParameterError(
            f"past_time must be finite and before future_time, got past_time={past_time}, future_time={future_time}"
        )
    t = check_t(t)
    target = past_time + t * (future_time - past_time)
    parts = []
    for i, f in enumerate(fields):
        keep = ~f.intra
        span = float(f.reference_time) - float(f.coded_time)
        x = f.x[keep].astype(np.float64)
        y = f.y[keep].astype(np.float64)
        w = f.w[keep].astype(np.float64)
        h = f.h[keep].astype(np.float64)
        vx = f.dx[keep].astype(np.float64) / 4.0
        vy = f.dy[keep].astype(np.float64) / 4.0
        cx = x + (w - 1.0) / 2.0
        cy = y + (h - 1.0) / 2.0
        s_land = (target - float(f.coded_time)) / span
        s_past = (past_time - target) / span
        s_future = (future_time - target) / span
        parts.append(
            (
                cx + vx * s_land,
                cy + vy * s_land,
                f.w[keep],
                f.h[keep],
                vx * s_past,
                vy * s_past,
                vx * s_future,
                vy * s_future,
                np.full(int(keep.sum()), i, np.int32),
                np.flatnonzero(keep).astype(np.int32),
            )
        )
    cols = [np.concatenate([p[j] for p in parts]) for j in range(10)]
    f32 = [c.astype(np.float32) for c in cols[:2]]
    sizes = [c.astype(np.int32) for c in cols[2:4]]
    disp = [c.astype(np.float32) for c in cols[4:8]]
    return LandedVectors(
        *f32,
        *sizes,
        *disp,
        cols[8].astype(np.int32),
        cols[9].astype(np.int32),
        past_time=past_time,
        future_time=future_time,
        target_time=target,
        t=t,
    )
