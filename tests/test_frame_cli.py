"""`synth frame` end to end on a small clip of a panned photograph, its maps and its one-line errors.

Outside reference: scikit-image's bundled photograph (`skimage.data.astronaut`), panned by integer
crops so the true intermediate pictures exist.
"""

import json

import cv2
import numpy as np
import pytest
from typer.testing import CliRunner

from synth import VectorField
from synth.cli import app
from synth.io import open_clip, rgb_to_ycbcr420, write_clip, write_fields


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory):
    from skimage import data

    bgr = cv2.cvtColor(data.astronaut(), cv2.COLOR_RGB2BGR)
    # 4 samples right and 2 down per picture (even offsets keep 4:2:0 chroma exact)
    pics = [rgb_to_ycbcr420(np.ascontiguousarray(bgr[150 - 2 * k : 246 - 2 * k, 200 - 4 * k : 328 - 4 * k])) for k in range(5)]
    path = tmp_path_factory.mktemp("clip") / "pan.y4m"
    write_clip(path, pics)
    return path


def test_frame_with_a_field_file_reproduces_the_pan(pan_clip, tmp_path):
    field = VectorField.uniform_grid(128, 96, block=16, coded_time=4, reference_time=0, dx=-64, dy=-32)
    fpath = tmp_path / "field.json"
    write_fields(fpath, [field])
    out, maps = tmp_path / "mid.y4m", tmp_path / "maps"
    res = CliRunner().invoke(
        app, ["frame", str(pan_clip), "--past", "0", "--future", "4", "--at", "2", "-o", str(out),
              "--field", str(fpath), "--maps", str(maps), "--json"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    assert summary["t"] == 0.5 and summary["fields"] == 1
    assert summary["psnr"]["Y"] > 35 and summary["ssim_y"] > 0.97  # borders carry entering content
    with open_clip(out) as r:
        assert len(r) == 1
        pic = r.read(0)
    with open_clip(pan_clip) as r:
        truth = r.read(2)
    assert np.array_equal(pic.y[16:-16, 16:-16], truth.y[16:-16, 16:-16])
    names = sorted(p.name for p in maps.iterdir())
    assert names == ["abs_error.png", "candidates.png", "confidence.png", "past_weight.png"]
    err = cv2.imread(str(maps / "abs_error.png"), cv2.IMREAD_UNCHANGED)
    assert err.shape == (96, 128) and err[16:-16, 16:-16].max() == 0


def test_frame_estimates_vectors_and_prints_metrics(pan_clip, tmp_path):
    out = tmp_path / "q.y4m"
    res = CliRunner().invoke(app, ["frame", str(pan_clip), "--past", "1", "--future", "3", "--at", "2", "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "PSNR           Y" in res.output and "SSIM (Y)" in res.output
    psnr_y = float(res.output.split("PSNR           Y ")[1].split(" dB")[0])
    assert psnr_y > 35
    res = CliRunner().invoke(app, ["frame", str(pan_clip), "--past", "1", "--future", "3", "--t", "0.3", "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "PSNR" not in res.output and "t = 0.3" in res.output


@pytest.mark.parametrize(
    "args, message",
    [
        (["--past", "0", "--future", "4", "--at", "4"], "--at must lie strictly between"),
        (["--past", "3", "--future", "1", "--at", "2"], "--past must come before --future"),
        (["--past", "0", "--future", "9", "--at", "2"], "--future must be a picture number"),
        (["--past", "0", "--future", "4"], "exactly one of --at"),
        (["--past", "0", "--future", "4", "--at", "2", "--t", "0.5"], "exactly one of --at"),
        (["--past", "0", "--future", "4", "--t", "1.5"], "--t must lie strictly between"),
        (["--past", "0", "--future", "4", "--at", "2", "--method", "best"], "method must be one of"),
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
