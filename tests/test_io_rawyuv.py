"""Raw planar .yuv files, checked against PyAV's rawvideo demuxer (FFmpeg)."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from test_io_y4m import PIX_FMT, av_planes, random_picture

from synth import FormatError, ParameterError, Picture
from synth.io import (
    RawYUVReader,
    geometry_from_name,
    open_clip,
    parse_size,
    write_clip,
    write_y4m,
    write_yuv,
)

av = pytest.importorskip("av")


@pytest.mark.parametrize("chroma_format,bit_depth", [("420", 8), ("422", 10), ("444", 12), ("mono", 8)])
def test_pyav_rawvideo_reads_our_file_identically(tmp_path, chroma_format, bit_depth):
    # Reference: FFmpeg's rawvideo demuxer with an explicit pixel format (planar, little-endian above 8 bits).
    rng = np.random.default_rng(10)
    pics = [random_picture(rng, 24, 8, chroma_format, bit_depth) for _ in range(3)]
    path = tmp_path / "clip.yuv"
    assert write_yuv(path, pics) == 3
    pix_fmt = PIX_FMT[(chroma_format, bit_depth)]
    with av.open(str(path), format="rawvideo", options={"video_size": "24x8", "pixel_format": pix_fmt}) as c:
        decoded = [av_planes(f) for f in c.decode(video=0)]
    assert len(decoded) == 3
    with RawYUVReader(path, size="24x8", chroma_format=chroma_format, bit_depth=bit_depth) as r:
        assert len(r) == 3
        for i in (2, 0, 1):
            for a, b, c in zip(r.read(i).planes, decoded[i], pics[i].planes):
                np.testing.assert_array_equal(a, b)
                np.testing.assert_array_equal(a, c)


def test_raw_file_holds_the_y4m_samples_without_headers(tmp_path):
    rng = np.random.default_rng(11)
    pics = [random_picture(rng, 16, 8, "420", 10) for _ in range(2)]
    write_y4m(tmp_path / "a.y4m", pics)
    write_clip(tmp_path / "a.yuv", pics)
    y4m = (tmp_path / "a.y4m").read_bytes()
    body = y4m.split(b"\n", 1)[1].replace(b"FRAME\n", b"")
    assert body == (tmp_path / "a.yuv").read_bytes()


@pytest.mark.parametrize(
    "name,expected",
    [
        ("foo_1920x1080_50.yuv", {"width": 1920, "height": 1080, "frame_rate": Fraction(50)}),
        (
            "Hall_1920x1080_50_10bit_422.yuv",
            {"width": 1920, "height": 1080, "frame_rate": Fraction(50), "bit_depth": 10, "chroma_format": "422"},
        ),
        ("belt_416x240_29.97fps.yuv", {"width": 416, "height": 240, "frame_rate": Fraction(30000, 1001)}),
        ("cam_yuv420p10le_352x288.yuv", {"width": 352, "height": 288, "bit_depth": 10, "chroma_format": "420"}),
        ("depth_64x48_gray.yuv", {"width": 64, "height": 48, "chroma_format": "mono"}),
        ("scan_352x288_444_p16.yuv", {"width": 352, "height": 288, "bit_depth": 16, "chroma_format": "444"}),
        ("nothing.yuv", {}),
    ],
)
def test_geometry_from_name(name, expected):
    assert geometry_from_name(name) == expected


def test_geometry_from_name_and_caller_overrides(tmp_path):
    rng = np.random.default_rng(12)
    pics = [random_picture(rng, 8, 4, "422", 10) for _ in range(2)]
    path = tmp_path / "dock_8x4_30_10bit_422.yuv"
    write_yuv(path, pics)
    with open_clip(path) as r:
        assert (r.info.width, r.info.height, r.info.chroma_format, r.info.bit_depth) == (8, 4, "422", 10)
        assert r.info.frame_rate == 30 and len(r) == 2
        np.testing.assert_array_equal(r.read(1).cb, pics[1].cb)
    # the caller's geometry wins over the name: 256 bytes are 8 monochrome 8-bit 8x4 frames
    with open_clip(path, chroma_format="mono", bit_depth=8, size="8x4") as r:
        assert (len(r), r.info.chroma_format, r.info.bit_depth) == (8, "mono", 8)
    with pytest.raises(FormatError, match="not a multiple of the frame size 96 bytes"):
        open_clip(path, chroma_format="444", bit_depth=8)


def test_parse_size():
    assert parse_size("1920x1080") == (1920, 1080)
    assert parse_size((64, 48)) == (64, 48)
    for bad in ("1920", "x1080", "0x4", "axb", "12x-3"):
        with pytest.raises(ParameterError, match="size must be"):
            parse_size(bad)


@pytest.mark.parametrize(
    "name,content,options,match",
    [
        ("c_8x4.yuv", b"", {}, "file is empty"),
        (
            "c_8x4.yuv",
            bytes(48 * 3 - 5),
            {},
            r"file size 139 bytes is not a multiple of the frame size 48 bytes .*2 whole frames and 43 bytes left over",
        ),
        ("nosize.yuv", bytes(48), {}, "needs its size"),
        ("c_7x4.yuv", bytes(48), {}, "4:2:0 needs an even width and height, got 7x4"),
        ("c_8x4.yuv", bytes(48), {"chroma_format": "411"}, "chroma format must be one of"),
        ("c_8x4.yuv", bytes(48), {"bit_depth": 17}, "bit depth must be an integer 8..16"),
        ("c_8x4.yuv", b"\x00\xff" * 48, {"bit_depth": 10}, "sample value 65280, above the 10-bit maximum 1023"),
    ],
)
def test_bad_raw_files(tmp_path, name, content, options, match):
    path = tmp_path / name
    path.write_bytes(content)
    with pytest.raises(FormatError, match=match):
        with open_clip(path, **options) as r:
            r.read(0)


def test_missing_raw_file_and_index(tmp_path):
    with pytest.raises(FormatError, match="no such file"):
        open_clip(tmp_path / "gone_8x4.yuv")
    path = tmp_path / "c_8x4.yuv"
    path.write_bytes(bytes(48 * 2))
    with open_clip(path) as r:
        with pytest.raises(FormatError, match="frame index 5 out of range"):
            r.read(5)
    with pytest.raises(ParameterError, match="matrix does not apply to a raw planar YUV file"):
        open_clip(path, matrix="709")


def test_write_yuv_is_atomic_and_checks_formats(tmp_path):
    with pytest.raises(FormatError, match="picture 1 is 8x8 444"):
        write_yuv(tmp_path / "x.yuv", [Picture.blank(8, 8), Picture.blank(8, 8, chroma_format="444")])
    with pytest.raises(FormatError, match="no pictures"):
        write_yuv(tmp_path / "x.yuv", [])
    assert list(tmp_path.iterdir()) == []
