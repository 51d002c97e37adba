"""compare / gop / demo on the command line: outputs, and one-line errors with exit code 2."""

import json
import subprocess
import sys

import pytest
from typer.testing import CliRunner

from synth.cli import app
from synth.io import open_clip, write_clip


def _synth(*args, cwd=None):
    """The real entry point in a child process (what a user runs)."""
    return subprocess.run([sys.executable, "-m", "synth.cli", *map(str, args)], capture_output=True, text=True, cwd=cwd)


@pytest.fixture(scope="module")
def small_y4m(carphone_crop, tmp_path_factory):
    path = tmp_path_factory.mktemp("clip") / "crop.y4m"
    write_clip(path, carphone_crop(9))
    return path


def test_compare_writes_report_and_table(small_y4m, tmp_path):
    proc = _synth("compare", small_y4m, "--gap", 4, "--gap", 2, "-n", 5, "-p", "average,dis-fast", "--report", tmp_path / "rep")
    assert proc.returncode == 0, proc.stderr
    assert "PSNR-YUV" in proc.stdout and "dis-fast" in proc.stdout and "report:" in proc.stdout
    doc = json.loads((tmp_path / "rep" / "results.json").read_text())
    assert doc["runs"][0]["settings"]["gaps"] == [4, 2]
    assert (tmp_path / "rep" / "report.html").stat().st_size > 10_000


def test_gop_export_writes_a_clip(small_y4m, tmp_path):
    out = tmp_path / "synthetic.y4m"
    proc = _synth("gop", small_y4m, "--size", 4, "-p", "average,obmc", "--export", out, "--export-method", "obmc")
    assert proc.returncode == 0, proc.stderr
    assert "layer" in proc.stdout and f"exported 6 synthetic pictures (obmc) to {out}" in proc.stdout
    assert len(open_clip(out)) == 6
    # Sidecar in the layout of `synth export` (synth.codec.export).
    doc = json.loads(out.with_name(out.name + ".json").read_text())
    assert doc["format"] == "synth-reference-sidecar" and doc["gop"] == 4 and doc["synthesiser"] == "obmc"
    assert [p["time"] for p in doc["pictures"]] == [1, 2, 3, 5, 6, 7]
    assert [p["layer"] for p in doc["pictures"]] == [2, 1, 2, 2, 1, 2]
    # Estimated vectors: the future reference coded against the past one (one way) by default ...
    assert doc["qp"] == 27 and [f["coded_time"] for f in doc["pictures"][0]["fields"]] == [2.0]
    # ... and in both coding directions with --two-way.
    out2 = tmp_path / "synthetic2.y4m"
    proc = _synth("gop", small_y4m, "--size", 4, "-p", "obmc", "--export", out2, "--two-way")
    assert proc.returncode == 0, proc.stderr
    doc2 = json.loads(out2.with_name(out2.name + ".json").read_text())
    assert [f["coded_time"] for f in doc2["pictures"][0]["fields"]] == [2.0, 0.0]


@pytest.mark.parametrize(
    "args,message",
    [
        (["gop", "{clip}", "--size", "12"], "GOP size must be a power of two from 2 to 64, got 12"),
        (["gop", "{clip}", "--size", "16"], "a GOP of size 16 needs at least 17 pictures, the clip has 9"),
        (["compare", "{clip}", "--gap", "1"], "gap must be an integer of at least 2, got 1"),
        (["compare", "{clip}", "-p", "optical"], "unknown predictor 'optical'"),
        (["compare", "{clip}", "--vector-qp", "22,99"], "vector-qp values must be in 0..51, got 99"),
        (["compare", "missing.y4m"], "missing.y4m: no such file"),
        (["gop", "{clip}", "--size", "4", "--export", "out.mp4"], "--export must name a .y4m file"),
        (["gop", "{clip}", "--size", "4", "--decoded-refs", "60", "-p", "average"], "decoded-refs QP must be an integer 0..51, got 60"),
    ],
)
def test_errors_are_one_line(small_y4m, tmp_path, monkeypatch, args, message):
    monkeypatch.chdir(tmp_path)
    result = CliRunner().invoke(app, [a.replace("{clip}", str(small_y4m)) for a in args])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("synth: error: ") and message in lines[0], result.stderr
    assert not list(tmp_path.iterdir())  # nothing written


def test_error_in_a_child_process_is_one_line(tmp_path):
    proc = _synth("gop", tmp_path / "none.y4m", "--size", "8")
    assert proc.returncode == 2 and proc.stderr.strip() == f"synth: error: {tmp_path / 'none.y4m'}: no such file"


def test_demo_plan_and_a_reduced_demo_run(tmp_path):
    from synth.demo.run import DEMO_CLIPS, demo_plan, run_demo

    plan = demo_plan()
    assert [(s.kind, s.clip) for s in plan][:3] == [("gop", c) for c in DEMO_CLIPS]
    assert plan[-1].options["vector_qps"] == [22, 32, 42]
    # The same machinery on a small part of the plan: one GOP run and one comparison, few pictures.
    small = [plan[0], plan[3]]
    small[0].options.update(size=4, limit=5)
    small[1].options.update(gaps=[2], limit=5)
    seen = []
    results, paths = run_demo(small, out=tmp_path / "demo", predictors="average,dis-fast", progress=lambda d, t, label: seen.append((d, t)))
    assert [r.kind for r in results] == ["gop", "compare"]
    assert seen[-1] == (3 + 2, 3 + 2)  # one progress count over both runs
    doc = json.loads(paths["json"].read_text())
    assert doc["overview"]["columns"] == ["GOP 4", "gap 2"]
    assert paths["html"].exists() and paths["csv"].exists()
