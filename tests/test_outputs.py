"""Writing outputs without losing what the user had: through symlinks, into FIFOs, as one set."""

import os
import threading

import pytest

from emispec import outputs
from emispec.outputs import OutputError, write_file, write_set


def test_a_failed_rename_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "result.json"
    target.write_text("old")

    def refuse(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(outputs.os, "replace", refuse)
    with pytest.raises(OutputError, match="nothing was written"):
        write_file(target, "new")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["result.json"]


def test_replaces_a_regular_file_with_the_permissions_open_gives(tmp_path):
    target = tmp_path / "a.txt"
    write_file(target, "one")
    write_file(target, "two")
    assert target.read_text() == "two" and len(list(tmp_path.iterdir())) == 1
    mask = os.umask(0)
    os.umask(mask)
    assert target.stat().st_mode & 0o777 == 0o666 & ~mask


def test_writes_through_a_symlink_and_keeps_the_link(tmp_path):
    real = tmp_path / "real.json"
    real.write_text("old")
    link = tmp_path / "link.json"
    link.symlink_to(real)
    write_file(link, "new")
    assert link.is_symlink() and real.read_text() == "new"


def test_writes_into_a_fifo_without_replacing_it(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    got = []

    def read():
        with open(fifo, encoding="utf-8") as handle:
            got.append(handle.read())

    reader = threading.Thread(target=read)
    reader.start()
    write_file(fifo, "through the pipe")
    reader.join(5)
    assert got == ["through the pipe"] and fifo.is_fifo()


def test_a_directory_in_the_way_of_a_set_writes_nothing(tmp_path):
    (tmp_path / "b.csv").mkdir()
    (tmp_path / "a.json").write_text("keep me")
    with pytest.raises(OutputError, match="b.csv: is a directory; nothing was written"):
        write_set(tmp_path, {"a.json": lambda: "new", "b.csv": lambda: "x"})
    assert (tmp_path / "a.json").read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json", "b.csv"]


def test_a_failed_render_writes_nothing_of_the_set(tmp_path):
    (tmp_path / "a.json").write_text("keep me")

    def boom():
        raise RuntimeError("plot failed")

    with pytest.raises(RuntimeError):
        write_set(tmp_path, {"a.json": lambda: "new", "b.png": boom})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json"] and (tmp_path / "a.json").read_text() == "keep me"


def test_leftovers_of_a_killed_run_are_removed(tmp_path):
    dead = tmp_path / ".emispec-999999999-abcd"  # no process has that id
    dead.mkdir()
    (dead / "estimate.json").write_text("half")
    alive = tmp_path / f".emispec-{os.getpid()}-efgh"
    alive.mkdir()
    write_set(tmp_path, {"x.txt": lambda: "x"})
    assert not dead.exists() and alive.exists()
