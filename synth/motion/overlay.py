"""Drawing a vector field over its coded picture: the one style of every vector overlay synth draws
(`synth vectors --overlay`, the report pages), with a legend (matplotlib, Agg canvas, no pyplot state).

What is drawn:

- the coded picture's luma in grey, magnified like the maps of `synth frame --maps` (small pictures
  enlarged to at least `MIN_WIDTH` pixels);
- every block's outline, thin and light;
- intra blocks filled in reddish purple (Okabe-Ito palette: M. Okabe and K. Ito, "Color Universal
  Design (CUD)", J*Fly, 2008), with a legend entry;
- one arrow per inter block with a non-zero vector, from the block centre towards where the block's
  content lies on the reference picture (the sign convention of :mod:`synth.field`): its direction
  is the vector's, its length the vector's length times the drawing gain (an integer, stated in the
  legend), and its colour the vector's length in luma samples on a perceptually uniform colour map
  (viridis without its darkest quarter, so arrows stand out on the dimmed picture; S. van der Walt
  and N. Smith, SciPy 2015), explained by a colour bar; zero vectors as small grey dots;
- a key arrow of a round length in luma samples, so lengths can be read off.

The legend (entries, colour bar, key arrow) sits in a panel right of the picture, never over it. The layout is fixed (`overlay_size`),
so the same field gives the same bytes.
"""

from __future__ import annotations

import io as _stdio
import math

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture

__all__ = ["overlay_figure", "overlay_png", "overlay_size", "arrow_gain"]

#: Pictures narrower than this are enlarged by an integer factor (pixels).
MIN_WIDTH = 480
#: Pictures wider than this are drawn reduced (pixels).
MAX_WIDTH = 1920
TITLE_PX = 44
LEGEND_PX = 190
MARGIN_PX = 8
#: At most this many arrows (a deterministic subset in block order beyond it).
MAX_ARROWS = 2500
_DPI = 100
INTRA_COLOUR = "#CC79A7"  # Okabe-Ito reddish purple
OUTLINE_COLOUR = "#E6E6E6"
ZERO_COLOUR = "#BBBBBB"
LENGTH_CMAP = "viridis"


def _scale(width: int) -> float:
    if width < MIN_WIDTH:
        return float(math.ceil(MIN_WIDTH / width))
    if width > MAX_WIDTH:
        return MAX_WIDTH / width
    return 1.0


def overlay_size(height: int, width: int) -> tuple[int, int]:
    """(height, width) in pixels of the PNG of an overlay on a ``height`` x ``width`` picture."""
    s = _scale(width)
    return int(round(height * s)) + TITLE_PX + 2 * MARGIN_PX, int(round(width * s)) + LEGEND_PX + 2 * MARGIN_PX


def arrow_gain(field: VectorField) -> int:
    """Drawing gain of the arrows: 1 unless the vectors are short against the blocks, then the
    integer (at most 8) that draws the 90th-percentile vector about 3/4 of a median block long."""
    inter = ~field.intra & ((field.dx != 0) | (field.dy != 0))
    if not inter.any():
        return 1
    length = np.hypot(field.dx[inter], field.dy[inter]) / 4.0
    typical = float(np.percentile(length, 90))
    block = float(np.median(np.minimum(field.w, field.h)))
    if typical <= 0:
        return 1
    return int(np.clip(math.floor(0.75 * block / typical), 1, 8))


def _key_length(field: VectorField, *, px_per_sample: float, max_px: float = 90.0) -> float:
    """A round length (luma samples) near the 90th-percentile vector for the key arrow, at most
    `max_px` pixels long as drawn."""
    inter = ~field.intra & ((field.dx != 0) | (field.dy != 0))
    typical = float(np.percentile(np.hypot(field.dx[inter], field.dy[inter]) / 4.0, 90)) if inter.any() else 1.0
    rounds = (0.25, 0.5, 1, 2, 4, 8, 16, 32, 64, 128, 256, 512)
    fits = [v for v in rounds if v * px_per_sample <= max_px] or [0.25]
    for v in fits:
        if v >= typical * 0.75:
            return float(v)
    return float(fits[-1])


def overlay_figure(picture: Picture | np.ndarray, field: VectorField, *, title: str, bit_depth: int | None = None):
    """A matplotlib Figure of `field` over its coded picture (module docstring for what is drawn).

    Parameters
    ----------
    picture : Picture or ndarray (height, width)
        The coded picture of the field (its luma is drawn), or a luma plane.
    field : VectorField
    title : str
    bit_depth : int, optional
        Bit depth of a luma plane given as an array (default: 8 for uint8, else its maximum value's).

    Returns
    -------
    matplotlib.figure.Figure
        Axes: the picture, the legend panel and the colour bar (vector length).

    Raises
    ------
    ParameterError
        Field and picture sizes differ.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import LineCollection, PatchCollection
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch, Rectangle

    if isinstance(picture, Picture):
        luma, top = picture.y, picture.max_value
    else:
        luma = np.asarray(picture)
        if luma.ndim != 2:
            raise ParameterError(f"the picture must be a Picture or a 2-D luma plane, got shape {luma.shape}")
        depth = bit_depth or (8 if luma.dtype == np.uint8 else max(8, int(np.ceil(np.log2(float(luma.max()) + 1)))))
        top = (1 << depth) - 1
    H, W = luma.shape
    if (field.width, field.height) != (W, H):
        raise ParameterError(f"field is for {field.width}x{field.height} pictures, the picture is {W}x{H}")
    fig_h, fig_w = overlay_size(H, W)
    s = _scale(W)
    img_w, img_h = int(round(W * s)), int(round(H * s))
    fig = Figure(figsize=(fig_w / _DPI, fig_h / _DPI), dpi=_DPI)
    FigureCanvasAgg(fig)
    left, bottom = MARGIN_PX / fig_w, MARGIN_PX / fig_h
    ax = fig.add_axes((left, bottom, img_w / fig_w, img_h / fig_h))
    # the picture dimmed into the middle greys, so light and dark arrows both stand out
    ax.imshow(
        luma,
        cmap="gray",
        vmin=-0.35 * top,
        vmax=1.35 * top,
        interpolation="nearest",
        extent=(0, W, H, 0),
        aspect="auto",
    )
    ax.set_xlim(0, W)
    ax.set_ylim(H, 0)
    ax.set_xticks([])
    ax.set_yticks([])
    x, y, w, h = (np.asarray(a, np.float64) for a in (field.x, field.y, field.w, field.h))
    intra = np.asarray(field.intra, bool)
    # outlines: the top and left edge of every block (neighbours draw the others), plus the frame
    segs = np.concatenate(
        [
            np.stack([np.stack([x, y], 1), np.stack([x + w, y], 1)], 1),
            np.stack([np.stack([x, y], 1), np.stack([x, y + h], 1)], 1),
        ]
    )
    ax.add_collection(LineCollection(segs, colors=OUTLINE_COLOUR, linewidths=0.4, alpha=0.45))
    if intra.any():
        rects = [Rectangle((a, b), c, d) for a, b, c, d in zip(x[intra], y[intra], w[intra], h[intra])]
        ax.add_collection(PatchCollection(rects, facecolor=INTRA_COLOUR, edgecolor="none", alpha=0.45))
    dx, dy = np.asarray(field.dx, np.float64) / 4.0, np.asarray(field.dy, np.float64) / 4.0
    moving = ~intra & ((dx != 0) | (dy != 0))
    still = ~intra & ~moving
    cx, cy = x + w / 2.0, y + h / 2.0
    if still.any():
        ax.scatter(cx[still], cy[still], s=1.5, c=ZERO_COLOUR, linewidths=0)
    idx = np.flatnonzero(moving)
    if len(idx) > MAX_ARROWS:
        idx = idx[:: int(math.ceil(len(idx) / MAX_ARROWS))]
    gain = arrow_gain(field)
    key = _key_length(field, px_per_sample=gain * s)
    length = np.hypot(dx, dy)
    top_len = max(key, float(np.percentile(length[moving], 99))) if moving.any() else key
    import matplotlib
    from matplotlib.colors import ListedColormap, Normalize

    cmap = ListedColormap(matplotlib.colormaps[LENGTH_CMAP](np.linspace(0.25, 1.0, 192)))
    norm = Normalize(vmin=0.0, vmax=top_len)
    q = None
    if len(idx):
        q = ax.quiver(
            cx[idx], cy[idx], dx[idx] * gain, dy[idx] * gain, length[idx], cmap=cmap, norm=norm,
            angles="xy", scale_units="xy", scale=1.0, width=2.2 / img_w, headwidth=3.2, headlength=3.6,
            headaxislength=3.2, minlength=0.5, edgecolor="#101010", linewidth=0.4,
        )  # fmt: skip
    fig.text(left, 1 - MARGIN_PX / fig_h, title, fontsize=11, va="top", ha="left")
    fig.text(
        left, 1 - (MARGIN_PX + 20) / fig_h,
        f"{len(field)} blocks, {int(intra.sum())} intra, {int(moving.sum())} moving; "
        f"arrows point to the content on picture {field.reference_time:g}",
        fontsize=9, va="top", ha="left", color="#444444",
    )  # fmt: skip
    # legend panel: entries at the top, the key arrow under them, the length colour bar below
    panel_x = (MARGIN_PX + img_w + 14) / fig_w
    lax = fig.add_axes((panel_x, bottom + (img_h - 70) / fig_h, (LEGEND_PX - 20) / fig_w, 70 / fig_h))
    lax.axis("off")
    handles = [
        Patch(facecolor=INTRA_COLOUR, alpha=0.6, label="intra block"),
        Line2D([], [], color="#999999", linewidth=1.0, label="block outline"),
        Line2D([], [], marker="o", linestyle="none", color=ZERO_COLOUR, markersize=3, label="zero vector"),
    ]
    lax.legend(handles=handles, loc="upper left", fontsize=8, frameon=False, borderaxespad=0)
    if q is not None:
        label = f"{key:g} samples" + (f" (arrows drawn x{gain})" if gain > 1 else "")
        ax.quiverkey(
            q, panel_x + (key * gain * s + 4) / fig_w, bottom + (img_h - 86) / fig_h, key * gain, label,
            coordinates="figure",
            labelpos="E", color="#202020", fontproperties={"size": 8},
        )  # fmt: skip
    bar_h = max(img_h - 130, 40)
    cax = fig.add_axes((panel_x, bottom, 14 / fig_w, bar_h / fig_h))
    from matplotlib.cm import ScalarMappable

    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax)
    bar.ax.tick_params(labelsize=8)
    bar.set_label("length, samples" if bar_h < 200 else "vector length, luma samples", fontsize=8 if bar_h < 200 else 9)
    return fig


def overlay_png(
    picture: Picture | np.ndarray, field: VectorField, *, title: str, bit_depth: int | None = None
) -> bytes:
    """PNG bytes of `overlay_figure` (no software version in the metadata: same input, same bytes).

    Examples
    --------
    >>> import numpy as np
    >>> from synth.field import VectorField
    >>> f = VectorField.from_arrays(width=64, height=32, coded_time=1, reference_time=0, x=[0, 32], y=[0, 0],
    ...                             w=32, h=32, dx=[8, 0], dy=[0, -4])
    >>> overlay_png(np.zeros((32, 64), np.uint8), f, title="demo")[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
    True
    """
    fig = overlay_figure(picture, field, title=title, bit_depth=bit_depth)
    buf = _stdio.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, metadata={"Software": None})
    return buf.getvalue()
