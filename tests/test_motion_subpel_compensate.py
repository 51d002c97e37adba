"""Fractional-sample interpolation and motion compensation against ITU-T H.264 clause 8.4.2.2.

The scalar functions below restate the standard's equations sample by sample (8-241..8-261 for luma,
8-266 for chroma), with coordinates clamped to the picture as Clip3 does there; the vectorised
implementation must agree with them bit for bit.
"""

import numpy as np
import pytest

from synth import ParameterError, Picture, VectorField, motion_compensate
from synth.motion.cost import lambda_motion, median_predictor
from synth.motion.subpel import chroma_bilinear, luma_phases


def _s(p, x, y):
    h, w = p.shape
    return int(p[min(max(y, 0), h - 1), min(max(x, 0), w - 1)])


def _tap(v):
    return v[0] - 5 * v[1] + 20 * v[2] + 20 * v[3] - 5 * v[4] + v[5]


def _clip1(v):
    return min(max(v, 0), 255)


def _h264_luma(p, x, y, xf, yf):
    """Luma sample at (x + xf/4, y + yf/4), H.264 clause 8.4.2.2.1 written out per sample."""
    G, H, M = _s(p, x, y), _s(p, x + 1, y), _s(p, x, y + 1)
    b1 = _tap([_s(p, x + k, y) for k in range(-2, 4)])
    h1 = _tap([_s(p, x, y + k) for k in range(-2, 4)])
    s1 = _tap([_s(p, x + k, y + 1) for k in range(-2, 4)])
    m1 = _tap([_s(p, x + 1, y + k) for k in range(-2, 4)])
    j1 = _tap([_tap([_s(p, x + c, y + k) for k in range(-2, 4)]) for c in range(-2, 4)])
    b, h, s, m = (_clip1((v + 16) >> 5) for v in (b1, h1, s1, m1))
    j = _clip1((j1 + 512) >> 10)
    avg = lambda u, v: (u + v + 1) >> 1  # noqa: E731
    table = {  # Table 8-12
        (0, 0): G, (1, 0): avg(G, b), (2, 0): b, (3, 0): avg(H, b),
        (0, 1): avg(G, h), (1, 1): avg(b, h), (2, 1): avg(b, j), (3, 1): avg(b, m),
        (0, 2): h, (1, 2): avg(h, j), (2, 2): j, (3, 2): avg(j, m),
        (0, 3): avg(M, h), (1, 3): avg(h, s), (2, 3): avg(j, s), (3, 3): avg(m, s),
    }  # fmt: skip
    return table[(xf, yf)]


def test_luma_phases_match_the_standard_equations():
    rng = np.random.default_rng(7)
    p = rng.integers(0, 256, (13, 17), dtype=np.uint8)
    pad = 4
    ph = luma_phases(p, pad=pad)
    for _ in range(300):
        x, y = int(rng.integers(-pad, 17 + pad)), int(rng.integers(-pad, 13 + pad))
        xf, yf = int(rng.integers(0, 4)), int(rng.integers(0, 4))
        assert ph[yf, xf, y + pad, x + pad] == _h264_luma(p, x, y, xf, yf), (x, y, xf, yf)


def test_half_sample_filter_on_a_ramp_and_a_constant():
    # the (1, -5, 20, 20, -5, 1)/32 filter keeps constants and puts a ramp's midpoint exactly
    ramp = np.tile(np.arange(0, 160, 10, dtype=np.uint8), (8, 1))
    ph = luma_phases(ramp, pad=0)
    assert np.all(ph[0, 2, :, 2:-3] == ramp[:, 2:-3] + 5)
    flat = np.full((6, 6), 77, np.uint8)
    assert np.all(luma_phases(flat, pad=2) == 77)


def test_chroma_bilinear_matches_equation_8_266():
    rng = np.random.default_rng(3)
    p = rng.integers(0, 256, (9, 11), dtype=np.uint8)
    vx = rng.integers(-40, 40, p.shape)
    vy = rng.integers(-40, 40, p.shape)
    out = chroma_bilinear(p, vx, vy, den_x=8, den_y=8)
    for y in range(9):
        for x in range(11):
            xi, yi = x + (vx[y, x] >> 3), y + (vy[y, x] >> 3)
            xF, yF = vx[y, x] & 7, vy[y, x] & 7
            A, B = _s(p, xi, yi), _s(p, xi + 1, yi)
            C, D = _s(p, xi, yi + 1), _s(p, xi + 1, yi + 1)
            ref = ((8 - xF) * (8 - yF) * A + xF * (8 - yF) * B + (8 - xF) * yF * C + xF * yF * D + 32) >> 6
            assert out[y, x] == ref


def test_motion_compensation_reproduces_a_shifted_picture():
    rng = np.random.default_rng(11)
    big = Picture(
        rng.integers(16, 236, (80, 96), dtype=np.uint8),
        rng.integers(16, 240, (40, 48), dtype=np.uint8),
        rng.integers(16, 240, (40, 48), dtype=np.uint8),
    )
    # coded picture: content at (x, y) is at (x + 6, y - 4) on the reference (even shift: chroma exact)
    ref = Picture(big.y[8:72, 8:88].copy(), big.cb[4:36, 4:44].copy(), big.cr[4:36, 4:44].copy())
    cod = Picture(big.y[4:68, 14:94].copy(), big.cb[2:34, 7:47].copy(), big.cr[2:34, 7:47].copy())
    f = VectorField.uniform_grid(80, 64, block=16, coded_time=1, reference_time=0, dx=24, dy=-16)
    pred = motion_compensate(ref, f)
    assert np.array_equal(pred.y[8:, :-8], cod.y[8:, :-8])
    assert np.array_equal(pred.cb[4:, :-4], cod.cb[4:, :-4]) and np.array_equal(pred.cr[4:, :-4], cod.cr[4:, :-4])


def test_motion_compensation_refuses_a_field_of_another_size():
    f = VectorField.uniform_grid(32, 32, block=16, coded_time=1, reference_time=0)
    with pytest.raises(ParameterError, match="field is for 32x32 pictures"):
        motion_compensate(Picture.blank(48, 32), f)


def test_lambda_follows_the_reference_encoder_relation():
    # lambda_mode = 0.85 * 2**((QP-12)/3), lambda_motion = sqrt(lambda_mode) for SAD
    # (Wiegand et al. 2003, doi:10.1109/TCSVT.2003.815168; from memory)
    assert lambda_motion(12) == pytest.approx(np.sqrt(0.85))
    assert lambda_motion(27) == pytest.approx(np.sqrt(0.85 * 32))
    assert lambda_motion(36) == pytest.approx(np.sqrt(0.85 * 256))
    with pytest.raises(ParameterError, match="qp must be in 0..51"):
        lambda_motion(52)


def test_median_predictor_rules_of_h264_8_4_1_3():
    def pred(a, b, c):
        # each neighbour: None (unavailable), "intra", or (x, y)
        def parts(n):
            if n is None:
                return 0, 0, False, False
            if n == "intra":
                return 0, 0, True, False
            return n[0], n[1], True, True

        args = [np.array([v]) for n in (a, b, c) for v in parts(n)]
        px, py = median_predictor(*args)
        return int(px[0]), int(py[0])

    assert pred((1, 9), (4, -2), (7, 3)) == (4, 3)  # component-wise median
    assert pred((5, 6), None, None) == (5, 6)  # only A available: B and C take A
    assert pred("intra", (8, 1), "intra") == (8, 1)  # exactly one refers to the reference
    assert pred((2, 2), "intra", "intra") == (2, 2)
    assert pred((2, 4), (6, 8), "intra") == (2, 4)  # median of (2, 6, 0) and (4, 8, 0)
    assert pred(None, None, None) == (0, 0)
