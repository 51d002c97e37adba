"""PNG maps with a title, a colour bar and units, the vector overlay with its legend, and
`synth frame --maps` writing them.

Outside references: the colour maps' published lightness order (matplotlib's 'magma' and 'viridis'
rise monotonically in lightness from their first to their last colour; S. van der Walt and N.
Smith, SciPy 2015); photographs bundled with scikit-image (`skimage.data`); PNG decoding by OpenCV.
"""

import cv2
import numpy as np
import pytest
from realcrops import write_astronaut_pan
from skimage import data
from typer.testing import CliRunner

from synth import ParameterError, VectorField
from synth.cli import app
from synth.evaluation import map_images
from synth.evaluation.map_images import error_scale, figure_size, map_figure, map_png, style_for
from synth.motion.overlay import overlay_figure, overlay_png, overlay_size


def _decode(png: bytes) -> np.ndarray:
    img = cv2.imdecode(np.frombuffer(png, np.uint8), cv2.IMREAD_COLOR)
    assert img is not None
    return img


@pytest.mark.parametrize("shape", [(96, 128), (272, 640), (40, 2400)])
def test_map_png_has_the_documented_size_and_two_axes(shape):
    rng = np.random.default_rng(1)
    values = rng.gamma(2.0, 3.0, shape).astype(np.float32)
    img = _decode(map_png(values, name="predicted_error"))
    assert img.shape == (*figure_size(*shape), 3)
    fig = map_figure(values, name="predicted_error")
    assert len(fig.axes) == 2  # the map and its colour bar
    assert fig.axes[1].get_ylabel() == "code values (8-bit)"


def test_colour_bar_runs_monotonically_through_the_colour_map():
    # a ramp map: the colour bar (right of the map) must go from dark (bottom) to light (top), as the
    # magma colour map does, and the map itself must show the ramp left (dark) to right (light)
    h, w = 100, 500
    ramp = np.tile(np.linspace(0.0, 50.0, w, dtype=np.float32), (h, 1))
    img = _decode(map_png(ramp, name="abs_error", vmax=50.0))
    grey = cv2.cvtColor(img, cv2.COLOR_BGR2GRAY).astype(np.int32)
    m = map_images.MARGIN_PX
    top = map_images.TITLE_PX + m  # first row of the map
    bar_x = m + w + 12 + 8  # middle of the colour bar
    column = grey[top + 2 : top + h - 2, bar_x]
    assert column[0] - column[-1] > 150  # light at the top, dark at the bottom
    assert np.all(np.diff(column) <= 2)  # monotonic, up to anti-aliasing
    row = grey[top + h // 2, m + 2 : m + w - 2]
    assert row[-1] - row[0] > 150 and np.all(np.diff(row) >= -2)


def test_same_map_same_bytes_and_a_bad_map_is_refused():
    values = np.arange(64 * 80, dtype=np.float32).reshape(64, 80) % 7
    assert map_png(values, name="candidates", vmax=8) == map_png(values, name="candidates", vmax=8)
    with pytest.raises(ParameterError, match="map 'confidence' must be a non-empty 2-D array of finite numbers"):
        map_png(np.full((8, 8), np.nan), name="confidence")
    assert style_for("some_new_map").title == "Some new map"
    assert error_scale(np.zeros((4, 4))) == 1.0
    assert error_scale(np.arange(1000.0)) == pytest.approx(np.percentile(np.arange(1000.0), 99.5))


def _field(width=128, height=96):
    xs, ys = np.meshgrid(np.arange(0, width, 16), np.arange(0, height, 16))
    n = xs.size
    rng = np.random.default_rng(2)
    return VectorField.from_arrays(
        width=width, height=height, coded_time=3, reference_time=0, x=xs.ravel(), y=ys.ravel(), w=16, h=16,
        dx=rng.integers(-40, 40, n), dy=rng.integers(-30, 30, n), intra=rng.random(n) < 0.2,
    )  # fmt: skip


def test_overlay_has_a_legend_and_the_documented_size():
    luma = data.camera()[:96, :128].copy()
    field = _field()
    img = _decode(overlay_png(luma, field, title="test overlay"))
    assert img.shape == (*overlay_size(96, 128), 3)
    fig = overlay_figure(luma, field, title="test overlay")
    assert len(fig.axes) == 3  # picture, legend panel, length colour bar
    labels = [t.get_text() for t in fig.axes[1].get_legend().get_texts()]
    assert labels == ["intra block", "block outline", "zero vector"]
    assert fig.axes[2].get_ylabel() in ("vector length, luma samples", "length, samples")
    with pytest.raises(ParameterError, match="field is for 64x48 pictures, the picture is 128x96"):
        overlay_png(luma, _field(64, 48), title="x")


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory):
    return write_astronaut_pan(tmp_path_factory.mktemp("clip") / "pan.y4m", 5)


def test_frame_maps_writes_every_map_as_a_figure(pan_clip, tmp_path):
    out, maps = tmp_path / "mid.y4m", tmp_path / "maps"
    res = CliRunner().invoke(
        app, ["frame", str(pan_clip), "--past", "0", "--future", "4", "--at", "2", "-o", str(out), "--maps", str(maps)]
    )
    assert res.exit_code == 0, res.output
    assert "predicted RMS error" in res.output
    names = sorted(p.name for p in maps.iterdir())
    assert {"predicted_error.png", "abs_error.png", "confidence.png", "past_weight.png", "candidates.png"} <= set(names)
    for name in names:
        img = cv2.imread(str(maps / name), cv2.IMREAD_COLOR)
        assert img is not None and img.shape == (*figure_size(96, 128), 3), name


def test_vectors_overlay_uses_the_shared_style(pan_clip, tmp_path):
    png = tmp_path / "o.png"
    res = CliRunner().invoke(
        app, ["vectors", str(pan_clip), "--coded", "3", "--ref", "0", "-o", str(tmp_path / "f.json"),
              "--overlay", str(png), "--range", "16"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    assert cv2.imread(str(png)).shape == (*overlay_size(96, 128), 3)
