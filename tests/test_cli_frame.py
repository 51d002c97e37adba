"""`synth frame` end to end on a small clip of a panned photograph, its maps and its one-line errors.

Outside reference: scikit-image's bundled photograph (`skimage.data.astronaut`), panned by integer
crops so the true intermediate pictures exist.
"""

import json

import cv2
import numpy as np
import pytest
from realcrops import write_astronaut_pan
from typer.testing import CliRunner

from synth import VectorField
from synth.cli import app
from synth.io import open_clip, rgb_to_ycbcr420, write_clip, write_fields
from synth.makers import MAKERS


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory):
    return write_astronaut_pan(tmp_path_factory.mktemp("clip") / "pan.y4m", 5)


def test_frame_with_a_field_file_reproduces_the_pan(pan_clip, tmp_path):
    field = VectorField.uniform_grid(128, 96, block=16, coded_time=4, reference_time=0, dx=-64, dy=-32)
    fpath = tmp_path / "field.json"
    write_fields(fpath, [field])
    out, maps = tmp_path / "mid.y4m", tmp_path / "maps"
    res = CliRunner().invoke(
        app, ["frame", str(pan_clip), "--past", "0", "--future", "4", "--at", "2", "-o", str(out),
              "--vectors", str(fpath), "--maps", str(maps), "--json"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    assert summary["t"] == 0.5 and summary["fields"] == 1 and summary["maker"] == "lmmse"
    assert summary["psnr"]["Y"] > 35 and summary["ssim_y"] > 0.97  # borders carry entering content
    with open_clip(out) as r:
        assert len(r) == 1
        pic = r.read(0)
    with open_clip(pan_clip) as r:
        truth = r.read(2)
    assert np.array_equal(pic.y[16:-16, 16:-16], truth.y[16:-16, 16:-16])
    names = sorted(p.name for p in maps.iterdir())
    assert names == [
        "abs_error.png", "candidates.png", "confidence.png", "endpoint_mismatch.png", "past_weight.png",
        "posterior_variance.png", "predicted_error.png",
    ]  # fmt: skip
    # each map is a figure with a title and a colour bar (synth.evaluation.map_images)
    from synth.evaluation.map_images import figure_size

    err = cv2.imread(str(maps / "abs_error.png"), cv2.IMREAD_COLOR)
    assert err.shape == (*figure_size(96, 128), 3)


def test_frame_estimates_vectors_and_prints_metrics(pan_clip, tmp_path):
    out = tmp_path / "q.y4m"
    res = CliRunner().invoke(app, ["frame", str(pan_clip), "--past", "1", "--future", "3", "--at", "2", "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "PSNR           Y" in res.output and "SSIM (Y)" in res.output
    psnr_y = float(res.output.split("PSNR           Y ")[1].split(" dB")[0])
    assert psnr_y > 35
    res = CliRunner().invoke(
        app, ["frame", str(pan_clip), "--past", "1", "--future", "3", "--t", "0.3", "-o", str(out)]
    )
    assert res.exit_code == 0, res.output
    assert "PSNR" not in res.output and "t = 0.3" in res.output


@pytest.mark.parametrize(
    "args, message",
    [
        (["--past", "0", "--future", "4", "--at", "4"], "--at 4 must lie strictly between"),
        (["--past", "3", "--future", "1", "--at", "2"], "--past must be before --future"),
        (["--past", "0", "--future", "9", "--at", "2"], "--future must be a picture number"),
        (["--past", "0", "--future", "4"], "exactly one of --at"),
        (["--past", "0", "--future", "4", "--at", "2", "--t", "0.5"], "exactly one of --at"),
        (["--past", "0", "--future", "4", "--t", "1.5"], "--t must lie strictly between"),
        (["--past", "0", "--future", "4", "--at", "2", "--maker", "best"], "--maker must be one of lmmse"),
        (["--past", "0", "--future", "4", "--at", "2", "--vectors", "f.txt"], "--vectors must be 'estimate'"),
        (["--past", "0", "--future", "4", "--at", "2", "--offsets", "o.txt"], "--offsets must end in .json"),
        (["--past", "0", "--future", "4", "--t", "0.5", "--offsets", "o.json"], "--offsets needs --at"),
        (
            ["--past", "0", "--future", "4", "--at", "2", "--offsets", "o.json", "--offset-block", "12"],
            "--offset-block must be one of",
        ),
    ],
)
def test_frame_errors_are_one_line(pan_clip, tmp_path, args, message):
    out = tmp_path / "never.y4m"
    res = CliRunner().invoke(app, ["frame", str(pan_clip), *args, "-o", str(out)])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.strip().splitlines() if ln]
    assert len(lines) == 1 and message in lines[0], res.output
    assert not out.exists()


def test_frame_rejects_a_bad_parameter_file_and_a_missing_clip(pan_clip, tmp_path):
    bad = tmp_path / "p.json"
    bad.write_text(json.dumps({"format": "synth-params", "version": 1, "params": {"candidates": -3}}))
    res = CliRunner().invoke(app, ["frame", str(pan_clip), "--past", "0", "--future", "4", "--at", "2",
                                   "-o", str(tmp_path / "o.y4m"), "--params", str(bad)])  # fmt: skip
    assert res.exit_code == 2 and "parameter candidates must be an integer" in res.output
    res = CliRunner().invoke(app, ["frame", str(tmp_path / "none.y4m"), "--past", "0", "--future", "4", "--at", "2",
                                   "-o", str(tmp_path / "o.y4m")])  # fmt: skip
    assert res.exit_code == 2 and "no such file" in res.output


def test_frame_output_is_the_core_synthesis_byte_for_byte(pan_clip, tmp_path):
    # The default maker is the core estimator: the written picture must be exactly what
    # synthesise_with_maps makes from the estimated fields (YUV4MPEG2 holds samples losslessly).
    from synth import estimate_reference_fields, synthesise_with_maps
    from synth.io import write_y4m

    with open_clip(pan_clip) as r:
        past, future, info = r.read(0), r.read(4), r.info
    fields = estimate_reference_fields(past, future, past_time=0, future_time=4, qp=27)
    for args, t in ((["--at", "1"], 0.25), (["--t", "0.25"], 0.25), (["--at", "2"], 0.5)):
        out = tmp_path / "new.y4m"
        res = CliRunner().invoke(app, ["frame", str(pan_clip), "--past", "0", "--future", "4", *args, "-o", str(out)])
        assert res.exit_code == 0, res.output
        ref = tmp_path / "ref.y4m"
        write_y4m(ref, [synthesise_with_maps(past, future, fields, t=t, past_time=0, future_time=4).picture], info)
        assert out.read_bytes() == ref.read_bytes()


MAKER_NAMES = ["lmmse", "projection", "weighted", "obmc", "average", "dis-fast", "dis-medium", "farneback"]


@pytest.mark.parametrize("maker", MAKER_NAMES)
def test_every_registered_maker_makes_the_picture(pan_clip, tmp_path, maker):
    out = tmp_path / "m.y4m"
    res = CliRunner().invoke(
        app, ["frame", str(pan_clip), "--past", "1", "--future", "3", "--at", "2", "-o", str(out), "--maker", maker,
              "--maps", str(tmp_path / "maps"), "--json"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    assert summary["maker"] == maker
    assert set(MAKER_NAMES) == set(MAKERS)  # a maker added to the registry is tested here too
    # a pan of (4, 2) samples per picture: every maker beats nothing, i.e. is a real picture of the scene
    assert summary["psnr"]["Y"] > 20
    assert (tmp_path / "maps" / "abs_error.png").is_file()


def test_json_is_strict_when_the_picture_is_exact(tmp_path):
    # RFC 8259 JSON has no Infinity: the infinite PSNR of a perfect picture is written as null.
    rng = np.random.default_rng(4)
    still = rgb_to_ycbcr420(rng.integers(0, 256, (32, 32, 3), dtype=np.uint8))
    clip = tmp_path / "still.y4m"
    write_clip(clip, [still] * 3)
    res = CliRunner().invoke(app, ["frame", str(clip), "--past", "0", "--future", "2", "--at", "1", "-o",
                                   str(tmp_path / "a.y4m"), "--maker", "average", "--json"])  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output, parse_constant=lambda c: pytest.fail(f"non-strict JSON constant {c}"))
    assert summary["psnr"] == {"Y": None, "Cb": None, "Cr": None}
    res = CliRunner().invoke(app, ["frame", str(clip), "--past", "0", "--future", "2", "--at", "1", "-o",
                                   str(tmp_path / "a.y4m"), "--maker", "average"])  # fmt: skip
    assert res.exit_code == 0 and "Y inf dB" in res.output


def test_outputs_are_checked_before_computing(pan_clip, tmp_path):
    a_file = tmp_path / "maps.txt"
    a_file.write_text("not a directory")
    for extra, message in (
        (["-o", str(tmp_path / "x.png")], "--output must end in .y4m"),
        (["-o", str(tmp_path / "x.y4m"), "--maps", str(a_file)], "--maps must be a directory"),
    ):
        res = CliRunner().invoke(app, ["frame", str(pan_clip), "--past", "0", "--future", "4", "--at", "2", *extra])
        assert res.exit_code == 2 and message in res.output, res.output
        assert not (tmp_path / "x.y4m").exists()


def test_frame_offsets_are_written_and_readable(pan_clip, tmp_path):
    from synth.io import read_offsets

    off = tmp_path / "off.json"
    res = CliRunner().invoke(
        app, ["frame", str(pan_clip), "--past", "0", "--future", "4", "--at", "2", "-o", str(tmp_path / "m.y4m"),
              "--offsets", str(off), "--offset-block", "8", "--offset-window", "1", "--json"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    field, doc = read_offsets(off)
    assert field.time == 2.0 and doc["search"]["block"] == 8 and doc["maker"] == "lmmse"
    assert summary["offsets"]["blocks"] == len(field) == (96 // 8) * (128 // 8)
    # offsets never make the picture worse: the zero offset is always a candidate (H.264 se(0) = 1 bit)
    assert summary["offsets"]["psnr_after"]["Y"] >= summary["offsets"]["psnr_before"]["Y"] - 0.05
