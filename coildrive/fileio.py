"""Atomic output files: a reader sees the old file or the new one, never half of one."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def write_atomic(path: str | os.PathLike, data: str | bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder.

    The temporary file is flushed and fsync'ed, then renamed over ``path``
    (``os.replace`` is atomic on POSIX and Windows), so an existing file is never left
    truncated or lost if the process dies part-way.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    payload = data.encode("utf-8") if isinstance(data, str) else data
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
    try:
        # mkstemp makes the file 0600; give it the mode a plain open() would have.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
