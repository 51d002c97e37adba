"""Report figures (matplotlib, Agg backend), returned as PNG bytes.

Every function takes results or arrays and returns the bytes of one PNG; nothing is shown or written.
PNG metadata carries no software version, so the same inputs give the same bytes.
"""

from __future__ import annotations

import io as _stdio
from collections.abc import Sequence

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from synth.field import VectorField  # noqa: E402

__all__ = [
    "psnr_per_picture",
    "mean_psnr_by_group",
    "vector_qp_degradation",
    "error_maps",
    "weight_map",
    "vector_overlay",
]

_DPI = 90


def _png(fig) -> bytes:
    buf = _stdio.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, bbox_inches="tight", metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()


def _colours(n: int):
    cmap = plt.get_cmap("tab10" if n <= 10 else "tab20")
    return [cmap(i % cmap.N) for i in range(n)]


def psnr_per_picture(records: Sequence[dict], methods: Sequence[str], *, group_key: str, group_label: str) -> bytes:
    """Weighted PSNR of every picture for every method, one panel per group (gap or layer)."""
    groups = sorted({r.get(group_key) for r in records})
    fig, axes = plt.subplots(len(groups), 1, figsize=(9, 2.6 * len(groups)), squeeze=False, sharex=True)
    colours = dict(zip(methods, _colours(len(methods))))
    for ax, g in zip(axes[:, 0], groups):
        for m in methods:
            sel = sorted((r["target"], r["psnr_yuv"]) for r in records if r["method"] == m and r.get(group_key) == g)
            if not sel:
                continue
            x = [s[0] for s in sel]
            y = [np.nan if s[1] is None else s[1] for s in sel]
            ax.plot(x, y, marker=".", markersize=3, linewidth=1, label=m, color=colours[m])
        ax.set_title(f"{group_label} {g}", fontsize=9)
        ax.set_ylabel("PSNR YUV (dB)", fontsize=8)
        ax.grid(alpha=0.3)
    axes[-1, 0].set_xlabel("picture (display index)", fontsize=8)
    axes[0, 0].legend(fontsize=7, ncol=4, loc="lower left")
    return _png(fig)


def mean_psnr_by_group(summary: Sequence[dict], methods: Sequence[str], *, xlabel: str) -> bytes:
    """Mean weighted PSNR per method against the group value (gap or temporal layer)."""
    fig, ax = plt.subplots(figsize=(6.5, 3.6))
    colours = dict(zip(methods, _colours(len(methods))))
    for m in methods:
        pts = sorted(
            (r["group"], r["psnr_yuv"])
            for r in summary
            if r["method"] == m and r["group"] != "all" and r["psnr_yuv"] is not None
        )
        if pts:
            ax.plot([p[0] for p in pts], [p[1] for p in pts], marker="o", label=m, color=colours[m])
    groups = sorted({r["group"] for r in summary if r["group"] != "all"})
    ax.set_xticks(groups)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("mean PSNR YUV (dB)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, ncol=2)
    return _png(fig)


def vector_qp_degradation(table: Sequence[dict], qps: Sequence[int]) -> bytes:
    """Mean weighted PSNR of each vector maker against the QP its vectors were estimated at."""
    fig, ax = plt.subplots(figsize=(6.5, 3.6))
    names = [r["predictor"] for r in table]
    for row, c in zip(table, _colours(len(names))):
        y = [np.nan if row[f"qp{q}"] is None else row[f"qp{q}"] for q in qps]
        ax.plot(list(qps), y, marker="o", label=row["predictor"], color=c)
    ax.set_xticks(list(qps))
    ax.set_xlabel("vector QP")
    ax.set_ylabel("mean PSNR YUV (dB)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    return _png(fig)


def error_maps(target: np.ndarray, predictions: dict[str, np.ndarray], *, title: str) -> bytes:
    """The true luma and |prediction - truth| for every method on one colour scale."""
    n = len(predictions) + 1
    cols = min(n, 4)
    rows = -(-n // cols)
    h, w = target.shape
    fig, axes = plt.subplots(rows, cols, figsize=(3.0 * cols, 3.0 * rows * h / w + 0.4), squeeze=False)
    errs = {m: np.abs(p.astype(np.float32) - target.astype(np.float32)) for m, p in predictions.items()}
    top = max([10.0] + [float(np.percentile(e, 99.5)) for e in errs.values()])
    axes[0, 0].imshow(target, cmap="gray", interpolation="nearest")
    axes[0, 0].set_title("true picture (Y)", fontsize=8)
    im = None
    for ax, (m, e) in zip(axes.ravel()[1:], errs.items()):
        im = ax.imshow(e, cmap="magma", vmin=0, vmax=top, interpolation="nearest")
        ax.set_title(f"{m}: |error|", fontsize=8)
    for ax in axes.ravel():
        ax.set_xticks([])
        ax.set_yticks([])
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    if im is not None:
        fig.colorbar(im, ax=axes.ravel().tolist(), shrink=0.7, label="absolute luma error")
    fig.suptitle(title, fontsize=9)
    return _png(fig)


def weight_map(weights: np.ndarray, *, title: str) -> bytes:
    """A [0, 1] per-pixel weight map (share of the past reference)."""
    h, w = weights.shape
    fig, ax = plt.subplots(figsize=(4.5, 4.5 * h / w + 0.5))
    im = ax.imshow(weights, cmap="viridis", vmin=0.0, vmax=1.0, interpolation="nearest")
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_title(title, fontsize=8)
    fig.colorbar(im, ax=ax, shrink=0.8, label="weight of the past reference")
    return _png(fig)


def vector_overlay(picture: np.ndarray, field: VectorField, *, title: str, max_arrows: int = 600) -> bytes:
    """Block vectors drawn over the picture they are coded on, in luma samples (1:1 scale).

    Each arrow starts at a block centre and ends where the block's content is on the reference.
    """
    h, w = picture.shape
    fig, ax = plt.subplots(figsize=(6.0, 6.0 * h / w + 0.4))
    ax.imshow(picture, cmap="gray", interpolation="nearest")
    keep = ~field.intra
    idx = np.flatnonzero(keep)
    if len(idx) > max_arrows:
        idx = idx[:: int(np.ceil(len(idx) / max_arrows))]
    cx = field.x[idx] + field.w[idx] / 2.0
    cy = field.y[idx] + field.h[idx] / 2.0
    ax.quiver(
        cx,
        cy,
        field.dx[idx] / 4.0,
        field.dy[idx] / 4.0,
        angles="xy",
        scale_units="xy",
        scale=1.0,
        color="#ffcc00",
        alpha=0.85,
        width=0.0025,
    )
    intra = np.flatnonzero(field.intra)
    if len(intra):
        ax.plot(
            field.x[intra] + field.w[intra] / 2.0,
            field.y[intra] + field.h[intra] / 2.0,
            "x",
            color="#ff4040",
            markersize=3,
        )
    ax.set_xlim(0, w)
    ax.set_ylim(h, 0)
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_title(title, fontsize=8)
    return _png(fig)
