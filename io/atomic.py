"""Atomic file output: write to a temporary name beside the target, then rename.

A crash or an error while writing never leaves a half-written output file, and no exit path leaves
a temporary file behind that the next run does not handle:

- an exception (``KeyboardInterrupt`` from SIGINT included) removes the temporary file;
- `install_signal_cleanup` (called by the ``synth`` command line) turns SIGTERM and SIGHUP into
  `TerminatedBySignal`, a ``KeyboardInterrupt``, so the same clean-up runs; an ``atexit`` hook
  removes whatever is still registered at a normal interpreter exit;
- a kill that runs no code (SIGKILL, a power cut) leaves the temporary file; its name says whose it
  is, ``.NAME.synth-HOST-PID-RANDOM.tmp``, and the next write into the same folder removes those
  whose process (on this host) is gone, and the older ``.NAME.XXXXXXXX.tmp`` files of earlier synth
  releases once they are older than this process and a minute old. `take_stale_notes` tells the
  caller what was removed (the command line prints it as a note).

The folder of the target is created when missing (study folders and report folders rely on it);
commands refuse a missing output folder before calling in (`synth.commands.outputs`).
"""

from __future__ import annotations

import atexit
import contextlib
import hashlib
import os
import re
import secrets
import signal
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import IO

__all__ = [
    "atomic_output",
    "atomic_write_bytes",
    "atomic_write_text",
    "install_signal_cleanup",
    "TerminatedBySignal",
    "remove_stale_temporaries",
    "take_stale_notes",
    "temporary_name",
    "TMP_SUFFIX",
]

#: Suffix of every temporary file synth writes.
TMP_SUFFIX = ".tmp"
#: Legacy temporaries (earlier releases, ``tempfile.mkstemp``) this old are removed when found.
LEGACY_TMP_AGE_SECONDS = 60.0

_HOST_TAG = hashlib.sha256(socket.gethostname().encode()).hexdigest()[:6]
_STARTED = time.time()
_LIVE: set[str] = set()  # temporary files of this process not yet renamed or removed
_LOCK = threading.Lock()
_SCANNED: set[str] = set()  # folders already scanned for stale temporaries by this process
_NOTES: list[str] = []
_OURS = re.compile(r"^\..+\.synth-(?P<host>[0-9a-f]{6})-(?P<pid>\d+)-[0-9a-f]+\.tmp$")
_LEGACY = re.compile(r"^\..+\.[a-z0-9_]{8}\.tmp$")


class TerminatedBySignal(KeyboardInterrupt):
    """Raised in the main thread when SIGTERM or SIGHUP arrives (after `install_signal_cleanup`).

    A ``KeyboardInterrupt``, so every clean-up that handles an interruption handles it too.
    """

    def __init__(self, signum: int):
        super().__init__(f"terminated by {signal.Signals(signum).name}")
        self.signum = signum


def _raise_terminated(signum, frame) -> None:
    raise TerminatedBySignal(signum)


def install_signal_cleanup() -> None:
    """Turn SIGTERM and SIGHUP into `TerminatedBySignal` in this process (main thread only).

    Signals whose handler is already set by someone else (not the default) are left alone.
    """
    if threading.current_thread() is not threading.main_thread():
        return
    for sig in (signal.SIGTERM, getattr(signal, "SIGHUP", None)):
        if sig is not None and signal.getsignal(sig) in (signal.SIG_DFL, None):
            signal.signal(sig, _raise_terminated)


def _remove_live() -> None:
    with _LOCK:
        for tmp in list(_LIVE):
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        _LIVE.clear()


atexit.register(_remove_live)


def _forget_parent_state() -> None:
    """In a forked child: the parent's temporary files are not the child's to remove."""
    global _LOCK
    _LOCK = threading.Lock()  # the parent may have held it while forking
    _LIVE.clear()
    _SCANNED.clear()
    _NOTES.clear()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_parent_state)


def temporary_name(path: str | os.PathLike) -> Path:
    """A fresh temporary name beside `path`: ``.NAME.synth-HOST-PID-RANDOM.tmp``."""
    p = Path(path)
    return p.with_name(f".{p.name}.synth-{_HOST_TAG}-{os.getpid()}-{secrets.token_hex(4)}{TMP_SUFFIX}")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_stale_temporaries(folder: str | os.PathLike) -> list[Path]:
    """Remove synth's temporary files in `folder` that no running process holds; returns them.

    Removed: ``.NAME.synth-HOST-PID-*.tmp`` of this host whose process is gone, and legacy
    ``.NAME.XXXXXXXX.tmp`` files older than this process and `LEGACY_TMP_AGE_SECONDS`. Files of
    another host (shared storage) are left alone and reported in `take_stale_notes`.
    """
    removed: list[Path] = []
    others = 0
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    now = time.time()
    for entry in entries:
        name = entry.name
        if not name.startswith(".") or not name.endswith(TMP_SUFFIX):
            continue
        m = _OURS.match(name)
        stale = False
        if m:
            if m["host"] != _HOST_TAG:
                others += 1
                continue
            stale = int(m["pid"]) != os.getpid() and not _pid_alive(int(m["pid"]))
        elif _LEGACY.match(name):
            with contextlib.suppress(OSError):
                mtime = entry.stat(follow_symlinks=False).st_mtime
                stale = mtime < _STARTED and now - mtime > LEGACY_TMP_AGE_SECONDS
        if stale:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(entry.path)
                removed.append(Path(entry.path))
    if removed:
        _NOTES.append(
            f"removed {len(removed)} temporary file(s) left in {folder} by an interrupted run (e.g. {removed[0].name})"
        )
    if others:
        _NOTES.append(f"{others} temporary file(s) of synth on another host in {folder} left alone")
    return removed


def take_stale_notes() -> list[str]:
    """The notes of `remove_stale_temporaries` since the last call (and forget them)."""
    notes = list(_NOTES)
    _NOTES.clear()
    return notes


@contextlib.contextmanager
def atomic_output(path: str | os.PathLike, mode: str = "wb") -> Iterator[IO]:
    """Open a temporary file beside `path`; on success rename it onto `path`, on error remove it.

    The folder is created when missing. The first write into a folder removes the stale
    temporaries of killed runs found there (`remove_stale_temporaries`).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    folder = os.path.abspath(path.parent)
    if folder not in _SCANNED:
        _SCANNED.add(folder)
        remove_stale_temporaries(folder)
    tmp = str(temporary_name(path))
    owner = os.getpid()
    # registered before it exists: a signal arriving between the two steps must not leave an
    # unregistered file behind (the exit handler skips names that do not exist)
    with _LOCK:
        _LIVE.add(tmp)
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0), 0o666)
    except BaseException:  # the open failed, or a signal came just after it (the name is ours alone)
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        with _LOCK:
            _LIVE.discard(tmp)
        raise
    try:
        with os.fdopen(fd, mode) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
        with _LOCK:
            _LIVE.discard(tmp)
    except BaseException:
        if os.getpid() == owner:  # not in a child forked inside the block
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
            with _LOCK:
                _LIVE.discard(tmp)
        raise


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write `data` to `path` atomically."""
    with atomic_output(path, "wb") as fh:
        fh.write(data)


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write `text` (UTF-8) to `path` atomically."""
    with atomic_output(path, "w") as fh:
        fh.write(text)
