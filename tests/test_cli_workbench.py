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
    proc = _synth(
        "compare",
        small_y4m,
        "--gaps",
        "4,2",
        "--pictures",
        ":4",
        "--makers",
        "average,dis-fast",
        "--report",
        tmp_path / "rep",
    )
    assert proc.returncode == 0, proc.stderr
    assert "PSNR-YUV" in proc.stdout and "dis-fast" in proc.stdout and "report:" in proc.stdout
    doc = json.loads((tmp_path / "rep" / "results.json").read_text())
    assert doc["schema_version"] == 2
    assert doc["runs"][0]["settings"]["gaps"] == [4, 2] and doc["runs"][0]["settings"]["pictures_used"] == 5
    assert (tmp_path / "rep" / "report.html").stat().st_size > 10_000


def test_compare_json_is_strict_and_matches_the_report(small_y4m, tmp_path):
    proc = _synth(
        "compare",
        small_y4m,
        "--gaps",
        "2",
        "--pictures",
        "2:6",
        "--makers",
        "average",
        "--report",
        tmp_path / "rep",
        "--json",
    )
    assert proc.returncode == 0, proc.stderr

    def refuse(token):  # RFC 8259 has no Infinity / NaN
        raise AssertionError(f"non-standard JSON constant {token}")

    summary = json.loads(proc.stdout, parse_constant=refuse)
    doc = json.loads((tmp_path / "rep" / "results.json").read_text(), parse_constant=refuse)
    assert summary["run"]["summary"] == doc["runs"][0]["summary"]
    assert [r["target"] for r in doc["runs"][0]["pictures"]] == [3, 5]  # references 2, 4, 6


def test_gop_export_writes_a_clip(small_y4m, tmp_path):
    out = tmp_path / "synthetic.y4m"
    proc = _synth(
        "gop", small_y4m, "--gop-size", 4, "--makers", "average,obmc", "--export", out, "--export-maker", "obmc"
    )
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
    proc = _synth("gop", small_y4m, "--gop-size", 4, "--makers", "obmc", "--export", out2, "--two-way", "--json")
    assert proc.returncode == 0, proc.stderr
    doc2 = json.loads(out2.with_name(out2.name + ".json").read_text())
    assert [f["coded_time"] for f in doc2["pictures"][0]["fields"]] == [2.0, 0.0]
    summary = json.loads(proc.stdout)
    assert summary["export"]["maker"] == "obmc" and summary["export"]["pictures"] == 6  # the default: the only maker


@pytest.mark.parametrize(
    "args,message",
    [
        (["gop", "{clip}", "--gop-size", "12"], "--gop-size must be a power of two from 2 to 64, got 12"),
        (["gop", "{clip}", "--gop-size", "16"], "a GOP of size 16 needs at least 17 pictures, the clip has 9"),
        (["compare", "{clip}", "--gaps", "1"], "--gaps must be even integers of at least 2, got 1"),
        (["compare", "{clip}", "--gaps", "2,x"], "--gaps must be comma-separated integers, got '2,x'"),
        (["compare", "{clip}", "--makers", "optical"], "--makers must be one of lmmse, projection"),
        (["compare", "{clip}", "--vector-qp", "22,99"], "--vector-qp values must be in 0..51, got 99"),
        (
            ["compare", "{clip}", "--vectors", "v.txt"],
            "--vectors must be 'estimate', 'x264', 'stream' or a vector-field file",
        ),
        (["compare", "{clip}", "--pictures", "5:2"], "--pictures must have 0 <= FIRST <= LAST, got '5:2'"),
        (["compare", "missing.y4m"], "missing.y4m: no such file"),
        (["gop", "{clip}", "--gop-size", "4", "--export", "out.mp4"], "--export must name a .y4m file"),
        (["gop", "{clip}", "--gop-size", "4", "--export-maker", "obmc"], "--export-maker needs --export"),
        (
            ["gop", "{clip}", "--gop-size", "4", "--makers", "average", "--export", "o.y4m", "--export-maker", "lmmse"],
            "--export-maker 'lmmse' is not among this run's methods: average",
        ),
        (
            ["gop", "{clip}", "--gop-size", "4", "--decoded-refs", "60", "--makers", "average"],
            "--decoded-refs QP must be an integer 0..51, got 60",
        ),
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
    proc = _synth("gop", tmp_path / "none.y4m", "--gop-size", "8")
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
    results, paths = run_demo(
        small, out=tmp_path / "demo", makers="average,dis-fast", progress=lambda d, t, label: seen.append((d, t))
    )
    assert [r.kind for r in results] == ["gop", "compare"]
    assert seen[-1] == (3 + 2, 3 + 2)  # one progress count over both runs
    doc = json.loads(paths["json"].read_text())
    assert doc["overview"]["columns"] == ["GOP 4", "gap 2"]
    assert paths["html"].exists() and paths["csv"].exists()


def test_demo_report_option_and_text(tmp_path, monkeypatch):
    # The command layer of `synth demo` on a reduced plan: --report names the folder, --json is strict.
    import synth.demo.run as demo_run
    from synth.commands.demo import format_demo, run_demo_command

    plan = demo_run.demo_plan()
    small = [plan[0], plan[-1]]
    small[0].options.update(size=2, limit=3)
    small[1].options.update(gaps=[2], limit=3)
    monkeypatch.setattr(demo_run, "demo_plan", lambda: small)
    summary = run_demo_command(tmp_path / "rep")
    assert summary["report"]["html"] == str(tmp_path / "rep" / "report.html")
    assert summary["overview"]["columns"] == ["GOP 2"]  # the vector-QP sweep has its own table
    assert [s["clip"] for s in summary["vector_qp_runs"]] == [small[1].clip]
    text = format_demo(summary)
    assert "Vector QP on" in text and "QP22" in text and "report:" in text
    json.loads(json.dumps(summary, allow_nan=False))
