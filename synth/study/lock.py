"""One study run per folder: the ``study.lock`` file.

The lock is a small JSON file ``DIR/study.lock`` holding the run's ``pid``, ``host``, ``started``
(UTC) and, on Linux, ``process_start`` (the holder's start time in clock ticks since boot, from
``/proc/PID/stat``, so a recycled pid is not mistaken for the holder). It appears complete or not at
all: the text is written to a private temporary file that is then hard-linked to ``study.lock``
(``link`` fails when the name exists, the ``O_EXCL`` of a whole file), and read back to check.

A second run refuses the folder in one line naming the holder's pid and host. A lock whose holder
is gone (same host, no such process, or another process under its pid) was left by a killed run:
it is moved aside under a unique name, checked to be the one judged stale (another run taking it
over at the same moment loses the race and looks again), removed, and the new run takes the folder.
A lock of another host is never taken over (its process cannot be checked from here): remove the
file by hand when that run is known to be gone. Planning (``synth study --plan``) and the report
take no lock and work on a folder in use.
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import socket
from datetime import UTC, datetime
from pathlib import Path

from synth.errors import ParameterError

__all__ = ["StudyLock", "LOCK_NAME", "read_lock"]

LOCK_NAME = "study.lock"


def _process_start(pid: int) -> int | None:
    """Start time of process `pid` in clock ticks since boot (Linux ``/proc``), None elsewhere."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    try:
        return int(text[text.rindex(")") + 2 :].split()[19])
    except (ValueError, IndexError):
        return None


def _alive(holder: dict) -> bool:
    """Whether the process a lock names still runs (True when it cannot be told from here)."""
    if holder.get("host") != socket.gethostname():
        return True
    pid = holder.get("pid")
    if isinstance(pid, bool) or not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass
    started = holder.get("process_start")
    now = _process_start(pid)
    if isinstance(started, int) and now is not None and now != started:
        return False  # the pid was recycled: the holder is gone
    return True


def read_lock(path: str | os.PathLike) -> dict | None:
    """The holder recorded in a lock file; None when there is no lock; ``{}`` when unreadable."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        return None
    except OSError:
        return {}
    try:
        data = json.loads(text)
    except ValueError:
        return {}
    return data if isinstance(data, dict) else {}


def _describe(holder: dict) -> str:
    pid = holder.get("pid", "?")
    host = holder.get("host", "an unknown host")
    since = f", since {holder['started']}" if holder.get("started") else ""
    return f"pid {pid} on {host}{since}"


class StudyLock:
    """The lock of one study folder, held for the length of a `with` block (or `acquire`/`release`).

    Parameters
    ----------
    folder : path-like
        The study folder (must exist).
    option : str
        How the folder was named on the command line (for the refusal).

    Attributes
    ----------
    took_over : dict or None
        The holder of the stale lock this run took over, if any.
    """

    def __init__(self, folder: str | os.PathLike, *, option: str = "--output"):
        self.folder = Path(folder)
        self.path = self.folder / LOCK_NAME
        self.option = option
        self.took_over: dict | None = None
        self._text: str | None = None

    def _content(self) -> str:
        pid = os.getpid()
        doc = {
            "format": "synth-study-lock",
            "schema_version": 1,
            "pid": pid,
            "host": socket.gethostname(),
            "started": datetime.now(UTC).isoformat(timespec="seconds"),
            "process_start": _process_start(pid),
        }
        return json.dumps(doc) + "\n"

    def _refuse(self, holder: dict) -> ParameterError:
        return ParameterError(
            f"{self.option} {self.folder}: another study run is using this folder ({_describe(holder)}); "
            f"wait for it to finish or stop it (the lock is {self.path})"
        )

    def _try_link(self, text: str) -> bool:
        tmp = self.folder / f".{LOCK_NAME}.{os.getpid()}-{secrets.token_hex(4)}.tmp"
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(text)
                fh.flush()
                os.fsync(fh.fileno())
            try:
                os.link(tmp, self.path)
            except FileExistsError:
                return False
            return True
        finally:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)

    def _take_over(self, stale_text: str) -> bool:
        """Move a stale lock aside; True when the lock moved is the one judged stale."""
        aside = self.folder / f".{LOCK_NAME}.stale-{os.getpid()}-{secrets.token_hex(4)}"
        try:
            os.rename(self.path, aside)
        except FileNotFoundError:
            return True  # someone else removed it: look again
        try:
            moved = aside.read_text(encoding="utf-8")
        except OSError:
            moved = None
        if moved != stale_text:
            # A run took the folder between our reading and our move: give its lock back.
            with contextlib.suppress(FileExistsError, FileNotFoundError):
                os.link(aside, self.path)
        with contextlib.suppress(FileNotFoundError):
            os.unlink(aside)
        return moved == stale_text

    def acquire(self) -> StudyLock:
        """Take the folder, or raise `ParameterError` naming the run that holds it."""
        text = self._content()
        for _ in range(10):
            if self._try_link(text):
                if self.path.read_text(encoding="utf-8") == text:  # re-check: the lock is ours
                    self._text = text
                    return self
                continue
            try:
                stale_text = self.path.read_text(encoding="utf-8")
            except FileNotFoundError:
                continue
            if not stale_text:
                raise self._refuse({})  # being written by hand or by another tool: leave it
            try:
                holder = json.loads(stale_text)
            except ValueError:
                holder = {}
            if not isinstance(holder, dict):
                holder = {}
            if holder and _alive(holder):
                raise self._refuse(holder)
            if self._take_over(stale_text):
                self.took_over = holder
        raise ParameterError(f"{self.option} {self.folder}: cannot take the study lock {self.path} (contended)")

    def release(self) -> None:
        """Remove the lock if it is still this run's."""
        if self._text is None:
            return
        try:
            if self.path.read_text(encoding="utf-8") == self._text:
                self.path.unlink()
        except FileNotFoundError:
            pass
        finally:
            self._text = None

    def __enter__(self) -> StudyLock:
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()
