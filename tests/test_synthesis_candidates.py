"""The candidate search (synth.synthesis.candidates) against a brute-force nearest-neighbour search.

Reference: for every group centre, the Euclidean distances to all landing centres sorted
ascending (the definition of the K nearest neighbours; brute force in numpy), keeping those
closer than the reach.
"""

import numpy as np
import pytest

from synth import ParameterError
from synth.synthesis.candidates import CandidateSearch, group_centres, group_grid
from synth.synthesis.project import LandedVectors


def _landed(n, width, height, seed):
    rng = np.random.default_rng(seed)
    zeros = np.zeros(n, np.float32)
    return LandedVectors(
        cx=rng.uniform(-4, width + 4, n).astype(np.float32),
        cy=rng.uniform(-4, height + 4, n).astype(np.float32),
        bw=np.full(n, 8, np.int32), bh=np.full(n, 8, np.int32),
        past_dx=zeros, past_dy=zeros, future_dx=zeros, future_dy=zeros,
        field=np.zeros(n, np.int32), block=np.arange(n, dtype=np.int32),
        past_time=0.0, future_time=1.0, target_time=0.5, t=0.5,
    )  # fmt: skip


def _brute_force(landed, width, height, k, group, reach):
    rows, cols = -(-height // group), -(-width // group)
    out = np.full((rows, cols, k), -1, np.int64)
    px, py = landed.cx.astype(np.float64), landed.cy.astype(np.float64)
    for r in range(rows):
        for c in range(cols):
            gx, gy = c * group + (group - 1) / 2, r * group + (group - 1) / 2
            d = np.hypot(px - gx, py - gy)
            order = np.argsort(d, kind="stable")[:k]
            order = order[d[order] < reach]
            out[r, c, : len(order)] = order
    return out


@pytest.mark.parametrize("k,group,reach,n", [(4, 8, 6.0, 300), (6, 4, 9.0, 120), (3, 8, 1e9, 50)])
def test_k_nearest_per_group_match_brute_force(k, group, reach, n):
    width, height = 100, 68  # not multiples of the group: the last groups stick out
    landed = _landed(n, width, height, seed=k)
    search = CandidateSearch(landed, height=height, width=width, k=k, group=group, reach=reach)
    assert (search.rows, search.cols) == group_grid(height, width, group) == (-(-height // group), -(-width // group))
    got = search.for_group_rows(0, search.rows)
    want = _brute_force(landed, width, height, k, group, reach)
    assert got.dtype == np.int32 and got.shape == want.shape
    np.testing.assert_array_equal(got, want)
    if reach < 100:
        assert (got == -1).any() and (got >= 0).any()  # the reach really cuts some slots


def test_group_rows_are_the_rows_of_the_whole_search():
    width, height = 64, 64
    landed = _landed(200, width, height, seed=9)
    search = CandidateSearch(landed, height=height, width=width, k=4, group=8, reach=15.0, workers=2)
    whole = search.for_group_rows(0, search.rows)
    np.testing.assert_array_equal(search.for_group_rows(3, 6), whole[3:6])
    x, y = group_centres(3, 6, search.cols, 8)
    assert x[0, 0] == 3.5 and y[0, 0] == 3 * 8 + 3.5  # centre of an 8x8 group: (8 - 1) / 2


def test_no_landed_vectors_and_bad_arguments():
    landed = _landed(0, 32, 32, seed=0)
    search = CandidateSearch(landed, height=32, width=32, k=2, group=8, reach=10.0)
    assert (search.for_group_rows(0, 4) == -1).all()
    with pytest.raises(ParameterError, match="group rows"):
        search.for_group_rows(2, 9)
    with pytest.raises(ParameterError, match="k"):
        CandidateSearch(landed, height=32, width=32, k=0, group=8, reach=10.0)
