"""Atomic file output: write to a temporary name beside the target, then rename.

A crash or an error while writing never leaves a half-written output file.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO

__all__ = ["atomic_output", "atomic_write_bytes", "atomic_write_text"]


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_output(path: str | os.PathLike, mode: str = "wb") -> Iterator[IO]:
    """Open a temporary file beside `path`; on success rename it onto `path`, on error remove it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        # mkstemp creates the file private (0600); give the output the permissions a plain open() would.
        os.chmod(tmp, 0o666 & ~_umask())
        with os.fdopen(fd, mode) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write `data` to `path` atomically."""
    with atomic_output(path, "wb") as fh:
        fh.write(data)


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write `text` (UTF-8) to `path` atomically."""
    with atomic_output(path, "w") as fh:
        fh.write(text)
