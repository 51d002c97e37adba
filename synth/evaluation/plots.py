"""Report figures (matplotlib, Agg backend) and the arrays of the pictures a report shows.

Figure functions take results and return a matplotlib figure; the page writer saves it
(`synth.evaluation.page_style.ImageFolder.figure`), so nothing is shown or written here. Colours
are the Okabe-Ito palette of `synth.evaluation.page_style`, legends sit outside the data, and text
is sized for the figure's displayed width (about 900 pixels).
"""

from __future__ import annotations

from collections.abc import Sequence

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from synth.evaluation.page_style import legend_outside, method_styles, style_axes  # noqa: E402

__all__ = [
    "difference_plot",
    "difference_per_picture",
    "mean_psnr_by_group",
    "vector_qp_degradation",
    "grey_picture",
    "error_colours",
    "difference_colours",
    "largest_difference_window",
    "ERROR_COLORMAP",
    "DIFFERENCE_COLORMAP",
]

#: Colour map of absolute errors (perceptually uniform, readable in grey) and of signed
#: differences (diverging, blue = the method is better).
ERROR_COLORMAP = "viridis"
DIFFERENCE_COLORMAP = "RdBu"


def difference_plot(
    rows: Sequence[dict], methods: Sequence[str], *, baseline: str, groups: Sequence, group_label: str, title: str = ""
):
    """Mean PSNR-YUV difference to the baseline with its 95 % interval, per group and method.

    Groups are categories on the x axis (gap, layer, clip or 'all'); each method is a marker with
    an error bar, side by side within a group, never joined by lines; the zero line is the baseline.

    Parameters
    ----------
    rows : sequence of dict
        `synth.evaluation.differences.difference_rows` entries (``group``, ``method``,
        ``mean_difference``, ``ci_low``, ``ci_high``).
    methods : sequence of str
        Methods in legend order (the baseline is skipped).
    groups : sequence
        Group values in x order.
    """
    shown = [m for m in methods if m != baseline and any(r["method"] == m for r in rows)]
    styles = method_styles(list(methods))
    width = max(6.5, min(11.0, 2.8 + 0.9 * len(groups) * max(1, len(shown)) * 0.35))
    fig, ax = plt.subplots(figsize=(width, 3.6))
    k = max(1, len(shown))
    step = 0.8 / k
    for j, m in enumerate(shown):
        xs, ys, lo, hi = [], [], [], []
        for i, g in enumerate(groups):
            r = next((r for r in rows if r["method"] == m and r["group"] == g), None)
            if r is None or r["mean_difference"] is None:
                continue
            xs.append(i - 0.4 + step * (j + 0.5))
            ys.append(r["mean_difference"])
            lo.append(r["mean_difference"] - (r["ci_low"] if r["ci_low"] is not None else r["mean_difference"]))
            hi.append((r["ci_high"] if r["ci_high"] is not None else r["mean_difference"]) - r["mean_difference"])
        if xs:
            ax.errorbar(
                xs, ys, yerr=[lo, hi], fmt="o", markersize=5, capsize=3, linewidth=1.2,
                color=styles[m]["color"], label=m,
            )  # fmt: skip
    ax.axhline(0.0, color="#444444", linewidth=1.0, zorder=0)
    ax.set_xticks(range(len(groups)))
    ax.set_xticklabels([str(g) for g in groups], fontsize=9)
    for i in range(1, len(groups)):
        ax.axvline(i - 0.5, color="#dddddd", linewidth=0.8, zorder=0)
    ax.set_xlim(-0.5, len(groups) - 0.5)
    ax.set_xlabel(group_label, fontsize=10)
    ax.set_ylabel(f"PSNR-YUV minus {baseline} (dB)", fontsize=10)
    style_axes(ax)
    ax.grid(axis="x", visible=False)
    if title:
        ax.set_title(title, fontsize=10)
    if shown:
        legend_outside(ax, title="mean, 95 % CI")
    return fig


def difference_per_picture(
    records: Sequence[dict], methods: Sequence[str], *, baseline: str, group_key: str, group_label: str
):
    """PSNR-YUV difference to the baseline of every picture, one panel per group (gap or layer);
    x is the picture number (ordered, so consecutive pictures are joined)."""
    from synth.evaluation.differences import paired_values

    groups = sorted({r.get(group_key) for r in records}, key=lambda g: (g is None, g))
    shown = [m for m in methods if m != baseline]
    styles = method_styles(list(methods))
    fig, axes = plt.subplots(len(groups), 1, figsize=(9.0, 2.2 * len(groups) + 0.6), squeeze=False, sharex=True)
    for ax, g in zip(axes[:, 0], groups):
        for m in shown:
            vals, base, keys = paired_values(records, m, baseline, group_key=group_key, group=g)
            pts = sorted(
                (k[2], (a - b) if a is not None and b is not None else np.nan) for a, b, k in zip(vals, base, keys)
            )
            if pts:
                ax.plot(
                    [p[0] for p in pts], [p[1] for p in pts], marker=".", markersize=4, linewidth=1.0, label=m,
                    **styles[m],
                )  # fmt: skip
        ax.axhline(0.0, color="#444444", linewidth=0.9, zorder=0)
        ax.set_title(f"{group_label} {g}", fontsize=9, loc="left")
        ax.set_ylabel("dB", fontsize=9)
        style_axes(ax)
    axes[-1, 0].set_xlabel("picture (display number)", fontsize=9)
    legend_outside(axes[0, 0], title=f"minus {baseline}")
    return fig


def mean_psnr_by_group(summary: Sequence[dict], methods: Sequence[str], *, xlabel: str):
    """Mean PSNR-YUV (level) per method against the gap or temporal layer (ordered values)."""
    fig, ax = plt.subplots(figsize=(7.5, 3.4))
    styles = method_styles(list(methods))
    for m in methods:
        pts = sorted(
            (r["group"], r["psnr_yuv"])
            for r in summary
            if r["method"] == m and r["group"] != "all" and r["psnr_yuv"] is not None
        )
        if pts:
            ax.plot([p[0] for p in pts], [p[1] for p in pts], marker="o", markersize=4, label=m, **styles[m])
    groups = sorted({r["group"] for r in summary if r["group"] != "all"})
    ax.set_xticks(groups)
    ax.set_xlabel(xlabel, fontsize=10)
    ax.set_ylabel("mean PSNR-YUV (dB)", fontsize=10)
    style_axes(ax)
    legend_outside(ax)
    return fig


def vector_qp_degradation(table: Sequence[dict], qps: Sequence[int]):
    """Mean PSNR-YUV of each vector maker against the QP its vectors were estimated at."""
    fig, ax = plt.subplots(figsize=(7.5, 3.4))
    names = [r["predictor"] for r in table]
    styles = method_styles(names)
    for row in table:
        y = [np.nan if row[f"qp{q}"] is None else row[f"qp{q}"] for q in qps]
        ax.plot(list(qps), y, marker="o", markersize=4, label=row["predictor"], **styles[row["predictor"]])
    ax.set_xticks(list(qps))
    ax.set_xlabel("vector QP", fontsize=10)
    ax.set_ylabel("mean PSNR-YUV (dB)", fontsize=10)
    style_axes(ax)
    legend_outside(ax)
    return fig


def grey_picture(plane: np.ndarray, max_value: int) -> np.ndarray:
    """A luma plane as 8-bit grey (for JPEG/PNG files)."""
    return np.clip(plane.astype(np.float32) * (255.0 / max_value) + 0.5, 0, 255).astype(np.uint8)


def _lut(name: str) -> np.ndarray:
    cmap = plt.get_cmap(name)
    return (np.asarray(cmap(np.linspace(0.0, 1.0, 256)))[:, :3] * 255.0 + 0.5).astype(np.uint8)


def error_colours(error: np.ndarray, top: float) -> np.ndarray:
    """Absolute errors in [0, top] as RGB through `ERROR_COLORMAP` (values above `top` saturate)."""
    idx = np.clip(np.asarray(error, dtype=np.float32) * (255.0 / max(top, 1e-9)), 0, 255).astype(np.uint8)
    return _lut(ERROR_COLORMAP)[idx]


def difference_colours(difference: np.ndarray, top: float) -> np.ndarray:
    """Signed values in [-top, top] as RGB through `DIFFERENCE_COLORMAP` (0 is white)."""
    scaled = np.asarray(difference, dtype=np.float32) / max(top, 1e-9)
    idx = np.clip((scaled + 1.0) * 127.5, 0, 255).astype(np.uint8)
    return _lut(DIFFERENCE_COLORMAP)[idx]


def largest_difference_window(difference: np.ndarray, size: int) -> tuple[int, int]:
    """Top-left corner (y, x) of the `size` x `size` window with the largest sum of
    ``|difference|`` (integral image over every position; the first on ties)."""
    h, w = difference.shape
    size = int(min(size, h, w))
    a = np.abs(np.asarray(difference, dtype=np.float64))
    ii = np.zeros((h + 1, w + 1), dtype=np.float64)
    ii[1:, 1:] = a.cumsum(0).cumsum(1)
    sums = ii[size:, size:] - ii[:-size, size:] - ii[size:, :-size] + ii[:-size, :-size]
    y, x = np.unravel_index(int(np.argmax(sums)), sums.shape)
    return int(y), int(x)
