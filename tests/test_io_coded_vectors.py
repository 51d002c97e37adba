"""Coded vectors read from real bitstreams (`synth.io.coded_vectors`) and x264's hierarchy
(`synth.codec.hierarchy_coding`), checked against outside references.

Test pictures: a photograph from scikit-image's data (``skimage.data.camera()``, 512x512 grey),
translated by a known amount per picture with a Fourier shift (``scipy.ndimage.fourier_shift``):
a phase ramp on the discrete Fourier transform translates the band-limited periodic interpolant of
the image exactly (shift theorem, common practice), so picture k holds the photograph moved by
exactly ``k v`` samples, fractional parts included, up to rounding to 8 bits; the wrap-around at
the borders stays outside the central crop used. Content at p on picture 0 is at p + k v on picture
k, so a block on coded picture n has its content at p + (m - n) v on reference m: the expected
vector in the project's convention (`synth.field`) is ``4 (m - n) v`` quarter samples.

Encoders: PyAV's bundled libx264 (quarter-sample vectors) and FFmpeg's MPEG-2 encoder
(``mpeg2video``, half-sample vectors, ITU-T H.262).
"""

from __future__ import annotations

import numpy as np
import pytest

av = pytest.importorskip("av")
ndimage = pytest.importorskip("scipy.ndimage")
skdata = pytest.importorskip("skimage.data")

from synth.codec.hierarchy_coding import (  # noqa: E402
    check_clip_gop,
    code_x264_hierarchy,
    coded_hierarchy_fields,
    x264_structure,
)
from synth.errors import FormatError, ParameterError  # noqa: E402
from synth.field_checks import validate_field  # noqa: E402
from synth.hierarchy import dyadic_gop  # noqa: E402
from synth.io import write_y4m  # noqa: E402
from synth.io.coded_vectors import NEAREST_REFERENCE_ASSUMPTION, read_coded_fields  # noqa: E402
from synth.picture import Picture  # noqa: E402

W, H = 128, 96


def translated_photograph(v, count, *, width=W, height=H):
    """Pictures k = 0..count-1 of scikit-image's camera photograph moved by k * v (x, y) samples."""
    img = skdata.camera().astype(np.float64)
    spectrum = np.fft.fft2(img)
    y0, x0 = 200, 190  # a textured region (the camera and the man's coat)
    pictures = []
    for k in range(count):
        moved = np.real(np.fft.ifft2(ndimage.fourier_shift(spectrum, (k * v[1], k * v[0]))))
        y = np.clip(np.rint(moved[y0 : y0 + height, x0 : x0 + width]), 0, 255).astype(np.uint8)
        c = np.full((height // 2, width // 2), 128, np.uint8)
        pictures.append(Picture(y, c, c.copy()))
    return pictures


def agreement(field, pictures, v, tol=1):
    """Median vector and share of textured inter blocks within `tol` quarter samples of the truth."""
    expected = 4 * (field.reference_time - field.coded_time) * np.asarray(v)
    coded = pictures[int(field.coded_time)].y.astype(np.float64)
    textured = np.array(
        [coded[y : y + h, x : x + w].std() > 20 for x, y, w, h in zip(field.x, field.y, field.w, field.h)]
    )
    use = ~field.intra & textured
    dx, dy = field.dx[use], field.dy[use]
    close = (np.abs(dx - expected[0]) <= tol) & (np.abs(dy - expected[1]) <= tol)
    return (float(np.median(dx)), float(np.median(dy))), tuple(expected), float(close.mean()), int(use.sum())


def check_agreement(fields, pictures, v, tol=1):
    """The P field (coded against the previous anchor) gives the translation exactly (median);
    pooled over all fields at least 80 % of the textured inter blocks lie within one vector step
    (`tol` quarter samples) of it, and at least 40 % in every field (B-picture lists are rate-distortion choices: skipped
    and direct blocks inherit predicted vectors)."""
    close = total = 0
    for f in fields:
        median, expected, share, n = agreement(f, pictures, v, tol)
        pair = (f.coded_time, f.reference_time)
        if int(f.coded_time) % 2 == 0 and int(f.coded_time) - int(f.reference_time) >= 2:
            assert median == expected, pair
        if n >= 5:
            assert share >= 0.4, (pair, share)
        close += share * n
        total += n
    assert total >= 50 and close / total >= 0.8, close / max(total, 1)


def encode_stream(pictures, path, codec, *, container=None, options=None, b_frames=None):
    """The pictures coded by one of FFmpeg's encoders through PyAV into `path` (`container` None:
    from the file name)."""
    out = av.open(str(path), "w", format=container)
    st = out.add_stream(codec, rate=25)
    st.width, st.height, st.pix_fmt = pictures[0].width, pictures[0].height, "yuv420p"
    if b_frames is not None:
        st.codec_context.max_b_frames = b_frames
        st.codec_context.gop_size = 100
    st.codec_context.options = dict(options or {})
    for k, p in enumerate(pictures):
        f = av.VideoFrame.from_ndarray(
            np.concatenate([p.y, p.cb.reshape(-1, p.width), p.cr.reshape(-1, p.width)]), format="yuv420p"
        )
        f.pts = k
        for packet in st.encode(f):
            out.mux(packet)
    for packet in st.encode(None):
        out.mux(packet)
    out.close()


def encode_mpeg2(pictures, path, *, b_frames=1):
    """The pictures coded by FFmpeg's MPEG-2 video encoder through PyAV (fixed quantiser)."""
    encode_stream(
        pictures, path, "mpeg2video", container="mpeg2video", options={"qscale": "2", "threads": "1"}, b_frames=b_frames
    )


@pytest.mark.parametrize("v", [(1.25, -0.75), (-0.5, 1.75)])
def test_x264_vectors_give_the_known_translation(v, tmp_path):
    """x264 codes quarter-sample vectors (ITU-T H.264 clause 8.4.2.2): on textured blocks they give
    the Fourier-shift translation exactly, in the project's sign, for every pair of GOP 4."""
    pictures = translated_photograph(v, 5)
    clip = tmp_path / "pan.y4m"
    write_y4m(clip, pictures)
    fields = coded_hierarchy_fields(clip, qp=22, structure=("gop", 4))
    assert sorted((int(f.coded_time), int(f.reference_time)) for f in fields) == [
        (1, 0), (1, 2), (2, 0), (2, 4), (3, 2), (3, 4), (4, 0),
    ]  # fmt: skip
    check_agreement(fields, pictures, v)


@pytest.mark.parametrize("v", [(1.5, -0.5), (-1.0, 1.5)])
def test_mpeg2_vectors_give_the_known_translation_in_half_samples(v, tmp_path):
    """MPEG-2 vectors are half-sample (ITU-T H.262 clause 7.6.3): the reader scales them to quarter
    samples; P and both lists of the B pictures give the translation (nearest earlier/later
    reference assumed)."""
    pictures = translated_photograph(v, 7)
    path = tmp_path / "pan.m2v"
    encode_mpeg2(pictures, path)
    stream = read_coded_fields(path)
    assert stream.codec == "mpeg2video" and stream.assumption.startswith(NEAREST_REFERENCE_ASSUMPTION)
    # FFmpeg's MPEG-2 encoder with one B picture: I0 P2 B1 P4 B3 P6 B5 (ISO/IEC 13818-2 reordering)
    assert [(p.number, p.kind, p.past_reference, p.future_reference) for p in stream.pictures[:6]] == [
        (0, "I", None, None), (1, "B", 0, 2), (2, "P", 0, None), (3, "B", 2, 4), (4, "P", 2, None),
        (5, "B", 4, 6),
    ]  # fmt: skip
    assert "picture 6 came out of the decoder's flush" in stream.assumption  # no side data at flush
    pairs = {(int(f.coded_time), int(f.reference_time)) for f in stream.fields}
    assert {(2, 0), (4, 2), (1, 0), (1, 2), (3, 2), (3, 4), (5, 4), (5, 6)} <= pairs
    assert all(np.all(f.dx % 2 == 0) and np.all(f.dy % 2 == 0) for f in stream.fields)  # half samples
    check_agreement(stream.fields, pictures, v, tol=2)  # one half-sample step


def test_fields_read_from_streams_pass_the_field_validation(tmp_path):
    """Every field the reader builds passes `synth.field_checks.validate_field` (coverage, sizes,
    inside the picture, vector reach), also for a picture size that is not a multiple of the
    16x16 macroblock (H.264 clause 7.4.2.1.1: the coded size is cropped)."""
    pictures = translated_photograph((2.25, -1.5), 9, width=118, height=90)
    data = code_x264_hierarchy(pictures, qp=30, gop=8)
    stream = read_coded_fields(data, format="h264", structure=x264_structure(9, 8))
    assert stream.assumption is None and (stream.width, stream.height) == (118, 90)
    assert len(stream.fields) == 15  # 8->0, 4->0/8, and two lists for six B pictures
    for f in stream.fields:
        validate_field(f, label=f"{f.coded_time:g}->{f.reference_time:g}")
        assert f.gaps_allowed  # 118 = 112 + 4 + 2: the last 2 columns cannot hold a 4-wide block
        covered = np.zeros((90, 118), bool)
        for x, y, w, h in zip(f.x, f.y, f.w, f.h):
            covered[y : y + h, x : x + w] = True
        assert covered[:88, :116].all() and not covered[:, 116:].any()


def test_hierarchy_mapping_agrees_with_the_dyadic_coding_order(tmp_path):
    """GOP 4: the references inferred from the stream (nal_ref_idc and decoding order, nearest
    reference per list) are the dyadic hierarchy's (`synth.hierarchy.dyadic_gop`, JCTVC-L1100
    random access) and the decoding order is its coding order. GOP 8: x264 keeps one B reference
    (x264 encoder/slicetype.c), yet every dyadic pair has a field between its two pictures."""
    pictures = translated_photograph((1.0, 0.5), 9)
    s4 = read_coded_fields(code_x264_hierarchy(pictures[:5], qp=26, gop=4), format="h264")
    by_number = {p.number: p for p in s4.pictures}
    for g in dyadic_gop(4):
        p = by_number[g.position]
        assert (p.past_reference, p.future_reference) == (g.past, g.future)
        assert p.decode_index == g.coding_index + 1  # the I picture 0 is decoded first
    assert by_number[4].decode_index == 1 and by_number[4].past_reference == 0
    s8 = read_coded_fields(code_x264_hierarchy(pictures, qp=26, gop=8), format="h264")
    expected = x264_structure(9, 8)
    for p in s8.pictures[1:]:
        assert (p.past_reference, p.future_reference) == (expected[p.number][0], expected[p.number][1])
    pairs = {frozenset((int(f.coded_time), int(f.reference_time))) for f in s8.fields}
    for g in dyadic_gop(8):
        assert frozenset((g.past, g.future)) in pairs, (g.past, g.future)
    assert frozenset((0, 8)) in pairs


def test_clip_gop_above_eight_is_refused():
    # x264 limit (encoder/slicetype.c): GOP 16 would leave e.g. pictures 2 and 4 without a field
    assert check_clip_gop(8) == 8
    with pytest.raises(ParameterError, match=r"--gop-size 16 is too large for --vectors x264"):
        check_clip_gop(16)
    with pytest.raises(ParameterError, match="power of two"):
        check_clip_gop(6)


def test_a_stream_without_vectors_gives_all_intra_fields(tmp_path):
    """x264 with keyint=1 codes every picture as an IDR picture (ITU-T H.264 clause 7.4.1.2.4):
    no vectors at all, so each picture's field against the previous picture is all intra."""
    pictures = translated_photograph((1.0, 0.0), 4)
    path = tmp_path / "intra.h264"
    encode_stream(
        pictures, path, "libx264", container="h264", options={"x264-params": "keyint=1:qp=30", "threads": "1"}
    )
    stream = read_coded_fields(path)
    assert [p.kind for p in stream.pictures] == ["I"] * 4
    assert [(int(f.coded_time), int(f.reference_time)) for f in stream.fields] == [(1, 0), (2, 1), (3, 2)]
    for f in stream.fields:
        validate_field(f)
        assert f.intra.all() and int((f.w * f.h).sum()) == W * H


def test_hevc_and_non_video_files_give_one_line_errors(tmp_path):
    if "libx265" not in av.codecs_available:
        pytest.skip("PyAV has no libx265 here")
    pictures = translated_photograph((1.0, 0.0), 3)
    path = tmp_path / "clip.hevc"
    encode_stream(pictures, path, "libx265", container="hevc", options={"x265-params": "log-level=none:pools=1"})
    # FFmpeg's hevc decoder implements no export_mvs (libavcodec/hevc: no AV_FRAME_DATA_MOTION_VECTORS)
    with pytest.raises(
        FormatError, match=r"clip\.hevc: codec 'hevc': FFmpeg's decoder for it exports no coded motion vectors"
    ) as err:
        read_coded_fields(path)
    assert "\n" not in str(err.value)
    junk = tmp_path / "junk.h264"
    junk.write_bytes(b"not a stream at all" * 10)
    with pytest.raises(FormatError, match=r"junk\.h264"):
        read_coded_fields(junk)
    with pytest.raises(FormatError, match=r"nothing\.mp4: no such file"):
        read_coded_fields(tmp_path / "nothing.mp4")


def test_exported_positions_are_block_centres(tmp_path):
    """A moving window on a still photograph: the panning content is seen through a 48x48 window
    at (32..80, 32..80) (aligned to 16x16 macroblocks), the rest stands still. Blocks the reader
    places inside the window carry the pan, blocks it places outside carry none: this holds only
    if FFmpeg's ``dst_x, dst_y`` are read as block centres (libavcodec/mpegutils.c adds half the
    block size to the corner)."""
    v = (2.0, -1.25)
    moving = translated_photograph(v, 5)
    still = moving[0]
    pictures = []
    for p in moving:
        y = still.y.copy()
        y[32:80, 32:80] = p.y[32:80, 32:80]
        pictures.append(Picture(y, still.cb, still.cr))
    stream = read_coded_fields(code_x264_hierarchy(pictures, qp=20, gop=4), format="h264")
    (f,) = [f for f in stream.fields if (f.coded_time, f.reference_time) == (4.0, 0.0)]
    expected = (-4 * 4 * v[0], -4 * 4 * v[1])
    moved = ~f.intra & (np.abs(f.dx - expected[0]) <= 1) & (np.abs(f.dy - expected[1]) <= 1)
    mask = np.zeros((H, W), bool)
    for x, y, w, h in zip(f.x[moved], f.y[moved], f.w[moved], f.h[moved]):
        mask[y : y + h, x : x + w] = True
    window = np.zeros((H, W), bool)
    window[32:80, 32:80] = True
    # read as corners, the moving blocks would sit 8 samples lower right: IoU 0.53
    assert (mask & window).sum() / (mask | window).sum() >= 0.9


def test_mpeg4_part2_quarter_sample_p_vectors_and_no_b_fields(tmp_path):
    """FFmpeg's MPEG-4 Part 2 encoder with quarter-sample motion (ISO/IEC 14496-2 quarter_sample)
    in AVI: the P pictures give the translation; B pictures, whose exported vectors are all zero in
    FFmpeg's decoder, give no field, and the assumption line says so."""
    v = (1.25, -0.75)
    pictures = translated_photograph(v, 5)
    path = tmp_path / "pan.avi"
    encode_stream(pictures, path, "mpeg4", options={"qscale": "2", "flags": "+qpel", "threads": "1"}, b_frames=1)
    stream = read_coded_fields(path)
    assert stream.codec == "mpeg4"
    assert [(int(f.coded_time), int(f.reference_time)) for f in stream.fields] == [(2, 0)]
    assert "MPEG-4 Part 2 B pictures export zero vectors: pictures 1, 3 give no field" in stream.assumption
    median, expected, share, n = agreement(stream.fields[0], pictures, v)
    assert median == expected and share >= 0.8 and n >= 8


def test_pictures_above_the_size_ceiling_are_refused(tmp_path, monkeypatch):
    """The reader refuses a stream whose pictures exceed the project's ceiling
    (`synth.io.limits.MAX_PICTURE_SIDE`, checked by `synth.field_checks.check_picture_size`),
    naming the file; lowered here so a small stream exceeds it."""
    import synth.field_checks as checks

    data = code_x264_hierarchy(translated_photograph((1.0, 0.0), 2), qp=30, gop=1)
    path = tmp_path / "small.h264"
    path.write_bytes(data)
    monkeypatch.setattr(checks, "MAX_PICTURE_SIDE", 64)
    with pytest.raises(FormatError, match=r"small\.h264: picture width must be in 1\.\.64, got 128"):
        read_coded_fields(path)


def test_x264_hierarchy_encode_is_bit_identical_across_runs():
    # one thread and forced picture types: the same pictures give the same stream (project rule)
    pictures = translated_photograph((0.75, 0.25), 5)
    first = code_x264_hierarchy(pictures, qp=28, gop=4)
    assert code_x264_hierarchy(pictures, qp=28, gop=4) == first
    assert code_x264_hierarchy(pictures, qp=40, gop=4) != first  # the QP reaches the encoder
