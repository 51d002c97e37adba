"""`synth predict` end to end on a small clip of a panned photograph, and its one-line errors.

Outside reference: scikit-image's bundled photograph (`skimage.data.astronaut`), panned by integer
crops, so each picture is an exact translation of the one before it.
"""

import json

import numpy as np
import pytest
from realcrops import write_astronaut_pan
from typer.testing import CliRunner

from synth import VectorField
from synth.cli import app
from synth.io import open_clip, write_fields


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory):
    return write_astronaut_pan(tmp_path_factory.mktemp("clip") / "pan.y4m", 3)


def test_predict_json_summary_has_one_row_per_method(pan_clip, tmp_path):
    # the true motion of picture k against k - 1 is (-4, -2) samples: a field file holding it
    fields = [
        VectorField.uniform_grid(128, 96, block=16, coded_time=k, reference_time=k - 1, dx=-16, dy=-8) for k in (1, 2)
    ]
    fpath = tmp_path / "fields.json"
    write_fields(fpath, fields)
    out, report = tmp_path / "pred.y4m", tmp_path / "report"
    res = CliRunner().invoke(
        app, ["predict", str(pan_clip), "--vectors", str(fpath), "--json", "-o", str(out), "--report", str(report)]
    )
    assert res.exit_code == 0, res.output
    summary = json.loads(res.stdout)
    assert summary["format"] == "synth-predict-summary" and summary["schema_version"] == 1
    assert summary["pictures"] == [1, 2]
    rows = {row["method"]: row for row in summary["summary"]}
    assert list(rows) == ["block-mc", "obmc", "lmmse"]
    assert all(row["pictures"] == 2 for row in rows.values())
    # exact translation: all three agree away from the entering border, so their PSNRs are close
    assert rows["block-mc"]["psnr_y"] > 25
    assert abs(rows["lmmse"]["psnr_y"] - rows["block-mc"]["psnr_y"]) < 0.01
    assert rows["lmmse"]["difference_y"]["pictures"] == 2 and "difference_y" not in rows["block-mc"]
    with open_clip(out) as r, open_clip(pan_clip) as truth:
        assert len(r) == 2
        # picture 2 = picture 1 moved by (-4, -2): exact inside
        assert np.array_equal(r.read(1).y[2:, 4:], truth.read(2).y[2:, 4:])
    assert sorted(p.name for p in report.iterdir()) == ["img", "report.html", "results.csv", "results.json"]


def test_predict_bad_pictures_is_one_line_exit_2(pan_clip):
    res = CliRunner().invoke(app, ["predict", str(pan_clip), "--pictures", "2:1"])
    assert res.exit_code == 2
    assert res.stdout == ""
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert lines == ["synth: error: --pictures must have 0 <= FIRST <= LAST, got '2:1'"]


def test_predict_needs_two_pictures(pan_clip):
    res = CliRunner().invoke(app, ["predict", str(pan_clip), "--pictures", "2:9"])
    assert res.exit_code == 2
    assert "--pictures must name at least two pictures of the clip (it has 0..2)" in res.output
    assert "Traceback" not in res.output


def test_x264_ippp_fields_follow_the_pan(pan_clip):
    # the pan of the fixture moves content 4 samples left and 2 up per picture (exact crops of
    # scikit-image's photograph): x264's P pictures, each against the one before, code that vector
    from synth.codec.hierarchy_coding import coded_hierarchy_fields

    fields = coded_hierarchy_fields(pan_clip, qp=22, structure=("ippp", 0, 2))
    pairs = sorted((int(f.coded_time), int(f.reference_time)) for f in fields if not f.intra.all())
    assert pairs == [(1, 0), (2, 1)]
    for f in fields:
        if f.intra.all():
            continue
        inter = ~f.intra
        area = (f.w * f.h)[inter]
        dx, dy = f.dx[inter], f.dy[inter]
        share = area[(dx == -16) & (dy == -8)].sum() / area.sum()  # quarter samples
        assert share > 0.6  # the rest: blocks at the entering borders, where no true match exists
        assert np.median(np.repeat(dx, area)) == -16 and np.median(np.repeat(dy, area)) == -8


def test_predict_with_x264_vectors_json(pan_clip):
    res = CliRunner().invoke(app, ["predict", str(pan_clip), "--vectors", "x264", "--vector-qp", "22", "--json"])
    assert res.exit_code == 0, res.output
    summary = json.loads(res.stdout)
    assert summary["vectors"]["vectors"] == "x264" and summary["vectors"]["structure"].startswith("I P P")
    rows = {row["method"]: row for row in summary["summary"]}
    assert rows["block-mc"]["psnr_y_inter"] > 30  # an exact pan, predicted by its true vector
    assert rows["lmmse"]["psnr_y_inter"] > 30


def test_predict_bad_params_file_is_one_line_exit_2(pan_clip, tmp_path):
    bad = tmp_path / "p.json"
    bad.write_text('{"format": "synth-one-reference-params", "schema_version": 1, "params": {"decay": 2}}')
    res = CliRunner().invoke(app, ["predict", str(pan_clip), "--params", str(bad)])
    assert res.exit_code == 2 and res.stdout == ""
    assert res.stderr.strip().splitlines() == [f"synth: error: {bad}: unknown one-reference parameter(s) decay"]
