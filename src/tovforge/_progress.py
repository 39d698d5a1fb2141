"""Progress of long runs (internal): a bar on a terminal, a line every few seconds otherwise.

On a terminal the bar is drawn by rich (which typer, a core dependency,
already installs).  When the stream is not a terminal (logs, CI, pipes) a
plain line is written at most every ``every_s`` seconds and at the end, so
logs stay readable.  With ``enabled=False`` nothing is shown.
"""

from __future__ import annotations

import math
import sys
import time

__all__ = ["progress_bar"]


class _NoProgress:
    """Shows nothing."""

    def update(self, n: int) -> None:
        """Count ``n`` more items as done."""

    def close(self) -> None:
        """Finish the display."""

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class _Lines(_NoProgress):
    """One line per ``every_s`` seconds: items done, percentage, rate and ETA."""

    def __init__(self, total: int, done: int, label: str, unit: str, stream, every_s: float):
        self.total, self.done, self.label, self.unit = total, done, label, unit
        self.stream, self.every_s = stream, every_s
        self.t0, self.start_done, self.last = time.monotonic(), done, -math.inf
        self._show(force=True)

    def _line(self) -> str:
        frac = self.done / self.total if self.total else 1.0
        elapsed = time.monotonic() - self.t0
        new = self.done - self.start_done
        rate = new / elapsed if elapsed > 0 and new else 0.0
        eta = (self.total - self.done) / rate if rate else math.nan
        eta_s = "--:--" if not math.isfinite(eta) else f"{int(eta // 60):d}:{int(eta % 60):02d}"
        return (f"{self.label}: {self.done}/{self.total} {self.unit} {100 * frac:5.1f}%  "
                f"{rate:7.1f} {self.unit}/s  ETA {eta_s}")

    def _show(self, force: bool = False) -> None:
        now = time.monotonic()
        if force or now - self.last >= self.every_s or self.done == self.total:
            self.stream.write(self._line() + "\n")
            self.stream.flush()
            self.last = now

    def update(self, n: int) -> None:
        self.done += n
        self._show()


class _RichBar(_NoProgress):
    """A rich progress bar (label, bar, done/total, percentage, rate, ETA)."""

    def __init__(self, total: int, done: int, label: str, unit: str, stream):
        from rich.console import Console
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, ProgressColumn, TaskProgressColumn,
                                   TextColumn, TimeRemainingColumn)
        from rich.text import Text

        class _Rate(ProgressColumn):
            def render(self, task):
                return Text(f"{task.speed or 0.0:.1f} {unit}/s")

        self._bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                             TaskProgressColumn(), _Rate(), TextColumn("ETA"), TimeRemainingColumn(),
                             console=Console(file=stream), transient=False)
        self._task = self._bar.add_task(label, total=total, completed=done)
        self._bar.start()

    def update(self, n: int) -> None:
        self._bar.advance(self._task, n)

    def close(self) -> None:
        self._bar.stop()


def progress_bar(total: int, label: str, *, done: int = 0, unit: str = "EOS", enabled: bool = True, stream=None,
                 every_s: float = 10.0):
    """A progress display for ``total`` items, ``done`` of them already finished.

    Parameters
    ----------
    total, done : int
    label : str
        Shown before the bar (a file name).
    unit : str
        What is counted, for the rate (``EOS/s``).
    enabled : bool
        ``False`` shows nothing (quiet mode).
    stream : file, optional
        Default ``sys.stderr``.
    every_s : float
        Seconds between lines when ``stream`` is not a terminal.

    Returns
    -------
    object
        With ``update(n)`` and ``close()``; also a context manager that closes.
    """
    if not enabled:
        return _NoProgress()
    stream = sys.stderr if stream is None else stream
    if getattr(stream, "isatty", lambda: False)():
        try:
            return _RichBar(total, done, label, unit, stream)
        except ImportError:  # typer without rich (typer-slim): plain lines
            pass
    return _Lines(total, done, label, unit, stream, every_s)
