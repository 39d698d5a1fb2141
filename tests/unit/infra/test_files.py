"""Outputs are published whole and never clobbered, killed runs leave no litter behind, locks name their
owner and stale ones are taken over, unreadable text is one line (tovforge._files, issue 15)."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from tovforge._files import (HOST, OutputLock, check_output, publish, publish_folder, read_text, remove_litter,
                             temp_path)
from tovforge.errors import InputError, OutputBusy, OutputExists


def _dead_pid() -> int:
    """The pid of a process that has finished (and been reaped)."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_read_text_names_the_file_and_line_of_bytes_that_are_not_utf8(tmp_path):
    path = tmp_path / "spec.toml"
    path.write_bytes(b'family = "x"\n# caf\xe9\n')
    with pytest.raises(InputError, match=r"spec.toml:2: the spec is not UTF-8 text \(byte 0xe9 at offset 18\)"):
        read_text(path, "spec")
    with pytest.raises(InputError, match="cannot read the spec"):
        read_text(tmp_path / "none.toml", "spec")
    with pytest.raises(InputError, match="a folder, not a spec file"):
        read_text(tmp_path, "spec")


def test_check_output_refuses_before_any_work(tmp_path):
    (tmp_path / "file").write_text("x")
    (tmp_path / "full").mkdir()
    (tmp_path / "full" / "a").write_text("x")
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no such folder for the table t.csv"):
        check_output(tmp_path / "no" / "t.csv", "table")
    with pytest.raises(InputError, match="is a file, not a folder"):
        check_output(tmp_path / "file" / "t.csv", "table")
    with pytest.raises(InputError, match="is a folder; the table is a file"):
        check_output(tmp_path / "full", "table")
    with pytest.raises(InputError, match="is a file; the model folder is a folder"):
        check_output(tmp_path / "file", "model folder", folder=True)
    with pytest.raises(OutputExists, match="pass overwrite=True to replace it"):
        check_output(tmp_path / "file", "table")
    with pytest.raises(OutputExists):
        check_output(tmp_path / "full", "model folder", folder=True)
    check_output(tmp_path / "file", "table", overwrite=True)
    check_output(tmp_path / "empty", "model folder", folder=True)  # an empty folder holds no output
    if os.path.isdir("/sys"):  # a folder nobody may write in, root included
        with pytest.raises(InputError, match="cannot write the table there"):
            check_output("/sys/t.csv", "table")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty", "file", "full"]  # the probe left nothing


def test_publish_never_clobbers_without_overwrite(tmp_path):
    out = tmp_path / "t.csv"
    tmp = temp_path(out)
    tmp.write_text("new")
    out.write_text("appeared while the new one was written")
    with pytest.raises(OutputExists):
        publish(tmp, out, "table")
    assert out.read_text() == "appeared while the new one was written" and not tmp.exists()
    tmp.write_text("new")
    publish(tmp, out, "table", overwrite=True)
    assert out.read_text() == "new" and not tmp.exists()


def test_publish_folder_replaces_whole_and_puts_the_old_back_when_the_rename_fails(tmp_path, monkeypatch):
    out = tmp_path / "model"
    out.mkdir()
    (out / "model.json").write_text("old")
    new = temp_path(out)
    new.mkdir()
    (new / "model.json").write_text("new")
    with pytest.raises(OutputExists):
        publish_folder(new, out, "model folder")
    assert (out / "model.json").read_text() == "old" and not new.exists()

    new.mkdir()
    (new / "model.json").write_text("new")
    real = os.rename

    def failing(src, dst):
        if str(src) == str(new):
            raise OSError(28, "No space left on device")
        return real(src, dst)

    monkeypatch.setattr(os, "rename", failing)
    with pytest.raises(OSError, match="No space left"):
        publish_folder(new, out, "model folder", overwrite=True)
    monkeypatch.undo()
    assert (out / "model.json").read_text() == "old"  # the old folder is back under its name
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model"]

    new.mkdir()
    (new / "model.json").write_text("new")
    publish_folder(new, out, "model folder", overwrite=True)
    assert (out / "model.json").read_text() == "new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model"]


def test_litter_of_dead_runs_is_removed_and_that_of_live_runs_kept(tmp_path):
    out = tmp_path / "g.h5"
    dead, live = _dead_pid(), os.getpid()
    litter = [tmp_path / f".g.h5.{dead}@{HOST}.tmp", tmp_path / f".g.h5.{dead}.tmp"]  # new and older names
    spool = tmp_path / f".g.h5.{dead}@{HOST}.tmp.abc123"  # a folder (an NPZ table's spool)
    kept = [tmp_path / f".g.h5.{live}@{HOST}.tmp", tmp_path / f".g.h5.{dead}@another-host.tmp",
            tmp_path / f".other.h5.{dead}@{HOST}.tmp", tmp_path / "g.h5"]
    for p in litter + kept:
        p.write_text("x")
    spool.mkdir()
    (spool / "0.raw").write_text("x")
    removed = remove_litter(out)
    assert sorted(removed) == sorted(litter + [spool])
    assert all(p.exists() for p in kept) and not any(p.exists() for p in litter + [spool])


def test_a_lock_refuses_a_second_writer_naming_its_owner_and_a_dead_owner_is_taken_over(tmp_path):
    out = tmp_path / "g.h5"
    holder = subprocess.Popen([sys.executable, "-c", "import sys, time\nfrom tovforge._files import OutputLock\n"
                               f"lock = OutputLock({str(out)!r}).acquire()\nprint('held', flush=True)\n"
                               "time.sleep(60)"], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(OutputBusy, match=rf"being written by another run \(pid {holder.pid} on {HOST}, "
                                             r"started .*; lock file .*g\.h5\.lock\)"):
            OutputLock(out, "grid file").acquire()
    finally:
        holder.kill()  # SIGKILL: the lock file stays, its lock goes with the process
        holder.wait()
    assert (tmp_path / "g.h5.lock").exists()
    with OutputLock(out, "grid file") as lock:
        assert lock.stale["pid"] == holder.pid  # the dead run's lock, taken over
        with pytest.raises(OutputBusy, match=f"pid {os.getpid()}"):
            OutputLock(out).acquire()  # even from this process, through another open of the file
    assert not (tmp_path / "g.h5.lock").exists()  # released and removed
