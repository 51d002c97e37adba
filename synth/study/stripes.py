"""Bounded-memory synthesis of large pictures in horizontal stripes.

A 3840x2160 picture holds 8.3 million pixels; per-pixel estimator state (K candidates, K x K
systems in float32) for all of them at once would need several gigabytes. Processing the picture in
horizontal stripes bounds that state by the stripe's size, while the inputs and the output stay
whole (a few tens of megabytes).

Bit-identity with whole-picture processing rests on one property: every output pixel is a
function of the inputs that does not depend on which other output pixels are computed in the same
call. Two ways to obtain it:

* `synthesise_striped` relies on the synthesiser's ``rows=(y0, y1)`` argument, which computes only
  those luma rows (and the matching chroma rows) from the *whole* reference pictures, so each
  stripe sees every input row it may reach and no overlap has to be cut out by hand.
* `run_striped` is the general overlap-save scheme for functions that only accept a cropped input:
  each stripe is computed from its rows plus a halo of `halo` rows above and below (the function's
  vertical reach), and only the stripe's own rows of the result are kept. Where the crop meets the
  picture's true top or bottom, no halo is added, so border handling is the whole picture's.

Stripe boundaries are multiples of `align` (the chroma format's vertical subsampling factor), so a
luma stripe always maps to whole chroma rows.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Sequence

import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["plan_stripes", "run_striped", "synthesise_striped", "DEFAULT_STRIPE_ROWS"]

#: Default stripe height in luma rows (about 2 million pixels of a 3840-wide picture).
DEFAULT_STRIPE_ROWS = 512


def plan_stripes(height: int, *, stripe_rows: int, align: int = 1) -> list[tuple[int, int]]:
    """Split rows ``0..height`` into consecutive stripes ``(y0, y1)`` (y1 exclusive).

    Parameters
    ----------
    height : int
        Rows to cover (> 0).
    stripe_rows : int
        Rows per stripe (> 0); rounded down to a multiple of `align` (at least `align`). The last
        stripe takes what is left.
    align : int
        Every boundary except the picture's bottom is a multiple of this (2 for 4:2:0).

    Raises
    ------
    ParameterError
        On a non-positive height, stripe height or alignment.
    """
    for name, value in (("height", height), ("stripe_rows", stripe_rows), ("align", align)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value <= 0:
            raise ParameterError(f"{name}: expected a positive integer, got {value!r}")
    step = max(align, stripe_rows - stripe_rows % align)
    return [(y0, min(y0 + step, height)) for y0 in range(0, height, step)]


def run_striped(
    fn: Callable[[int, int], np.ndarray],
    height: int,
    *,
    stripe_rows: int,
    halo: int,
    align: int = 1,
) -> np.ndarray:
    """Overlap-save striping of a function whose output row depends on input rows within `halo`.

    Parameters
    ----------
    fn : callable
        ``fn(a0, a1) -> ndarray``: the result computed from input rows ``a0..a1`` alone (the caller
        crops its inputs to those rows), with ``a1 - a0`` rows.
    height : int
        Rows of the whole result.
    stripe_rows : int
        Output rows per stripe.
    halo : int
        Vertical reach of `fn` in rows (>= 0): output row y depends on input rows y - halo .. y + halo
        only. Each stripe is computed with this many extra rows on each side (clipped at the
        picture's edges) and cut back to its own rows.
    align : int
        Stripe boundaries are multiples of this.

    Returns
    -------
    ndarray
        The rows of every stripe, stacked: equal to ``fn(0, height)`` when `halo` covers the reach.
    """
    if isinstance(halo, bool) or not isinstance(halo, (int, np.integer)) or halo < 0:
        raise ParameterError(f"halo: expected an integer >= 0, got {halo!r}")
    out: np.ndarray | None = None
    for y0, y1 in plan_stripes(height, stripe_rows=stripe_rows, align=align):
        a0, a1 = max(0, y0 - halo), min(height, y1 + halo)
        part = np.asarray(fn(a0, a1))
        if part.shape[0] != a1 - a0:
            raise ParameterError(f"fn: returned {part.shape[0]} rows for input rows {a0}..{a1}, expected {a1 - a0}")
        if out is None:
            out = np.empty((height,) + part.shape[1:], dtype=part.dtype)
        out[y0:y1] = part[y0 - a0 : y1 - a0]
    return out  # type: ignore[return-value]  # plan_stripes never returns an empty plan


def _core_synthesise():
    try:
        import synth

        fn = synth.synthesise
    except (ImportError, AttributeError):
        return None
    try:
        if "rows" not in inspect.signature(fn).parameters:
            return None
    except (TypeError, ValueError):
        return None
    return fn


def synthesise_striped(
    past: Picture,
    future: Picture,
    fields: Sequence | object,
    *,
    t: float,
    params=None,
    stripe_rows: int = DEFAULT_STRIPE_ROWS,
) -> Picture:
    """Synthesise the picture at time `t` stripe by stripe; identical to the whole-picture result.

    Parameters
    ----------
    past, future : Picture
        The two references (whole pictures; each stripe may reach any of their rows).
    fields
        Vector field(s) coded between the references, as `synth.synthesise` takes them.
    t : float
        Target time in [0, 1] as a fraction between the references.
    params : optional
        Estimator parameters, as `synth.synthesise` takes them.
    stripe_rows : int
        Luma rows per stripe (rounded to the chroma grid); smaller stripes use less memory.

    Returns
    -------
    Picture

    Raises
    ------
    ParameterError
        When the synthesiser of this installation does not offer ``rows=`` (not available yet), or
        on a bad stripe height.

    Notes
    -----
    Each stripe calls ``synth.synthesise(past, future, fields, t=t, params=params, rows=(y0, y1))``,
    whose per-pixel results do not depend on the striping, and copies the stripe's luma rows and the
    corresponding chroma rows into the output. Peak memory is the inputs, the output and one stripe's
    working state (see ``tests/benchmarks/stripes_memory.py``).
    """
    core = _core_synthesise()
    if core is None:
        raise ParameterError(
            "synthesise_striped: synth.synthesise with rows= is not available yet in this installation (issue 4)"
        )
    _, fy = past.chroma_factors if past.chroma_format != "mono" else (1, 1)
    height = past.height
    planes: list[np.ndarray] | None = None
    for y0, y1 in plan_stripes(height, stripe_rows=stripe_rows, align=fy):
        part = core(past, future, fields, t=t, params=params, rows=(y0, y1))
        part = part[0] if isinstance(part, tuple) else part
        if planes is None:
            planes = [
                np.empty((height if i == 0 else -(-height // fy),) + p.shape[1:], p.dtype)
                for i, p in enumerate(part.planes)
            ]
        for i, p in enumerate(part.planes):  # type: ignore[union-attr]
            f = 1 if i == 0 else fy
            r0, r1 = y0 // f, -(-y1 // f)
            # The core returns either just the stripe's rows or a whole-height picture.
            src = p if p.shape[0] == r1 - r0 else p[r0:r1]
            planes[i][r0:r1] = src
    if past.chroma_format == "mono":
        return Picture(planes[0], None, None, "mono", past.bit_depth)
    return Picture(planes[0], planes[1], planes[2], past.chroma_format, past.bit_depth)
