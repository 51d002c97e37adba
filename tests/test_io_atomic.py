"""No leftovers from atomic output: errors, SIGINT, SIGTERM, and temporaries of killed runs.

Signal semantics checked against POSIX (common practice): SIGTERM's default action ends the process
without running any code, so a handler is needed for clean-up; SIGKILL cannot be caught, so a killed
run's temporary file is found and removed by the next run instead.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from synth.io import atomic
from synth.io.atomic import atomic_output, atomic_write_text, remove_stale_temporaries, take_stale_notes

# The child writes half a file through atomic_output, says so, then waits to be signalled.
_CHILD = textwrap.dedent(
    """
    import sys, time
    from synth.io.atomic import atomic_output, install_signal_cleanup
    if sys.argv[2] == "handlers":
        install_signal_cleanup()
    with atomic_output(sys.argv[1]) as fh:
        fh.write(b"x" * 100000)
        fh.flush()
        print("writing", flush=True)
        time.sleep(30)
        fh.write(b"never")
    """
)


def _tmp_files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.iterdir() if p.name.endswith(".tmp"))


def _start_child(target: Path, mode: str) -> subprocess.Popen:
    proc = subprocess.Popen(
        [sys.executable, "-c", _CHILD, str(target), mode], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    assert proc.stdout.readline().strip() == "writing"
    assert len(_tmp_files(target.parent)) == 1  # mid-write: the temporary file exists
    return proc


@pytest.mark.parametrize(
    ("sig", "mode"),
    [(signal.SIGTERM, "handlers"), (signal.SIGINT, "plain"), (signal.SIGHUP, "handlers")],
)
def test_signal_mid_write_leaves_nothing(tmp_path, sig, mode):
    target = tmp_path / "out.y4m"
    proc = _start_child(target, mode)
    proc.send_signal(sig)
    proc.wait(timeout=20)
    assert proc.returncode != 0
    assert not target.exists()
    assert _tmp_files(tmp_path) == []


def test_killed_writer_leaves_a_temporary_the_next_write_removes(tmp_path):
    target = tmp_path / "out.y4m"
    proc = _start_child(target, "plain")
    proc.send_signal(signal.SIGKILL)  # cannot be caught: no code runs
    proc.wait(timeout=20)
    left = _tmp_files(tmp_path)
    assert len(left) == 1 and f"-{proc.pid}-" in left[0].name
    atomic._SCANNED.discard(os.path.abspath(tmp_path))
    take_stale_notes()
    atomic_write_text(tmp_path / "other.json", "{}\n")  # any write into the folder cleans it
    assert _tmp_files(tmp_path) == []
    notes = take_stale_notes()
    assert len(notes) == 1 and "removed 1 temporary file" in notes[0]
    assert (tmp_path / "other.json").read_text() == "{}\n"


def test_error_inside_removes_the_temporary(tmp_path):
    target = tmp_path / "a.bin"
    with pytest.raises(RuntimeError):
        with atomic_output(target) as fh:
            fh.write(b"half")
            raise RuntimeError("boom")
    assert not target.exists() and _tmp_files(tmp_path) == []
    assert atomic._LIVE == set()


def test_stale_rules_keep_what_may_still_be_written(tmp_path):
    live = tmp_path / f".a.y4m.synth-{atomic._HOST_TAG}-{os.getpid()}-0a0b0c0d.tmp"  # this process: kept
    other_host = tmp_path / ".b.y4m.synth-ffffff-1-0a0b0c0d.tmp"  # another host: kept, reported
    legacy_old = tmp_path / ".c.y4m.ab12cd34.tmp"  # earlier release, old: removed
    legacy_new = tmp_path / ".d.y4m.ab12cd35.tmp"  # earlier release, fresh: kept
    foreign = tmp_path / ".e.y4m.something-else.tmp"  # not ours: kept
    for p in (live, other_host, legacy_old, legacy_new, foreign):
        p.write_bytes(b"x")
    old = time.time() - 3600
    os.utime(legacy_old, (old, old))
    if other_host.name.split("-")[1] == atomic._HOST_TAG:  # pragma: no cover - 1 in 16M hosts
        pytest.skip("this host's tag is ffffff")
    take_stale_notes()
    removed = remove_stale_temporaries(tmp_path)
    assert removed == [legacy_old]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in (live, other_host, legacy_new, foreign))
    notes = take_stale_notes()
    assert any("another host" in n for n in notes) and any("removed 1" in n for n in notes)


def test_output_keeps_umask_permissions(tmp_path):
    # A plain open() creates files 0666 minus the umask (POSIX, common practice); so must the rename.
    mask = os.umask(0o027)
    try:
        atomic_write_text(tmp_path / "p.txt", "x")
    finally:
        os.umask(mask)
    assert (tmp_path / "p.txt").stat().st_mode & 0o777 == 0o640
