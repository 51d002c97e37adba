"""`synth info`: output for people and for programs, and one-line errors with exit code 2."""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import DEMO_CLIPS
from test_io_y4m import random_picture
from typer.testing import CliRunner

from synth.cli import app
from synth.io import open_clip, write_yuv

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_info_table_and_json_on_a_demo_clip():
    clip = DEMO_CLIPS / "parcels_pan.y4m"
    res = run("info", clip, "--frame", 16)
    assert res.exit_code == 0, res.output
    for text in ("YUV4MPEG2", "352", "288", "17", "4:2:0", "25/1", "plane statistics of frame 16"):
        assert text in res.stdout
    res = run("info", clip, "--json", "-f", "-1")
    data = json.loads(res.stdout)
    with open_clip(clip) as r:
        last = r.read(16)
    assert (data["width"], data["height"], data["frames"], data["bit_depth"], data["frame"]) == (352, 288, 17, 8, 16)
    assert data["chroma_format"] == "420" and data["frame_rate"] == "25/1"
    for name, plane in zip(("Y", "Cb", "Cr"), last.planes):
        assert data["planes"][name]["min"] == int(plane.min())
        assert data["planes"][name]["max"] == int(plane.max())
        assert data["planes"][name]["mean"] == pytest.approx(float(plane.mean()), abs=1e-4)


def test_info_on_raw_with_geometry_options(tmp_path):
    rng = np.random.default_rng(30)
    path = tmp_path / "capture.yuv"
    write_yuv(path, [random_picture(rng, 16, 8, "422", 10) for _ in range(3)])
    res = run("info", path, "--size", "16x8", "--chroma", "422", "--bit-depth", "10", "--fps", "50", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert (data["frames"], data["chroma_format"], data["bit_depth"], data["frame_rate"]) == (3, "422", 10, "50/1")
    assert data["clip_format"] == "raw planar YUV"
    assert (data["format"], data["schema_version"]) == ("synth-info-summary", 2)


def test_info_on_real_footage_with_matrix(real_clip):
    res = run("info", real_clip("carphone_pristine.mp4"), "--matrix", "709", "--json")
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["frames"] == 120


GOOD = b"YUV4MPEG2 W8 H4 C420jpeg\n"
FRAME = b"FRAME\n" + bytes(48)


@pytest.mark.parametrize(
    "name,content,extra,message",
    [
        ("missing.y4m", None, [], "no such file"),
        ("empty.y4m", b"", [], "file is empty"),
        ("magic.y4m", b"YUV4MPEG3 W8 H4\n" + FRAME, [], "not a YUV4MPEG2 file"),
        ("tag.y4m", b"YUV4MPEG2 W8 H4 Z1\n" + FRAME, [], "unknown header tag 'Z1'"),
        ("notag.y4m", b"YUV4MPEG2 W8\n" + FRAME, [], "lacks the H tag"),
        ("chroma.y4m", b"YUV4MPEG2 W8 H4 C444alpha\n" + FRAME, [], "C444alpha is not supported"),
        ("trunc.y4m", GOOD + FRAME + FRAME[:30], [], "frame 1 is truncated"),
        ("range.y4m", GOOD + FRAME, ["--frame", "3"], "frame index 3 out of range"),
        ("odd.y4m", b"YUV4MPEG2 W9 H4\n" + FRAME, [], "4:2:0 needs an even width and height, got 9x4"),
        ("raw_8x4.yuv", bytes(50), [], "not a multiple of the frame size 48 bytes"),
        ("raw.yuv", bytes(48), [], "needs its size"),
        ("raw_8x4.yuv", bytes(48), ["--size", "eightxfour"], "size must be WIDTHxHEIGHT"),
        ("opt.y4m", GOOD + FRAME, ["--size", "8x4"], "size does not apply to a YUV4MPEG2 file"),
        ("m_%02d.png", None, [], "no file matches"),
    ],
)
def test_bad_input_gives_one_line_and_exit_code_2(tmp_path, name, content, extra, message):
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    res = run("info", path, *extra)
    assert res.exit_code == 2
    assert res.stdout == ""
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1, res.stderr
    assert lines[0].startswith("synth: error: ") and message in lines[0]
    assert "Traceback" not in res.output
