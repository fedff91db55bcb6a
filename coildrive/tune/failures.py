"""How a live tuning can end early: the failure codes and the exception that carries one."""

from __future__ import annotations

FAILURES = ("stuck", "drops_at_design", "no_dropout", "open_coil", "over_current",
            "peak_time", "refused", "link", "interrupted")
"""Failure codes of a live tuning (see :class:`LiveFailure`)."""


class LiveFailure(Exception):
    """The procedure cannot go on; ``code`` is one of :data:`FAILURES`."""

    def __init__(self, code: str, message: str):
        super().__init__(message)
        self.code = code
        self.message = message
