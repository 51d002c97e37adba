"""Per-pixel maps as PNG figures one can read: the map at its own resolution, a title, a colour bar
and the unit (matplotlib, Agg canvas, no pyplot state).

Every map a maker returns has a style here (`MAP_STYLES`: title, unit, colour map, range); a map
without one gets a generic style named after it. Error maps (``predicted_error``, ``abs_error``)
share one colour map and, when drawn together (`error_scale`), one range, so the predicted and the
measured error can be compared by eye. Colour maps are perceptually uniform (viridis, cividis,
magma; S. van der Walt and N. Smith, "A better default colormap for Matplotlib", SciPy 2015; J. R.
Nuñez, C. R. Anderton and R. S. Renslow, "Optimizing colormaps with consideration for color vision
deficiency", PLOS ONE 13(7), 2018, doi:10.1371/journal.pone.0199239 for cividis); the share of the
past reference, whose middle (0.5) means "both", takes a diverging map (PuOr, from C. A. Brewer's
ColorBrewer schemes, colour-blind safe).

Layout (fixed, so the same map gives the same bytes and a known size): the map drawn at an integer
magnification (small pictures are enlarged to at least `MIN_WIDTH` pixels, nearest neighbour), a
title band of `TITLE_PX` pixels above it, the colour bar and its label in `BAR_PX` pixels to its
right, `MARGIN_PX` around. The PNG is ``(width * s + BAR_PX + 2 * MARGIN_PX)`` by ``(height * s +
TITLE_PX + 2 * MARGIN_PX)`` pixels (`figure_size`); pictures wider than `MAX_WIDTH` are reduced by
an integer factor (block averages) instead.
"""

from __future__ import annotations

import io as _stdio
import math
from dataclasses import dataclass

import numpy as np

from synth.errors import ParameterError

__all__ = [
    "MapStyle",
    "MAP_STYLES",
    "style_for",
    "error_scale",
    "figure_size",
    "map_figure",
    "map_png",
]

#: Pictures narrower than this are enlarged by an integer factor (pixels).
MIN_WIDTH = 480
#: Pictures wider than this are reduced by an integer factor (pixels).
MAX_WIDTH = 1920
TITLE_PX = 44
BAR_PX = 120
MARGIN_PX = 8
_DPI = 100


@dataclass(frozen=True)
class MapStyle:
    """How one map is drawn.

    Attributes
    ----------
    title : str
    unit : str
        Label of the colour bar (quantity and unit).
    cmap : str
        A matplotlib colour map name.
    vmin : float
    vmax : float or None
        None: the 99.5th percentile of the map (at least vmin + 1e-6); values above saturate and
        the colour bar gets an arrow.
    discrete : bool
        Integer-valued map (counts, flags): the colour bar has one colour per value.
    """

    title: str
    unit: str
    cmap: str = "viridis"
    vmin: float = 0.0
    vmax: float | None = None
    discrete: bool = False


#: Styles of the maps synth's makers return (and of the measured error `synth frame` adds).
MAP_STYLES: dict[str, MapStyle] = {
    "predicted_error": MapStyle("Predicted RMS error of the synthesis (luma)", "code values (8-bit)", "magma"),
    "abs_error": MapStyle("Absolute error against the true picture (luma)", "code values (8-bit)", "magma"),
    "posterior_variance": MapStyle(
        "Posterior variance of the estimator s\u00b2(1 \u2212 r\u1d40R\u207b\u00b9r)",
        "code values\u00b2 (8-bit)",
        "magma",
    ),
    "endpoint_mismatch": MapStyle(
        "Mismatch of the candidates' past and future samples",
        "mean squared difference, code values\u00b2 (8-bit)",
        "magma",
    ),
    "confidence": MapStyle(
        "Confidence r\u1d40R\u207b\u00b9r of the correlation model",
        "share of the variance explained",
        "cividis",
        0.0,
        1.0,
    ),
    "past_weight": MapStyle(
        "Share of the past reference in the estimate", "weight (0.5: both equally)", "PuOr", 0.0, 1.0
    ),
    "candidates": MapStyle("Candidate vectors per pixel (0: hole)", "candidates", "cividis", 0.0, None, True),
    "occluded_in_future": MapStyle(
        "Occluded in the future reference", "1: future sample dropped", "cividis", 0.0, 1.0, True
    ),
    "occluded_in_past": MapStyle("Occluded in the past reference", "1: past sample dropped", "cividis", 0.0, 1.0, True),
    "block_vector_distance": MapStyle("Distance between the vectors of neighbouring blocks", "luma samples", "viridis"),
}


def style_for(name: str) -> MapStyle:
    """The style of map `name` (a generic one, titled after the name, for a map without a style)."""
    if name in MAP_STYLES:
        return MAP_STYLES[name]
    return MapStyle(name.replace("_", " ").capitalize(), "value")


def error_scale(*maps: np.ndarray) -> float:
    """One colour-bar top for error maps drawn side by side: the 99.5th percentile of all of them
    (at least 1 code value)."""
    vals = [np.asarray(m, np.float64).ravel() for m in maps if m is not None and np.size(m)]
    if not vals:
        return 1.0
    return max(1.0, float(np.percentile(np.concatenate(vals), 99.5)))


def _magnification(width: int) -> tuple[int, int]:
    """(up, down): integer enlargement and reduction factors for a picture `width` wide."""
    if width < MIN_WIDTH:
        return math.ceil(MIN_WIDTH / width), 1
    if width > MAX_WIDTH:
        return 1, math.ceil(width / MAX_WIDTH)
    return 1, 1


def figure_size(height: int, width: int) -> tuple[int, int]:
    """(height, width) in pixels of the PNG of a ``height`` x ``width`` map."""
    up, down = _magnification(width)
    h, w = -(-height // down) * up, -(-width // down) * up
    return h + TITLE_PX + 2 * MARGIN_PX, w + BAR_PX + 2 * MARGIN_PX


def _reduce(a: np.ndarray, down: int) -> np.ndarray:
    if down == 1:
        return a
    H, W = a.shape
    pad = ((0, -H % down), (0, -W % down))
    b = np.pad(a, pad, mode="edge")
    return b.reshape(b.shape[0] // down, down, b.shape[1] // down, down).mean(axis=(1, 3))


def map_figure(values: np.ndarray, *, name: str, title: str | None = None, vmax: float | None = None, note: str = ""):
    """A matplotlib Figure of one map (see the module docstring for the layout).

    Parameters
    ----------
    values : ndarray, 2-D
        The map (luma grid), finite values.
    name : str
        The map's name (its style: `style_for`).
    title : str, optional
        Replaces the style's title.
    vmax : float, optional
        Top of the colour bar (e.g. `error_scale` shared by several maps).
    note : str
        A second, smaller title line (e.g. the picture and the mean value).

    Returns
    -------
    matplotlib.figure.Figure
        With two axes: the map and the colour bar.

    Raises
    ------
    ParameterError
        A map that is not a non-empty 2-D array of finite numbers.
    """
    from matplotlib.colors import BoundaryNorm, Normalize
    from matplotlib.figure import Figure

    a = np.asarray(values, dtype=np.float64)
    if a.ndim != 2 or a.size == 0 or not np.all(np.isfinite(a)):
        raise ParameterError(f"map {name!r} must be a non-empty 2-D array of finite numbers, got shape {a.shape}")
    style = style_for(name)
    H, W = a.shape
    up, down = _magnification(W)
    shown = _reduce(a, down)
    fig_h, fig_w = figure_size(H, W)
    img_h, img_w = shown.shape[0] * up, shown.shape[1] * up
    top = style.vmax if style.vmax is not None else vmax
    if top is None:
        top = float(np.percentile(a, 99.5)) if not style.discrete else float(a.max())
    top = max(top, style.vmin + (1.0 if style.discrete else 1e-6))
    fig = Figure(figsize=(fig_w / _DPI, fig_h / _DPI), dpi=_DPI)
    left, bottom = MARGIN_PX / fig_w, MARGIN_PX / fig_h
    ax = fig.add_axes((left, bottom, img_w / fig_w, img_h / fig_h))
    if style.discrete:
        levels = np.arange(math.floor(style.vmin), math.floor(top) + 2) - 0.5
        import matplotlib

        cmap = matplotlib.colormaps[style.cmap].resampled(len(levels) - 1)
        norm = BoundaryNorm(levels, cmap.N)
    else:
        cmap, norm = style.cmap, Normalize(vmin=style.vmin, vmax=top)
    im = ax.imshow(shown, cmap=cmap, norm=norm, interpolation="nearest", aspect="auto")
    ax.set_xticks([])
    ax.set_yticks([])
    for spine in ax.spines.values():
        spine.set_visible(False)
    heading = title or style.title
    fig.text(left, 1 - MARGIN_PX / fig_h, heading, fontsize=11, va="top", ha="left")
    if note:
        fig.text(left, 1 - (MARGIN_PX + 20) / fig_h, note, fontsize=9, va="top", ha="left", color="#444444")
    bar_x = (MARGIN_PX + img_w + 12) / fig_w
    cax = fig.add_axes((bar_x, bottom, 16 / fig_w, img_h / fig_h))
    extend = "max" if (not style.discrete and style.vmax is None and float(a.max()) > top) else "neither"
    bar = fig.colorbar(im, cax=cax, extend=extend)
    if style.discrete:
        ticks = np.arange(math.floor(style.vmin), math.floor(top) + 1)
        step = max(1, len(ticks) // 8)
        bar.set_ticks(ticks[::step])
    bar.ax.tick_params(labelsize=8)
    bar.set_label(style.unit, fontsize=9)
    return fig


def map_png(
    values: np.ndarray, *, name: str, title: str | None = None, vmax: float | None = None, note: str = ""
) -> bytes:
    """PNG bytes of `map_figure` (no software version in the metadata: same map, same bytes)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig = map_figure(values, name=name, title=title, vmax=vmax, note=note)
    FigureCanvasAgg(fig)
    buf = _stdio.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, metadata={"Software": None})
    return buf.getvalue()
