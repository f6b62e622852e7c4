"""Lines above the data: metadata, the header row and a units row under it.

Instrument exports often start with lines such as ``Sample: Si wafer`` or ``Date: ...``
before the header, and some write the units in a second header row::

    Sample: thermal oxide on Si
    Wavelength,n,k
    nm,,
    400,1.47,0

The data start at the first content line whose first character is a digit (after an optional
sign or decimal point). Of the non-numeric lines above it, the last is the header, unless it is
a *units row* (every cell empty, dimensionless such as ``-`` or ``a.u.``, or a unit token,
with at least one axis unit such as ``nm`` or ``(eV)``): then the line above it is the header
and each name gets its unit (``Wavelength`` + ``nm`` -> ``Wavelength (nm)``). Every line above
the header is kept as a provenance note (``metadata (line 1): Sample: ...``); nothing in them
is interpreted. Common practice for instrument exports, no source.
"""

from __future__ import annotations

import re

from . import headers as _h

__all__ = ["first_numeric", "is_units_row", "with_units", "metadata_notes"]

_STARTS_NUMERIC = re.compile(r"^[+-]?\.?\d")
_BRACKETS = re.compile(r"^[\(\[\{]\s*(.*?)\s*[\)\]\}]$")
#: Longest metadata line kept in a note (characters).
MAX_NOTE_CHARS = 120
#: Most metadata lines kept as notes; the rest are counted.
MAX_NOTES = 20


def first_numeric(bodies: list[str]) -> int | None:
    """Index of the first line that starts like a number, or None."""
    for i, b in enumerate(bodies):
        if _STARTS_NUMERIC.match(b.lstrip("\"'")):
            return i
    return None


def _unit_text(cell: str) -> str:
    t = cell.strip().strip("\"'").strip()
    m = _BRACKETS.match(t)
    return m.group(1) if m else t


def is_units_row(cells: list[str]) -> bool:
    """True when ``cells`` read as a row of units with at least one axis unit."""
    if not cells:
        return False
    axis_units = 0
    for c in cells:
        u = _unit_text(c)
        if u == "" or u.lower() in _h.DIMENSIONLESS:
            continue
        if _h.normalize_unit(u) in _h.AXIS_UNIT_TOKENS:
            axis_units += 1
            continue
        if _h.parse_column_name(c).kind != "unknown" or " " in u or len(u) > 8:
            return False  # a name, not a unit
    return axis_units >= 1


def with_units(names: list[str], units: list[str]) -> list[str]:
    """Header names with the units of the row below added in brackets."""
    out = []
    for i, name in enumerate(names):
        u = _unit_text(units[i]) if i < len(units) else ""
        if u == "" or u.lower() in _h.DIMENSIONLESS:
            out.append(name)
        else:
            out.append(f"{name.strip()} ({u})")
    return out


def metadata_notes(lines: list[tuple[int, str]]) -> list[str]:
    """Provenance notes keeping the metadata lines above the header as written."""
    notes = []
    for ln, body in lines[:MAX_NOTES]:
        text = body if len(body) <= MAX_NOTE_CHARS else body[: MAX_NOTE_CHARS - 3] + "..."
        notes.append(f"metadata (line {ln}): {text}")
    if len(lines) > MAX_NOTES:
        notes.append(f"metadata: {len(lines) - MAX_NOTES} more line(s) above the header not kept")
    return notes
