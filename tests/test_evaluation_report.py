"""Reports: results.json / results.csv agree, the page is self-contained, and it renders in a
headless browser with every image decoded and the tables holding the numbers of results.json."""

import csv
import json
import os
import re
import shutil
import subprocess

import pytest

from synth.evaluation.compare import compare_clip
from synth.evaluation.gop import run_gop
from synth.evaluation.report import CSV_COLUMNS, write_report

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)

CHECK_SCRIPT = """
<script>
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var cells = Array.prototype.slice.call(document.querySelectorAll('[data-src]')).map(function (c) {
    return [c.getAttribute('data-src'), c.getAttribute('data-value'), c.textContent]; });
  var out = {images: imgs.length,
             decoded: imgs.filter(function (i) { return i.complete && i.naturalWidth > 0; }).length,
             cells: cells};
  var pre = document.createElement('pre'); pre.id = 'synth-check';
  pre.textContent = JSON.stringify(out); document.body.appendChild(pre);
});
</script>
"""


@pytest.fixture(scope="module")
def report_dir(carphone_crop, tmp_path_factory):
    pics = carphone_crop(9)
    runs = [
        compare_clip(pics, gaps=[2, 4], makers="lmmse,average,dis-fast", vector_qps="22,37", clip_name="crop"),
        run_gop(pics, size=4, makers="average,dis-fast", clip_name="crop"),
    ]
    out = tmp_path_factory.mktemp("report")
    write_report(runs, out)
    return out


def _lookup(doc, path):
    node = doc
    for part in path.split("."):
        node = node[int(part)] if isinstance(node, list) else node[part]
    return node


def test_json_csv_and_html_agree(report_dir):
    text = (report_dir / "results.json").read_text()
    # Strict JSON (RFC 8259): no Infinity / NaN constants, whatever the pictures measured.
    doc = json.loads(text, parse_constant=lambda token: pytest.fail(f"non-standard JSON constant {token}"))
    assert doc["format"] == "synth-results" and doc["schema_version"] == 1
    assert [r["kind"] for r in doc["runs"]] == ["compare", "gop"]
    rows = list(csv.DictReader((report_dir / "results.csv").open()))
    assert tuple(rows[0]) == CSV_COLUMNS
    pictures = [p for r in doc["runs"] for p in r["pictures"]]
    assert len(rows) == len(pictures)
    for row, rec in zip(rows, pictures):
        assert float(row["psnr_yuv"]) == rec["psnr_yuv"] and row["method"] == rec["method"]
    page = (report_dir / "report.html").read_text()
    # Self-contained: no fetched resource (every image is a data: URL, no external link or script).
    assert not re.search(r"""(src|href)=["']?(https?:|//)""", page)
    # Per run: PSNR per picture and PSNR per group; compare run: the vector-QP plot; per highlighted
    # picture (worst, best): error maps and weight map, plus the vector overlay in the compare run.
    assert page.count('src="data:image/png;base64,') == (2 + 1 + 2 * 3) + (2 + 2 * 2)
    assert 'alt="weight map, worst picture"' in page and 'alt="vector overlay, best picture"' in page
    cells = re.findall(r'data-src="([^"]+)" data-value="([^"]*)"', page)
    assert len(cells) > 40
    for path, value in cells:
        want = _lookup(doc, path)
        assert (value == "" and want is None) or float(value) == want


@pytest.mark.skipif(
    CHROMIUM is None, reason="chromium is not installed (Debian package `chromium`; .ci/run installs it)"
)
def test_report_renders_in_headless_chromium(report_dir, tmp_path):
    page = tmp_path / "page.html"
    page.write_text((report_dir / "report.html").read_text().replace("</body>", CHECK_SCRIPT + "</body>"))
    cmd = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}",
        "--virtual-time-budget=5000",
        "--dump-dom",
        page.as_uri(),
    ]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    found = re.search(r'<pre id="synth-check">(.*?)</pre>', proc.stdout, re.S)
    assert found, f"page did not report its checks (exit {proc.returncode}): {proc.stderr[-500:]}"
    import html as _html

    checks = json.loads(_html.unescape(found.group(1)))
    doc = json.loads((report_dir / "results.json").read_text())
    assert checks["images"] == 15 and checks["decoded"] == checks["images"]
    assert len(checks["cells"]) > 40
    for path, value, text in checks["cells"]:
        want = _lookup(doc, path)
        if want is None:
            assert text == "n/a"
            continue
        assert float(value) == want
        decimals = len(text.split(".")[1]) if "." in text else 0
        assert abs(float(text) - want) <= 0.5 * 10**-decimals + 1e-12


def test_identical_pictures_give_null_not_infinity(carphone_crop, tmp_path):
    # A still clip: the average of two equal references is the target itself, PSNR = +inf by its
    # definition (10 log10(peak^2 / 0)); results.json must hold null (RFC 8259 has no Infinity).
    still = [carphone_crop(1)[0]] * 3
    run = compare_clip(still, gaps=[2], makers="average", clip_name="still")
    assert run.records[0]["psnr_yuv"] is None
    paths = write_report([run], tmp_path)
    text = paths["json"].read_text()
    assert "Infinity" not in text and "NaN" not in text
    doc = json.loads(text)
    assert doc["runs"][0]["pictures"][0]["psnr_y"] is None and doc["runs"][0]["summary"][0]["psnr_yuv"] is None
    assert next(csv.DictReader(paths["csv"].open()))["psnr_yuv"] == ""
