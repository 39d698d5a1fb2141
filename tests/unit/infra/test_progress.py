"""Progress: a rich bar on a terminal, throttled plain lines elsewhere, nothing when disabled."""

from __future__ import annotations

import io

from tovforge._progress import progress_bar


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_lines_when_not_a_terminal_first_and_last_always_throttled_between():
    out = io.StringIO()
    with progress_bar(10, "grid.h5", stream=out, every_s=3600.0) as bar:
        for _ in range(10):
            bar.update(1)
    lines = out.getvalue().splitlines()
    assert len(lines) == 2  # the start, the end; the eight in between fall inside the hour
    assert lines[0].startswith("grid.h5: 0/10 EOS   0.0%")
    assert lines[1].startswith("grid.h5: 10/10 EOS 100.0%") and "EOS/s" in lines[1] and "ETA" in lines[1]


def test_resumed_runs_start_from_the_done_count_and_the_unit_is_named():
    out = io.StringIO()
    bar = progress_bar(8, "t.csv", done=6, unit="rows", stream=out, every_s=0.0)
    bar.update(2)
    bar.close()
    assert out.getvalue().splitlines()[-1].startswith("t.csv: 8/8 rows 100.0%")


def test_a_terminal_gets_a_bar_and_disabled_shows_nothing():
    tty = _Terminal()
    with progress_bar(3, "grid.h5", stream=tty) as bar:
        bar.update(3)
    text = tty.getvalue()
    assert "grid.h5" in text and "3/3" in text and "100%" in text and "EOS/s" in text
    quiet = _Terminal()
    with progress_bar(3, "grid.h5", stream=quiet, enabled=False) as bar:
        bar.update(3)
    assert quiet.getvalue() == ""
