"""The synthesiser end to end: exactness, stripes, chroma formats, holes, errors, parameters."""

import json

import numpy as np
import pytest
from skimage import data

from synth import ParameterError, Picture, SynthParams, VectorField, synthesise, synthesise_with_maps
from synth.errors import FormatError
from synth.io import rgb_to_picture
from synth.metrics import plane_psnr

H, W = 96, 128
SHIFT = (16, 8)  # content moves this far (x, y) from past to future


def _crop(x0, y0, *, chroma_format="420", bit_depth=8, h=H, w=W):
    # A real photograph from scikit-image's bundled data (open data), cropped; crops at offsets
    # that are multiples of the chroma subsampling keep every plane an exact translation.
    rgb = data.astronaut()[y0 : y0 + h, x0 : x0 + w].astype(np.float64) / 255.0
    return rgb_to_picture(rgb, chroma_format=chroma_format, bit_depth=bit_depth)


def _translation(t, **kw):
    x0, y0 = 200, 180
    past = _crop(x0, y0, **kw)
    future = _crop(x0 - SHIFT[0], y0 - SHIFT[1], **kw)
    truth = _crop(x0 - round(t * SHIFT[0]), y0 - round(t * SHIFT[1]), **kw)
    # the future picture's blocks find their content SHIFT back on the past picture
    field = VectorField.uniform_grid(W, H, block=16, coded_time=2, reference_time=0, dx=-4 * SHIFT[0], dy=-4 * SHIFT[1])
    return past, future, truth, field


def _interior_psnr(a, b, bit_depth, border):
    return plane_psnr(a[border:-border, border:-border], b[border:-border, border:-border], bit_depth=bit_depth)


@pytest.mark.parametrize("t", [0.5, 0.25])
@pytest.mark.parametrize("method", ["lmmse", "distance_weighted", "nearest"])
def test_global_translation_is_reproduced_exactly(t, method):
    # Exactness (issue 4): a pure translation of a real photograph with exact vectors gives the true
    # intermediate picture away from the borders (content entering the picture is unknown).
    past, future, truth, field = _translation(t)
    out = synthesise(past, future, field, t=t, method=method)
    for p, q in zip(out.planes, truth.planes):
        assert _interior_psnr(p, q, 8, 20) > 50


def test_translation_with_fields_of_both_directions():
    past, future, truth, back = _translation(0.5)
    fwd = VectorField.uniform_grid(W, H, block=16, coded_time=0, reference_time=2, dx=4 * SHIFT[0], dy=4 * SHIFT[1])
    res = synthesise_with_maps(past, future, [back, fwd], t=0.5)
    assert res.info["k"] == SynthParams().candidates_both_directions
    assert _interior_psnr(res.picture.y, truth.y, 8, 20) > 50


@pytest.mark.parametrize("chroma_format", ["420", "422", "444", "mono"])
@pytest.mark.parametrize("bit_depth", [8, 10])
def test_chroma_formats_and_bit_depths(chroma_format, bit_depth):
    past, future, truth, field = _translation(0.25, chroma_format=chroma_format, bit_depth=bit_depth)
    out = synthesise(past, future, field, t=0.25)
    assert out.same_format(truth) and out.chroma_format == chroma_format
    for p, q in zip(out.planes, truth.planes):
        assert _interior_psnr(p, q, bit_depth, 20) > 50


def _busy_case():
    """Two real photographs' crops with a random quarter-pel field (overlaps, holes, borders)."""
    past = _crop(150, 150, h=100, w=132)
    future = _crop(146, 147, h=100, w=132)
    rng = np.random.default_rng(11)
    xs, ys = np.meshgrid(np.arange(0, 132, 16)[:-1], np.arange(0, 100, 16)[:-1])
    n = xs.size
    field = VectorField.from_arrays(
        width=132,
        height=100,
        coded_time=3,
        reference_time=1,
        x=xs.ravel(),
        y=ys.ravel(),
        w=16,
        h=16,
        dx=rng.integers(-40, 40, n),
        dy=rng.integers(-30, 30, n),
        intra=rng.random(n) < 0.1,
        gaps_allowed=True,
    )
    return past, future, field


@pytest.mark.parametrize("chroma_format", ["420", "422"])
def test_stripes_are_bit_identical_to_the_whole_picture(chroma_format):
    past, future, field = _busy_case()
    if chroma_format != "420":
        past = Picture(past.y, past.cb[:, :].repeat(2, 0)[:100], past.cr.repeat(2, 0)[:100], "422", 8)
        future = Picture(future.y, future.cb.repeat(2, 0)[:100], future.cr.repeat(2, 0)[:100], "422", 8)
    whole = synthesise_with_maps(past, future, field, t=0.4)
    for rows in [(0, 38), (38, 64), (64, 100), (2, 98), (64, 66)]:
        part = synthesise_with_maps(past, future, field, t=0.4, rows=rows)
        y0, y1 = rows
        fy = 2 if chroma_format == "420" else 1
        assert np.array_equal(part.picture.y, whole.picture.y[y0:y1])
        assert np.array_equal(part.picture.cb, whole.picture.cb[y0 // fy : -(-y1 // fy)])
        assert np.array_equal(part.picture.cr, whole.picture.cr[y0 // fy : -(-y1 // fy)])
        for name, m in part.maps.items():
            assert np.array_equal(m, whole.maps[name][y0:y1]), name


def test_same_inputs_same_output_whatever_the_threads():
    past, future, field = _busy_case()
    a = synthesise(past, future, field, t=0.5, workers=1)
    b = synthesise(past, future, field, t=0.5, workers=3)
    assert all(np.array_equal(p, q) for p, q in zip(a.planes, b.planes))


def test_holes_fall_back_to_the_colocated_average():
    past, future, truth, _ = _translation(0.5)
    # vectors only on the left quarter: pixels beyond reach have no candidate
    field = VectorField.from_arrays(
        width=W,
        height=H,
        coded_time=2,
        reference_time=0,
        x=[0, 0, 0],
        y=[0, 32, 64],
        w=32,
        h=32,
        dx=-64,
        dy=-32,
        gaps_allowed=True,
    )
    params = SynthParams(reach=24.0)
    res = synthesise_with_maps(past, future, field, t=0.5, params=params)
    hole = res.maps["candidates"] == 0
    assert hole[:, -40:].all() and not hole[:, :16].any()
    assert np.all(res.maps["confidence"][hole] == 0)
    avg = np.floor((past.y.astype(np.float64) + future.y) / 2 + 0.5)
    np.testing.assert_array_equal(res.picture.y[hole], avg[hole])
    assert np.all(res.maps["past_weight"][hole] == 0.5)


def test_maps_describe_the_estimate():
    # exact vectors: the flow guard, which would give the cells where content enters the picture
    # DIS's vectors instead, is off
    past, future, truth, field = _translation(0.5)
    res = synthesise_with_maps(past, future, field, t=0.5, params=SynthParams(flow_guard=0))
    assert set(res.maps) == {
        "candidates", "confidence", "past_weight", "posterior_variance", "endpoint_mismatch", "predicted_error",
    }  # fmt: skip
    for m in res.maps.values():
        assert m.shape == (H, W) and m.dtype == np.float32 and np.all(np.isfinite(m))
    cand = res.maps["candidates"]
    assert cand.max() == SynthParams().candidates and cand.min() >= 4  # fewer within reach at corners
    conf = res.maps["confidence"]
    assert conf.min() >= 0 and conf.max() <= 1 and np.median(conf) > 0.5
    pw = res.maps["past_weight"]
    # interior: both sides; along the left and top edges the past endpoint leaves the picture
    # (content enters from there), so only the future side is used
    assert np.allclose(pw[40:-40, 40:-40], 0.5)
    assert np.all(pw[40:-40, :3] == 0.0) and np.all(pw[:3, 40:-40] == 0.0)


def test_disagreement_fallback_takes_the_nearest_candidate():
    past, future, truth, field = _translation(0.5)
    rng = np.random.default_rng(3)
    noise = Picture(rng.integers(0, 256, (H, W), dtype=np.uint8), future.cb, future.cr, "420", 8)
    res = synthesise_with_maps(past, noise, field, t=0.5, params=SynthParams(disagreement_threshold=0.5))
    assert np.all(res.maps["confidence"] == 0)
    near = synthesise(past, noise, field, t=0.5, method="nearest")
    assert np.array_equal(res.picture.y, near.y)


def test_bad_inputs_raise_parameter_errors():
    past, future, truth, field = _translation(0.5)
    small = _crop(0, 0, h=64, w=64)
    with pytest.raises(ParameterError, match="past and future pictures differ"):
        synthesise(past, small, field, t=0.5)
    with pytest.raises(ParameterError, match="is for a 128x96 picture"):
        synthesise(small, small, field, t=0.5)
    for t in (0.0, 1.0, float("nan"), "half"):
        with pytest.raises(ParameterError, match="t must"):
            synthesise(past, future, field, t=t)
    with pytest.raises(ParameterError, match="rows"):
        synthesise(past, future, field, t=0.5, rows=(10, 5))
    with pytest.raises(ParameterError, match="chroma factor"):
        synthesise(past, future, field, t=0.5, rows=(3, 10))
    with pytest.raises(ParameterError, match="method"):
        synthesise(past, future, field, t=0.5, method="magic")
    with pytest.raises(ParameterError, match="at least one"):
        synthesise(past, future, [], t=0.5)
    with pytest.raises(ParameterError, match="params must be a SynthParams"):
        synthesise(past, future, field, t=0.5, params={"candidates": 4})
    with pytest.raises(ParameterError, match="workers"):
        synthesise(past, future, field, t=0.5, workers=0)
    far = VectorField.uniform_grid(W, H, block=16, coded_time=2, reference_time=0, dx=-4 * 4 * W, dy=0)
    with pytest.raises(ParameterError, match=r"block 0: its past endpoint .* \(vector out of range\)"):
        synthesise(past, future, far, t=0.5)


@pytest.mark.parametrize(
    "changes, message",
    [
        ({"candidates": 0}, "candidates"),
        ({"spatial_correlation": 1.0}, "spatial_correlation"),
        ({"spatial_correlation": float("nan")}, "spatial_correlation must be a finite number"),
        ({"reliability_scale": -1.0}, "reliability_scale"),
        ({"group_size": 3}, "group_size"),
        ({"weight_cell": 4, "group_size": 2}, "weight_cell"),
        ({"interpolation": "nearest-neighbour"}, "interpolation"),
        ({"method": "mean"}, "method"),
        ({"candidates": True}, "candidates"),
    ],
)
def test_bad_parameters_are_named(changes, message):
    with pytest.raises(ParameterError, match=message):
        SynthParams(**changes)


def test_parameter_file_round_trip(tmp_path):
    p = SynthParams(candidates=6, reliability_scale=20.0)
    path = tmp_path / "params.json"
    p.save(path)
    doc = json.loads(path.read_text())
    assert doc["format"] == "synth-params" and doc["schema_version"] == 1
    assert SynthParams.load(path) == p
    doc["params"] = {"candidates": 5}
    path.write_text(json.dumps(doc))
    assert SynthParams.load(path) == SynthParams(candidates=5)
    doc["params"] = {"candidatez": 5}
    path.write_text(json.dumps(doc))
    with pytest.raises(ParameterError, match="unknown synthesis parameter"):
        SynthParams.load(path)
    doc["schema_version"] = 7
    path.write_text(json.dumps(doc))
    with pytest.raises(FormatError, match="version"):
        SynthParams.load(path)
    old = {"format": "synth-params", "version": 1, "params": {"candidates": 5}}  # a file of the 0.1 key
    path.write_text(json.dumps(old))
    assert SynthParams.load(path) == SynthParams(candidates=5)
    path.write_text("{not json")
    with pytest.raises(FormatError, match="not valid JSON"):
        SynthParams.load(path)


def test_odd_sizes_and_a_field_without_vectors():
    # sizes that are no multiple of the group or band; every block intra -> co-located average
    rgb = data.astronaut()[:77, :101].astype(np.float64) / 255
    past = rgb_to_picture(rgb, chroma_format="444")
    future = rgb_to_picture(np.roll(rgb, 3, axis=1), chroma_format="444")
    rng = np.random.default_rng(2)
    xs, ys = np.meshgrid(np.arange(0, 101, 8), np.arange(0, 77, 8))
    field = VectorField.from_arrays(
        width=101,
        height=77,
        coded_time=1,
        reference_time=0,
        x=xs.ravel(),
        y=ys.ravel(),
        w=np.minimum(8, 101 - xs.ravel()),
        h=np.minimum(8, 77 - ys.ravel()),
        dx=-12,
        dy=rng.integers(-2, 2, xs.size),
    )
    whole = synthesise(past, future, field, t=0.5)
    assert whole.y.shape == (77, 101)
    assert np.array_equal(synthesise(past, future, field, t=0.5, rows=(13, 77)).y, whole.y[13:])
    intra = VectorField.from_arrays(
        width=101,
        height=77,
        coded_time=1,
        reference_time=0,
        x=[0],
        y=[0],
        w=101,
        h=77,
        dx=0,
        dy=0,
        intra=[True],
        gaps_allowed=True,
    )
    res = synthesise_with_maps(past, future, intra, t=0.5)
    for p, a, b in zip(res.picture.planes, past.planes, future.planes):
        np.testing.assert_array_equal(p, np.floor((a.astype(np.float64) + b) / 2 + 0.5))
    assert np.all(res.maps["candidates"] == 0) and np.all(res.maps["confidence"] == 0)
