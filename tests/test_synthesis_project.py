"""Projection of coded vectors onto the target time."""

import numpy as np
import pytest

from synth import ParameterError, VectorField
from synth.synthesis.project import project_fields, reference_times


def _field(coded_time, reference_time, dx, dy, intra=None):
    return VectorField.from_arrays(
        width=64,
        height=32,
        coded_time=coded_time,
        reference_time=reference_time,
        x=[0, 16, 32, 48],
        y=[0, 0, 16, 16],
        w=16,
        h=16,
        dx=dx,
        dy=dy,
        intra=intra,
    )


def test_landing_and_endpoints_follow_the_trajectory():
    # Constant-velocity trajectory (common practice in motion-compensated interpolation): a block of
    # the future picture (time 4) whose content is 8 samples left on the past picture (time 0).
    f = _field(4, 0, dx=[-32, -32, 0, 4], dy=[0, 8, 0, -4])
    L = project_fields([f], past_time=0, future_time=4, t=0.25)
    # block 0: centre (7.5, 7.5); at time 1 it is 3/4 of the way back: x = 7.5 - 8 * 3/4
    assert L.cx[0] == pytest.approx(1.5) and L.cy[0] == pytest.approx(7.5)
    assert (L.past_dx[0], L.future_dx[0]) == (pytest.approx(-2.0), pytest.approx(6.0))
    # the two endpoints are the block's reference position and its own position
    np.testing.assert_allclose(L.cx + L.past_dx, np.array([7.5, 23.5, 39.5, 55.5]) + f.dx / 4, atol=1e-6)
    np.testing.assert_allclose(L.cx + L.future_dx, [7.5, 23.5, 39.5, 55.5], atol=1e-6)
    assert L.target_time == 1.0 and len(L) == 4


def test_both_coding_directions_agree_on_the_same_motion():
    # Content moving +8 samples right between past (0) and future (2): coded past->future the block
    # at x has vector +8 (content found at x + 8 on the future); coded future->past, -8.
    fwd = _field(0, 2, dx=32, dy=0)
    bwd = VectorField.from_arrays(
        width=64,
        height=32,
        coded_time=2,
        reference_time=0,
        x=[8, 24, 40, 56],
        y=[0, 0, 16, 16],
        w=16,
        h=16,
        dx=-32,
        dy=0,
    )
    a = project_fields([fwd], past_time=0, future_time=2, t=0.5)
    b = project_fields([bwd], past_time=0, future_time=2, t=0.5)
    np.testing.assert_allclose(a.cx, b.cx, atol=1e-6)
    np.testing.assert_allclose(a.past_dx, b.past_dx, atol=1e-6)
    np.testing.assert_allclose(a.future_dx, b.future_dx, atol=1e-6)
    both = project_fields([fwd, bwd], past_time=0, future_time=2, t=0.5)
    assert len(both) == 8 and set(both.field.tolist()) == {0, 1}


def test_intra_blocks_are_dropped_and_times_default_to_the_fields():
    f = _field(4, 0, dx=4, dy=0, intra=[False, True, False, True])
    L = project_fields([f], past_time=0, future_time=4, t=0.5)
    assert len(L) == 2 and L.block.tolist() == [0, 2]
    assert reference_times([f, _field(4, 8, dx=0, dy=0)]) == (0.0, 8.0)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(past_time=0, future_time=4, t=0.0), "strictly between"),
        (dict(past_time=0, future_time=4, t=1.0), "strictly between"),
        (dict(past_time=0, future_time=4, t=float("nan")), "strictly between"),
        (dict(past_time=4, future_time=0, t=0.5), "before future_time"),
        (dict(past_time=0, future_time=float("inf"), t=0.5), "finite"),
    ],
)
def test_bad_times_are_rejected(kwargs, message):
    with pytest.raises(ParameterError, match=message):
        project_fields([_field(4, 0, dx=0, dy=0)], **kwargs)


def test_fields_of_different_sizes_are_rejected():
    other = VectorField.from_arrays(
        width=32, height=32, coded_time=4, reference_time=0, x=[0], y=[0], w=16, h=16, dx=0, dy=0
    )
    with pytest.raises(ParameterError, match="fields\\[1\\]"):
        project_fields([_field(4, 0, dx=0, dy=0), other], past_time=0, future_time=4, t=0.5)
    with pytest.raises(ParameterError, match="at least one"):
        project_fields([], past_time=0, future_time=4, t=0.5)
