"""Output options: the name says the format, folders are never created silently, every output is
checked before the first is written; the export sidecar names its clip's hash; ``--json`` is strict
JSON; a closed stdout and SIGTERM end quietly and leave nothing behind.

Outside references: YUV4MPEG2 framing (the ``YUV4MPEG2`` header line and one ``FRAME`` line per
picture, common practice) against the raw planar layout (Y, then Cb, then Cr, 4:2:0 chroma at half
size each way, common practice); SHA-256 from the standard library's `hashlib`; strict JSON per
RFC 8259 (no ``Infinity``/``NaN``: `json.loads` with a ``parse_constant`` that refuses them);
the PSNR of two identical pictures is infinite (common practice), so it must come out as null.
"""

from __future__ import annotations

import hashlib
import json
import os
import shlex
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from synth.cli import app
from synth.io import open_clip, write_y4m
from synth.picture import Picture

RUN = CliRunner()


def _strict(text: str):
    def refuse(name):
        raise ValueError(f"non-standard JSON constant {name}")

    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def clip(tmp_path_factory) -> Path:
    """Nine 64x48 pictures of the demo scene ``parcels_pan`` (cropped), as Y4M."""
    from synth.study.clipsource import ClipView

    src = Path(__file__).resolve().parents[1] / "demo_clips" / "parcels_pan.y4m"
    path = tmp_path_factory.mktemp("clip") / "pan.y4m"
    with open_clip(src) as reader:
        view = ClipView(reader, pictures=[0, 8], window=[96, 96, 64, 48])
        write_y4m(path, iter(view), view.info)
    return path


@pytest.fixture(scope="module")
def still(tmp_path_factory) -> Path:
    """Three identical 32x32 pictures: every in-between picture is exact, PSNR infinite."""
    rng = np.random.default_rng(5)
    y = rng.integers(16, 236, (32, 32), dtype=np.uint8)
    u = rng.integers(16, 240, (16, 16), dtype=np.uint8)
    pic = Picture(y, u, u.copy())
    path = tmp_path_factory.mktemp("still") / "still.y4m"
    write_y4m(path, [pic, pic, pic])
    return path


def _one_line_error(result, *fragments):
    assert result.exit_code == 2, result.output
    assert result.stderr.count("\n") == 1, result.stderr
    for f in fragments:
        assert f in result.stderr, result.stderr


def _frame(clip, out, *extra):
    return RUN.invoke(app, ["frame", str(clip), "--past", "0", "--future", "2", "--at", "1",
                            "--maker", "average", "-o", str(out), *extra])  # fmt: skip


# --- the name says the format ----------------------------------------------------------------


def test_frame_yuv_name_writes_raw_samples_and_y4m_name_writes_y4m(clip, tmp_path):
    assert _frame(clip, tmp_path / "m.y4m").exit_code == 0
    assert _frame(clip, tmp_path / "m.yuv").exit_code == 0
    y4m = (tmp_path / "m.y4m").read_bytes()
    raw = (tmp_path / "m.yuv").read_bytes()
    assert y4m.startswith(b"YUV4MPEG2 W64 H48 ")
    assert len(raw) == 64 * 48 * 3 // 2  # 4:2:0 8-bit: Y plus two quarter-size chroma planes
    assert y4m.endswith(b"FRAME\n" + raw)  # the same samples, without the Y4M framing


@pytest.mark.parametrize("name", ["m.png", "m.mp4", "m"])
def test_frame_refuses_a_name_of_a_format_it_does_not_write(clip, tmp_path, name):
    _one_line_error(_frame(clip, tmp_path / name), "--output must end in .y4m", ".yuv")
    assert list(tmp_path.iterdir()) == []


def test_export_raw_under_a_y4m_name_is_refused_before_computing(clip, tmp_path):
    res = RUN.invoke(app, ["export", str(clip), "--gop-size", "2", "--maker", "average", "--raw",
                           "-o", str(tmp_path / "x.y4m")])  # fmt: skip
    _one_line_error(res, "--raw", ".yuv")
    assert list(tmp_path.iterdir()) == []


def test_offsets_prediction_png_is_refused(clip, tmp_path):
    res = RUN.invoke(app, ["offsets", str(clip), "--past", "0", "--future", "2", "--at", "1", "--maker", "average",
                           "-o", str(tmp_path / "o.json"), "--prediction", str(tmp_path / "p.png")])  # fmt: skip
    _one_line_error(res, "--prediction must end in .y4m")
    assert list(tmp_path.iterdir()) == []


# --- missing folders, outputs checked before the first is written -----------------------------


def test_a_missing_output_folder_is_an_error_not_created(clip, tmp_path):
    target = tmp_path / "missing" / "dir" / "f.y4m"
    _one_line_error(_frame(clip, target), "does not exist")
    assert not (tmp_path / "missing").exists()
    res = RUN.invoke(app, ["export", str(clip), "--gop-size", "2", "--maker", "average", "-o", str(target)])
    _one_line_error(res, "does not exist")
    res = RUN.invoke(app, ["export", str(clip), "--gop-size", "2", "--maker", "average",
                           "-o", str(tmp_path / "e.y4m"), "--sidecar", str(tmp_path / "nope" / "e.json")])  # fmt: skip
    _one_line_error(res, "--sidecar", "does not exist")
    assert sorted(p.name for p in tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    "args",
    [
        ["vectors", "CLIP", "--coded", "1", "--ref", "0", "-o", "MISSING/f.json"],
        ["vectors", "CLIP", "--coded", "1", "--ref", "0", "-o", "OK/f.json", "--overlay", "MISSING/o.png"],
        ["calibrate", "CLIP", "-o", "MISSING/p.json"],
        ["offsets", "CLIP", "--past", "0", "--future", "2", "--at", "1", "-o", "MISSING/o.json"],
        ["gop", "CLIP", "--gop-size", "2", "--export", "MISSING/e.y4m"],
        ["gop", "CLIP", "--gop-size", "2", "--report", "MISSING/r"],
        ["compare", "CLIP", "--gaps", "2", "--report", "MISSING/r"],
        ["rd", "CLIP", "--report", "MISSING/r"],
        ["demo", "--report", "MISSING/r"],
    ],
    ids=lambda a: " ".join(x for x in a if x.startswith("-") or x.isalpha()),
)
def test_every_command_refuses_a_missing_output_folder_before_computing(tmp_path, args):
    # The clip does not exist either: the folder's refusal proves the outputs are checked first.
    clip = tmp_path / "absent.y4m"
    args = [str(clip) if a == "CLIP" else a.replace("MISSING", str(tmp_path / "no" / "such")) for a in args]
    args = [a.replace("OK", str(tmp_path)) for a in args]
    res = RUN.invoke(app, args)
    _one_line_error(res, "does not exist (create it first)")
    assert list(tmp_path.iterdir()) == []


def test_maps_folder_may_be_new_but_not_its_parents(clip, tmp_path):
    res = _frame(clip, tmp_path / "m.y4m", "--maps", str(tmp_path / "a" / "b"))
    _one_line_error(res, "--maps", "does not exist")
    assert list(tmp_path.iterdir()) == []
    res = _frame(clip, tmp_path / "m.y4m", "--maps", str(tmp_path / "maps"))
    assert res.exit_code == 0, res.output
    assert (tmp_path / "maps").is_dir()


def test_maps_pointing_at_a_file_is_refused_before_the_picture_is_written(clip, tmp_path):
    (tmp_path / "taken").write_text("x")
    res = _frame(clip, tmp_path / "m.y4m", "--maps", str(tmp_path / "taken"))
    _one_line_error(res, "--maps must be a directory")
    assert not (tmp_path / "m.y4m").exists()


def test_an_output_that_is_the_input_is_refused(clip, tmp_path):
    before = clip.read_bytes()
    _one_line_error(_frame(clip, clip), "is the clip input")
    assert clip.read_bytes() == before


def test_study_folder_may_be_new_but_not_its_parents(tmp_path):
    manifest = tmp_path / "s.toml"
    manifest.write_text('title = "t"\n[[clips]]\npath = "x.y4m"\n[[tasks]]\nkind = "blend"\n')
    res = RUN.invoke(app, ["study", str(manifest), "-o", str(tmp_path / "a" / "b"), "--workers", "1"])
    assert res.exit_code == 2 and not (tmp_path / "a").exists(), res.output


# --- the export sidecar names its clip ---------------------------------------------------------


def test_export_sidecar_names_the_clip_hash_and_a_mismatched_pair_is_detected(clip, tmp_path):
    from synth.codec.export import check_export_pair
    from synth.errors import FormatError

    out = tmp_path / "e.y4m"
    res = RUN.invoke(app, ["export", str(clip), "--gop-size", "2", "--maker", "average", "-o", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "e.y4m.json").read_text())
    assert doc["clip_sha256"] == hashlib.sha256(out.read_bytes()).hexdigest()
    assert doc["clip_bytes"] == out.stat().st_size
    check_export_pair(doc, out)  # the pair of one run
    # A later run with a larger GOP killed between its two renames: its clip beside this sidecar.
    res = RUN.invoke(app, ["export", str(clip), "--gop-size", "4", "--maker", "average",
                           "-o", str(tmp_path / "f.y4m")])  # fmt: skip
    assert res.exit_code == 0, res.output
    os.replace(tmp_path / "f.y4m", out)
    with pytest.raises(FormatError, match="different runs"):
        check_export_pair(doc, out)
    # Same size, other bytes: the hash tells.
    data = bytearray(out.read_bytes())
    data[-1] ^= 1
    out.write_bytes(bytes(data))
    doc2 = json.loads((tmp_path / "f.y4m.json").read_text())
    with pytest.raises(FormatError, match="SHA-256"):
        check_export_pair(doc2, out)


# --- strict JSON ----------------------------------------------------------------------------


def test_json_output_is_strict_with_an_infinite_psnr_as_null(still, tmp_path):
    res = _frame(still, tmp_path / "m.y4m", "--json")
    assert res.exit_code == 0, res.output
    summary = _strict(res.stdout)
    assert summary["psnr"] == {"Y": None, "Cb": None, "Cr": None}  # identical pictures: infinite PSNR


def test_every_json_option_of_the_command_line_goes_through_the_strict_encoder():
    import inspect

    import synth.cli as cli

    source = inspect.getsource(cli)
    assert "json.dumps" not in source  # only synth.io.jsonout.dumps_strict
    for name, fn in vars(cli).items():
        if (
            callable(fn)
            and getattr(fn, "__module__", None) == cli.__name__
            and "as_json" in inspect.signature(fn).parameters.keys()
        ):
            body = inspect.getsource(fn)
            assert "_emit(" in body or "_print_json(" in body, name


# --- a closed stdout, SIGTERM through the command line ------------------------------------------


def _synth(*args: str) -> list[str]:
    return [sys.executable, "-c", "import sys; from synth.cli import main; sys.argv[0] = 'synth'; main()", *args]


def test_closed_stdout_ends_quietly(clip):
    # The reader is gone before synth writes (e.g. `synth ... | head -0`): the write, or the flush at
    # interpreter exit, meets EPIPE; no "Broken pipe" message, no traceback, exit 0.
    proc = subprocess.Popen(_synth("info", str(clip), "--json"), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    _, err = proc.communicate(timeout=60)
    assert err.decode() == ""
    assert proc.returncode == 0


_UNFLUSHED = """
import sys
from synth.cli import app, main
@app.command("unflushed-test-output")
def _unflushed():
    sys.stdout.write("x" * 100)  # left in the buffer: written by the flush at interpreter exit
sys.argv[0] = "synth"
ENTRY()
"""


@pytest.mark.parametrize(("entry", "quiet"), [("main", True), ("app", False)])
def test_closed_stdout_at_the_final_flush_is_quiet_through_main(entry, quiet):
    # Control: through typer's app() alone, CPython reports the failed flush ("Exception ignored ...
    # BrokenPipeError", exit 120, documented in the Python manual's signal module notes on SIGPIPE).
    code = _UNFLUSHED.replace("ENTRY", entry)
    env = {k: v for k, v in os.environ.items() if k != "PYTHONUNBUFFERED"}  # a buffered stdout, as usual
    proc = subprocess.Popen([sys.executable, "-c", code, "unflushed-test-output"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, env=env)  # fmt: skip
    proc.stdout.close()
    _, err = proc.communicate(timeout=60)
    assert (err == b"" and proc.returncode == 0) is quiet, err.decode()


def test_pipe_into_head_ends_quietly(clip):
    # A real shell pipe (common practice: `head -1` exits after its first line).
    cmd = " ".join(shlex.quote(a) for a in _synth("info", str(clip), "--json"))
    proc = subprocess.run(["bash", "-o", "pipefail", "-c", f"{cmd} | head -1"], capture_output=True, text=True)
    assert (proc.returncode, proc.stderr, proc.stdout) == (0, "", "{\n")


def test_sigterm_during_export_leaves_no_files(clip, tmp_path):
    out = tmp_path / "e.y4m"
    env = {k: v for k, v in os.environ.items() if k != "SYNTH_DEBUG"}
    proc = subprocess.Popen(
        _synth("export", str(clip), "--gop-size", "8", "--maker", "lmmse", "-o", str(out)),
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None and not any(tmp_path.glob(".e.y4m.*.tmp")):
        time.sleep(0.005)
    if proc.poll() is not None:
        pytest.skip("the export finished before it could be signalled")
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 128 + signal.SIGTERM
    assert err.strip().splitlines()[-1] == "synth: terminated by SIGTERM"
    assert list(tmp_path.iterdir()) == []
