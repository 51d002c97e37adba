"""Calibration: fitting the synthesiser's parameters and its learned reliability on training clips.

(module under construction; see `calibrate`.)
"""

from __future__ import annotations

import numpy as np

from .candidate_stack import CandidateStack
from .errors import ParameterError
from .reliability import MotionMaps, predict_log_variance, side_cues, side_weights

__all__ = ["stack_groups", "stack_side_cues", "learned_estimate"]


def _to_groups(a: np.ndarray, g: int) -> np.ndarray:
    """(..., H, W) -> (..., g*g, G) in the synthesiser's layout (pixels of a group row-major,
    groups row-major); H and W are padded up to multiples of g by edge replication."""
    *lead, H, W = a.shape
    Hp, Wp = -(-H // g) * g, -(-W // g) * g
    if (Hp, Wp) != (H, W):
        pad = [(0, 0)] * len(lead) + [(0, Hp - H), (0, Wp - W)]
        a = np.pad(a, pad, mode="edge")
    a = a.reshape(*lead, Hp // g, g, Wp // g, g)
    a = np.moveaxis(a, (-3, -1), (-4, -3))
    return a.reshape(*lead, g * g, (Hp // g) * (Wp // g))


def _from_groups(a: np.ndarray, H: int, W: int, g: int) -> np.ndarray:
    *lead, M, G = a.shape
    Hp, Wp = -(-H // g) * g, -(-W // g) * g
    a = a.reshape(*lead, g, g, Hp // g, Wp // g)
    a = np.moveaxis(a, (-4, -3), (-3, -1))
    return a.reshape(*lead, Hp, Wp)[..., :H, :W]


def stack_groups(stack: CandidateStack):
    """Per-group views of a stack: a dict of arrays in the (K, M, G) / (K, G) layout."""
    g = stack.group
    K, H, W = stack.past.shape
    col = lambda name: _to_groups(stack.column(name), g)[:, 0, :]  # noqa: E731 (constant over a group)
    x, y = stack.pixel_grid()
    return {
        "past": _to_groups(stack.past, g),
        "future": _to_groups(stack.future, g),
        "share": _to_groups(stack.share, g),
        "valid": _to_groups(stack.valid, g)[:, 0, :],
        "x": _to_groups(x, g),
        "y": _to_groups(y, g),
        "dpx": col("past_dx"),
        "dpy": col("past_dy"),
        "dfx": col("future_dx"),
        "dfy": col("future_dy"),
        "dist": _to_groups(np.where(stack.valid, stack.footprint_distance(), 0), g),
        "agreement": col("rho01"),
        "field": _to_groups(stack.column("field", -1), g)[:, 0, :].astype(np.int64),
        "colocated": _to_groups(stack.colocated, g),
    }


def stack_side_cues(stack: CandidateStack, fields) -> tuple[np.ndarray, dict]:
    """Cues of every side observation of a stack, shape (2, K, M, G, n_cues), and the group views."""
    gv = stack_groups(stack)
    lv = stack.landed
    H, W = stack.shape
    maps = MotionMaps.from_fields(fields, past_time=lv.past_time, future_time=lv.future_time, height=H, width=W)
    on_future = np.array([float(f.coded_time) == float(lv.future_time) for f in fields])
    home_future = on_future[np.maximum(gv["field"], 0)]
    scale = np.float32(1.0 / (1 << (stack.bit_depth - 8)))
    cues = side_cues(
        gv["past"] * scale, gv["future"] * scale, gv["share"], gv["valid"],
        x=gv["x"], y=gv["y"], dpx=gv["dpx"], dpy=gv["dpy"], dfx=gv["dfx"], dfy=gv["dfy"],
        dist=gv["dist"], agreement=gv["agreement"], home_future=home_future, maps=maps,
    )  # fmt: skip
    return cues, gv


def learned_estimate(stack: CandidateStack, fields, coefficients) -> np.ndarray:
    """Luma estimate of the learned-reliability estimator on a stack (unrounded, (H, W))."""
    cues, gv = stack_side_cues(stack, fields)
    g = predict_log_variance(cues, coefficients)
    a, b, _ = side_weights(g, gv["valid"], gv["share"])
    est = (a * gv["past"] + b * gv["future"]).sum(axis=0)
    has = gv["valid"].any(axis=0)[None, :]
    est = np.where(has, est, gv["colocated"])
    H, W = stack.shape
    return _from_groups(est, H, W, stack.group)
