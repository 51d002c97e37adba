"""The estimator on the demo clips against their analytic true motion.

Outside reference: the true motion comes from the scene generator's closed-form affine maps
(`synth.demo.scenes.true_motion`), not from any estimator. Error is measured per luma sample
(field vector minus true displacement) and averaged over fixed 16 x 16 cells that are textured
(upper half of the mean minimum structure-tensor eigenvalue, Shi & Tomasi 1994, via OpenCV) and
whose true motion is uniform to 1/4 sample; the median over cells is reported. The same cells are
used at every QP, so the block sizes the rate constraint chooses show up in the error.
"""

import cv2
import numpy as np
import pytest
from conftest import DEMO_CLIPS

from synth import estimate_field
from synth.demo.scenes import true_motion
from synth.io import open_clip
from synth.motion.compensate import vector_maps
from synth.motion.rate import field_vector_bits


def _cells(a: np.ndarray, s: int = 16) -> np.ndarray:
    h, w = a.shape[:2]
    a = a[: h // s * s, : w // s * s]
    return a.reshape(h // s, s, w // s, s, *a.shape[2:]).swapaxes(1, 2).reshape(h // s, w // s, s * s, *a.shape[2:])


def _pair(name, coded, ref):
    path = DEMO_CLIPS / f"{name}.y4m"
    if not path.exists():
        pytest.skip(f"demo clip {path.name} is not in this checkout")
    clip = open_clip(path)
    return clip.read(coded), clip.read(ref), true_motion(name, coded, ref)


def _median_cell_error(cod, ref, flow, *, qp, coded, reference):
    strength = _cells(cv2.cornerMinEigenVal(cod.y, 3)).mean(-1)
    uniform = _cells(flow).std(axis=2).max(-1) < 0.25
    sel = uniform & (strength >= np.quantile(strength, 0.5))
    f = estimate_field(cod, ref, coded_time=coded, reference_time=reference, qp=qp, search_range=64)
    dx, dy, inter = vector_maps(f)
    err = np.hypot(dx / 4 - flow[..., 0], dy / 4 - flow[..., 1])
    cells_err = _cells(err).mean(-1)
    cells_inter = _cells(inter).all(-1)
    ok = sel & cells_inter
    assert ok.sum() >= 60
    return float(np.median(cells_err[ok])), f


@pytest.mark.parametrize("name,coded,ref", [("parcels_pan", 2, 0), ("turntable_zoom", 1, 0), ("cart_accelerate", 4, 8)])
def test_median_vector_error_below_a_quarter_sample_at_qp22(name, coded, ref):
    cod, refp, flow = _pair(name, coded, ref)
    err, _ = _median_cell_error(cod, refp, flow, qp=22, coded=coded, reference=ref)
    assert err < 0.25


def test_vector_error_grows_and_bits_fall_as_qp_rises():
    # zoom and rotation: no block size is exact, so larger (cheaper) blocks cost accuracy
    cod, ref, flow = _pair("turntable_zoom", 1, 0)
    results = [_median_cell_error(cod, ref, flow, qp=qp, coded=1, reference=0) for qp in (22, 37, 47)]
    errors = [e for e, _ in results]
    bits = [int(field_vector_bits(f).sum()) for _, f in results]
    blocks = [len(f) for _, f in results]
    assert errors[0] < errors[1] < errors[2]
    assert bits[0] > bits[1] > bits[2]
    assert blocks[0] > blocks[1] > blocks[2]
