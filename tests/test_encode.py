"""The encoder in the loop: stream accounting, per-picture QP, and proof the extra reference is used."""

from __future__ import annotations

import io

import av
import numpy as np
import pytest
from realcrops import real_pictures, to_high_depth_422

from synth.codec.encode import encode_pictures
from synth.codec.rdmeasure import code_target
from synth.errors import ParameterError
from synth.metrics import picture_psnr


@pytest.fixture
def carphone(real_clip):
    """Past, future and the middle target of real footage 4 pictures apart, 128x128 crops."""
    return real_pictures(real_clip("carphone_pristine.mp4"), [0, 4, 2])


@pytest.mark.parametrize("codec", ["h264", "hevc"])
def test_packet_sizes_add_up_to_the_stream_and_match_ffmpegs_parser(carphone, codec):
    s = encode_pictures(carphone, codec=codec, qp=30)
    assert sum(p.bits for p in s.pictures) == s.bits == 8 * len(s.data)
    # Independent check: FFmpeg's H.264 / HEVC parser (through PyAV) splits the byte stream into
    # the same access units.
    with av.open(io.BytesIO(s.data), "r", format=codec) as c:
        sizes = [8 * p.size for p in c.demux(video=0) if p.size]
    assert sizes == [p.bits for p in s.pictures]
    assert [p.kind for p in s.pictures] == ["I", "P", "P"]
    for p, src in zip(s.pictures, carphone):
        assert 30.0 < picture_psnr(p.reconstruction, src)["Y"] < 45.0


@pytest.mark.parametrize("codec", ["h264", "hevc"])
def test_true_target_as_extra_reference_costs_far_fewer_bits(carphone, codec):
    # If the encoder really uses the third reference, a perfect one leaves almost nothing to code.
    past, future, target = carphone
    a = code_target(past, future, target, codec=codec, qp=32)
    truth = code_target(past, future, target, extra=target, codec=codec, qp=32, extra_qp=4, expected_refs=None)
    assert truth.bits < 0.25 * a.bits
    assert truth.extra_psnr_y > 50.0  # the extra reference really came out at the low QP
    assert truth.psnr["Y"] >= a.psnr["Y"] - 0.5


@pytest.mark.parametrize("codec", ["h264", "hevc"])
def test_per_picture_qp_reaches_only_the_addressed_picture(carphone, codec):
    past, future, target = carphone
    plain = encode_pictures([past, future, target, target], codec=codec, qp=34)
    zoned = encode_pictures([past, future, target, target], codec=codec, qp=34, picture_qp={2: 4})
    psnr = [picture_psnr(p.reconstruction, q)["Y"] for p, q in zip(zoned.pictures, [past, future, target])]
    assert psnr[2] > 50.0 and psnr[0] < 40.0 and psnr[1] < 40.0
    assert zoned.pictures[2].qp == 4
    for i in (0, 1):  # pictures before the zone are coded exactly as without it
        np.testing.assert_array_equal(zoned.pictures[i].reconstruction.y, plain.pictures[i].reconstruction.y)


def test_high_bit_depth_and_422_round_trip_at_the_same_qp_scale(carphone):
    # QP is the standards' slice QP at every bit depth: 10-bit and 8-bit coding at the same QP land
    # within about a dB of each other (same quantiser step size, ITU-T H.264/H.265 QpBdOffset).
    pics10 = [to_high_depth_422(p) for p in carphone[:2]]
    for codec in ("h264", "hevc"):
        s8 = encode_pictures(carphone[:2], codec=codec, qp=30)
        s10 = encode_pictures(pics10, codec=codec, qp=30)
        assert s10.pictures[0].reconstruction.same_format(pics10[0])
        p8 = picture_psnr(s8.pictures[0].reconstruction, carphone[0])["Y"]
        p10 = picture_psnr(s10.pictures[0].reconstruction, pics10[0])["Y"]
        assert abs(p10 - p8) < 2.0


def test_bad_parameters_raise_parameter_errors(carphone):
    with pytest.raises(ParameterError, match="codec must be"):
        encode_pictures(carphone, codec="vp9", qp=30)
    with pytest.raises(ParameterError, match="qp must be an integer in 0..51"):
        encode_pictures(carphone, qp=60)
    with pytest.raises(ParameterError, match=r"picture_qp\[7\]|names picture 7"):
        encode_pictures(carphone, qp=30, picture_qp={7: 4})
    with pytest.raises(ParameterError, match="refs must be"):
        encode_pictures(carphone, qp=30, refs=0)
    with pytest.raises(ParameterError, match="differs in size"):
        encode_pictures([carphone[0], to_high_depth_422(carphone[1])], qp=30)
    with pytest.raises(ParameterError, match="preset"):
        encode_pictures(carphone, qp=30, preset="ludicrous")
