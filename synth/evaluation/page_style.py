"""The one style of synth's report pages: palette, style sheet, table of contents, collapsible
blocks, number cells and image files beside the page.

Every page (compare, gop, demo, study, rd) is a plain HTML file with no script and nothing fetched
from a network; its figures and pictures are compressed files in a folder beside it, linked with
``loading="lazy"`` so a long page opens at once. Numbers shown carry ``data-src`` (the JSON path of
the value in the page's results file) so tests can check every shown number against the results.

The palette is the eight colours of Okabe and Ito [1]_, distinguishable with the common forms of
colour-vision deficiency; methods take them in a fixed order (`method_colours`).

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people", J*Fly, 2008 (https://jfly.uni-koeln.de/color/).
"""

from __future__ import annotations

import html
import io as _stdio
import os
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from synth.io import atomic_write_bytes

__all__ = [
    "OKABE_ITO",
    "LINE_STYLES",
    "PAGE_CSS",
    "method_colours",
    "method_styles",
    "Contents",
    "details",
    "number_cell",
    "format_number",
    "html_page",
    "ImageFolder",
    "figure_png",
    "legend_outside",
    "style_axes",
]

#: Okabe-Ito colours in the order methods take them (black last: it is also used for means).
OKABE_ITO = (
    "#0072B2",  # blue
    "#D55E00",  # vermillion
    "#009E73",  # bluish green
    "#E69F00",  # orange
    "#CC79A7",  # reddish purple
    "#56B4E9",  # sky blue
    "#F0E442",  # yellow
    "#000000",  # black
)
#: Palette size of plot PNGs (a plot has a few flat colours plus anti-aliased shades).
PLOT_COLOURS = 64
#: Matplotlib line styles cycled after the eighth method (so a ninth method differs by dashes).
LINE_STYLES = ("-", "--", ":", "-.")

PAGE_CSS = """
:root{--ink:#1d2327;--muted:#56616b;--rule:#d9dee3;--head:#eef2f6;--accent:#0072B2}
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:1.5em auto;max-width:1180px;color:var(--ink);padding:0 1em;line-height:1.45}
h1{font-size:1.55em;margin-bottom:.3em}
h2{font-size:1.25em;border-bottom:2px solid var(--accent);padding-bottom:.2em;margin-top:2em}
h3{font-size:1.05em;margin-top:1.4em}
nav#contents{background:#f6f8fa;border:1px solid var(--rule);padding:.5em 1.2em;margin:1em 0;font-size:.92em}
nav#contents ol{margin:.2em 0;padding-left:1.3em}nav#contents li{margin:.1em 0}
nav#contents>b{display:block;margin-bottom:.2em}
table{border-collapse:collapse;font-size:.88em;margin:.6em 0}
th,td{padding:.25em .6em;border-bottom:1px solid var(--rule);text-align:right;font-variant-numeric:tabular-nums}
th{background:var(--head)}td.name,th.name{text-align:left}
tr.best td,td.best{font-weight:650}
td.up{color:#005a8c}td.down{color:#a33b00}
img{max-width:100%;height:auto;display:block;margin:.5em 0}
figure{margin:.8em 0}figcaption{color:var(--muted);font-size:.85em}
details{border:1px solid var(--rule);border-radius:4px;padding:.3em .8em;margin:.7em 0}
details>summary{cursor:pointer;font-weight:600}
details[open]>summary{margin-bottom:.4em}
.note{color:var(--muted);font-size:.88em}
code{background:#f3f5f7;padding:0 .2em}
.grid{display:grid;gap:.5em;align-items:start}
.grid.c3{grid-template-columns:repeat(3,minmax(0,1fr))}
.grid figure{margin:0}.grid img{width:100%;margin:0 0 .2em 0}
.zoom img{image-rendering:pixelated;width:100%}
.bar{height:12px;border:1px solid #999;margin:.2em 0}
.cm-viridis{background:linear-gradient(to right,#440154,#472d7b,#3b528b,#2c728e,#21918c,#28ae80,#5ec962,#addc30,#fde725)}
.cm-RdBu{background:linear-gradient(to right,#67001f,#bb2a34,#e58368,#fbceb7,#f6f7f7,#c0dceb,#68abd0,#2870b1,#053061)}
.scale{display:flex;justify-content:space-between;font-size:.8em;color:var(--muted)}
"""


def method_colours(names: Sequence[str]) -> dict[str, str]:
    """Colour of each name in order (Okabe-Ito; the ninth and later reuse the colours)."""
    return {n: OKABE_ITO[i % len(OKABE_ITO)] for i, n in enumerate(names)}


def method_styles(names: Sequence[str]) -> dict[str, dict]:
    """Matplotlib keyword arguments (``color``, ``linestyle``) of each name: a colour of
    `OKABE_ITO`, then a new dash pattern for every further eight."""
    return {
        n: {"color": OKABE_ITO[i % len(OKABE_ITO)], "linestyle": LINE_STYLES[(i // len(OKABE_ITO)) % len(LINE_STYLES)]}
        for i, n in enumerate(names)
    }


def _slug(text: str) -> str:
    s = re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")
    return s or "section"


class Contents:
    """A table of contents built while a page is written.

    Examples
    --------
    >>> c = Contents()
    >>> c.heading("Overview", 2)
    '<h2 id="overview">Overview</h2>'
    >>> c.add("Overview", 2)
    'overview-2'
    """

    def __init__(self) -> None:
        self.entries: list[tuple[int, str, str]] = []
        self._ids: set[str] = set()

    def add(self, title: str, level: int = 2, *, anchor: str | None = None) -> str:
        """Register a section; returns its unique id (a slug of the title unless `anchor`)."""
        base = anchor or _slug(title)
        sid, k = base, 2
        while sid in self._ids:
            sid, k = f"{base}-{k}", k + 1
        self._ids.add(sid)
        self.entries.append((level, sid, title))
        return sid

    def heading(self, title: str, level: int = 2, *, anchor: str | None = None) -> str:
        """The ``<hN id=...>`` tag of a new section (registered)."""
        sid = self.add(title, level, anchor=anchor)
        return f'<h{level} id="{sid}">{html.escape(title)}</h{level}>'

    def html(self, *, title: str = "Contents") -> str:
        """The ``<nav id="contents">`` block: nested ordered lists of links to the sections."""
        if not self.entries:
            return ""
        top = min(level for level, _, _ in self.entries)
        out = [f'<nav id="contents"><b>{html.escape(title)}</b><ol>']
        depth, open_item = top, False
        for level, sid, text in self.entries:
            level = max(level, top)
            if level > depth:
                while depth < level:
                    out.append("<ol>")
                    depth += 1
            else:
                if open_item:
                    out.append("</li>")
                while depth > level:
                    out.append("</ol></li>")
                    depth -= 1
            out.append(f'<li><a href="#{sid}">{html.escape(text)}</a>')
            open_item = True
        out.append("</li>")
        while depth > top:
            out.append("</ol></li>")
            depth -= 1
        out.append("</ol></nav>")
        return "".join(out)


def details(summary: str, body: str, *, open: bool = False, anchor: str | None = None) -> str:
    """A collapsible block; `summary` is HTML (escape text yourself)."""
    attrs = (f' id="{anchor}"' if anchor else "") + (" open" if open else "")
    return f"<details{attrs}><summary>{summary}</summary>{body}</details>"


def format_number(value, decimals: int = 2, *, signed: bool = False) -> str:
    """The text of a number in a table: fixed decimals, 'n/a' for None or non-finite values."""
    if value is None:
        return "n/a"
    if isinstance(value, (bool, np.bool_)):
        return str(value)
    if isinstance(value, (int, np.integer)):
        return f"{int(value):+d}" if signed else str(int(value))
    v = float(value)
    if not np.isfinite(v):
        return "n/a"
    return f"{v:+.{decimals}f}" if signed else f"{v:.{decimals}f}"


def number_cell(value, *, src: str, decimals: int = 2, signed: bool = False, cls: str | None = None) -> str:
    """A ``<td>`` showing `value` rounded, with ``data-src``: the JSON path of the exact value in
    the page's results file (the page tests look every shown number up there)."""
    text = format_number(value, decimals, signed=signed)
    klass = f' class="{cls}"' if cls else ""
    return f'<td{klass} data-src="{html.escape(src)}">{html.escape(text)}</td>'


def html_page(title: str, body: str, *, contents: Contents | None = None, intro: str = "") -> str:
    """A complete page: `title` as ``<h1>``, `intro` (HTML), the table of contents, `body`."""
    toc = contents.html() if contents is not None else ""
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{html.escape(title)}</title><style>{PAGE_CSS}</style></head><body>"
        f"<h1>{html.escape(title)}</h1>{intro}{toc}\n{body}</body></html>\n"
    )


def figure_png(fig, *, dpi: int = 100) -> bytes:
    """PNG bytes of a matplotlib figure (tight box, no software version: same figure, same bytes);
    the figure is closed."""
    import matplotlib.pyplot as plt

    buf = _stdio.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight", metadata={"Software": None})
    plt.close(fig)
    return _optimised_png(buf.getvalue())


def _optimised_png(data: bytes, colours: int = PLOT_COLOURS) -> bytes:
    """Re-encode a plot's PNG with a palette of at most `colours` colours (median cut, no
    dithering: flat plot colours stay exact, anti-aliased edges take the nearest shade)."""
    from PIL import Image

    img = Image.open(_stdio.BytesIO(data)).convert("RGB")
    out = _stdio.BytesIO()
    img.quantize(colors=colours, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE).save(
        out, format="PNG", optimize=True
    )
    return out.getvalue() if len(out.getvalue()) < len(data) else data


class ImageFolder:
    """Image files beside a page (``<page folder>/<name>/``), each linked by a lazy ``<img>``.

    Parameters
    ----------
    page_dir : path
        The folder of the page.
    name : str
        Sub-folder for the images (default ``img``).
    """

    def __init__(self, page_dir: str | os.PathLike, name: str = "img"):
        self.page_dir = Path(page_dir)
        self.name = name
        self.folder = self.page_dir / name
        self.written: dict[str, int] = {}

    def _write(self, filename: str, data: bytes) -> str:
        self.folder.mkdir(parents=True, exist_ok=True)
        if filename in self.written:
            raise ValueError(f"image {filename} written twice on one page")
        atomic_write_bytes(self.folder / filename, data)
        self.written[filename] = len(data)
        return f"{self.name}/{filename}"

    @staticmethod
    def tag(src: str, alt: str, *, width: int | None = None, height: int | None = None, cls: str = "") -> str:
        """An ``<img>`` that loads lazily."""
        size = (f' width="{width}"' if width else "") + (f' height="{height}"' if height else "")
        klass = f' class="{cls}"' if cls else ""
        return f'<img{klass} src="{html.escape(src)}" alt="{html.escape(alt)}"{size} loading="lazy" decoding="async">'

    def figure(self, fig, filename: str, alt: str, *, dpi: int = 100, quality: int = 60) -> str:
        """Write a matplotlib figure as ``filename`` and return its ``<img>`` tag: a palette PNG
        for ``.png`` names (plots), lossy WebP at `quality` for ``.webp`` names (figures holding
        pictures, which a small palette would band)."""
        from PIL import Image

        if filename.lower().endswith(".webp"):
            import matplotlib.pyplot as plt

            buf = _stdio.BytesIO()
            fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight", metadata={"Software": None})
            plt.close(fig)
            rgb = Image.open(_stdio.BytesIO(buf.getvalue())).convert("RGB")
            out = _stdio.BytesIO()
            rgb.save(out, format="WEBP", quality=quality, method=4)
            data = out.getvalue()
        else:
            data = figure_png(fig, dpi=dpi)
        w, h = Image.open(_stdio.BytesIO(data)).size
        return self.tag(self._write(filename, data), alt, width=w, height=h)

    def picture(self, array: np.ndarray, filename: str, alt: str, *, quality: int = 70, cls: str = "") -> str:
        """Write a uint8 picture (H, W) grey or (H, W, 3) RGB: lossy WebP for ``.webp`` names and
        JPEG for ``.jpg`` names (at `quality`), lossless PNG otherwise; returns its ``<img>`` tag."""
        from PIL import Image

        arr = np.ascontiguousarray(array)
        if arr.dtype != np.uint8:
            raise ValueError(f"pictures are written from uint8 arrays, got {arr.dtype}")
        img = Image.fromarray(arr)
        buf = _stdio.BytesIO()
        if filename.lower().endswith((".jpg", ".jpeg")):
            img.save(buf, format="JPEG", quality=quality, optimize=True)
        elif filename.lower().endswith(".webp"):
            img.save(buf, format="WEBP", quality=quality, method=4)
        else:
            img.save(buf, format="PNG", optimize=True)
        h, w = arr.shape[:2]
        return self.tag(self._write(filename, buf.getvalue()), alt, width=w, height=h, cls=cls)

    def total_bytes(self) -> int:
        """Bytes of every image written so far."""
        return sum(self.written.values())


def style_axes(ax, *, grid: bool = True) -> None:
    """Readable axes at a page's displayed size: 9-point ticks, light grid, no top/right frame."""
    ax.tick_params(labelsize=9)
    if grid:
        ax.grid(alpha=0.3, linewidth=0.6)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def legend_outside(ax, *, where: str = "right", ncol: int = 1, title: str | None = None):
    """A legend outside the data: right of the axes (``where='right'``) or below them."""
    if where == "right":
        return ax.legend(
            loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=9, frameon=False, ncol=ncol, title=title
        )
    return ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.18), fontsize=9, frameon=False, ncol=ncol, title=title)
