"""The one error base class and the input error that names file and key."""

from __future__ import annotations


class CoildriveError(Exception):
    """Base of every error coildrive reports to a user as one line (exit 2)."""


class InputError(CoildriveError):
    """Bad input: a file, the key in it, what was wrong and what was expected.

    ``str(err)`` is the one line the CLI prints: ``file: key: message``.
    """

    def __init__(self, source: str, key: str, message: str):
        self.source = source
        self.key = key
        self.message = message
        parts = [p for p in (source, key) if p]
        super().__init__(": ".join(parts + [message]))


def unreadable(source: str, err: OSError, expected: str | None = None) -> InputError:
    """The :class:`InputError` for the input file ``source`` that ``err`` kept from being
    read: not found, a folder (said so when ``expected`` names what it should be, e.g.
    ``"a capture file"``), or the system's reason."""
    if isinstance(err, FileNotFoundError):
        return InputError(source, "", "file not found")
    if expected is not None and isinstance(err, IsADirectoryError):
        return InputError(source, "", f"is a folder, expected {expected}")
    return InputError(source, "", f"cannot be read ({err.strerror})")


class OutputError(CoildriveError, OSError):
    """An output file that could not be written (a full disk, a read-only folder): the
    file named and the system's reason, as one line. Also an :class:`OSError`, for code
    that handles those."""

    def __init__(self, path: str, message: str):
        self.path = path
        self.message = message
        Exception.__init__(self, f"{path}: {message}")

    def __str__(self) -> str:
        return f"{self.path}: {self.message}"
