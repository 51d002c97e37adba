"""YUV4MPEG2 reading and writing, checked against PyAV (FFmpeg's YUV4MPEG2 demuxer and muxer)."""

from __future__ import annotations

import os
import tempfile
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from synth import FormatError, Picture
from synth.io import Y4MReader, format_y4m_header, open_clip, parse_y4m_header, write_y4m
from synth.io.planar import PositionalFile
from synth.picture import ClipInfo, chroma_shape

av = pytest.importorskip("av")

# (chroma format, bit depth) -> FFmpeg pixel format name (FFmpeg's pixdesc naming, common practice)
PIX_FMT = {
    ("420", 8): "yuv420p",
    ("422", 8): "yuv422p",
    ("444", 8): "yuv444p",
    ("mono", 8): "gray",
    ("420", 10): "yuv420p10le",
    ("422", 10): "yuv422p10le",
    ("444", 12): "yuv444p12le",
    ("mono", 10): "gray10le",
}


def random_picture(rng, width, height, chroma_format="420", bit_depth=8) -> Picture:
    dtype = np.uint8 if bit_depth == 8 else np.uint16
    top = 1 << bit_depth
    y = rng.integers(0, top, (height, width)).astype(dtype)
    cs = chroma_shape(height, width, chroma_format)
    if cs is None:
        return Picture(y, None, None, "mono", bit_depth)
    return Picture(
        y, rng.integers(0, top, cs).astype(dtype), rng.integers(0, top, cs).astype(dtype), chroma_format, bit_depth
    )


def av_planes(frame) -> list[np.ndarray]:
    """Planes of a PyAV frame without the line padding."""
    wide = frame.format.name.endswith("le")
    dtype = np.dtype("<u2") if wide else np.dtype(np.uint8)
    out = []
    for p in frame.planes:
        a = np.frombuffer(bytes(p), dtype=dtype).reshape(p.height, p.line_size // dtype.itemsize)
        out.append(a[:, : p.width])
    return out


def av_decode(path: Path) -> tuple[str, list[list[np.ndarray]]]:
    with av.open(str(path)) as c:
        frames = [(f.format.name, av_planes(f)) for f in c.decode(video=0)]
    return frames[0][0], [p for _, p in frames]


def av_write_y4m(path: Path, pictures: list[Picture], pix_fmt: str) -> None:
    """Write a Y4M with FFmpeg's yuv4mpegpipe muxer (rawvideo codec) through PyAV."""
    # FFmpeg refuses high-bit-depth Y4M unless strictness is lowered ("-strict -1").
    with av.open(str(path), "w", format="yuv4mpegpipe", options={"strict": "-1"}) as c:
        s = c.add_stream("rawvideo", rate=25)
        s.width, s.height, s.pix_fmt = pictures[0].width, pictures[0].height, pix_fmt
        for pic in pictures:
            f = av.VideoFrame(pic.width, pic.height, pix_fmt)
            for plane, data in zip(f.planes, pic.planes):
                dt = np.dtype("<u2") if pic.bit_depth > 8 else np.dtype(np.uint8)
                buf = np.zeros((plane.height, plane.line_size // dt.itemsize), dt)
                buf[:, : plane.width] = data
                plane.update(buf.tobytes())
            for pkt in s.encode(f):
                c.mux(pkt)
        for pkt in s.encode():
            c.mux(pkt)


# ---------------------------------------------------------------------------------------------
# Agreement with FFmpeg (through PyAV)
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("chroma_format,bit_depth", [("420", 8), ("422", 8), ("444", 8), ("420", 10), ("mono", 8)])
def test_pyav_decodes_our_y4m_to_identical_planes(tmp_path, chroma_format, bit_depth):
    # Reference: FFmpeg's YUV4MPEG2 demuxer (yuv4mpegdec.c), through PyAV.
    rng = np.random.default_rng(1)
    pics = [random_picture(rng, 24, 16, chroma_format, bit_depth) for _ in range(3)]
    path = tmp_path / "ours.y4m"
    write_y4m(path, pics, ClipInfo(24, 16, frame_rate=Fraction(30000, 1001)))
    pix_fmt, decoded = av_decode(path)
    assert pix_fmt == PIX_FMT[(chroma_format, bit_depth)]
    assert len(decoded) == 3
    for ours, theirs in zip(pics, decoded):
        assert len(theirs) == len(ours.planes)
        for a, b in zip(ours.planes, theirs):
            np.testing.assert_array_equal(a, b)
    with av.open(str(path)) as c:
        assert c.streams.video[0].average_rate == Fraction(30000, 1001)


@pytest.mark.parametrize(
    "chroma_format,bit_depth", [("420", 8), ("422", 8), ("444", 8), ("420", 10), ("444", 12), ("mono", 10)]
)
def test_y4m_written_by_pyav_reads_back_identically(tmp_path, chroma_format, bit_depth):
    # Reference: FFmpeg's YUV4MPEG2 muxer (yuv4mpegenc.c), through PyAV.
    rng = np.random.default_rng(2)
    pics = [random_picture(rng, 32, 8, chroma_format, bit_depth) for _ in range(2)]
    path = tmp_path / "theirs.y4m"
    av_write_y4m(path, pics, PIX_FMT[(chroma_format, bit_depth)])
    with open_clip(path) as r:
        assert (r.info.chroma_format, r.info.bit_depth, len(r)) == (chroma_format, bit_depth, 2)
        assert r.info.frame_rate == 25
        for i, pic in enumerate(pics):
            got = r.read(i)
            for a, b in zip(got.planes, pic.planes):
                np.testing.assert_array_equal(a, b)


# ---------------------------------------------------------------------------------------------
# Header grammar
# ---------------------------------------------------------------------------------------------


def test_header_grammar_all_tags():
    info = parse_y4m_header(
        b"YUV4MPEG2 W720 H576 F30000:1001 Ib A128:117 C420mpeg2 XYSCSS=420MPEG2 XCOLORRANGE=LIMITED Xflag"
    )
    assert (info.width, info.height) == (720, 576)
    assert info.frame_rate == Fraction(30000, 1001)
    assert info.interlacing == "b"
    assert info.pixel_aspect == Fraction(128, 117)
    assert (info.chroma_format, info.bit_depth, info.chroma_siting) == ("420", 8, "420mpeg2")
    assert info.extra == {"YSCSS": "420MPEG2", "COLORRANGE": "LIMITED", "flag": ""}
    # writing the header back gives the same tags
    again = parse_y4m_header(format_y4m_header(info).rstrip(b"\n"))
    assert (again.frame_rate, again.interlacing, again.pixel_aspect, again.chroma_siting, again.extra) == (
        info.frame_rate,
        info.interlacing,
        info.pixel_aspect,
        info.chroma_siting,
        info.extra,
    )


def test_header_defaults_and_unknown_values():
    # Defaults of the format (mjpegtools yuv4mpeg, FFmpeg): C420jpeg when no C tag; F0:0 and A0:0 mean unknown.
    info = parse_y4m_header(b"YUV4MPEG2 W8 H4")
    assert (info.chroma_format, info.bit_depth, info.chroma_siting, info.frame_rate) == ("420", 8, "420jpeg", 25)
    info = parse_y4m_header(b"YUV4MPEG2 W8 H4 F0:0 A0:0 I?")
    assert info.frame_rate == 0 and info.pixel_aspect is None and info.interlacing == "?"


@pytest.mark.parametrize(
    "tag,fmt,depth",
    [
        ("C420", "420", 8),
        ("C420paldv", "420", 8),
        ("C422", "422", 8),
        ("C444", "444", 8),
        ("Cmono", "mono", 8),
        ("C420p9", "420", 9),
        ("C420p10", "420", 10),
        ("C422p12", "422", 12),
        ("C444p14", "444", 14),
        ("C444p16", "444", 16),
        ("Cmono16", "mono", 16),
    ],
)
def test_chroma_tags(tag, fmt, depth):
    info = parse_y4m_header(f"YUV4MPEG2 W16 H8 {tag}".encode())
    assert (info.chroma_format, info.bit_depth) == (fmt, depth)


@pytest.mark.parametrize(
    "chroma_format,bit_depth",
    [("420", 8), ("422", 8), ("444", 8), ("mono", 8), ("420", 10), ("422", 12), ("444", 16), ("mono", 10)],
)
def test_round_trip_every_format(tmp_path, chroma_format, bit_depth):
    rng = np.random.default_rng(3)
    pics = [random_picture(rng, 20, 6, chroma_format, bit_depth) for _ in range(4)]
    path = tmp_path / "rt.y4m"
    assert write_y4m(path, iter(pics)) == 4
    with Y4MReader(path) as r:
        assert len(r) == 4
        for i in (3, 0, -1, 2):
            got = r.read(i)
            assert got.same_format(pics[i])
            for a, b in zip(got.planes, pics[i].planes):
                np.testing.assert_array_equal(a, b)


def test_frame_lines_with_parameters_and_random_access(tmp_path):
    rng = np.random.default_rng(4)
    pics = [random_picture(rng, 8, 4) for _ in range(5)]
    params = ["", "Ib", "", "XTAG=some_longer_value Ixyz", "A1:1"]
    data = bytearray(b"YUV4MPEG2 W8 H4 F25:1 C420jpeg\n")
    for pic, p in zip(pics, params):
        data += b"FRAME" + (b" " + p.encode() if p else b"") + b"\n"
        data += b"".join(pl.tobytes() for pl in pic.planes)
    path = tmp_path / "params.y4m"
    path.write_bytes(bytes(data))
    with Y4MReader(path) as r:
        assert len(r) == 5
        assert [r.frame_parameters(i) for i in range(5)] == params
        for i in (4, 1, 3, 0, 2):
            np.testing.assert_array_equal(r.read(i).cr, pics[i].cr)


def test_random_access_reads_only_the_requested_frame(tmp_path, monkeypatch):
    rng = np.random.default_rng(5)
    pics = [random_picture(rng, 64, 32) for _ in range(8)]
    path = tmp_path / "ra.y4m"
    write_y4m(path, pics)
    calls = []
    original = PositionalFile.read_at

    def spy(self, offset, size):
        calls.append((offset, size))
        return original(self, offset, size)

    monkeypatch.setattr(PositionalFile, "read_at", spy)
    with Y4MReader(path) as r:
        fb = r.info.frame_bytes
        assert all(size <= 4096 for _, size in calls)  # opening reads headers, never sample data
        calls.clear()
        pic = r.read(6)
        start = len(b"YUV4MPEG2 W64 H32 F25:1 Ip C420jpeg\n") + 6 * (6 + fb) + 6  # samples of frame 6
        assert len(calls) == 1
        offset, size = calls[0]
        assert offset <= start and offset + size == start + fb and size <= fb + 6  # its FRAME line at most
        np.testing.assert_array_equal(pic.y, pics[6].y)


def test_parameters_hidden_in_a_plain_looking_file_are_found(tmp_path):
    # 3 frames whose middle FRAME line carries exactly one frame's worth (54 bytes) of parameters:
    # the size looks like 4 bare frames; reading must notice and index the file properly.
    rng = np.random.default_rng(7)
    pics = [random_picture(rng, 8, 4) for _ in range(3)]
    data = bytearray(GOOD_HEADER)
    for k, pic in enumerate(pics):
        data += b"FRAME" + (b" X" + b"p" * 52 if k == 1 else b"") + b"\n" + b"".join(p.tobytes() for p in pic.planes)
    path = tmp_path / "sneaky.y4m"
    path.write_bytes(bytes(data))
    with Y4MReader(path) as r:
        got = [r.read(i) for i in (0, 1, 2)]
        assert len(r) == 3 and r.frame_parameters(1) == "X" + "p" * 52
    for a, b in zip(got, pics):
        np.testing.assert_array_equal(a.cr, b.cr)


def test_pictures_own_their_samples(tmp_path):
    rng = np.random.default_rng(6)
    pics = [random_picture(rng, 8, 4) for _ in range(2)]
    path = tmp_path / "own.y4m"
    write_y4m(path, pics)
    with Y4MReader(path) as r:
        a = r.read(0)
        a.y[0, 0] ^= 1  # writable, and changing it changes nothing else
        b = r.read(0)
        assert b.y[0, 0] == pics[0].y[0, 0]


# ---------------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------------


def test_writer_header_carries_clip_metadata(tmp_path):
    pic = Picture.blank(16, 8)
    info = ClipInfo(
        16,
        8,
        frame_rate=Fraction(50),
        interlacing="t",
        pixel_aspect=Fraction(16, 15),
        chroma_siting="420paldv",
        extra={"COLORRANGE": "LIMITED"},
    )
    path = tmp_path / "meta.y4m"
    write_y4m(path, [pic], info)
    assert path.read_bytes().split(b"\n")[0] == b"YUV4MPEG2 W16 H8 F50:1 It A16:15 C420paldv XCOLORRANGE=LIMITED"


def test_writer_is_atomic_when_pictures_fail_midway(tmp_path):
    path = tmp_path / "keep.y4m"
    path.write_bytes(b"old contents")

    def pictures():
        yield Picture.blank(16, 8)
        raise RuntimeError("producer failed")

    with pytest.raises(RuntimeError):
        write_y4m(path, pictures())
    assert path.read_bytes() == b"old contents"
    assert [p.name for p in tmp_path.iterdir()] == ["keep.y4m"]  # no temporary file left behind


def test_writer_refuses_mixed_formats_and_nothing(tmp_path):
    with pytest.raises(FormatError, match="picture 1 is 8x8 420 8-bit, but the clip is 16x8"):
        write_y4m(tmp_path / "mix.y4m", [Picture.blank(16, 8), Picture.blank(8, 8)])
    with pytest.raises(FormatError, match="no pictures"):
        write_y4m(tmp_path / "none.y4m", [])
    with pytest.raises(FormatError, match="4:2:0 needs an even width and height, got 15x8"):
        write_y4m(tmp_path / "odd.y4m", [Picture.blank(15, 8)])
    with pytest.raises(FormatError, match="11-bit"):
        write_y4m(tmp_path / "odd.y4m", [Picture.blank(16, 8, bit_depth=11)])
    assert list(tmp_path.iterdir()) == []


# ---------------------------------------------------------------------------------------------
# Bad input: each case gives a FormatError naming the problem
# ---------------------------------------------------------------------------------------------

GOOD_HEADER = b"YUV4MPEG2 W8 H4 F25:1 C420jpeg\n"
FRAME = b"FRAME\n" + bytes(48)


@pytest.mark.parametrize(
    "content,match",
    [
        (b"", "file is empty"),
        (b"RIFF....WAVEfmt " + bytes(64), "not a YUV4MPEG2 file"),
        (b"YUV4MPEG W8 H4\n", "not a YUV4MPEG2 file"),
        (b"YUV4MPEG2 W8 H4 Q7\n" + FRAME, "unknown header tag 'Q7'"),
        (b"YUV4MPEG2 H4 C420\n" + FRAME, "lacks the W tag"),
        (b"YUV4MPEG2 W8 C420\n" + FRAME, "lacks the H tag"),
        (b"YUV4MPEG2 W8 H4 C411\n" + FRAME, "C411 is not supported"),
        (b"YUV4MPEG2 W8 H4 C420p11\n" + FRAME, "unknown chroma tag C420p11"),
        (b"YUV4MPEG2 W8 H4 Cyuv\n" + FRAME, "unknown chroma tag Cyuv"),
        (b"YUV4MPEG2 W7 H4 C420jpeg\n" + FRAME, "4:2:0 needs an even width and height, got 7x4"),
        (b"YUV4MPEG2 W8 H3 C420jpeg\n" + FRAME, "4:2:0 needs an even width and height, got 8x3"),
        (b"YUV4MPEG2 W8 H4 F25\n" + FRAME, "tag F must be N:D"),
        (b"YUV4MPEG2 W-8 H4\n" + FRAME, "tag W must be a positive integer"),
        (b"YUV4MPEG2 W8 H4 Ix\n" + FRAME, "tag I must be"),
        (b"YUV4MPEG2 W8  H4\n" + FRAME, "empty tag"),
        (b"YUV4MPEG2 W8 H4" + b" XPAD" * 1000, "not terminated"),
        (GOOD_HEADER + FRAME + FRAME[:-1], "frame 1 is truncated: expected 48 bytes of samples, the file holds 47"),
        (GOOD_HEADER + FRAME + b"FRA", "frame 1 is truncated: the file ends inside its FRAME line"),
        (GOOD_HEADER + FRAME + b"FRAMEX\n" + bytes(48), "frame 1 does not start with a FRAME line"),
        (GOOD_HEADER + bytes(54), "frame 0 does not start with a FRAME line"),
        (b"YUV4MPEG2 W8 H4 C420p10\n" + b"FRAME\n" + b"\xff" * 96, "above the 10-bit maximum 1023"),
    ],
)
def test_bad_files(tmp_path, content, match):
    path = tmp_path / "bad.y4m"
    path.write_bytes(content)
    with pytest.raises(FormatError, match=match):
        with open_clip(path) as r:
            r.read(0)


def test_missing_file_and_index_out_of_range(tmp_path):
    with pytest.raises(FormatError, match="no such file"):
        Y4MReader(tmp_path / "absent.y4m")
    path = tmp_path / "two.y4m"
    path.write_bytes(GOOD_HEADER + FRAME + FRAME)
    with Y4MReader(path) as r:
        with pytest.raises(FormatError, match=r"frame index 2 out of range \(clip has 2 frames: 0..1\)"):
            r.read(2)
        with pytest.raises(FormatError, match="frame index -3 out of range"):
            r.read(-3)


# ---------------------------------------------------------------------------------------------
# Property-based: mutated headers give FormatError and nothing else
# ---------------------------------------------------------------------------------------------

VALID_HEADERS = [
    b"YUV4MPEG2 W352 H288 F25:1 Ip A1:1 C420jpeg XYSCSS=420JPEG",
    b"YUV4MPEG2 W16 H8 F30000:1001 It C422p10",
    b"YUV4MPEG2 W6 H2 Cmono12 A0:0 F0:0",
]


@st.composite
def mutated_headers(draw):
    data = bytearray(draw(st.sampled_from(VALID_HEADERS)))
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["replace", "insert", "delete", "token"]))
        pos = draw(st.integers(0, len(data)))
        if kind == "replace" and pos < len(data):
            data[pos] = draw(st.integers(0, 255))
        elif kind == "insert":
            data[pos:pos] = draw(st.binary(min_size=1, max_size=6))
        elif kind == "delete":
            del data[pos : pos + draw(st.integers(1, 6))]
        else:
            token = draw(
                st.sampled_from(
                    [
                        b" W",
                        b" H0",
                        b" C",
                        b" F1:0",
                        b" A:",
                        b" I",
                        b" X",
                        b" C444p",
                        b" W99999999999",
                        b" F-1:2",
                        b"  ",
                        b" \xff",
                    ]
                )
            )
            data[pos:pos] = token
    return bytes(data)


@settings(max_examples=300, deadline=None)
@given(mutated_headers())
def test_mutated_headers_raise_only_format_error(header):
    try:
        info = parse_y4m_header(header)
    except FormatError:
        return
    assert info.width > 0 and info.height > 0 and info.chroma_format in ("420", "422", "444", "mono")


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_headers(), st.binary(max_size=64))
def test_mutated_files_raise_only_format_error(header, tail):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fuzz.y4m"
        path.write_bytes(header + b"\n" + b"FRAME\n" + tail)
        try:
            with Y4MReader(path) as r:
                for i in range(len(r)):
                    r.read(i)
        except FormatError:
            pass
        assert os.listdir(tmp) == ["fuzz.y4m"]
