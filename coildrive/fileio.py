"""Atomic output files: a reader sees the old file or the new one, never half of one."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Iterator

from .errors import InputError


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[str]:
    """A temporary file beside ``path`` for the caller to write; renamed over ``path``
    when the block ends normally, deleted when it raises.

    The file gets the mode a plain ``open()`` would give (``mkstemp`` makes it 0600), and
    ``os.replace`` is atomic on POSIX and Windows, so a reader never sees half a file and
    an existing file is never left truncated if the process dies part-way. A folder that
    is missing or cannot be written raises :class:`~coildrive.errors.InputError` (naming
    ``path``) before the block runs.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
    except FileNotFoundError:
        raise InputError(str(path), "", f"cannot be written: the folder {str(folder)!r} does not exist") from None
    except OSError as err:
        raise InputError(str(path), "", f"cannot be written ({err.strerror})") from None
    os.close(fd)
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        yield tmp
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def write_atomic(path: str | os.PathLike, data: str | bytes) -> None:
    """Write ``data`` (text as UTF-8) to ``path`` atomically, flushed and fsync'ed
    before the rename (see :func:`atomic_path`)."""
    payload = data.encode("utf-8") if isinstance(data, str) else data
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
