"""Outputs are written atomically: an existing file survives a failed write whole."""

import os

import pytest

from coildrive import fileio
from coildrive.fileio import write_atomic


def test_write_replaces_whole_file(tmp_path):
    target = tmp_path / "out.h"
    write_atomic(target, "first\n")
    write_atomic(target, "second\n")
    assert target.read_text() == "second\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.h"], "no temporary file left behind"
    mode = os.stat(target).st_mode & 0o777
    umask = os.umask(0)
    os.umask(umask)
    assert mode == 0o666 & ~umask


def test_failed_write_keeps_old_file(tmp_path, monkeypatch):
    target = tmp_path / "out.h"
    target.write_text("the old header\n")

    def broken_replace(src, dst):
        raise OSError("disk vanished")
    monkeypatch.setattr(fileio.os, "replace", broken_replace)
    with pytest.raises(OSError):
        write_atomic(target, "x" * 100_000)
    assert target.read_text() == "the old header\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.h"]


def test_interrupted_write_keeps_old_file(tmp_path, monkeypatch):
    target = tmp_path / "out.h"
    target.write_text("the old header\n")

    def interrupted(fd):
        raise KeyboardInterrupt
    monkeypatch.setattr(fileio.os, "fsync", interrupted)
    with pytest.raises(KeyboardInterrupt):
        write_atomic(target, b"new bytes")
    assert target.read_text() == "the old header\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.h"]
