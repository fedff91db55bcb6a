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
