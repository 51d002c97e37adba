"""The demo clip generator: reproducibility, the committed clips, and its true motion."""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from conftest import DEMO_CLIPS

from synth import ParameterError
from synth.demo.scenes import SCENES, render_scene, true_motion
from synth.flow import sample_with_flow
from synth.io import open_clip, write_clip
from synth.picture import ClipInfo

#: Lowest PSNR-Y (dB) of a picture rendered by another OpenCV release against the committed one.
#: OpenCV's anti-aliased text and line drawing changes between releases: measured for clips rendered
#: with 4.x and re-rendered with 5.1, 36.9 dB at worst (cart_accelerate), 2.5 % of samples differing.
OTHER_RELEASE_MIN_PSNR = 33.0


def _rendered_with() -> str:
    return (DEMO_CLIPS / "RENDERED_WITH").read_text().split()[1]


@pytest.mark.parametrize("name", SCENES)
def test_generator_recreates_committed_clip(name, tmp_path):
    """Byte for byte under the OpenCV release that rendered the clips (demo_clips/RENDERED_WITH),
    within `OTHER_RELEASE_MIN_PSNR` under any other."""
    committed = DEMO_CLIPS / f"{name}.y4m"
    with open_clip(committed) as reader:
        info = reader.info
        assert (info.width, info.height, len(reader), info.chroma_format, info.bit_depth) == (352, 288, 17, "420", 8)
    fresh = tmp_path / committed.name
    pictures = render_scene(name)
    write_clip(fresh, pictures, ClipInfo(352, 288, frame_rate=info.frame_rate, chroma_siting="420jpeg"))
    if cv2.__version__ == _rendered_with():
        assert fresh.read_bytes() == committed.read_bytes()
    else:
        from synth.metrics import plane_psnr

        with open_clip(committed) as reader:
            worst = min(plane_psnr(p.y, reader.read(i).y, bit_depth=8) for i, p in enumerate(pictures))
        assert worst >= OTHER_RELEASE_MIN_PSNR, f"rendered with OpenCV {cv2.__version__}: {worst:.2f} dB"


def test_committed_clips_fit_the_size_cap():
    total = sum(p.stat().st_size for p in DEMO_CLIPS.glob("*.y4m"))
    assert len(list(DEMO_CLIPS.glob("*.y4m"))) >= 3
    assert total <= 10 * 1024 * 1024


def _valid_pixels(flow: np.ndarray, back: np.ndarray) -> np.ndarray:
    """Pixels visible on both pictures, away from motion boundaries and the picture edge."""
    h, w = flow.shape[:2]
    back_at = np.stack([sample_with_flow(back[..., c], flow, interpolation="nearest") for c in (0, 1)], axis=-1)
    ok = np.all(np.abs(flow + back_at) < 0.05, axis=-1)
    grad = np.abs(np.diff(flow, axis=0, prepend=flow[:1])).sum(-1) + np.abs(
        np.diff(flow, axis=1, prepend=flow[:, :1])
    ).sum(-1)
    ok &= ~(cv2.dilate((grad > 0.3).astype(np.uint8), np.ones((7, 7), np.uint8)) > 0)
    gx = np.arange(w) + flow[..., 0]
    gy = np.arange(h)[:, None] + flow[..., 1]
    return ok & (gx > 2) & (gx < w - 3) & (gy > 2) & (gy < h - 3)


@pytest.mark.parametrize("name,source,target", [("parcels_pan", 4, 5), ("turntable_zoom", 0, 8)])
def test_true_motion_predicts_the_rendered_picture(name, source, target):
    # Motion-compensating `target` with the true motion must reproduce `source` where the content is
    # visible on both (bicubic interpolation, as in sub-pel motion compensation, common practice).
    pics = render_scene(name, frames=target + 1)
    flow = true_motion(name, source, target)
    ok = _valid_pixels(flow, true_motion(name, target, source))
    assert ok.mean() > 0.15
    pred = sample_with_flow(pics[target].y, flow)
    err = pred[ok].astype(np.float64) - pics[source].y[ok]
    psnr = 10 * np.log10(255.0**2 / np.mean(err**2))
    assert psnr > 40.0
    # The same check with the flow off by one sample must be far worse: the flow carries information.
    shifted = flow + np.array([1.0, 0.0], np.float32)
    err_off = sample_with_flow(pics[target].y, shifted)[ok].astype(np.float64) - pics[source].y[ok]
    assert np.mean(err_off**2) > 10 * np.mean(err**2)


def test_scenes_have_the_promised_motion():
    pan = true_motion("parcels_pan", 0, 8)
    assert 35.0 <= np.abs(pan).max() <= 45.0  # up to ~40 luma samples over 8 pictures
    speeds = np.unique(np.round(pan[..., 0]))
    assert len(speeds) >= 4  # background, two belts, gantry-fixed floor, diverted parcel move differently
    # cart_accelerate: the front cart's speed grows (constant acceleration)
    early = true_motion("cart_accelerate", 2, 3)[240:270, 100:140, 0]
    late = true_motion("cart_accelerate", 12, 13)[240:270, 140:200, 0]
    assert np.median(late) > np.median(early) + 2.0
    # turntable_zoom: the flow has a rotational part (curl) on the disc
    zoom = true_motion("turntable_zoom", 0, 1)
    curl = np.gradient(zoom[..., 1], axis=1) - np.gradient(zoom[..., 0], axis=0)
    assert abs(float(np.median(curl[120:180, 150:210]))) > 0.01


def test_true_motion_is_zero_for_the_same_picture():
    assert np.all(true_motion("turntable_zoom", 3, 3, width=176, height=144) == 0)


def test_brightness_rises_in_cart_accelerate():
    pics = render_scene("cart_accelerate", frames=17, width=176, height=144)
    top = [float(np.mean(p.y[:20, :40])) for p in (pics[0], pics[16])]  # shelving wall only
    assert top[1] > top[0] + 1.5


@pytest.mark.parametrize(
    "kwargs,match",
    [
        ({"name": "fireworks"}, "scene must be one of"),
        ({"name": "parcels_pan", "frames": 0}, "frames must be"),
        ({"name": "parcels_pan", "width": 351}, "even"),
    ],
)
def test_bad_parameters(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        render_scene(**kwargs)
    if "frames" not in kwargs:
        with pytest.raises(ParameterError, match=match):
            true_motion(kwargs["name"], 0, 1, width=kwargs.get("width", 352))
