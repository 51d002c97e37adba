"""Makers: protocol (prepare once per pair, then at(t)), registry, and interpolation of a known
sub-pixel translation of a real photograph (scikit-image's camera picture), which pins down the
warping signs."""

import numpy as np
import pytest
import scipy.ndimage
import skimage.data

from synth import ParameterError, Picture, VectorField
from synth.makers import MAKERS, Prediction, get_maker, resolve_makers
from synth.makers.optical_flow import dis_flow
from synth.metrics import plane_psnr

# Displacement of the content from the past to the future picture, luma samples (x, y).
MOTION = (3.5, -2.25)
MARGIN = 8  # border excluded from the check: content entering the crop is unknown to both references


@pytest.fixture(scope="module")
def translated_triplet():
    """past, middle, future crops of a real photograph moving by MOTION per unit time.

    The sub-pixel shifts use cubic-spline interpolation (scipy.ndimage.shift, order 3), so the
    middle picture is the untouched photograph and both references are shifted by half the motion.
    """
    img = skimage.data.camera().astype(np.float64)

    def at(time):  # content position at `time` in [0, 1] relative to the middle (t = 0.5)
        dx, dy = (time - 0.5) * MOTION[0], (time - 0.5) * MOTION[1]
        moved = scipy.ndimage.shift(img, (dy, dx), order=3, mode="reflect")
        return Picture(np.clip(np.round(moved[176:304, 176:336]), 0, 255).astype(np.uint8), None, None, "mono", 8)

    return at(0.0), at(0.5), at(1.0)


def _interior_psnr(pred, truth):
    m = MARGIN
    return plane_psnr(pred.y[m:-m, m:-m], truth.y[m:-m, m:-m])


def test_registry_names_flags_and_errors():
    assert list(MAKERS) == ["lmmse", "projection", "weighted", "obmc", "average", "dis-fast", "dis-medium", "farneback"]
    assert [n for n in MAKERS if get_maker(n).needs_vectors] == ["lmmse", "projection", "weighted", "obmc"]
    assert all(get_maker(n).description.strip() for n in MAKERS)
    with pytest.raises(ParameterError, match="--maker must be one of .*, got 'nope'"):
        get_maker("nope")
    with pytest.raises(ParameterError, match="--makers must not repeat"):
        resolve_makers("average,average")
    assert [m.name for m in resolve_makers("dis-fast, average")] == ["dis-fast", "average"]
    assert "obmc" not in [m.name for m in resolve_makers(None, vectors=False)]


def test_dis_interpolates_a_subpixel_translation_of_a_photograph(translated_triplet):
    past, middle, future = translated_triplet
    # OpenCV's flow on the past picture points to the future one (synth.flow layout, x first).
    flow = dis_flow(past.y, future.y, preset="medium")
    assert np.median(flow[..., 0]) == pytest.approx(MOTION[0], abs=0.1)
    assert np.median(flow[..., 1]) == pytest.approx(MOTION[1], abs=0.1)
    results = {
        n: _interior_psnr(get_maker(n)(past, future, t=0.5).picture, middle)
        for n in ("dis-fast", "dis-medium", "average")
    }
    # Measured: dis-fast 40.9 dB, dis-medium 41.3 dB, average 21.1 dB; with the flow signs flipped
    # the interpolation falls to 17.6 dB, so 38 dB can only be reached with the right signs.
    assert results["dis-medium"] > 38.0
    assert results["dis-fast"] > 38.0
    assert results["average"] < 25.0


def test_farneback_and_fractional_time(translated_triplet):
    past, _, future = translated_triplet
    # t = 0.25: content a quarter of the way; build the true picture the same way.
    img = skimage.data.camera().astype(np.float64)
    moved = scipy.ndimage.shift(img, (-0.25 * MOTION[1], -0.25 * MOTION[0]), order=3, mode="reflect")
    truth = Picture(np.clip(np.round(moved[176:304, 176:336]), 0, 255).astype(np.uint8), None, None, "mono", 8)
    pred = get_maker("farneback")(past, future, t=0.25)
    assert isinstance(pred, Prediction) and pred.seconds > 0
    assert _interior_psnr(pred.picture, truth) > 36.0  # measured 43.4 dB
    assert set(pred.maps) == {"past_weight", "occluded_in_future", "occluded_in_past"}


def test_obmc_with_true_vectors_reproduces_the_middle(translated_triplet):
    past, middle, future = translated_triplet
    w, h = past.width, past.height
    dx, dy = round(MOTION[0] * 4), round(MOTION[1] * 4)  # quarter-pel, exact for this motion
    # Sign convention of synth.field: coded picture content at x is at x + d/4 on the reference.
    backward = VectorField.uniform_grid(w, h, block=16, coded_time=8, reference_time=0, dx=-dx, dy=-dy)
    forward = VectorField.uniform_grid(w, h, block=16, coded_time=0, reference_time=8, dx=dx, dy=dy)
    obmc = get_maker("obmc")
    good = _interior_psnr(obmc(past, future, t=0.5, fields=[backward, forward]).picture, middle)
    flipped = VectorField.uniform_grid(w, h, block=16, coded_time=8, reference_time=0, dx=dx, dy=dy)
    bad = _interior_psnr(obmc(past, future, t=0.5, fields=[flipped]).picture, middle)
    assert good > 38.0 and bad < 25.0  # measured 41.4 dB and 17.6 dB


def test_average_and_input_checks():
    rng = np.random.default_rng(0)
    a = Picture.from_float(
        [rng.uniform(0, 255, (16, 16)), rng.uniform(0, 255, (8, 8)), rng.uniform(0, 255, (8, 8))],
        chroma_format="420",
        bit_depth=8,
    )
    b = Picture.blank(16, 16)
    avg = get_maker("average")
    # (1 - t) past + t future (common practice): at t = 1/4 every sample is 3/4 a + 1/4 b, rounded.
    want = np.clip(np.floor(0.75 * a.y.astype(np.float64) + 0.25 * b.y.astype(np.float64) + 0.5), 0, 255)
    assert np.abs(avg(a, b, t=0.25).picture.y.astype(np.float64) - want).max() <= 1
    for bad in (0.0, 1.0, 1.5):  # t is strictly inside (0, 1): at 0 or 1 the reference itself is the picture
        with pytest.raises(ParameterError, match=r"t must lie strictly between 0 and 1"):
            avg(a, b, t=bad)
    with pytest.raises(ParameterError, match="share size"):
        avg(a, Picture.blank(32, 16), t=0.5)
    with pytest.raises(ParameterError, match="needs vector fields"):
        get_maker("obmc")(a, b, t=0.5)
    wrong = VectorField.uniform_grid(32, 32, block=16, coded_time=1, reference_time=0)
    with pytest.raises(ParameterError, match="32x32 but the pictures are 16x16"):
        get_maker("obmc")(a, b, t=0.5, fields=[wrong])


@pytest.mark.parametrize("name", ["dis-fast", "farneback", "average", "obmc", "lmmse"])
def test_prepare_once_then_at_matches_one_shot_calls(translated_triplet, name):
    past, _, future = translated_triplet
    w, h = past.width, past.height
    dx, dy = round(MOTION[0] * 4), round(MOTION[1] * 4)
    fields = [VectorField.uniform_grid(w, h, block=16, coded_time=8, reference_time=0, dx=-dx, dy=-dy)]
    maker = get_maker(name)
    kw = {"fields": fields} if maker.needs_vectors else {}
    pair = maker.prepare(past, future, past_time=0.0, future_time=8.0, **kw)
    for t in (0.25, 0.5):
        prepared = pair.at(t).picture
        once = maker(past, future, t=t, **kw).picture
        assert np.array_equal(prepared.y, once.y), (name, t)
    # The two times differ, so the check compares two different pictures, not one twice.
    assert not np.array_equal(pair.at(0.25).picture.y, pair.at(0.5).picture.y)
    # at_time maps display times onto t: picture 2 between pictures 0 and 8 is t = 1/4.
    assert np.array_equal(pair.at_time(2.0).picture.y, pair.at(0.25).picture.y)
