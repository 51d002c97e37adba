"""The one progress helper of the command layer (the library only calls ``progress(done, total, label)``).

On a terminal it draws a bar on stderr; when stderr is not a terminal (a piped or logged run) it
writes a plain line at most every `PLAIN_INTERVAL_S` seconds, and the last one, so a long run is
never silent.
"""

from __future__ import annotations

import sys
import time

__all__ = ["Progress", "PLAIN_INTERVAL_S"]

#: Seconds between two plain progress lines when stderr is not a terminal.
PLAIN_INTERVAL_S = 5.0


class Progress:
    """A ``progress(done, total, label)`` callback that reports on stderr.

    Parameters
    ----------
    description : str
        What is running, shown before the count.
    stream : file, optional
        Where to report (default: ``sys.stderr``).
    interactive : bool, optional
        Draw a bar (default: whether `stream` is a terminal).
    """

    def __init__(self, description: str, *, stream=None, interactive: bool | None = None):
        self.description = description
        self.stream = stream if stream is not None else sys.stderr
        if interactive is None:
            isatty = getattr(self.stream, "isatty", None)
            interactive = bool(isatty and isatty())
        self.interactive = interactive
        self._bar = None
        self._task = None
        self._last_line = -1.0
        self._pending = None
        self._start = time.monotonic()

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()
            self._bar = None
        elif self._pending is not None:
            self._write_line(*self._pending)
        self._pending = None

    def __call__(self, done: int, total: int, label: str = "") -> None:
        if self.interactive:
            self._draw(done, total, label)
            return
        now = time.monotonic()
        self._pending = (done, total, label)
        if self._last_line < 0 or now - self._last_line >= PLAIN_INTERVAL_S or done >= total:
            self._write_line(done, total, label)
            self._last_line = now

    def _write_line(self, done: int, total: int, label: str) -> None:
        elapsed = time.monotonic() - self._start
        tail = f" {label}" if label else ""
        print(f"{self.description}: {done}/{total} ({elapsed:.0f} s){tail}", file=self.stream, flush=True)
        self._pending = None

    def _draw(self, done: int, total: int, label: str) -> None:
        if self._bar is None:  # started on the first report, so an early error prints one line only
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, TextColumn, TimeElapsedColumn, TimeRemainingColumn
            from rich.progress import Progress as RichProgress

            self._bar = RichProgress(
                TextColumn("{task.description}"),
                BarColumn(),
                MofNCompleteColumn(),
                TimeElapsedColumn(),
                TimeRemainingColumn(),
                TextColumn("{task.fields[label]}"),
                console=Console(file=self.stream),
                transient=True,
            )
            self._bar.start()
            self._task = self._bar.add_task(self.description, total=total, label="")
        self._bar.update(self._task, completed=done, total=total, label=label)
