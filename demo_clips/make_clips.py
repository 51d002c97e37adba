"""Regenerate the demo clips in this folder from synth.demo.scenes (deterministic, byte for byte).

Usage: python demo_clips/make_clips.py [--check]

With --check nothing is written; the script exits with status 1 when a committed clip differs from
what the generator makes now.
"""

from __future__ import annotations

import sys
import tempfile
from fractions import Fraction
from pathlib import Path

from synth.demo.scenes import SCENES, render_scene
from synth.io import write_clip
from synth.picture import ClipInfo

HERE = Path(__file__).resolve().parent
FRAMES, WIDTH, HEIGHT = 17, 352, 288  # one GOP of 16 plus its closing anchor, CIF
INFO = ClipInfo(width=WIDTH, height=HEIGHT, frame_rate=Fraction(25), chroma_siting="420jpeg")


def make(name: str, path: Path) -> None:
    pictures = render_scene(name, frames=FRAMES, width=WIDTH, height=HEIGHT)
    write_clip(path, pictures, INFO)


def main(argv: list[str]) -> int:
    check = "--check" in argv
    status = 0
    for name in SCENES:
        target = HERE / f"{name}.y4m"
        if check:
            with tempfile.TemporaryDirectory() as tmp:
                fresh = Path(tmp) / target.name
                make(name, fresh)
                same = target.exists() and fresh.read_bytes() == target.read_bytes()
            print(f"{target.name}: {'identical' if same else 'DIFFERS'}")
            status |= 0 if same else 1
        else:
            make(name, target)
            print(f"{target.name}: written ({target.stat().st_size} bytes)")
    if not check:
        import cv2

        # The OpenCV release that rendered the clips: tests compare byte for byte under it only.
        (HERE / "RENDERED_WITH").write_text(f"opencv {cv2.__version__}\n")
    return status


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
