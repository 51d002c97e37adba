"""Reports: results.json / results.csv agree, differences to the baseline and the pictures to
inspect are what the records say, and the page renders in a headless browser with no console
error, every image decoded, every shown number equal to its value in results.json and every
table-of-contents link resolving."""

import csv
import html as _html
import json
import math
import os
import re
import shutil
import subprocess

import pytest
from typer.testing import CliRunner

from synth.evaluation.compare import compare_clip
from synth.evaluation.gop import run_gop
from synth.evaluation.report import CSV_COLUMNS, write_report

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium is not installed (Debian package `chromium`; .ci/run installs it)"
)

# Runs first in <head>: records script errors, console errors and resources that fail to load.
ERROR_SCRIPT = """<script>
window.__errors = [];
window.addEventListener('error', function (e) {
  window.__errors.push(e.message || ('failed to load ' + ((e.target && (e.target.src || e.target.href)) || '?')));
}, true);
(function () { var orig = console.error; console.error = function () {
  window.__errors.push(Array.prototype.join.call(arguments, ' ')); orig.apply(console, arguments); }; })();
</script>"""

# Runs at the end of <body>: opens every collapsed block, loads every (lazy) image and waits for it
# to decode (at most 5 s of virtual time each), then reports.
CHECK_SCRIPT = """<script>
(function () {
  document.querySelectorAll('details').forEach(function (d) { d.open = true; });
  var imgs = Array.prototype.slice.call(document.images);
  imgs.forEach(function (i) { i.loading = 'eager'; });
  function settled(i) {
    var done = i.decode().then(function () { return 1; }, function () { return 0; });
    return Promise.race([done, new Promise(function (r) { setTimeout(function () { r(0); }, 5000); })]);
  }
  Promise.all(imgs.map(settled))
  .then(function () {
    var cells = Array.prototype.slice.call(document.querySelectorAll('[data-src]')).map(function (c) {
      return [c.getAttribute('data-src'), c.textContent]; });
    var links = Array.prototype.slice.call(document.querySelectorAll('nav#contents a')).map(function (a) {
      var id = a.getAttribute('href').slice(1); return [id, document.getElementById(id) !== null]; });
    var out = {images: imgs.length, decoded: imgs.filter(function (i) { return i.naturalWidth > 0; }).length,
               cells: cells, links: links, errors: window.__errors};
    var pre = document.createElement('pre'); pre.id = 'synth-check';
    pre.textContent = JSON.stringify(out); document.body.appendChild(pre);
  });
})();
</script>"""


def render_checks(page_path, tmp_path):
    """Open `page_path` (beside its image folder) in headless Chromium with the check scripts."""
    text = page_path.read_text()
    text = text.replace("<head>", "<head>" + ERROR_SCRIPT, 1).replace("</body>", CHECK_SCRIPT + "</body>")
    probe = page_path.with_name("_probe.html")
    probe.write_text(text)
    cmd = [
        CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}", "--virtual-time-budget=30000", "--dump-dom", probe.as_uri(),
    ]  # fmt: skip
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    finally:
        probe.unlink()
    found = re.search(r'<pre id="synth-check">(.*?)</pre>', proc.stdout, re.S)
    assert found, f"page did not report its checks (exit {proc.returncode}): {proc.stderr[-500:]}"
    return json.loads(_html.unescape(found.group(1)))


def lookup(doc, path):
    node = doc
    for part in path.split("."):
        node = node[int(part)] if isinstance(node, list) else node[part]
    return node


def shown_matches(text: str, want) -> bool:
    """A number as shown (rounded to its decimals, with a sign or not) is its value in the JSON."""
    text = text.strip()
    if want is None:
        return text == "n/a"
    if isinstance(want, bool) or not isinstance(want, (int, float)):
        return text == str(want)
    decimals = len(text.split(".")[1]) if "." in text else 0
    return abs(float(text) - want) <= 0.5 * 10**-decimals + 1e-9


@pytest.fixture(scope="module")
def report_dir(carphone_crop, tmp_path_factory):
    pics = carphone_crop(9)
    runs = [
        compare_clip(
            pics,
            gaps=[2, 4],
            makers="lmmse,average,dis-fast",
            vector_qps="22,37",
            clip_name="crop",
            baseline="dis-fast",
        ),  # fmt: skip
        run_gop(pics, size=4, makers="average,dis-fast", clip_name="crop", baseline="dis-fast"),
    ]
    out = tmp_path_factory.mktemp("report")
    write_report(runs, out, baseline="dis-fast")
    return out


def test_json_csv_and_html_agree(report_dir):
    text = (report_dir / "results.json").read_text()
    # Strict JSON (RFC 8259): no Infinity / NaN constants, whatever the pictures measured.
    doc = json.loads(text, parse_constant=lambda token: pytest.fail(f"non-standard JSON constant {token}"))
    assert doc["format"] == "synth-results" and doc["schema_version"] == 2 and doc["baseline"] == "dis-fast"
    assert [r["kind"] for r in doc["runs"]] == ["compare", "gop"]
    rows = list(csv.DictReader((report_dir / "results.csv").open()))
    assert tuple(rows[0]) == CSV_COLUMNS
    pictures = [p for r in doc["runs"] for p in r["pictures"]]
    assert len(rows) == len(pictures)
    for row, rec in zip(rows, pictures):
        assert float(row["psnr_yuv"]) == rec["psnr_yuv"] and row["method"] == rec["method"]
    page = (report_dir / "report.html").read_text()
    # Nothing fetched from a network; every image a file of img/ beside the page, loaded lazily.
    assert not re.search(r"""(src|href)=["']?(https?:|//|data:)""", page)
    srcs = re.findall(r'<img [^>]*src="([^"]+)"', page)
    assert srcs and all(s.startswith("img/") and (report_dir / s).is_file() for s in srcs)
    assert page.count('loading="lazy"') == len(srcs)
    # Every file of img/ is used by the page (a picture shown twice is one file, named once).
    assert {f"img/{f.name}" for f in (report_dir / "img").iterdir()} == set(srcs)
    # Table of contents and collapsible detail.
    assert '<nav id="contents">' in page and "<details>" in page
    for anchor in re.findall(r'<nav id="contents">.*?</nav>', page, re.S)[0].split('href="#')[1:]:
        assert f'id="{anchor.split(chr(34))[0]}"' in page
    cells = re.findall(r'data-src="([^"]+)">([^<]*)<', page)
    assert len(cells) > 100
    for path, shown in cells:
        assert shown_matches(_html.unescape(shown), lookup(doc, path)), (path, shown)


def test_differences_and_wins_follow_the_pictures(report_dir):
    doc = json.loads((report_dir / "results.json").read_text())
    run = doc["runs"][0]
    assert run["baseline"] == "dis-fast"
    pics = run["pictures"]
    base = {(p["gap"], p["target"]): p["psnr_yuv"] for p in pics if p["method"] == "dis-fast"}
    for row in run["differences"]:
        sel = [p for p in pics if p["method"] == row["method"] and row["group"] in ("all", p["gap"])]
        d = [p["psnr_yuv"] - base[(p["gap"], p["target"])] for p in sel]
        assert row["pictures"] == len(d)
        assert row["mean_difference"] == pytest.approx(sum(d) / len(d), abs=1e-12)
        assert row["wins"] == sum(x > 0 for x in d) and row["losses"] == sum(x < 0 for x in d)
        s = math.sqrt(sum((x - row["mean_difference"]) ** 2 for x in d) / (len(d) - 1))
        # t(0.975, 3) = 3.182 for the 4 pictures of gap 2 (t table, from memory).
        if len(d) == 4:
            assert row["half_width"] == pytest.approx(3.182 * s / 2, abs=1e-3)
    # Worst and median picture of every method other than the baseline, by difference to it.
    methods = [m for m in run["methods"] if m != "dis-fast"]
    assert sorted((e["method"], e["label"]) for e in run["inspection"]) == sorted(
        (m, lab) for m in methods for lab in ("worst", "median")
    )
    for e in run["inspection"]:
        d = sorted(p["psnr_yuv"] - base[(p["gap"], p["target"])] for p in pics if p["method"] == e["method"])
        want = d[0] if e["label"] == "worst" else d[(len(d) - 1) // 2]
        assert e["difference"] == pytest.approx(want, abs=1e-12)
        assert e["psnr_yuv"] - e["baseline_psnr_yuv"] == pytest.approx(e["difference"], abs=1e-12)
        y, x, size = e["window"]
        assert 0 <= y <= 64 - size and 0 <= x <= 96 - size and size == 21  # a third of the 64-row crop


@needs_chromium
def test_report_renders_in_headless_chromium(report_dir, tmp_path):
    checks = render_checks(report_dir / "report.html", tmp_path)
    doc = json.loads((report_dir / "results.json").read_text())
    assert checks["errors"] == []
    assert checks["images"] > 20 and checks["decoded"] == checks["images"]
    assert checks["links"] and all(ok for _, ok in checks["links"])
    assert len(checks["cells"]) > 100
    for path, text in checks["cells"]:
        assert shown_matches(text, lookup(doc, path)), (path, text)


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


def test_baseline_option_on_the_command_line(carphone_crop, tmp_path, monkeypatch):
    from synth.cli import app
    from synth.io import write_clip

    clip = tmp_path / "crop.y4m"
    write_clip(clip, carphone_crop(5))
    monkeypatch.chdir(tmp_path)
    bad = CliRunner().invoke(app, ["compare", str(clip), "--gaps", "2", "--makers", "average", "--baseline", "obmc"])
    assert bad.exit_code == 2
    assert bad.stderr.strip() == "synth: error: --baseline 'obmc' is not among this run's methods: average"
    ok = CliRunner().invoke(
        app, ["gop", str(clip), "--gop-size", "2", "--makers", "average,obmc", "--baseline", "obmc", "--json"]
    )
    assert ok.exit_code == 0, ok.stderr
    summary = json.loads(ok.stdout)
    assert summary["format"] == "synth-gop-summary" and summary["schema_version"] == 1
    assert summary["run"]["baseline"] == "obmc"
    assert [(r["group"], r["method"]) for r in summary["run"]["differences"]] == [(1, "average")]
    text = CliRunner().invoke(app, ["compare", str(clip), "--gaps", "2", "--makers", "average,obmc"]).stdout
    assert "difference to obmc" in text  # the default dis-medium did not run: the last method


@pytest.fixture(scope="module")
def study_dir(carphone_crop, tmp_path_factory):
    # A small study of the compare kind: two settings of the gap, three makers, two clips.
    from synth.io import write_clip
    from synth.study import load_manifest, run_study

    base = tmp_path_factory.mktemp("study")
    pics = carphone_crop(9)
    clips = []
    for name, first in (("a", 0), ("b", 4)):
        path = base / f"{name}.y4m"
        write_clip(path, pics[first : first + 5])
        clips.append(path)
    lines = ['title = "report test"']
    for c in clips:
        lines += ["[[clips]]", f"path = {json.dumps(str(c))}"]
    lines += ["[[tasks]]", 'kind = "compare"', 'grid = {gap = [2, 4], makers = ["average,dis-fast,obmc"]}']
    manifest = base / "study.toml"
    manifest.write_text("\n".join(lines) + "\n")
    run_study(load_manifest(manifest), base / "out")
    return base / "out"


def test_study_page_differences_and_bars(study_dir):
    report = study_dir / "report"
    diffs = json.loads((report / "differences.json").read_text())
    assert diffs["format"] == "synth-study-differences" and diffs["schema_version"] == 1
    assert diffs["baseline"] == "obmc"  # dis-medium did not run: the last method
    rows = diffs["kinds"]["compare"]
    assert [(r["setting"], r["method"]) for r in rows] == [
        ("gap=2", "average"), ("gap=2", "dis-fast"), ("gap=4", "average"), ("gap=4", "dis-fast")
    ]  # fmt: skip
    # Paired within each job, pooled over the two clips: recomputed from study.json's rows.
    doc = json.loads((study_dir / "study.json").read_text())
    for r in rows:
        gap = int(r["setting"].split("=")[1])
        mine = {
            (x["clip"], x["target"]): x["psnr_yuv"]
            for x in doc["rows"]
            if x["gap"] == gap and x["method"] == r["method"]
        }
        base = {
            (x["clip"], x["target"]): x["psnr_yuv"] for x in doc["rows"] if x["gap"] == gap and x["method"] == "obmc"
        }
        d = [mine[k] - base[k] for k in mine]
        assert r["pictures"] == len(d) and r["mean_difference"] == pytest.approx(sum(d) / len(d), abs=1e-12)
    page = (report / "index.html").read_text()
    assert '<nav id="contents">' in page and "<details>" in page
    assert 'src="compare-psnr_yuv.png"' in page and 'src="compare-differences.png"' in page


def _study_cells(report):
    """(file, row path, key, shown text) of every cell of the study page's tables, from the HTML."""
    page = (report / "index.html").read_text()
    out = []
    for file, table in re.findall(r'<table data-file="([^"]+)">(.*?)</table>', page, re.S):
        keys = re.findall(r'<th data-key="([^"]+)">', table)
        for row, cells in re.findall(r'<tr data-row="([^"]+)">(.*?)</tr>', table, re.S):
            for key, text in zip(keys, re.findall(r"<td>(.*?)</td>", cells)):
                out.append((file, row, key, _html.unescape(text)))
    return out


def test_study_page_numbers_are_the_files_numbers(study_dir):
    report = study_dir / "report"
    files = {}
    cells = _study_cells(report)
    assert len(cells) > 50
    for file, row, key, text in cells:
        if file not in files:
            files[file] = json.loads((report / file).read_text())
        want = lookup(files[file], row).get(key)
        if isinstance(want, float):
            assert abs(float(text) - want) <= 5e-4 + 1e-12, (file, row, key, text)
        elif want is None:
            assert text == "-"
        else:
            assert text == str(want)


@needs_chromium
def test_study_page_renders_in_headless_chromium(study_dir, tmp_path):
    checks = render_checks(study_dir / "report" / "index.html", tmp_path)
    assert checks["errors"] == []
    assert checks["images"] == 2 and checks["decoded"] == 2
    assert checks["links"] and all(ok for _, ok in checks["links"])


def test_study_command_baseline_and_json(study_dir):
    # Last of the study tests: it writes the module's study report again with another baseline.
    from synth.commands.study import plan_rows, run_study_command
    from synth.errors import ParameterError

    manifest = study_dir.parent / "study.toml"
    with pytest.raises(ParameterError, match="--baseline"):
        run_study_command(manifest, study_dir, workers=1, baseline="optical")
    summary = run_study_command(manifest, study_dir, workers=1, baseline="dis-fast")
    assert summary["format"] == "synth-study-summary" and summary["schema_version"] == 1
    assert summary["ran"] == 0 and summary["baseline"] == "dis-fast"
    assert [(r["setting"], r["method"]) for r in summary["differences"]["compare"]] == [
        ("gap=2", "average"), ("gap=2", "obmc"), ("gap=4", "average"), ("gap=4", "obmc")
    ]  # fmt: skip
    assert json.loads((study_dir / "report" / "differences.json").read_text())["baseline"] == "dis-fast"
    json.loads(json.dumps(summary, allow_nan=False))
    assert plan_rows(manifest, study_dir)["format"] == "synth-study-plan"


def test_page_style_palette_contents_and_cells(tmp_path):
    import numpy as np
    from PIL import Image

    from synth.evaluation.page_style import OKABE_ITO, Contents, ImageFolder, method_styles, number_cell

    # The eight colours of Okabe & Ito (2008), as RGB 0-255: black (0,0,0), orange (230,159,0),
    # sky blue (86,180,233), bluish green (0,158,115), yellow (240,228,66), blue (0,114,178),
    # vermillion (213,94,0), reddish purple (204,121,167) (from memory).
    rgb = {tuple(int(c[i : i + 2], 16) for i in (1, 3, 5)) for c in OKABE_ITO}
    assert rgb == {(0, 0, 0), (230, 159, 0), (86, 180, 233), (0, 158, 115), (240, 228, 66), (0, 114, 178),
                   (213, 94, 0), (204, 121, 167)}  # fmt: skip
    styles = method_styles([f"m{i}" for i in range(9)])
    assert styles["m8"]["color"] == styles["m0"]["color"] and styles["m8"]["linestyle"] != styles["m0"]["linestyle"]
    c = Contents()
    assert c.heading("Overview", 2) == '<h2 id="overview">Overview</h2>' and c.add("Overview", 3) == "overview-2"
    c.add("Run", 2)
    nav = c.html()
    assert nav.count("<ol>") == 2 and nav.count("</ol>") == 2 and nav.count("<li>") == nav.count("</li>") == 3
    assert number_cell(-0.126, src="a.b", signed=True) == '<td data-src="a.b">-0.13</td>'
    assert number_cell(None, src="x") == '<td data-src="x">n/a</td>'
    images = ImageFolder(tmp_path)
    tag = images.picture(np.full((6, 8), 128, np.uint8), "p.png", "grey")
    assert 'src="img/p.png"' in tag and 'loading="lazy"' in tag and 'width="8" height="6"' in tag
    with Image.open(tmp_path / "img" / "p.png") as im:
        assert im.size == (8, 6) and im.getpixel((3, 3)) == 128
    with pytest.raises(ValueError, match="written twice"):
        images.picture(np.zeros((2, 2), np.uint8), "p.png", "again")


def test_largest_difference_window_finds_the_spot_by_brute_force():
    import numpy as np

    from synth.evaluation.plots import largest_difference_window

    # Against a direct sum over every window position (independent slow reference).
    rng = np.random.default_rng(5)
    d = rng.normal(0, 1, (30, 41))
    d[20:24, 5:9] += 25.0
    y, x = largest_difference_window(d, 8)
    sums = {(i, j): np.abs(d[i : i + 8, j : j + 8]).sum() for i in range(23) for j in range(34)}
    assert (y, x) == max(sums, key=sums.get)
    assert y <= 20 and y + 8 >= 24 and x <= 5 and x + 8 >= 9
