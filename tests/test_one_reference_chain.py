"""Several reference pictures: vectors mapped onto one common reference through the chain of coded
vectors (`synth.synthesis.reference_chain`), the LMMSE predictor over blocks on different references
(`synth.synthesis.one_reference.predict_multi_reference`), the multi-reference estimator
(`synth.motion.multi_reference`) and `synth predict --references`.

Outside references: scikit-image's bundled photograph (`skimage.data.astronaut`), cut into exact
integer translations; motion composes by adding vectors for a pure translation (exact integer
arithmetic in quarter samples; common practice).
"""

import json

import numpy as np
import pytest
from realcrops import write_astronaut_pan
from skimage import data
from typer.testing import CliRunner

from synth.cli import app
from synth.errors import ParameterError
from synth.evaluation.prediction import predict_with
from synth.field import VectorField
from synth.motion.estimator import estimate_field
from synth.motion.multi_reference import ReferenceFields, estimate_multi_reference
from synth.picture import Picture
from synth.synthesis.one_reference import (
    multi_reference_coefficients,
    one_reference_coefficients,
    predict_multi_reference,
    predict_one_reference,
)
from synth.synthesis.reference_chain import (
    common_reference_vectors,
    compose_along_chain,
    vectors_on_every_reference,
)

W, H, B = 96, 64, 16
# picture k shows the photograph from (X0 - k TX, Y0 - k TY): its content at p lies at p - (TX, TY)
# on picture k - 1 (sign convention of synth/field.py), i.e. vector -4 (TX, TY) quarter samples
TX, TY = 3, -2
X0, Y0 = 200, 150


def _photo_picture(k: int) -> Picture:
    gray = np.asarray(data.astronaut()[..., 1], np.uint8)  # outside reference: scikit-image photograph
    x, y = X0 - k * TX, Y0 - k * TY
    return Picture(np.ascontiguousarray(gray[y : y + H, x : x + W]), None, None, "mono", 8)


def _grid(coded, ref, dx, dy, intra=None):
    f = VectorField.uniform_grid(W, H, block=B, coded_time=coded, reference_time=ref, dx=dx, dy=dy)
    if intra is None:
        return f
    return VectorField.from_arrays(
        width=W, height=H, coded_time=coded, reference_time=ref, x=f.x, y=f.y, w=f.w, h=f.h,
        dx=np.where(intra, 0, f.dx), dy=np.where(intra, 0, f.dy), intra=intra,
    )  # fmt: skip


def _alternating(n_blocks: int) -> np.ndarray:
    rows, cols = H // B, W // B
    gy, gx = np.mgrid[0:rows, 0:cols]
    return ((gx + gy) % 2 == 1).ravel()[:n_blocks]


def _split_translation():
    """Picture 2 with its blocks alternating between pictures 1 and 0 (exact translation)."""
    n = (H // B) * (W // B)
    older = _alternating(n)
    near = _grid(2, 1, -4 * TX, -4 * TY, intra=older)
    far = _grid(2, 0, -8 * TX, -8 * TY, intra=~older)
    chain = _grid(1, 0, -4 * TX, -4 * TY)
    return ReferenceFields((near, far), (chain,)), older


def test_translation_split_over_two_references_is_predicted_within_rounding():
    fields, older = _split_translation()
    assert older.any() and (~older).any()
    # mapped onto picture 0, every vector is the composed translation -8 (TX, TY) (exact arithmetic)
    mx, my, common = common_reference_vectors(fields)
    assert common == 1
    assert np.all(mx == -8 * TX) and np.all(my == -8 * TY)
    lx, ly = vectors_on_every_reference(fields)
    assert np.all(lx[1] == -8 * TX) and np.all(ly[1] == -8 * TY)
    assert np.all(lx[0] == np.where(older, -8 * TX, -4 * TX))  # level 0: each block's own vector
    truth = _photo_picture(2)
    refs = [_photo_picture(1), _photo_picture(0)]
    pred = predict_multi_reference(refs, fields)
    # inside, every observation is the true sample; at the entering borders the references lack it
    m = 2 * max(abs(TX), abs(TY)) + 3
    diff = np.abs(pred.y.astype(int) - truth.y.astype(int))[m:-m, m:-m]
    assert diff.max() <= 1
    # each observation samples its own reference: block MC is exact inside too
    mc = predict_with("block-mc", refs, fields)
    assert np.array_equal(mc.y[m:-m, m:-m], truth.y[m:-m, m:-m])
    obmc = predict_with("obmc", refs, fields)
    assert np.abs(obmc.y.astype(int) - truth.y.astype(int))[m:-m, m:-m].max() <= 1


@pytest.mark.parametrize("distances", ["pixel", "oldest"])
def test_through_the_chain_the_split_translation_weighs_as_one_common_vector(distances):
    # the check "identical vectors": mapped onto picture 0 all blocks carry -8 (TX, TY), so
    # the coefficients are those of a one-reference field whose blocks all carry that vector
    fields, _ = _split_translation()
    qx, qy, coef, ref_index = multi_reference_coefficients(fields, distances=distances)
    same = _grid(2, 0, -8 * TX, -8 * TY)
    _, _, expected = one_reference_coefficients(same)
    assert np.allclose(coef, expected, rtol=0, atol=1e-6)
    # as coded, the two translations disagree by |4 (TX, TY)| samples: other weights
    _, _, coded, _ = multi_reference_coefficients(fields, distances="coded")
    assert np.abs(coded - expected).max() > 1e-3
    # ... while each slot keeps its own vector and samples its own reference
    assert set(np.unique(ref_index).tolist()) == {0, 1}
    used = coef > 0
    assert np.all(np.where(ref_index == 0, qx, -4 * TX)[used] == -4 * TX)
    assert np.all(np.where(ref_index == 1, qx, -8 * TX)[used] == -8 * TX)
    assert np.all(np.where(ref_index == 1, qy, -8 * TY)[used] == -8 * TY)


def test_one_reference_gives_the_one_reference_predictor_exactly():
    ref = _photo_picture(1)
    rng = np.random.default_rng(7)
    rows, cols = H // B, W // B
    field = _grid(2, 1, rng.integers(-20, 21, (rows, cols)), rng.integers(-20, 21, (rows, cols)))
    fields = ReferenceFields.single(field)
    qx0, qy0, c0 = one_reference_coefficients(field)
    qx1, qy1, c1, ref_index = multi_reference_coefficients(fields)
    assert np.array_equal(qx0, qx1) and np.array_equal(qy0, qy1) and np.array_equal(c0, c1)
    assert not ref_index.any()
    expected = predict_one_reference(ref, field)
    assert np.array_equal(predict_multi_reference([ref], fields).y, expected.y)
    assert np.array_equal(predict_with("lmmse", [ref], fields).y, predict_with("lmmse", ref, field).y)


@pytest.mark.parametrize("on", [0, 1])
def test_every_block_on_one_reference_the_chain_changes_nothing(on):
    rng = np.random.default_rng(3 + on)
    rows, cols = H // B, W // B
    dx, dy = rng.integers(-24, 25, (rows, cols)), rng.integers(-24, 25, (rows, cols))
    n = rows * cols
    intra = np.zeros(n, bool)
    used = _grid(2, 1 - on, dx, dy)
    unused = _grid(2, 1 - (1 - on), 0, 0, intra=~intra)
    pair = (used, unused) if on == 0 else (unused, used)
    # a chain far from any translation: it must not enter when no block needs mapping
    chain = _grid(1, 0, rng.integers(-40, 41, (rows, cols)), rng.integers(-40, 41, (rows, cols)))
    fields = ReferenceFields(pair, (chain,))
    refs = [_photo_picture(1), _photo_picture(0)]
    mx, my, _ = common_reference_vectors(fields)
    assert np.array_equal(mx, used.dx) and np.array_equal(my, used.dy)
    got = predict_multi_reference(refs, fields)
    expected = predict_one_reference(refs[on], used)
    assert np.array_equal(got.y, expected.y)


def test_a_pixel_compares_its_candidates_on_the_oldest_reference_among_them():
    # three references, blocks on the two nearest only: the chain beyond picture 1 (1 -> 0) never
    # enters, whatever it holds
    n = (H // B) * (W // B)
    older = _alternating(n)
    near = _grid(3, 2, -4 * TX, -4 * TY, intra=older)
    mid = _grid(3, 1, -8 * TX, -8 * TY, intra=~older)
    far = _grid(3, 0, 0, 0, intra=np.ones(n, bool))
    rng = np.random.default_rng(2)
    rows, cols = H // B, W // B
    wild = _grid(1, 0, rng.integers(-40, 41, (rows, cols)), rng.integers(-40, 41, (rows, cols)))
    calm = _grid(1, 0, -4 * TX, -4 * TY)
    step = _grid(2, 1, -4 * TX, -4 * TY)
    ca = multi_reference_coefficients(ReferenceFields((near, mid, far), (step, wild)))[2]
    cb = multi_reference_coefficients(ReferenceFields((near, mid, far), (step, calm)))[2]
    assert np.array_equal(ca, cb)


def test_pixels_whose_candidates_share_one_reference_compare_them_as_coded():
    # left columns on picture 1 with scattered vectors, the last column on picture 0: pixels whose
    # candidates all lie on picture 1 must not see the chain (2 -> 1), the others must
    rows, cols = H // B, W // B
    rng = np.random.default_rng(9)
    last = (np.mgrid[0:rows, 0:cols][1] == cols - 1).ravel()
    dx, dy = rng.integers(-24, 25, (rows, cols)), rng.integers(-24, 25, (rows, cols))
    near = _grid(2, 1, dx, dy, intra=last)
    far = _grid(2, 0, -8 * TX, -8 * TY, intra=~last)
    wild = _grid(1, 0, rng.integers(-40, 41, (rows, cols)), rng.integers(-40, 41, (rows, cols)))
    calm = _grid(1, 0, 0, 0)
    _, _, ca, ref_index = multi_reference_coefficients(ReferenceFields((near, far), (wild,)))
    _, _, cb, _ = multi_reference_coefficients(ReferenceFields((near, far), (calm,)))
    alone = ~((ref_index == 1) & (ca != 0)).any(axis=0)
    assert alone.any() and (~alone).any()
    assert np.array_equal(ca[:, alone], cb[:, alone])
    assert not np.array_equal(ca[:, ~alone], cb[:, ~alone])


def test_composing_along_the_chain_of_a_translation_sums_the_translations():
    # three references: chain 0 -> 1 moves by t1, 1 -> 2 by t2 (intra holes filled by the nearest
    # inter block's vector, which is the same translation)
    t1, t2 = (5, -7), (-3, 11)
    hole = np.zeros((H // B) * (W // B), bool)
    hole[[4, 9]] = True
    chain = (_grid(2, 1, *t1, intra=hole), _grid(1, 0, *t2))  # pictures 2 -> 1 -> 0
    rng = np.random.default_rng(11)
    cx = rng.uniform(0, W - 1, 50)
    cy = rng.uniform(0, H - 1, 50)
    vx = rng.integers(-30, 31, 50)
    vy = rng.integers(-30, 31, 50)
    start = rng.integers(0, 3, 50)
    mx, my = compose_along_chain(cx, cy, vx, vy, chain, start, 2)
    ex = vx + np.where(start == 0, t1[0] + t2[0], np.where(start == 1, t2[0], 0))
    ey = vy + np.where(start == 0, t1[1] + t2[1], np.where(start == 1, t2[1], 0))
    assert np.array_equal(mx, ex) and np.array_equal(my, ey)
    # the same through the per-reference levels of whole fields (blocks on references 0, 1, 2)
    n = (H // B) * (W // B)
    which = np.arange(n) % 3
    fields = ReferenceFields(tuple(_grid(3, 2 - k, 4 * k, -4 * k, intra=which != k) for k in range(3)), chain)
    lx, ly = vectors_on_every_reference(fields)
    assert np.array_equal(lx[2], np.select([which == 0, which == 1], [0 + t1[0] + t2[0], 4 + t2[0]], 8))
    assert np.array_equal(ly[2], np.select([which == 0, which == 1], [0 + t1[1] + t2[1], -4 + t2[1]], -8))
    assert np.array_equal(lx[1], np.select([which == 0, which == 1], [t1[0], 4], 8))


def test_reference_fields_refuse_inconsistent_input():
    a = _grid(2, 1, 4, 0)
    b = _grid(2, 0, 8, 0)
    chain = _grid(1, 0, 4, 0)
    with pytest.raises(ParameterError, match="more than one field"):
        ReferenceFields((a, b), (chain,))
    with pytest.raises(ParameterError, match="chain"):
        ReferenceFields((a, _grid(2, 0, 0, 0, intra=np.ones(len(a), bool))), ())
    with pytest.raises(ParameterError, match="nearest first"):
        ReferenceFields((_grid(2, 0, 0, 0, intra=np.ones(len(a), bool)), a), (chain,))


def test_estimator_takes_the_older_reference_where_only_it_matches():
    # picture 2 repeats picture 0 exactly; picture 1 is noise: every block belongs on picture 0 at
    # zero motion (zero SAD; common practice for a repeated picture)
    p0 = _photo_picture(0)
    noise = np.random.default_rng(5).integers(0, 256, (H, W)).astype(np.uint8)
    pics = {0.0: p0, 1.0: Picture(noise, None, None, "mono", 8), 2.0: p0}
    cache: dict = {}
    fields = estimate_multi_reference(pics, coded_time=2.0, reference_times=[1.0, 0.0], qp=27, cache=cache)
    assert fields.reference_times == (1.0, 0.0)
    assert fields.reference_use()[0] == 0 and fields.reference_use()[1] == len(fields.fields[0])
    far = fields.fields[1]
    assert not far.dx.any() and not far.dy.any()
    # the common grid is the nearest field's, as estimate_field gives it
    near = estimate_field(pics[2.0], pics[1.0], coded_time=2.0, reference_time=1.0, qp=27)
    assert np.array_equal(fields.fields[0].x, near.x) and np.array_equal(fields.fields[0].w, near.w)
    assert (1.0, 0.0) in cache  # the chain: picture 1 against picture 0
    pred = predict_multi_reference([pics[1.0], pics[0.0]], fields)
    assert np.array_equal(pred.y, p0.y)


@pytest.fixture(scope="module")
def pan_clip(tmp_path_factory):
    return write_astronaut_pan(tmp_path_factory.mktemp("clip") / "pan.y4m", 4)


def test_predict_references_records_the_count_and_one_is_the_default(pan_clip):
    one = CliRunner().invoke(app, ["predict", str(pan_clip), "--json"])
    same = CliRunner().invoke(app, ["predict", str(pan_clip), "--json", "--references", "1"])
    two = CliRunner().invoke(app, ["predict", str(pan_clip), "--json", "--references", "2"])
    for res in (one, same, two):
        assert res.exit_code == 0, res.output
    a, b, c = (json.loads(r.stdout) for r in (one, same, two))
    assert a["references"] == 1 and c["references"] == 2
    strip = ("seconds_per_picture",)
    rows = [[{k: v for k, v in row.items() if k not in strip} for row in s["summary"]] for s in (a, b)]
    assert rows[0] == rows[1]
    assert sum(c["reference_use"]) > 0 and len(c["reference_use"]) == 2


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--references", "0"], "--references must be an integer in 1..4, got 0"),
        (["--references", "5"], "--references must be an integer in 1..4, got 5"),
        (["--references", "2", "--vectors", "x264"], "AVMotionVector"),
    ],
)
def test_predict_bad_references_is_one_line(pan_clip, args, needle):
    res = CliRunner().invoke(app, ["predict", str(pan_clip), *args])
    assert res.exit_code != 0
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and needle in lines[0], res.stderr
