"""Image sequences and the R'G'B' <-> Y'CbCr conversion, checked against scikit-image."""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from synth import FormatError, ParameterError, Picture
from synth.io import ImageSequenceReader, open_clip, picture_to_rgb, rgb_to_picture, write_clip, write_images

skimage_color = pytest.importorskip("skimage.color")


def _png(path, rgb_uint):
    ok, data = cv2.imencode(".png", np.ascontiguousarray(rgb_uint[..., ::-1]) if rgb_uint.ndim == 3 else rgb_uint)
    assert ok
    path.write_bytes(data.tobytes())


def _decode_png_with_pyav(path):
    av = pytest.importorskip("av")
    with av.open(str(path)) as c:
        frame = next(iter(c.decode(video=0)))
        return frame.to_ndarray(format="rgb48le")


def test_bt601_matches_scikit_image(tmp_path):
    # Reference: skimage.color.rgb2ycbcr implements ITU-R BT.601 studio range (Y' 16..235, C 16..240).
    rng = np.random.default_rng(20)
    rgb = rng.integers(0, 256, (12, 16, 3)).astype(np.uint8)
    _png(tmp_path / "one.png", rgb)
    with open_clip(tmp_path / "one.png", chroma_format="444") as r:
        pic = r.read(0)
    ref = skimage_color.rgb2ycbcr(rgb.astype(np.float64) / 255.0)
    for ours, theirs in zip(pic.planes, (ref[..., 0], ref[..., 1], ref[..., 2])):
        assert np.abs(ours.astype(np.float64) - theirs).max() <= 0.51  # rounding only


@pytest.mark.parametrize(
    "matrix,expected",
    # 100 % red in 8-bit studio range: BT.601 (81, 90, 240), BT.709 (63, 102, 240) (from memory; the
    # published colour-bar values, also recomputed from the Kr/Kb of ITU-R BT.601-7 and BT.709-6).
    [("601", (81, 90, 240)), ("709", (63, 102, 240))],
)
def test_known_values_for_red(matrix, expected):
    rgb = np.zeros((2, 2, 3), np.float32)
    rgb[..., 0] = 1.0
    pic = rgb_to_picture(rgb, matrix=matrix)
    assert (int(pic.y[0, 0]), int(pic.cb[0, 0]), int(pic.cr[0, 0])) == expected


def test_ten_bit_quantisation_scales_by_four():
    # BT.709-6 item 4.6: n-bit codes are the 8-bit levels times 2^(n-8): black 64, white 940 at 10 bits.
    rgb = np.zeros((2, 4, 3), np.float32)
    rgb[:, 2:] = 1.0
    pic = rgb_to_picture(rgb, matrix="709", bit_depth=10, chroma_format="422")
    assert pic.y.tolist() == [[64, 64, 940, 940]] * 2
    assert pic.cb.tolist() == [[512, 512]] * 2


def test_sixteen_bit_png_round_trip(tmp_path):
    rng = np.random.default_rng(21)
    rgb16 = rng.integers(0, 65536, (8, 10, 3)).astype(np.uint16)
    _png(tmp_path / "deep_000.png", rgb16)
    with open_clip(tmp_path / "deep_%03d.png", chroma_format="444") as r:
        assert r.info.bit_depth == 16 and len(r) == 1
        pic = r.read(0)
    write_images(tmp_path / "out_%03d.png", [pic])
    data = (tmp_path / "out_000.png").read_bytes()
    # PNG specification (ISO/IEC 15948), IHDR: bit depth at byte 24, colour type at byte 25 (2 = truecolour)
    assert data[12:16] == b"IHDR" and data[24] == 16 and data[25] == 2
    back = _decode_png_with_pyav(tmp_path / "out_000.png")  # independent PNG decoder (FFmpeg's)
    assert back.dtype == np.uint16 and back.shape == (8, 10, 3)
    # 16-bit studio range keeps R'G'B' to within a few codes of 65535 (clipping aside)
    inside = np.all((rgb16 > 600) & (rgb16 < 64900), axis=-1)
    assert np.abs(back.astype(np.int64) - rgb16)[inside].max() <= 8


def test_eight_bit_write_read_round_trip_is_close(tmp_path):
    rng = np.random.default_rng(22)
    rgb = cv2.GaussianBlur(rng.random((32, 48, 3)).astype(np.float32), (0, 0), 2.0)
    pics = [rgb_to_picture(rgb, matrix="709"), rgb_to_picture(rgb[::-1].copy(), matrix="709")]
    assert write_clip(tmp_path / "f_%04d.png", pics, matrix="709", start=7) == 2
    assert sorted(p.name for p in tmp_path.iterdir()) == ["f_0007.png", "f_0008.png"]
    with open_clip(tmp_path / "f_%04d.png", matrix="709") as r:
        assert len(r) == 2 and r.info.container == "png"
        got = r.read(1)
        # luma: 8-bit R'G'B' rounding only; chroma: also bilinear up- then box down-sampling
        assert np.abs(got.y.astype(int) - pics[1].y).max() <= 1
        for a, b in zip(got.planes[1:], pics[1].planes[1:]):
            assert np.abs(a.astype(int) - b).max() <= 4


def test_grey_and_alpha_images(tmp_path):
    _png(tmp_path / "g1.png", np.full((4, 6), 255, np.uint8))
    pic = open_clip(tmp_path / "g1.png").read(0)
    assert int(pic.y[0, 0]) == 235 and np.all(pic.cb == 128) and np.all(pic.cr == 128)
    rgba = np.zeros((4, 6, 4), np.uint8)
    rgba[..., 3] = 255
    ok, data = cv2.imencode(".png", rgba)
    (tmp_path / "a1.png").write_bytes(data.tobytes())
    assert np.all(open_clip(tmp_path / "a1.png").read(0).y == 16)


def test_pattern_grammar_and_runs(tmp_path):
    img = np.zeros((4, 6, 3), np.uint8)
    for n in (1, 2, 3, 5):
        _png(tmp_path / f"shot{n}.png", img)
    _png(tmp_path / "shot0004x.png", img)  # does not match
    with ImageSequenceReader(tmp_path / "shot%d.png") as r:
        assert len(r) == 3 and r.first_number == 1  # the run stops at the gap before 5
    (tmp_path / "100%_001.png").write_bytes((tmp_path / "shot1.png").read_bytes())
    with ImageSequenceReader(tmp_path / "100%%_%03d.png") as r:
        assert len(r) == 1
    for bad in ("shot%s.png", "a%d_%d.png", "x%.png"):
        with pytest.raises(ParameterError, match="exactly one %d"):
            ImageSequenceReader(tmp_path / bad)
    with pytest.raises(FormatError, match="no file matches"):
        ImageSequenceReader(tmp_path / "none_%03d.png")
    with pytest.raises(FormatError, match="no such file"):
        open_clip(tmp_path / "absent.png")
    with pytest.raises(ParameterError, match="matrix must be 601 or 709"):
        open_clip(tmp_path / "shot%d.png", matrix="2020")


def test_bad_images(tmp_path):
    _png(tmp_path / "m_1.png", np.zeros((4, 6, 3), np.uint8))
    _png(tmp_path / "m_2.png", np.zeros((6, 6, 3), np.uint8))
    (tmp_path / "m_3.png").write_bytes(b"not a png")
    with open_clip(tmp_path / "m_%d.png") as r:
        assert len(r) == 3
        with pytest.raises(FormatError, match="6x6 uint8 differs from the first image"):
            r.read(1)
        with pytest.raises(FormatError, match="OpenCV cannot decode this image"):
            r.read(2)
        with pytest.raises(FormatError, match="frame index 3 out of range"):
            r.read(3)


def test_odd_sizes_are_cropped_for_420(tmp_path):
    _png(tmp_path / "odd.png", np.zeros((5, 7, 3), np.uint8))
    with open_clip(tmp_path / "odd.png") as r:
        assert (r.info.width, r.info.height) == (6, 4)
        assert r.read(0).cb.shape == (2, 3)


def test_write_images_rejects_bad_patterns(tmp_path):
    with pytest.raises(ParameterError, match="must end in .png"):
        write_images(tmp_path / "f_%03d.jpg", [Picture.blank(4, 4)])
    with pytest.raises(ParameterError, match="needs a %d"):
        write_images(tmp_path / "f.png", [Picture.blank(4, 4)])


def test_picture_to_rgb_inverts_rgb_to_picture():
    rng = np.random.default_rng(23)
    rgb = rng.random((6, 8, 3)).astype(np.float32) * 0.9 + 0.05
    back = picture_to_rgb(rgb_to_picture(rgb, matrix="601", chroma_format="444", bit_depth=16))
    assert np.abs(back - rgb).max() < 1e-3
