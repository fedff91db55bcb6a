"""The corners of a design's JSON with the coil at another temperature: a current-mode
hold's switching range covers the coil from cold (the ambient) to settled, so the tests
that write its switching out afresh take each corner at both ends too."""

from __future__ import annotations

#: Copper's temperature coefficient at 20 degC (annealed copper, IEC 60028).
ALPHA = 0.00393


def at_temp(corner: dict, temp: float) -> dict:
    """``corner`` (a design JSON corner) with the coil at ``temp`` degC: its resistance
    scaled by copper's R(T) (IEC 60028)."""
    scale = (1 + ALPHA * (temp - 20.0)) / (1 + ALPHA * (corner["coil_temp_c"] - 20.0))
    return dict(corner, resistance_ohm=corner["resistance_ohm"] * scale, coil_temp_c=temp)


def cold_and_settled(doc: dict) -> list[dict]:
    """Every corner of ``doc`` settled (as the JSON gives it) and switched on cold."""
    return list(doc["corners"]) + [at_temp(c, c["ambient_c"]) for c in doc["corners"]]


def corner_at(doc: dict, which: str) -> dict:
    """The corner and coil temperature of ``doc``'s ``current_mode`` extreme ``which``
    (``"min"`` or ``"max"`` frequency)."""
    cm = doc["current_mode"]
    c = next(x for x in doc["corners"] if x["label"] == cm[f"{which}_frequency_corner"])
    return at_temp(c, cm[f"{which}_frequency_coil_temp_c"])
