"""Files in and out: outputs appear whole or not at all, inputs are regular files.

A reader sees the old output or the new one, never half of one; a failed or killed run
leaves no temporary file that the next run would not remove (see :func:`atomic_path`).
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import signal
import stat
import tempfile
import threading
from pathlib import Path
from typing import Iterator

from .errors import InputError, OutputError, unreadable

#: Signals that end a run cleanly inside :func:`exit_on_signals` (temporary files removed).
_END_SIGNALS = tuple(getattr(signal, name) for name in ("SIGTERM", "SIGHUP") if hasattr(signal, name))


def _stale_pattern(name: str) -> re.Pattern:
    return re.compile(rf"^\.{re.escape(name)}\.(\d+)\.[^.]+\.tmp$")


def _alive(pid: int) -> bool:
    if os.name == "nt":   # os.kill(pid, 0) would end the process there: assume alive
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:   # another user's process (EPERM): alive
        return True
    return True


def remove_stale_temporaries(target: str | os.PathLike) -> list[str]:
    """Remove the temporary files that runs killed outright (``kill -9``, a power cut) left
    beside ``target``: ``.NAME.PID.XXXX.tmp`` whose process ``PID`` is gone. Returns the
    names removed. A live process's temporary file is never touched."""
    target = Path(target)
    folder = target.parent if str(target.parent) else Path(".")
    pattern = _stale_pattern(target.name)
    removed = []
    try:
        names = os.listdir(folder)
    except OSError:
        return removed
    for name in names:
        match = pattern.match(name)
        if match and int(match.group(1)) != os.getpid() and not _alive(int(match.group(1))):
            with contextlib.suppress(OSError):
                os.unlink(folder / name)
                removed.append(name)
    return removed


def temporary_beside(target: str | os.PathLike) -> str:
    """A new empty file ``.NAME.PID.XXXX.tmp`` beside ``target`` (the PID lets a later run
    tell a killed run's leftovers from a running one's); stale ones of dead runs are
    removed first (:func:`remove_stale_temporaries`)."""
    target = Path(target)
    folder = target.parent if str(target.parent) else Path(".")
    remove_stale_temporaries(target)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.{os.getpid()}.", suffix=".tmp", dir=folder)
    except FileNotFoundError:
        raise InputError(str(target), "", f"cannot be written: the folder {str(folder)!r} does not exist") from None
    except OSError as err:
        raise OutputError(str(target), f"cannot be written ({err.strerror})") from None
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)   # mkstemp makes 0600; give what a plain open() would
    return tmp


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = True, option: str = "--out") -> Iterator[str]:
    """A temporary file beside ``path`` for the caller to write; renamed over ``path``
    when the block ends normally, deleted when it raises.

    ``os.replace`` is atomic on POSIX and Windows, so a reader never sees half a file and
    an existing file is never left truncated if the process dies part-way. A run ended by
    SIGTERM or SIGHUP inside :func:`exit_on_signals` removes its temporary file; one killed
    outright leaves ``.NAME.PID.XXXX.tmp``, which the next write of ``NAME`` removes. A
    folder that is missing or cannot be written raises
    :class:`~coildrive.errors.InputError` (naming ``path``) before the block runs; a write
    that fails (a full disk) raises :class:`~coildrive.errors.OutputError`. Without
    ``overwrite`` an existing ``path`` is left alone and :func:`publish_new` raises an
    :class:`~coildrive.errors.InputError` naming ``option``.
    """
    target = Path(path)
    tmp = temporary_beside(target)
    try:
        yield tmp
        try:
            publish_new(tmp, target, overwrite=overwrite, option=option)
        except OSError as err:
            raise OutputError(str(path), f"cannot be written ({err.strerror or err})") from None
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def write_atomic(path: str | os.PathLike, data: str | bytes) -> None:
    """Write ``data`` (text as UTF-8) to ``path`` atomically, flushed and fsync'ed
    before the rename (see :func:`atomic_path`). A full disk raises
    :class:`~coildrive.errors.OutputError` and leaves any old file as it was."""
    payload = data.encode("utf-8") if isinstance(data, str) else data
    with atomic_path(path) as tmp:
        try:
            with open(tmp, "wb") as handle:
                handle.write(payload)
                handle.flush()
                os.fsync(handle.fileno())
        except OSError as err:
            raise OutputError(str(path), f"cannot be written ({err.strerror or err})") from None


def publish_new(tmp: str | os.PathLike, target: str | os.PathLike, *, overwrite: bool,
                option: str = "--out") -> None:
    """Give the already-written file ``tmp`` the name ``target``, refusing to replace an
    existing ``target`` unless ``overwrite`` (then it is replaced atomically).

    Without ``overwrite`` a hard link makes the name only if none exists (no window in
    which two runs could both take it); file systems without hard links fall back to a
    check and a rename. An open handle on ``tmp`` keeps writing into ``target``.

    Raises :class:`~coildrive.errors.InputError` naming ``option`` when ``target`` exists.
    """
    tmp, target = os.fspath(tmp), os.fspath(target)
    if overwrite:
        os.replace(tmp, target)
        return
    try:
        os.link(tmp, target)
    except FileExistsError:
        raise exists_error(target, option) from None
    except OSError as err:
        if err.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
            raise
        if os.path.lexists(target):
            raise exists_error(target, option) from None
        os.replace(tmp, target)
        return
    os.unlink(tmp)


def exists_error(target: str | os.PathLike, option: str = "--out") -> InputError:
    """The one line for an output that would replace an existing capture."""
    return InputError(option, "", f"{os.fspath(target)!r} exists: give another name, or "
                      "--overwrite to replace it")


def read_input(path: str | os.PathLike, expected: str, max_bytes: int | None = None) -> bytes:
    """The bytes of the input file ``path``, which must be a regular file (a FIFO, a
    device or a socket would block or never end) of at most ``max_bytes``.

    Raises :class:`~coildrive.errors.InputError` naming ``path`` and ``expected`` (e.g.
    ``"a drive file (TOML)"``) for a missing, unreadable, irregular or too large file.
    """
    source = os.fspath(path)
    try:
        st = os.stat(source)
    except OSError as err:
        raise unreadable(source, err, expected) from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(source, "", f"is a folder, expected {expected}")
    if not stat.S_ISREG(st.st_mode):
        kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(st.st_mode) else
                "a device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else
                "a socket" if stat.S_ISSOCK(st.st_mode) else "not a regular file")
        raise InputError(source, "", f"is {kind}, expected {expected} (a regular file)")
    if max_bytes is not None and st.st_size > max_bytes:
        raise InputError(source, "", f"is {st.st_size:,} bytes, more than the {max_bytes:,} "
                         f"expected of {expected}")
    try:
        with open(source, "rb") as handle:
            data = handle.read() if max_bytes is None else handle.read(max_bytes + 1)
    except OSError as err:
        raise unreadable(source, err, expected) from None
    if max_bytes is not None and len(data) > max_bytes:
        raise InputError(source, "", f"grew past {max_bytes:,} bytes while read, expected {expected}")
    return data


@contextlib.contextmanager
def exit_on_signals() -> Iterator[None]:
    """Turn SIGTERM and SIGHUP into ``SystemExit(128 + signal)`` inside the block, so that
    ``finally`` blocks and :func:`atomic_path` clean up before the process ends (the
    default action would end it at once). Only in the main thread; elsewhere a no-op."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def end(signum, frame):  # noqa: ARG001 - signal handler signature
        raise SystemExit(128 + signum)
    old = {}
    try:
        for sig in _END_SIGNALS:
            old[sig] = signal.signal(sig, end)
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)
