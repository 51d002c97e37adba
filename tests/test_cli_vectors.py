"""`synth vectors` end to end on a small clip of a shifted photograph, and its one-line errors.

Outside reference: scikit-image's bundled photograph (`skimage.data.astronaut`); the pan is exact
by construction (integer crops), so the field must beat zero motion by a wide margin.
"""

import json

import cv2
import numpy as np
import pytest
from typer.testing import CliRunner

from synth.cli import app
from synth.io import read_fields, rgb_to_ycbcr420, write_clip


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory):
    from skimage import data

    bgr = cv2.cvtColor(data.astronaut(), cv2.COLOR_RGB2BGR)
    pics = [
        rgb_to_ycbcr420(np.ascontiguousarray(bgr[100 + 2 * k : 196 + 2 * k, 80 + 3 * k : 208 + 3 * k]))
        for k in range(4)
    ]
    path = tmp_path_factory.mktemp("clip") / "pan.y4m"
    write_clip(path, pics)
    return path


def test_vectors_writes_field_overlay_and_summary(pan_clip, tmp_path):
    out, png = tmp_path / "f.json", tmp_path / "o.png"
    res = CliRunner().invoke(
        app, ["vectors", str(pan_clip), "--coded", "3", "--ref", "0", "-o", str(out), "--overlay", str(png),
              "--range", "16", "--blocks", "32,16,8", "--vector-qp", "30", "--json"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    assert summary["mc_psnr_y"] > summary["zero_motion_psnr_y"] + 10
    (field,) = read_fields(out, width=128, height=96)
    assert (field.coded_time, field.reference_time) == (3.0, 0.0)
    # the pan is (9, 6) samples: content of picture 3 at (x, y) is at (x + 9, y + 6) on picture 0
    inter = ~field.intra
    assert np.median(field.dx[inter]) == 36 and np.median(field.dy[inter]) == 24
    img = cv2.imread(str(png))
    # the picture enlarged to at least 480 pixels (x4), with the title band and the legend panel
    from synth.motion.overlay import overlay_size

    assert img is not None and img.shape == (*overlay_size(96, 128), 3) == (96 * 4 + 60, 128 * 4 + 206, 3)


@pytest.mark.parametrize(
    "args,message",
    [
        (["--coded", "9", "--ref", "0"], "--coded must be a picture number in 0..3"),
        (["--coded", "1", "--ref", "1"], "must name different pictures"),
        (["--coded", "1", "--ref", "0", "--blocks", "48"], "--blocks must list powers of two"),
        (["--coded", "1", "--ref", "0", "--vector-qp", "70"], "--vector-qp must be an integer in 0..51"),
        (["--coded", "1", "--ref", "0", "--range", "0"], "--range must be an integer in 1..1024"),
        (["--coded", "1", "--ref", "0", "--vectors", "nofile.json"], "--vectors 'nofile.json': no such file"),
    ],
)
def test_vectors_errors_are_one_line(pan_clip, tmp_path, args, message):
    out = tmp_path / "f.json"
    res = CliRunner().invoke(app, ["vectors", str(pan_clip), "-o", str(out), *args])
    assert res.exit_code == 2
    assert message in res.output and res.output.count("\n") == 1 and "Traceback" not in res.output
    assert not out.exists()


def test_vectors_converts_a_field_file_and_refuses_a_missing_field(pan_clip, tmp_path):
    js = tmp_path / "f.json"
    res = CliRunner().invoke(app, ["vectors", str(pan_clip), "--coded", "2", "--ref", "0", "-o", str(js),
                                   "--range", "16", "--json"])  # fmt: skip
    assert res.exit_code == 0, res.output
    first = json.loads(res.output)
    npz = tmp_path / "f.npz"
    res = CliRunner().invoke(app, ["vectors", str(pan_clip), "--coded", "2", "--ref", "0", "-o", str(npz),
                                   "--vectors", str(js), "--json"])  # fmt: skip
    assert res.exit_code == 0, res.output
    again = json.loads(res.output)
    (a,) = read_fields(js)
    (b,) = read_fields(npz)
    for k in ("x", "y", "w", "h", "dx", "dy", "intra"):
        np.testing.assert_array_equal(getattr(a, k), getattr(b, k))
    # the same field gives the same description (the summary depends on the field and pictures only)
    for k in ("blocks", "vector_bits", "mc_psnr_y", "intra_share"):
        assert again[k] == first[k]
    assert again["vectors"] == str(js) and again["vector_qp"] is None
    res = CliRunner().invoke(app, ["vectors", str(pan_clip), "--coded", "0", "--ref", "2", "-o", str(npz),
                                   "--vectors", str(js)])  # fmt: skip
    assert res.exit_code == 2 and "no field coded at picture 0 against picture 2" in res.output
    assert "2->0" in res.output
