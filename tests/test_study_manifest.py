"""Study manifests: expansion into jobs, and one-line errors that name the offending key.

Reference for the file syntax: TOML v1.0.0 as parsed by the standard library's `tomllib`
(Python 3.11+); the cartesian product of a grid is checked against `itertools.product`.
"""

from __future__ import annotations

import itertools
from pathlib import Path

import pytest
from study_support import study_clip_files
from typer.testing import CliRunner

from synth.cli import app
from synth.errors import FormatError, ParameterError
from synth.study import load_manifest


@pytest.fixture(scope="module")
def clips(tmp_path_factory) -> list[Path]:
    return study_clip_files(tmp_path_factory.mktemp("clips"))


def _write(folder: Path, text: str) -> Path:
    p = folder / "study.toml"
    p.write_text(text, encoding="utf-8")
    return p


def _clip_block(clips, **extra) -> str:
    lines = []
    for c in clips:
        lines += ["[[clips]]", f'path = "{c}"'] + [f"{k} = {v}" for k, v in extra.items()]
    return "\n".join(lines) + "\n"


def test_grid_expands_to_cartesian_product_in_manifest_order(tmp_path, clips):
    text = _clip_block(clips[:2], pictures="[0, 8]") + (
        '[[tasks]]\nkind = "blend"\ngrid = { gap = [2, 4, 8], method = ["linear", "past"] }\n'
    )
    m = load_manifest(_write(tmp_path, text))
    jobs = m.expand()
    # itertools.product (standard library) gives the reference order: clip, then gap, then method.
    expected = [(c.resolve(), g, meth) for c, g, meth in itertools.product(clips[:2], [2, 4, 8], ["linear", "past"])]
    assert [(j.clip.path, j.params["gap"], j.params["method"]) for j in jobs] == expected
    assert all(j.params["pictures"] == [0, 8] for j in jobs)


def test_globs_are_relative_to_the_manifest_and_defaults_fill_in(tmp_path, clips):
    sub = tmp_path / "footage"
    sub.mkdir()
    for c in clips[:2]:
        (sub / c.name).write_bytes(c.read_bytes())
    text = '[[clips]]\npath = "footage/*.y4m"\n[[tasks]]\nkind = "blend"\n'
    m = load_manifest(_write(tmp_path, text))
    assert sorted(c.name for c in m.clips) == sorted(c.stem for c in clips[:2])
    assert [j.params for j in m.expand()][0] == {"gap": 2, "method": "linear"}


def test_task_clip_selection_by_name(tmp_path, clips):
    text = _clip_block(clips[:2]) + f'[[tasks]]\nkind = "blend"\nclips = ["{clips[1].stem}"]\n'
    jobs = load_manifest(_write(tmp_path, text)).expand()
    assert [j.clip.name for j in jobs] == [clips[1].stem]


BAD = [
    # (manifest body after the clip block, expected key named in the message)
    ('[[tasks]]\nkind = "blend"\nsetting = 3\n', "tasks[0].setting: unknown key"),
    ('colour = "x"\n[[tasks]]\nkind = "blend"\n', "colour: unknown key"),
    ('[[tasks]]\nkind = "blend"\ngrid = { gap = [2, "four"] }\n', "tasks[0].grid.gap[1]: expected an integer"),
    ('[[tasks]]\nkind = "blend"\ngrid = { gap = 2 }\n', "tasks[0].grid.gap: expected a list of values"),
    ('[[tasks]]\nkind = "blend"\ngrid = { gap = [] }\n', "tasks[0].grid.gap: expected a non-empty list"),
    (
        '[[tasks]]\nkind = "blend"\ngrid = { gap = [2, { a = 1 }] }\n',
        "tasks[0].grid.gap[1]: expected a string, number or true/false",
    ),
    ('[[tasks]]\nkind = "blend"\ngrid = { gap = [1] }\n', "tasks[0].grid.gap[0]: must be at least 2"),
    ('[[tasks]]\nkind = "blend"\ngrid = { method = ["linear", "cubic"] }\n', "tasks[0].grid.method[1]: must be one of"),
    ('[[tasks]]\nkind = "blend"\ngrid = { gapp = [2] }\n', "tasks[0].grid.gapp: unknown parameter"),
    ('[[tasks]]\nkind = "blend"\nfixed = { gap = 2.5 }\n', "tasks[0].fixed.gap: expected an integer"),
    (
        '[[tasks]]\nkind = "blend"\ngrid = { gap = [2] }\nfixed = { gap = 2 }\n',
        "tasks[0].fixed.gap: is also in the grid",
    ),
    ('[[tasks]]\nkind = "interpolate"\n', "tasks[0].kind: unknown job kind 'interpolate'"),
    ('[[tasks]]\nkind = "blend"\nclips = ["nothing*"]\n', "tasks[0].clips[0]: 'nothing*' names no clip"),
    ("[[tasks]]\ngrid = { gap = [2] }\n", "tasks[0].kind: missing"),
]


@pytest.mark.parametrize("body, key", BAD)
def test_bad_manifest_names_the_key(tmp_path, clips, body, key):
    path = _write(tmp_path, _clip_block(clips[:1]) + body)
    with pytest.raises(ParameterError) as info:
        load_manifest(path)
    msg = str(info.value)
    assert msg.startswith("study.toml: ")
    assert key in msg
    assert "\n" not in msg


def test_bad_clip_entries(tmp_path, clips):
    task = '[[tasks]]\nkind = "blend"\n'
    cases = [
        ('[[clips]]\npath = "missing.y4m"\n', "clips[0].path: no such file 'missing.y4m'"),
        ('[[clips]]\npath = "nowhere/*.y4m"\n', "clips[0].path: glob 'nowhere/*.y4m' matches no file"),
        (f'[[clips]]\npath = "{clips[0]}"\nwindow = [0, 0, 64]\n', "clips[0].window: expected a list of 4 integers"),
        (f'[[clips]]\npath = "{clips[0]}"\npictures = [5, 2]\n', "clips[0].pictures: expected 0 <= first <= last"),
        (f'[[clips]]\npath = "{clips[0]}"\nframes = [0, 2]\n', "clips[0].frames: unknown key"),
        (f'[[clips]]\npath = "{clips[0]}"\n[[clips]]\npath = "{clips[0]}"\n', "clips[1]: clip name"),
        ("[[clips]]\nname = 'x'\n", "clips[0].path: missing"),
    ]
    (tmp_path / "dock.yuv").write_bytes(bytes(64 * 48 * 3 // 2))
    cases.append(('[[clips]]\npath = "dock.yuv"\n', "clips[0].raw.width: missing"))
    cases.append(('[[clips]]\npath = "dock.yuv"\nraw = { width = 64 }\n', "clips[0].raw.height: missing"))
    cases.append(
        (
            '[[clips]]\npath = "dock.yuv"\nraw = { width = 64, height = 48, depth = 8 }\n',
            "clips[0].raw.depth: unknown key",
        )
    )
    cases.append(
        (
            '[[clips]]\npath = "dock.yuv"\nraw = { width = 64, height = 48, chroma = "411" }\n',
            "clips[0].raw.chroma: expected one of",
        )
    )
    cases.append(
        (
            f'[[clips]]\npath = "{clips[0]}"\nraw = {{ width = 64, height = 48 }}\n',
            "clips[0].raw: only for raw .yuv files",
        )
    )
    for body, key in cases:
        path = _write(tmp_path, body + task)
        with pytest.raises(ParameterError) as info:
            load_manifest(path)
        assert key in str(info.value), (body, str(info.value))
        assert "\n" not in str(info.value)


def test_toml_syntax_error_is_a_format_error_with_position(tmp_path):
    path = _write(tmp_path, "[[clips]\npath = 'x'\n")
    with pytest.raises(FormatError, match=r"study\.toml: not valid TOML: .*line 1"):
        load_manifest(path)


def test_unavailable_kind_is_rejected_before_any_job(tmp_path, clips):
    from synth.study import JobKind, register_kind

    def never(clip_path, params, *, progress=None):
        raise AssertionError("an unavailable kind must not run")

    register_kind(
        JobKind(
            "unbuilt", never, available=lambda: "job kind 'unbuilt' is not available yet: synth.unbuilt is missing"
        ),
        replace=True,
    )
    path = _write(tmp_path, _clip_block(clips[:1]) + '[[tasks]]\nkind = "unbuilt"\n')
    with pytest.raises(ParameterError, match=r"tasks\[0\]\.kind: job kind 'unbuilt' is not available yet"):
        load_manifest(path)


@pytest.mark.parametrize(
    "body, key",
    [
        ('[[tasks]]\nkind = "blend"\nsetting = 3\n', "tasks[0].setting: unknown key"),
        ('[[tasks]]\nkind = "blend"\ngrid = { gap = ["two"] }\n', "tasks[0].grid.gap[0]"),
        (None, "clips[0].path: no such file"),
    ],
)
def test_cli_bad_manifest_one_line_exit_2_and_no_job(tmp_path, clips, body, key):
    if body is None:
        path = _write(tmp_path, '[[clips]]\npath = "gone.y4m"\n[[tasks]]\nkind = "blend"\n')
    else:
        path = _write(tmp_path, _clip_block(clips[:1]) + body)
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["study", str(path), "-o", str(out), "--workers", "1"])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("synth: error: study.toml: ") and key in lines[0]
    assert "Traceback" not in result.output
    assert not out.exists()  # nothing started: not even the study folder


def test_raw_geometry_is_completed_from_the_file_name(tmp_path):
    # WxH in the name, as raw YUV files are commonly named (common practice); the rest defaults.
    (tmp_path / "dock_64x48_10bit.yuv").write_bytes(bytes(64 * 48 * 3))
    path = _write(
        tmp_path, '[[clips]]\npath = "dock_64x48_10bit.yuv"\nraw = { rate = "30/1" }\n[[tasks]]\nkind = "blend"\n'
    )
    (clip,) = load_manifest(path).clips
    assert clip.options["raw"] == {"width": 64, "height": 48, "chroma": "420", "bit_depth": 10, "rate": "30/1"}
