"""JSON-safe numbers for the machine-readable outputs (summary.json, model.json)."""

from __future__ import annotations

import math

__all__ = ["json_float", "json_floats"]


def json_float(x) -> float | None:
    """A JSON-safe float: NaN and infinities become None, -0.0 becomes 0.0; None stays None."""
    if x is None:
        return None
    x = float(x)
    return x + 0.0 if math.isfinite(x) else None


def json_floats(values) -> list:
    """:func:`json_float` of every element."""
    return [json_float(v) for v in values]
