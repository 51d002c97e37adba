"""Block-matching search (synth.motion.search) on a real photograph with known motion.

Anchors:
- integer search: the brute-force minimum of the sum of absolute differences over every vector
  of the window (exhaustive block matching, the textbook definition; common practice);
- sub-sample search: a picture moved by a quarter-sample vector with the interpolation of ITU-T
  H.264 clause 8.4.2.2.1, written out here from the standard's equations (six-tap half samples b,
  h and the centre j from the unrounded intermediates, quarter samples as rounded averages,
  Table 8-12; coordinates clamped to the picture).
"""

import numpy as np
import skimage.data

from synth.motion.search import block_sad, integer_search, subpel_search
from synth.motion.subpel import QuarterPelReference

SIZE = 16
TAPS = (1, -5, 20, 20, -5, 1)


def _photo():
    return skimage.data.camera()[96:224, 160:288].copy()  # a real photograph (scikit-image), 128 x 128


def _blocks(plane, x, y, size):
    return np.stack([plane[b : b + size, a : a + size].ravel() for a, b in zip(x, y)]).astype(np.int16)


def _interior_grid(n0, n1):
    g = np.arange(n0, n1, SIZE)
    yy, xx = np.meshgrid(g, g, indexing="ij")
    return xx.ravel().astype(np.int64), yy.ravel().astype(np.int64)


def _bounds(n, lo, hi):
    return np.full(n, lo, np.int64), np.full(n, hi, np.int64)


def _brute_force_sad(ref, cur, x, y, radius):
    best = np.full(len(x), np.iinfo(np.int64).max)
    bx = np.zeros(len(x), np.int64)
    by = np.zeros(len(x), np.int64)
    r = ref.astype(np.int64)
    for i, (a, b) in enumerate(zip(x, y)):
        blk = cur[b : b + SIZE, a : a + SIZE].astype(np.int64)
        for dy in range(-radius, radius + 1):
            for dx in range(-radius, radius + 1):
                s = np.abs(r[b + dy : b + dy + SIZE, a + dx : a + dx + SIZE] - blk).sum()
                if s < best[i]:
                    best[i], bx[i], by[i] = s, dx, dy
    return bx, by, best


def test_integer_search_finds_a_known_shift_like_brute_force():
    ref = _photo()
    dx, dy = 3, -2  # content of the coded picture at p is the reference's at p + (dx, dy)
    rng = np.random.default_rng(5)
    cur = np.clip(np.roll(ref, (-dy, -dx), axis=(0, 1)).astype(int) + rng.integers(-3, 4, ref.shape), 0, 255)
    cur = cur.astype(np.uint8)
    x, y = _interior_grid(16, 96)  # away from the rolled-over border
    n = len(x)
    qref = QuarterPelReference(ref, pad=32, bit_depth=8, dtype=np.int16)
    zero = np.zeros(n, np.int64)
    lo, hi = _bounds(n, -8, 8)
    vx, vy, cost = integer_search(
        qref, _blocks(cur, x, y, SIZE), x, y, SIZE, cand_x=[zero], cand_y=[zero],
        lo_x=lo, hi_x=hi, lo_y=lo, hi_y=hi, radius=5, lam=0.0, pred_x=zero, pred_y=zero,
    )  # fmt: skip
    bx, by, best = _brute_force_sad(ref, cur, x, y, radius=5)
    assert (bx == dx).all() and (by == dy).all()  # the reference search finds the true motion
    np.testing.assert_array_equal(vx, bx)
    np.testing.assert_array_equal(vy, by)
    np.testing.assert_array_equal(cost, best.astype(np.float64))  # lam = 0: the cost is the SAD
    assert (best > 0).all()  # the noise makes it a real minimum, not an exact copy


def _h264_quarter_plane(ref, qx, qy):
    """The picture whose sample at (x, y) is the reference at (x + qx/4, y + qy/4) (H.264 8.4.2.2.1)."""
    h, w = ref.shape
    P = 8
    g = np.pad(ref.astype(np.int64), P, mode="edge")

    def G(ox, oy):  # integer samples at (x + ox, y + oy) for every output (x, y) of the integer part
        return g[P + iy + oy : P + iy + oy + h, P + ix + ox : P + ix + ox + w]

    def b1(ox, oy):  # horizontal intermediate between x + ox and x + ox + 1 (eq. 8-241)
        return sum(c * G(ox + k, oy) for k, c in zip(range(-2, 4), TAPS))

    def h1(ox, oy):  # vertical intermediate (eq. 8-242)
        return sum(c * G(ox, oy + k) for k, c in zip(range(-2, 4), TAPS))

    def clip(v):
        return np.clip(v, 0, 255)

    ix, iy = qx >> 2, qy >> 2
    xf, yf = qx & 3, qy & 3
    b = clip((b1(0, 0) + 16) >> 5)
    hh = clip((h1(0, 0) + 16) >> 5)
    j1 = sum(c * b1(0, k) for k, c in zip(range(-2, 4), TAPS))  # eq. 8-245
    j = clip((j1 + 512) >> 10)
    m = clip((h1(1, 0) + 16) >> 5)  # vertical half sample right of G
    s = clip((b1(0, 1) + 16) >> 5)  # horizontal half sample below G
    avg = lambda u, v: (u + v + 1) >> 1  # noqa: E731 - eqs. 8-250 .. 8-261
    table = {
        (0, 0): G(0, 0), (1, 0): avg(G(0, 0), b), (2, 0): b, (3, 0): avg(G(1, 0), b),
        (0, 1): avg(G(0, 0), hh), (1, 1): avg(b, hh), (2, 1): avg(b, j), (3, 1): avg(b, m),
        (0, 2): hh, (1, 2): avg(hh, j), (2, 2): j, (3, 2): avg(j, m),
        (0, 3): avg(G(0, 1), hh), (1, 3): avg(hh, s), (2, 3): avg(j, s), (3, 3): avg(m, s),
    }  # fmt: skip
    return table[(xf, yf)].astype(np.uint8)


def test_subpel_search_finds_a_quarter_sample_shift_made_with_the_h264_filter():
    ref = _photo()
    x, y = _interior_grid(16, 112)
    n = len(x)
    qref = QuarterPelReference(ref, pad=32, bit_depth=8, dtype=np.int16)
    zero = np.zeros(n, np.int64)
    lo, hi = _bounds(n, -32, 32)
    for qx, qy in [(5, -2), (-3, 7), (2, 2)]:  # (1.25, -0.5), (-0.75, 1.75), (0.5, 0.5) samples
        cur = _h264_quarter_plane(ref, qx, qy)
        blocks = _blocks(cur, x, y, SIZE)
        # the fetch of the project's reference reproduces the standard's samples exactly
        np.testing.assert_array_equal(block_sad(qref, blocks, x, y, np.full(n, qx), np.full(n, qy), SIZE), 0)
        ix, iy = np.full(n, round(qx / 4)), np.full(n, round(qy / 4))
        gx, gy, sad, cost = subpel_search(
            qref, blocks, x, y, SIZE, vx=ix, vy=iy, lo_x=lo, hi_x=hi, lo_y=lo, hi_y=hi,
            lam=0.0, pred_x=zero, pred_y=zero,
        )  # fmt: skip
        assert (gx == qx).all() and (gy == qy).all(), (qx, qy)
        assert (sad == 0).all() and (cost == 0).all()
        # and no integer vector explains the picture: the quarter position is really needed
        _, _, best_int = _brute_force_sad(ref, cur, x[:4], y[:4], radius=2)
        assert (best_int > 0).all()
