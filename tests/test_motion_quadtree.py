"""The quadtree partition (synth.motion.quadtree): implicit splits at picture edges, the bottom-up
Lagrangian split decision, and the coding order.

Anchors:
- implicit split of blocks crossing the picture's right or bottom edge, without a split flag:
  ITU-T H.265 clause 7.3.8.4 (split_cu_flag is only sent when the block lies inside the picture);
- bottom-up decision: split when the summed cost of the four quadrants is lower than the block's
  own cost (the usual rate-distortion quadtree pruning; common practice);
- coding order inside a tree block: the z-order scan of H.264's luma 4x4 blocks and 8x8
  partitions, ITU-T H.264 clause 6.4.3, equations 6-17 and 6-18 (inverse 4x4 luma block scanning:
  x = InverseRasterScan(idx / 4, 8, 8, 16, 0) + InverseRasterScan(idx % 4, 4, 4, 8, 0), and y
  likewise with the last argument 1).
"""

import numpy as np
import pytest

from synth import ParameterError
from synth.motion.quadtree import collect_leaves, decide_splits, plan_levels, z_order_key


def _inverse_raster_scan(a, b_w, b_h, max_w, e):
    # H.264 equation 5-8 (InverseRasterScan)
    return (a % (max_w // b_w)) * b_w if e == 0 else (a // (max_w // b_w)) * b_h


def _h264_luma4x4_xy(idx):
    x = _inverse_raster_scan(idx // 4, 8, 8, 16, 0) + _inverse_raster_scan(idx % 4, 4, 4, 8, 0)
    y = _inverse_raster_scan(idx // 4, 8, 8, 16, 1) + _inverse_raster_scan(idx % 4, 4, 4, 8, 1)
    return x, y


def test_z_order_is_the_h264_luma_4x4_and_8x8_scan():
    xy = [_h264_luma4x4_xy(i) for i in range(16)]
    x = np.array([p[0] for p in xy])
    y = np.array([p[1] for p in xy])
    rng = np.random.default_rng(0)
    shuffled = rng.permutation(16)
    order = np.argsort(z_order_key(x[shuffled], y[shuffled], top=16, width=16))
    np.testing.assert_array_equal(shuffled[order], np.arange(16))
    # 8x8 partitions of a macroblock: 0 top-left, 1 top-right, 2 bottom-left, 3 bottom-right
    k = z_order_key(np.array([0, 8, 0, 8]), np.array([0, 0, 8, 8]), top=16, width=16)
    assert list(np.argsort(k)) == [0, 1, 2, 3]
    # tree blocks in raster order come before anything inside the next tree block
    k = z_order_key(np.array([12, 16, 0]), np.array([12, 0, 16]), top=16, width=32)
    assert list(np.argsort(k)) == [0, 1, 2]


def test_blocks_crossing_the_edge_split_without_a_flag():
    levels = plan_levels(40, 24, (16, 8))
    assert [lev.size for lev in levels] == [16, 8]
    top = levels[0]
    assert (top.rows, top.cols) == (2, 3)
    crossing = ~top.inside
    # blocks at x = 32 (32 + 16 > 40) or y = 16 (16 + 16 > 24) cross the edge
    np.testing.assert_array_equal(crossing, [[False, False, True], [True, True, True]])
    assert not top.leaf_ok[crossing].any() and top.split_ok[crossing].all()
    assert not top.flagged[crossing].any()  # implicit: no split bit
    assert top.flagged[~crossing].all()  # inside: both choices, one bit
    # the smallest allowed size inside the picture is never split
    eight = levels[1]
    assert eight.leaf_ok[eight.needed].all() and not eight.flagged.any()


def test_implicit_split_goes_below_the_smallest_size_at_edges():
    levels = plan_levels(36, 16, (16, 8))
    assert [lev.size for lev in levels] == [16, 8, 4]
    split = decide_splits(levels, {16: np.zeros((1, 3)), 8: np.zeros((2, 5))}, lam=1.0)
    x, y, s, gaps = collect_leaves(levels, split, width=36)
    assert not gaps
    assert set(s[x >= 32].tolist()) == {4}  # the 4-sample column left of the edge
    cover = np.zeros((16, 36), int)
    for bx, by, bs in zip(x, y, s):
        cover[by : by + bs, bx : bx + bs] += 1
    assert (cover == 1).all()


@pytest.mark.parametrize(
    "children,want_split", [((20, 20, 20, 30), True), ((30, 30, 30, 20), False), ((25,) * 4, False)]
)
def test_split_only_when_the_quadrants_cost_less(children, want_split):
    levels = plan_levels(16, 16, (16, 8))
    cost8 = np.array(children, float).reshape(2, 2)
    split = decide_splits(levels, {16: np.array([[100.0]]), 8: cost8}, lam=3.0)
    assert bool(split[16][0, 0]) is want_split  # 90 < 100 splits; 110 and 100 (a tie) do not
    x, y, s, _ = collect_leaves(levels, split, width=16)
    if want_split:
        assert list(zip(x, y, s)) == [(0, 0, 8), (8, 0, 8), (0, 8, 8), (8, 8, 8)]  # z-order
    else:
        assert list(zip(x, y, s)) == [(0, 0, 16)]


def test_decision_is_bottom_up_over_three_levels():
    levels = plan_levels(16, 16, (16, 8, 4))
    c4 = np.full((4, 4), 10.0)
    c4[:2, :2] = 1.0  # the top-left 8x8 is much cheaper as four 4x4 blocks (4 < 50)
    c8 = np.full((2, 2), 50.0)
    split = decide_splits(levels, {16: np.array([[190.0]]), 8: c8, 4: c4}, lam=0.5)
    # top-left 8x8: min(50, 4) + 0.5; others: min(50, 40) + 0.5 -> 4.5 + 3 * 40.5 = 126 < 190
    assert split[16][0, 0]
    np.testing.assert_array_equal(split[8], [[True, True], [True, True]])
    x, y, s, _ = collect_leaves(levels, split, width=16)
    assert len(s) == 16 and set(s.tolist()) == {4}
    order = [_h264_luma4x4_xy(i) for i in range(16)]
    assert list(zip(x.tolist(), y.tolist())) == order


def test_bad_block_sizes():
    with pytest.raises(ParameterError, match="powers of two"):
        plan_levels(64, 64, (16, 12))
    with pytest.raises(ParameterError, match="at least one"):
        plan_levels(64, 64, ())
