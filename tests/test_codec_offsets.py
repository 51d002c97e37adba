"""Corrective block offsets: known quarter-pel shifts of real photographs, identity, parameters."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import ndimage

from synth.codec.dctif import quarter_pel_phases
from synth.codec.offsets import motion_lagrangian, refine_with_offsets
from synth.errors import FormatError, ParameterError
from synth.io import rgb_to_ycbcr420
from synth.io.offsets_file import read_offsets, write_offsets
from synth.offset_field import OffsetField, offsets_document
from synth.picture import Picture

skdata = pytest.importorskip("skimage.data")


def _camera_pair(sx: int, sy: int, *, colour: bool = False):
    """A real photograph seen through a band-limited camera (Gaussian optics, sigma 2 samples of the
    full-resolution image) and sampled every 4th sample, once as is and once displaced by (sx, sy)
    full-resolution samples: a displacement of exactly (sx/4, sy/4) at the sampled resolution.
    Returns (synthetic, target): the target's content at (x, y) is the synthetic's at
    (x + sx/4, y + sy/4), i.e. the expected offset is (sx, sy) in quarter-pel (synth/field.py).
    """
    img = skdata.astronaut() if colour else skdata.camera()
    img = img.astype(np.float32)
    blur = (2.0, 2.0, 0) if colour else 2.0
    img = ndimage.gaussian_filter(img, blur)
    m = 16
    base = img[m : m + 480, m : m + 480][::4, ::4]
    moved = img[m + sy : m + sy + 480, m + sx : m + sx + 480][::4, ::4]
    if colour:
        to_pic = lambda a: rgb_to_ycbcr420(np.clip(a[..., ::-1] + 0.5, 0, 255).astype(np.uint8))  # noqa: E731
    else:
        flat = np.full((60, 60), 128.0)
        to_pic = lambda a: Picture.from_float([a, flat, flat], chroma_format="420", bit_depth=8)  # noqa: E731
    return to_pic(base), to_pic(moved)


def _textured(picture: Picture, field, block: int) -> np.ndarray:
    var = np.array([picture.y[y : y + block, x : x + block].astype(float).var() for x, y in zip(field.x, field.y)])
    return var > 200.0


@pytest.mark.parametrize("shift", [(3, -5), (-6, 2), (1, 0)])
@pytest.mark.parametrize("block", [8, 16])
def test_finds_a_known_quarter_pel_shift_on_textured_blocks(shift, block):
    # Real photograph: scikit-image's 'camera' test image.
    synthetic, target = _camera_pair(*shift)
    res = refine_with_offsets(target, synthetic, block=block, window=2, qp=12)
    tex = _textured(synthetic, res.field, block)
    assert tex.sum() >= (10 if block == 16 else 40)
    hit = (res.field.dx[tex] == shift[0]) & (res.field.dy[tex] == shift[1])
    assert hit.mean() >= 0.95
    assert res.stats.psnr_after["Y"] > res.stats.psnr_before["Y"] + 5.0
    assert res.stats.sad_after < 0.5 * res.stats.sad_before


def test_chroma_follows_the_luma_offsets():
    # Real colour photograph ('astronaut'), converted to 4:2:0 with BT.601 by the project's reader path.
    synthetic, target = _camera_pair(4, -4, colour=True)
    res = refine_with_offsets(target, synthetic, block=16, window=2, metric="sad", qp=12)
    assert np.mean((res.field.dx == 4) & (res.field.dy == -4)) >= 0.8
    for plane in ("Cb", "Cr"):
        assert res.stats.psnr_after[plane] > res.stats.psnr_before[plane] + 3.0


def test_identical_picture_gives_zero_offsets_at_one_bit_per_component():
    # H.264 clause 9.1.1: se(0) is the one-bit code word '1'.
    synthetic, _ = _camera_pair(0, 0, colour=True)
    for metric in ("satd", "sad"):
        res = refine_with_offsets(synthetic, synthetic, block=16, window=2, metric=metric)
        assert np.all(res.field.dx == 0) and np.all(res.field.dy == 0)
        assert res.stats.bits_total == 2 * res.stats.blocks
        assert res.stats.bits_per_block == 2.0
        assert res.stats.zero_share == 1.0
        for a, b in zip(res.prediction.planes, synthetic.planes):
            np.testing.assert_array_equal(a, b)


def test_offsets_field_document_and_determinism():
    synthetic, target = _camera_pair(2, 1)
    a = refine_with_offsets(target, synthetic, block=16, window=1, time=5)
    b = refine_with_offsets(target, synthetic, block=16, window=1, time=5)
    np.testing.assert_array_equal(a.field.dx, b.field.dx)
    np.testing.assert_array_equal(a.prediction.y, b.prediction.y)
    assert isinstance(a.field, OffsetField)
    assert a.field.coded_time == a.field.reference_time == 5.0
    assert np.all(np.abs(a.field.dx) <= 4) and np.all(np.abs(a.field.dy) <= 4)
    doc = offsets_document(a.field, statistics=a.stats, extra={"past": 0})
    assert doc["reference"] == "synthetic" and doc["past"] == 0 and doc["time"] == 5.0
    assert doc["search"] == {"block": 16, "window": 1, "metric": "satd", "lambda": a.stats.lagrangian}
    assert len(doc["blocks"]) == a.stats.blocks == (120 // 16) ** 2
    assert doc["statistics"]["bits_total"] == a.stats.bits_total


def test_offsets_file_round_trip_and_malformed_files(tmp_path):
    synthetic, target = _camera_pair(-3, 2)
    res = refine_with_offsets(target, synthetic, block=8, window=1, time=3)
    path = tmp_path / "off.json"
    write_offsets(path, res.field, statistics=res.stats, extra={"source": "camera"})
    field, doc = read_offsets(path)
    for k in ("x", "y", "w", "h", "dx", "dy", "intra"):
        np.testing.assert_array_equal(getattr(field, k), getattr(res.field, k))
    assert field.coded_time == field.reference_time == 3.0 and doc["source"] == "camera"
    bad = json.loads(path.read_text())
    bad["blocks"][1][0] = 4  # block 1 now overlaps block 0
    (tmp_path / "bad.json").write_text(json.dumps(bad))
    with pytest.raises(FormatError, match="block 1"):
        read_offsets(tmp_path / "bad.json")
    bad = json.loads(path.read_text())
    bad["schema_version"] = 7
    (tmp_path / "v7.json").write_text(json.dumps(bad))
    with pytest.raises(FormatError, match="schema version"):
        read_offsets(tmp_path / "v7.json")
    (tmp_path / "cut.json").write_text(path.read_text()[:200])
    with pytest.raises(FormatError, match="not a JSON offsets file"):
        read_offsets(tmp_path / "cut.json")
    # files of the older version key are still read
    old = json.loads(path.read_text())
    old["version"] = old.pop("schema_version")
    (tmp_path / "old.json").write_text(json.dumps(old))
    assert read_offsets(tmp_path / "old.json")[0].time == 3.0
    # the one time must be a finite number (RFC 8259 JSON has no NaN; Python's reader accepts it)
    bad = json.loads(path.read_text())
    bad["time"] = float("nan")
    (tmp_path / "nan.json").write_text(json.dumps(bad))
    with pytest.raises(FormatError, match="time must be a finite number"):
        read_offsets(tmp_path / "nan.json")
    # a block outside the picture is named
    bad = json.loads(path.read_text())
    bad["blocks"][-1][0] = 2000
    (tmp_path / "out.json").write_text(json.dumps(bad))
    with pytest.raises(FormatError, match=f"block {len(bad['blocks']) - 1} .*outside"):
        read_offsets(tmp_path / "out.json")


def test_identical_pictures_write_strict_json(tmp_path):
    # RFC 8259 has no Infinity: the infinite PSNR of identical pictures is written as null
    synthetic, _ = _camera_pair(0, 0)
    res = refine_with_offsets(synthetic, synthetic, block=16, window=1)
    path = tmp_path / "same.json"
    write_offsets(path, res.field, statistics=res.stats)
    doc = json.loads(path.read_text(), parse_constant=lambda c: pytest.fail(f"non-strict JSON constant {c}"))
    assert doc["statistics"]["psnr_before"]["Y"] is None


def test_offset_field_has_one_time():
    f = OffsetField.from_blocks(width=16, height=16, time=2.0, x=[0], y=[0], w=16, h=16, dx=[1], dy=[0])
    assert f.time == f.coded_time == f.reference_time == 2.0
    with pytest.raises(ParameterError, match="one time"):
        OffsetField.from_arrays(
            width=16, height=16, coded_time=2, reference_time=3, x=[0], y=[0], w=16, h=16, dx=[0], dy=[0]
        )


def test_picture_not_a_multiple_of_the_block_keeps_its_rim():
    synthetic, target = _camera_pair(3, 3)
    crop = lambda p: Picture(p.y[:100, :72].copy(), p.cb[:50, :36].copy(), p.cr[:50, :36].copy(), "420", 8)  # noqa: E731
    s, t = crop(synthetic), crop(target)
    res = refine_with_offsets(t, s, block=16, window=2)
    assert res.stats.blocks == (100 // 16) * (72 // 16)
    assert res.field.gaps_allowed
    np.testing.assert_array_equal(res.prediction.y[96:, :], s.y[96:, :])
    np.testing.assert_array_equal(res.prediction.y[:, 64:], s.y[:, 64:])


def test_half_pel_filter_reproduces_a_ramp():
    # A symmetric interpolation filter with unit DC gain reproduces linear signals at the half-sample
    # position (textbook property of the H.265 DCT-IF half-pel taps, sum 64, symmetric).
    ramp = np.tile(np.arange(32, dtype=np.float32) * 3.0, (8, 1))
    ph = quarter_pel_phases(ramp, pad=0)
    np.testing.assert_allclose(ph[0, 2][:, 4:-4], ramp[:, 4:-4] + 1.5, atol=1e-4)
    np.testing.assert_array_equal(ph[0, 0], ramp)


def test_lagrangian_follows_the_h264_reference_encoder_relation():
    # lambda_motion = sqrt(0.85 * 2^((QP-12)/3)) (Wiegand et al. 2003): QP 12 -> sqrt(0.85).
    assert motion_lagrangian(12) == pytest.approx(np.sqrt(0.85))
    assert motion_lagrangian(18) / motion_lagrangian(12) == pytest.approx(2.0)
    assert motion_lagrangian(12, bit_depth=10) == pytest.approx(4 * np.sqrt(0.85))


def test_bad_parameters_raise_parameter_errors():
    synthetic, target = _camera_pair(0, 0)
    with pytest.raises(ParameterError, match="block must be one of"):
        refine_with_offsets(target, synthetic, block=12)
    with pytest.raises(ParameterError, match="window must be"):
        refine_with_offsets(target, synthetic, window=9)
    with pytest.raises(ParameterError, match="metric must be"):
        refine_with_offsets(target, synthetic, metric="ssd")
    with pytest.raises(ParameterError, match="qp must be"):
        refine_with_offsets(target, synthetic, qp=float("nan"))
    with pytest.raises(ParameterError, match="lagrangian"):
        refine_with_offsets(target, synthetic, lagrangian=-1.0)
    small = Picture.blank(64, 64)
    with pytest.raises(ParameterError, match="differ"):
        refine_with_offsets(small, synthetic)


@pytest.fixture(scope="module")
def shifted_clip(tmp_path_factory):
    """Five pictures of the band-limited 'camera' photograph, 1 sample right per picture."""
    from synth.io import write_clip

    img = ndimage.gaussian_filter(skdata.camera().astype(np.float32), 1.0)
    flat = np.full((32, 64), 128.0)
    pics = [Picture.from_float([img[100:164, 100 + k : 228 + k], flat, flat], chroma_format="420", bit_depth=8)
            for k in range(5)]  # fmt: skip
    path = tmp_path_factory.mktemp("clip") / "shift.y4m"
    write_clip(path, pics)
    return path


def test_offsets_command_writes_the_file_and_the_prediction(shifted_clip, tmp_path):
    from typer.testing import CliRunner

    from synth.cli import app
    from synth.expgolomb import se_codeword
    from synth.io import open_clip

    out, pred = tmp_path / "off.json", tmp_path / "pred.y4m"
    res = CliRunner().invoke(app, [
        "offsets", str(shifted_clip), "--past", "0", "--future", "4", "--at", "2", "-o", str(out), "--maker", "average",
        "--offset-block", "8", "--offset-window", "1", "--metric", "sad", "--prediction", str(pred), "--json",
    ])  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    field, doc = read_offsets(out)
    assert doc["maker"] == "average" and doc["past"] == 0 and field.time == 2.0
    assert len(field) == summary["blocks"] == (64 // 8) * (128 // 8)
    # the bit count is the length of the se(v) code words (H.264 clause 9.1.1) of every component
    assert summary["bits_total"] == sum(len(se_codeword(v)) for v in field.dx.tolist() + field.dy.tolist())
    with open_clip(pred) as r:
        assert len(r) == 1
    # the references' average of a pan is blurred; the offsets only correct it
    assert summary["psnr_after"]["Y"] >= summary["psnr_before"]["Y"]


@pytest.mark.parametrize(
    "args, message",
    [
        (["--at", "7"], "--at must be a picture number in 0..4"),
        (["--at", "4"], "--at 4 must lie strictly between"),
        (["--at", "2", "--offset-window", "9"], "--offset-window must be an integer in 0..8"),
        (["--at", "2", "--metric", "ssd"], "--metric must be one of"),
        (["--at", "2", "--maker", "estimator"], "--maker must be one of"),
        (["--at", "2", "--prediction", "p.png"], "--prediction must end in .y4m"),
    ],
)
def test_offsets_command_errors_are_one_line(shifted_clip, tmp_path, args, message):
    from typer.testing import CliRunner

    from synth.cli import app

    out = tmp_path / "off.json"
    res = CliRunner().invoke(app, ["offsets", str(shifted_clip), "--past", "0", "--future", "4", "-o", str(out), *args])
    assert res.exit_code == 2 and message in res.output, res.output
    assert len(res.output.strip().splitlines()) == 1 and not out.exists()
