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


@pytest.mark.parametrize("args", [
    ("design", "examples/demo-valve.toml", "--header", "{tmp}/missing/x.h"),
    ("simulate", "examples/demo-valve.toml", "--supply", "24", "--coil-temp", "20", "--csv", "{tmp}/missing/w.csv"),
])
def test_output_in_a_missing_folder_is_one_line_and_exit_2(tmp_path, args):
    from conftest import run_cli

    r = run_cli(*(a.format(tmp=tmp_path) for a in args))
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr
    lines = [ln for ln in r.stderr.splitlines() if ln.startswith("coildrive:")]
    assert len(lines) == 1 and "missing" in lines[0] and "does not exist" in lines[0], r.stderr
    assert not (tmp_path / "missing").exists()
