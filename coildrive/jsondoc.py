"""Plain JSON documents (the ``--json`` outputs): the head each starts with, and values
made JSON-ready."""

from __future__ import annotations

import math

import numpy as np


def document_head(drive, version: str, input_hash: str) -> dict:
    """The first keys of every document: the coildrive version that wrote it, the input
    hash of the drive (:meth:`coildrive.config.Drive.input_hash`), the drive's and its
    board's names."""
    return {"coildrive_version": version, "input_hash": input_hash, "drive": drive.name,
            "board": drive.board.name}


def json_ready(value):
    """``value`` with every non-finite float as ``None`` (JSON has no NaN or infinity) and
    numpy scalars as Python ones, through dicts, lists and tuples (tuples become lists)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, np.generic):
        return json_ready(value.item())
    return value
